"""Rydberg data (seqlang.atoms.rydberg) and its disk cache (seqlang.atoms.cache).

The Rydberg numbers come from ARC, the alkali Rydberg calculator library; the
checks here compare them with published values and fits, each named beside its
check. One cache directory is shared by the whole module so repeated quantities
are computed by ARC once.
"""

import json
import math
import os
import subprocess
import sys

import pytest

from seqlang.atoms import cache, rydberg
from seqlang.atoms import species as sp
from seqlang.atoms.species import RydbergLevel

RYDBERG_CONSTANT_HZ = 3.2898419602508e15  # R_inf c, CODATA 2018
ELECTRON_MASS_U = 5.48579909065e-4  # CODATA 2018
ATOMIC_UNIT_C6_GHZ_UM6 = 1.44481e-19  # docs/references.md: 1 a.u. of C6 in GHz um^6
HZ_M6_PER_GHZ_UM6 = 1e-27


@pytest.fixture(scope="module", autouse=True)
def shared_cache_dir(tmp_path_factory):
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(cache.CACHE_DIR_ENV, str(tmp_path_factory.mktemp("seqlang-cache")))
        yield


def reduced_rydberg_hz(name):
    """Ry_M = R_inf c M / (M + m_e), with the mass of the species table."""
    mass_u = sp.lookup(name).mass_kg / sp.ATOMIC_MASS_UNIT_KG
    return RYDBERG_CONSTANT_HZ * mass_u / (mass_u + ELECTRON_MASS_U)


def effective_n(name, label):
    """n* from the binding energy, E = -Ry_M / n*^2 (independent of ARC's defects)."""
    return math.sqrt(reduced_rydberg_hz(name) / -rydberg.energy_hz(name, label))


def ritz_energy_hz(name, n, d0, d2, d4=0.0):
    """Modified Rydberg-Ritz formula of docs/references.md."""
    defect = d0 + d2 / (n - d0) ** 2 + d4 / (n - d0) ** 4
    return -reduced_rydberg_hz(name) / (n - defect) ** 2


# ----------------------------------------------------------------- energies
# Quantum-defect coefficients (from memory): Rb -- Li et al., PRA 67, 052502 (2003);
# Cs nS -- Deiglmayr et al., PRA 93, 013424 (2016). Tolerance 20 kHz covers the
# last quoted digits of delta2 (~7 kHz at n = 60).
RITZ = [
    ("Rb87", "S1/2", (3.1311804, 0.1784)),
    ("Rb87", "P3/2", (2.6416737, 0.2950)),
    ("Rb87", "D5/2", (1.34646572, -0.59600)),
    ("Cs133", "S1/2", (4.0493532, 0.2391, 0.06)),
]


@pytest.mark.parametrize("name,term,coefficients", RITZ, ids=[f"{r[0]}-{r[1]}" for r in RITZ])
@pytest.mark.parametrize("n", [40, 60, 80])
def test_energy_matches_rydberg_ritz_formula(name, term, coefficients, n):
    energy = rydberg.energy_hz(name, f"{n}{term}")
    assert energy == pytest.approx(ritz_energy_hz(name, n, *coefficients), abs=20e3)


# ----------------------------------------------------------------- C6

@pytest.mark.parametrize("n", [50, 60, 70, 80])
def test_rb_ns_c6_matches_singer_fit(n):
    # Singer et al., J. Phys. B 38, S295 (2005) fit (from memory), in the sign
    # convention dE = -C6/R^6; seqlang's sign is the opposite. Tolerance 4 %.
    fit_au = n**11 * (11.97 - 0.8486 * n + 3.385e-3 * n**2)
    expected = -fit_au * ATOMIC_UNIT_C6_GHZ_UM6 * HZ_M6_PER_GHZ_UM6
    assert rydberg.c6_hz_m6("Rb87", f"{n}S1/2", "Rb87", f"{n}S1/2").c6_hz_m6 == pytest.approx(expected, rel=0.04, abs=0)


@pytest.mark.parametrize("name,label", [("Rb87", "60S1/2"), ("Cs133", "62S1/2"), ("Na23", "58S1/2")])
def test_s_state_pairs_repel(name, label):
    # Common practice (and Singer et al. 2005 for Rb): alkali nS+nS pairs at n ~ 60 repel.
    result = rydberg.c6_hz_m6(name, label, name, label)
    assert result.c6_hz_m6 > 0
    assert rydberg.interaction_hz(result, 5e-6) > 0
    assert not result.near_forster


def test_c6_scales_as_effective_n_to_the_eleventh():
    # docs/references.md: C6 of nS+nS ~ n*^11 (common practice); log-log slope 50 -> 80.
    c6 = [rydberg.c6_hz_m6("Rb87", f"{n}S1/2", "Rb87", f"{n}S1/2").c6_hz_m6 for n in (50, 80)]
    ns = [effective_n("Rb87", f"{n}S1/2") for n in (50, 80)]
    slope = math.log(c6[1] / c6[0]) / math.log(ns[1] / ns[0])
    assert 10.5 < slope < 11.5


def pp_channel_defects(name_a, label_a, name_b, label_b):
    """Brute-force defects of nS + n'S -> P + P channels from seqlang's own energies."""
    def partners(name, label):
        n = sp.parse_level(label).n
        return [f"{m}P{j}" for m in range(n - 5, n + 6) for j in ("1/2", "3/2")]
    start = rydberg.energy_hz(name_a, label_a) + rydberg.energy_hz(name_b, label_b)
    return [rydberg.energy_hz(name_a, p) + rydberg.energy_hz(name_b, q) - start
            for p in partners(name_a, label_a) for q in partners(name_b, label_b)]


def test_inter_species_pair_reports_its_forster_defect():
    # Na23 58S1/2 + Cs133 62S1/2 (an inter-species pair of the demo rig): the
    # reported defect is the nearest S+S -> P+P channel (checked by brute force).
    result = rydberg.c6_hz_m6("Na23", "58S1/2", "Cs133", "62S1/2")
    nearest = min(pp_channel_defects("Na23", "58S1/2", "Cs133", "62S1/2"), key=abs)
    assert result.forster_defect_hz == pytest.approx(nearest, abs=1.0)
    assert 100e6 < abs(result.forster_defect_hz) < 1e9
    assert result.near_forster is False
    assert result.c6_hz_m6 != 0 and "ARC" in result.source
    # crossover radius is (|C6 of the channel| / |defect|)^(1/6) by definition
    own = abs(result.channel_fraction * result.c6_hz_m6)
    assert result.crossover_radius_m == pytest.approx((own / abs(result.forster_defect_hz)) ** (1 / 6), rel=1e-9, abs=0)


def test_rb_43d_pair_is_flagged_near_forster():
    # Rb 43D5/2 + 43D5/2 -> 45P3/2 + 41F7/2 lies within ~10 MHz of resonance
    # (Reinhard et al., PRA 75, 032712 (2007); from memory). A single channel
    # then carries the whole perturbative C6.
    result = rydberg.c6_hz_m6("Rb87", "43D5/2", "Rb87", "43D5/2")
    channel = (rydberg.energy_hz("Rb87", "45P3/2") + rydberg.energy_hz("Rb87", "41F7/2")
               - 2 * rydberg.energy_hz("Rb87", "43D5/2"))
    assert abs(channel) < 20e6
    assert result.forster_defect_hz == pytest.approx(channel, abs=1.0)
    assert result.near_forster is True
    assert result.channel_fraction > 0.9
    assert result.crossover_radius_m > 4e-6


def test_interaction_and_blockade_radius_follow_the_r6_law():
    # Analytic: V(R) = C6/R^6; at R_b = (|C6|/Omega)^(1/6) the interaction equals Omega.
    c6 = rydberg.c6_hz_m6("Rb87", "60S1/2", "Rb87", "60S1/2")
    radius = rydberg.blockade_radius_m(c6, 1e6)
    assert rydberg.interaction_hz(c6, radius) == pytest.approx(1e6, rel=1e-12, abs=0)
    assert rydberg.interaction_hz(c6, 2 * radius) == pytest.approx(1e6 / 64, rel=1e-12, abs=0)
    assert 5e-6 < radius < 10e-6  # common practice: R_b of several um for Rb 60S at 1 MHz


def test_interaction_rejects_non_physical_inputs():
    with pytest.raises(ValueError, match="distance"):
        rydberg.interaction_hz(1e-25, 0.0)
    with pytest.raises(ValueError, match="Rabi"):
        rydberg.blockade_radius_m(1e-25, -1.0)


def test_second_c6_call_does_not_touch_arc(monkeypatch):
    first = rydberg.c6_hz_m6("Rb87", "62S1/2", "Cs133", "62S1/2")

    def fail(*args, **kwargs):
        raise AssertionError("ARC was called for a cached value")

    monkeypatch.setattr(rydberg, "_arc_atom", fail)
    monkeypatch.setattr(rydberg, "_arc_pair", fail)
    assert rydberg.c6_hz_m6("Rb87", "62S1/2", "Cs133", "62S1/2") == first


# ----------------------------------------------------------------- lifetimes
# Beterov, Ryabtsev, Tretyakov & Entin, PRA 79, 052504 (2009), nS fits (coefficients
# copied by hand: from memory). docs/references.md: ARC's sums differ from the fit by
# up to ~10 % at 0 K and ~3 % at 300 K; tolerances 12 % (0 K) and 8 % (300 K). The
# lifetimes against arc itself (1e-6) are in tests/test_physics_tight.py.
BETEROV_NS = {
    "Rb87": (1.368e-9, 3.0008, 0.134, 0.251, 2.567, 4.426),
    "Cs133": (1.2926e-9, 3.0005, 0.123, 0.231, 2.517, 4.375),
}


def beterov_lifetimes(name, n_star, temperature_k):
    tau_s, delta, a, b, c, d = BETEROV_NS[name]
    radiative = tau_s * n_star**delta
    bbr = (a / n_star**d) * 2.14e10 / math.expm1(315780 * b / (n_star**c * temperature_k))
    return radiative, 1 / (1 / radiative + bbr)


@pytest.mark.parametrize("name", sorted(BETEROV_NS))
@pytest.mark.parametrize("n", [50, 70])
def test_ns_lifetimes_match_beterov_fit(name, n):
    label = f"{n}S1/2"
    fit_radiative, fit_total = beterov_lifetimes(name, effective_n(name, label), 300.0)
    warm = rydberg.lifetime_s(name, label, 300.0)
    assert rydberg.lifetime_s(name, label, 0.0).total_s == pytest.approx(fit_radiative, rel=0.12, abs=0)
    assert warm.radiative_s == pytest.approx(fit_radiative, rel=0.12, abs=0)
    assert warm.total_s == pytest.approx(fit_total, rel=0.08, abs=0)
    assert warm.bbr_rate_hz == pytest.approx(1 / warm.total_s - 1 / warm.radiative_s, rel=1e-9, abs=0)


def test_lifetime_rejects_negative_temperature():
    with pytest.raises(ValueError, match="temperature"):
        rydberg.lifetime_s("Rb87", "60S1/2", -1.0)


# ----------------------------------------------------------------- intermediate states

def test_d2_intermediate_linewidths_match_steck():
    # Steck, Rubidium 87 D Line Data: Gamma/2pi = 6.0666(18) MHz (published), 0.5 %;
    # Steck, Cesium D Line Data: 5.234 MHz (from memory), 1 %.
    assert rydberg.intermediate_linewidth_hz("Rb87", 5, 1, 1.5) == pytest.approx(6.0666e6, rel=0.005, abs=0)
    assert rydberg.intermediate_linewidth_hz("Cs133", 6, 1, 1.5) == pytest.approx(5.234e6, rel=0.01, abs=0)


@pytest.mark.parametrize("name", sp.names())
def test_species_table_agrees_with_arc(name):
    # ARC's own atom data, a general-purpose reference library: masses to 1e-8;
    # vacuum D2 wavelengths to 3e-5 (ARC ignores the ~10 GHz Li6 isotope shift);
    # D2 widths to 3 % (ARC's Li dipole moment is ~2.6 % larger than Gehm's value).
    data = sp.lookup(name)
    atom = rydberg._arc_atom(name)
    n = data.ground_state_n
    assert data.mass_kg == pytest.approx(atom.mass, rel=1e-8, abs=0)
    assert data.d2_wavelength_m == pytest.approx(atom.getTransitionWavelength(n, 0, 0.5, n, 1, 1.5), rel=3e-5, abs=0)
    assert data.d2_linewidth_hz == pytest.approx(rydberg.intermediate_linewidth_hz(name, n, 1, 1.5), rel=0.03, abs=0)
    assert atom.groundStateN == n


@pytest.mark.parametrize("name,ladder,expected", [
    ("Rb87", "d2", RydbergLevel(5, 1, 1.5)),
    ("Cs133", "d2", RydbergLevel(6, 1, 1.5)),
    ("Rb87", "blue", RydbergLevel(6, 1, 1.5)),   # common practice: 420 nm + 1013 nm ladder
    ("Cs133", "blue", RydbergLevel(7, 1, 1.5)),  # common practice: 459 nm + 1038 nm ladder
])
def test_default_intermediate(name, ladder, expected):
    assert rydberg.default_intermediate(name, ladder) == expected


def test_default_intermediate_rejects_unknown_ladder():
    with pytest.raises(ValueError, match="unknown ladder"):
        rydberg.default_intermediate("Rb87", "green")


def test_rb_d2_dipole_matrix_elements_match_steck():
    # Steck, Rubidium 87 D Line Data: <J=1/2||er||J'=3/2> = 4.227(5) e a0 and the
    # sigma+ cycling-transition dipole 2.989(3) e a0 (from memory); 0.3 %.
    assert rydberg.reduced_dipole_ea0("Rb87", "5S1/2", "5P3/2") == pytest.approx(4.227, rel=0.003, abs=0)
    stretched = rydberg.dipole_matrix_element_ea0("Rb87", "5S1/2", 0.5, "5P3/2", 1.5)
    assert abs(stretched) == pytest.approx(2.989, rel=0.003, abs=0)
    assert rydberg.dipole_matrix_element_ea0("Rb87", "5S1/2", 0.5, "5P3/2", -1.5) == 0.0


def test_levels_that_do_not_exist_are_rejected():
    with pytest.raises(ValueError, match="not a level"):
        rydberg.energy_hz("Cs133", RydbergLevel(5, 0, 0.5))
    with pytest.raises(KeyError):
        rydberg.energy_hz("Xe131", "60S1/2")


def test_rydberg_module_imports_arc_lazily():
    code = "import sys, seqlang.atoms.rydberg; assert 'arc' not in sys.modules"
    subprocess.run([sys.executable, "-c", code], check=True)


# ----------------------------------------------------------------- cache (no ARC)

class Counter:
    """A compute function that counts its calls."""

    def __init__(self, value):
        self.value, self.calls = value, 0

    def __call__(self):
        self.calls += 1
        return self.value


def test_cache_computes_once_per_key(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.CACHE_DIR_ENV, str(tmp_path))
    compute = Counter({"x": 0.1 + 0.2, "flag": True})
    first = cache.cached("demo", {"n": 60, "t": 300.0}, compute)
    second = cache.cached("demo", {"t": 300.0, "n": 60}, compute)  # key order is irrelevant
    assert first == second == {"x": 0.1 + 0.2, "flag": True}
    assert compute.calls == 1
    cache.cached("demo", {"n": 61, "t": 300.0}, compute)
    assert compute.calls == 2



def test_a_symmetric_pair_is_found_under_either_order(tmp_path, monkeypatch):
    """V(R, θ) of Na + Cs equals that of Cs + Na: a stored table serves both orders."""
    monkeypatch.setenv(cache.CACHE_DIR_ENV, str(tmp_path))
    compute = Counter({"v": [1.5]})
    forward, backward = {"a": "Na23", "b": "Cs133"}, {"a": "Cs133", "b": "Na23"}
    assert cache.cached_either("demo", forward, backward, compute) == {"v": [1.5]}
    assert cache.cached_either("demo", backward, forward, compute) == {"v": [1.5]}
    assert compute.calls == 1
    cache.cached_either("demo", {"a": "Rb87", "b": "Cs133"}, {"a": "Cs133", "b": "Rb87"}, compute)
    assert compute.calls == 2

def test_cache_uses_the_environment_directory_and_leaves_no_temporary_files(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.CACHE_DIR_ENV, str(tmp_path / "nested"))
    cache.cached("demo", {"n": 1}, Counter([1.5, 2.5]))
    files = os.listdir(tmp_path / "nested")
    assert len(files) == 1 and files[0].startswith("demo-") and files[0].endswith(".json")
    assert json.loads((tmp_path / "nested" / files[0]).read_text())["value"] == [1.5, 2.5]


def test_cache_default_directory(monkeypatch, tmp_path):
    monkeypatch.delenv(cache.CACHE_DIR_ENV, raising=False)
    monkeypatch.setenv("HOME", str(tmp_path))
    assert cache.cache_dir() == tmp_path / ".cache" / "seqlang"


def test_damaged_cache_file_is_recomputed(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.CACHE_DIR_ENV, str(tmp_path))
    compute = Counter(7)
    cache.cached("demo", {"n": 2}, compute)
    cache.cache_path("demo", {"n": 2}).write_text("{not json")
    assert cache.cached("demo", {"n": 2}, compute) == 7
    assert compute.calls == 2


def test_unwritable_cache_still_returns_the_value(tmp_path, monkeypatch):
    blocker = tmp_path / "file"
    blocker.write_text("")
    monkeypatch.setenv(cache.CACHE_DIR_ENV, str(blocker / "sub"))  # a file as parent: mkdir fails
    compute = Counter(3)
    assert cache.cached("demo", {"n": 3}, compute) == 3
    assert cache.cached("demo", {"n": 3}, compute) == 3
    assert compute.calls == 2
