"""Pair models (seqlang.atoms.pairs) and Stark shifts (seqlang.atoms.stark) against outside references.

References: the alkali Rydberg calculator ARC (Šibalić et al., Comput. Phys. Commun. 220, 319
(2017)) through its own perturbative C6, pair-state diagonalisation with its r_vdW fit, and
Stark map; hydrogenic ⟨r²⟩ (Bethe & Salpeter, "Quantum Mechanics of One- and Two-Electron
Atoms", 1957); the two-level form of a Förster channel (derived). One temporary cache
directory serves the module, so each ARC quantity is computed once.
"""
import math

import numpy as np
import pytest

from seqlang.atoms import cache, pairs, rydberg, stark

UM = 1e-6


@pytest.fixture(scope="module", autouse=True)
def shared_cache_dir(tmp_path_factory):
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(cache.CACHE_DIR_ENV, str(tmp_path_factory.mktemp("seqlang-pairs-cache")))
        yield


def test_diagonalised_potential_far_from_resonance_is_the_perturbative_c6():
    """Rb87 60S + 60S (nearest channel 1.2 GHz away, crossover 2 µm): beyond the Le Roy radius
    and 3 crossover radii the diagonalised V(R) is ARC's −C6/R⁶ within 2 %."""
    table = pairs.diagonalised_table("Rb87", "60S1/2", "Rb87", "60S1/2")
    c6 = rydberg.c6_hz_m6("Rb87", "60S1/2", "Rb87", "60S1/2").c6_hz_m6
    for r in (6 * UM, 8 * UM, 10 * UM):
        value, overlap = pairs._interpolate(table, r)
        assert value == pytest.approx(c6 / r**6, rel=0.02)
        assert overlap > 0.99


def test_resonant_pair_scales_as_r_to_the_minus_three_over_a_decade():
    """Rb87 60S1/2 + 60P1/2 is exactly resonant with 60P1/2 + 60S1/2 (dipolar exchange):
    |V|·R³ is constant within 5 % from 5 µm to 50 µm (first-order dipole–dipole, derived);
    closer in, other channels mix in (at 3 µm C3/R³ is ~100 MHz)."""
    table = pairs.diagonalised_table("Rb87", "60S1/2", "Rb87", "60P1/2")
    scaled = [abs(pairs._interpolate(table, r * UM)[0]) * (r * UM) ** 3 for r in (5, 8, 12, 20, 35, 50)]
    assert max(scaled) / min(scaled) < 1.05
    slope = math.log(abs(pairs._interpolate(table, 50 * UM)[0]) / abs(pairs._interpolate(table, 5 * UM)[0]))
    assert slope / math.log(10) == pytest.approx(-3, abs=0.05)


def test_crossover_radius_matches_arcs_van_der_waals_radius():
    """Rb87 43D5/2 + 43D5/2 (8.3 MHz from 45P3/2 + 41F7/2): ARC's diagonalisation fitted by its
    getVdwFromLevelDiagram gives r_vdW with E ∝ 1 − √(1 + (r_vdW/R)⁶); the two-level form of
    our channel gives r_vdW = 2^(1/3)·(C3/|δ|)^(1/3). They agree within 2 %."""
    import arc
    rb = arc.Rubidium87()
    arc_pair = arc.PairStateInteractions(rb, 43, 2, 2.5, 43, 2, 2.5, 2.5, 2.5)
    arc_pair.defineBasis(0, 0, 2, 4, 1e9, progressOutput=False)
    arc_pair.diagonalise(np.linspace(1.5, 15, 40), 20, progressOutput=False)
    arc_radius_um = arc_pair.getVdwFromLevelDiagram(1.5, 15)
    channel = pairs.dominant_channel("Rb87", "43D5/2", "Rb87", "43D5/2")
    assert channel.levels == ("45P3/2", "41F7/2")
    assert 2 ** (1 / 3) * channel.crossover_radius_m == pytest.approx(arc_radius_um * UM, rel=0.02)


def hydrogenic_r2_a0(n_star: float, l: int) -> float:  # noqa: E741
    """⟨r²⟩ = n*²(5n*² + 1 − 3l(l+1))/2 in a0² (Bethe & Salpeter 1957, with n → n*)."""
    return n_star**2 * (5 * n_star**2 + 1 - 3 * l * (l + 1)) / 2


def test_le_roy_radius_follows_the_hydrogenic_r_squared():
    """Le Roy radius 2(√⟨r_a²⟩ + √⟨r_b²⟩) (Le Roy, Can. J. Phys. 52, 246 (1974)) for
    Na 58S + Cs 62S, with n* from ARC's energies; the hydrogenic ⟨r²⟩ is good to ~3 % here."""
    def n_star(name, label):
        ry = 3.2898419602508e15  # R_inf c (CODATA 2018); the reduced-mass correction is < 1e-4
        return math.sqrt(ry / -rydberg.energy_hz(name, label))
    expected = 2 * sum(math.sqrt(hydrogenic_r2_a0(n_star(s, lv), 0)) * rydberg.BOHR_RADIUS_M
                       for s, lv in (("Na23", "58S1/2"), ("Cs133", "62S1/2")))
    assert pairs.le_roy_radius_m("Na23", "58S1/2", "Cs133", "62S1/2") == pytest.approx(expected, rel=0.03)


def test_quadratic_stark_shift_matches_arcs_stark_map():
    """Rb87 50S1/2 in 5 V/m: −αE²/2 with α from the second-order sum agrees with the level
    shift of ARC's Stark map (exact diagonalisation, n ± 4, l ≤ 10) within 2 %."""
    import arc
    stark_map = arc.StarkMap(arc.Rubidium87())
    stark_map.defineBasis(50, 0, 0.5, 0.5, 46, 54, 10, progressOutput=False)
    stark_map.diagonalise([0.0, 5.0], progressOutput=False)
    levels = [stark_map.y[k][int(np.argmax(stark_map.highlight[k]))] for k in range(2)]
    arc_shift_hz = (levels[1] - levels[0]) * 1e9
    assert stark.stark_shift_hz("Rb87", "50S1/2", 5.0) == pytest.approx(arc_shift_hz, rel=0.02)
    assert stark.stark_shift_hz("Rb87", "50S1/2", 10.0) == pytest.approx(4 * stark.stark_shift_hz("Rb87", "50S1/2", 5.0))


def test_s_pair_is_nearly_isotropic_and_a_d_pair_is_not():
    """C6 at θ = 0, 45°, 90°: ARC's getC6perturbatively called directly for Rb87 60D5/2 pairs
    equals ours; the 60S pair varies by < 5 %, the D pair by more than 20 % (common practice)."""
    import arc
    angles = (0.0, math.pi / 4, math.pi / 2)
    s_pair = [pairs.c6_at_hz_m6("Rb87", "60S1/2", "Rb87", "60S1/2", a) for a in angles]
    d_pair = [pairs.c6_at_hz_m6("Rb87", "60D5/2", "Rb87", "60D5/2", a) for a in angles]
    reference = arc.PairStateInteractions(arc.Rubidium87(), 60, 2, 2.5, 60, 2, 2.5, 2.5, 2.5)
    for a, ours in zip(angles, d_pair):
        arc_c6 = reference.getC6perturbatively(a, 0.0, rydberg.C6_N_RANGE, rydberg.C6_ENERGY_WINDOW_HZ)
        assert ours == pytest.approx(-arc_c6 * 1e-27, rel=1e-6)
    assert max(s_pair) / min(s_pair) < 1.05
    assert max(abs(c) for c in d_pair) / min(abs(c) for c in d_pair) > 1.2


def test_model_choice_follows_the_crossover_radius(monkeypatch):
    """Rb 60S pair: perturbative at 5 µm (> 2 r_c) equals C6/R⁶; diagonalised at 3 µm; a declared
    resonant pair gives ±C3/R³ with C3 = √|C6_channel·δ| (two-level form, derived).

    Which model is chosen depends on the crossover radius of the dominant channel, not on the
    diagonalisation basis, so the diagonalised value is computed in a smaller basis (n' within
    n ± 1, l' ≤ P: its own cache key) to keep a cold run to seconds."""
    monkeypatch.setattr(pairs, "PAIR_N_RANGE", 1)
    monkeypatch.setattr(pairs, "PAIR_L_MAX", 1)
    far = pairs.pair_shift("Rb87", "60S1/2", "Rb87", "60S1/2", 5 * UM)
    near = pairs.pair_shift("Rb87", "60S1/2", "Rb87", "60S1/2", 3 * UM)
    c6 = rydberg.c6_hz_m6("Rb87", "60S1/2", "Rb87", "60S1/2").c6_hz_m6
    assert far.model == "perturbative" and far.shift_hz == pytest.approx(c6 / (5 * UM) ** 6, rel=1e-12)
    assert near.model == "diagonalised" and 0 < near.overlap <= 1
    assert near.crossover_radius_m * 2 > 3 * UM
    resonant = pairs.pair_shift("Rb87", "60S1/2", "Rb87", "60S1/2", 5 * UM, resonant=True)
    assert abs(resonant.shift_hz) == pytest.approx(resonant.c3_hz_m3 / (5 * UM) ** 3)
    assert not pairs.pair_shift("Rb87", "60S1/2", "Rb87", "60S1/2", 0.5 * UM).valid


def test_field_moves_a_channel_defect_quadratically():
    """δ(E) − δ0 ∝ E² in the quadratic Stark regime, and δ0 is the energy difference from ARC."""
    a = ("Rb87", "60S1/2", "Rb87", "60S1/2")
    zero = pairs.dominant_channel(*a, 0.0)
    one, two = (pairs.dominant_channel(*a, e) for e in (1.0, 2.0))
    assert zero.levels == one.levels == two.levels
    levels = [rydberg.parse_level(x) for x in zero.levels]
    brute = sum(rydberg.energy_hz("Rb87", lv) for lv in levels) - 2 * rydberg.energy_hz("Rb87", "60S1/2")
    assert zero.defect_hz == pytest.approx(brute, abs=1.0)
    assert (two.defect_hz - zero.defect_hz) == pytest.approx(4 * (one.defect_hz - zero.defect_hz), rel=1e-9)
    assert one.defect_hz != zero.defect_hz


def test_angle_to_axis():
    assert pairs.angle_to_axis((0, 0, 0), (1, 0, 0), None) == 0.0
    assert pairs.angle_to_axis((0, 0, 0), (1, 0, 0), (0, 0, 1)) == pytest.approx(math.pi / 2)
    assert pairs.angle_to_axis((0, 0, 0), (-1, 0, -1), (0, 0, 1)) == pytest.approx(math.pi / 4)
