"""Resolve a sequence file (with its rig and imports) into a checked Program.

Every unknown name, wrong species, unit mismatch and limit violation found
here is collected; :func:`resolve` raises one :class:`SeqlangError` carrying
them all. Warnings are returned beside the program.
"""
from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field
from typing import Mapping

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import ERROR, SOURCES, Diagnostic, SeqlangError, Span, did_you_mean, error
from ..lang.parser import parse_text
from . import includes
from .evaluate import EvalError, Scope, evaluate, evaluate_any, expect_kind, within_reach
from .model import Expectation, Program, Rig, SerialOp, Site
from .scans import bind_free, bind_point, override_rig, resolve_free, resolve_scans
from .layouts import expand_refs, resolve_layouts
from .sequence import SequenceResolver

BELL_STATES = ("phi_plus", "phi_minus", "psi_plus", "psi_minus")
MAX_IMPORT_DEPTH = 20


@dataclass
class Loaded:
    """Parsed files of one program: the main file, its rig file and imports."""

    main: ast.SourceFile
    rig: ast.RigDef | None = None
    rig_path: str | None = None
    imports: list[ast.SourceFile] = field(default_factory=list)
    hashes: dict[str, str] = field(default_factory=dict)
    sources: Mapping[str, str] = field(default_factory=dict)


def resolve(path: str, sources: Mapping[str, str] | None = None,
            point: int | None = None) -> tuple[Program, list[Diagnostic]]:
    """Parse, resolve and check the sequence file at `path` (warnings returned).

    `sources` maps paths to texts that replace the files on disk (an editor's
    unsaved buffers); paths are matched as the resolver forms them. A file with
    scans is resolved at scan point `point` (default: the first point).
    """
    return resolve_point(load_files(path, sources), point)


def load_files(path: str, sources: Mapping[str, str] | None = None) -> Loaded:
    """Read and parse a program's files once, so that scan points re-use them."""
    return _load(path, [], sources or {})


def resolve_point(loaded: Loaded, point: int | None = None,
                  free: dict[str, float] | None = None) -> tuple[Program, list[Diagnostic]]:
    """Resolve parsed files at one scan point (an index; None for the first point), with the
    `free` values given (SI; the others at their start)."""
    diags: list[Diagnostic] = []
    failed: set[str] = set()
    program = _resolve_loaded(loaded, diags, failed, point or 0, free)
    diags = _without_knock_ons(diags, failed)
    errors = [d for d in diags if d.severity == ERROR]
    if errors or program is None:
        raise SeqlangError(diags)
    return program, diags


def _read(path: str, span: Span | None, hashes: dict[str, str], diags: list[Diagnostic],
          sources: Mapping[str, str]) -> ast.SourceFile | None:
    try:
        raw = sources[path].encode("utf-8") if path in sources else _read_bytes(path)
    except includes.FileRefused as exc:
        diags.append(error(str(exc), span or Span(path, 1, 1, 1, 1)))
        return None
    except ValueError:  # a path holding a null byte
        diags.append(error("this file name holds a character that no file name can hold",
                           span or Span(path, 1, 1, 1, 1)))
        return None
    except OSError as exc:
        where = span or Span(path, 1, 1, 1, 1)
        diags.append(error(f"cannot read `{path}`: {exc.strerror or exc}", where))
        return None
    hashes[path] = hashlib.sha256(raw).hexdigest()
    try:
        return parse_text(raw.decode("utf-8"), path)
    except UnicodeDecodeError:
        diags.append(error(f"`{path}` is not UTF-8 text", span or Span(path, 1, 1, 1, 1)))
    except SeqlangError as exc:
        diags.extend(exc.diagnostics)
    return None


def _read_bytes(path: str) -> bytes:
    return includes.read_source(path)


def _load(path: str, diags: list[Diagnostic], sources: Mapping[str, str]) -> Loaded | None:
    hashes: dict[str, str] = {}
    main = _read(path, None, hashes, diags, sources)
    if main is None:
        raise SeqlangError(diags)
    loaded = Loaded(main, hashes=hashes, sources=sources)
    _load_rig(loaded, diags)
    _load_imports(main, loaded, set(), (), diags)
    if any(d.severity == ERROR for d in diags):
        raise SeqlangError(diags)
    return loaded


def _relative(base: str, target: str) -> str:
    return os.path.normpath(os.path.join(os.path.dirname(base), target))


def _load_rig(loaded: Loaded, diags: list[Diagnostic]) -> None:
    local = [i for i in loaded.main.items if isinstance(i, ast.RigDef)]
    uses = [i for i in loaded.main.items if isinstance(i, ast.UseStmt)]
    for extra in uses[1:]:
        diags.append(error("a sequence uses one rig; this is a second `use`", extra.span))
    if uses:
        rig_path = _relative(loaded.main.path, uses[0].path)
        refusal = includes.refusal(loaded.main.path, uses[0].path, rig_path, (".rig",))
        if refusal:
            diags.append(error(refusal, uses[0].span))
            return
        rig_file = _read(rig_path, uses[0].span, loaded.hashes, diags, loaded.sources)
        local += [i for i in rig_file.items if isinstance(i, ast.RigDef)] if rig_file else []
        if rig_file is not None and not any(isinstance(i, ast.RigDef) for i in rig_file.items):
            diags.append(error(f"`{uses[0].path}` holds no `rig` declaration", uses[0].span))
        loaded.rig_path = rig_path
    if len(local) > 1:
        diags.append(error("more than one rig is declared", local[1].span))
    if local:
        loaded.rig = local[0]
        loaded.rig_path = loaded.rig_path or loaded.main.path


def _load_imports(source: ast.SourceFile, loaded: Loaded, seen: set[str], chain: tuple[str, ...],
                  diags: list[Diagnostic]) -> None:
    """Read what `source` imports, depth first; `chain` is the path of imports to it."""
    chain = chain or (source.path,)
    for stmt in (i for i in source.items if isinstance(i, ast.ImportStmt)):
        target = _relative(source.path, stmt.path)
        refusal = includes.refusal(loaded.main.path, stmt.path, target, (".seq",))
        if refusal:
            diags.append(error(refusal, stmt.span))
            continue
        real_chain = [os.path.realpath(p) for p in chain]
        if os.path.realpath(target) in real_chain:
            start = real_chain.index(os.path.realpath(target))
            loop = " imports ".join(f"`{p}`" for p in chain[start:] + (target,))
            diags.append(error(f"import cycle: {loop}", stmt.span))
            continue
        if target in seen or target == loaded.main.path:
            continue
        if len(chain) > MAX_IMPORT_DEPTH:
            diags.append(error(f"imports nest more than {MAX_IMPORT_DEPTH} files deep", stmt.span))
            return
        seen.add(target)
        imported = _read(target, stmt.span, loaded.hashes, diags, loaded.sources)
        if imported is not None:
            loaded.imports.append(imported)
            _load_imports(imported, loaded, seen, chain + (target,), diags)


def _without_knock_ons(diags: list[Diagnostic], failed: set[str]) -> list[Diagnostic]:
    """Drop "unknown ..." errors about a site or constant whose own declaration already failed."""
    if not failed:
        return diags
    def knock_on(d: Diagnostic) -> bool:
        text = SOURCES.texts.get(d.span.file, "")
        return d.message.startswith("unknown ") and text[d.span.start:d.span.end] in failed
    return [d for d in diags if not knock_on(d)]


def _resolve_loaded(loaded: Loaded, diags: list[Diagnostic], failed: set[str], point: int = 0,
                    free_values: dict[str, float] | None = None) -> Program | None:
    from .rig import resolve_rig
    scope = Scope()
    if loaded.rig is None:
        diags.append(error("no rig: add `use \"lab.rig\"` at the top of the file",
                           Span(loaded.main.path, 1, 1, 1, 1)))
        return None
    for imported in loaded.imports:  # a scan or free value belongs to the file that is run
        for decl in (i for i in imported.items if isinstance(i, (ast.ScanDecl, ast.LockstepDecl, ast.FreeDecl))):
            diags.append(error("`scan` and `free` are declared in the sequence file that is run, "
                               "not in an imported one", decl.span))
    space = resolve_scans(loaded.main, diags)
    failed.update(_failed_scans(loaded.main, space))
    values = space.point(point) if space is not None else {}
    bind_point(space, values, scope)
    free = resolve_free(loaded.main, set(values), diags)
    bind_free(free, free_values, scope)
    rig = resolve_rig(override_rig(loaded.rig, space, diags), loaded.rig_path, scope, diags)
    files = loaded.imports + [loaded.main]
    _bind_lets(files, scope, diags, failed)
    sites = _sites(loaded.main, rig, scope, diags, failed)
    main, files, layouts = _lattices(loaded, files, rig, sites, scope, diags, failed)
    groups = _groups(main, sites, diags, {n: layout.sites for n, layout in layouts.items()})
    blocks = _blocks(files, diags)
    sequences = [i for i in main.items if isinstance(i, ast.SequenceDef)]
    if len(sequences) > 1:
        diags.append(error("a file holds one `sequence`; this is a second", sequences[1].name.span))
    name = sequences[0].name.name if sequences else os.path.splitext(os.path.basename(loaded.main.path))[0]
    resolver = SequenceResolver(rig, sites, groups, blocks, diags)
    body = resolver.resolve_body(sequences[0].body, scope, sequences[0].span) if sequences \
        else SerialOp((), Span(loaded.main.path, 1, 1, 1, 1))
    expects = _expects(main, sites, groups, diags, failed, scope)
    return Program(name, loaded.main.path, rig, sites, groups, body, expects,
                   dict(sorted(loaded.hashes.items())), dict(scope.values), space, values, point, free, layouts)


def _lattices(loaded: Loaded, files, rig: Rig, sites: dict[str, Site], scope: Scope,
              diags: list[Diagnostic], failed: set[str]):
    """Lattice sites join `sites`; the files come back with every `d[3, 4]` spelt out."""
    has = any(isinstance(i, (ast.LatticeDecl, ast.LatticeFile)) for i in loaded.main.items)
    taken = set(sites) | {g.name.name for g in loaded.main.items if isinstance(g, ast.GroupStmt)}
    layouts, new = resolve_layouts(loaded.main, rig, scope, taken, diags, loaded.hashes) if has else ({}, {})
    failed.update(d.name.name for d in loaded.main.items
                  if isinstance(d, (ast.LatticeDecl, ast.LatticeFile)) and d.name.name not in layouts)
    sites.update(new)
    _check_distinct_positions(sites, diags) if new else None
    if not _mentions_index(loaded):
        return loaded.main, files, layouts
    files = [expand_refs(f, layouts, scope, diags) for f in files]
    return files[-1], files, layouts


def _mentions_index(loaded: Loaded) -> bool:
    """Whether any `d[...]` may appear (a cheap look at the texts; expanding walks the whole tree)."""
    return any("[" in f.text for f in loaded.imports + [loaded.main])


def _failed_scans(source: ast.SourceFile, space) -> set[str]:
    """Scans whose declaration has an error: their names stay unknown, without knock-on errors."""
    ok = {a.name for a in space.axes} if space is not None else set()
    return {d.target.name for d in source.items if isinstance(d, ast.ScanDecl) and d.target.name not in ok}


def _bind_lets(files, scope: Scope, diags: list[Diagnostic], failed: set[str]) -> None:
    for source in files:
        for let in (i for i in source.items if isinstance(i, ast.LetStmt)):
            if let.name.name in scope.pinned:
                diags.append(error(f"`{let.name.name}` is scanned; a `let` cannot redefine it", let.name.span,
                                   "remove this `let` or rename the scan"))
                continue
            if let.name.name in units.UNITS:
                diags.append(error(f"`{let.name.name}` is a unit and cannot be a constant's name", let.name.span))
                continue
            try:
                scope.values[let.name.name] = evaluate(let.value, scope)
            except EvalError as exc:
                diags.append(exc.diagnostic)
                failed.add(let.name.name)


def _sites(source: ast.SourceFile, rig: Rig, scope: Scope, diags: list[Diagnostic],
           failed: set[str]) -> dict[str, Site]:
    sites: dict[str, Site] = {}
    for stmt in (i for i in source.items if isinstance(i, ast.SiteStmt)):
        if stmt.name.name in sites:
            diags.append(error(f"site `{stmt.name.name}` is declared twice", stmt.name.span))
            continue
        if _is_unit_name(stmt.name, "a site's", diags):
            continue
        if stmt.species.name not in rig.species:
            diags.append(error(f"unknown species `{stmt.species.name}`", stmt.species.span,
                               did_you_mean(stmt.species.name, rig.species)))
            continue
        position = _position(stmt.position, scope, diags)
        if position is not None:
            sites[stmt.name.name] = Site(stmt.name.name, stmt.species.name, position, stmt.span)
        else:
            failed.add(stmt.name.name)
    _check_distinct_positions(sites, diags)
    return sites


def _position(expr: ast.Expr, scope: Scope, diags: list[Diagnostic]):
    try:
        value = evaluate_any(expr, scope)
    except EvalError as exc:
        diags.append(exc.diagnostic)
        return None
    if not isinstance(value, tuple) or len(value) not in (2, 3):
        diags.append(error("expected coordinates such as `(0, 5.2) um` or `(0, 0, 1) um`", expr.span))
        return None
    try:
        coords = [expect_kind(q, units.LENGTH, expr.span) for q in value]
        return within_reach(coords + [0.0] * (3 - len(coords)), expr.span)
    except EvalError as exc:
        diags.append(exc.diagnostic)
        return None


def _check_distinct_positions(sites: dict[str, Site], diags: list[Diagnostic]) -> None:
    seen: dict[tuple, str] = {}
    for site in sites.values():
        key = tuple(round(c, 12) for c in site.position_m)
        if key in seen:
            diags.append(error(f"site `{site.name}` is at the same place as `{seen[key]}`", site.span))
        seen[key] = site.name


def _groups(source: ast.SourceFile, sites: dict[str, Site], diags: list[Diagnostic],
            lattices: dict[str, tuple[str, ...]] | None = None) -> dict[str, tuple[str, ...]]:
    groups: dict[str, tuple[str, ...]] = dict(lattices or {})
    for stmt in (i for i in source.items if isinstance(i, ast.GroupStmt)):
        name = stmt.name.name
        if name in groups or name in sites:
            diags.append(error(f"`{name}` is already a site or group name", stmt.name.span))
            continue
        if _is_unit_name(stmt.name, "a group's", diags):
            continue
        members: list[str] = []
        for ident in stmt.members:
            found = sites.get(ident.name) and (ident.name,) or groups.get(ident.name)
            if not found:
                diags.append(error(f"unknown site `{ident.name}`", ident.span,
                                   did_you_mean(ident.name, list(sites) + list(groups))))
                continue
            members += [m for m in found if m not in members]
        groups[name] = tuple(members)
    return groups


def _is_unit_name(ident: ast.Ident, whose: str, diags: list[Diagnostic]) -> bool:
    """A unit symbol as a name would be read as the unit inside expressions (`wait s` = 1 s)."""
    if ident.name not in units.UNITS:
        return False
    diags.append(error(f"`{ident.name}` is a unit and cannot be {whose} name", ident.span,
                       "choose another name"))
    return True


def _blocks(files, diags: list[Diagnostic]) -> dict[str, ast.BlockDef]:
    blocks: dict[str, ast.BlockDef] = {}
    for source in files:
        for block in (i for i in source.items if isinstance(i, ast.BlockDef)):
            if block.name.name in blocks:
                diags.append(error(f"block `{block.name.name}` is defined twice", block.name.span))
            for param in block.params:
                _is_unit_name(param.name, "a parameter's", diags)
            blocks[block.name.name] = block
    return blocks


def _expects(source: ast.SourceFile, sites, groups, diags: list[Diagnostic],
             failed: set[str], scope: Scope | None = None) -> tuple[Expectation, ...]:
    out = []
    for stmt in (i for i in source.items if isinstance(i, ast.ExpectStmt)):
        if any(ident.name in failed for ident in stmt.sites):
            continue  # a site whose declaration failed: its own error says enough
        names = []
        for ident in stmt.sites:
            if ident.name in sites:
                names.append(ident.name)
            elif ident.name in groups:
                names.extend(groups[ident.name])
            else:
                diags.append(error(f"unknown site `{ident.name}`", ident.span,
                                   did_you_mean(ident.name, list(sites) + list(groups))))
        state = _expected_state(stmt, len(names), diags)
        extras = _expect_props(stmt, state, len(names), scope or Scope(), diags)
        if state is not None and extras is not None:
            out.append(Expectation(tuple(names), state, stmt.is_ket, stmt.span, *extras))
    return tuple(out)


MANY_ATOM_STATES = ("ghz", "w")
SINGLE_SITE_STATES = ("zero", "one", "plus", "minus", "plus_i", "minus_i")
EXPECT_KEYS = ("phase", "correlate")


def _expect_props(stmt: ast.ExpectStmt, state, count: int, scope: Scope, diags) -> tuple | None:
    """(phase, correlators) from ``phase 90 deg`` (GHZ only) and ``correlate XXZ`` or
    ``correlate (XXX, ZZZ)`` (Pauli strings of I, X, Y, Z, one letter per named site)."""
    phase, strings, ok = 0.0, [], True
    for prop in stmt.props:
        key = prop.key_name
        if key == "phase" and state == "ghz":
            try:
                phase = expect_kind(evaluate(prop.value, scope), units.ANGLE, prop.value.span)
            except EvalError as exc:
                diags.append(exc.diagnostic)
                ok = False
        elif key == "phase":
            diags.append(error("only a GHZ target takes a `phase`", prop.key.span))
            ok = False
        elif key == "correlate":
            items = prop.value.items if isinstance(prop.value, ast.TupleExpr) else (prop.value,)
            for item in items:
                text = item.name if isinstance(item, ast.NameRef) else ""
                if not text or set(text) - set("IXYZ") or len(text) != count:
                    diags.append(error(f"expected a Pauli string of {count} letters I, X, Y or Z (one per named "
                                       "site), such as `" + "X" * count + "`", item.span))
                    ok = False
                else:
                    strings.append(text)
        else:
            diags.append(error(f"unknown property `{key}` of `expect`", prop.key.span,
                               did_you_mean(key, EXPECT_KEYS) or f"known: {', '.join(EXPECT_KEYS)}"))
            ok = False
    return (phase, tuple(dict.fromkeys(strings))) if ok else None


def _expected_state(stmt: ast.ExpectStmt, count: int, diags: list[Diagnostic]) -> str | None:
    if stmt.is_ket:
        bits = stmt.state.name[1:-1]
        if len(bits) != count:
            diags.append(error(f"the ket has {len(bits)} qubits but {count} sites are named", stmt.state.span))
            return None
        return bits
    if stmt.factors:
        unknown = [f for f in stmt.factors if f.name not in SINGLE_SITE_STATES]
        for f in unknown:
            diags.append(error(f"unknown single-site state `{f.name}`", f.span,
                               did_you_mean(f.name, SINGLE_SITE_STATES) or f"known: {', '.join(SINGLE_SITE_STATES)}"))
        if not unknown and len(stmt.factors) != count:
            diags.append(error(f"the product has {len(stmt.factors)} factors but {count} sites are named",
                               stmt.state.span))
            return None
        return None if unknown else stmt.state.name
    if stmt.state.name in MANY_ATOM_STATES:
        if count < 2:
            diags.append(error(f"a {stmt.state.name.upper()} state needs at least two sites, got {count}", stmt.span))
            return None
        return stmt.state.name
    if stmt.state.name not in BELL_STATES:
        known = BELL_STATES + MANY_ATOM_STATES
        diags.append(error(f"unknown state `{stmt.state.name}`", stmt.state.span,
                           did_you_mean(stmt.state.name, known) or f"known: {', '.join(known)}, a ket such as "
                           "|01>, or a product such as `plus * zero`"))
        return None
    if count != 2:
        diags.append(error(f"a Bell state needs two sites, got {count}", stmt.span))
        return None
    return stmt.state.name
