"""Building and copying timeline events: the generated `__init__` and copiers give what the
dataclass machinery gives (`dataclasses.replace`, the frozen dataclass's own `__init__`)."""
from __future__ import annotations

import dataclasses

import pytest

from seqlang.compile.hardware import PortEvent
from seqlang.compile.timeline import PULSE, Event, Timeline, copier, evolve
from seqlang.lang.diagnostics import Span
from seqlang.lang.records import direct_init
from seqlang.program.model import Shape

SPAN = Span("t.seq", 4, 3, 4, 20)
EVENT = Event(7, PULSE, 1e-6, 2e-6, "awg0.1", SPAN, "mw", ("a",), "na", 1e4, -3.0, 0.5, 1.5, Shape("gaussian"))


def _plain_twin(cls):
    """The same dataclass without direct_init: what the fields would get from dataclasses itself."""
    return dataclasses.make_dataclass(cls.__name__, [(f.name, f.type, f) for f in dataclasses.fields(cls)],
                                      frozen=True, slots=True)


@pytest.mark.parametrize("cls, args", [(Event, (1, PULSE, 0.0, 1e-6, "p", SPAN)),
                                       (PortEvent, ("awg", 3, 4, PULSE, 5, "t.seq:4"))])
def test_direct_init_takes_the_arguments_and_defaults_of_the_dataclass(cls, args):
    twin = _plain_twin(cls)
    for kwargs in ({}, {"value": 2.5}):
        built, reference = cls(*args, **kwargs), twin(*args, **kwargs)
        assert dataclasses.astuple(built) == dataclasses.astuple(reference)
    with pytest.raises(TypeError, match="missing"):
        cls(*args[:2])
    with pytest.raises(dataclasses.FrozenInstanceError):
        cls(*args).value = 1.0


def test_direct_init_refuses_fields_it_cannot_store_directly():
    @dataclasses.dataclass(frozen=True, slots=True)
    class WithFactory:
        items: list = dataclasses.field(default_factory=list)
    with pytest.raises(TypeError):
        direct_init(WithFactory)


@pytest.mark.parametrize("name", [f.name for f in dataclasses.fields(Event)])
def test_evolve_of_an_event_is_dataclasses_replace(name):
    new = object()
    copy = evolve(EVENT, **{name: new})
    assert copy == dataclasses.replace(EVENT, **{name: new}) and copy is not EVENT
    assert EVENT != copy and hash(evolve(EVENT)) == hash(EVENT)


def test_copier_changes_the_named_fields_in_order_and_refuses_unknown_ones():
    moved = copier(Event, "start_s", "rabi_hz")(EVENT, 5e-6, 2e4)
    assert moved == dataclasses.replace(EVENT, start_s=5e-6, rabi_hz=2e4)
    with pytest.raises(TypeError, match="no field 'starts'"):
        copier(Event, "starts")


def test_evolve_of_a_timeline_keeps_its_other_fields():
    timeline = Timeline((EVENT,), 3e-6, 2e-9, quantized=True)
    assert evolve(timeline, shift_s=1e-6) == dataclasses.replace(timeline, shift_s=1e-6)
