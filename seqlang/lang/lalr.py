"""A fast LALR driver and contextual lexer over lark's own tables, for text that parses.

Lark's lexer and driver are pure Python with a few layers per token (lexer thread,
line counter, token constructor, parser state); on generated programs of 10⁵ lines
they were most of the compile time. This module runs the same automaton in one
loop: per parser state the compiled regular expression of lark's contextual lexer
for that state (so a word is a keyword, a unit or a name exactly where lark would
lex it so), lark's parse table with plain-string keys, and the reduce callbacks of
:mod:`seqlang.lang.parser`. Positions are plain integers until a token is built.

It knows only how to succeed: at the first character or token it cannot take it
raises :class:`Unsupported`, and the caller parses the text again with lark's own
driver, whose exceptions carry what the error messages need. Errors are rare, so
they cost a second parse and nothing else.
"""
from __future__ import annotations

import functools
import re

from lark import Lark, Token
from lark.lexer import ContextualLexer, PatternStr, UnlessCallback
from lark.parsers.lalr_analysis import Reduce

from . import line_traces

# Token attributes are set directly: lark's constructor costs several calls per token.
_new_str = str.__new__


class Unsupported(Exception):
    """The fast path cannot go on (a syntax error, or a lexer it does not know)."""


class Tables:
    """What the loop reads: per parser state its actions and its lexer."""

    __slots__ = ("actions", "lexers", "pieces", "start", "end", "rules")

    def __init__(self, actions, lexers, pieces, start, end, rules):
        self.actions, self.lexers, self.pieces = actions, lexers, pieces
        self.start, self.end, self.rules = start, end, rules


@functools.lru_cache(maxsize=4)
def tables(lark: Lark, table) -> Tables | None:
    """The loop's tables for `lark`, from `table` (string-keyed states, see parser._fast_table);
    None if lark's lexer is of a kind this module does not reproduce."""
    lexer = lark.parser.lexer
    if not isinstance(lexer, ContextualLexer):
        return None
    lexers, pieces = {}, {}
    for state, basic in lexer.lexers.items():
        entry = _state_lexer(basic)
        if entry is None:
            return None
        lexers[state], pieces[state] = entry
    rules: list = []
    index: dict = {}
    actions = {}
    for state, row in table.states.items():
        actions[state] = {symbol: arg if action is not Reduce else _reduction(arg, rules, index)
                          for symbol, (action, arg) in row.items()}
    return Tables(actions, lexers, pieces, table.start_states["start"], table.end_states["start"], tuple(rules))


def _reduction(rule, rules: list, index: dict) -> tuple:
    """A reduce action as (number of symbols, rule name for the goto, rule number)."""
    if rule not in index:
        index[rule] = len(rules)
        rules.append(rule)
    return (len(rule.expansion), rule.origin.name, index[rule])


def _state_lexer(basic) -> tuple | None:
    """((match, blanks, keywords, tokens that may hold line ends), (blanks, alternatives)) for
    one state's lexer, as lark built it. `match` takes the blanks and comments before a token
    and the token in one step (lark's alternatives without the ignored ones, behind a run of
    ignored text); `blanks` matches a run of ignored text alone (for the end of the text).
    The second pair is the same as regular-expression text, for line traces."""
    scanner = basic.scanner
    if len(scanner._mres) != 1 or basic.g_regex_flags or basic.use_bytes or basic.user_callbacks:
        return None
    keywords = {}
    for kind, callback in basic.callback.items():
        # Lark lexes a keyword as the name it also matches, then renames it by exact match.
        if not isinstance(callback, UnlessCallback):
            return None
        words = callback.scanner.terminals
        if any(not isinstance(t.pattern, PatternStr) or t.pattern.flags for t in words):
            return None
        keywords[kind] = {t.pattern.value: t.name for t in words}
    steps = [_one_blank(t.pattern.to_regexp()) for t in scanner.terminals if t.name in basic.ignore_types]
    if None in steps:
        return None
    blanks = f"(?:{'|'.join(steps)})*"
    alternatives = tuple((t.name, t.pattern.to_regexp()) for t in scanner.terminals
                         if t.name not in basic.ignore_types)
    tokens = "|".join(f"(?P<{name}>{regex})" for name, regex in alternatives)
    compile_ = scanner.re_.compile
    newlines = frozenset(basic.newline_types) - frozenset(basic.ignore_types)
    return ((compile_(f"{blanks}(?:{tokens})").match, compile_(blanks).match, keywords, newlines),
            (blanks, alternatives))


def _one_blank(regex: str) -> str | None:
    """One step of a run of ignored text, such that the run splits into steps one way only
    (else a failed match would backtrack over every split, exponentially in its length):
    a character class `[...]+` becomes one character of it, a line comment `#[^\n]*` must
    reach the line end. None for another shape (the fast path is then not used)."""
    if re.fullmatch(r"\[[^\]]*\]\+", regex):
        return regex[:-1]
    if re.fullmatch(r"[^\\\[\](){}.*+?|^$]\[\^\n\]\*", regex):
        return regex + r"(?![^\n])"
    return None


def parse(text: str, tables: Tables, reducers: list):
    """Run the automaton over `text`; `reducers[i]` builds rule i's value from its children
    (None: pass the single child on). Returns the start rule's value.

    When the first token of a line is to be shifted, line traces (:mod:`seqlang.lang.line_traces`)
    are tried first; each line parsed step by step is counted, so that a shape seen often
    enough gets a trace."""
    actions, lexers = tables.actions, tables.lexers
    end_state = tables.end
    stack = [tables.start]
    values: list = []
    chains: dict = {}
    traces = line_traces.Traces(tables, reducers)
    pos, length, line, line_start = 0, len(text), 1, 0
    kinds, line_stack = None, None   # the kinds of this line's tokens so far, its stack at the first
    first = False                    # the token is the first of its line
    while True:
        match, blanks, keywords, newlines = lexers[stack[-1]]
        found = match(text, pos)
        if found is not None:
            kind = found.lastgroup
            start, end = found.span(kind)
            first = pos == 0
            if start != pos:  # blanks and comments first
                count = text.count("\n", pos, start)
                if count:
                    line += count
                    line_start = text.rfind("\n", pos, start) + 1
                    first = True
            value = text[start:end]
            if kind in keywords:
                kind = keywords[kind].get(value, kind)
            token = _new_str(Token, value)
            token.type, token.value, token.start_pos, token.end_pos = kind, value, start, end
            token.line, token.column = line, start - line_start + 1
            if kind in newlines and "\n" in value:
                line += value.count("\n")
                line_start = text.rfind("\n", start, end) + 1
                kinds = first = None   # a trace's tokens lie on one line
            elif kinds is not None:
                kinds.append(kind)
            token.end_line, token.end_column = line, end - line_start + 1
            pos = end
        elif blanks(text, pos).end() == length:
            kind, first = "$END", False
        else:
            raise Unsupported
        while True:
            action = actions[stack[-1]].get(kind)
            if action is None:
                raise Unsupported
            if action.__class__ is int:
                if first:
                    # The first token of a line, its lookahead's reductions done (so the stack no
                    # longer depends on the line before): the rest of the line may follow a trace,
                    # and the lines after it, up to the next token to shift.
                    if kinds is not None:
                        traces.saw(line_stack, kinds)
                    resumed = traces.replay(text, pos, line, line_start, stack, values, token)
                    if resumed is not None:
                        token, pos, line, line_start = resumed
                        kind = token.type
                        action = actions[stack[-1]][kind]
                    kinds, line_stack = [kind], stack[:]
                stack.append(action)
                values.append(token)
                break
            size, origin, number = action
            reduce = reducers[number]
            if reduce is None:
                # `?rule: other` passes its child on: only the state changes. Such reductions come
                # in chains (a number becomes a product, a sum, an expression): the state the
                # chain ends in depends only on the two top states and the lookahead, so it is
                # followed once and remembered.
                key = (stack[-2], stack[-1], kind)
                state = chains.get(key)
                if state is None:
                    state = chains[key] = _follow_chain(actions, reducers, stack[-2], origin, kind)
                stack[-1] = state
            else:
                if size:
                    children = values[-size:]
                    del values[-size:]
                    del stack[-size:]
                else:
                    children = []
                values.append(reduce(children))
                stack.append(actions[stack[-1]][origin])
            if kind == "$END" and stack[-1] == end_state:
                return values[-1]


def _follow_chain(actions, reducers, below: int, origin: str, kind: str) -> int:
    """The state after a pass-on reduction to `origin` over state `below`, and the pass-on
    reductions that follow it on lookahead `kind` (each keeps one symbol, so `below` stays)."""
    while True:
        state = actions[below][origin]
        action = actions[state].get(kind)
        if action is None or action.__class__ is int or reducers[action[2]] is not None:
            return state
        origin = action[1]
