"""The hardware plan: per sequencer output, events in integer ticks.

Each output's events are issued early by its latency so that they happen at
their physical time; when that reaches before tick 0 the whole sequence shifts
later and the shift is reported. Rydberg and Raman pulses with a TTL gate get
the gate opened ``gate_lead`` before and closed ``gate_lag`` after the pulse;
overlapping gate windows on one line merge (the gate stays open).

The sequencer counts the time from one row to the next with its duration
counter (``counter_bits``). Where two rows are further apart than the counter
holds (a long wait), ``hold`` rows on the pseudo-output ``sequencer`` split
the gap into counter-sized pieces; the compile report says how many.

Latencies are compensated in whole ticks (rounded half to even), so each output
keeps a remainder: its events happen ``latency − ticks·tick`` after the written
time. The plan reports that remainder per output and warns above a quarter of a
tick (``LATENCY_REMAINDER_WARN``).
"""
from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field
from operator import attrgetter

from ..lang.diagnostics import Diagnostic, SeqlangError, Span, error, warning
from ..lang.records import direct_init
from ..program.model import Program
from .quantize import QuantizeReport
from . import motion
from .timeline import FIELD, IMAGE, MOVE, PULSE, SET, Event, Timeline, copier, evolve

GATE = "gate"
HOLD, SEQUENCER = "hold", "sequencer"
# Rounding keeps every remainder within half a tick, but two outputs' remainders can
# add up. With each at most a quarter tick, the offset between any two outputs stays
# within half a tick: no worse than rounding one event start to the grid.
LATENCY_REMAINDER_WARN = 0.25  # of a tick


@direct_init
@dataclass(frozen=True, slots=True)
class PortEvent:
    """One entry of an output's table: issue tick, length in ticks, what to play."""

    port: str
    tick: int
    ticks: int
    kind: str
    event: int  # index of the timeline event, -1 for gate windows
    source: str  # "file:line"
    drive: str = ""
    rabi_hz: float = 0.0
    amplitude: float = 0.0  # fraction of the drive's maximum, as the DAC code sets it
    detuning_hz: float = 0.0
    phase_rad: float = 0.0
    shape: str = ""
    targets: tuple[str, ...] = ()
    value: float = 0.0
    ramp: tuple = ()  # deflector ramps: (start Hz, end Hz, profile)


@dataclass(frozen=True)
class HardwarePlan:
    """Everything the sequencer plays, and what compiling had to do to get there."""

    tick_s: float
    shift_ticks: int
    ports: dict[str, tuple[PortEvent, ...]]
    timeline: Timeline  # quantized and shifted: the physical times the atoms see
    report: QuantizeReport
    latency_ticks: dict[str, int]
    holds: int = 0  # hold rows inserted where a gap is longer than the duration counter
    # Per output: declared latency minus the compensated whole ticks, in seconds; the
    # output's events happen this much after their written time (negative: before).
    latency_remainder_s: dict[str, float] = field(default_factory=dict)

    @property
    def shift_s(self) -> float:
        return self.shift_ticks * self.tick_s

    def rows(self) -> list[PortEvent]:
        """All port events in issue order (tick, then port, then kind)."""
        every = [e for events in self.ports.values() for e in events]
        return sorted(every, key=_ISSUE_ORDER)


# Sort keys of the tables, as C-level getters (cheaper than a lambda per entry).
_ISSUE_ORDER = attrgetter("tick", "port", "kind", "event")
_PORT_ORDER = attrgetter("tick", "kind", "event")


def plan(program: Program, timeline: Timeline, report: QuantizeReport) -> HardwarePlan:
    """Build the per-port tables from a quantized timeline."""
    tick = program.rig.tick_s
    latencies = _latencies(program)
    shift = _shift_needed(program, timeline, tick, latencies)
    merged = _merge_gates(_entries(program, timeline, tick, latencies, shift))
    holds = _holds(merged, 2 ** program.rig.counter_bits - 1, program, timeline)
    ports: dict[str, list[PortEvent]] = defaultdict(list)
    for entries in (merged, holds):
        for entry in entries:
            ports[entry.port].append(entry)
    ordered = {p: tuple(sorted(es, key=_PORT_ORDER)) for p, es in sorted(ports.items())}
    shifted = _shift_timeline(timeline, shift * tick)
    return HardwarePlan(tick, shift, ordered, shifted, report, latencies, len(holds),
                        latency_remainder_s=latency_remainders(program))


def _entries(program: Program, timeline: Timeline, tick: float, latencies: dict[str, int],
             shift: int) -> list[PortEvent]:
    """The entries of every event in timeline order (gate windows not merged yet)."""
    out: list[PortEvent] = []
    source, paths = _SourceLines(), None
    for event in timeline.events:
        if event.kind == MOVE:
            paths = paths or motion.SitePaths(program, timeline)  # made at the first move
            out += _ramps(program, paths, event, tick, latencies, shift, source)
        elif event.kind == FIELD:
            out += _field_sets(program, event, tick, latencies, shift, source)
        else:
            _port_events(program, event, tick, latencies, shift, source, out)
    return out


def _ticks(seconds: float, tick: float) -> int:
    return round(seconds / tick)


def _declared_latencies(program: Program) -> dict[str, tuple[float, Span | None]]:
    """Declared latency (s) of every output the rig names, and the declaration it comes from."""
    rig = program.rig
    out: dict[str, tuple[float, Span | None]] = {}
    for port in rig.ports.values():
        out[port.channel] = (port.latency_s, port.span)
    for drive in rig.drives.values():
        out[drive.port] = (drive.latency_s, drive.span)
        if drive.gate is not None:
            out.setdefault(drive.gate, (0.0, None))
    for imaging in rig.imaging.values():
        out[imaging.port] = (imaging.latency_s, imaging.span)
    return out


def _latencies(program: Program) -> dict[str, int]:
    """Latency in ticks of every output the rig names."""
    tick = program.rig.tick_s
    return {port: _ticks(seconds, tick) for port, (seconds, _) in _declared_latencies(program).items()}


def latency_remainders(program: Program) -> dict[str, float]:
    """Per output, the part of its latency that whole ticks do not compensate (s).

    >>> # latency 1 ns at a 2 ns tick: 0 ticks compensated, remainder 1 ns  # doctest: +SKIP
    """
    tick = program.rig.tick_s
    out = {}
    for port, (seconds, _) in sorted(_declared_latencies(program).items()):
        remainder = seconds - _ticks(seconds, tick) * tick
        out[port] = 0.0 if abs(remainder) < 1e-9 * tick else remainder  # float dust of exact multiples
    return out


def latency_warnings(program: Program) -> list[Diagnostic]:
    """A warning for each output whose uncompensated latency exceeds LATENCY_REMAINDER_WARN of a tick."""
    tick = program.rig.tick_s
    declared = _declared_latencies(program)
    out = []
    for port, remainder in latency_remainders(program).items():
        span = declared[port][1]
        if span is None or abs(remainder) <= LATENCY_REMAINDER_WARN * tick:
            continue
        late = "late" if remainder > 0 else "early"
        out.append(warning(
            f"latency of output {port} ({declared[port][0] * 1e9:g} ns) is not a whole number of "
            f"{tick * 1e9:g} ns ticks: its events happen {abs(remainder) * 1e9:.3g} ns {late} "
            f"({abs(remainder) / tick:.2f} of a tick; warned above {LATENCY_REMAINDER_WARN:g})",
            span, "declare the latency as a multiple of the tick, or trim the delay in the hardware"))
    return out


class _SourceLines(dict):
    """The "file:line" of each span, made once: a statement inside a repeat has one span
    for all its events, so its entries share one string (time and memory)."""

    def __missing__(self, span: Span) -> str:
        self[span] = where = f"{span.file}:{span.line}"
        return where


def _issue_lead(program: Program, event: Event, tick: float, latency: dict[str, int]) -> int:
    """How many ticks before its start an event is issued."""
    if event.kind == PULSE:
        drive = program.rig.drives[event.drive]
        gate = _ticks(drive.gate_lead_s, tick) + latency[drive.gate] if drive.gate else 0
        return max(latency[drive.port], gate)
    if event.kind == MOVE:  # issued on the deflectors, each early by its own latency
        deflectors = [p.channel for p in program.rig.ports.values() if p.kind == "deflector"]
        return max((latency.get(c, 0) for c in deflectors), default=0)
    return latency.get(event.port, 0)


def _shift_needed(program: Program, timeline: Timeline, tick: float, latency: dict[str, int]) -> int:
    """Ticks by which everything must move later so that no output is issued before tick 0."""
    # Events of one kind on one output share their lead, so in a timeline in start order the
    # first of each is issued earliest: a handful of events to look at, however many there are.
    first: dict[tuple, Event] = {}
    for event in timeline.events:
        first.setdefault((event.kind, event.drive, event.port), event)
    earliest = min((_ticks(e.start_s, tick) - _issue_lead(program, e, tick, latency) for e in first.values()),
                   default=0)
    return max(0, -earliest)


def played_detuning(drive, detuning_hz: float) -> float:
    """The detuning a table plays: the written one (what the atoms see) plus the drive's measured
    `line_offset`, so that a calibrated line shift never reaches the atoms."""
    offset = drive.extra.get("line_offset", 0.0) if drive.extra else 0.0
    return detuning_hz + offset if offset else detuning_hz


def _port_events(program: Program, event: Event, tick: float, latency: dict[str, int], shift: int,
                 source: _SourceLines, out: list[PortEvent]) -> None:
    """Append the entries of a pulse (and its gate window), an imaging or a port action."""
    start, length = round(event.start_s / tick) + shift, round(event.duration_s / tick)  # _ticks, inlined
    where = source[event.span]
    if event.kind == PULSE:
        drive = program.rig.drives[event.drive]
        amplitude = event.rabi_hz / drive.max_rabi_hz
        out.append(PortEvent(drive.port, start - latency[drive.port], length, PULSE, event.index, where,
                             drive.name, event.rabi_hz, amplitude, played_detuning(drive, event.detuning_hz),
                             event.phase_rad, event.shape.kind, event.targets))
        if drive.gate is not None:
            lead, lag = _ticks(drive.gate_lead_s, tick), _ticks(drive.gate_lag_s, tick)
            out.append(PortEvent(drive.gate, start - lead - latency[drive.gate], length + lead + lag, GATE,
                                 event.index, where, drive.name))
    elif event.kind == IMAGE:
        out.append(PortEvent(event.port, start - latency[event.port], length, IMAGE, event.index, where,
                             targets=event.targets))
    else:
        out.append(PortEvent(event.port, start - latency.get(event.port, 0), length, event.kind, event.index,
                             where, value=event.value))


def _ramps(program: Program, paths: motion.SitePaths, event: Event, tick: float, latency: dict[str, int],
           shift: int, source: _SourceLines) -> list[PortEvent]:
    """One frequency ramp per moved site and axis, on the deflector of that axis."""
    start, length = _ticks(event.start_s, tick) + shift, _ticks(event.duration_s, tick)
    out = []
    for site in event.targets:
        before = {site: paths.position(site, event.start_s)}
        for k, axis in enumerate(motion.AXES):
            port = motion.deflector(program, program.sites[site].species, axis)
            if port is None or event.displacement_m[k] == 0:
                continue
            x0 = before[site][k]
            f0 = port.extra["center"] + port.extra["scale"] * x0
            f1 = port.extra["center"] + port.extra["scale"] * (x0 + event.displacement_m[k])
            out.append(PortEvent(port.channel, start - latency.get(port.channel, 0), length, "ramp", event.index,
                                 source[event.span], targets=(site,), value=f1, ramp=(f0, f1, event.profile)))
    return out


def _field_sets(program: Program, event: Event, tick: float, latency: dict[str, int], shift: int,
                source: _SourceLines) -> list[PortEvent]:
    """The electrode set to the field's voltage at the start and back to 0 V at the end."""
    port = next(p for p in program.rig.ports.values() if p.channel == event.port)
    volts = event.value / port.extra["field_per_volt"]
    start, end = _ticks(event.start_s, tick) + shift, _ticks(event.end_s, tick) + shift
    lag = latency.get(event.port, 0)
    return [PortEvent(event.port, start - lag, 0, SET, event.index, source[event.span], value=volts),
            PortEvent(event.port, end - lag, 0, SET, event.index, source[event.span], value=0.0)]


def _merge_gates(entries: list[PortEvent]) -> list[PortEvent]:
    """Overlapping or touching gate windows on one line become one window."""
    gates = sorted((e for e in entries if e.kind == GATE), key=attrgetter("port", "tick"))
    if not gates:
        return entries
    merged: list[PortEvent] = []
    for gate in gates:
        last = merged[-1] if merged else None
        if last is not None and last.port == gate.port and gate.tick <= last.tick + last.ticks:
            end = max(last.tick + last.ticks, gate.tick + gate.ticks)
            merged[-1] = evolve(last, ticks=end - last.tick)
        else:
            merged.append(gate)
    return [e for e in entries if e.kind != GATE] + merged


# At most this many hold rows in one table: more means waits far longer than the counter
# spans, which a sequencer memory would not hold either (and building them would not end).
MAX_HOLD_ROWS = 1_000_000


def _holds(entries: list[PortEvent], limit: int, program: Program, timeline: Timeline) -> list[PortEvent]:
    """Hold rows so that no two consecutive issue ticks (from tick 0) are more than `limit` apart.

    A hold carries the source line of the row it leads to. More than MAX_HOLD_ROWS is an
    error at the event after the longest gap (counted before any row is built).
    """
    if max((e.tick for e in entries), default=0) <= limit:
        return []  # the usual case: the whole sequence fits the counter, no sort needed
    ordered = sorted(entries, key=_ISSUE_ORDER)
    _check_hold_count(ordered, limit, program, timeline)
    out: list[PortEvent] = []
    previous = 0
    for entry in ordered:
        tick = previous + limit
        while tick < entry.tick:
            out.append(PortEvent(SEQUENCER, tick, min(limit, entry.tick - tick), HOLD, entry.event, entry.source))
            tick += limit
        previous = max(previous, entry.tick)
    return out


def _check_hold_count(ordered: list[PortEvent], limit: int, program: Program, timeline: Timeline) -> None:
    count, previous, longest, after = 0, 0, 0, None
    for entry in ordered:
        gap = entry.tick - previous
        if gap > limit:
            count += (gap - 1) // limit   # holds at previous + limit, + 2 limit, ... before the entry
            if gap > longest:
                longest, after = gap, entry
        previous = max(previous, entry.tick)
    if count <= MAX_HOLD_ROWS:
        return
    span = timeline.events[after.event].span if 0 <= after.event < len(timeline.events) else program.rig.span
    raise SeqlangError([error(
        f"the tables would need {count:,} hold rows: gaps of up to {longest:,} ticks against a duration "
        f"counter of {program.rig.counter_bits} bits ({limit:,} ticks); at most {MAX_HOLD_ROWS:,} are built",
        span, "shorten the waits, or widen `counter_bits` in the rig")])


_shifted = copier(Event, "start_s")  # kept: one copy per event


def _shift_timeline(timeline: Timeline, shift_s: float) -> Timeline:
    if shift_s == 0:
        return timeline
    events = tuple([_shifted(e, e.start_s + shift_s) for e in timeline.events])
    return evolve(timeline, events=events, duration_s=timeline.duration_s + shift_s, shift_s=shift_s)
