"""Tick quantization that keeps each pulse's area.

Start and end of every event are rounded to the tick (so neighbours stay
neighbours); a pulse whose duration changed gets its Rabi frequency rescaled
to keep its area, then rounded to the drive's amplitude resolution. Its
detuning is scaled by the same factor, so that a detuned pulse keeps its
rotation (Δ·T as well as Ω·T); the detuning must then stay inside the
drive's range. What is left of the area error, and each detuning change,
are reported per pulse.
"""
from __future__ import annotations

import bisect
import math
from dataclasses import dataclass

from ..lang import units
from ..lang.diagnostics import Diagnostic, error
from ..program.model import Drive, Program
from . import envelopes
from .decisions import largest_area, quantize_variants
from .lower import MAX_TICKS  # exact integer tick arithmetic up to 2**53
from .timeline import PULSE, Event, Timeline, copier


@dataclass(frozen=True)
class QuantizeReport:
    """What rounding did: residual area errors and timing shifts."""

    area_errors_rad: tuple[tuple[int, float], ...]  # (event index, played − wanted)
    max_area_error_rad: float
    max_timing_error_s: float  # rounding to the tick grid alone (at most half a tick)
    stretched: int  # pulses lengthened by a tick to stay under the drive's maximum
    max_stretch_shift_s: float = 0.0  # how far those stretches moved later events
    detuning_changes_hz: tuple[tuple[int, float], ...] = ()  # (event index, played − written), nonzero only
    max_detuning_change_hz: float = 0.0


# The copies quantize makes, kept as functions: one per event of the timeline.
_placed = copier(Event, "start_s", "duration_s")
_played = copier(Event, "start_s", "duration_s", "rabi_hz", "area_rad", "detuning_hz")


def quantize(program: Program, timeline: Timeline) -> tuple[Timeline, QuantizeReport, list[Diagnostic]]:
    """The timeline the hardware will play, with a report and any errors."""
    tick, limit = program.rig.tick_s, 2 ** program.rig.counter_bits - 1
    too_long = _beyond_tick_range(timeline, tick)
    if too_long:
        return Timeline((), 0.0, tick, quantized=True), QuantizeReport((), 0.0, 0.0, 0), too_long
    drives = program.rig.drives
    rounded, stretch_ends = _rounded(drives, timeline.events, tick)
    # The end of the sequence is rounded like every event end, so a last pulse ending on it ends the total.
    total = (round(timeline.duration_s / tick) + len(stretch_ends)) * tick
    events, errors, detunings, diags, worst_time, rescaled = [], [], [], [], 0.0, {}
    for event, (start, end, grow) in zip(timeline.events, rounded):
        # Rounding and the deliberate stretch shifts are reported apart: they have different causes.
        moved = max(abs(start * tick - event.start_s), abs(end * tick - (event.start_s + event.duration_s)))
        if moved > worst_time:
            worst_time = moved
        if stretch_ends:  # usually none: no search per event then
            start = start + bisect.bisect_right(stretch_ends, start)
            end = end + bisect.bisect_left(stretch_ends, end) + grow
        if (end == start and event.duration_s > 0) or end - start > limit:
            diags.append(_unrepresentable(event, end - start, limit, tick))
            continue
        if event.kind == PULSE:
            drive = drives[event.drive]
            played, error_rad = _pulse(drive, event, start, end, tick, rescaled)
            errors.append((event.index, error_rad))
            if played.detuning_hz != event.detuning_hz:
                detunings.append((event.index, played.detuning_hz - event.detuning_hz))
                diags += _detuning_in_range(drive, event, played)
            event = played
        elif start * tick != event.start_s or (end - start) * tick != event.duration_s:
            event = _placed(event, start * tick, (end - start) * tick)
        events.append(event)
        if event.start_s + event.duration_s > total:
            total = event.start_s + event.duration_s
    report = QuantizeReport(tuple(errors), max((abs(e) for _, e in errors), default=0.0), worst_time,
                            len(stretch_ends), len(stretch_ends) * tick, tuple(detunings),
                            max((abs(d) for _, d in detunings), default=0.0))
    return Timeline(tuple(events), total, tick, quantized=True), report, diags


def _rounded(drives: dict[str, Drive], events: tuple[Event, ...], tick: float) -> tuple[list, list[int]]:
    """Per event (start tick, end tick, whether the pulse must grow by a tick), and the sorted
    end ticks of the pulses that grow.

    A pulse lengthened by one tick pushes everything that starts at or after its end one
    tick later, so that it never runs into the next pulse on its drive.
    """
    rounded, stretch_ends = [], []
    for event in events:
        start, end = round(event.start_s / tick), round((event.start_s + event.duration_s) / tick)
        grow = event.kind == PULSE and _needs_stretch(drives[event.drive], event, start, end, tick)
        if grow:
            stretch_ends.append(end)
        rounded.append((start, end, grow))
    stretch_ends.sort()
    return rounded, stretch_ends


def _beyond_tick_range(timeline: Timeline, tick: float) -> list[Diagnostic]:
    """Events that end beyond 2**53 ticks, where tick numbers stop being exact integers."""
    for event in timeline.events:
        if not (event.start_s + event.duration_s) / tick < MAX_TICKS:
            return [error(f"this {event.kind} ends at {units.format_quantity(event.end_s, units.DURATION)}, "
                          f"beyond 2^53 ticks ({units.format_quantity(MAX_TICKS * tick, units.DURATION)}), "
                          "where tick arithmetic stops being exact", event.span)]
    return []


def _unrepresentable(event: Event, ticks: int, limit: int, tick: float) -> Diagnostic:
    """Why an event cannot be played: shorter than a tick, or longer than the duration counter."""
    if event.duration_s > 0 and ticks == 0:
        return error(f"a {units.format_quantity(event.duration_s, units.DURATION)} {event.kind} is "
                     f"shorter than one tick ({units.format_quantity(tick, units.DURATION)}); "
                     "the sequencer cannot represent it", event.span)
    return error(f"{ticks:,} ticks do not fit the sequencer's duration counter (at most {limit:,})",
                 event.span, "split it into shorter pieces")


def _needs_stretch(drive: Drive, event: Event, start: int, end: int, tick: float) -> bool:
    """True when keeping the area of a pulse over its rounded duration needs more than the drive's maximum."""
    if end <= start:
        return False
    area = event.area_rad if event.decision is None else largest_area(event)  # most pulses: no call
    return _rabi_for_area(area, event.shape, (end - start) * tick) > drive.max_rabi_hz * (1 + 1e-12)


def _pulse(drive: Drive, event: Event, start: int, end: int, tick: float, rescaled: dict) -> tuple[Event, float]:
    """Rescale amplitude and detuning so that the pulse keeps its rotation over its played ticks.

    `rescaled` remembers the played numbers per drive, shape, area and length in ticks: a
    statement repeated, or written again, shares them (one float each, not one per pulse).
    """
    key = (drive.name, event.shape, event.area_rad, end - start)
    numbers = rescaled.get(key) if event.area_rad else None  # a zero area keeps its sign: not shared
    if numbers is None:
        numbers = _rescaled(drive, event, (end - start) * tick)
        if event.area_rad:
            rescaled[key] = numbers
    duration, wanted, played, area, error_rad = numbers
    # Ω·T and Δ·T both set a detuned pulse's rotation: Δ follows Ω's scale factor (not its DAC rounding).
    # A zero detuning stays the same zero (no new float per pulse).
    detuning = event.detuning_hz * (wanted / event.rabi_hz) if event.rabi_hz > 0 and event.detuning_hz \
        else event.detuning_hz
    quantized = _played(event, start * tick, duration, played, area, detuning)
    if event.decision is not None:
        quantized = quantize_variants(drive, quantized, _amplitude_rounded)
    return quantized, error_rad


def _rescaled(drive: Drive, event: Event, duration: float) -> tuple[float, ...]:
    """(duration, Rabi frequency for the area, the one the DAC plays, the area it plays, and
    that area's error)."""
    factor = envelopes.area_factor(event.shape, duration)
    wanted = event.area_rad / (2 * math.pi * factor)  # _rabi_for_area, with the factor at hand
    played = _amplitude_rounded(wanted, drive)
    area = 2 * math.pi * played * factor  # envelopes.pulse_area, likewise
    return duration, wanted, played, area, area - event.area_rad


def _detuning_in_range(drive: Drive, written: Event, played: Event) -> list[Diagnostic]:
    low, high = drive.detuning_range_hz
    if low <= played.detuning_hz <= high:
        return []
    f = lambda hz: units.format_quantity(hz, units.FREQUENCY)  # noqa: E731
    return [error(f"after tick rounding the detuning {f(written.detuning_hz)} scales to "
                  f"{f(played.detuning_hz)}, outside the range {f(low)} .. {f(high)} of drive `{drive.name}`",
                  written.span, "move the detuning away from the edge of the range, or choose a duration "
                  "of whole ticks")]


def _rabi_for_area(area_rad: float, shape, duration: float) -> float:
    return area_rad / (2 * math.pi * envelopes.area_factor(shape, duration))


def _amplitude_rounded(rabi: float, drive: Drive) -> float:
    """The Rabi frequency the drive's DAC can actually set (amplitude_bits steps up to the maximum)."""
    steps = 2 ** drive.amplitude_bits - 1
    code = min(steps, round(rabi / drive.max_rabi_hz * steps))
    return code / steps * drive.max_rabi_hz
