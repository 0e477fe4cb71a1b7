"""`seqlang show`: the timeline as a readable table, and the atom pairs."""
from __future__ import annotations

import itertools
import math

from .compile.pipeline import Checked
from .lang import units
from .program.model import Program


def _f(value: float, dim) -> str:
    return units.format_quantity(value, dim)


def timeline_table(checked: Checked) -> str:
    """One line per event of the played timeline."""
    head = f"{'#':>4}  {'start':>12}  {'duration':>11}  {'kind':<7} {'drive/port':<12} {'targets':<10} " \
           f"{'rabi':>11}  {'detuning':>11}  {'phase':>8}  {'area':>9}  {'shape':<9} line"
    lines = [head, "-" * len(head)]
    for e in checked.quantized.events:
        who = e.drive or e.port
        rabi = _f(e.rabi_hz, units.FREQUENCY) if e.kind == "pulse" else ""
        det = _f(e.detuning_hz, units.FREQUENCY) if e.kind == "pulse" else ""
        phase = f"{e.phase_rad:.4f}" if e.kind == "pulse" else ""
        area = f"{e.area_rad / math.pi:.5f}pi" if e.kind == "pulse" else ""
        shape = e.shape.kind if e.kind == "pulse" else (e.record or "")
        lines.append(f"{e.index:>4}  {_f(e.start_s, units.DURATION):>12}  {_f(e.duration_s, units.DURATION):>11}  "
                     f"{e.kind:<7} {who:<12} {','.join(e.targets):<10} {rabi:>11}  {det:>11}  {phase:>8}  "
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


def pair_table(program: Program) -> str:
    """Interaction C6/R⁶ and blockade radius of every pair of Rydberg-capable sites."""
    from .atoms import rydberg
    rows = []
    sites = [s for s in program.sites.values() if program.rig.species[s.species].rydberg is not None]
    for a, b in itertools.combinations(sites, 2):
        sa, sb = program.rig.species[a.species], program.rig.species[b.species]
        c6 = rydberg.c6_hz_m6(sa.data, sa.rydberg, sb.data, sb.rydberg)
        distance = math.dist(a.position_m, b.position_m)
        rabi = max((d.max_rabi_hz for d in program.rig.drives.values()
                    if d.kind == "rydberg" and d.species in (a.species, b.species)), default=1e6)
        radius = rydberg.blockade_radius_m(c6, rabi)
        flag = "  near a Förster resonance: C6 not to be trusted" if c6.near_forster else ""
        rows.append(f"{a.name}-{b.name}: R = {_f(distance, units.LENGTH)}, C6/h = {c6.c6_hz_m6 * 1e27:.4g} GHz·um^6, "
                    f"V/h = {_f(rydberg.interaction_hz(c6, distance), units.FREQUENCY)}, "
                    f"blockade radius {_f(radius, units.LENGTH)} at {_f(rabi, units.FREQUENCY)}{flag}")
    return "\n".join(rows)
