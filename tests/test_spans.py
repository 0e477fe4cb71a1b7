"""Spans are packed (28 bytes): they must still behave as values of their seven fields."""
from __future__ import annotations

import pickle
import subprocess
import sys

from seqlang.lang.diagnostics import SPAN_FIELDS, Span

from conftest import ROOT


def test_fields_read_back_and_compare_by_value():
    span = Span("a.seq", 12, 3, 14, 9, 400, 471)
    assert span.fields() == ("a.seq", 12, 3, 14, 9, 400, 471)
    assert [getattr(span, name) for name in SPAN_FIELDS] == list(span.fields())
    assert span == Span("a.seq", 12, 3, 14, 9, 400, 471) and hash(span) == hash(Span("a.seq", 12, 3, 14, 9, 400, 471))
    assert span != Span("b.seq", 12, 3, 14, 9, 400, 471)
    assert span._replace(end_column=10).fields() == ("a.seq", 12, 3, 14, 10, 400, 471)
    assert span.label() == "a.seq:12:3" and repr(span).startswith("Span(file='a.seq', line=12")


def test_spans_order_by_position_not_by_their_bytes():
    """Line 256 after line 1 (the packed bytes are little-endian: 256 would come first)."""
    assert sorted([Span("a.seq", 256, 1, 256, 2), Span("a.seq", 1, 9, 1, 10)])[0].line == 1
    late = Span("zz-order.seq", 1, 1, 1, 1)  # its file registered first: the smaller index
    early = Span("aa-order.seq", 1, 1, 1, 1)
    assert early < late and not late < early


def test_numbers_beyond_32_bits_are_clamped_not_raised():
    span = Span("a.seq", -1, 2**40, 1, 1)
    assert (span.line, span.column, span.start, span.end) == (0, 2**32 - 1, 0, 0)


def test_a_span_pickled_into_another_process_keeps_its_file():
    """The file is an index into each process's list of names: another process, whose list
    holds other names first, must read back the same file name."""
    data = pickle.dumps(Span("third.seq", 5, 1, 5, 4, 30, 33))
    code = ("import pickle, sys; from seqlang.lang.diagnostics import Span\n"
            "Span('first.seq', 1, 1, 1, 1); Span('second.seq', 1, 1, 1, 1)\n"
            "span = pickle.loads(sys.stdin.buffer.read()); print(span.fields())")
    out = subprocess.run([sys.executable, "-c", code], input=data, capture_output=True, check=True,
                         env={"PYTHONPATH": ROOT, "PATH": ""})
    assert out.stdout.decode().strip() == "('third.seq', 5, 1, 5, 4, 30, 33)"
