"""Line traces: lines of one shape parsed by one regular-expression match and straight code.

Generated programs repeat a few line shapes (``pulse mw_na area 3pi/8 phase 45 deg``) with
other numbers. The LALR automaton's steps depend only on the states on top of its stack and
on the kinds of the tokens, and the contextual lexer's choice of a token depends only on the
state it is lexed in. A trace covers one line: it starts when the line's first token is about
to be shifted (the reductions its lookahead caused are done, so the stack no longer depends
on the line before) and ends when the first token of the next line has been lexed and its
lookahead's reductions done. Once a shape (the kinds of the line's tokens and of the next
line's first) has been seen ``TRACE_AFTER`` times from the same stack, :func:`build` runs the
automaton over the kinds alone (no text) and records

* ``match``: one regular expression for the tokens after the first: per token, the lexer
  alternatives of its state behind its blanks, matched atomically (a lookahead taken whole,
  as one lexer match takes its first alternative) and required to have taken the recorded kind;
* ``run``: generated Python that builds the tokens, calls the rules' reduce callbacks in the
  recorded order on the recorded children, leaves the value stack as the automaton would
  and returns the next line's first token.

:meth:`Traces.replay` tries the traces recorded for the top state and the first token, line
after line. A trace applies when the states it reads below the top are the same and its
expression matches (keywords are checked by value, as lark renames a name that spells one).
Any line no trace takes goes through the automaton step by step, so a trace changes the
speed and nothing else.
"""
from __future__ import annotations

import re

from lark import Token

# A shape is traced when seen this often: a trace takes about a millisecond to build and saves
# a few microseconds per line, so the shapes of a hand-written file are not worth one.
TRACE_AFTER = 16
# Bounds per parse: traces in all, traces per state and first token, tokens per traced line,
# line shapes counted.
MAX_TRACES = 256
MAX_PER_STATE = 32
MAX_TOKENS = 32
MAX_SHAPES = 4096

_new_str = str.__new__


class Trace:
    """One recorded line shape (see the module doc)."""

    __slots__ = ("size", "prefix", "depth", "tail", "match", "run", "before_next", "next")

    def __init__(self, prefix, tail, match, run, before_next, next_group):
        self.size, self.prefix, self.depth = len(prefix), prefix, len(prefix) - 1
        self.tail, self.match, self.run = tail, match, run
        self.before_next, self.next = before_next, next_group   # groups: the line's last token, the next


class Traces:
    """The traces of one parse, and the line shapes seen so far."""

    __slots__ = ("tables", "reducers", "by_state", "seen", "built")

    def __init__(self, tables, reducers):
        self.tables, self.reducers = tables, reducers
        self.by_state: dict = {}
        self.seen: dict = {}
        self.built: set = set()

    def saw(self, stack: list, kinds: list) -> None:
        """A line of tokens `kinds[:-1]` was parsed from `stack` (its first token about to be
        shifted), then `kinds[-1]` lexed and its lookahead's reductions done; trace it when it
        has been seen TRACE_AFTER times."""
        if len(kinds) > MAX_TOKENS or len(self.built) >= MAX_TRACES:
            return
        key = (tuple(stack), tuple(kinds))
        count = self.seen.get(key, 0)
        if count == 0 and len(self.seen) >= MAX_SHAPES:
            return
        self.seen[key] = count + 1
        if count + 1 != TRACE_AFTER:
            return
        trace = build(self.tables, self.reducers, stack, kinds)
        if trace is None or (tuple(trace.prefix), key[1]) in self.built:
            return
        self.built.add((tuple(trace.prefix), key[1]))
        entries = self.by_state.setdefault((stack[-1], kinds[0]), [])
        if len(entries) < MAX_PER_STATE:
            entries.append(trace)

    def replay(self, text: str, pos: int, line: int, line_start: int, stack: list, values: list, token):
        """Shift `token`, the first of a line (it ends at `pos`), and parse the rest of its line
        and the next token's reductions by a trace, line after line while one applies. Returns
        (the next token to shift, position after it, line, line start), or None (nothing done)."""
        replayed = False
        while True:
            for trace in self.by_state.get((stack[-1], token.type), ()):
                if stack[-trace.size:] != trace.prefix:
                    continue
                found = trace.match(text, pos)
                if found is None:
                    continue
                regs = found.regs
                before = regs[trace.before_next][1] if trace.before_next else pos
                if text.find("\n", pos, before) != -1:
                    continue  # the tokens of a line after its first lie on its line
                start = regs[trace.next][0]
                count = text.count("\n", before, start)
                next_line, next_start = (line + count, text.rfind("\n", before, start) + 1) if count \
                    else (line, line_start)
                following = trace.run(found, text, values, line, line_start, token, next_line, next_start)
                if following is None:
                    continue  # a name spelled a keyword, or the other way round
                stack[len(stack) - trace.depth:] = trace.tail
                pos, line, line_start, token, replayed = found.end(), next_line, next_start, following, True
                break
            else:
                return (token, pos, line, line_start) if replayed else None


def build(tables, reducers, stack: list, kinds: list) -> Trace | None:
    """The trace of a line of tokens `kinds[:-1]` parsed from `stack` (the first of them lexed
    already and its lookahead's reductions done), then of the lookahead reductions of the
    token `kinds[-1]` after it; None if the automaton does not take them (or a kind is not one
    of its state's lexer alternatives, or may hold a line end)."""
    actions = tables.actions
    states = list(stack)
    low = len(states)
    lexed, steps = [], []   # per token its lexer state; ("shift", i) / ("reduce", rule, size)
    last = len(kinds) - 1
    for index, kind in enumerate(kinds):
        lexed.append(states[-1])
        while True:
            action = actions[states[-1]].get(kind)
            if action is None:
                return None
            if action.__class__ is int:
                if index < last:
                    states.append(action)
                    steps.append(("shift", index, 0))
                break
            size, origin, number = action
            if size:
                del states[-size:]
                low = min(low, len(states))
            if low < 1:
                return None
            states.append(actions[states[-1]][origin])
            steps.append(("reduce", number, size))
    below = len(stack) - low
    pattern, groups, checks = _pattern(tables, lexed, kinds)
    if pattern is None:
        return None
    try:
        match = re.compile(pattern).match
    except re.error:   # a lexer pattern that does not combine; the line is parsed step by step
        return None
    index = match.__self__.groupindex
    run = _generate(steps, kinds, groups, checks, below, reducers, index)
    return Trace(list(stack[low - 1:]), states[low:], match, run,
                 index[groups[-2]] if last > 1 else 0, index[groups[-1]])


def _pattern(tables, lexed: list, kinds: list):
    """The expression for the tokens after the first, the group of each, and the keyword checks
    (token index, that state's keyword map, base kind) of tokens whose base kind has keywords."""
    pieces, checks, groups = [], [], [None]
    for index, (state, kind) in enumerate(zip(lexed, kinds)):
        if index == 0:
            continue
        blanks, alternatives = tables.pieces[state]
        keywords, newlines = tables.lexers[state][2], tables.lexers[state][3]
        base = next((b for b, words in keywords.items() if kind in words.values()), kind)
        if base not in dict(alternatives) or base in newlines:
            return None, None, None
        if base in keywords:
            checks.append((index, keywords[base], base))
        options = "|".join(f"(?P<t{index}>{regex})" if name == base else f"(?:{regex})"
                           for name, regex in alternatives)
        # (?=(?P<a>X))(?P=a): X taken whole at its first success, as one lexer match takes it.
        pieces.append(f"(?=(?P<a{index}>{blanks}(?:{options})))(?P=a{index})(?(t{index})|(?!))")
        groups.append(f"t{index}")
    return "".join(pieces), groups, checks


def _generate(steps, kinds, groups, checks, below: int, reducers, groupindex):
    """Python source for the line's run, compiled (see the module doc): it returns the next
    line's first token, or None if a keyword check fails (before anything is changed)."""
    names: dict = {"Token": Token, "new": _new_str}
    code = ["def run(m, text, values, line, line_start, t0, next_line, next_start):", "    regs = m.regs"]
    last = len(kinds) - 1
    for index in range(1, len(kinds)):
        code.append(f"    s{index}, e{index} = regs[{groupindex[groups[index]]}]")
        code.append(f"    x{index} = text[s{index}:e{index}]")
    for index, words, base in checks:
        names[f"kw{index}"] = words
        code.append(f"    if kw{index}.get(x{index}, {base!r}) != {kinds[index]!r}: return None")
    for index, kind in enumerate(kinds[1:], 1):
        at, start = ("next_line", "next_start") if index == last else ("line", "line_start")
        code.append(f"    t{index} = new(Token, x{index}); t{index}.type = {kind!r}; t{index}.value = x{index}; "
                    f"t{index}.start_pos = s{index}; t{index}.end_pos = e{index}; "
                    f"t{index}.line = t{index}.end_line = {at}; t{index}.column = s{index} - {start} + 1; "
                    f"t{index}.end_column = e{index} - {start} + 1")
    symbols = [f"b{i}" for i in range(below)]
    if below:
        code.append(f"    {', '.join(symbols)}, = values[-{below}:]")
        code.append(f"    del values[-{below}:]")
    made = 0
    for step, arg, size in steps:
        if step == "shift":
            symbols.append(f"t{arg}")
            continue
        children = symbols[len(symbols) - size:] if size else []
        del symbols[len(symbols) - size:]
        reduce = reducers[arg]
        if reduce is None:      # passes its one child on
            symbols.extend(children)
            continue
        names[f"r{arg}"] = reduce
        code.append(f"    v{made} = r{arg}([{', '.join(children)}])")
        symbols.append(f"v{made}")
        made += 1
    if symbols:
        code.append(f"    values.extend(({', '.join(symbols)},))")
    code.append(f"    return t{last}")
    exec("\n".join(code), names)
    return names["run"]
