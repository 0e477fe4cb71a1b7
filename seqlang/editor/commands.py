"""`seqlang fmt` and `seqlang lsp`: register the editor commands with the command line."""
from __future__ import annotations

import os
import sys

from ..lang.diagnostics import SeqlangError, render_all

EXIT_OK, EXIT_CHANGED, EXIT_USAGE = 0, 1, 2


def register(sub) -> None:
    """Add the `fmt` and `lsp` sub-commands to the CLI's sub-parsers."""
    p = sub.add_parser("fmt", help="rewrite files in the canonical layout (comments are kept)")
    p.add_argument("files", nargs="+", metavar="FILE", help="*.seq or *.rig files")
    p.add_argument("--check", action="store_true",
                   help="change nothing; exit 1 if a file is not in the canonical layout")
    p.set_defaults(run=cmd_fmt)
    p = sub.add_parser("lsp", help="run the language server on stdin/stdout (for editors)")
    p.add_argument("--check-seconds", type=float, metavar="S",
                   help="time budget of one check or formatting (default 10; env SEQLANG_LSP_CHECK_SECONDS)")
    p.add_argument("--memory-mb", type=int, metavar="MB",
                   help="memory budget of the checking worker (default 2048; env SEQLANG_LSP_MEMORY_MB)")
    p.set_defaults(run=cmd_lsp)


def cmd_fmt(args) -> int:
    """Format each file in place, or with --check only report the ones that would change."""
    missing = [f for f in args.files if not os.path.isfile(f)]
    if missing:
        print(f"seqlang: no such file: {missing[0]}", file=sys.stderr)
        return EXIT_USAGE
    results = [_format_one(path, args.check) for path in args.files]
    return EXIT_CHANGED if any(results) else EXIT_OK


def _format_one(path: str, check_only: bool) -> bool:
    """True when the file has a syntax error or (under --check) would change."""
    from .formatter import format_text
    with open(path, encoding="utf-8") as handle:
        text = handle.read()
    try:
        formatted = format_text(text, path)
    except SeqlangError as exc:
        print(render_all(exc.diagnostics), file=sys.stderr)
        return True
    if formatted == text:
        return False
    if check_only:
        print(f"would reformat {path}")
        return True
    _write_atomically(path, formatted)
    print(f"reformatted {path}")
    return False


def _write_atomically(path: str, text: str) -> None:
    temporary = f"{path}.fmt-tmp"
    with open(temporary, "w", encoding="utf-8", newline="") as handle:
        handle.write(text)
    os.replace(temporary, path)


def cmd_lsp(args) -> int:
    """Serve the Language Server Protocol over stdio until the client says exit."""
    budgets = (("--check-seconds", args.check_seconds, "SEQLANG_LSP_CHECK_SECONDS"),
               ("--memory-mb", args.memory_mb, "SEQLANG_LSP_MEMORY_MB"))
    for option, value, name in budgets:
        if value is not None:
            if value <= 0:
                print(f"seqlang: {option} must be positive", file=sys.stderr)
                return EXIT_USAGE
            os.environ[name] = str(value)  # read by the server when it starts
    from .server import serve
    serve()
    return EXIT_OK
