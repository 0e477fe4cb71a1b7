"""The rig change a fit implies: one property's new value, as a diff of the rig file.

A Rabi fit of a drive's scan calibrates the drive's `rabi` (the fitted oscillation
frequency is Ω/2π: P = (1 − cos Ωt)/2, Rabi formula); a Ramsey fit calibrates a
species' `t2_star`. The value is replaced in the rig's text where the parser found
it (other lines untouched); written only on request, atomically, the old file kept.
"""
from __future__ import annotations

import difflib
import os
import shutil
from dataclasses import dataclass

from ..lang import syntax as ast
from ..lang import units
from ..lang.parser import parse_text

# model → (owner kind, rig property, fitted parameter, dimension of the property, unit of x → value)
RULES = {"rabi": ("drive", "rabi", "frequency", units.FREQUENCY),
         "ramsey": ("species", "t2_star", "t2", units.DURATION)}


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

    def describe(self) -> str:
        was = f"{self.old}" if self.old is not None else "not set"
        return f"{self.owner} {self.key}: {was} -> {self.new} (± {self.error}, 1 sigma from the fit)"


def proposal(document: dict, rig_path: str, drive: str | None = None, species: str | None = None,
             record: str | None = None) -> Change:
    fit = _pick_fit(document, record)
    kind, key, parameter, dim = RULES.get(fit["model"], (None,) * 4)
    if kind is None:
        raise ValueError(f"a {fit['model']} fit calibrates nothing in the rig yet (rabi: a drive's `rabi`; "
                         "ramsey: a species' `t2_star`)")
    owner = drive if kind == "drive" else species
    if owner is None:
        raise ValueError(f"a {fit['model']} fit calibrates a {kind}: name it with --{kind}")
    si = _to_si(fit["values"][parameter], document["si_factor"], dim)
    if fit["errors"].get(parameter) is None:
        raise ValueError(f"the fit left `{parameter}` without an uncertainty (the likelihood is flat there): "
                         "nothing to calibrate from")
    error = _to_si(fit["errors"][parameter], document["si_factor"], dim)
    with open(rig_path, encoding="utf-8") as handle:
        text = handle.read()
    new_value = units.format_quantity(si, dim)
    changed, old = _replace(text, rig_path, kind, owner, key, new_value)
    diff = "".join(difflib.unified_diff(text.splitlines(True), changed.splitlines(True), rig_path,
                                        rig_path + " (calibrated)"))
    return Change(rig_path, f"{kind} `{owner}`", key, old, new_value, units.format_quantity(error, dim),
                  changed, diff)


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


def _to_si(value: float, si_factor: float, dim) -> float:
    """x was in units of si_factor seconds: a frequency in 1/x, a time in x."""
    return value / si_factor if dim == units.FREQUENCY else value * si_factor


def _replace(text: str, path: str, kind: str, owner: str, key: str, value: str) -> tuple[str, str | None]:
    rig = next((i for i in parse_text(text, path).items if isinstance(i, ast.RigDef)), None)
    if rig is None:
        raise ValueError(f"{path} holds no rig")
    decls = {d.name.name: d for d in (rig.drives if kind == "drive" else rig.species)}
    if owner not in decls:
        raise ValueError(f"no {kind} `{owner}` in {path}")
    decl = decls[owner]
    prop = next((p for p in decl.props if p.key.name == key), None)
    if prop is None:  # insert before the declaration's closing brace
        end = decl.span.end - 1
        return text[:end].rstrip(" ") + f"  {key} {value}\n  " + text[end:].lstrip(" "), None
    start, end = prop.value.span.start, prop.value.span.end
    return text[:start] + value + text[end:], text[start:end]


def apply(change: Change) -> str:
    """Write the changed rig atomically; keep the old file beside it. Returns the kept name."""
    from ..emit.atomic import write_text
    kept, n = change.path + ".orig", 1
    while os.path.exists(kept):
        kept, n = f"{change.path}.orig.{n}", n + 1
    shutil.copy2(change.path, kept)
    write_text(change.path, change.text)
    return kept
