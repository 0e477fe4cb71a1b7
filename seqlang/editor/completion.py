"""Completion that knows where the cursor is.

The context comes from the text before the cursor: the statement or rig block
the cursor is in (by the enclosing braces) and the words already written on
the statement's line. What is offered comes from data the rest of seqlang
already keeps, so a new statement or property needs little editor work:

* statement and declaration words: the first literal of each alternative of the
  grammar's ``_stmt``, ``_rig_item`` and ``_item`` rules (``grammar/seqlang.lark``);
* property keys: the resolver's schemas — ``<WORD>_KEYS`` in
  :mod:`seqlang.program.sequence` for the statement ``<word>``, ``<WORD>_KEYS``
  in :mod:`seqlang.program.rig` for a rig block, ``drive_keys(kind)`` for drives,
  ``RIG_SETTINGS`` for the rig's settings;
* the unit kind of a property and its word values: found by offering the
  property's own reader one probe value of each kind (see :func:`key_kind`);
* names: the symbol index of the file, its rig and its imports.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from lsprotocol import types as lsp

from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Span
from ..program import rig as rig_module
from ..program import sequence as sequence_module
from ..program.evaluate import EvalError, Scope
from ..program.model import DRIVE_KINDS
from .analysis import Symbol
from .lexer import CONSTANTS, FUNCTIONS

TOKEN = re.compile(r'"[^"\n]*"?|<->|->|\.\.|[A-Za-z_µ][A-Za-z0-9_]*|[0-9]+(?:\.[0-9]+)?(?:[eE][+-]?[0-9]+)?|\S')
NUMBER = re.compile(r"[0-9]")
BRACE = re.compile(r"[{}]")
PROBE = Span("<completion>", 1, 1, 1, 1)
BLOCK_HEADERS = ("sequence", "block", "together", "repeat")
ANGLE_UNITS, FRACTION_UNITS = ("rad", "mrad", "deg", "pi"), ("%",)
K = lsp.CompletionItemKind


@dataclass(frozen=True)
class Names:
    """What the symbol index offers, sorted into the kinds completion needs."""

    symbols: tuple[Symbol, ...]
    texts: dict  # path -> text of the files the symbols come from (for written defaults)
    path: str = ""  # the document and the cursor, for names visible only inside a block
    offset: int = 0

    def text_of(self, span: Span) -> str:
        return self.texts.get(span.file, "")

    def of(self, *kinds: str) -> list[Symbol]:
        seen, out = set(), []
        for s in self.symbols:
            if s.kind in kinds and s.name not in seen and self._visible(s):
                seen.add(s.name)
                out.append(s)
        return out

    def _visible(self, symbol: Symbol) -> bool:
        scope = symbol.scope
        return scope is None or (scope.file == self.path and scope.start <= self.offset <= scope.end)

    def species_of_site(self, name: str) -> set[str]:
        """The species a site or group stands for (a group may mix species)."""
        for s in self.symbols:
            if s.name == name and s.kind == "site":
                return {s.node.species.name}
            if s.name == name and s.kind == "group":
                return set().union(*(self.species_of_site(m.name) for m in s.node.members))
        return set()

    def drive(self, name: str) -> ast.DriveDecl | None:
        return next((s.node for s in self.symbols if s.kind == "drive" and s.name == name), None)


# ---- grammar words ------------------------------------------------------------------
@lru_cache(maxsize=1)
def grammar_words() -> dict[str, tuple[str, ...]]:
    """First words of the alternatives of `_stmt`, `_rig_item` and `_item`, from the grammar."""
    text = resources.files("seqlang").joinpath("grammar/seqlang.lark").read_text("utf-8")
    rules = dict(re.findall(r"(?ms)^(\??[A-Za-z_]+)\s*:\s*(.*?)(?=^\S|\Z)", text))
    terminals = {name: word for name, word in re.findall(r'(?m)^([A-Z_]+)(?:\.\d+)?\s*:\s*"([a-z_]+)"\s*$', text)}

    def first_word(rule: str) -> str | None:
        body = rules.get(rule, "").strip()
        match = re.match(r'"([a-z_]+)"|([A-Z_]+)\b', body)
        if not match:
            return None
        return match.group(1) or terminals.get(match.group(2))

    def alternatives(rule: str) -> tuple[str, ...]:
        names = re.findall(r"[a-z_]+", rules.get(rule, ""))
        return tuple(w for w in dict.fromkeys(first_word(n) for n in names) if w)
    return {"statement": alternatives("_stmt"), "rig": alternatives("_rig_item"), "top": alternatives("_item")}


# ---- property schemas -------------------------------------------------------------------
def statement_keys(word: str) -> dict:
    """The property schema of a sequence statement, by the `<WORD>_KEYS` convention."""
    return getattr(sequence_module, f"{word.upper()}_KEYS", {}) or {}


def rig_block_keys(word: str, kind: str = "") -> dict:
    """The property schema of a rig block (`drive` by its kind)."""
    if word == "drive":
        return rig_module.drive_keys(kind)
    if word == "rig":
        return rig_module.RIG_SETTINGS
    return getattr(rig_module, f"{word.upper()}_KEYS", {}) or {}


@lru_cache(maxsize=None)
def key_kind(key) -> tuple[tuple[int, ...] | None, tuple[str, ...]]:
    """(the one unit kind the key's reader accepts or None, the words it accepts)."""
    accepted = [dim for dim, unit in _probe_units().items()
                if _accepts(key.reader, ast.WithUnit(ast.Number(3.0, PROBE), unit, PROBE))
                or _accepts(key.reader, ast.WithUnit(ast.Number(16.0, PROBE), unit, PROBE))]
    if not accepted and _accepts(key.reader, ast.Number(16.0, PROBE)):
        accepted = [units.DIMENSIONLESS]
    words = tuple(w for w in CONSTANTS if _accepts(key.reader, ast.NameRef(w, PROBE)))
    if len(words) == len(CONSTANTS):
        words = ()  # a reader that takes anything (checked later) says nothing about its words
    dim = accepted[0] if len(accepted) == 1 else None
    if dim is None and _accepts(key.reader, ast.WithUnit(ast.Number(0.5, PROBE), "%", PROBE)) \
            and len(accepted) != len(_probe_units()):
        dim = units.DIMENSIONLESS  # a fraction: takes 50 % but not 3 rad
    return dim, words


def _range_probe(unit: str) -> ast.RangeExpr:
    low, high = (ast.WithUnit(ast.Number(v, PROBE), unit, PROBE) for v in (-3.0, 3.0))
    return ast.RangeExpr(low, high, PROBE)


def _probe_units() -> dict:
    out = {dim: unit for dim, unit in units.PREFERRED_UNIT.items() if unit}
    out[units.DIMENSIONLESS] = "rad"
    return out


def _accepts(reader, expr) -> bool:
    try:
        reader(expr, Scope())
        return True
    except (EvalError, Exception):
        return False


def units_for(key) -> tuple[str, ...]:
    """The units a property's value can carry, largest first (µ spellings left out)."""
    dim, _ = key_kind(key)
    if dim is None:
        return ()
    if dim == units.DIMENSIONLESS:
        return ANGLE_UNITS if _accepts(key.reader, ast.WithUnit(ast.Number(3.0, PROBE), "rad", PROBE)) \
            else FRACTION_UNITS
    return tuple(u for u, (_, d) in units.UNITS.items() if d == dim and "µ" not in u)


def key_detail(key) -> str:
    """`duration (s, ms, us, ns, ps)` or `one of: gaussian, ...`, then the key's own words."""
    dim, words = key_kind(key)
    parts = []
    if words:
        parts.append("one of: " + ", ".join(words))
    elif dim == units.DIMENSIONLESS and _accepts(key.reader, ast.Number(16.0, PROBE)) \
            and not _accepts(key.reader, ast.Number(16.5, PROBE)):
        parts.append("whole number")
    elif dim is not None:
        kind = "angle or plain number" if units_for(key) == ANGLE_UNITS else \
            "fraction" if dim == units.DIMENSIONLESS else units.kind_name(dim).split(" ", 1)[1]
        parts.append(f"{kind} ({', '.join(units_for(key))})")
    else:
        ranged = [units.kind_name(d).split(" ", 1)[1] for d, u in _probe_units().items()
                  if d != units.DIMENSIONLESS and _accepts(key.reader, _range_probe(u))]
        if len(ranged) == 1:
            parts.append(f"range of {ranged[0]}: low .. high")
    if key.doc:
        parts.append(key.doc)
    return "; ".join(parts) or "property"


# ---- the context --------------------------------------------------------------------------
def completion_items(text: str, offset: int, names: Names) -> list[lsp.CompletionItem]:
    """The items that fit at `offset`, most specific first."""
    line_start = text.rfind("\n", 0, offset) + 1
    line = text[line_start:offset]
    if _in_comment_or_string(line):
        return []
    header, brace = enclosing_header(text, offset)
    typed = re.search(r"[A-Za-z_0-9µ]*$", line).group()
    segment_start = max(line_start, brace + 1)
    tokens = TOKEN.findall(text[segment_start:offset - len(typed)])
    head = TOKEN.findall(header)
    if not head:
        return _top_level(tokens, names)
    if head[0] == "rig":
        return _rig_item(tokens, names)
    if head[0] in ("species", "drive", "image", "port"):
        kind = head[2] if head[0] == "drive" and len(head) > 2 else ""
        before = TOKEN.findall(text[brace + 1:offset - len(typed)])  # keys given on earlier lines too
        return _properties(rig_block_keys(head[0], kind), before, names, TOKEN.findall(_rest_of_block(text, offset)))
    if head[0] in BLOCK_HEADERS or head[0] in grammar_words()["statement"]:
        rest = text[offset:text.find("\n", offset) if "\n" in text[offset:] else len(text)]
        return _statement(tokens, names, rest)
    return []


def _rest_of_block(text: str, offset: int) -> str:
    """The text from the cursor to the `}` that closes the block the cursor is in."""
    depth = 0
    for position in range(offset, min(len(text), offset + 100_000)):
        if text[position] == "{":
            depth += 1
        elif text[position] == "}":
            if depth == 0:
                return text[offset:position]
            depth -= 1
    return text[offset:offset + 100_000]


def _in_comment_or_string(line: str) -> bool:
    quotes = 0
    for char in line:
        if char == '"':
            quotes += 1
        elif char == "#" and quotes % 2 == 0:
            return True
    return quotes % 2 == 1


def enclosing_header(text: str, offset: int) -> tuple[str, int]:
    """The text before the innermost unclosed `{` around `offset` (comments dropped) and its offset."""
    depth = 0
    braces = [m.start() for m in BRACE.finditer(text, 0, offset)]  # found at C speed, walked back here
    for position in reversed(braces):
        if text[position] == "}":
            depth += 1
        elif depth == 0:
            line_start = text.rfind("\n", 0, position) + 1
            return text[line_start:position].split("#")[0], position
        else:
            depth -= 1
    return "", -1


def _top_level(tokens: list[str], names: Names) -> list[lsp.CompletionItem]:
    if not tokens:
        return _keywords(grammar_words()["top"])
    word = tokens[0]
    if word == "site" and tokens[-1] == "=":
        return _symbols(names.of("species"))
    if word == "site" and len(tokens) == 4:
        return _keywords(("at",))
    if word == "site" and len(tokens) > 4 and NUMBER.match(tokens[-1]) or tokens[-1] == ")":
        return _units(tuple(u for u, (_, d) in units.UNITS.items() if d == units.LENGTH and "µ" not in u))
    if word in ("group", "expect") and (tokens[-1] in ("=", ",") or (word == "expect" and len(tokens) == 1)):
        return _symbols(names.of("site"))
    if word == "expect" and tokens[-1] != "as":
        return _keywords(("as",))
    if word == "expect":
        return _values(tuple(c for c in CONSTANTS if c.startswith(("phi_", "psi_"))))
    if word == "let" and len(tokens) >= 3:
        return _expression(names)
    return []


def _rig_item(tokens: list[str], names: Names) -> list[lsp.CompletionItem]:
    words = grammar_words()["rig"]
    if not tokens:
        return _keywords(words) + _properties(rig_module.RIG_SETTINGS, [], names)
    word = tokens[0]
    if word == "drive" and len(tokens) == 2:
        return _values(DRIVE_KINDS)
    if word == "drive" and len(tokens) == 3 or word == "image" and len(tokens) == 1:
        return _symbols(names.of("species"))
    if word == "species" and tokens[-1] == "=":
        from ..atoms import species as species_table
        return _values(species_table.names())
    if word in rig_module.RIG_SETTINGS:
        return _properties(rig_module.RIG_SETTINGS, tokens, names)
    return []


def _statement(tokens: list[str], names: Names, rest_of_line: str) -> list[lsp.CompletionItem]:
    if not tokens:
        return _keywords(grammar_words()["statement"])
    word = tokens[0]
    if word == "pulse":
        return _pulse(tokens, names, rest_of_line)
    if word == "do" and len(tokens) == 1:
        return [block_item(s, names.text_of) for s in names.of("block")]
    if word == "image" and len(tokens) == 1:
        return _symbols(names.of("species"))
    if word in ("switch", "set", "trigger") and len(tokens) == 1:
        return _symbols(names.of("port"))
    if word == "switch" and len(tokens) == 2:
        return _keywords(("on", "off"))
    if word == "together" and len(tokens) == 1:
        return _keywords(("align",))
    if word == "together" and tokens[-1] == "align":
        return _values(sequence_module.ALIGNMENTS)
    if word == "wait" and len(tokens) > 1 and NUMBER.match(tokens[-1]):
        return _units(tuple(u for u, (_, d) in units.UNITS.items() if d == units.DURATION and "µ" not in u))
    if word in ("wait", "repeat", "let", "set") and len(tokens) >= (3 if word == "let" else 1):
        return _expression(names)
    schema = statement_keys(word)
    return _properties(schema, tokens[2:], names, TOKEN.findall(rest_of_line)) if schema else []


def _pulse(tokens: list[str], names: Names, rest_of_line: str) -> list[lsp.CompletionItem]:
    if len(tokens) == 1:
        later = TOKEN.findall(rest_of_line)
        wanted = set()
        if "on" in later:
            for target in later[later.index("on") + 1:]:
                if target not in (",",):
                    if target in statement_keys("pulse"):
                        break
                    wanted |= names.species_of_site(target)
        drives = [s for s in names.of("drive") if not wanted or {s.node.species.name} >= wanted]
        return _symbols(drives)
    drive = names.drive(tokens[1])
    if "on" in tokens:
        after = tokens[tokens.index("on") + 1:]
        if not after or after[-1] == ",":
            return _targets(names, drive, set(after) - {","})
        props = after[1:]
        while len(props) >= 2 and props[0] == ",":
            props = props[2:]
        return _properties(statement_keys("pulse"), props, names, TOKEN.findall(rest_of_line))
    items = _properties(statement_keys("pulse"), tokens[2:], names, TOKEN.findall(rest_of_line))
    return (_keywords(("on",)) if len(tokens) == 2 else []) + items


def _targets(names: Names, drive: ast.DriveDecl | None, written: set[str]) -> list[lsp.CompletionItem]:
    species = drive.species.name if drive else None
    fits = [s for s in names.of("site", "group")
            if s.name not in written and (species is None or names.species_of_site(s.name) == {species})]
    return _symbols(fits)


def _properties(schema: dict, tokens: list[str], names: Names, later=()) -> list[lsp.CompletionItem]:
    """In a property list: a key's words or units after it, else the keys not given
    before or after the cursor (`later`)."""
    if tokens and tokens[-1] in schema:
        _, words = key_kind(schema[tokens[-1]])
        return _values(words) if words else _expression(names)
    if len(tokens) >= 2 and tokens[-2] in schema and NUMBER.match(tokens[-1]):
        return _units(units_for(schema[tokens[-2]]))
    used = set(tokens) | set(later)
    return [lsp.CompletionItem(key, kind=K.Property, detail=key_detail(spec), sort_text=f"{i:03d}")
            for i, (key, spec) in enumerate(schema.items()) if key not in used]


# ---- items ------------------------------------------------------------------------------------
_SYMBOL_KIND = {"site": K.Variable, "group": K.Variable, "drive": K.Class, "species": K.Class,
                "port": K.Interface, "block": K.Function, "constant": K.Constant, "parameter": K.Variable}


def _symbols(symbols: list[Symbol]) -> list[lsp.CompletionItem]:
    return [lsp.CompletionItem(s.name, kind=_SYMBOL_KIND.get(s.kind, K.Text), detail=_symbol_detail(s),
                               sort_text=f"{i:03d}") for i, s in enumerate(symbols)]


def _symbol_detail(symbol: Symbol) -> str:
    node = symbol.node
    if isinstance(node, ast.DriveDecl):
        return f"drive: {node.kind.name} on {node.species.name}"
    if isinstance(node, ast.SiteStmt):
        return f"site of {node.species.name}"
    if isinstance(node, ast.GroupStmt):
        return "group: " + ", ".join(m.name for m in node.members)
    if isinstance(node, ast.SpeciesDecl):
        return f"species: {node.isotope.name}"
    return symbol.kind


def _keywords(words) -> list[lsp.CompletionItem]:
    return [lsp.CompletionItem(w, kind=K.Keyword, detail="keyword", sort_text=f"{i:03d}") for i, w in enumerate(words)]


def _values(words) -> list[lsp.CompletionItem]:
    return [lsp.CompletionItem(w, kind=K.EnumMember, detail="value", sort_text=f"{i:03d}") for i, w in enumerate(words)]


def _units(symbols) -> list[lsp.CompletionItem]:
    return [lsp.CompletionItem(u, kind=K.Unit, detail="unit", sort_text=f"{i:03d}") for i, u in enumerate(symbols)]


def _expression(names: Names) -> list[lsp.CompletionItem]:
    """Where an expression starts: constants and parameters in scope, then functions and `pi`."""
    return _symbols(names.of("constant", "parameter")) + [
        lsp.CompletionItem(f, kind=K.Function, detail="function", sort_text=f"5{f}") for f in FUNCTIONS + ("pi",)]


def block_item(symbol: Symbol, text_of) -> lsp.CompletionItem:
    """`name(…)` with one snippet placeholder per parameter (a default as `p = default`)."""
    from .formatter import expression
    block: ast.BlockDef = symbol.node
    placeholders = []
    for i, param in enumerate(block.params, start=1):
        written = param.name.name if param.default is None else \
            f"{param.name.name} = {expression(param.default, text_of(param.span))}"
        placeholders.append(f"${{{i}:{_escape_snippet(written)}}}")
    return lsp.CompletionItem(block.name.name, kind=K.Function, detail=signature(block, text_of),
                              insert_text=f"{block.name.name}({', '.join(placeholders)})",
                              insert_text_format=lsp.InsertTextFormat.Snippet)


def _escape_snippet(text: str) -> str:
    return text.replace("\\", "\\\\").replace("$", "\\$").replace("}", "\\}")


def signature(block: ast.BlockDef, text_of=None) -> str:
    """`name(a, b = …)`: a block's parameter list as written (defaults shown when text is given)."""
    from .formatter import expression
    params = []
    for param in block.params:
        if param.default is None:
            params.append(param.name.name)
        else:
            default = expression(param.default, text_of(param.span)) if text_of else "…"
            params.append(f"{param.name.name} = {default}")
    return f"{block.name.name}({', '.join(params)})"
