"""Feed-forward in the language and the compiled tables: `when`, record values, the branch table."""
from __future__ import annotations

import csv
import io
import json
import math
import os
import subprocess
import sys

import pytest

import seqlang
from seqlang.emit.branches import branch_rows, branches_csv
from seqlang.lang.diagnostics import SeqlangError
from seqlang.program.evaluate import Scope, evaluate
from seqlang.lang.parser import parse_text
from seqlang.show import decision_summary

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PROGRAMS = os.path.join(ROOT, "programs")
RIG = """\
rig pondbench {
  tick 4 ns
  species rb = Rb87 { qubit clock }
  species k = K39 { qubit clock }
  drive mw_rb microwave rb { rabi 20 kHz  detuning -100 kHz .. 100 kHz  port awg0.1  latency 200 ns }
  drive mw_k microwave k { rabi 15 kHz  port awg0.2 }
  image k { port ttl.9  duration 1 ms  decision_latency 50 us }
}
"""


def _load(tmp_path, body: str, sites: str = "site a = rb at (0, 0) um\nsite h1 = k at (10, 0) um\n"
          "site h2 = k at (20, 0) um\n", blocks: str = ""):
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "p.seq"
    path.write_text(f'use "bench.rig"\n{sites}{blocks}sequence s {{\n{body}\n}}\n')
    return seqlang.load(str(path))


def _value(text: str) -> float:
    return evaluate(parse_text(f"let x = {text}", "x.seq").items[0].value, Scope()).value


@pytest.mark.parametrize("text, expected", [
    ("asin(0.5)", math.pi / 6), ("acos(-1)", math.pi), ("atan2(1, -1)", 3 * math.pi / 4),
    ("atan2(1 kHz, 1 kHz)", math.pi / 4), ("clip(1.7, -1, 1)", 1.0), ("round(2.6)", 3.0),
    ("min(3, 1, 2)", 1.0), ("max(1 us, 3 us)", 3e-6), ("floor(-0.5)", -1.0)])
def test_estimator_functions(text, expected):
    assert _value(text) == pytest.approx(expected, rel=1e-12)


def test_asin_outside_its_domain_is_an_error_with_a_hint():
    with pytest.raises(Exception) as info:
        _value("asin(1.2)")
    assert "from -1 to 1, got 1.2" in info.value.diagnostic.message
    assert "clip" in info.value.diagnostic.hint


def test_record_value_sets_one_variant_per_key(tmp_path):
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  let est = asin(2 * fraction(mid[h1, h2]) - 1)
  pulse mw_rb area pi/2 phase 90 deg - est""")
    event = seq.played.conditioned()[0]
    phases = [v.phase_rad for v in event.decision.variants]
    assert phases == pytest.approx([math.pi / 2 - math.asin(2 * k / 2 - 1) for k in range(3)], abs=1e-12)
    assert event.decision.enabled == (True, True, True)


def test_a_record_constant_may_redefine_a_name_and_reads_its_earlier_value(tmp_path):
    """`let est = 0.25` then `let est = est + asin(...)`: the second reads the first (names bound
    before a `let`, as everywhere), once per key; it once looped for ever."""
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  let est = 0.25
  let est = est + asin(2 * fraction(mid[h1, h2]) - 1)
  pulse mw_rb area pi/2 phase 90 deg - est""")
    phases = [v.phase_rad for v in seq.played.conditioned()[0].decision.variants]
    assert phases == pytest.approx([math.pi / 2 - 0.25 - math.asin(2 * k / 2 - 1) for k in range(3)], abs=1e-12)


def test_area_from_a_count_shares_one_duration_and_disables_key_zero(tmp_path):
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  pulse mw_rb area pi / 2 * bright(mid[h1, h2])""")
    event = seq.played.conditioned()[0]
    variants = event.decision.variants
    assert event.decision.enabled == (False, True, True)
    # the longest area sets the duration at full amplitude; the others play at a lower amplitude
    assert event.duration_s == pytest.approx(1 / (2 * 20e3), rel=1e-4)
    assert variants[1].rabi_hz == pytest.approx(variants[2].rabi_hz / 2, rel=1e-4)
    assert [v.area_rad for v in variants] == pytest.approx([0, math.pi / 2, math.pi], rel=1e-4)


def test_when_branches_on_one_drive_are_exclusive_not_overlapping(tmp_path):
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  when mid[h1] is bright { pulse mw_rb area pi } otherwise { pulse mw_rb area pi phase 180 deg }""")
    then, other = seq.played.conditioned()
    assert then.start_s == other.start_s
    assert then.decision.enabled == (False, True) and other.decision.enabled == (True, False)


def test_branches_of_different_length_are_padded_with_a_warning(tmp_path):
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  when mid[h1] is bright { pulse mw_rb area pi } otherwise { wait 10 us }
  pulse mw_rb area pi/2""")
    (warning,) = seq.warnings
    assert warning.message == ("the `otherwise` branch is 15 us shorter; it is padded with idle time so that "
                               "what follows starts at the same time for every outcome")
    last = seq.played.pulses()[-1]
    assert last.start_s == pytest.approx(seq.played.pulses()[0].end_s, abs=1e-8)


def test_a_block_takes_a_drive_and_a_record(tmp_path):
    blocks = """block flip_on(drv, rec) {
  when rec[h1] is bright { pulse drv area pi }
}
"""
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  do flip_on(drv = mw_rb, rec = mid)""", blocks=blocks)
    (event,) = seq.played.conditioned()
    assert event.drive == "mw_rb" and event.decision.selection.record == "mid"


def test_one_echo_train_block_serves_both_species():
    seq = seqlang.load(os.path.join(PROGRAMS, "phase_correction.seq"))
    trains = [e for e in seq.played.pulses() if e.span.file.endswith("trains.seq")]
    assert {e.drive for e in trains} == {"mw_na"} and len(trains) == 4


def test_show_explains_a_pulse_on_the_projected_species(tmp_path):
    seq = _load(tmp_path, """  image k -> mid
  wait 60 us
  when mid[h1] is dark { pulse mw_k area pi }""")
    text = decision_summary(seq.checked)
    assert "looked up by outcome of mid[h1]: plays for keys 0 of 0..1" in text
    assert "projected: they are in |0> or |1> (or lost)" in text


def test_branch_table_of_the_ancilla_demo():
    seq = seqlang.load(os.path.join(PROGRAMS, "ancilla_flip.seq"))
    rows = branch_rows(seq.checked)
    assert [(r["key_kind"], r["key"], r["enabled"]) for r in rows] == [("outcome", 0, 1), ("outcome", 1, 0)]
    issued = min(e.tick for e in seq.checked.plan.rows() if e.event == rows[0]["event"])
    assert rows[0]["deadline_tick"] == issued and rows[0]["ready_tick"] <= issued
    image = next(e for e in seq.played.events if e.kind == "image")
    latency = seq.program.rig.imaging["cs"].decision_latency_s
    assert rows[0]["ready_tick"] == round((image.end_s + latency) / seq.program.rig.tick_s)
    assert rows[0]["source"] == "ancilla_flip.seq:23"
    assert rows[0]["amplitude"] == pytest.approx(rows[0]["rabi_hz"] / 22e3, rel=1e-10)


def test_branch_table_phases_follow_the_estimator_after_rounding():
    seq = seqlang.load(os.path.join(PROGRAMS, "phase_correction.seq"))
    rows = branch_rows(seq.checked)
    assert [r["key"] for r in rows] == [0, 1, 2, 3, 4]
    for row in rows:
        estimate = math.asin(2 * row["key"] / 4 - 1)
        assert row["phase_rad"] == pytest.approx(math.pi - 0.40 / 0.48 * estimate, abs=1e-9)
        assert row["area_rad"] == pytest.approx(math.pi / 2, rel=1e-4)  # after tick and amplitude rounding
    parsed = list(csv.DictReader(io.StringIO("".join(branches_csv(seq.checked).splitlines(True)[2:]))))
    assert len(parsed) == 5 and parsed[4]["sites"] == "h1 h2 h3 h4"


def test_compile_writes_the_branch_table_reproducibly(tmp_path):
    path = os.path.join(PROGRAMS, "ancilla_flip.seq")
    outs = []
    for name in ("a", "b"):
        run = subprocess.run([sys.executable, "-m", "seqlang", "compile", path, "-o", str(tmp_path / name)],
                             capture_output=True, text=True)
        assert run.returncode == 0, run.stderr
        outs.append(tmp_path / name)
    assert (outs[0] / "branches.csv").read_bytes() == (outs[1] / "branches.csv").read_bytes()
    document = json.loads((outs[0] / "timing.json").read_text())
    assert [r["key"] for r in document["branches"]] == [0, 1]
    assert "CAUTION" in (outs[0] / "branches.csv").read_text()


def test_a_program_without_feed_forward_has_no_branch_table(tmp_path):
    seq = seqlang.load(os.path.join(PROGRAMS, "bell_pair.seq"))
    paths = seq.write_tables(str(tmp_path))
    assert not any(p.endswith("branches.csv") for p in paths)
    assert "branches" not in json.loads((tmp_path / "timing.json").read_text())


def test_in_cluster_feed_forward_prepares_the_data_in_every_shot():
    result = seqlang.simulate(os.path.join(PROGRAMS, "ancilla_flip.seq"), shots=200, seed=2)
    ff = result.expectations[0]["feed_forward"]
    assert ff["with"]["fidelity"] > 0.999
    keys = ff["keys"][0]["keys"]
    # without feed-forward one fixed key is played: the flip happens always or never
    assert ff["without"]["fidelity"] == pytest.approx(keys[ff["keys"][0]["fixed_key_without"]]["probability"],
                                                      abs=1e-3)
