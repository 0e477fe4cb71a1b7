"""Quick fixes: the edits that answer a diagnostic.

Each fix is computed when the server publishes a diagnostic, from the
checker's own fields (its span and hint) and the wording of the few messages
that carry a fix (`did you mean`, a plain number where a unit kind is expected,
a sequence without a rig). Tests in ``tests/test_editor_actions.py`` produce
those messages with the real checker, so a changed wording shows there.
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass

from lsprotocol import types as lsp

from ..lang import units
from ..lang.diagnostics import Diagnostic

DID_YOU_MEAN = re.compile(r"^did you mean `([^`]+)`\?$")
PLAIN_NUMBER = re.compile(r"^expected (.+), got a plain number or angle$")
NO_RIG = "no rig:"
MAX_RIG_CHOICES = 8


@dataclass(frozen=True)
class Fix:
    """One quick fix: its title, where to put which text, and whether it is the obvious one."""

    title: str
    range: lsp.Range
    new_text: str
    preferred: bool = False


def fixes_for(diagnostic: Diagnostic, where: lsp.Range, path: str, text: str, open_paths=()) -> list[Fix]:
    """The quick fixes for one diagnostic shown at `where` in the document `path`."""
    if diagnostic.span.file != path:
        return []  # shown on the `use`/`import` line: the fix belongs in the other file
    found = DID_YOU_MEAN.match(diagnostic.hint or "")
    if found:
        return [Fix(f"Replace with `{found.group(1)}`", where, found.group(1), True)]
    plain = PLAIN_NUMBER.match(diagnostic.message)
    if plain and (diagnostic.hint or "").startswith("add a unit"):
        return _unit_fixes(plain.group(1), where)
    if diagnostic.message.startswith(NO_RIG):
        return _use_fixes(path, text, open_paths)
    return []


def _unit_fixes(kind_words: str, where: lsp.Range) -> list[Fix]:
    dims = [dim for dim, words in units.KIND_NAMES.items() if words == kind_words]
    if len(dims) != 1:
        return []  # only where exactly one unit kind fits
    dim = dims[0]
    preferred = units.PREFERRED_UNIT.get(dim)
    choices = [u for u, (_, d) in units.UNITS.items() if d == dim and "µ" not in u]
    choices.sort(key=lambda u: u != preferred)
    end = lsp.Range(where.end, where.end)
    return [Fix(f"Add the unit `{u}`", end, f" {u}", u == preferred) for u in choices]


def _use_fixes(path: str, text: str, open_paths) -> list[Fix]:
    folder = os.path.dirname(path)
    rigs = {os.path.normpath(p) for p in open_paths if p.endswith(".rig")}
    try:
        rigs |= {os.path.join(folder, n) for n in sorted(os.listdir(folder))[:1000] if n.endswith(".rig")}
    except OSError:
        pass
    names = sorted(os.path.relpath(r, folder) for r in rigs)[:MAX_RIG_CHOICES]
    at = lsp.Position(_first_code_line(text), 0)
    return [Fix(f'Add `use "{n}"`', lsp.Range(at, at), f'use "{n}"\n', len(names) == 1) for n in names]


def _first_code_line(text: str) -> int:
    """The line after the comments at the top of the file (where a `use` belongs)."""
    lines = text.splitlines()
    for number, line in enumerate(lines):
        if not line.lstrip().startswith("#"):
            return number
    return len(lines)


def code_action(fix: Fix, uri: str, diagnostic: lsp.Diagnostic) -> lsp.CodeAction:
    """The fix as an LSP quick-fix action for the document `uri`."""
    edit = lsp.WorkspaceEdit(changes={uri: [lsp.TextEdit(fix.range, fix.new_text)]})
    return lsp.CodeAction(fix.title, kind=lsp.CodeActionKind.QuickFix, diagnostics=[diagnostic],
                          edit=edit, is_preferred=fix.preferred)
