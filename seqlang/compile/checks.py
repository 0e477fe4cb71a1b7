"""Checks that need times: overlaps on one drive or port, pulses during imaging.

>>> # check_timeline(program, timeline) -> list of diagnostics (empty when fine)
"""
from __future__ import annotations

from collections import defaultdict

from ..lang import units
from ..lang.diagnostics import Diagnostic, error
from ..program.model import Program
from .decisions import exclusive
from .timeline import IMAGE, PULSE, Event, Timeline

# Events closer than this are touching, not overlapping (float rounding of sums).
TOUCH_S = 1e-15


def check_timeline(program: Program, timeline: Timeline) -> list[Diagnostic]:
    """Every timing conflict of the timeline, in source order."""
    return _overlaps(timeline) + _pulses_during_imaging(timeline)


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
