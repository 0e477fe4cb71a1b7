"""Lower a Program's operations to a Timeline of events with start times.

>>> # lower(program).events[0].start_s == 0.0 for a sequence that starts with a pulse
"""
from __future__ import annotations

from operator import attrgetter

from ..lang import units
from ..lang.diagnostics import SeqlangError, error
from ..program.model import (BranchOp, Decision, FieldOp, ImageOp, MoveOp, PortOp, Program, PulseOp, RepeatOp,
                             SerialOp, TogetherOp, WaitOp)
from .timeline import FIELD, IMAGE, MOVE, PULSE, Event, Timeline

MAX_EVENTS = 5_000_000  # after expanding repeats; waits count too (each is work to place)
MAX_TICKS = 2 ** 53  # exact integer arithmetic on tick numbers (float mantissa)


def lower(program: Program) -> Timeline:
    """Place every operation in time; the result is sorted by start."""
    events: list[Event] = []
    placer = _Placer(program, events)
    tick = program.rig.tick_s
    if placer.duration(program.body) / tick >= MAX_TICKS:
        culprit = _too_long(placer, program.body, tick)
        raise SeqlangError([error(
            f"this makes the sequence last {units.format_quantity(placer.duration(culprit), units.DURATION)}, "
            f"beyond 2^53 ticks ({units.format_quantity(MAX_TICKS * tick, units.DURATION)}), "
            "where tick arithmetic stops being exact", culprit.span)])
    placer.place(program.body, 0.0)
    total = placer.duration(program.body)
    events.sort(key=attrgetter("start_s", "index"))
    return Timeline(tuple(events), total, program.rig.tick_s)


_TIMED = frozenset((PulseOp, WaitOp, ImageOp, PortOp, MoveOp))  # the operations that state their duration


def duration_of(op) -> float:
    """How long an operation lasts (a together lasts as long as its longest part)."""
    if type(op) in _TIMED:
        return op.duration_s
    if isinstance(op, FieldOp):
        return duration_of(op.body)
    if isinstance(op, SerialOp):
        return sum(duration_of(o) for o in op.body)
    if isinstance(op, TogetherOp):
        return max((duration_of(o) for o in op.body), default=0.0)
    if isinstance(op, RepeatOp):
        return op.count * duration_of(op.body)
    if isinstance(op, BranchOp):
        return max(duration_of(op.then), duration_of(op.otherwise))
    raise TypeError(op)


class _Placer:
    def __init__(self, program: Program, events: list[Event]):
        self.program, self.events = program, events
        self.decision: Decision | None = None  # of the enclosing `when` branch
        self.placed = 0  # events and waits placed so far
        # Durations and counts by operation identity: nested `together`s inside a `repeat`
        # would otherwise recompute them at every level of every iteration.
        self._durations: dict[int, float] = {}
        self._counts: dict[int, tuple[int, bool]] = {}

    def duration(self, op) -> float:
        if type(op) in _TIMED:
            return op.duration_s  # carried by the operation: nothing to remember
        key = id(op)
        if key not in self._durations:
            self._durations[key] = self._duration(op)
        return self._durations[key]

    def _duration(self, op) -> float:
        if isinstance(op, SerialOp):
            return sum(self.duration(o) for o in op.body)
        if isinstance(op, TogetherOp):
            return max((self.duration(o) for o in op.body), default=0.0)
        if isinstance(op, RepeatOp):
            return op.count * self.duration(op.body)
        return duration_of(op)

    def counts(self, op) -> tuple[int, bool]:
        """(events and waits after expansion, whether any event is made)."""
        key = id(op)
        if key not in self._counts:
            self._counts[key] = (_count_events(op), _makes_events(op))
        return self._counts[key]

    def place(self, op, start: float) -> None:
        # One dictionary look-up instead of a chain of isinstance tests: placing runs once
        # per operation of every repetition.
        _PLACERS.get(type(op), _Placer._port_action)(self, op, start)

    def _serial(self, op: SerialOp, start: float) -> None:
        for child in op.body:
            self.place(child, start)
            start += self.duration(child)

    def _wait(self, op: WaitOp, start: float) -> None:
        self.placed += 1

    def _together(self, op: TogetherOp, start: float) -> None:
        longest = self.duration(op)
        for child in op.body:
            slack = longest - self.duration(child)
            offset = {"start": 0.0, "end": slack, "center": slack / 2}[op.align]
            self.place(child, start + offset)

    def _field(self, op: FieldOp, start: float) -> None:
        self.placed += 1
        port = self.program.rig.ports[op.port]
        self.events.append(Event(len(self.events), FIELD, start, self.duration(op.body), port.channel, op.span,
                                 value=op.field_v_m))
        self.place(op.body, start)

    def _repeat(self, op: RepeatOp, start: float) -> None:
        period = self.duration(op.body)
        count, makes_events = self.counts(op.body)
        work = op.count * count
        if work + self.placed > MAX_EVENTS:
            raise SeqlangError([error(f"this repetition makes more than {MAX_EVENTS:,} events "
                                      "(waits included)", op.span)])
        if not makes_events:
            self.placed += work  # waits only: nothing to place, however often
            return
        for i in range(op.count):
            self.place(op.body, start + i * period)

    def _branch(self, op: BranchOp, start: float) -> None:
        """Both branches start together; each event remembers for which keys it plays."""
        outer = self.decision
        negated = Decision(op.decision.selection, tuple(not e for e in op.decision.enabled), None, op.decision.span)
        for body, decision in ((op.then, op.decision), (op.otherwise, negated)):
            self.decision = _combine(outer, decision)
            self.place(body, start)
        self.decision = outer

    def _pulse(self, op: PulseOp, start: float) -> None:
        self.placed += 1
        drive = self.program.rig.drives[op.drive]
        decision = op.decision if self.decision is None else _combine(self.decision, op.decision)
        self.events.append(Event(len(self.events), PULSE, start, op.duration_s, drive.port, op.span, drive.name,
                                 op.targets, drive.species, op.rabi_hz, op.detuning_hz, op.phase_rad,
                                 op.area_rad, op.shape, decision=decision))

    def _image(self, op: ImageOp, start: float) -> None:
        self.placed += 1
        imaging = self.program.rig.imaging[op.species]
        targets = self.program.sites_of(op.species)
        self.events.append(Event(len(self.events), IMAGE, start, op.duration_s, imaging.port, op.span,
                                 targets=targets, species=op.species, record=op.record))

    def _move(self, op: MoveOp, start: float) -> None:
        self.placed += 1
        self.events.append(Event(len(self.events), MOVE, start, op.duration_s, "move " + ",".join(op.sites),
                                 op.span, targets=op.sites, displacement_m=op.displacement_m, profile=op.profile))

    def _port_action(self, op: PortOp, start: float) -> None:
        self.placed += 1
        port = self.program.rig.ports[op.port]
        self.events.append(Event(len(self.events), op.action, start, op.duration_s, port.channel, op.span,
                                 value=op.value, decision=self.decision))


# Plain functions, not bound methods kept on the placer: those would make a reference
# cycle, and lowering runs with the cyclic collector paused.
_PLACERS = {SerialOp: _Placer._serial, TogetherOp: _Placer._together, RepeatOp: _Placer._repeat,
            BranchOp: _Placer._branch, FieldOp: _Placer._field, WaitOp: _Placer._wait, PulseOp: _Placer._pulse,
            ImageOp: _Placer._image, MoveOp: _Placer._move, PortOp: _Placer._port_action}


def _combine(outer: Decision | None, inner: Decision | None) -> Decision | None:
    """A decision inside another (same selection, checked by the resolver): both must allow a key."""
    if outer is None or inner is None:
        return inner or outer
    enabled = tuple(a and b for a, b in zip(outer.enabled, inner.enabled))
    return Decision(inner.selection, enabled, inner.variants, inner.span)


def _makes_events(op) -> bool:
    if isinstance(op, (PulseOp, ImageOp, PortOp, MoveOp, FieldOp)):
        return True
    if isinstance(op, (SerialOp, TogetherOp)):
        return any(_makes_events(o) for o in op.body)
    if isinstance(op, RepeatOp):
        return _makes_events(op.body)
    return False


def _too_long(placer: _Placer, op, tick: float):
    """The innermost operation that takes the sequence beyond MAX_TICKS, or None."""
    if placer.duration(op) / tick < MAX_TICKS:
        return None
    children = op.body.body if isinstance(op, RepeatOp) else getattr(op, "body", ())
    if isinstance(op, RepeatOp) and placer.duration(op.body) / tick < MAX_TICKS:
        return op
    for child in children:
        found = _too_long(placer, child, tick)
        if found is not None:
            return found
    return op


def _count_events(op) -> int:
    """Events and waits after expansion (waits cost placing time even though they make no event)."""
    if isinstance(op, (PulseOp, ImageOp, PortOp, WaitOp, MoveOp)):
        return 1
    if isinstance(op, FieldOp):
        return 1 + _count_events(op.body)
    if isinstance(op, (SerialOp, TogetherOp)):
        return sum(_count_events(o) for o in op.body)
    if isinstance(op, RepeatOp):
        return op.count * _count_events(op.body)
    if isinstance(op, BranchOp):
        return _count_events(op.then) + _count_events(op.otherwise)
    return 0
