"""The resolved program: rig, array and sequence with every value in SI units.

These types are what the checker has accepted. Times in seconds, frequencies
in Hz (cyclic), angles in radians, positions in metres.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping, Union

from ..atoms.species import QubitState, RydbergLevel, SpeciesData
from ..lang.diagnostics import Span

DRIVE_KINDS = ("microwave", "raman", "rydberg")


@dataclass(frozen=True)
class Species:
    """A species in use: isotope data, qubit encoding, Rydberg level, temperature."""

    name: str
    data: SpeciesData
    qubit: tuple[QubitState, QubitState]
    rydberg: RydbergLevel | None
    temperature_k: float
    extra: Mapping[str, float]
    span: Span


@dataclass(frozen=True)
class Legs:
    """The two-photon ladder of a Rydberg drive: lower and upper leg."""

    lower_wavelength_m: float
    upper_wavelength_m: float
    intermediate_detuning_hz: float
    counter_propagating: bool
    lower_rabi_hz: float | None = None
    upper_rabi_hz: float | None = None


@dataclass(frozen=True)
class Drive:
    """A coherent coupling source and its limits."""

    name: str
    kind: str
    species: str
    reach: str  # "all" or "each"
    max_rabi_hz: float
    detuning_range_hz: tuple[float, float]
    port: str
    gate: str | None
    gate_lead_s: float
    gate_lag_s: float
    latency_s: float
    rise_s: float
    sample_rate_hz: float
    amplitude_bits: int
    legs: Legs | None
    extra: Mapping[str, float]
    span: Span


@dataclass(frozen=True)
class Imaging:
    """Fluorescence imaging of one species."""

    species: str
    port: str
    duration_s: float
    fidelity: float
    loss: float
    latency_s: float
    extra: Mapping[str, float]
    span: Span
    decision_latency_s: float = 0.0  # image end → first operation that may depend on its record


@dataclass(frozen=True)
class Port:
    """A plain lab output (shutter, coil, camera trigger)."""

    name: str
    channel: str
    kind: str  # "digital" or "analog"
    latency_s: float
    width_s: float
    value_range: tuple[float, float] | None
    unit_dim: tuple[int, ...] | None
    span: Span
    # Electrodes: `field_per_volt` (V/m per V at the atoms). Deflectors (kind
    # "deflector"): axis, scale (Hz/m), center (Hz), sample_rate (Hz), steers (species),
    # max_velocity (m/s), max_acceleration (m/s²).
    extra: Mapping[str, object] = field(default_factory=dict)
    role: str = "plain"  # "traps": switches the tweezer light


@dataclass(frozen=True)
class Rig:
    """The apparatus."""

    name: str
    path: str
    tick_s: float
    counter_bits: int
    species: Mapping[str, Species]
    drives: Mapping[str, Drive]
    imaging: Mapping[str, Imaging]
    ports: Mapping[str, Port]
    span: Span
    environment_k: float = 300.0  # temperature of the surroundings (black-body radiation)
    quantization_axis: tuple[float, float, float] | None = None  # None: each pair's own axis (θ = 0)
    min_spacing_m: float = 1e-6
    resonant_pairs: frozenset = frozenset()  # species-name pairs modelled as resonant (C3/R³)
    field_rms_g: float = 0.0  # quasi-static field offset shared by the array, rms (G)


@dataclass(frozen=True)
class Site:
    """A trap position holding one atom of a species."""

    name: str
    species: str
    position_m: tuple[float, float, float]
    span: Span


@dataclass(frozen=True)
class Layout:
    """A named site set from `lattice` (generated, or read from a CSV file): its sites in index
    order and each site's index (i, j), (i, j, k) for the honeycomb, (row,) for a file."""

    name: str
    kind: str  # square, rectangular, triangular, hexagonal, or file
    pitch_m: tuple[float, float]  # nearest-neighbour distance along x, y (0 for a file)
    size: tuple[int, ...]  # index range per axis
    origin_m: tuple[float, float, float]
    rotation_rad: float
    sites: tuple[str, ...]
    index: Mapping[tuple[int, ...], str]
    span: Span


@dataclass(frozen=True, slots=True)
class Shape:
    """A pulse envelope: kind and its parameters (seconds or fractions)."""

    kind: str  # square, ramped, gaussian, blackman
    params: tuple[tuple[str, float], ...] = ()

    def param(self, name: str, default: float) -> float:
        return dict(self.params).get(name, default)


# ---- feed-forward ----------------------------------------------------------------
@dataclass(frozen=True)
class Selection:
    """Sites of one image record: the key a conditioned operation is looked up by.

    The key is the number of sites reported bright, 0 .. len(sites) (for one site:
    the outcome bit).
    """

    record: str
    sites: tuple[str, ...]
    species: str
    span: Span = field(compare=False, hash=False)

    @property
    def keys(self) -> range:
        return range(len(self.sites) + 1)

    def label(self) -> str:
        return f"{self.record}[{', '.join(self.sites)}]"


@dataclass(frozen=True)
class Variant:
    """The parameters a conditioned pulse plays for one key."""

    rabi_hz: float
    detuning_hz: float
    phase_rad: float
    area_rad: float


@dataclass(frozen=True)
class Decision:
    """How an operation depends on a record: played for which keys, and with what.

    `enabled[k]` says whether it plays when the key is k; `variants[k]` (pulses
    with record-dependent values only) its parameters for key k.
    """

    selection: Selection
    enabled: tuple[bool, ...]
    variants: tuple[Variant, ...] | None
    span: Span


# ---- operations of the sequence ---------------------------------------------
@dataclass(frozen=True, slots=True)
class PulseOp:
    """One coherent pulse, with duration, area and amplitude all resolved."""

    drive: str
    targets: tuple[str, ...]
    duration_s: float
    rabi_hz: float
    detuning_hz: float
    phase_rad: float
    area_rad: float
    shape: Shape
    span: Span
    decision: Decision | None = None


@dataclass(frozen=True, slots=True)
class WaitOp:
    duration_s: float
    span: Span


@dataclass(frozen=True, slots=True)
class ImageOp:
    species: str
    record: str
    duration_s: float
    span: Span


@dataclass(frozen=True, slots=True)
class PortOp:
    """A plain port action: switch (value 1/0), set (value) or trigger."""

    port: str
    action: str  # "switch", "set", "trigger"
    value: float
    duration_s: float
    span: Span


@dataclass(frozen=True)
class SerialOp:
    """Statements one after another (a sequence body or an expanded block)."""

    body: tuple["Op", ...]
    span: Span


@dataclass(frozen=True)
class TogetherOp:
    """Statements that start (or end, or centre) together."""

    align: str
    body: tuple["Op", ...]
    span: Span


@dataclass(frozen=True)
class RepeatOp:
    count: int
    body: SerialOp
    span: Span


@dataclass(frozen=True)
class FieldOp:
    """An electric field (V/m, along the quantisation axis) from an electrode port during `body`."""

    port: str
    field_v_m: float
    volts: float
    body: SerialOp
    span: Span


@dataclass(frozen=True)
class MoveOp:
    """Sites displaced by (dx, dy, dz) metres over `duration_s` with a smooth `profile`."""

    sites: tuple[str, ...]
    displacement_m: tuple[float, float, float]
    duration_s: float
    profile: str
    span: Span



@dataclass(frozen=True)
class FillOp:
    """``fill``: move loaded atoms of `sources` onto every site of `targets` (planned once the
    occupancy is known, by seqlang.arrays.stage); `strategy` names the collision avoidance."""

    targets: tuple[str, ...]
    sources: tuple[str, ...]
    strategy: str
    span: Span


@dataclass(frozen=True)
class BranchOp:
    """``when``: `then` plays for the keys where `decision.enabled`, `otherwise` for the rest;
    both start together and last as long as the longer one (the shorter is padded)."""

    decision: Decision
    then: SerialOp
    otherwise: SerialOp
    span: Span


Op = Union[PulseOp, WaitOp, ImageOp, PortOp, SerialOp, TogetherOp, RepeatOp, BranchOp, FieldOp, MoveOp, FillOp]


@dataclass(frozen=True)
class Expectation:
    """The state a sequence means to make on named sites."""

    sites: tuple[str, ...]
    state: str  # "phi_plus" ..., "ghz", "w", a product "plus*zero", or a ket like "01"
    is_ket: bool
    span: Span
    phase_rad: float = 0.0  # relative phase φ of (|0…0⟩ + e^{iφ}|1…1⟩)/√2 for "ghz"
    correlators: tuple[str, ...] = ()  # Pauli strings asked for with `correlate`


@dataclass(frozen=True)
class Program:
    """A checked program: rig, sites, groups, body and expectations."""

    name: str
    path: str
    rig: Rig
    sites: Mapping[str, Site]
    groups: Mapping[str, tuple[str, ...]]
    body: SerialOp
    expects: tuple[Expectation, ...]
    sources: Mapping[str, str] = field(default_factory=dict)  # path -> sha256
    constants: Mapping[str, object] = field(default_factory=dict)
    scans: object = None  # a program.scans.ScanSpace when the file declares scans
    point: Mapping[str, float] = field(default_factory=dict)  # this point's scanned values (SI)
    point_index: int = 0
    free: tuple = ()  # program.scans.FreeParam of each `free` declaration
    layouts: Mapping[str, Layout] = field(default_factory=dict)  # `lattice` declarations
    arrays: object = None  # an arrays.stage.ArrayState once the occupancy is applied

    def sites_of(self, species: str) -> tuple[str, ...]:
        return tuple(n for n, s in self.sites.items() if s.species == species)
