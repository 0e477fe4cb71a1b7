"""Species table, clock states and level labels (seqlang.atoms.species).

Expected numbers are written here independently of the module, each with its source.
"""

import subprocess
import sys

import pytest

from seqlang.atoms import species as sp
from seqlang.atoms.species import QubitState, RydbergLevel

# (name, ground-state hyperfine splitting in Hz, allowed |error| in Hz, source)
HYPERFINE = [
    ("Cs133", 9_192_631_770.0, 1e-6, "SI definition of the second, CGPM 2018 (exact)"),
    ("Rb87", 6_834_682_610.90429, 1e-4, "Steck, Rubidium 87 D Line Data: 6 834 682 610.904 29(9) Hz"),
    ("Rb85", 3_035_732_439.0, 0.6, "Steck, Rubidium 85 D Line Data: 3 035 732 439.0(6) Hz"),
    ("Na23", 1_771_626_128.8, 1.0, "Steck, Sodium D Line Data; Arimondo et al. 1977: 1 771 626 128.8(10) Hz"),
    ("K39", 461_719_720.2, 1.4e-3 + 25.0, "Arimondo, Inguscio & Violino, RMP 49, 31 (1977): 461.719 720 2(14) MHz;"
     " tolerance covers Peper et al., PRA 100, 012501 (2019): 461.719 700(5) MHz"),
    ("K41", 254_013_872.0, 2e-3, "Arimondo et al., RMP 49, 31 (1977): 254.013 872 0(20) MHz"),
    ("K40", -1_285_790_000.0, 1e4, "Arimondo et al., RMP 49, 31 (1977): -1 285.79 MHz, inverted (from memory)"),
    ("Li7", 803_504_086.6, 1e-3, "Arimondo et al., RMP 49, 31 (1977): 803.504 086 6(10) MHz"),
    ("Li6", 228_205_259.0, 3e-3, "Arimondo et al., RMP 49, 31 (1977): 228.205 259 0(30) MHz"),
]

# Nuclear spins, from the same compilations (Arimondo et al. 1977; Steck's D-line data).
NUCLEAR_SPIN = {"Li6": 1, "Li7": 1.5, "Na23": 1.5, "K39": 1.5, "K40": 4, "K41": 1.5,
                "Rb85": 2.5, "Rb87": 1.5, "Cs133": 3.5}

# Atomic masses in u from Steck's D-line data (digits from memory); rel. tol 1e-8
# covers the differences between mass-table editions (~3e-8 u).
STECK_MASS_U = {"Rb87": 86.909180520, "Rb85": 84.911789732,
                "Na23": 22.9897692807, "Cs133": 132.905451931}
ATOMIC_MASS_UNIT_KG = 1.66053906660e-27  # CODATA 2018


@pytest.mark.parametrize("name,expected,tolerance,source", HYPERFINE, ids=[h[0] for h in HYPERFINE])
def test_hyperfine_splitting_matches_published_value(name, expected, tolerance, source):
    assert sp.lookup(name).hyperfine_hz == pytest.approx(expected, abs=tolerance), source
    assert sp.lookup(name).hyperfine_source


def test_table_holds_every_required_species():
    assert set(sp.names()) >= set(NUCLEAR_SPIN)


@pytest.mark.parametrize("name", sorted(NUCLEAR_SPIN))
def test_nuclear_spin(name):
    assert sp.lookup(name).nuclear_spin == NUCLEAR_SPIN[name]


@pytest.mark.parametrize("name", sorted(STECK_MASS_U))
def test_mass_matches_steck_d_line_data(name):
    expected_kg = STECK_MASS_U[name] * ATOMIC_MASS_UNIT_KG
    assert sp.lookup(name).mass_kg == pytest.approx(expected_kg, rel=1e-8, abs=0)


def test_rb87_d2_line_matches_steck():
    # Steck, Rubidium 87 D Line Data (published): vacuum 780.241 209 686 nm, Gamma/2pi = 6.0666(18) MHz
    rb = sp.lookup("Rb87")
    assert rb.d2_wavelength_m == pytest.approx(780.241209686e-9, rel=1e-10, abs=0)
    assert rb.d2_linewidth_hz == pytest.approx(6.0666e6, abs=1.8e3)


def test_lookup_is_case_insensitive_and_rejects_unknown_names():
    assert sp.lookup("rb87") is sp.lookup("Rb87")
    with pytest.raises(KeyError, match="known species"):
        sp.lookup("Fr221")


# ----------------------------------------------------------------- clock states
# Common practice: the clock pair is |F=I-1/2, 0> and |F=I+1/2, 0>.

@pytest.mark.parametrize("name,lower_f,upper_f", [
    ("Rb87", 1, 2), ("Rb85", 2, 3), ("Cs133", 3, 4), ("Na23", 1, 2), ("K39", 1, 2), ("Li7", 1, 2),
])
def test_clock_states_are_mf_zero_pairs(name, lower_f, upper_f):
    assert sp.clock_states(name) == (QubitState(lower_f, 0), QubitState(upper_f, 0))


def test_clock_qubit_frequency_is_the_hyperfine_splitting():
    lower, upper = sp.clock_states("Cs133")
    assert sp.qubit_frequency_hz("Cs133", lower, upper) == 9_192_631_770.0  # SI second
    assert sp.qubit_frequency_hz("Cs133", upper, lower) == -9_192_631_770.0


def test_k40_inverted_structure_puts_f_9_2_lowest():
    # Arimondo et al. 1977: K40 ground-state hyperfine structure is inverted (F=9/2 below F=7/2).
    lower, upper = sp.clock_states("K40")
    assert (lower.F, upper.F) == (4.5, 3.5)
    assert lower.mF == upper.mF == 0.5  # no mF = 0 for half-integer F
    assert sp.qubit_frequency_hz("K40", lower, upper) == pytest.approx(1_285.79e6, abs=1e4)


def test_li6_has_half_integer_f_and_uses_mf_one_half():
    lower, upper = sp.clock_states("Li6")
    assert (lower, upper) == (QubitState(0.5, 0.5), QubitState(1.5, 0.5))
    assert sp.qubit_frequency_hz("Li6", lower, upper) == pytest.approx(228.2052590e6, abs=3e-3)


def test_states_in_one_manifold_are_degenerate_at_zero_field():
    assert sp.qubit_frequency_hz("Rb87", QubitState(2, -1), QubitState(2, 2)) == 0.0


@pytest.mark.parametrize("state,message", [
    (QubitState(3, 0), "no ground hyperfine level F=3"),
    (QubitState(2, 3), "not a sublevel"),
    (QubitState(1, 0.5), "not a sublevel"),
])
def test_qubit_frequency_rejects_states_that_do_not_exist(state, message):
    with pytest.raises(ValueError, match=message):
        sp.qubit_frequency_hz("Rb87", QubitState(1, 0), state)


def test_qubit_state_label():
    assert QubitState(4.5, 0.5).label == "F=9/2,mF=1/2"


# ----------------------------------------------------------------- levels

@pytest.mark.parametrize("text,level", [
    ("58S1/2", RydbergLevel(58, 0, 0.5)),
    ("43D5/2", RydbergLevel(43, 2, 2.5)),
    ("70p3/2", RydbergLevel(70, 1, 1.5)),
    (" 30 F 7/2 ", RydbergLevel(30, 3, 3.5)),
])
def test_parse_level_reads_spectroscopic_labels(text, level):
    assert sp.parse_level(text) == level


def test_level_label_round_trips():
    assert sp.parse_level("62S1/2").label == "62S1/2"
    assert RydbergLevel(43, 2, 1.5).label == "43D3/2"


@pytest.mark.parametrize("text,message", [
    ("58S", "cannot read level"),
    ("S1/2", "cannot read level"),
    ("58S3/2", "j must be l"),
    ("58D1/2", "j must be l"),
    ("58X1/2", "unknown orbital letter"),
    ("2D5/2", "needs n > l"),
    ("58S1/3", "cannot read level"),
])
def test_parse_level_rejects_bad_text(text, message):
    with pytest.raises(ValueError, match=message):
        sp.parse_level(text)


def test_parse_level_checks_n_above_the_ground_state_of_the_element():
    assert sp.parse_level("6S1/2", "Rb87").n == 6
    with pytest.raises(ValueError, match="ground-state n = 6"):
        sp.parse_level("6S1/2", "Cs133")


def test_species_module_imports_without_the_rydberg_library():
    code = "import sys, seqlang.atoms; assert 'arc' not in sys.modules"
    subprocess.run([sys.executable, "-c", code], check=True)
