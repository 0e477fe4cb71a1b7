"""Lower a Program's operations to a Timeline of events with start times.

>>> # lower(program).events[0].start_s == 0.0 for a sequence that starts with a pulse
"""
from __future__ import annotations

from ..lang.diagnostics import SeqlangError, error
from ..program.model import FieldOp, ImageOp, MoveOp, PortOp, Program, PulseOp, RepeatOp, SerialOp, TogetherOp, WaitOp
from .timeline import FIELD, IMAGE, MOVE, PULSE, Event, Timeline

MAX_EVENTS = 5_000_000


def lower(program: Program) -> Timeline:
    """Place every operation in time; the result is sorted by start."""
    events: list[Event] = []
    _Placer(program, events).place(program.body, 0.0)
    total = duration_of(program.body)
    events.sort(key=lambda e: (e.start_s, e.index))
    return Timeline(tuple(events), total, program.rig.tick_s)


def duration_of(op) -> float:
    """How long an operation lasts (a together lasts as long as its longest part)."""
    if isinstance(op, (PulseOp, WaitOp, ImageOp, PortOp, MoveOp)):
        return op.duration_s
    if isinstance(op, FieldOp):
        return duration_of(op.body)
    if isinstance(op, SerialOp):
        return sum(duration_of(o) for o in op.body)
    if isinstance(op, TogetherOp):
        return max((duration_of(o) for o in op.body), default=0.0)
    if isinstance(op, RepeatOp):
        return op.count * duration_of(op.body)
    raise TypeError(op)


class _Placer:
    def __init__(self, program: Program, events: list[Event]):
        self.program, self.events = program, events

    def place(self, op, start: float) -> None:
        if isinstance(op, SerialOp):
            for child in op.body:
                self.place(child, start)
                start += duration_of(child)
        elif isinstance(op, TogetherOp):
            self._together(op, start)
        elif isinstance(op, RepeatOp):
            self._repeat(op, start)
        elif isinstance(op, FieldOp):
            self._field(op, start)
        elif not isinstance(op, WaitOp):
            self._emit(op, start)

    def _together(self, op: TogetherOp, start: float) -> None:
        longest = duration_of(op)
        for child in op.body:
            slack = longest - duration_of(child)
            offset = {"start": 0.0, "end": slack, "center": slack / 2}[op.align]
            self.place(child, start + offset)

    def _field(self, op: FieldOp, start: float) -> None:
        port = self.program.rig.ports[op.port]
        self.events.append(Event(len(self.events), FIELD, start, duration_of(op.body), port.channel, op.span,
                                 value=op.field_v_m))
        self.place(op.body, start)

    def _repeat(self, op: RepeatOp, start: float) -> None:
        period = duration_of(op.body)
        if op.count * _count_events(op.body) + len(self.events) > MAX_EVENTS:
            raise SeqlangError([error(f"this repetition makes more than {MAX_EVENTS:,} events", op.span)])
        for i in range(op.count):
            self.place(op.body, start + i * period)

    def _emit(self, op, start: float) -> None:
        index = len(self.events)
        rig = self.program.rig
        if isinstance(op, PulseOp):
            drive = rig.drives[op.drive]
            self.events.append(Event(index, PULSE, start, op.duration_s, drive.port, op.span, drive.name,
                                     op.targets, drive.species, op.rabi_hz, op.detuning_hz, op.phase_rad,
                                     op.area_rad, op.shape))
        elif isinstance(op, ImageOp):
            imaging = rig.imaging[op.species]
            targets = self.program.sites_of(op.species)
            self.events.append(Event(index, IMAGE, start, op.duration_s, imaging.port, op.span,
                                     targets=targets, species=op.species, record=op.record))
        elif isinstance(op, MoveOp):
            self.events.append(Event(index, MOVE, start, op.duration_s, "move " + ",".join(op.sites), op.span,
                                     targets=op.sites, displacement_m=op.displacement_m, profile=op.profile))
        else:
            port = rig.ports[op.port]
            self.events.append(Event(index, op.action, start, op.duration_s, port.channel, op.span,
                                     value=op.value))


def _count_events(op) -> int:
    if isinstance(op, (PulseOp, ImageOp, PortOp, MoveOp)):
        return 1
    if isinstance(op, FieldOp):
        return 1 + _count_events(op.body)
    if isinstance(op, (SerialOp, TogetherOp)):
        return sum(_count_events(o) for o in op.body)
    if isinstance(op, RepeatOp):
        return op.count * _count_events(op.body)
    return 0
