"""The timeline: drive-level events in physical units, the shared form.

The simulator reads the *quantized* timeline (after :func:`seqlang.compile.
quantize.quantize`), which holds what the hardware will play.
"""
from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass

from ..lang.diagnostics import Span
from ..lang.records import direct_init
from ..program.model import Decision, Shape

PULSE, IMAGE, SWITCH, SET, TRIGGER = "pulse", "image", "switch", "set", "trigger"
FIELD, MOVE = "field", "move"  # an electric-field stretch (value in V/m); sites moving (displacement_m)


@direct_init
@dataclass(frozen=True, slots=True)
class Event:
    """One drive-level event: a pulse, an imaging, or a plain port action."""

    index: int
    kind: str
    start_s: float
    duration_s: float
    port: str
    span: Span
    drive: str | None = None
    targets: tuple[str, ...] = ()
    species: str | None = None
    rabi_hz: float = 0.0
    detuning_hz: float = 0.0
    phase_rad: float = 0.0
    area_rad: float = 0.0
    shape: Shape = Shape("square")
    record: str | None = None
    value: float = 0.0
    displacement_m: tuple[float, ...] = ()
    profile: str = ""
    decision: Decision | None = None  # feed-forward: played per key of an image record

    @property
    def end_s(self) -> float:
        return self.start_s + self.duration_s


@dataclass(frozen=True)
class Timeline:
    """All events in start order, the total duration, and whether ticks apply."""

    events: tuple[Event, ...]
    duration_s: float
    tick_s: float
    quantized: bool = False
    shift_s: float = 0.0

    def pulses(self) -> tuple[Event, ...]:
        return tuple(e for e in self.events if e.kind == PULSE)

    def conditioned(self) -> tuple[Event, ...]:
        """The events that depend on an image record."""
        return tuple(e for e in self.events if e.decision is not None)


def evolve(obj, **changes):
    """A copy of a frozen dataclass with some fields changed.

    Same result as :func:`dataclasses.replace` for these plain dataclasses (no
    ``__post_init__``, no init-only fields), several times faster, which matters
    for programs of 10⁵ events. Slotted classes (``Event``: a third of the memory
    of one with a ``__dict__``) go through :func:`copier`.
    """
    cls = type(obj)
    if not hasattr(cls, "__slots__"):
        new = object.__new__(cls)
        object.__setattr__(new, "__dict__", {**obj.__dict__, **changes})  # one copy of the fields
        return new
    return copier(cls, *changes)(obj, *changes.values())


@functools.lru_cache(maxsize=None)
def copier(cls, *changed: str):
    """A function ``(obj, *new values of changed) -> copy`` for a slotted frozen dataclass.

    Generated once per class and set of fields: straight-line code with one slot store
    per field, about three times faster than a loop over the fields, and faster still
    than the frozen ``__init__`` (each of its stores goes through ``object.__setattr__``).
    Hot loops keep the function (``copier(Event, "start_s")``) to skip the keyword call.
    """
    names = [f.name for f in dataclasses.fields(cls)]
    unknown = [name for name in changed if name not in names]
    if unknown:
        raise TypeError(f"{cls.__name__} has no field {unknown[0]!r}")
    namespace = {"new_object": object.__new__, "cls": cls}
    lines = [f"def copy(old, {''.join(f'new_{name}, ' for name in changed)}):", "    new = new_object(cls)"]
    for name in names:
        namespace[f"set_{name}"] = cls.__dict__[name].__set__  # the slot's own store: frozen or not
        lines.append(f"    set_{name}(new, {'new_' + name if name in changed else 'old.' + name})")
    lines.append("    return new")
    exec("\n".join(lines), namespace)  # noqa: S102 - code built from field names only
    return namespace["copy"]
