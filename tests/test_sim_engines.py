"""The simulation engines agree with the QuTiP reference path.

`seqlang.simulate(..., engine=E)` with E = "fast" (pure states evolved with a non-Hermitian
Hamiltonian), "lindblad" (vectorised density matrix) or "auto" must give the numbers of
E = "qutip", the segment-by-segment propagation with QuTiP's matrix exponential (and the
exponential of its Liouvillian) in seqlang/sim/solve.py. QuTiP is the general-purpose
reference library here: J. R. Johansson, P. D. Nation & F. Nori, Comput. Phys. Commun. 183,
1760 (2012); N. Lambert et al., "QuTiP 5: The Quantum Toolbox in Python" (2024).

Every engine gets the same seed and shot count, so the same seeded noise samples are used and
the agreement is to rounding, not to Monte Carlo error: 1e-6 for the fast engine on pure-state
models (no noise, or only decay into the loss level, intensity, Doppler and preparation noise),
1e-5 for the Lindblad engine on models whose dissipation is not a loss (laser dephasing, or
Rydberg decay back into the qubit, `decay_to_qubit`). Models: the demo programs and small
random programs set in the invented Millpond lab (programs/millpond.rig).
"""
from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

import seqlang
from seqlang.sim.commands import as_document

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PROGRAMS = os.path.join(ROOT, "programs")
DEMO_RIG = os.path.join(PROGRAMS, "millpond.rig")
# Feed-forward demos are simulated shot by shot with sampled outcomes on the fast and Lindblad
# engines only (no QuTiP reference path); their own checks are in tests/test_feedforward_sim.py.
# ghz5.seq (five atoms) is beyond the dense QuTiP reference (4^5 levels); it is checked against
# the Lindblad engine and closed forms in test_sim_trajectories.py and test_sim_targets.py instead.
FEED_FORWARD_DEMOS = ("ancilla_flip.seq", "phase_correction.seq")
DEMOS = sorted(f for f in os.listdir(PROGRAMS) if f.endswith(".seq") and f not in FEED_FORWARD_DEMOS + ("ghz5.seq",))

FAST_TOLERANCE = 1e-6
LINDBLAD_TOLERANCE = 1e-5
# Keys that name the engine or carry prose; every other number must agree.
IGNORED_KEYS = frozenset({"engine", "note"})
# The probabilities the user is shown (docs/simulation.md, "Outputs").
REPORTED_SECTIONS = ("expectations", "records", "site_populations")

PURE_NOISE = ("decay", "intensity", "doppler", "preparation")
LINDBLAD_NOISE = PURE_NOISE + ("dephasing",)
LINDBLAD_ONLY = frozenset({"dephasing"})


# ---- comparing two output documents ------------------------------------------------------------
def largest_difference(a, b, path: str = "") -> tuple[float, str]:
    """Largest |a − b| over the numbers of two nested documents, and where it is.

    A difference in shape (keys, list lengths, strings, types) counts as infinite, so two
    documents that report different things can never look alike.
    """
    if isinstance(a, dict) and isinstance(b, dict):
        return _dict_difference(a, b, path)
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        if len(a) != len(b):
            return math.inf, f"{path} (lengths {len(a)} and {len(b)})"
        return _worst([largest_difference(x, y, f"{path}[{i}]") for i, (x, y) in enumerate(zip(a, b))], path)
    if _is_number(a) and _is_number(b):
        return abs(float(a) - float(b)), path
    return (0.0, path) if a == b else (math.inf, f"{path} ({a!r} and {b!r})")


def _dict_difference(a: dict, b: dict, path: str) -> tuple[float, str]:
    keys_a, keys_b = set(a) - IGNORED_KEYS, set(b) - IGNORED_KEYS
    if keys_a != keys_b:
        return math.inf, f"{path} (keys differ: {sorted(keys_a ^ keys_b)})"
    return _worst([largest_difference(a[k], b[k], f"{path}.{k}") for k in sorted(keys_a)], path)


def _worst(found: list[tuple[float, str]], path: str) -> tuple[float, str]:
    return max(found, key=lambda item: item[0]) if found else (0.0, path)


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.number)) and not isinstance(value, bool)


def reported(document: dict, qubit_space_only: bool = False) -> dict:
    """The sections of a simulate document that hold reported probabilities.

    With `qubit_space_only`, only the probabilities of the whole cluster's qubit space:
    the fast engine carries decay as lost norm, which is exact there, while numbers of
    one atom after its partner decayed are not followed (docs/simulation.md).
    """
    if not qubit_space_only:
        return {key: document[key] for key in REPORTED_SECTIONS}
    whole = [e for e in document["expectations"] if sorted(e["sites"]) in [sorted(c) for c in document["clusters"]]]
    keys = ("fidelity", "populations", "correlators", "loss")
    return {"expectations": [{k: e[k] for k in keys if k in e} for e in whole]}


def assert_same_report(candidate: dict, reference: dict, tolerance: float) -> None:
    lossy = candidate.get("engine") == "fast" and "decay" in candidate["noise"]["sources"]
    difference, where = largest_difference(reported(candidate, lossy), reported(reference, lossy))
    assert difference <= tolerance, f"largest difference {difference:.3g} at {where}"
    assert _without_engine(candidate["noise"]) == _without_engine(reference["noise"])  # same seed, shots


def _without_engine(info: dict) -> dict:
    return {k: v for k, v in info.items() if k not in IGNORED_KEYS}


def test_largest_difference_finds_a_planted_difference_and_ignores_the_engine():
    """The comparison helper itself: it must see a change deep inside, and a change of shape."""
    base = {"expectations": [{"fidelity": 0.5, "populations": {"00": 0.25, "11": 0.75}}],
            "engine": "fast", "note": "x"}
    moved = {"expectations": [{"fidelity": 0.5, "populations": {"00": 0.25, "11": 0.7503}}],
             "engine": "qutip", "note": "y"}
    difference, where = largest_difference(base, moved)
    assert difference == pytest.approx(3e-4) and where == ".expectations[0].populations.11"
    assert largest_difference(base, dict(base, engine="lindblad", note="z"))[0] == 0.0
    assert largest_difference(base, {**base, "expectations": []})[0] == math.inf
    assert largest_difference({"state": "psi_plus"}, {"state": "phi_plus"})[0] == math.inf
    assert largest_difference({"p": 1.0}, {"p": 1.0, "extra": 0.0})[0] == math.inf


# ---- running the engines -------------------------------------------------------------------------
_QUTIP_DOCUMENTS: dict = {}


def run(path: str, engine: str, noise: tuple[str, ...], shots: int, seed: int):
    return seqlang.simulate(path, engine=engine, noise=noise, shots=shots, seed=seed)


def qutip_document(path: str, noise: tuple[str, ...], shots: int, seed: int) -> dict:
    """The reference run, kept for the other engines' tests of the same model."""
    key = (path, noise, shots, seed)
    if key not in _QUTIP_DOCUMENTS:
        result = run(path, "qutip", noise, shots, seed)
        assert result.engine == "qutip"
        _QUTIP_DOCUMENTS[key] = as_document(result)
    return _QUTIP_DOCUMENTS[key]


def fast_is_refused_or_replaced(path: str, noise: tuple[str, ...], shots: int, seed: int) -> None:
    """`engine="fast"` on a model it cannot represent: a ValueError, or an honest fall-back."""
    try:
        result = run(path, "fast", noise, shots, seed)
    except ValueError:
        return
    assert result.engine == "lindblad"
    assert_same_report(as_document(result), qutip_document(path, noise, shots, seed), LINDBLAD_TOLERANCE)


# ---- the demo programs ---------------------------------------------------------------------------
DEMO_SHOTS, DEMO_SEED = 2, 5


def demo(name: str) -> str:
    return os.path.join(PROGRAMS, name)


def _expects(path: str) -> int:
    return len(seqlang.load(path).program.expects)


@pytest.mark.parametrize("noise", [(), PURE_NOISE], ids=["noise-off", "pure-state-noise"])
@pytest.mark.parametrize("program", DEMOS)
def test_fast_engine_matches_qutip_on_demo(program, noise):
    """Pure-state demo models: fast engine = QuTiP reference (Johansson et al. 2012;
    Lambert et al. 2024) to 1e-6 in every expectation, record and site population."""
    path = demo(program)
    result = run(path, "fast", noise, DEMO_SHOTS, DEMO_SEED)
    assert result.engine == "fast"
    document = as_document(result)
    assert len(document["expectations"]) == _expects(path) and document["site_populations"]
    assert_same_report(document, qutip_document(path, noise, DEMO_SHOTS, DEMO_SEED), FAST_TOLERANCE)


@pytest.mark.parametrize("program", DEMOS)
def test_lindblad_engine_matches_qutip_on_demo_with_dephasing(program):
    """Decay, dephasing (the Millpond Rydberg lasers have a linewidth) and the sampled sources:
    Lindblad engine = QuTiP's Liouvillian exponential (Johansson et al. 2012; Lambert et al. 2024)
    to 1e-5."""
    path = demo(program)
    noise = LINDBLAD_NOISE
    result = run(path, "lindblad", noise, DEMO_SHOTS, DEMO_SEED)
    assert result.engine == "lindblad"
    document = as_document(result)
    assert len(document["expectations"]) == _expects(path) and document["site_populations"]
    assert_same_report(document, qutip_document(path, noise, DEMO_SHOTS, DEMO_SEED), LINDBLAD_TOLERANCE)


@pytest.mark.parametrize("noise", [(), ("dephasing",)], ids=["noise-off", "dephasing"])
def test_auto_engine_matches_qutip_on_bell_demo(noise):
    """Whatever `auto` picks, its numbers are the reference's (QuTiP, Lambert et al. 2024); with
    dephasing it must not pick the pure-state engine."""
    path = demo("bell_pair.seq")
    result = run(path, "auto", noise, DEMO_SHOTS, DEMO_SEED)
    chosen = set(result.engine.split("+"))  # one name per cluster's engine
    assert chosen <= {"fast", "lindblad", "qutip"}
    if noise:
        assert "fast" not in chosen
    assert_same_report(as_document(result), qutip_document(path, noise, DEMO_SHOTS, DEMO_SEED), LINDBLAD_TOLERANCE)


def test_fast_engine_refuses_pure_dephasing():
    """A linewidth with the `dephasing` source is not a loss: no pure-state (non-Hermitian)
    description exists, so the fast engine must refuse or hand over to the Lindblad engine."""
    fast_is_refused_or_replaced(demo("bell_pair.seq"), ("dephasing",), 1, DEMO_SEED)


def test_fast_engine_refuses_decay_back_into_the_qubit(tmp_path):
    """Rydberg decay that returns population into |0⟩/|1⟩ (`decay_to_qubit`) is a quantum jump
    into the computed space: the fast engine must refuse or hand over to the Lindblad engine."""
    path = random_program(np.random.default_rng(7), 2, tmp_path, decay_to_qubit=0.4, light=True)
    fast_is_refused_or_replaced(path, ("decay",), 1, 7)


# ---- random small models --------------------------------------------------------------------------
DECAY_TO_QUBIT_KEY = "decay_to_qubit"
SITE_SPACING_UM = (3.0, 8.0)
MICROWAVE_DETUNING_KHZ = 15.0  # well inside the demo rig's ±200 kHz
RYDBERG_DETUNING_MHZ = 2.0  # well inside the demo rig's ±20 MHz
TWO_SITE_STATES = ("phi_plus", "phi_minus", "psi_plus", "psi_minus", "|00>", "|01>", "|10>", "|11>")


@dataclass(frozen=True)
class RandomCase:
    """One random model: generator seed, atoms, noise sources, shots, decay back into the qubit."""

    seed: int
    atoms: int
    noise: tuple[str, ...] = ()
    shots: int = 1
    decay_to_qubit: float = 0.0
    shaped: bool = False  # shaped pulses are many segments: only for cheap models

    @property
    def markovian(self) -> bool:
        return bool({"decay", "dephasing"} & set(self.noise))

    @property
    def needs_lindblad(self) -> bool:
        return bool(LINDBLAD_ONLY & set(self.noise)) or (self.decay_to_qubit > 0 and "decay" in self.noise)

    def __str__(self) -> str:
        extra = f"-to-qubit{self.decay_to_qubit:g}" if self.decay_to_qubit else ""
        shapes = "-shaped" if self.shaped else ""
        return f"seed{self.seed}-{self.atoms}atoms-{'+'.join(self.noise) or 'off'}{extra}-{self.shots}shots{shapes}"


# Collapse operators make the reference carry a 4ⁿ×4ⁿ density matrix: two atoms there.
PURE_CASES = [
    RandomCase(101, 3),
    RandomCase(102, 2, shaped=True),
    RandomCase(103, 3, ("intensity", "doppler", "preparation"), shots=3),
    RandomCase(104, 2, ("decay",)),
    RandomCase(105, 2, PURE_NOISE, shots=2),
    RandomCase(106, 2, ("intensity", "preparation"), shots=4, shaped=True),
    RandomCase(107, 3, ("preparation",), shots=5),
]
LINDBLAD_CASES = [
    RandomCase(201, 2, ("dephasing",)),
    RandomCase(202, 2, ("decay", "dephasing")),
    RandomCase(203, 2, ("decay",), decay_to_qubit=0.3),
    RandomCase(204, 2, ("decay", "dephasing", "intensity", "doppler"), shots=2, decay_to_qubit=0.5),
    RandomCase(205, 2, ("dephasing", "intensity"), shots=2),
]


def random_program(rng: np.random.Generator, atoms: int, folder, decay_to_qubit: float = 0.0,
                   light: bool = False, shaped: bool = False) -> str:
    """A random .seq on a copy of the Millpond rig in `folder`; returns its path.

    `light` keeps the timeline short (fewer pulses, imaging only at the end) for models whose
    reference carries a density matrix; `shaped` lets extra Rydberg pulses be shaped.
    """
    species = [str(s) for s in rng.choice(["na", "cs"], size=atoms)]
    sites = [f"q{i}" for i in range(atoms)]
    positions = _random_positions(rng, atoms)
    lines = ['use "millpond.rig"', ""]
    lines += [f"site {name} = {sp} at ({x:.3f}, {y:.3f}) um" for name, sp, (x, y) in zip(sites, species, positions)]
    lines += ["", "sequence random_case {", *_random_body(rng, sites, species, light, shaped), "}"]
    lines += _random_expects(rng, sites)
    (folder / "millpond.rig").write_text(_random_rig(rng, decay_to_qubit), encoding="utf-8")
    path = folder / f"random_{rng.integers(10**9)}.seq"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return str(path)


def _random_positions(rng: np.random.Generator, atoms: int) -> list[tuple[float, float]]:
    """Each new atom 3–8 µm from one already placed and at least 3 µm from all."""
    placed = [(0.0, 0.0)]
    while len(placed) < atoms:
        anchor = placed[rng.integers(len(placed))]
        distance, angle = rng.uniform(*SITE_SPACING_UM), rng.uniform(0, 2 * math.pi)
        point = (anchor[0] + distance * math.cos(angle), anchor[1] + distance * math.sin(angle))
        if all(math.dist(point, p) >= SITE_SPACING_UM[0] for p in placed):
            placed.append(point)
    return placed


def _random_body(rng: np.random.Generator, sites: list[str], species: list[str], light: bool,
                 shaped: bool) -> list[str]:
    """Microwave pulses on every species present first (so |1⟩ is populated); then, shuffled,
    one Rydberg pulse on every atom of each species (so all atoms interact and form one cluster)
    and a few random pulses, with random waits and possibly one imaging step."""
    present = sorted(set(species))
    body = ["  together {", *[f"    {_microwave_pulse(rng, sp)}" for sp in present], "  }"]
    pulses = [_rydberg_pulse(rng, sp, sites, species, False, every_atom=True) for sp in present]
    for _ in range(rng.integers(0, 2) if light else rng.integers(1, 4)):
        sp = str(rng.choice(present))
        pulses.append(_microwave_pulse(rng, sp) if rng.random() < 0.5
                      else _rydberg_pulse(rng, sp, sites, species, shaped))
    pulses = [pulses[i] for i in rng.permutation(len(pulses))]
    # Imaging splits the state in branches, each propagated on: at the end only, when light.
    image_at = (len(pulses) if light else rng.integers(len(pulses) + 1)) if rng.random() < 0.5 else None
    for index, pulse in enumerate(pulses):
        if index == image_at:
            body.append(f"  image {rng.choice(present)} -> seen")
        body.append(f"  {pulse}")
        if rng.random() < 0.3:
            body.append(f"  wait {rng.uniform(0.1, 2.0):.3f} us")
    if image_at == len(pulses):
        body.append(f"  image {rng.choice(present)} -> seen")
    return body


def _microwave_pulse(rng: np.random.Generator, sp: str) -> str:
    return (f"pulse mw_{sp} area {rng.uniform(0.2, 2.0):.4f} * pi "
            f"detuning {rng.uniform(-MICROWAVE_DETUNING_KHZ, MICROWAVE_DETUNING_KHZ):.3f} kHz "
            f"phase {rng.uniform(0, 360):.2f} deg")


def _rydberg_pulse(rng: np.random.Generator, sp: str, sites: list[str], species: list[str], shaped: bool,
                   every_atom: bool = False) -> str:
    """`ryd_na` reaches all sodium atoms; `ryd_cs` addresses caesium sites one by one."""
    maximum = {"na": 1.3, "cs": 1.0}[sp]
    target = ""
    if sp == "cs":
        own = [s for s, k in zip(sites, species) if k == "cs"]
        chosen = own if every_atom else [s for s in own if rng.random() < 0.7] or [own[0]]
        target = f" on {', '.join(chosen)}"
    shape = str(rng.choice(["square", "gaussian", "ramped"])) if shaped else "square"
    return (f"pulse ryd_{sp}{target} area {rng.uniform(0.3, 2.5):.4f} * pi "
            f"rabi {rng.uniform(0.5, 1.0) * maximum:.4f} MHz "
            f"detuning {rng.uniform(-RYDBERG_DETUNING_MHZ, RYDBERG_DETUNING_MHZ):.4f} MHz "
            f"phase {rng.uniform(0, 360):.2f} deg shape {shape}")


def _random_expects(rng: np.random.Generator, sites: list[str]) -> list[str]:
    out = []
    for _ in range(rng.integers(0, 3)):
        if rng.random() < 0.5:
            out.append(f"expect {rng.choice(sites)} as {rng.choice(['|0>', '|1>'])}")
        else:
            first, second = rng.choice(sites, size=2, replace=False)
            out.append(f"expect {first}, {second} as {rng.choice(TWO_SITE_STATES)}")
    return out


def _random_rig(rng: np.random.Generator, decay_to_qubit: float) -> str:
    """The demo rig with random laser linewidths (5–40 kHz) and preparation errors (20–30 %), so
    that dephasing and preparation noise show within a few shots, and, if asked, a share of
    Rydberg decay returning into the qubit for both species."""
    text = Path(DEMO_RIG).read_text(encoding="utf-8")
    text = _substitute(text, r"linewidth [0-9.]+ kHz", lambda _: f"linewidth {rng.uniform(5, 40):.2f} kHz")
    text = _substitute(text, r"prep_error [0-9.]+ %", lambda _: f"prep_error {rng.uniform(20, 30):.2f} %")
    if decay_to_qubit > 0:
        text = _substitute(text, r"prep_error [0-9.]+ %",
                           lambda match: f"{match.group(0)}\n    {DECAY_TO_QUBIT_KEY} {decay_to_qubit}")
    return text


def _substitute(text: str, pattern: str, replacement) -> str:
    """Replace both occurrences (one per species or per Rydberg drive) of `pattern`."""
    out, count = re.subn(pattern, replacement, text)
    assert count == 2, f"the demo rig changed ({pattern!r} found {count} times); update this generator"
    return out


def case_program(case: RandomCase, folder) -> str:
    folder = folder / str(case)
    folder.mkdir(exist_ok=True)
    return random_program(np.random.default_rng(case.seed), case.atoms, folder, case.decay_to_qubit,
                          light=case.markovian, shaped=case.shaped)


@pytest.fixture(scope="module")
def case_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("random_models")


def test_random_programs_are_valid_and_varied(tmp_path):
    """The generator writes programs the checker accepts, with the promised geometry (3–8 µm
    spacing), Rydberg light on every atom, and text that varies with the seed (without
    decay_to_qubit, whose key arrives with the new engines)."""
    texts = set()
    for seed in range(30):
        folder = tmp_path / f"s{seed}"
        folder.mkdir()
        atoms = 2 + seed % 2
        path = random_program(np.random.default_rng(seed), atoms, folder, light=seed % 3 == 0, shaped=seed % 2 == 0)
        sequence = seqlang.load(path)
        positions = [np.array(site.position_m) * 1e6 for site in sequence.program.sites.values()]
        assert len(positions) == atoms
        spacings = [np.linalg.norm(a - b) for i, a in enumerate(positions) for b in positions[:i]]
        assert min(spacings) >= SITE_SPACING_UM[0] - 1e-3
        lit = {t for p in sequence.played.pulses() if p.drive in ("ryd_na", "ryd_cs") for t in p.targets}
        assert lit == set(sequence.program.sites)
        texts.add(Path(path).read_text(encoding="utf-8"))
    assert len(texts) == 30


@pytest.mark.parametrize("case", PURE_CASES + LINDBLAD_CASES, ids=str)
def test_random_case_runs_on_the_reference_and_noise_matters(case, case_dir):
    """Sanity of the cases themselves: the reference runs, every site's populations lie in [0, 1]
    and sum to 1, and the chosen noise moves them (else an engine comparison would prove little)."""
    path = case_program(case, case_dir)
    noisy = qutip_document(path, case.noise, case.shots, case.seed)
    for site, levels in noisy["site_populations"].items():
        assert all(-1e-9 <= p <= 1 + 1e-9 for p in levels.values()), site
        assert sum(levels.values()) == pytest.approx(1.0, abs=1e-9), site
    if case.noise:
        quiet = qutip_document(path, (), 1, case.seed)
        moved, _ = largest_difference(noisy["site_populations"], quiet["site_populations"])
        assert 10 * LINDBLAD_TOLERANCE < moved < math.inf


@pytest.mark.parametrize("case", PURE_CASES, ids=str)
def test_fast_engine_matches_qutip_on_random_pure_state_model(case, case_dir):
    """Random pure-state models: fast (non-Hermitian) engine = QuTiP reference (Johansson et al.
    2012; Lambert et al. 2024) to 1e-6 in every reported probability, same seed and shots."""
    path = case_program(case, case_dir)
    result = run(path, "fast", case.noise, case.shots, case.seed)
    assert result.engine == "fast"
    assert_same_report(as_document(result), qutip_document(path, case.noise, case.shots, case.seed),
                       FAST_TOLERANCE)


@pytest.mark.parametrize("case", LINDBLAD_CASES, ids=str)
def test_lindblad_engine_matches_qutip_on_random_lindblad_model(case, case_dir):
    """Random models with dephasing or decay back into the qubit: Lindblad engine = QuTiP's
    Liouvillian exponential (Johansson et al. 2012; Lambert et al. 2024) to 1e-5."""
    assert case.needs_lindblad
    path = case_program(case, case_dir)
    result = run(path, "lindblad", case.noise, case.shots, case.seed)
    assert result.engine == "lindblad"
    assert_same_report(as_document(result), qutip_document(path, case.noise, case.shots, case.seed),
                       LINDBLAD_TOLERANCE)


@pytest.mark.parametrize("case", PURE_CASES[:3], ids=str)
def test_lindblad_engine_also_matches_qutip_on_pure_state_model(case, case_dir):
    """A density matrix describes pure states too: the Lindblad engine is valid on every model
    (reference: QuTiP, Lambert et al. 2024)."""
    path = case_program(case, case_dir)
    result = run(path, "lindblad", case.noise, case.shots, case.seed)
    assert_same_report(as_document(result), qutip_document(path, case.noise, case.shots, case.seed),
                       LINDBLAD_TOLERANCE)


@pytest.mark.parametrize("case", [c for c in LINDBLAD_CASES if c.shots == 1], ids=str)
def test_fast_engine_refuses_random_lindblad_model(case, case_dir):
    """The fast engine cannot describe these models; it must say so or hand over honestly."""
    fast_is_refused_or_replaced(case_program(case, case_dir), case.noise, case.shots, case.seed)
