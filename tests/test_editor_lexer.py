"""Highlighting: the Pygments lexer and the TextMate grammar give every token a category.

Pygments marks text that no rule matches as ``Token.Error`` (Pygments
documentation, "Write your own lexer", pygments.org); our programs must have none.
"""
from __future__ import annotations

import glob
import json
import os
import re
from pathlib import Path

import pytest
from pygments.lexers import get_lexer_by_name, get_lexer_for_filename
from pygments.token import Comment, Error, Keyword, Name, Number, String

from seqlang.editor.lexer import SeqlangLexer

ROOT = os.path.join(os.path.dirname(__file__), "..")
PROGRAM_FILES = sorted(glob.glob(os.path.join(ROOT, "programs", "*.*"))
                       + glob.glob(os.path.join(ROOT, "programs", "lib", "*.*")))


def tokens(text: str):
    return [(kind, value) for kind, value in SeqlangLexer().get_tokens(text) if value.strip()]


@pytest.mark.parametrize("path", PROGRAM_FILES, ids=os.path.basename)
def test_no_error_tokens_in_the_demo_programs(path):
    with open(path, encoding="utf-8") as handle:
        text = handle.read()
    found = tokens(text)
    assert found, "the lexer produced nothing"
    assert [value for kind, value in found if kind in Error] == []
    assert "".join(v for _, v in SeqlangLexer().get_tokens(text)).strip() == text.strip()


def test_a_stray_character_is_an_error_token():
    assert (Error, ";") in tokens("wait 1 us;")


def test_categories_of_the_main_words():
    found = dict((value, kind) for kind, value in tokens(
        'use "millpond.rig"  # rig\nsequence s { pulse ryd_na area 2pi detuning 1.5 MHz }\n'
        "drive ryd_na rydberg na { port awg1.1  rydberg 58S1/2 }\nexpect d as |01>"))
    assert found['"millpond.rig"'] in String and found["# rig"] in Comment
    assert found["pulse"] in Keyword and found["sequence"] in Keyword
    assert found["s"] in Name.Function and found["1.5"] in Number and found["MHz"] in Keyword.Type
    assert found["awg1.1"] in Name and found["58S1/2"] in Name.Constant and found["|01>"] in String


def test_registered_through_the_entry_point():
    assert isinstance(get_lexer_for_filename("bell_pair.seq"), SeqlangLexer)
    assert isinstance(get_lexer_for_filename("millpond.rig"), SeqlangLexer)
    assert isinstance(get_lexer_by_name("seqlang"), SeqlangLexer)


def _textmate_patterns(node):
    if isinstance(node, dict):
        if "match" in node:
            yield node["match"]
        for value in node.values():
            yield from _textmate_patterns(value)
    elif isinstance(node, list):
        for value in node:
            yield from _textmate_patterns(value)


def test_textmate_grammar_is_valid_and_covers_the_keywords():
    with open(os.path.join(ROOT, "editors", "seqlang.tmLanguage.json"), encoding="utf-8") as handle:
        grammar = json.load(handle)
    assert grammar["scopeName"] == "source.seqlang" and set(grammar["fileTypes"]) == {"seq", "rig"}
    patterns = [re.compile(p) for p in _textmate_patterns(grammar)]  # Python re reads these Oniguruma patterns
    words = ("pulse", "together", "repeat", "expect", "trigger")
    assert all(any(p.fullmatch(w) for p in patterns) for w in words)


def test_every_word_of_the_grammar_is_highlighted():
    """A word the grammar adds (a new statement, say) must reach the highlighting lists."""
    from seqlang.editor.lexer import CONSTANTS, FUNCTIONS, KEYWORDS
    grammar = re.sub(r"//.*", "", (Path(__file__).resolve().parent.parent / "grammar" / "seqlang.lark")
                     .read_text(encoding="utf-8"))
    words = set(re.findall(r'"([a-z_]+)"', grammar))
    assert {"pulse", "lattice", "fill"} <= words
    assert words - set(KEYWORDS) - set(CONSTANTS) - set(FUNCTIONS) == set()
