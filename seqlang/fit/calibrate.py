"""The rig change a fit implies: one property's new value, as a diff of the rig file.

* a Rabi fit of a drive's scan calibrates the drive's `rabi` (the fitted oscillation
  frequency is Ω/2π: P = (1 − cos Ωt)/2, Rabi formula);
* a Ramsey fit calibrates a species' `t2_star`;
* a resonance fit of a detuning scan calibrates the drive's `line_offset`: the line
  was found at the fitted centre of the written detuning, so the new offset is the
  old one plus the centre (the tables then play detuning + offset, and a written
  detuning 0 sits on the line);
* a blockade-versus-distance fit gives C6 from the crossover, C6/h = (Ω/2π)·R_b⁶
  (R_b = (C6/hΩ)^(1/6), common practice), with Ω the drive's `rabi` in the rig.
  The rig takes C6 from the atomic data, so this is reported beside that value,
  never written.

The value is replaced in the rig's text where the parser found it (other lines
untouched); written only on request, atomically, the old file kept.
"""
from __future__ import annotations

import difflib
import os
import shutil
from dataclasses import dataclass

from ..lang import syntax as ast
from ..lang import units
from ..lang.parser import parse_text


@dataclass(frozen=True)
class Rule:
    """How a fitted parameter becomes a rig property."""

    owner: str  # `drive` or `species`
    key: str  # the rig property
    parameter: str  # the fitted parameter
    dim: tuple  # the property's dimension
    per_x: bool  # the parameter is in 1/(x's unit) (a frequency from a time scan), else in x's unit
    added: bool = False  # the new value is the old one plus the fitted parameter


RULES = {"rabi": Rule("drive", "rabi", "frequency", units.FREQUENCY, per_x=True),
         "ramsey": Rule("species", "t2_star", "t2", units.DURATION, per_x=False),
         "resonance": Rule("drive", "line_offset", "centre", units.FREQUENCY, per_x=False, added=True)}
SCANNED = {"rabi": units.DURATION, "ramsey": units.DURATION, "resonance": units.FREQUENCY,
           "blockade": units.LENGTH}  # what each curve's scan must vary
HZ_UM6 = 1e-36  # C6/h in Hz·µm⁶ → Hz·m⁶


@dataclass(frozen=True)
class Change:
    """A proposed rig change."""

    path: str
    owner: str
    key: str
    old: str | None
    new: str
    error: str
    text: str
    diff: str
    note: str = ""

    def describe(self) -> str:
        was = f"{self.old}" if self.old is not None else "not set"
        line = f"{self.owner} {self.key}: {was} -> {self.new} (± {self.error}, 1 sigma from the fit)"
        return line + (f"\n{self.note}" if self.note else "")


def proposal(document: dict, rig_path: str, drive: str | None = None, species: str | None = None,
             record: str | None = None) -> Change:
    """The change of `rig_path` that the fit in `document` (a fit.json) implies."""
    fit = _pick_fit(document, record)
    rule = RULES.get(fit["model"])
    if rule is None:
        raise ValueError(f"a {fit['model']} fit calibrates nothing in the rig (rabi: a drive's `rabi`; ramsey: "
                         "a species' `t2_star`; resonance: a drive's `line_offset`; blockade: reports C6)")
    _check_scan(document, fit["model"])
    owner = drive if rule.owner == "drive" else species
    if owner is None:
        raise ValueError(f"a {fit['model']} fit calibrates a {rule.owner}: name it with --{rule.owner}")
    value, error = _fitted(fit, rule.parameter, document["si_factor"], rule.per_x)
    with open(rig_path, encoding="utf-8") as handle:
        text = handle.read()
    note = ""
    if rule.added:
        old_si = _resolved(rig_path, rule.owner, owner).extra.get(rule.key, 0.0)
        note = (f"(the line was found at {units.format_quantity(value, rule.dim)} of written detuning; "
                f"the new offset is the old {units.format_quantity(old_si, rule.dim)} plus that)")
        value += old_si
    new_value = units.format_quantity(value, rule.dim)
    changed, old = _replace(text, rig_path, rule.owner, owner, rule.key, new_value)
    diff = "".join(difflib.unified_diff(text.splitlines(True), changed.splitlines(True), rig_path,
                                        rig_path + " (calibrated)"))
    return Change(rig_path, f"{rule.owner} `{owner}`", rule.key, old, new_value,
                  units.format_quantity(error, rule.dim), changed, diff, note)


def blockade_c6(document: dict, rig_path: str, drive: str, record: str | None = None) -> str:
    """C6 from the crossover radius of a blockade fit and the drive's Rabi frequency, in words."""
    fit = _pick_fit(document, record)
    _check_scan(document, "blockade")
    radius, error = _fitted(fit, "radius", document["si_factor"], per_x=False)
    rabi_hz = _resolved(rig_path, "drive", drive).max_rabi_hz
    c6 = rabi_hz * radius ** 6
    return (f"blockade crossover R_b = {units.format_quantity(radius, units.LENGTH)} ± "
            f"{units.format_quantity(error, units.LENGTH)}: with Ω/2π = {units.format_quantity(rabi_hz, units.FREQUENCY)} "
            f"(`{drive}` in the rig), C6/h = (Ω/2π)·R_b⁶ = {c6 / HZ_UM6 / 1e9:.4g} ± "
            f"{6 * c6 * error / radius / HZ_UM6 / 1e9:.2g} GHz·um^6 (1 sigma from R_b alone; R_b = (C6/hΩ)^(1/6), "
            "common practice). The rig takes C6 from the atomic data: compare, nothing is written.")


def _pick_fit(document: dict, record: str | None) -> dict:
    fitted = {r: e["fit"] for r, e in document["records"].items() if "fit" in e}
    if not fitted:
        raise ValueError("the fit file holds no fit: run `seqlang fit ... --model rabi` first")
    if record is None:
        if len(fitted) > 1:
            raise ValueError(f"several records were fitted ({', '.join(fitted)}): choose one with --record")
        return next(iter(fitted.values()))
    if record not in fitted:
        raise ValueError(f"no fit of record `{record}`; fitted: {', '.join(fitted)}")
    return fitted[record]


def _check_scan(document: dict, model: str) -> None:
    unit = document.get("unit") or ""
    dim = units.UNITS[unit][1] if unit in units.UNITS else units.DIMENSIONLESS
    if model in SCANNED and dim != SCANNED[model]:
        raise ValueError(f"a {model} fit calibrates from a scan of a {_kind(SCANNED[model])}; this scan of "
                         f"`{document.get('parameter')}` is in [{unit or 'no unit'}]")


def _kind(dim) -> str:
    return {units.DURATION: "duration", units.FREQUENCY: "frequency", units.LENGTH: "distance"}.get(dim, "value")


def _fitted(fit: dict, parameter: str, si_factor: float, per_x: bool) -> tuple[float, float]:
    """The fitted value and its 1σ in SI: x was in units of si_factor (seconds, Hz, metres)."""
    if fit["errors"].get(parameter) is None:
        raise ValueError(f"the fit left `{parameter}` without an uncertainty (the likelihood is flat there): "
                         "nothing to calibrate from")
    scale = 1 / si_factor if per_x else si_factor
    return fit["values"][parameter] * scale, fit["errors"][parameter] * scale


def _resolved(rig_path: str, kind: str, owner: str):
    """The resolved drive or species `owner` of the rig file (for its current values)."""
    from ..program.resolve import resolve
    folder, name = os.path.split(os.path.abspath(rig_path))
    probe = os.path.join(folder, "__calibrate__.seq")
    program, _ = resolve(probe, {probe: f'use "{name}"\nsequence calibrate {{\n}}\n'})
    found = (program.rig.drives if kind == "drive" else program.rig.species).get(owner)
    if found is None:
        raise ValueError(f"no {kind} `{owner}` in {rig_path}")
    return found


def _replace(text: str, path: str, kind: str, owner: str, key: str, value: str) -> tuple[str, str | None]:
    rig = next((i for i in parse_text(text, path).items if isinstance(i, ast.RigDef)), None)
    if rig is None:
        raise ValueError(f"{path} holds no rig")
    decls = {d.name.name: d for d in (rig.drives if kind == "drive" else rig.species)}
    if owner not in decls:
        raise ValueError(f"no {kind} `{owner}` in {path}")
    decl = decls[owner]
    prop = next((p for p in decl.props if p.key_name == key), None)
    if prop is None:
        return _insert(text, decl, f"{key} {value}"), None
    start, end = prop.value.span.start, prop.value.span.end
    return text[:start] + value + text[end:], text[start:end]


def _insert(text: str, decl, item: str) -> str:
    """`item` added as the declaration's last property: on a line of its own, indented like the
    others, or before the `}` of a one-line declaration."""
    brace = decl.span.end - 1
    line_start = text.rfind("\n", 0, brace) + 1
    if text[line_start:brace].strip():  # `{ ... }` on one line
        return text[:brace].rstrip(" ") + f"  {item} " + text[brace:]
    indent = " " * (decl.props[-1].key.span.column - 1) if decl.props else text[line_start:brace] + "  "
    return text[:line_start] + indent + item + "\n" + text[line_start:]


def apply(change: Change) -> str:
    """Write the changed rig atomically; keep the old file beside it. Returns the kept name."""
    from ..emit.atomic import write_text
    kept, n = change.path + ".orig", 1
    while os.path.exists(kept):
        kept, n = f"{change.path}.orig.{n}", n + 1
    shutil.copy2(change.path, kept)
    write_text(change.path, change.text)
    return kept
