"""Source text as the lexer and the error printer both see it: one notion of a line.

* ``\\r\\n`` and a lone ``\\r`` end a line, like ``\\n``; they are turned into ``\\n``
  before parsing, so line numbers, columns and offsets count the same everywhere.
* A UTF-8 byte-order mark at the very start is dropped (editors add it invisibly).
* Form feed (FF) and vertical tab (VT) are blanks inside a line, not line ends.
* Other Unicode line separators (NEL U+0085, U+2028, U+2029, and the file, group
  and record separators U+001C–U+001E) are not line ends either: outside a
  comment they are an "unexpected character" with a hint.

>>> normalise("\\ufeffa\\r\\nb\\rc")
'a\\nb\\nc'
>>> split_lines("a\\fb\\u2028c\\nd")
['a\\x0cb\\u2028c', 'd']
"""
from __future__ import annotations

BOM = "\ufeff"
# Characters that str.splitlines() treats as line ends but seqlang does not.
NOT_LINE_ENDS = {"\x0b": "vertical tab", "\x0c": "form feed", "\x1c": "file separator",
                 "\x1d": "group separator", "\x1e": "record separator", "\x85": "next line (NEL)",
                 "\u2028": "line separator", "\u2029": "paragraph separator"}


def normalise(text: str) -> str:
    """The text with line ends made `\\n` and a leading byte-order mark removed."""
    if text.startswith(BOM):
        text = text[1:]
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    return text


def split_lines(text: str) -> list[str]:
    """The lines of normalised text, split exactly where the lexer counts a new line."""
    lines = text.split("\n")
    if lines and lines[-1] == "" and text:
        lines.pop()
    return lines
