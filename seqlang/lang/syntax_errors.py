"""Lark's syntax errors in words: what was found, what may stand there, where.

Used only by :mod:`seqlang.lang.parser`. What may stand at the place of the error
is listed in full, with the keywords that start a statement, a rig entry or a
top-level declaration grouped under those words (taken from the grammar, so a new
statement appears here by itself). A `{` that is never closed is reported at the
brace itself.
"""
from __future__ import annotations

import functools
import unicodedata

from lark import Lark, Token
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken
from lark.lexer import PatternStr

from .diagnostics import Diagnostic, SeqlangError, Span, error, shorten
from .source_text import NOT_LINE_ENDS, split_lines

_WORDS = {
    "NAME": "a name", "NUMBER": "a number", "UNIT": "a unit", "STRING": "a quoted file name",
    "LEVEL": "a Rydberg level such as 58S1/2", "CHANNEL": "an output such as awg1.2",
    "KET": "a ket such as |01>", "$END": "the end of the file",
    "COMPARE": "a comparison such as `>=`",
}
# Grammar rules whose leading keywords are named as one group, in this order.
_GROUPS = (("_stmt", "a statement"), ("_rig_item", "a rig entry"), ("_item", "a declaration"))
_OPERATORS = ("PLUS", "MINUS", "STAR", "SLASH", "CIRCUMFLEX")


def token_span(token: Token, path: str) -> Span:
    """The span of one token."""
    end_line = token.end_line or token.line
    end_column = token.end_column or token.column + len(token)
    return Span(path, token.line, token.column, end_line, end_column,
                token.start_pos or 0, token.end_pos or 0)


def syntax_error(exc: UnexpectedInput, text: str, path: str, lark: Lark) -> Diagnostic:
    """The diagnostic for one lark exception."""
    if isinstance(exc, UnexpectedCharacters):
        return _bad_character(exc, text, path)
    expected = _expected_terminals(exc)
    token = getattr(exc, "token", None)
    at_end = isinstance(exc, UnexpectedEOF) or token is None or token.type == "$END"
    if "RBRACE" in expected and (at_end or token.type in _top_level_keywords(lark)):
        brace = _unclosed_brace(text, len(text) if at_end else token.start_pos, lark)
        if brace is not None:
            found = "the file ends" if at_end else f"`{token}` on line {token.line} comes"
            return error(f"this `{{` is never closed: {found} before its `}}`", token_span(brace, path),
                         f"add `}}` where the block opened on line {brace.line} should end")
    if at_end:
        lines = split_lines(text.rstrip()) or [""]
        # The caret goes just after the last character: that is where something is missing.
        span = Span(path, len(lines), len(lines[-1]) + 1, len(lines), len(lines[-1]) + 2)
        return error(f"unexpected end of file; expected {_describe_expected(expected, lark)}", span)
    return error(f"unexpected {_token_words(token)}; expected {_describe_expected(expected, lark)}",
                 token_span(token, path), _token_hint(token, expected))


def _expected_terminals(exc: UnexpectedInput) -> set[str]:
    """What the parser could have taken here (lark tries each terminal on a copy of the parse)."""
    try:
        return set(getattr(exc, "accepts", None) or getattr(exc, "expected", None) or ())
    except SeqlangError:  # trying a terminal crossed the nesting limit: take lark's raw list
        return set(getattr(exc, "expected", None) or ())


# ---- characters -------------------------------------------------------------------
def _bad_character(exc: UnexpectedCharacters, text: str, path: str) -> Diagnostic:
    pos = exc.pos_in_stream
    char = text[pos] if pos < len(text) else "?"
    line, column = max(exc.line, 1), max(exc.column, 1)
    span = Span(path, line, column, line, column + 1, pos, pos + 1)
    return error(f"unexpected character {character_words(char)}", span, _char_hint(char))


def character_words(char: str) -> str:
    """A character as a message shows it: itself in backticks, or its code and name if invisible."""
    if char.isprintable() and not char.isspace():
        return f"`{char}`"
    name = "null byte" if char == "\0" else NOT_LINE_ENDS.get(char) or unicodedata.name(char, "control character")
    return f"U+{ord(char):04X} ({name.lower()})"


def _char_hint(char: str) -> str | None:
    if char == "'":
        return 'file names are written in double quotes, e.g. "lab.rig"'
    if char == ";":
        return "statements need no separator; put the next one after a space or on a new line"
    if char == "\0":
        return "a seqlang file holds text only; is this a binary file?"
    if char in NOT_LINE_ENDS:
        return "seqlang ends lines only with a newline (LF, CR LF or CR); remove this character"
    return None


# ---- tokens and what was expected -----------------------------------------------------
def _token_words(token: Token) -> str:
    if token.type in _WORDS:
        # "a number `7`" reads wrongly after "unexpected": drop the article.
        noun = _WORDS[token.type].split(" such")[0].removeprefix("a ").removeprefix("an ")
        return f"{noun} `{shorten(str(token))}`"
    return f"`{shorten(str(token))}`"


def _token_hint(token: Token, expected: set[str]) -> str | None:
    if token.type == "NUMBER" and "NAME" in expected:
        return "a name must start with a letter or `_`"
    if token.type == "UNIT" and "NAME" in expected:
        return f"`{token}` is a unit and cannot be used as a name here"
    return None


def _describe_expected(expected: set[str], lark: Lark) -> str:
    """Everything that may stand here, in words; never cut short."""
    literal = _literals(lark)
    remaining, words = set(expected), []
    if "RBRACE" in remaining:
        # A missing `}` is the commonest slip: name it first.
        words.append("`}`")
        remaining.discard("RBRACE")
    for rule, label in _GROUPS:
        keywords = _leading_keywords(lark, rule)
        if len(keywords) > 1 and set(keywords) <= remaining:
            words.append(f"{label} ({', '.join(literal[k] for k in keywords)})")
            remaining -= set(keywords)
    if set(_OPERATORS) <= remaining:
        words.append("an operator (" + " ".join(literal[k] for k in _OPERATORS) + ")")
        remaining -= set(_OPERATORS)
    rest = sorted(_WORDS[t] if t in _WORDS else f"`{literal.get(t, t.lower())}`" for t in remaining)
    return _join(words + rest)


def _join(words: list[str]) -> str:
    if len(words) <= 2:
        return " or ".join(words)
    return ", ".join(words[:-1]) + " or " + words[-1]


@functools.lru_cache(maxsize=1)
def _literals(lark: Lark) -> dict[str, str]:
    """Terminal name → its text, for terminals that are one fixed string (`pulse`, `{`, `..`)."""
    return {t.name: t.pattern.value for t in lark.terminals if isinstance(t.pattern, PatternStr)}


@functools.lru_cache(maxsize=8)
def _leading_keywords(lark: Lark, rule: str) -> tuple[str, ...]:
    """The fixed-string terminals that can start `rule`, in grammar order."""
    literal = _literals(lark)
    by_origin: dict[str, list] = {}
    for r in lark.rules:
        by_origin.setdefault(r.origin.name, []).append(r)
    out: list[str] = []
    todo, seen = [rule], set()
    while todo:
        name = todo.pop(0)
        if name in seen:
            continue
        seen.add(name)
        for r in by_origin.get(name, []):
            if not r.expansion:
                continue
            first = r.expansion[0]
            if first.is_term:
                if first.name in literal and first.name not in out:
                    out.append(first.name)
            else:
                todo.append(first.name)
    return tuple(out)


@functools.lru_cache(maxsize=1)
def _top_level_keywords(lark: Lark) -> frozenset[str]:
    """Keywords that can only start a top-level declaration: inside braces they mean a `}` is missing."""
    inner = set(_leading_keywords(lark, "_stmt")) | set(_leading_keywords(lark, "_rig_item"))
    return frozenset(set(_leading_keywords(lark, "_item")) - inner)


def _unclosed_brace(text: str, position: int, lark: Lark) -> Token | None:
    """The innermost `{` still open at `position` (the text is lexed again: errors are rare)."""
    open_braces: list[Token] = []
    try:
        for token in lark.lex(text):
            if token.start_pos >= position:
                break
            if token.type == "LBRACE":
                open_braces.append(token)
            elif token.type == "RBRACE" and open_braces:
                open_braces.pop()
    except UnexpectedInput:
        pass
    return open_braces[-1] if open_braces else None
