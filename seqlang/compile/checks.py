"""Checks that need times: overlaps on one drive or port, pulses during imaging.

>>> # check_timeline(program, timeline) -> list of diagnostics (empty when fine)
"""
from __future__ import annotations

from collections import defaultdict

import math

from ..lang import units
from ..lang.diagnostics import Diagnostic, error, warning
from ..program.model import Program
from .decisions import exclusive
from . import envelopes
from .timeline import IMAGE, PULSE, SWITCH, Event, Timeline

# Events closer than this are touching, not overlapping (float rounding of sums).
TOUCH_S = 1e-15


def check_timeline(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Every timing conflict of the timeline, in source order."""
    return (_overlaps(timeline) + _pulses_during_imaging(timeline)
            + _rydberg_pulses_in_trap_light(program, timeline) + _one_transition_two_drives(program, timeline))


def _transition(program: Program, pulse: Event) -> tuple[str, str]:
    """(species, transition) a pulse drives: microwave and Raman the qubit, Rydberg the ladder."""
    kind = program.rig.drives[pulse.drive].kind
    return pulse.species, "rydberg" if kind == "rydberg" else "qubit"


def _one_transition_two_drives(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Two drives on one transition of one atom at once: the lab plays both, but the simulator
    follows one drive frame per transition and would add their detunings."""
    out, playing = [], []
    for pulse in sorted(timeline.pulses(), key=lambda e: (e.start_s, e.index)):
        playing = [p for p in playing if p.end_s > pulse.start_s + TOUCH_S]
        for other in playing:
            if other.drive == pulse.drive or _transition(program, other) != _transition(program, pulse) \
                    or exclusive(pulse, other):
                continue
            shared = set(pulse.targets or program.sites_of(pulse.species)) & \
                set(other.targets or program.sites_of(other.species))
            if shared:
                out.append(warning(
                    f"`{pulse.drive}` and `{other.drive}` (line {other.span.line}) drive the same transition of "
                    f"`{sorted(shared)[0]}` at once; the simulator follows one drive per transition at a time, so "
                    "its numbers for this stretch are not to be trusted (the tables are)", pulse.span,
                    "play them one after the other"))
                break
        playing.append(pulse)
    return _first_per_statement(out)


def _rydberg_pulses_in_trap_light(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Rydberg pulses that play while the traps are on, where the rig says the trap light shifts
    the Rydberg level. The traps are on at the start (atoms are loaded in them) until a
    `switch` on a port declared `role traps` turns them off."""
    trap_ports = {q.name for q in program.rig.ports.values() if q.role == "traps"}
    trap_ports |= {q.channel for q in program.rig.ports.values() if q.role == "traps"}
    if not trap_ports:
        return []
    out, on = [], True
    for event in sorted(timeline.events, key=lambda e: (e.start_s, e.kind != SWITCH, e.index)):
        if event.kind == SWITCH and event.port in trap_ports:
            on = event.value > 0.5
        elif event.kind == PULSE and on and program.rig.drives[event.drive].kind == "rydberg":
            shift = program.rig.species[event.species].extra.get("trap_rydberg_shift", 0.0)
            if shift:
                out.append(warning(
                    f"Rydberg pulse on `{event.drive}` plays with the traps on: the trap light shifts the "
                    f"Rydberg level of `{event.species}` by {units.format_quantity(shift, units.FREQUENCY)}",
                    event.span, "switch the trap port off around the pulse"))
    return out


def _lane_key(event: Event) -> tuple[str, str]:
    return ("drive", event.drive) if event.kind == PULSE else ("port", event.port)


def _overlaps(timeline: Timeline) -> list[Diagnostic]:
    lanes: dict[tuple[str, str], list[Event]] = defaultdict(list)
    for event in timeline.events:
        lanes[_lane_key(event)].append(event)
        if event.kind == PULSE:
            lanes[("port", event.port)].append(event)
    found: list[Diagnostic] = []
    for (what, name), events in lanes.items():
        found += _overlaps_in_lane(what, name, events)
    return _first_per_statement(found)


def _overlaps_in_lane(what: str, name: str, events: list[Event]) -> list[Diagnostic]:
    events = sorted(events, key=lambda e: (e.start_s, e.index))
    out, last = [], None
    for event in events:
        if last is not None and event.start_s < last.end_s - TOUCH_S and event.index != last.index \
                and not exclusive(event, last):
            out.append(error(
                f"this overlaps the {last.kind} from line {last.span.line} on {what} `{name}` "
                f"(by {units.format_quantity(last.end_s - event.start_s, units.DURATION)})", event.span,
                "put them one after the other, or use different drives"))
        if last is None or event.end_s > last.end_s:
            last = event
    return out


def _pulses_during_imaging(timeline: Timeline) -> list[Diagnostic]:
    images = [e for e in timeline.events if e.kind == IMAGE]
    if not images:
        return []
    out = []
    for pulse in timeline.pulses():
        for image in images:
            if image.species == pulse.species and pulse.start_s < image.end_s - TOUCH_S \
                    and image.start_s < pulse.end_s - TOUCH_S:
                out.append(error(f"pulse on `{pulse.species}` while `{pulse.species}` is being imaged "
                                 f"(imaging from line {image.span.line})", pulse.span,
                                 "imaging destroys the qubit state: pulse before or after it"))
                break
    return _first_per_statement(out)


def _first_per_statement(diags: list[Diagnostic]) -> list[Diagnostic]:
    """A statement inside a repeat would report once per iteration; keep one."""
    seen, out = set(), []
    for d in diags:
        key = d.span
        if key not in seen:
            seen.add(key)
            out.append(d)
    return out


# ---- sampled waveforms (after quantization) ------------------------------------
MAX_SAMPLES_PER_WAVEFORM = 10_000_000  # 240 MB as time, Rabi frequency and phase (float64)
MAX_SAMPLES_TOTAL = 20_000_000  # over every shaped pulse of one compile
SAMPLED_AREA_RTOL = 1e-3  # the played samples must hold the area to 0.1 %


def check_waveforms(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Shaped pulses whose samples would be too many, or would not reproduce the area.

    Counted before anything is allocated; the area of the samples is integrated in chunks.
    """
    out, total = [], 0
    for pulse in timeline.pulses():
        if pulse.shape.kind == "square":
            continue
        rate = program.rig.drives[pulse.drive].sample_rate_hz
        count = envelopes.sample_count(pulse.duration_s, rate)
        total += count
        problem = _too_many_samples(pulse, count, total, rate) or _sampled_area_off(pulse, rate, count)
        if problem is not None:
            out.append(problem)
            if total > MAX_SAMPLES_TOTAL:
                break
    return _first_per_statement(out)


def _too_many_samples(pulse: Event, count: int, total: int, rate: float) -> Diagnostic | None:
    where = f"{units.format_quantity(pulse.duration_s, units.DURATION)} {pulse.shape.kind} pulse"
    if count > MAX_SAMPLES_PER_WAVEFORM:
        return error(f"this {where} needs {count:,} samples at {units.format_quantity(rate, units.FREQUENCY)}; "
                     f"the limit is {MAX_SAMPLES_PER_WAVEFORM:,} per waveform", pulse.span,
                     "shorten the pulse, use a square one, or lower the drive's `sample_rate`")
    if total > MAX_SAMPLES_TOTAL:
        return error(f"with this pulse the waveforms hold {total:,} samples; the limit is "
                     f"{MAX_SAMPLES_TOTAL:,} for one compile", pulse.span,
                     "use fewer or shorter shaped pulses, or lower the drive's `sample_rate`")
    return None


def _sampled_area_off(pulse: Event, rate: float, count: int) -> Diagnostic | None:
    played = 2 * math.pi * pulse.rabi_hz * envelopes.sampled_area_factor(pulse.shape, pulse.duration_s, rate)
    if abs(played - pulse.area_rad) <= SAMPLED_AREA_RTOL * abs(pulse.area_rad):
        return None
    return error(f"the sampled {pulse.shape.kind} envelope does not reproduce the pulse area: "
                 f"{count:,} samples at {units.format_quantity(rate, units.FREQUENCY)} give "
                 f"{played / math.pi:.6g}π, the pulse needs {pulse.area_rad / math.pi:.6g}π", pulse.span,
                 "widen the envelope or raise the drive's `sample_rate`")
