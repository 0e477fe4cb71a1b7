"""A Pygments lexer for seqlang files, so docs and notebooks colour them.

It emits token categories only; the colours belong to the style in use.
Registered through the ``pygments.lexers`` entry point in pyproject.toml.

>>> from pygments.token import Keyword
>>> (Keyword, "pulse") in list(SeqlangLexer().get_tokens("pulse mw area pi"))
True
"""
from __future__ import annotations

from pygments.lexer import RegexLexer, bygroups, words
from pygments.token import (Comment, Keyword, Name, Number, Operator, Punctuation, String,
                            Whitespace)

# The statement and declaration words of the grammar (grammar/seqlang.lark).
KEYWORDS = ("use", "import", "rig", "species", "drive", "image", "port", "let", "site", "group",
            "at", "block", "sequence", "pulse", "on", "off", "wait", "together", "align", "repeat",
            "do", "switch", "set", "trigger", "expect", "as", "when", "otherwise", "is", "scan", "points",
            "spacing", "lockstep", "free", "field", "move", "to", "by", "lattice", "from", "fill")
# Values that are words: drive kinds, reach, alignments, qubit encodings, shapes, states.
CONSTANTS = ("microwave", "raman", "rydberg", "all", "each", "start", "end", "center", "clock",
             "digital", "analog", "counter", "co", "square", "ramped", "gaussian", "blackman",
             "phi_plus", "phi_minus", "psi_plus", "psi_minus", "electrode", "deflector", "minimum_jerk",
             "rectangular", "triangular", "hexagonal", "checkerboard", "rows", "columns", "sublattice",
             "corridors", "straight")
FUNCTIONS = ("sqrt", "sin", "cos", "tan", "exp", "log", "abs", "asin", "acos", "atan", "atan2", "clip", "round",
             "floor", "ceil", "min", "max", "bright", "fraction", "outcome")
UNIT_PATTERN = (r"(THz|GHz|MHz|kHz|Hz|ps|ns|us|µs|ms|s|cm|mm|um|µm|nm|m|nK|uK|µK|mK|K|mrad|rad|deg|"
                r"pi|mV|V|mA|A|mG|G|uW|µW|mW|W)(?![A-Za-z0-9_])")


class SeqlangLexer(RegexLexer):
    """Rig (*.rig) and sequence (*.seq) files of seqlang."""

    name = "seqlang"
    aliases = ["seqlang", "seq"]
    filenames = ["*.seq", "*.rig"]
    mimetypes = ["text/x-seqlang"]

    tokens = {
        "root": [
            (r"\s+", Whitespace),
            (r"#.*?$", Comment.Single),
            (r'"[^"\n]*"', String),
            (r"\|[01]+>", String.Symbol),
            (r"[0-9]+[SPDF][0-9]+/2", Name.Constant),
            (r"[A-Za-z_][A-Za-z0-9_]*\.[A-Za-z0-9_]+", Name.Variable.Global),
            (r"[0-9]+(\.[0-9]+)?([eE][+-]?[0-9]+)?", Number),
            (UNIT_PATTERN, Keyword.Type),
            (r"%", Keyword.Type),
            (r"(sequence|block|rig|drive|species|site|group|let|port)(\s+)([A-Za-z_][A-Za-z0-9_]*)(?![A-Za-z0-9_.])",
             bygroups(Keyword, Whitespace, Name.Function)),
            (words(KEYWORDS, suffix=r"\b"), Keyword),
            (words(CONSTANTS, suffix=r"\b"), Name.Constant),
            (words(FUNCTIONS, suffix=r"\b"), Name.Builtin),
            (r"[A-Za-z_][A-Za-z0-9_]*", Name),
            (r"<->|->|\.\.", Operator),
            (r"==|!=|<=|>=|<|>", Operator),
            (r"[-+*/^=]", Operator),
            (r"[{}(),\[\]]", Punctuation),
        ],
    }
