"""`lattice` declarations → sites, a group per lattice, and the `d[3, 4]` references.

A lattice is a named set of sites: generated (`lattice d = square { ... }`) or read
from the trap-pattern file of the lab (`lattice t from "traps.csv"`). Each of its
sites is an ordinary `Site` named ``d[3,4]``; the lattice's own name is a group of
all of them. :func:`expand_refs` then rewrites every ``d[...]`` of the syntax tree
into the names of the sites it selects, so no later pass knows about indices.
"""
from __future__ import annotations

import csv
import dataclasses
import hashlib
import io
import math

from ..arrays import lattice as lat
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import SOURCES, Diagnostic, Span, did_you_mean, error
from . import includes
from . import props as p
from .evaluate import EvalError, Scope, evaluate, evaluate_any, expect_kind, within_reach
from .model import Layout, Rig, Site

CSV_COLUMNS = ("x", "y", "species", "name")


def _pitch(expr: ast.Expr, scope: Scope) -> tuple[float, float]:
    value = evaluate_any(expr, scope)
    values = value if isinstance(value, tuple) else (value, value)
    if len(values) != 2:
        raise EvalError(error("expected one pitch, or two for x and y such as `(5, 6) um`", expr.span))
    pitch = tuple(expect_kind(q, units.LENGTH, expr.span) for q in values)
    if not min(pitch) > 0 or not all(math.isfinite(q) for q in pitch):
        raise EvalError(error("the pitch must be positive and finite", expr.span))
    return pitch


def _size(expr: ast.Expr, scope: Scope) -> tuple[int, int]:
    value = evaluate_any(expr, scope)
    if not isinstance(value, tuple) or len(value) != 2:
        raise EvalError(error("expected a size in cells along x and y, such as `(12, 10)`", expr.span))
    size = tuple(expect_kind(q, units.DIMENSIONLESS, expr.span) for q in value)
    if any(not math.isfinite(n) or n != int(n) or n < 1 for n in size):
        raise EvalError(error("expected whole numbers of at least 1, such as `(12, 10)`", expr.span))
    cells = size[0] * size[1]  # 1e308 squared is inf: said in words, never passed to int()
    if cells > lat.MAX_SITES:
        counted = f"{cells:,.0f}" if math.isfinite(cells) else "more than 10^308"
        raise EvalError(error(f"{counted} cells; a lattice may have at most "
                              f"{lat.MAX_SITES:,}", expr.span))
    return (int(size[0]), int(size[1]))


def _origin(expr: ast.Expr, scope: Scope) -> tuple[float, float, float]:
    value = evaluate_any(expr, scope)
    if not isinstance(value, tuple) or len(value) not in (2, 3):
        raise EvalError(error("expected coordinates such as `(0, 0) um`", expr.span))
    coords = [expect_kind(q, units.LENGTH, expr.span) for q in value]
    return tuple(coords + [0.0] * (3 - len(coords)))


def _species_names(expr: ast.Expr, scope: Scope) -> tuple[ast.NameRef, ...]:
    items = expr.items if isinstance(expr, ast.TupleExpr) else (expr,)
    if not all(isinstance(i, ast.NameRef) for i in items) or len(items) > 2:
        raise EvalError(error("expected one species, or two such as `(na, cs)`", expr.span))
    return tuple(items)


LATTICE_KEYS = {
    "pitch": p.Key(_pitch, (5e-6, 5e-6), required=True,
                   doc="nearest-neighbour distance, e.g. `pitch 5 um` (rectangular: `(5, 6) um`)"),
    "size": p.Key(_size, (1, 1), required=True, doc="cells along x and y, e.g. `size (12, 10)`"),
    "origin": p.Key(_origin, (0.0, 0.0, 0.0), doc="where site [0, 0] sits"),
    "rotation": p.Key(p.angle, 0.0, doc="rotation of the lattice about its origin"),
    "species": p.Key(_species_names, (), required=True, doc="the species it holds, e.g. `species (na, cs)`"),
    "pattern": p.Key(p.choice(*lat.PATTERNS), None, doc="how two species interleave"),
}
FILE_KEYS = {
    "unit": p.Key(p.positive(p.length, "unit"), 1e-6, doc="unit of the file's x and y (default 1 um)"),
    "origin": p.Key(_origin, (0.0, 0.0, 0.0), doc="shift of every position"),
    "rotation": p.Key(p.angle, 0.0, doc="rotation about the file's (0, 0)"),
}


def resolve_layouts(source: ast.SourceFile, rig: Rig, scope: Scope, taken: set[str], diags: list[Diagnostic],
                    hashes: dict[str, str]) -> tuple[dict[str, Layout], dict[str, Site]]:
    """Every `lattice` of the file: its layout and its sites (names in `taken` are refused)."""
    layouts: dict[str, Layout] = {}
    sites: dict[str, Site] = {}
    for decl in (i for i in source.items if isinstance(i, (ast.LatticeDecl, ast.LatticeFile))):
        name = decl.name.name
        if name in taken or name in layouts:
            diags.append(error(f"`{name}` is already a site, group or lattice name", decl.name.span))
            continue
        if name in units.UNITS:
            diags.append(error(f"`{name}` is a unit and cannot be a lattice's name", decl.name.span))
            continue
        made = _generated(decl, rig, scope, diags) if isinstance(decl, ast.LatticeDecl) \
            else _from_file(decl, source.path, rig, scope, diags, hashes)
        if made is None:
            continue
        layout, new = made
        clash = next((s for s in new if s.name in sites or s.name in taken), None)
        if clash is not None:
            diags.append(error(f"site `{clash.name}` of this lattice is already declared", decl.span))
            continue
        layouts[name] = layout
        sites.update((s.name, s) for s in new)
    return layouts, sites


def _in_reach(positions, decl, diags: list[Diagnostic]) -> bool:
    """Every trap within reach of the origin (see evaluate.within_reach); else an error at the lattice."""
    try:
        within_reach(positions.ravel().tolist(), decl.span, f"a trap of lattice `{decl.name.name}`")
    except EvalError as exc:
        diags.append(exc.diagnostic)
        return False
    return True


def _generated(decl: ast.LatticeDecl, rig: Rig, scope: Scope, diags: list[Diagnostic]):
    kind = decl.kind.name
    if kind not in lat.KINDS:
        diags.append(error(f"unknown lattice kind `{kind}`", decl.kind.span,
                           did_you_mean(kind, lat.KINDS) or f"known: {', '.join(lat.KINDS)}"))
        return None
    count = len(diags)
    v = p.read_props(decl.props, LATTICE_KEYS, scope, "a lattice", decl.span, diags)
    species = _species(v["species"], v["pattern"], decl, rig, diags)
    pitch = _checked_pitch(kind, v, rig, decl, diags)
    if len(diags) > count or species is None or pitch is None:
        return None
    index = lat.indices(kind, v["size"])
    positions = lat.place(lat.local_positions(kind, pitch, index), v["origin"], v["rotation"])
    if not _in_reach(positions, decl, diags):
        return None
    which = lat.species_pattern(v["pattern"] or "uniform", index)
    names = [lat.site_name(decl.name.name, k) for k in index.tolist()]
    sites = [Site(n, species[w], (float(x), float(y), float(z)), decl.span)
             for n, w, (x, y, z) in zip(names, which.tolist(), positions.tolist())]
    size = v["size"] + ((2,) if kind == "hexagonal" else ())
    layout = Layout(decl.name.name, kind, pitch, size, v["origin"], v["rotation"], tuple(names),
                    dict(zip(map(tuple, index.tolist()), names)), decl.span)
    return layout, sites


def _species(refs, pattern, decl, rig: Rig, diags: list[Diagnostic]) -> tuple[str, ...] | None:
    names = tuple(r.name for r in refs)
    for ref in refs:
        if ref.name not in rig.species:
            diags.append(error(f"unknown species `{ref.name}`", ref.span, did_you_mean(ref.name, rig.species)))
            return None
    where = next((q.key.span for q in decl.props if q.key_name == "species"), decl.span)
    if len(names) == 2 and pattern in (None, "uniform"):
        diags.append(error("two species need a `pattern` saying how they interleave", where,
                           "add `pattern checkerboard` (or rows, columns, sublattice)"))
        return None
    if len(names) == 1 and pattern not in (None, "uniform"):
        diags.append(error(f"the pattern `{pattern}` interleaves two species; one is given", where,
                           "list two, e.g. `species (na, cs)`"))
        return None
    return names if len(names) == 2 else names * 2 if names else None


def _checked_pitch(kind: str, v: dict, rig: Rig, decl, diags: list[Diagnostic]):
    pitch = v["pitch"]
    where = v["__spans__"].get("pitch", decl.span)
    if kind != "rectangular" and pitch[0] != pitch[1]:
        diags.append(error(f"a {kind} lattice has one pitch", where, "use `rectangular` for two"))
        return None
    nearest = min(pitch)
    if nearest < rig.min_spacing_m:
        diags.append(error(f"the pitch {nearest * 1e6:.4g} um is below the rig's minimum spacing "
                           f"{rig.min_spacing_m * 1e6:.4g} um", where, "widen the pitch, or set `min_spacing`"))
        return None
    return pitch


# ---------------------------------------------------------------- positions from a file
def _from_file(decl: ast.LatticeFile, main: str, rig: Rig, scope: Scope, diags: list[Diagnostic],
               hashes: dict[str, str]):
    import numpy as np
    import os
    target = os.path.normpath(os.path.join(os.path.dirname(main), decl.path))
    refusal = includes.refusal(main, decl.path, target, (".csv",))
    if refusal:
        diags.append(error(refusal, decl.path_span))
        return None
    try:
        raw = includes.read_source(target)
        text = raw.decode("utf-8-sig")
    except includes.FileRefused as exc:
        diags.append(error(str(exc), decl.path_span))
        return None
    except (OSError, ValueError) as exc:
        diags.append(error(f"cannot read `{decl.path}`: {getattr(exc, 'strerror', None) or exc}", decl.path_span))
        return None
    hashes[target] = hashlib.sha256(raw).hexdigest()
    SOURCES.add(target, text)
    v = p.read_props(decl.props, FILE_KEYS, scope, "a lattice file", decl.span, diags)
    rows = read_csv(text, target, rig, v["unit"], diags)
    if rows is None:
        return None
    local = np.array([[r[0], r[1]] for r in rows], dtype=float).reshape(-1, 2)
    positions = lat.place(local, v["origin"], v["rotation"])
    if not _in_reach(positions, decl, diags):
        return None
    sites = [Site(r[3], r[2], (float(x), float(y), float(z)), decl.span)
             for r, (x, y, z) in zip(rows, positions.tolist())]
    names = tuple(s.name for s in sites)
    layout = Layout(decl.name.name, "file", (0.0, 0.0), (len(rows),), v["origin"], v["rotation"], names,
                    {(k,): n for k, n in enumerate(names)}, decl.span)
    return layout, sites


def read_csv(text: str, path: str, rig: Rig, unit: float, diags: list[Diagnostic]):
    """Rows (x, y, species, name) in metres; every bad row reported at its file:line:col."""
    lines = text.splitlines()
    header_at = next((k for k, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")), None)
    if header_at is None:
        diags.append(error("the file holds no header line `x,y,species,name`", Span(path, 1, 1, 1, 1)))
        return None
    header = [h.strip().lower() for h in next(csv.reader([lines[header_at]]))]
    missing = [c for c in CSV_COLUMNS if c not in header]
    if missing:
        diags.append(error(f"the header lacks the column{'s' if len(missing) > 1 else ''} "
                           f"{', '.join(missing)}; expected `x,y,species,name`",
                           _cell_span(path, header_at + 1, lines[header_at], 0, len(lines[header_at]))))
        return None
    column = {c: header.index(c) for c in CSV_COLUMNS}
    rows, seen, count = [], {}, len(diags)
    for number, line in enumerate(lines[header_at + 1:], start=header_at + 2):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        row = _csv_row(line, number, path, column, rig, unit, seen, diags)
        if row is not None:
            rows.append(row)
    if len(diags) > count:
        return None
    if not rows:
        diags.append(error("the file lists no sites", Span(path, header_at + 1, 1, header_at + 1, 2)))
        return None
    return rows


def _cells(line: str) -> list[tuple[str, int, int]]:
    """(text, start column offset, end offset) of each comma-separated cell (no quoting)."""
    out, start = [], 0
    for part in line.split(","):
        lead = len(part) - len(part.lstrip())
        out.append((part.strip(), start + lead, start + lead + len(part.strip())))
        start += len(part) + 1
    return out


def _cell_span(path: str, number: int, line: str, begin: int, end: int) -> Span:
    end = max(end, begin + 1)
    return Span(path, number, begin + 1, number, end + 1, 0, 0)


def _csv_row(line, number, path, column, rig: Rig, unit, seen, diags):
    cells = _cells(line)
    if len(cells) < len(column) or len(cells) <= max(column.values()):
        diags.append(error(f"expected {max(column.values()) + 1} comma-separated values (x,y,species,name), "
                           f"found {len(cells)}", _cell_span(path, number, line, 0, len(line))))
        return None
    def at(key):
        text, begin, end = cells[column[key]]
        return text, _cell_span(path, number, line, begin, end)
    values = []
    for key in ("x", "y"):
        text, span = at(key)
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        if not math.isfinite(value):
            diags.append(error(f"expected a number for {key}, got `{text}`", span))
            return None
        values.append(value * unit)
    species, species_span = at("species")
    if species not in rig.species:
        diags.append(error(f"unknown species `{species}`", species_span, did_you_mean(species, rig.species)))
        return None
    name, name_span = at("name")
    if not name.isidentifier() or not name.isascii() or name in units.UNITS:
        diags.append(error(f"`{name}` is not a usable site name (letters, digits, _; not a unit)", name_span))
        return None
    if name in seen:
        diags.append(error(f"site `{name}` is listed twice (first on line {seen[name]})", name_span))
        return None
    seen[name] = number
    return (values[0], values[1], species, name)


# ---------------------------------------------------------------- d[3, 4] in the syntax tree
def expand_refs(node, layouts: dict[str, Layout], scope: Scope, diags: list[Diagnostic]):
    """The node with every ``d[...]`` replaced by the names of the sites it selects."""
    return _Expander(layouts, scope, diags).walk(node)


class _Expander:
    def __init__(self, layouts, scope, diags):
        self.layouts, self.scope, self.diags = layouts, scope, diags

    def walk(self, node):
        if isinstance(node, (Span, str, int, float, type(None))):
            return node
        if isinstance(node, tuple):
            return self._tuple(node)
        if not dataclasses.is_dataclass(node):
            return node
        changes = {}
        for f in dataclasses.fields(node):
            value = getattr(node, f.name)
            new = self.walk(value)
            if new is not value:
                changes[f.name] = new
        return dataclasses.replace(node, **changes) if changes else node

    def _tuple(self, items: tuple):
        out, changed = [], False
        for item in items:
            if isinstance(item, ast.Indexed):
                out.extend(ast.Ident(n, item.span) for n in self.select(item))
                changed = True
                continue
            new = self.walk(item)
            changed |= new is not item
            out.append(new)
        return tuple(out) if changed else items

    def select(self, ref: ast.Indexed) -> list[str]:
        """Site names of one reference, in the lattice's order."""
        layout = self.layouts.get(ref.name.name)
        if layout is None:
            self.diags.append(error(f"`{ref.name.name}` is not a lattice: only a lattice's sites have indices",
                                    ref.name.span, did_you_mean(ref.name.name, self.layouts)))
            return []
        if len(ref.indices) > len(layout.size):
            self.diags.append(error(f"lattice `{layout.name}` has {len(layout.size)} "
                                    f"ind{'ex' if len(layout.size) == 1 else 'ices'}, "
                                    f"{len(ref.indices)} are given", ref.span, _index_hint(layout)))
            return []
        try:
            ranges = [self._range(ix, n, layout, axis) for axis, (ix, n) in enumerate(zip(ref.indices, layout.size))]
        except EvalError as exc:
            self.diags.append(exc.diagnostic)
            return []
        ranges += [range(n) for n in layout.size[len(ranges):]]
        if all(len(r) == 1 for r in ranges):
            name = layout.index.get(tuple(r[0] for r in ranges))
            return [name] if name else []
        return [n for k, n in layout.index.items() if _inside(k, ranges)]

    def _range(self, ix, size: int, layout: Layout, axis: int) -> range:
        if ix is None:
            return range(size)
        if isinstance(ix, tuple):
            low, high = (self._integer(e, size, layout, axis) for e in ix)
            if low > high:
                raise EvalError(error(f"the slice runs backwards ({low} .. {high})", ix[0].span,
                                      f"write `{high} .. {low}`"))
            return range(low, high + 1)
        k = self._integer(ix, size, layout, axis)
        return range(k, k + 1)

    def _integer(self, expr, size: int, layout: Layout, axis: int) -> int:
        value = expect_kind(evaluate(expr, self.scope), units.DIMENSIONLESS, expr.span)
        if not math.isfinite(value) or value != int(value):
            raise EvalError(error(f"an index is a whole number, got {value:g}", expr.span))
        if not 0 <= value < size:
            raise EvalError(error(f"index {int(value)} is outside lattice `{layout.name}`: "
                                  f"{_axis_name(layout, axis)} runs from 0 to {size - 1}", expr.span))
        return int(value)


def _inside(key: tuple, ranges: list[range]) -> bool:
    return all(k in r for k, r in zip(key, ranges))


def _axis_name(layout: Layout, axis: int) -> str:
    if layout.kind == "file":
        return "the row index"
    return ("i (along x)", "j (along y)", "k (the honeycomb's sub-lattice)")[axis]


def _index_hint(layout: Layout) -> str:
    return "write `" + layout.name + "[" + ", ".join(["0"] * len(layout.size)) + "]`"
