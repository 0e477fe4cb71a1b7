"""The occupancy stage: Program (every trap) → Program (the atoms of one shot).

Runs between resolution and lowering (``compile.pipeline.check_program``) when a
species loads with a probability below one or the sequence has a `fill`:

1. the loaded sites are drawn (seeded) or given (:mod:`.loading`);
2. each `fill` is planned (:mod:`.rearrange`) and becomes ordinary `MoveOp`s, so
   the checks, the deflector ramps and the simulator see plain moves;
3. an atom carried onto target `t` is from then on *named* `t` (it starts at its
   source), empty traps leave `sites`, groups and every operation's targets.

Nothing below this stage knows about loading. ``OCCUPANCY`` says which occupancy
to use (the command line's ``--load-seed``/``--occupancy``; ``api.load(...,
occupancy=)``); by default the draw with load seed 1.
"""
from __future__ import annotations

import dataclasses
from contextvars import ContextVar
from dataclasses import dataclass
from typing import Mapping

from ..compile import motion
from ..lang.diagnostics import Diagnostic, SeqlangError, error
from ..program.model import BranchOp, FieldOp, FillOp, MoveOp, Program, RepeatOp, SerialOp, Site, TogetherOp
from . import rearrange
from .loading import Occupancy, loaded_sites, probabilities, read_pattern

OCCUPANCY: ContextVar[Occupancy] = ContextVar("occupancy", default=Occupancy())


@dataclass(frozen=True)
class ArrayState:
    """What the stage did: the occupancy, the loaded and empty traps, the fill plans."""

    occupancy: Occupancy
    probabilities: Mapping[str, float]
    traps: Mapping[str, Site]  # every trap of the layout, as declared
    loaded: tuple[str, ...]
    plans: tuple[rearrange.FillPlan, ...]

    def loaded_count(self, species: str) -> int:
        return sum(self.traps[n].species == species for n in self.loaded)


def needed(program: Program) -> bool:
    """Whether the stage changes anything: a species that may not load, or a `fill`."""
    p = probabilities(program)
    return any(p[s.species] < 1 for s in program.sites.values()) or any(_fills(program.body))


def occupy(program: Program, occupancy: Occupancy | None = None) -> Program:
    """The program of one shot's atoms (see the module docstring); raises SeqlangError."""
    if not needed(program):
        return program
    occupancy = occupancy or OCCUPANCY.get()
    diags = _placement(program.body)
    if occupancy.text is not None:
        diags += read_pattern(occupancy.source, occupancy.text, program)[1]
    if diags:
        raise SeqlangError(diags)
    loaded = loaded_sites(program, occupancy)
    full, names = set(loaded), {n: n for n in loaded}
    plans, moves = [], []
    for fill in _fills(program.body):
        for species in sorted({program.sites[t].species for t in fill.targets}):
            plan = _plan(program, fill, species, full, occupancy, diags)
            if plan is None:
                continue
            plans.append(plan)
            moves += _moves(plan, fill)
            for carry in plan.carries:
                full.discard(carry.source)
                full.add(carry.target)
                names[carry.target] = names.pop(carry.source)
    if diags:
        raise SeqlangError(diags)
    return _rebuilt(program, occupancy, loaded, names, tuple(plans), moves)


def _fills(op) -> list[FillOp]:
    """Every `fill` under `op`, in order; only the containers of statements are searched
    (a generated sequence has 10⁵ pulses whose fields need no look)."""
    if isinstance(op, FillOp):
        return [op]
    if isinstance(op, (SerialOp, TogetherOp)):
        return [f for child in op.body for f in _fills(child)]
    if isinstance(op, (RepeatOp, FieldOp)):
        return _fills(op.body)
    if isinstance(op, BranchOp):
        return _fills(op.then) + _fills(op.otherwise)
    return []


def _placement(body: SerialOp) -> list[Diagnostic]:
    """A `fill` comes first: at the top of the sequence, before every other operation."""
    out, leading = [], True
    top = set()
    for op in body.body:
        if isinstance(op, FillOp) and leading:
            top.add(id(op))
        else:
            leading = False
    for fill in _fills(body):
        if id(fill) not in top:
            out.append(error("`fill` comes at the start of the sequence, before every other statement "
                             "(the array is rearranged right after it is loaded)", fill.span))
    return out


def _plan(program: Program, fill: FillOp, species: str, full: set[str], occupancy: Occupancy, diags) -> rearrange.FillPlan | None:
    import numpy as np
    targets = [t for t in fill.targets if program.sites[t].species == species]
    traps = tuple(s for s in dict.fromkeys(fill.sources + fill.targets) if program.sites[s].species == species)
    pool = [s for s in traps if s in full]
    if len(pool) < len(targets):
        diags.append(error(f"only {len(pool)} {species} atoms loaded for {len(targets)} target sites "
                           f"(occupancy {occupancy.describe()})", fill.span,
                           "draw another occupancy (`--load-seed`), add sources, or fill fewer sites"))
        return None
    where = lambda names: np.array([program.sites[n].position_m for n in names], dtype=float).reshape(-1, 3)
    pairs = [(pool[i], targets[j]) for i, j in rearrange.assign(where(pool), where(targets))]
    kept = tuple(t for s, t in pairs if s == t)
    carries = rearrange.play_order([(s, t) for s, t in pairs if s != t], full)
    limits = _limits(program, species, fill, diags)
    if limits is None:
        return None
    layout = _corridor_layout(program, fill, diags) if fill.strategy == "corridors" and carries else None
    if fill.strategy == "corridors" and carries and layout is None:
        return None
    extra = program.rig.species[species].extra
    made = tuple(_carry(program, s, t, layout, limits, extra) for s, t in carries)
    used = {s for s, t in pairs}
    filling = (len(kept) + sum(c.survival for c in made)) / len(targets)
    return rearrange.FillPlan(species, tuple(targets), kept, made, tuple(n for n in pool if n not in used),
                              sum(leg[2] for c in made for leg in c.legs), filling, fill.strategy, traps)


def _limits(program: Program, species: str, fill: FillOp, diags):
    ports = [motion.deflector(program, species, axis) for axis in ("x", "y")]
    if None in ports:
        axis = "xy"[ports.index(None)]
        diags.append(error(f"no deflector port moves `{species}` atoms along {axis}", fill.span,
                           f"declare a port with `kind deflector  axis {axis}` in the rig"))
        return None
    velocity = [p.extra["max_velocity"] for p in ports if p.extra.get("max_velocity")]
    acceleration = [p.extra["max_acceleration"] for p in ports if p.extra.get("max_acceleration")]
    if not velocity and not acceleration:
        diags.append(error(f"the deflectors of `{species}` declare no `max_velocity` or `max_acceleration`: "
                           "`fill` times its moves from them", fill.span, "declare them on the deflector ports"))
        return None
    return (min(velocity, default=None), min(acceleration, default=None))


def _corridor_layout(program: Program, fill: FillOp, diags):
    """The one square or rectangular lattice that holds every site of the fill."""
    names = set(fill.targets) | set(fill.sources)
    for layout in program.layouts.values():
        if layout.kind in ("square", "rectangular") and names <= set(layout.sites):
            if min(layout.pitch_m) / 2 < program.rig.min_spacing_m:
                diags.append(error(f"the corridors of lattice `{layout.name}` pass {min(layout.pitch_m) / 2 * 1e6:.3g} "
                                   f"um from its sites, closer than the rig's minimum spacing", fill.span))
                return None
            return layout
    diags.append(error("corridor moves need every site of the fill in one square or rectangular lattice",
                       fill.span, "add `strategy straight` (direct paths, checked against the other atoms)"))
    return None


def _carry(program: Program, source: str, target: str, layout, limits, extra) -> rearrange.Carry:
    import numpy as np
    start, end = program.sites[source].position_m, program.sites[target].position_m
    points = rearrange.corridor_path(start, end, layout) if layout is not None else [start, end]
    points[-1] = end  # exactly on the trap, whatever the rounding of the frames
    legs = []
    for a, b in zip(points, points[1:]):
        length = float(np.linalg.norm(np.subtract(b, a)))
        legs.append((a, b, rearrange.leg_duration(length, *limits)))
    length = sum(float(np.linalg.norm(np.subtract(b, a))) for a, b, _ in legs)
    survival = rearrange.survival(length, extra.get("move_survival", 1.0), extra.get("move_loss_length"))
    return rearrange.Carry(source, target, tuple(legs), length, survival)


def _moves(plan: rearrange.FillPlan, fill: FillOp) -> list[MoveOp]:
    """The carries as moves of the atom, which is named after its target from the start."""
    return [MoveOp((carry.target,), tuple(float(e - s) for s, e in zip(a, b)), duration, "minimum_jerk", fill.span)
            for carry in plan.carries for a, b, duration in carry.legs]


def _rebuilt(program: Program, occupancy: Occupancy, loaded, names: dict[str, str], plans, moves) -> Program:
    """`names` maps each atom's final name to the trap it was loaded in."""
    final, order = {}, {n: k for k, n in enumerate(program.sites)}
    for name, trap in sorted(names.items(), key=lambda kv: order[kv[1]]):
        site = program.sites[name] if name in program.sites else program.sites[trap]
        final[name] = Site(name, site.species, program.sites[trap].position_m, site.span)
    present = set(final)
    body = _without_fills(program.body, moves)
    body = _filtered(body, present)
    groups = {g: tuple(n for n in members if n in present) for g, members in program.groups.items()}
    expects = _checked_expects(program, present, occupancy)
    state = ArrayState(occupancy, probabilities(program), dict(program.sites), tuple(loaded), plans)
    return dataclasses.replace(program, sites=final, groups=groups, body=body, expects=expects, arrays=state)


def _without_fills(body: SerialOp, moves: list[MoveOp]) -> SerialOp:
    ops = tuple(op for op in body.body if not isinstance(op, FillOp))
    return dataclasses.replace(body, body=tuple(moves) + ops)


def _filtered(op, present: set[str]):
    """Every operation with the empty traps dropped from its targets."""
    if not dataclasses.is_dataclass(op):
        return op
    changes = {}
    for f in dataclasses.fields(op):
        value = getattr(op, f.name)
        if f.name in ("targets", "sites") and isinstance(value, tuple) and all(isinstance(v, str) for v in value):
            kept = tuple(v for v in value if v in present)
            if kept != value:
                changes[f.name] = kept
        elif isinstance(value, tuple) and value and dataclasses.is_dataclass(value[0]):
            new = tuple(_filtered(v, present) for v in value)
            if any(a is not b for a, b in zip(new, value)):
                changes[f.name] = new
        elif dataclasses.is_dataclass(value) and f.name != "span":
            new = _filtered(value, present)
            if new is not value:
                changes[f.name] = new
    return dataclasses.replace(op, **changes) if changes else op


def _checked_expects(program: Program, present: set[str], occupancy: Occupancy):
    missing = [(e, [n for n in e.sites if n not in present]) for e in program.expects]
    errors = [error(f"{', '.join(m[:3])}{' …' if len(m) > 3 else ''} did not load in this shot "
                    f"(occupancy {occupancy.describe()}): expect sites that a `fill` fills", e.span)
              for e, m in missing if m]
    if errors:
        raise SeqlangError(errors)
    return program.expects
