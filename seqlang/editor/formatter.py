"""The canonical layout of seqlang files, keeping every comment.

The layout is printed from the syntax tree; comments (which the parser drops)
are recovered from the text and re-attached by line: a comment on a line of its
own goes before the next statement, a comment after code stays at the end of
that statement's line. Blank lines between statements are kept (at most one).

>>> format_text("let  t=2 ns   # clock\\n", "x.seq")
'let t = 2 ns  # clock\\n'
"""
from __future__ import annotations

from dataclasses import dataclass, fields, is_dataclass

from ..lang import syntax as ast
from ..lang.diagnostics import SeqlangError, Span, error
from ..lang.parser import parse_text
from ..lang.source_text import split_lines

INDENT = "  "


@dataclass(frozen=True)
class Comment:
    """A `#` comment: its 1-based line, its text, and whether code precedes it."""

    line: int
    text: str
    trailing: bool


def format_text(text: str, path: str) -> str:
    """Return the canonical form of `text`; raise :class:`SeqlangError` on a syntax error."""
    source = parse_text(text, path)
    text = source.text  # line ends normalised: the spans' offsets refer to this text
    printer = _Printer(text, find_comments(text))
    for item in source.items:
        _ITEM_PRINTERS[type(item)](printer, item, 0)
    printer.flush_before(10**9, 0)
    formatted = "\n".join(printer.lines).rstrip("\n") + "\n" if printer.lines else ""
    _check_same_meaning(source, formatted, path)
    return formatted


def find_comments(text: str) -> list[Comment]:
    """Every `#` comment outside a string, in order."""
    found = []
    for number, line in enumerate(split_lines(text), start=1):
        column = _comment_column(line)
        if column is not None:
            found.append(Comment(number, line[column:].rstrip(), bool(line[:column].strip())))
    return found


def _comment_column(line: str) -> int | None:
    in_string = False
    for column, char in enumerate(line):
        if char == '"':
            in_string = not in_string
        elif char == "#" and not in_string:
            return column
    return None


def tree_shape(node):
    """The syntax tree as nested tuples without spans (and without the text):
    two files mean the same program exactly when their shapes are equal."""
    if isinstance(node, ast.SourceFile):
        return tree_shape(node.items)
    if is_dataclass(node):
        kept = [f.name for f in fields(node) if f.name != "span" and not f.name.endswith("_span")]
        return (type(node).__name__,) + tuple(tree_shape(getattr(node, n)) for n in kept)
    if isinstance(node, (tuple, list)):
        return tuple(tree_shape(x) for x in node)
    return node


def _check_same_meaning(source: ast.SourceFile, formatted: str, path: str) -> None:
    # A safety net: never hand back text that means something else.
    try:
        again = parse_text(formatted, path)
    except SeqlangError:
        again = None
    if again is None or tree_shape(again) != tree_shape(source):
        raise SeqlangError([error("internal error: the formatter would change this file's meaning; "
                                  "the file was left alone", Span(path, 1, 1, 1, 1))])


# ---- output lines with their comments ---------------------------------------
class _Printer:
    """Collects output lines and places comments and blank lines by source line."""

    def __init__(self, text: str, comments: list[Comment]):
        self.text = text
        self.source_lines = split_lines(text)
        self.comments = comments
        self.next_comment = 0
        self.lines: list[str] = []
        self.last_line = 0  # last source line already accounted for
        self.at_block_start = True

    def flush_before(self, line: int, depth: int) -> None:
        """Emit the comments that stand before source line `line`."""
        while self.next_comment < len(self.comments) and self.comments[self.next_comment].line < line:
            comment = self.comments[self.next_comment]
            self.next_comment += 1
            self._emit(comment.text, comment.line, comment.line, depth)

    def unit(self, text: str, first: int, last: int, depth: int) -> None:
        """Emit one output line standing for source lines `first`..`last`."""
        self.flush_before(first, depth)
        inside = []
        while self.next_comment < len(self.comments) and self.comments[self.next_comment].line <= last:
            inside.append(self.comments[self.next_comment])
            self.next_comment += 1
        trailing = [c for c in inside if c.trailing]
        for comment in inside:
            if comment is not (trailing[-1] if trailing else None):
                self._emit(comment.text, first, first, depth)
        if trailing:
            text = f"{text}  {trailing[-1].text}"
        self._emit(text, first, last, depth)

    def open_block(self) -> None:
        self.at_block_start = True

    def close(self, line: int, depth: int) -> None:
        """Emit a closing brace at source line `line`, after the comments before it."""
        self.flush_before(line, depth + 1)
        self.at_block_start = True  # no blank line before a closing brace
        self.unit("}", line, line, depth)

    def _emit(self, text: str, first: int, last: int, depth: int) -> None:
        if not self.at_block_start and self._blank_between(self.last_line, first):
            self.lines.append("")
        self.lines.append(INDENT * depth + text)
        self.last_line = max(self.last_line, last)
        self.at_block_start = text.endswith("{")

    def _blank_between(self, after: int, before: int) -> bool:
        return any(not self.source_lines[n - 1].strip() for n in range(after + 1, before)
                   if 0 < n <= len(self.source_lines))

    def brace_line(self, offset: int) -> int:
        """The source line of the first `{` at or after `offset` (outside comments)."""
        position = self.text.find("{", offset)
        while position >= 0 and self._in_comment(position):
            position = self.text.find("{", position + 1)
        return self.text.count("\n", 0, max(position, 0)) + 1

    def _in_comment(self, position: int) -> bool:
        start = self.text.rfind("\n", 0, position) + 1
        column = _comment_column(self.text[start:self.text.find("\n", position) % (len(self.text) + 1)])
        return column is not None and start + column < position


# ---- expressions --------------------------------------------------------------
_SUM, _PRODUCT, _UNARY, _POWER, _POSTFIX, _ATOM = range(1, 7)
_BINARY_LEVEL = {"+": _SUM, "-": _SUM, "*": _PRODUCT, "/": _PRODUCT, "^": _POWER}


def _level(expr) -> int:
    if isinstance(expr, ast.BinOp):
        return _BINARY_LEVEL[expr.op]
    if isinstance(expr, ast.Neg):
        return _UNARY
    if isinstance(expr, ast.WithUnit):
        return _POSTFIX
    return _ATOM


def expression(expr, text: str) -> str:
    """The canonical text of an expression (numbers keep their written digits)."""
    if isinstance(expr, ast.Number):
        return text[expr.span.start:expr.span.end]
    if isinstance(expr, ast.UnitRef):
        return expr.unit
    if isinstance(expr, ast.NameRef):
        return expr.name
    if isinstance(expr, (ast.LevelExpr, ast.ChannelExpr)):
        return expr.text
    if isinstance(expr, ast.BinOp):
        return _binop(expr, text)
    if isinstance(expr, ast.Neg):
        return "-" + _wrapped(expr.operand, _UNARY, text)
    if isinstance(expr, ast.WithUnit):
        return _with_unit(expr, text)
    return _compound(expr, text)


def _compound(expr, text: str) -> str:
    if isinstance(expr, ast.Call):
        return f"{expr.func.name}({_args(expr.args, text)})"
    if isinstance(expr, ast.TupleExpr):
        return "(" + ", ".join(expression(e, text) for e in expr.items) + ")"
    if isinstance(expr, ast.RangeExpr):
        return f"{expression(expr.low, text)} .. {expression(expr.high, text)}"
    if isinstance(expr, ast.StatePair):
        return f"{_kwtuple(expr.lower, text)} <-> {_kwtuple(expr.upper, text)}"
    if isinstance(expr, ast.RecordSel):
        return f"{expr.record.name}[{_names(expr.sites, text)}]"
    raise TypeError(f"cannot format {type(expr).__name__}")


def _wrapped(expr, least: int, text: str) -> str:
    inner = expression(expr, text)
    return inner if _level(expr) >= least else f"({inner})"


def _binop(expr: ast.BinOp, text: str) -> str:
    level = _BINARY_LEVEL[expr.op]
    # `^` is right-associative; `(4 us)^2` keeps its parentheses for the reader although
    # the grammar would read `4 us^2` the same. The others are left-associative.
    left_least, right_least = (_ATOM, _UNARY) if expr.op == "^" else (level, level + 1)
    left, right = _wrapped(expr.left, left_least, text), _wrapped(expr.right, right_least, text)
    tight = expr.op == "^" or (expr.op == "/" and _is_plain(expr.left) and _is_plain(expr.right))
    return f"{left}{expr.op}{right}" if tight else f"{left} {expr.op} {right}"


def _is_plain(expr) -> bool:
    if isinstance(expr, ast.Neg):
        return _is_plain(expr.operand)
    return isinstance(expr, (ast.Number, ast.UnitRef, ast.NameRef))


def _with_unit(expr: ast.WithUnit, text: str) -> str:
    operand = _wrapped(expr.operand, _ATOM, text)
    # `2pi` reads as one number; a name before `pi` must keep its space (`xpi` is a name).
    joined = expr.unit == "pi" and isinstance(expr.operand, ast.Number)
    return f"{operand}{expr.unit}" if joined else f"{operand} {expr.unit}"


def _args(args, text: str) -> str:
    return ", ".join(expression(a.value, text) if a.name is None
                     else f"{a.name.name} = {expression(a.value, text)}" for a in args)


def _kwtuple(items, text: str) -> str:
    return "(" + ", ".join(f"{key.name}={expression(value, text)}" for key, value in items) + ")"


def _prop(prop: ast.Prop, text: str) -> str:
    return f"{prop.key_name} {expression(prop.value, text)}"


def _names(idents, text: str = "") -> str:
    return ", ".join(_site_ref(i, text) for i in idents)


def _site_ref(ref, text: str) -> str:
    """A name, or a lattice's sites by index: `d[3, 4]`, `d[0 .. 4, *]`."""
    if not isinstance(ref, ast.Indexed):
        return ref.name
    def index(ix) -> str:
        if ix is None:
            return "*"
        if isinstance(ix, tuple):
            return f"{expression(ix[0], text)} .. {expression(ix[1], text)}"
        return expression(ix, text)
    return f"{ref.name.name}[{', '.join(index(ix) for ix in ref.indices)}]"


# ---- statements -----------------------------------------------------------------
def _line(printer: _Printer, node, words: str, depth: int) -> None:
    printer.unit(words, node.span.line, node.span.end_line, depth)


def _braced(printer: _Printer, node, header: str, header_end: int, children, depth: int) -> None:
    """A header line ending in `{`, the children one per line, and `}`."""
    brace = printer.brace_line(header_end)
    printer.unit(header + " {", node.span.line, brace, depth)
    printer.open_block()
    for child in children:
        _STATEMENT_PRINTERS[type(child)](printer, child, depth + 1)
    printer.close(node.span.end_line, depth)


def _prop_block(printer: _Printer, node, header: str, header_end: int, props, depth: int) -> None:
    """`header { key value ... }`: on one line if written on one line, else one per line."""
    if node.span.line == node.span.end_line:
        inner = "  ".join(_prop(p, printer.text) for p in props)
        _line(printer, node, f"{header} {{ {inner} }}" if props else f"{header} {{}}", depth)
        return
    _braced(printer, node, header, header_end, props, depth)


def _print_prop(printer, prop: ast.Prop, depth: int) -> None:
    _line(printer, prop, _prop(prop, printer.text), depth)


def _print_use(printer, item, depth):
    keyword = "use" if isinstance(item, ast.UseStmt) else "import"
    _line(printer, item, f'{keyword} "{item.path}"', depth)


def _print_let(printer, item: ast.LetStmt, depth):
    _line(printer, item, f"let {item.name.name} = {expression(item.value, printer.text)}", depth)


def _print_scan(printer, item: ast.ScanDecl, depth):
    text, values = printer.text, item.values
    if isinstance(values, ast.ScanList):
        shown = "[" + ", ".join(expression(e, text) for e in values.items) + "]"
    else:
        shown = f"{expression(values.low, text)} .. {expression(values.high, text)} points " \
                f"{expression(values.count, text)}" + (f" spacing {values.spacing.name}" if values.spacing else "")
    _line(printer, item, f"scan {item.target.name} = {shown}", depth)


def _print_lockstep(printer, item: ast.LockstepDecl, depth):
    _line(printer, item, f"scan lockstep {_names(item.names, printer.text)}", depth)


def _print_free(printer, item: ast.FreeDecl, depth):
    text = printer.text
    start = f" start {expression(item.start, text)}" if item.start is not None else ""
    _line(printer, item, f"free {item.name.name} = {expression(item.low, text)} .. "
                         f"{expression(item.high, text)}{start}", depth)


def _print_site(printer, item: ast.SiteStmt, depth):
    words = f"site {item.name.name} = {item.species.name} at {expression(item.position, printer.text)}"
    _line(printer, item, words, depth)


def _print_group(printer, item: ast.GroupStmt, depth):
    _line(printer, item, f"group {item.name.name} = {_names(item.members, printer.text)}", depth)


def _print_expect(printer, item: ast.ExpectStmt, depth):
    state = " * ".join(f.name for f in item.factors) if item.factors else item.state.name
    words = f"expect {_names(item.sites, printer.text)} as {state}{_inline_props(item.props, printer.text)}"
    _line(printer, item, words, depth)


def _print_rig(printer, item: ast.RigDef, depth):
    children = sorted(item.settings + item.species + item.drives + item.images + item.ports + item.lets,
                      key=lambda node: node.span.start)
    _braced(printer, item, f"rig {item.name.name}", item.name.span.end, children, depth)


def _print_species(printer, item: ast.SpeciesDecl, depth):
    header = f"species {item.name.name} = {item.isotope.name}"
    _prop_block(printer, item, header, item.isotope.span.end, item.props, depth)


def _print_drive(printer, item: ast.DriveDecl, depth):
    header = f"drive {item.name.name} {item.kind.name} {item.species.name}"
    _prop_block(printer, item, header, item.species.span.end, item.props, depth)


def _print_image_decl(printer, item: ast.ImageDecl, depth):
    _prop_block(printer, item, f"image {item.species.name}", item.species.span.end, item.props, depth)


def _print_port(printer, item: ast.PortDecl, depth):
    header = f"port {item.name.name} = {item.channel.text}"
    _prop_block(printer, item, header, item.channel.span.end, item.props, depth)


def _print_block(printer, item: ast.BlockDef, depth):
    params = ", ".join(p.name.name if p.default is None
                       else f"{p.name.name} = {expression(p.default, printer.text)}" for p in item.params)
    header_end = item.params[-1].span.end if item.params else item.name.span.end
    _braced(printer, item, f"block {item.name.name}({params})", header_end, item.body, depth)


def _print_lattice(printer, item: ast.LatticeDecl, depth):
    _prop_block(printer, item, f"lattice {item.name.name} = {item.kind.name}", item.kind.span.end, item.props, depth)


def _print_lattice_file(printer, item: ast.LatticeFile, depth):
    words = f'lattice {item.name.name} from "{item.path}"{_inline_props(item.props, printer.text)}'
    _line(printer, item, words, depth)


def _print_fill(printer, stmt: ast.FillStmt, depth):
    sources = f" from {_names(stmt.sources, printer.text)}" if stmt.sources else ""
    words = f"fill {_names(stmt.targets, printer.text)}{sources}{_inline_props(stmt.props, printer.text)}"
    _line(printer, stmt, words, depth)


def _print_sequence(printer, item: ast.SequenceDef, depth):
    _braced(printer, item, f"sequence {item.name.name}", item.name.span.end, item.body, depth)


def _inline_props(props, text: str) -> str:
    return "".join(" " + _prop(p, text) for p in props)


def _print_pulse(printer, stmt: ast.PulseStmt, depth):
    targets = f" on {_names(stmt.targets, printer.text)}" if stmt.targets else ""
    _line(printer, stmt, f"pulse {stmt.drive.name}{targets}{_inline_props(stmt.props, printer.text)}", depth)


def _print_wait(printer, stmt: ast.WaitStmt, depth):
    _line(printer, stmt, f"wait {expression(stmt.duration, printer.text)}", depth)


def _print_together(printer, stmt: ast.TogetherStmt, depth):
    header = f"together align {stmt.align.name}" if stmt.align else "together"
    header_end = stmt.align.span.end if stmt.align else stmt.span.start
    _braced(printer, stmt, header, header_end, stmt.body, depth)


def _print_repeat(printer, stmt: ast.RepeatStmt, depth):
    _braced(printer, stmt, f"repeat {expression(stmt.count, printer.text)}", stmt.count.span.end,
            stmt.body, depth)


def _print_do(printer, stmt: ast.DoStmt, depth):
    _line(printer, stmt, f"do {stmt.block.name}({_args(stmt.args, printer.text)})", depth)


def _print_image(printer, stmt: ast.ImageStmt, depth):
    words = f"image {stmt.species.name} -> {stmt.record.name}{_inline_props(stmt.props, printer.text)}"
    _line(printer, stmt, words, depth)


def _print_switch(printer, stmt: ast.SwitchStmt, depth):
    _line(printer, stmt, f"switch {stmt.port.name} {'on' if stmt.on else 'off'}", depth)


def _print_set(printer, stmt: ast.SetStmt, depth):
    _line(printer, stmt, f"set {stmt.port.name} {expression(stmt.value, printer.text)}", depth)


def _print_trigger(printer, stmt: ast.TriggerStmt, depth):
    _line(printer, stmt, f"trigger {stmt.port.name}{_inline_props(stmt.props, printer.text)}", depth)


def _print_field(printer, stmt: ast.FieldStmt, depth):
    _braced(printer, stmt, f"field {stmt.port.name} {expression(stmt.value, printer.text)}",
            stmt.value.span.end, stmt.body, depth)


def _print_move(printer, stmt: ast.MoveStmt, depth):
    words = f"move {_names(stmt.sites, printer.text)} {'by' if stmt.relative else 'to'} {expression(stmt.target, printer.text)}"
    _line(printer, stmt, words + _inline_props(stmt.props, printer.text), depth)


def _condition(cond, text: str) -> str:
    if isinstance(cond, ast.OutcomeIs):
        return f"{expression(cond.selection, text)} is {cond.word.name}"
    return f"{expression(cond.left, text)} {cond.op} {expression(cond.right, text)}"


def _print_when(printer, stmt: ast.WhenStmt, depth):
    """`when … {`, the branch, and `} otherwise {` with the other branch when there is one."""
    brace = printer.brace_line(stmt.condition.span.end)
    printer.unit(f"when {_condition(stmt.condition, printer.text)} {{", stmt.span.line, brace, depth)
    printer.open_block()
    for child in stmt.then:
        _STATEMENT_PRINTERS[type(child)](printer, child, depth + 1)
    if stmt.otherwise is not None:
        after = stmt.then[-1].span.end if stmt.then else stmt.condition.span.end
        position = printer.text.find("otherwise", after)
        line = printer.text.count("\n", 0, position) + 1
        printer.flush_before(line, depth + 1)
        printer.at_block_start = True
        printer.unit("} otherwise {", line, printer.brace_line(position), depth)
        printer.open_block()
        for child in stmt.otherwise:
            _STATEMENT_PRINTERS[type(child)](printer, child, depth + 1)
    printer.close(stmt.span.end_line, depth)


_STATEMENT_PRINTERS = {
    ast.PulseStmt: _print_pulse, ast.WaitStmt: _print_wait, ast.TogetherStmt: _print_together,
    ast.RepeatStmt: _print_repeat, ast.DoStmt: _print_do, ast.ImageStmt: _print_image,
    ast.SwitchStmt: _print_switch, ast.SetStmt: _print_set, ast.TriggerStmt: _print_trigger,
    ast.LetStmt: _print_let, ast.Prop: _print_prop, ast.SpeciesDecl: _print_species,
    ast.DriveDecl: _print_drive, ast.ImageDecl: _print_image_decl, ast.PortDecl: _print_port,
    ast.FieldStmt: _print_field, ast.MoveStmt: _print_move,
    ast.WhenStmt: _print_when, ast.FillStmt: _print_fill,
}

_ITEM_PRINTERS = {
    ast.UseStmt: _print_use, ast.ImportStmt: _print_use, ast.RigDef: _print_rig, ast.LetStmt: _print_let,
    ast.SiteStmt: _print_site, ast.GroupStmt: _print_group, ast.BlockDef: _print_block,
    ast.SequenceDef: _print_sequence, ast.ExpectStmt: _print_expect,
    ast.ScanDecl: _print_scan, ast.LockstepDecl: _print_lockstep, ast.FreeDecl: _print_free,
    ast.LatticeDecl: _print_lattice, ast.LatticeFile: _print_lattice_file,
}
