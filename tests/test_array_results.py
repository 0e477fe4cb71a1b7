"""Array-scale results: summaries by species and group, and the array map."""
from __future__ import annotations

import numpy as np
import pytest

import seqlang
from seqlang.cli import main
from seqlang.sim.commands import as_document, summary

RIG = """\
rig pondbench {
  tick 2 ns
  species na = Na23 { qubit clock }
  species k = K39 { qubit clock }
  drive mw_na microwave na { rabi 1 MHz  port awg0.1 }
  drive mw_k microwave k { rabi 1 MHz  port awg0.2 }
  image k { port ttl.9  duration 1 ms }
}
"""


@pytest.fixture(scope="module")
def array(tmp_path_factory):
    """A 4×4 checkerboard of two species; potassium rotated by π/3, so P(bright) = sin²(π/6) = 1/4."""
    tmp = tmp_path_factory.mktemp("array")
    (tmp / "bench.rig").write_text(RIG)
    lines = ['use "bench.rig"']
    for i in range(4):
        for j in range(4):
            lines.append(f"site s{i}{j} = {'na' if (i + j) % 2 == 0 else 'k'} at ({6 * i}, {6 * j}) um")
    lines += ["group row0 = " + ", ".join(f"s0{j}" for j in range(4)),
              "sequence grid {", "  pulse mw_na area pi/2", "  pulse mw_k area pi/3", "  image k -> mid", "}"]
    path = tmp / "grid.seq"
    path.write_text("\n".join(lines) + "\n")
    return str(path), seqlang.simulate(str(path))


def test_summary_by_species_and_group(array):
    _, result = array
    document = as_document(result)
    stats = document["array_summary"]
    assert stats["species"]["na"]["sites"] == 8 and stats["species"]["k"]["sites"] == 8
    assert stats["species"]["na"]["levels"]["1"]["mean"] == pytest.approx(0.5, abs=1e-5)
    assert stats["species"]["k"]["records"]["mid"]["mean_bright"] == pytest.approx(0.25, abs=1e-5)
    assert stats["groups"]["row0"]["sites"] == 4
    assert len(document["site_populations"]) == 16  # per site numbers stay in the JSON
    text = summary(document)
    assert "16 clusters (16 of 1 site)" in text
    assert "species k (8 sites)" in text and "record mid: P(bright) 0.25000" in text
    assert len(text.splitlines()) < 20  # not one line per site


def test_array_map_is_drawn(array, tmp_path, capsys):
    path, _ = array
    out = tmp_path / "map.png"
    assert main(["plot", path, "--what", "array", "--record", "mid", "-o", str(out)]) == 0
    import matplotlib.image
    image = matplotlib.image.imread(str(out))
    assert image.shape[0] > 200 and np.std(image) > 0.05
    assert main(["plot", path, "--what", "array", "--record", "nope", "-o", str(out)]) == 2
    assert "no record `nope`" in capsys.readouterr().err
