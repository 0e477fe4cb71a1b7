"""Signature help for `do block(...)`: which block is being called and which
parameter the cursor is on.

>>> call_at("  do echo(1 ms, ", 16)
('echo', 1)
>>> call_at("  do echo(gap = 2 ms", 20)
('echo', 'gap')
"""
from __future__ import annotations

import re

from lsprotocol import types as lsp

from ..lang import syntax as ast

DO_CALL = re.compile(r"\bdo\s+([A-Za-z_][A-Za-z0-9_]*)\s*\($")
KEYWORD_ARG = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*=")


def call_at(text: str, offset: int) -> tuple[str, int | str] | None:
    """(block name, index of the positional argument or name of the keyword argument) of
    the innermost `do name(` left open before `offset` on its line, or None."""
    line_start = text.rfind("\n", 0, offset) + 1
    line = text[line_start:offset]
    depth, args_start = 0, None
    for position in range(len(line) - 1, -1, -1):
        char = line[position]
        if char == ")":
            depth += 1
        elif char == "(":
            if depth == 0:
                args_start = position + 1
                break
            depth -= 1
    if args_start is None:
        return None
    called = DO_CALL.search(line[:args_start])
    if called is None:
        return None
    arguments = _split_arguments(line[args_start:])
    keyword = KEYWORD_ARG.match(arguments[-1])
    return called.group(1), keyword.group(1) if keyword else len(arguments) - 1


def _split_arguments(text: str) -> list[str]:
    parts, depth, current = [], 0, ""
    for char in text:
        if char == "," and depth == 0:
            parts.append(current)
            current = ""
            continue
        depth += {"(": 1, ")": -1}.get(char, 0)
        current += char
    return parts + [current]


def signature_information(block: ast.BlockDef, active: int | str, text_of) -> tuple[lsp.SignatureInformation, int]:
    """The block's signature with one parameter range each, and the index of the active one."""
    from .formatter import expression
    label, ranges = f"{block.name.name}(", []
    for i, param in enumerate(block.params):
        if i:
            label += ", "
        written = param.name.name if param.default is None else \
            f"{param.name.name} = {expression(param.default, text_of(param.span))}"
        ranges.append(lsp.ParameterInformation(label=(len(label), len(label) + len(written))))
        label += written
    label += ")"
    names = [p.name.name for p in block.params]
    index = names.index(active) if isinstance(active, str) and active in names else \
        active if isinstance(active, int) else len(names)
    documentation = f"block `{block.name.name}`: {len(names)} parameter{'s' if len(names) != 1 else ''}"
    return lsp.SignatureInformation(label, documentation=documentation, parameters=ranges,
                                    active_parameter=index), index
