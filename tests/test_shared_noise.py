"""Classical noise that is one physical thing is drawn once per shot for the whole array.

Two sodium atoms 50 um apart are separate clusters. A Ramsey sequence under the
shared quasi-static field offset gives each shot the phase φ = 2π·s·B·T for both
atoms, so their per-shot fringe values agree exactly; with the noise drawn per
cluster (the unshared mode) they are uncorrelated. Same for a drive's intensity
noise (one beam reaching both atoms). Invented test rig.
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

import seqlang
from seqlang.sim.feedforward import shot_fidelities

RIG = """\
rig pondbench {
  tick 2 ns
  field_rms 1 mG
  species na = Na23 { field_sensitivity 300 Hz / mG }
  drive mw_na microwave na { rabi 1 MHz  port awg0.1  intensity_noise 20 % }
}
"""


@pytest.fixture(autouse=True)
def every_cluster_its_own_run(monkeypatch):
    """Identical clusters normally share one run (and so one set of draws); here each
    cluster runs on its own so that what is shared comes from the noise model alone."""
    import seqlang.sim.api as api
    monkeypatch.setattr(api, "representatives", lambda program, models: list(range(len(models))))


def _run(tmp_path, shared: bool, sources: str, body: str):
    (tmp_path / "bench.rig").write_text(RIG)
    path = tmp_path / "r.seq"
    path.write_text(f'use "bench.rig"\nsite a = na at (0, 0) um\nsite b = na at (50, 0) um\n'
                    f"sequence s {{\n{body}\n}}\nexpect a as |0>\nexpect b as |0>\n")
    result = seqlang.simulate(str(path), noise=sources, shots=400, seed=2, shared_noise=shared)
    assert len(result.clusters) == 2
    return [shot_fidelities([c], SimpleNamespace(sites=(s,), state="|0>", is_ket=True)) for c, s in zip(result.clusters, "ab")]


RAMSEY = "  pulse mw_na area pi/2\n  wait 1 ms\n  pulse mw_na area pi/2 phase 180 deg"
FLOP = "  pulse mw_na area 3pi"


@pytest.mark.parametrize("sources, body", [("field_noise", RAMSEY), ("intensity", FLOP)], ids=["field", "beam"])
def test_shared_noise_is_the_same_in_every_cluster(tmp_path, sources, body):
    a, b = _run(tmp_path, True, sources, body)
    assert np.std(a) > 0.05  # the noise does something
    np.testing.assert_allclose(a, b, atol=1e-9)


@pytest.mark.parametrize("sources, body", [("field_noise", RAMSEY), ("intensity", FLOP)], ids=["field", "beam"])
def test_unshared_noise_is_independent_between_clusters(tmp_path, sources, body):
    a, b = _run(tmp_path, False, sources, body)
    assert abs(np.corrcoef(a, b)[0, 1]) < 0.2  # 400 shots: |r| of independent draws ~ 0.05
