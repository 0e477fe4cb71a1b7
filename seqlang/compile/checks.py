"""Checks that need times: overlaps on one drive or port, pulses during imaging.

>>> # check_timeline(program, timeline) -> list of diagnostics (empty when fine)
"""
from __future__ import annotations

import bisect
import math
import operator
from collections import defaultdict

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
    # Sorted once for the checks that walk in time. The timeline is in start order, but
    # rounding can leave events of one start tick out of index order (sorting mostly
    # ordered events is nearly linear).
    ordered = sorted(timeline.events, key=_START_ORDER)
    if all(map(operator.is_, ordered, timeline.events)):
        ordered = timeline.events
    return (_overlaps(timeline.events, ordered) + _pulses_during_imaging(timeline)
            + _rydberg_pulses_in_trap_light(program, timeline) + _one_transition_two_drives(program, ordered))


_START_ORDER = operator.attrgetter("start_s", "index")  # C-level key: cheaper than a lambda per event


def _transition(program: Program, pulse: Event) -> tuple[str, str]:
    """(species, transition) a pulse drives: microwave and Raman the qubit, Rydberg the ladder."""
    kind = program.rig.drives[pulse.drive].kind
    return pulse.species, "rydberg" if kind == "rydberg" else "qubit"


def _one_transition_two_drives(program: Program, ordered: list[Event]) -> list[Diagnostic]:
    """Two drives on one transition of one atom at once: the lab plays both, but the simulator
    follows one drive frame per transition and would add their detunings."""
    out, playing = [], []  # (end, pulse) of the pulses still playing: usually the one before
    for pulse in ordered:
        if pulse.kind != PULSE:
            continue
        start = pulse.start_s
        if playing:
            playing = [(end, p) for end, p in playing if end > start + TOUCH_S]
        for _, other in playing:
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
        playing.append((start + pulse.duration_s, pulse))
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


def _overlaps(events: tuple[Event, ...], ordered: tuple[Event, ...] | list[Event]) -> list[Diagnostic]:
    """Overlaps on each drive and port; `ordered` holds the events sorted by (start, index).

    One walk feeds every lane (each event is read once: at 10⁵ events, reading them is
    what costs). The messages come lane by lane, in the order the lanes first appear in
    the timeline.
    """
    lanes: dict[tuple[str, str], _Lane] = {}
    of_output: dict[tuple, tuple[_Lane, ...]] = {}  # (drive or None, port) -> its lanes: a handful
    if ordered is not events:
        for event in events:  # the lanes' order, before the walk in time adds to them
            _lanes_of(lanes, event)
    for event in ordered:
        key = (event.drive if event.kind == PULSE else None, event.port)
        played_on = of_output.get(key) or of_output.setdefault(key, _lanes_of(lanes, event))
        start = event.start_s
        end = start + event.duration_s  # once per event: the property would be read three times
        for lane in played_on:
            if start < lane.last_end - TOUCH_S:
                lane.overlap(event, start)
            if end > lane.last_end:
                lane.last, lane.last_end = event, end
    found = [d for lane in lanes.values() for d in lane.found]
    return _first_per_statement(found)


def _lanes_of(lanes: dict[tuple[str, str], _Lane], event: Event) -> tuple[_Lane, ...]:
    """The lanes an event plays on (a pulse: its drive, then its port), made when first seen."""
    if event.kind == PULSE:
        drive = lanes.get(("drive", event.drive))
        if drive is None:
            drive = lanes[("drive", event.drive)] = _Lane("drive", event.drive)
    port = lanes.get(("port", event.port))
    if port is None:
        port = lanes[("port", event.port)] = _Lane("port", event.port)
    return (drive, port) if event.kind == PULSE else (port,)


class _Lane:
    """One drive or port walked in start order: each event is checked against the event
    before it that ends last (`last`; the walk in `_overlaps` updates it)."""

    __slots__ = ("what", "name", "last", "last_end", "found")

    def __init__(self, what: str, name: str):
        self.what, self.name = what, name
        self.last, self.last_end = None, -math.inf
        self.found: list[Diagnostic] = []

    def overlap(self, event: Event, start: float) -> None:
        """An event starting before `last` ends: an error unless it is `last` or never plays with it."""
        last = self.last
        if event.index != last.index and not exclusive(event, last):
            self.found.append(error(
                f"this overlaps the {last.kind} from line {last.span.line} on {self.what} `{self.name}` "
                f"(by {units.format_quantity(self.last_end - start, units.DURATION)})", event.span,
                "put them one after the other, or use different drives"))


def _pulses_during_imaging(timeline: Timeline) -> list[Diagnostic]:
    """Pulses on a species while it is imaged, each reported with the first such imaging."""
    images: dict[str, list[Event]] = defaultdict(list)
    for event in timeline.events:
        if event.kind == IMAGE:
            images[event.species].append(event)
    if not images:
        return []
    found = {species: _ImagingTimes(of_species) for species, of_species in images.items()}
    out = []
    for pulse in timeline.pulses():
        times = found.get(pulse.species)
        image = times.first_during(pulse) if times is not None else None
        if image is not None:
            out.append(error(f"pulse on `{pulse.species}` while `{pulse.species}` is being imaged "
                             f"(imaging from line {image.span.line})", pulse.span,
                             "imaging destroys the qubit state: pulse before or after it"))
    return _first_per_statement(out)


class _ImagingTimes:
    """The imagings of one species (in start order) searchable by time: two binary searches
    per pulse instead of a scan of every imaging."""

    def __init__(self, images: list[Event]):
        self.images = images
        self.starts = [image.start_s for image in images]
        # Running maximum of the ends: the first imaging whose running maximum passes a time
        # is the first imaging that ends after it.
        self.latest_ends, latest = [], -math.inf
        for image in images:
            latest = max(latest, image.end_s - TOUCH_S)
            self.latest_ends.append(latest)

    def first_during(self, pulse: Event) -> Event | None:
        """The first imaging (in start order) that overlaps the pulse by more than TOUCH_S."""
        first_ending_after = bisect.bisect_right(self.latest_ends, pulse.start_s)
        starting_before = bisect.bisect_left(self.starts, pulse.end_s - TOUCH_S)
        return self.images[first_ending_after] if first_ending_after < starting_before else None


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
