"""Decision points of the timeline: events played per key of an image record.

A conditioned event (``Event.decision``) sits at a fixed place of the fixed
timeline; what changes with the key is whether it plays and, for pulses with
record-dependent values, its amplitude, detuning and phase. This module holds
the timing check of decisions (the record must be ready before the event is
issued), the per-key tick and amplitude rounding, and the queries the branch
table and the simulator share.

>>> # check_decisions(program, timeline) -> [] when every record is ready in time
"""
from __future__ import annotations

import bisect
import math
from collections import defaultdict

from ..lang import units
from ..lang.diagnostics import Diagnostic, error
from ..program.model import Decision, Drive, Program, Variant
from . import envelopes
from .timeline import IMAGE, PULSE, Event, Timeline, evolve

TOUCH_S = 1e-15


def exclusive(a: Event, b: Event) -> bool:
    """True when two events never play in the same shot (opposite keys of one selection)."""
    if a.decision is None or b.decision is None or a.decision.selection != b.decision.selection:
        return False
    return not any(x and y for x, y in zip(a.decision.enabled, b.decision.enabled))


class RecordWriters:
    """The imagings of each record, found by time: for many conditioned events, one pass
    over the timeline instead of one per event."""

    def __init__(self, timeline: Timeline):
        self._images: dict[str, list[Event]] = defaultdict(list)
        for event in timeline.events:  # in start order
            if event.kind == IMAGE:
                self._images[event.record].append(event)
        self._starts = {record: [e.start_s for e in images] for record, images in self._images.items()}

    def of(self, event: Event) -> Event | None:
        """The last imaging of the event's record that starts by the event (else the last one)."""
        record = event.decision.selection.record
        images = self._images.get(record)
        if not images:
            return None
        before = bisect.bisect_right(self._starts[record], event.start_s + TOUCH_S)
        return images[before - 1] if before else images[-1]


def issue_time(program: Program, event: Event) -> float:
    """When the sequencer must issue the event: its start minus the output's latency (and gate lead)."""
    if event.kind == PULSE:
        drive = program.rig.drives[event.drive]
        gate = drive.gate_lead_s + _port_latency(program, drive.gate) if drive.gate else 0.0
        return event.start_s - max(drive.latency_s, gate)
    return event.start_s - _port_latency(program, event.port)


def _port_latency(program: Program, channel: str | None) -> float:
    for port in program.rig.ports.values():
        if port.channel == channel:
            return port.latency_s
    return 0.0


def ready_time(program: Program, image: Event) -> float:
    """When the record of an imaging is known to the sequencer: its end plus the decision latency."""
    return image.end_s + program.rig.imaging[image.species].decision_latency_s


def check_decisions(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Every conditioned event issued before its record is ready, once per statement."""
    conditioned = timeline.conditioned()
    if not conditioned:
        return []
    out, seen, writers = [], set(), RecordWriters(timeline)
    for event in conditioned:
        image = writers.of(event)
        if image is None or event.span in seen:
            continue
        early = ready_time(program, image) - issue_time(program, event)
        if early > TOUCH_S:
            seen.add(event.span)
            latency = program.rig.imaging[image.species].decision_latency_s
            out.append(error(
                f"this depends on record `{image.record}` (imaging on line {image.span.line}), which is ready "
                f"{units.format_quantity(latency, units.DURATION)} after the imaging ends; the {event.kind} is "
                f"issued {units.format_quantity(early, units.DURATION)} too early", event.span,
                "wait longer after the imaging (the rig's `decision_latency` includes camera read-out and "
                "processing)"))
    return out


# ---- tick and amplitude rounding per key --------------------------------------------
def largest_area(event: Event) -> float:
    """The largest area any key asks of a pulse (what the duration must allow)."""
    if event.decision is None or not event.decision.variants:
        return event.area_rad  # most pulses: no list to build
    return max([event.area_rad] + [v.area_rad for v in event.decision.variants])


def quantize_variants(drive: Drive, event: Event, rounded) -> Event:
    """Each key's Rabi frequency rescaled to keep its area over the played duration, then
    rounded to the drive's amplitude steps (`rounded` does the rounding)."""
    decision = event.decision
    if decision is None or decision.variants is None:
        return event
    factor = 2 * math.pi * envelopes.area_factor(event.shape, event.duration_s)
    variants = tuple(Variant(rounded(v.area_rad / factor, drive), v.detuning_hz, v.phase_rad,
                             rounded(v.area_rad / factor, drive) * factor) for v in decision.variants)
    return evolve(event, decision=Decision(decision.selection, decision.enabled, variants, decision.span))


def variant_of(event: Event, key: int) -> Variant | None:
    """What a conditioned event plays for `key`: its parameters, or None when it does not play."""
    decision = event.decision
    if decision is not None and not decision.enabled[key]:
        return None
    if decision is not None and decision.variants is not None:
        return decision.variants[key]
    return Variant(event.rabi_hz, event.detuning_hz, event.phase_rad, event.area_rad)
