"""`seqlang show`: the timeline as a readable table, and the atom pairs."""
from __future__ import annotations

import itertools
import math

from .compile.pipeline import Checked
from .lang import units
from .program.model import Program


def pretty_unit(unit: str) -> str:
    """The printed form of a unit: the input language writes `us`, people read `µs`."""
    return "µ" + unit[1:] if unit in ("us", "um", "uK", "uW") else unit


def quantity(value: float, dim) -> str:
    """`value` (SI) with the largest unit that keeps it at or above 1, µ written as µ."""
    text = units.format_quantity(value, dim)
    number, _, unit = text.partition(" ")
    return f"{number} {pretty_unit(unit)}" if unit else text


_f = quantity


def timeline_table(checked: Checked) -> str:
    """One line per event of the played timeline."""
    head = f"{'#':>4}  {'start':>12}  {'duration':>11}  {'kind':<7} {'drive/port':<12} {'targets':<10} " \
           f"{'rabi':>11}  {'detuning':>11}  {'phase/rad':>9}  {'area':>9}  {'shape':<9} line"
    lines = [head, "-" * len(head)]
    for e in checked.quantized.events:
        who = e.drive or e.port
        rabi = _f(e.rabi_hz, units.FREQUENCY) if e.kind == "pulse" else ""
        det = _f(e.detuning_hz, units.FREQUENCY) if e.kind == "pulse" else ""
        phase = f"{e.phase_rad:+.4f}" if e.kind == "pulse" else ""
        area = f"{e.area_rad / math.pi:.5f}π" if e.kind == "pulse" else ""
        shape = e.shape.kind if e.kind == "pulse" else (e.record or "")
        lines.append(f"{e.index:>4}  {_f(e.start_s, units.DURATION):>12}  {_f(e.duration_s, units.DURATION):>11}  "
                     f"{e.kind:<7} {who:<12} {','.join(e.targets):<10} {rabi:>11}  {det:>11}  {phase:>9}  "
                     f"{area:>9}  {shape:<9} {e.span.line}")
    return "\n".join(lines)


def compile_summary(checked: Checked) -> str:
    plan, report = checked.plan, checked.plan.report
    return "\n".join([
        f"tick {_f(plan.tick_s, units.DURATION)}; {len(checked.quantized.events)} events; "
        f"total {_f(checked.quantized.duration_s, units.DURATION)}" + _total_parts(checked),
        f"latency compensation shifted the sequence by {plan.shift_ticks} ticks "
        f"({_f(plan.shift_s, units.DURATION)})" if plan.shift_ticks else "no latency shift needed",
        f"largest residual pulse-area error after tick and amplitude rounding: {report.max_area_error_rad:.3g} rad"
        + (f"; detuning scaled with the Rabi frequency on {len(report.detuning_changes_hz)} pulse(s), "
           f"by up to {_f(report.max_detuning_change_hz, units.FREQUENCY)}" if report.detuning_changes_hz else ""),
        f"largest timing rounding: {_f(report.max_timing_error_s, units.DURATION)}"
        + (f"; {report.stretched} pulse(s) lengthened by one tick to stay under the drive maximum, "
           f"moving later events by up to {_f(report.max_stretch_shift_s, units.DURATION)}"
           if report.stretched else ""),
    ] + _latency_remainder_lines(plan) + ([f"{plan.holds} hold row(s) split gaps longer than the sequencer's duration counter "
          f"({2 ** checked.program.rig.counter_bits - 1:,} ticks = "
          f"{_f((2 ** checked.program.rig.counter_bits - 1) * plan.tick_s, units.DURATION)})"] if plan.holds else []))


def _latency_remainder_lines(plan) -> list[str]:
    """The latency left uncompensated by whole ticks, per output that has any (none: no line)."""
    left = {p: r for p, r in plan.latency_remainder_s.items() if r}
    if not left:
        return []
    parts = ", ".join(f"{p} {'+' if r > 0 else '−'}{_f(abs(r), units.DURATION)}" for p, r in sorted(left.items()))
    return [f"latency remainders (events late by, not compensated): {parts}"]


def _total_parts(checked: Checked) -> str:
    """Why the played total differs from the written one: rounding and stretches, latency shift."""
    written, shift = checked.timeline.duration_s, checked.plan.shift_s
    rounding = checked.quantized.duration_s - shift - written
    if abs(rounding) < 1e-15 and shift == 0:
        return ""
    parts = [f"written {_f(written, units.DURATION)}"]
    if abs(rounding) >= 1e-15:
        parts.append(f"{'+' if rounding > 0 else '−'}{_f(abs(rounding), units.DURATION)} tick rounding"
                     + (" and one-tick stretches" if checked.plan.report.stretched else ""))
    if shift:
        parts.append(f"+{_f(shift, units.DURATION)} latency shift")
    return " (" + " ".join(parts) + ")"


def pair_models_table(program: Program, timeline) -> str:
    """Per Rydberg pair: the model used (perturbative/diagonalised/resonant), V, overlap, channel defect,
    radii at its first Rydberg pulse, and indented, the same from each change of geometry on (through
    and after a move, at a field edge); then each field in use with the Stark shifts and the pair
    defects at that field."""
    from .compile.geometry import pair_shift_track
    rows = []
    for (a, b), ((_, first, _), *later) in pair_shift_track(program, timeline).items():
        rows.append(f"{a}-{b}: {_pair_model(first)}")
        rows += [f"  from {_f(t, units.DURATION)}: {_pair_model(m)}" for t, m, _ in later]
    return "\n".join(rows + _field_rows(program, timeline))


def _pair_model(m) -> str:
    return (f"R = {_f(m.distance_m, units.LENGTH)}, θ = {math.degrees(m.theta_rad):.1f} deg, "
            f"E = {m.field_v_m:.4g} V/m: {m.model}, V/h = {_f(m.shift_hz, units.FREQUENCY)}, "
            f"overlap {m.overlap:.3f}, dominant channel defect {_f(m.defect_hz, units.FREQUENCY)}, "
            f"crossover radius {_f(m.crossover_radius_m, units.LENGTH)}, "
            f"Le Roy radius {_f(m.le_roy_radius_m, units.LENGTH)}")


def _field_rows(program: Program, timeline) -> list[str]:
    from .atoms import pairs
    from .compile.geometry import stark_shift_hz
    fields = sorted({e.value for e in timeline.events if e.kind == "field"})
    species = [s for s in program.rig.species.values() if s.rydberg is not None]
    rows = []
    for field in fields:
        rows.append(f"field {field:.4g} V/m: Stark shifts " + ", ".join(
            f"{s.name} {s.rydberg.label} {_f(stark_shift_hz(program, s.name, field), units.FREQUENCY)}"
            for s in species))
        for sa, sb in itertools.combinations_with_replacement(species, 2):
            near = pairs.channels_at_field(sa.data, sa.rydberg, sb.data, sb.rydberg, field)[:3]
            rows.append(f"  {sa.name}-{sb.name} channel defects: " + ", ".join(
                f"{c.levels[0]}+{c.levels[1]} {_f(c.defect_hz, units.FREQUENCY)}" for c in near))
    return rows


def pair_rows(program: Program) -> list[dict]:
    """Every pair of Rydberg-capable sites: distance, C6, interaction and blockade radius (SI)."""
    from .atoms import rydberg
    rows = []
    sites = [s for s in program.sites.values() if program.rig.species[s.species].rydberg is not None]
    for a, b in itertools.combinations(sites, 2):
        sa, sb = program.rig.species[a.species], program.rig.species[b.species]
        c6 = rydberg.c6_hz_m6(sa.data, sa.rydberg, sb.data, sb.rydberg)
        distance = math.dist(a.position_m, b.position_m)
        rabi = max((d.max_rabi_hz for d in program.rig.drives.values()
                    if d.kind == "rydberg" and d.species in (a.species, b.species)), default=1e6)
        rows.append({"pair": f"{a.name}-{b.name}", "levels": f"{sa.rydberg.label} + {sb.rydberg.label}",
                     "distance_m": distance, "c6_hz_m6": c6.c6_hz_m6,
                     "interaction_hz": rydberg.interaction_hz(c6, distance),
                     "blockade_radius_m": rydberg.blockade_radius_m(c6, rabi), "rabi_hz": rabi,
                     "near_forster": bool(c6.near_forster)})
    return rows


def pair_table(program: Program) -> str:
    """Interaction C6/R⁶ and blockade radius of every pair of Rydberg-capable sites."""
    lines = []
    for r in pair_rows(program):
        flag = "  near a Förster resonance: C6 not to be trusted" if r["near_forster"] else ""
        lines.append(f"{r['pair']}: R = {_f(r['distance_m'], units.LENGTH)}, "
                     f"C6/h = {r['c6_hz_m6'] * 1e27:.4g} GHz·µm⁶, "
                     f"V/h = {_f(r['interaction_hz'], units.FREQUENCY)}, "
                     f"blockade radius {_f(r['blockade_radius_m'], units.LENGTH)} at "
                     f"{_f(r['rabi_hz'], units.FREQUENCY)}{flag}")
    return "\n".join(lines)


def decision_summary(checked: Checked) -> str:
    """The decision points: per conditioned event its record, keys, and when the key is needed."""
    from .compile.decisions import RecordWriters, issue_time, ready_time, variant_of
    timeline, program = checked.quantized, checked.program
    lines, writers = [], RecordWriters(timeline)
    for e in timeline.conditioned():
        sel, image = e.decision.selection, writers.of(e)
        plays = [k for k in sel.keys if variant_of(e, k) is not None]
        slack = issue_time(program, e) - ready_time(program, image) if image is not None else 0.0
        lines.append(f"  #{e.index} {e.kind} {e.drive or e.port} (line {e.span.line}) looked up by "
                     f"{'outcome of' if len(sel.sites) == 1 else 'bright count of'} {sel.label()}: plays for keys "
                     f"{', '.join(map(str, plays)) or 'none'} of 0..{len(sel.sites)}; key ready "
                     f"{_f(slack, units.DURATION)} before the event is issued")
        if image is not None and e.kind == "pulse" and e.species == image.species \
                and set(e.targets) & set(image.targets):
            lines.append(f"    note: acts on `{e.species}` atoms that the imaging on line {image.span.line} "
                         "projected: they are in |0> or |1> (or lost), so this pulse acts on the measured "
                         "state (e.g. a reset or re-preparation), not on a superposition")
    return "decision points (feed-forward):\n" + "\n".join(lines) if lines else ""
