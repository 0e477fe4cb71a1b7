"""Read a lab's measured scan: a plain CSV of scanned values, bright counts and repetitions.

    # comment lines start with #
    t [us],bright_bright_a,repetitions
    0.05,3,200
    0.10,11,200

* one column per scanned parameter, named as in the scan, with its unit in brackets
  (`t [us]`, `delta [kHz]`; no brackets: a plain number);
* one column per record and site of bright counts, named `bright_<record>_<site>`
  as in the result store (whole numbers from 0 to the repetitions);
* `repetitions`: how many times the point was run.

No quoting; every problem is reported with the file, line and column.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ..lang import units
from ..lang.diagnostics import SOURCES, Diagnostic, SeqlangError, Span, error

_HEADER = re.compile(r"\s*([A-Za-z_][A-Za-z0-9_.]*)\s*(?:\[\s*([^\]]*?)\s*\])?\s*$")


@dataclass(frozen=True)
class Measured:
    """Scanned values (in their written units), counts per record/site, repetitions."""

    path: str
    parameters: dict[str, tuple[str, np.ndarray]]  # name → (unit, values)
    counts: dict[str, np.ndarray]
    repetitions: np.ndarray


def read_measured(path: str) -> Measured:
    """Parse `path`; raise SeqlangError listing every malformed cell."""
    with open(path, encoding="utf-8") as handle:
        text = handle.read()
    SOURCES.add(path, text)
    diags: list[Diagnostic] = []
    rows = [(n, line) for n, line in enumerate(text.splitlines(), 1) if line.strip() and not line.startswith("#")]
    if not rows:
        raise SeqlangError([error("no header line: expected e.g. `t [us],bright_bright_a,repetitions`",
                                  Span(path, 1, 1, 1, 1))])
    header_line, header = rows[0]
    columns = _header(path, header_line, header, diags)
    data = {name: [] for name, _ in columns}
    for number, line in rows[1:]:
        cells = _cells(line)
        if len(cells) != len(columns):
            diags.append(error(f"expected {len(columns)} values, found {len(cells)}", _span(path, number, 1, line)))
            continue
        for (name, unit), (column, cell) in zip(columns, cells):
            data[name].append(_number(path, number, column, cell, name, diags))
    if any(d.is_error for d in diags):
        raise SeqlangError(diags)
    measured = _assemble(path, columns, data, rows[1:], diags)
    if any(d.is_error for d in diags):
        raise SeqlangError(diags)
    return measured


def _cells(line: str) -> list[tuple[int, str]]:
    """(1-based column, text) of each comma-separated cell."""
    out, start = [], 0
    for part in line.split(","):
        out.append((start + 1, part))
        start += len(part) + 1
    return out


def _span(path: str, line: int, column: int, text: str) -> Span:
    return Span(path, line, column, line, column + max(1, len(text.strip())))


def _header(path: str, number: int, header: str, diags: list[Diagnostic]) -> list[tuple[str, str]]:
    columns = []
    for column, cell in _cells(header):
        match = _HEADER.fullmatch(cell)
        if match is None:
            diags.append(error(f"a column is named like `t [us]` or `bright_bright_a`, not `{cell.strip()}`",
                               _span(path, number, column, cell)))
            continue
        name, unit = match.group(1), match.group(2) or ""
        if unit and unit not in units.UNITS:
            diags.append(error(f"unknown unit `{unit}`", _span(path, number, column, cell)))
        columns.append((name, unit))
    names = [n for n, _ in columns]
    if "repetitions" not in names:
        diags.append(error("a `repetitions` column is needed (how many times each point was run)",
                           _span(path, number, 1, header)))
    if not any(n.startswith("bright_") for n in names):
        diags.append(error("no counts: name a column `bright_<record>_<site>`", _span(path, number, 1, header)))
    if diags:
        raise SeqlangError(diags)
    return columns


def _number(path, line, column, cell, name, diags) -> float:
    try:
        value = float(cell)
    except ValueError:
        diags.append(error(f"`{cell.strip()}` is not a number (column `{name}`)", _span(path, line, column, cell)))
        return float("nan")
    if not np.isfinite(value):
        diags.append(error(f"`{cell.strip()}` is not a finite number", _span(path, line, column, cell)))
    elif (name == "repetitions" or name.startswith("bright_")) and (value < 0 or value != int(value)):
        diags.append(error(f"`{name}` takes whole numbers from 0, not {cell.strip()}",
                           _span(path, line, column, cell)))
    elif name == "repetitions" and value == 0:
        diags.append(error("`repetitions` must be at least 1", _span(path, line, column, cell)))
    return value


def _assemble(path, columns, data, rows, diags) -> Measured:
    repetitions = np.array(data["repetitions"])
    counts = {n: np.array(v) for n, v in data.items() if n.startswith("bright_")}
    position = {n: k for k, (n, _) in enumerate(columns)}
    for name, values in counts.items():
        for (number, line), k, n in zip(rows, values, repetitions):
            if k > n:
                column = _cells(line)[position[name]]
                diags.append(error(f"{int(k)} bright of {int(n)} repetitions", _span(path, number, column[0],
                                                                                   column[1])))
    parameters = {n: (u, np.array(data[n])) for n, u in columns
                  if n != "repetitions" and not n.startswith("bright_")}
    if not parameters:
        diags.append(error("no scanned parameter column, e.g. `t [us]`", Span(path, 1, 1, 1, 1)))
    return Measured(path, parameters, counts, repetitions)
