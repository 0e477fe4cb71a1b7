"""Array scale: spatial cutoff of pair lookups, shared runs of identical clusters, errors over clusters."""
from __future__ import annotations

import math

import numpy as np
import pytest

import seqlang
from seqlang.sim.clusters import CLUSTER_THRESHOLD, smallest_rydberg_rabi_hz
from seqlang.sim.commands import as_document
from seqlang.sim.model import pair_interactions_hz

RIG = """
rig arraybench {
  tick 1 ns
  species a = Rb87 { rydberg 70S1/2 }
  species b = Cs133 { rydberg 62S1/2 }
  drive mw_a microwave a { rabi 2 MHz  port awg0.1  amplitude_bits 32  intensity_noise 5 % }
  drive mw_b microwave b { rabi 2 MHz  port awg0.2  amplitude_bits 32 }
  drive ryd_a rydberg a { rabi 2 MHz  reach each  port awg1.1  amplitude_bits 32 }
  drive ryd_b rydberg b { rabi 2 MHz  reach each  port awg1.2  amplitude_bits 32 }
}
"""


def _array(tmp_path, pairs: int, spacing_um: float = 80.0) -> str:
    (tmp_path / "a.rig").write_text(RIG)
    sites = []
    for k in range(pairs):
        sites += [f"site p{k} = a at ({spacing_um * k}, 0) um", f"site q{k} = b at ({spacing_um * k + 5}, 0) um"]
    body = ("pulse mw_a area pi/2\npulse ryd_a on " + ", ".join(f"p{k}" for k in range(pairs)) + " area pi\n"
            "pulse ryd_b on " + ", ".join(f"q{k}" for k in range(pairs)) + " area pi")
    path = tmp_path / "a.seq"
    expects = "expect p0, q0 as |00>\n" + ("expect p0, p1 as |00>\n" if pairs > 1 else "")
    path.write_text('use "a.rig"\n' + "\n".join(sites) + f"\nsequence a {{\n{body}\n}}\n" + expects)
    return str(path)


def test_spatial_cutoff_keeps_every_pair_that_could_cluster(tmp_path):
    """Pairs beyond the cutoff radius are not looked up; those kept equal the all-pairs values."""
    sequence = seqlang.load(_array(tmp_path, 6))
    program = sequence.program
    everything = pair_interactions_hz(program, tuple(program.sites))
    cutoff = CLUSTER_THRESHOLD * smallest_rydberg_rabi_hz(program, sequence.played)
    near = pair_interactions_hz(program, tuple(program.sites), cutoff)
    assert set(near) < set(everything)
    assert {p for p, v in everything.items() if abs(v) >= cutoff} <= set(near)
    assert all(near[p] == everything[p] for p in near)


def test_identical_clusters_share_one_run_and_keep_per_site_results(tmp_path):
    """Six identical pairs: one simulated representative, the same numbers at every pair as a
    one-pair array (the per-site results of each cluster stay correct)."""
    many = seqlang.simulate(_array(tmp_path, 6), noise="intensity", shots=100)
    assert len({c.representative for c in many.clusters}) == 1
    assert len(many.clusters) == 6
    pops = [c.populations() for c in many.clusters]
    assert all(np.array_equal(p, pops[0]) for p in pops)
    (tmp_path / "one").mkdir()
    one = seqlang.simulate(_array(tmp_path / "one", 1), noise="intensity", shots=100)
    assert np.allclose(one.clusters[0].populations(), pops[0], atol=1e-12)  # same seed, same draws
    assert pops[0][0, 2] == pytest.approx(0.5, abs=0.05)  # π/2 then π to |r⟩, ±intensity noise


def test_error_bar_of_an_expectation_spanning_two_clusters(tmp_path):
    """P(p0 = 0, p1 = 0) = P₀·P₁ over two independent (identical) clusters: the delta method gives
    the standard error 2·P̄·σ/√N for one shared run (derived), and the estimate lies within it of
    the exact value (1/2)² averaged over the intensity noise."""
    path = _array(tmp_path, 2)
    result = seqlang.simulate(path, noise="intensity", shots=400, seed=5)
    e = result.expectations[1]
    assert "fidelity_error" in e and e["fidelity_error"] > 0
    cluster = result.clusters[0]
    per_shot = cluster.shot_populations()[:, 0, 0]
    mean = per_shot.mean()
    assert e["fidelity"] == pytest.approx(mean**2, abs=1e-9)
    assert e["fidelity_error"] == pytest.approx(2 * mean * per_shot.std(ddof=1) / math.sqrt(400), rel=1e-6)
    # P(0) = (1 − sin(π/2·(1 + ε)))/2 with ε ~ N(0, 0.05²): E ≈ 1/2 (derived); F ≈ 1/4
    assert e["fidelity"] == pytest.approx(0.25, abs=4 * e["fidelity_error"] + 1e-3)


def test_sampled_json_has_errors_for_sites_and_records(tmp_path):
    document = as_document(seqlang.simulate(_array(tmp_path, 2), noise="intensity", shots=50))
    assert document["site_populations_error"]["p0"]["0"] > 0 and document["site_populations_error"]["p0"]["1"] == 0
    assert document["noise"]["shots"] == 50
