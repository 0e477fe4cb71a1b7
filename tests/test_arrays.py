"""Arrays at scale: lattice layouts, stochastic loading and rearrangement (docs/arrays.md).

Outside references, named at each check: nearest-neighbour counts of the lattices
(Ashcroft & Mermin, Solid State Physics, 1976, ch. 4); the binomial law of the
loaded count (scipy.stats.binom, chi-square test: scipy.stats.chisquare); optimal
assignments against brute-force enumeration (itertools.permutations); the filling
after rearrangement against the closed form p^L averaged over the plan.
"""
from __future__ import annotations

import itertools
import json
import math
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import pdist, squareform

from seqlang.api import load
from seqlang.arrays import rearrange
from seqlang.arrays.loading import Occupancy, draw
from seqlang.lang.diagnostics import SeqlangError

ROOT = Path(__file__).parent.parent
RIG = ROOT / "tests" / "bad" / "arraybench.rig"


def _program(tmp_path, text: str, rig_edit=None, occupancy=None):
    rig = RIG.read_text()
    (tmp_path / "arraybench.rig").write_text(rig_edit(rig) if rig_edit else rig)
    path = tmp_path / "case.seq"
    path.write_text('use "arraybench.rig"\n' + text)
    return load(str(path), occupancy=occupancy)


def _certain(rig: str) -> str:
    """Every trap loads: the geometry tests see the whole layout."""
    return rig.replace("loading 55 %", "loading 100 %").replace("loading 60 %", "loading 100 %")


# ---------------------------------------------------------------- layouts
TEXTBOOK_NEIGHBOURS = {"square": 4, "triangular": 6, "hexagonal": 3}  # Ashcroft & Mermin (1976), ch. 4


@pytest.mark.parametrize("kind", sorted(TEXTBOOK_NEIGHBOURS))
def test_nearest_neighbour_distance_and_count_match_the_textbook(tmp_path, kind):
    """Ashcroft & Mermin, Solid State Physics (1976): coordination 4 (square), 6 (triangular), 3 (honeycomb)."""
    seq = _program(tmp_path, f"lattice d = {kind} {{ pitch 5 um  size (9, 9)  species na  rotation 17 deg "
                             "origin (3, -2) um }\nsequence s { wait 1 us }\n", _certain)
    positions = np.array([s.position_m for s in seq.program.sites.values()])
    distances = squareform(pdist(positions))  # independent of the k-d tree the summary uses
    np.fill_diagonal(distances, np.inf)
    assert distances.min() == pytest.approx(5e-6, rel=1e-9)
    counts = (distances < 5e-6 * (1 + 1e-6)).sum(axis=1)
    assert counts.max() == TEXTBOOK_NEIGHBOURS[kind]
    interior = np.median(counts)  # most sites of a 9 x 9 array are inside it
    assert interior == TEXTBOOK_NEIGHBOURS[kind]


def test_rectangular_lattice_has_two_pitches(tmp_path):
    seq = _program(tmp_path, "lattice d = rectangular { pitch (4, 7) um  size (3, 2)  species na }\n"
                             "sequence s { wait 1 us }\n", _certain)
    sites = seq.program.sites
    assert sites["d[2,1]"].position_m[:2] == pytest.approx((8e-6, 7e-6))
    assert len(sites) == 6


def test_indices_slices_rotation_and_interleaving(tmp_path):
    seq = _program(tmp_path, "lattice d = square { pitch 5 um  size (6, 4)  species (na, cs)  pattern checkerboard "
                             "rotation 90 deg  origin (1, 2) um }\n"
                             "group row = d[*, 2]\ngroup corner = d[0 .. 1, 0 .. 1]\n"
                             "sequence s { pulse ryd_cs on d[1, 0] area pi }\n", _certain)
    program = seq.program
    # rotated by 90 degrees about the origin: x -> y, y -> -x
    assert program.sites["d[3,1]"].position_m[:2] == pytest.approx((1e-6 - 5e-6, 2e-6 + 15e-6))
    assert program.groups["row"] == tuple(f"d[{i},2]" for i in range(6))
    assert program.groups["corner"] == ("d[0,0]", "d[1,0]", "d[0,1]", "d[1,1]")
    assert [program.sites[n].species for n in program.groups["corner"]] == ["na", "cs", "cs", "na"]
    assert len(program.groups["d"]) == 24


def test_honeycomb_sub_lattice_holds_the_second_species(tmp_path):
    seq = _program(tmp_path, "lattice h = hexagonal { pitch 5 um  size (3, 3)  species (na, cs)  pattern sublattice }\n"
                             "sequence s { wait 1 us }\n", _certain)
    sites = seq.program.sites
    assert sites["h[1,1,0]"].species == "na" and sites["h[1,1,1]"].species == "cs"
    assert math.dist(sites["h[1,1,0]"].position_m, sites["h[1,1,1]"].position_m) == pytest.approx(5e-6)


def test_positions_from_a_trap_file(tmp_path):
    (tmp_path / "traps.csv").write_text("x,y,species,name\n0,0,na,a\n6,0,cs,b\n0, 6.5 ,cs,c\n")
    seq = _program(tmp_path, 'lattice t from "traps.csv" origin (10, 0) um\n'
                             "sequence s { pulse ryd_cs on t[2] area pi }\n", _certain)
    sites = seq.program.sites
    assert sites["c"].position_m[:2] == pytest.approx((10e-6, 6.5e-6))
    assert seq.program.groups["t"] == ("a", "b", "c")
    assert seq.timeline.events[0].targets == ("c",)


# ---------------------------------------------------------------- loading
def test_loaded_count_is_binomial(tmp_path):
    """The count of loaded traps follows Binomial(n, p) (scipy.stats.binom; chi-square goodness of fit)."""
    seq = _program(tmp_path, "lattice d = square { pitch 5 um  size (10, 10)  species na }\n"
                             "sequence s { wait 1 us }\n")
    table = draw(seq.program, seed=7, shots=4000, traps=seq.program.arrays.traps)
    counts = table.sum(axis=1)
    n, p = 100, 0.55
    edges = np.arange(41, 71)  # inner bins; the tails are lumped at both ends
    observed = np.array([(counts < edges[0]).sum()] + [(counts == k).sum() for k in edges] +
                        [(counts > edges[-1]).sum()])
    expected = np.concatenate([[stats.binom.cdf(edges[0] - 1, n, p)], stats.binom.pmf(edges, n, p),
                               [stats.binom.sf(edges[-1], n, p)]]) * len(counts)
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    assert counts.mean() == pytest.approx(n * p, abs=4 * math.sqrt(n * p * (1 - p) / len(counts)))


def test_the_shot_uses_the_first_draw_and_records_its_seed(tmp_path):
    text = "lattice d = square { pitch 5 um  size (8, 8)  species na }\nsequence s { wait 1 us }\n"
    one = _program(tmp_path, text, occupancy=Occupancy(seed=3)).program
    row = draw(one, seed=3, shots=5, traps=one.arrays.traps)[0]
    assert set(one.sites) == {n for n, full in zip(one.arrays.traps, row) if full}
    other = _program(tmp_path, text, occupancy=Occupancy(seed=4)).program
    assert set(other.sites) != set(one.sites)


def test_given_occupancy_and_its_unknown_names(tmp_path):
    text = "lattice d = square { pitch 5 um  size (3, 3)  species na }\nsequence s { pulse mw_na area pi }\n"
    given = Occupancy(given=frozenset({"d[0,0]", "d[2,2]"}), source="occ.txt", text="d[0,0]\nd[2,2]\n")
    seq = _program(tmp_path, text, occupancy=given)
    assert set(seq.program.sites) == {"d[0,0]", "d[2,2]"}
    assert seq.timeline.events[0].targets == ("d[0,0]", "d[2,2]")
    bad = Occupancy(given=frozenset({"d[9,9]"}), source="occ.txt", text="  d[9,9]  # typo\n")
    with pytest.raises(SeqlangError) as info:
        _program(tmp_path, text, occupancy=bad)
    d = info.value.diagnostics[0]
    assert (d.span.file, d.span.line, d.span.column) == ("occ.txt", 1, 3)
    assert "unknown site `d[9,9]`" in d.message


# ---------------------------------------------------------------- assignment
@pytest.mark.parametrize("seed", range(6))
def test_assignment_is_optimal_against_brute_force(seed):
    """The Hungarian assignment's total distance equals the minimum over every injection
    of targets into atoms, enumerated with itertools.permutations."""
    rng = np.random.default_rng(seed)
    atoms, targets = rng.uniform(0, 30e-6, (7, 3)), rng.uniform(0, 30e-6, (4, 3))
    pairs = rearrange.assign(atoms, targets)
    total = sum(np.linalg.norm(atoms[i] - targets[j]) for i, j in pairs)
    best = min(sum(np.linalg.norm(atoms[a] - targets[j]) for j, a in enumerate(chosen))
               for chosen in itertools.permutations(range(7), 4))
    assert total == pytest.approx(best, rel=1e-12)
    assert sorted(j for _, j in pairs) == [0, 1, 2, 3]


# ---------------------------------------------------------------- rearrangement
FILL = ("lattice d = square { pitch 4.5 um  size (10, 10)  species (na, cs)  pattern rows }\n"
        "group block = d[0 .. 3, 1], d[0 .. 3, 3], d[0 .. 3, 5]\n"
        "sequence s {\n  fill block\n  pulse mw_cs area pi\n}\n")


def _fill(tmp_path, seed=2, rig_edit=None):
    return _program(tmp_path, FILL, rig_edit, occupancy=Occupancy(seed=seed))


def test_fill_makes_a_defect_free_block_with_plain_moves(tmp_path):
    seq = _fill(tmp_path)
    program, plan = seq.program, seq.program.arrays.plans[0]
    block = program.groups["block"]
    assert len(block) == 12 and set(block) <= set(program.sites)
    moves = [e for e in seq.timeline.events if e.kind == "move"]
    assert len(moves) == sum(len(c.legs) for c in plan.carries) > 0
    # after the moves, every block site's atom stands on its own trap
    from seqlang.compile.motion import positions_at
    where = positions_at(program, seq.timeline, seq.timeline.duration_s)
    for name in block:
        assert where[name] == pytest.approx(program.arrays.traps[name].position_m, abs=1e-12)
    # the microwave pulse after the fill reaches every caesium atom, and only those
    pulse = next(e for e in seq.timeline.events if e.kind == "pulse")
    assert set(pulse.targets) == {n for n, s in program.sites.items() if s.species == "cs"}


def test_carries_find_their_target_empty_and_keep_half_a_pitch_from_every_trap(tmp_path):
    seq = _fill(tmp_path, seed=5)
    state = seq.program.arrays
    full = set(state.loaded)
    traps = np.array([s.position_m for s in state.traps.values()])
    names = list(state.traps)
    for carry in state.plans[0].carries:
        assert carry.target not in full
        for a, b, _ in carry.legs:
            for tau in np.linspace(0, 1, 41):
                point = np.add(a, tau * np.subtract(b, a))
                gaps = np.linalg.norm(traps - point, axis=1)
                for name, gap in zip(names, gaps):
                    if name not in (carry.source, carry.target):
                        assert gap >= 4.5e-6 / 2 * (1 - 1e-9)
        full.discard(carry.source)
        full.add(carry.target)


def test_filling_matches_the_closed_form_p_to_the_L(tmp_path):
    """Survival per micrometre q = exp(-1 um / loss length): filling = mean over targets of q^L
    (L the path in um, 0 for an atom already in place), times the per-move survival p of carried atoms."""
    p, length = 0.97, 3e-3

    def lossy(rig):
        return rig.replace("move_survival 99.4 %", f"move_survival {p * 100} %").replace(
            "move_loss_length 5 mm", f"move_loss_length {length * 1e3} mm")
    plan = _fill(tmp_path, seed=2, rig_edit=lossy).program.arrays.plans[0]
    q = math.exp(-1e-6 / length)
    paths_um = [sum(math.dist(a, b) for a, b, _ in c.legs) * 1e6 for c in plan.carries]
    closed = (len(plan.kept) + sum(p * q ** L for L in paths_um)) / len(plan.targets)
    assert plan.expected_filling == pytest.approx(closed, rel=1e-12)
    assert plan.expected_filling < 1


def test_corridor_path_length_is_the_cell_walk(tmp_path):
    """Off the site and onto the target by half-diagonals (a/sqrt 2 each), between them along the
    corridors: |di| - 1 and |dj| - 1 pitches (none along an axis not crossed); a rotated square lattice."""
    class Layout:
        pitch_m, origin_m, rotation_rad = (4e-6, 4e-6), (1e-6, 2e-6, 0.0), 0.3
    c, s = math.cos(0.3), math.sin(0.3)

    def world(i, j):
        return (c * 4e-6 * i - s * 4e-6 * j + 1e-6, s * 4e-6 * i + c * 4e-6 * j + 2e-6, 0.0)
    for (i0, j0), (i1, j1) in [((0, 0), (3, 5)), ((2, 2), (2, 6)), ((4, 1), (0, 1)), ((1, 1), (2, 2))]:
        points = rearrange.corridor_path(world(i0, j0), world(i1, j1), Layout)
        walked = sum(math.dist(a, b) for a, b in zip(points, points[1:]))
        di, dj = abs(i1 - i0), abs(j1 - j0)
        expected = 4e-6 * (math.sqrt(2) + max(di - 1, 0) + max(dj - 1, 0))
        assert walked == pytest.approx(expected, rel=1e-9)


def test_compiled_tables_are_identical_for_one_occupancy(tmp_path):
    (tmp_path / "a").mkdir()
    shutil.copy(RIG, tmp_path / "a" / "arraybench.rig")
    (tmp_path / "a" / "fill.seq").write_text('use "arraybench.rig"\n' + FILL)

    def compiled(out, *extra):
        result = subprocess.run([sys.executable, "-m", "seqlang", *extra, "compile", "fill.seq", "-o", out],
                                cwd=tmp_path / "a", capture_output=True, text=True, timeout=120)
        assert result.returncode == 0, result.stderr
        return {n: (tmp_path / "a" / out / n).read_bytes() for n in ("timing.json", "rearrangement.csv")}
    first, again = compiled("one", "--load-seed", "2"), compiled("two", "--load-seed", "2")
    assert first == again
    assert compiled("three", "--load-seed", "3") != first
    document = json.loads(first["timing.json"])
    assert document["provenance"]["load_seed"] == 2
    assert document["arrays"]["fills"][0]["targets"] == 12


def test_fill_needs_deflector_limits(tmp_path):
    def unlimited(rig):
        return rig.replace("    max_velocity 0.3 um / us\n", "").replace("    max_acceleration 0.002 um / us^2\n", "")
    with pytest.raises(SeqlangError) as info:
        _fill(tmp_path, rig_edit=unlimited)
    assert "declare no `max_velocity` or `max_acceleration`" in info.value.diagnostics[0].message


# ---------------------------------------------------------------- front end and figures
def test_an_index_keeps_the_span_of_what_was_written(tmp_path):
    from seqlang.lang import syntax as ast
    from seqlang.lang.parser import parse_text
    source = parse_text("group g = d[1 .. 2, *], q\n", "x.seq")
    ref = source.items[0].members[0]
    assert isinstance(ref, ast.Indexed) and ref.indices[1] is None
    assert (ref.span.line, ref.span.column, ref.span.end_column) == (1, 11, 23)
    assert [m.name for m in source.items[0].members[1:]] == ["q"]


def test_check_says_that_the_sites_it_counts_are_the_loaded_traps(capsys):
    from seqlang.cli import main
    demo = ROOT / "programs" / "array_rearrange.seq"
    assert main(["check", str(demo)]) == 0
    program = load(str(demo)).program
    loaded = len(program.arrays.loaded)
    assert f"{len(program.sites)} sites (loaded of 225 traps, drawn with load seed 1)" in capsys.readouterr().out
    assert len(program.sites) == loaded < 225


def test_show_and_the_array_figure_draw_the_demo(tmp_path):
    demo = ROOT / "programs" / "array_rearrange.seq"
    shown = subprocess.run([sys.executable, "-m", "seqlang", "show", str(demo), "--no-pairs"],
                           capture_output=True, text=True, timeout=120)
    assert shown.returncode == 0, shown.stderr
    assert "lattice d: square 15 x 15, 225 sites (cs 105, na 120); nearest neighbours 4.5 um, up to 4" in shown.stdout
    assert "fill cs: 18 target sites" in shown.stdout
    from seqlang.plot.array import draw
    figure = draw(load(str(demo)).program, {}, None)
    labels = figure.axes[0].get_legend_handles_labels()[1]
    assert {"empty trap", "fill path", "na", "cs"} <= set(labels)
    png = tmp_path / "array.png"
    run = subprocess.run([sys.executable, "-m", "seqlang", "plot", str(demo), "--what", "array", "-o", str(png)],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    from matplotlib.image import imread
    assert imread(png).std() > 0.01  # not blank
