"""The timing checks against plain scans, on seeded random timelines.

The checks walk the timeline once (every lane in one pass, imagings found by binary
search); the references here are the definitions written out: each event of a lane
against the one before it that ends last, and each pulse against every imaging.
"""
from __future__ import annotations

import random

import pytest

from seqlang.compile import checks
from seqlang.compile.checks import TOUCH_S
from seqlang.compile.timeline import IMAGE, PULSE, SWITCH, Event, Timeline
from seqlang.lang.diagnostics import Span

DRIVES = {"mw_a": ("awg0.1", "a"), "mw_b": ("awg0.2", "b"), "ryd_a": ("awg0.1", "a")}  # two share a port


def _random_timeline(seed: int, ties_out_of_index_order: bool) -> Timeline:
    """Pulses, imagings and switches on a 1 µs grid, so that many touch, overlap or start together."""
    rng = random.Random(seed)
    events = []
    for index in range(80):
        start, duration = rng.randrange(40) * 1e-6, rng.randrange(1, 6) * 1e-6
        span = Span("t.seq", index + 1, 3, index + 1, 9)
        kind = rng.choice((PULSE, PULSE, PULSE, IMAGE, SWITCH))
        if kind == PULSE:
            drive = rng.choice(sorted(DRIVES))
            port, species = DRIVES[drive]
            events.append(Event(index, PULSE, start, duration, port, span, drive, species=species))
        elif kind == IMAGE:
            species = rng.choice("ab")
            events.append(Event(index, IMAGE, start, duration, f"cam.{species}", span, species=species))
        else:
            events.append(Event(index, SWITCH, start, duration, rng.choice(("awg0.1", "ttl.3")), span))
    events.sort(key=lambda e: (e.start_s, e.index))
    if ties_out_of_index_order:  # as tick rounding can leave them: still in start order
        events.sort(key=lambda e: (e.start_s, -e.index))
    return Timeline(tuple(events), max(e.end_s for e in events), 2e-9)


def _overlaps_by_lane(timeline: Timeline) -> list[tuple[Span, str]]:
    lanes: dict[tuple[str, str], list[Event]] = {}
    for event in timeline.events:
        if event.kind == PULSE:
            lanes.setdefault(("drive", event.drive), []).append(event)
        lanes.setdefault(("port", event.port), []).append(event)
    found, seen = [], set()
    for (what, name), lane in lanes.items():
        last = None
        for event in sorted(lane, key=lambda e: (e.start_s, e.index)):
            if last is not None and event.start_s < last.end_s - TOUCH_S and event.span not in seen:
                seen.add(event.span)
                found.append((event.span, f"this overlaps the {last.kind} from line {last.span.line} "
                                          f"on {what} `{name}`"))
            if last is None or event.end_s > last.end_s:
                last = event
    return found


def _pulses_while_imaged(timeline: Timeline) -> list[tuple[Span, str]]:
    images = [e for e in timeline.events if e.kind == IMAGE]
    found = []
    for pulse in timeline.pulses():
        for image in images:
            if image.species == pulse.species and pulse.start_s < image.end_s - TOUCH_S \
                    and image.start_s < pulse.end_s - TOUCH_S:
                found.append((pulse.span, f"pulse on `{pulse.species}` while `{pulse.species}` is being "
                                          f"imaged (imaging from line {image.span.line})"))
                break
    return found


@pytest.mark.parametrize("ties_out_of_index_order", [False, True], ids=["sorted", "ties-reversed"])
@pytest.mark.parametrize("seed", range(12))
def test_overlaps_are_those_of_a_scan_of_each_lane(seed, ties_out_of_index_order):
    timeline = _random_timeline(seed, ties_out_of_index_order)
    ordered = sorted(timeline.events, key=lambda e: (e.start_s, e.index)) if ties_out_of_index_order \
        else timeline.events  # check_timeline passes the timeline itself when it is in that order
    found = [(d.span, d.message.split(" (by ")[0]) for d in checks._overlaps(timeline.events, ordered)]
    assert found == _overlaps_by_lane(timeline)
    assert found  # the random timelines do overlap


@pytest.mark.parametrize("seed", range(12))
def test_pulses_during_imaging_are_those_of_a_scan_of_every_imaging(seed):
    timeline = _random_timeline(seed, False)
    found = [(d.span, d.message) for d in checks._pulses_during_imaging(timeline)]
    assert found == _pulses_while_imaged(timeline)
    assert found
