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


@dataclass(frozen=True)
class Site:
    """A trap position holding one atom of a species."""

    name: str
    species: str
    position_m: tuple[float, float, float]
    span: Span


@dataclass(frozen=True)
class Shape:
    """A pulse envelope: kind and its parameters (seconds or fractions)."""

    kind: str  # square, ramped, gaussian, blackman
    params: tuple[tuple[str, float], ...] = ()

    def param(self, name: str, default: float) -> float:
        return dict(self.params).get(name, default)


# ---- operations of the sequence ---------------------------------------------
@dataclass(frozen=True)
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


@dataclass(frozen=True)
class WaitOp:
    duration_s: float
    span: Span


@dataclass(frozen=True)
class ImageOp:
    species: str
    record: str
    duration_s: float
    span: Span


@dataclass(frozen=True)
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


Op = Union[PulseOp, WaitOp, ImageOp, PortOp, SerialOp, TogetherOp, RepeatOp]


@dataclass(frozen=True)
class Expectation:
    """The state a sequence means to make on named sites."""

    sites: tuple[str, ...]
    state: str  # "phi_plus" ... or a ket like "01"
    is_ket: bool
    span: Span


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

    def sites_of(self, species: str) -> tuple[str, ...]:
        return tuple(n for n, s in self.sites.items() if s.species == species)
