"""Resolve a ``rig`` declaration into a :class:`~seqlang.program.model.Rig`.

>>> # see tests/test_rig.py for full examples
"""
from __future__ import annotations

import math

from ..atoms import species as species_table
from ..lang import syntax as ast
from ..lang import units
from ..lang.diagnostics import Diagnostic, did_you_mean, error
from . import props as p
from .evaluate import EvalError, Scope, evaluate, evaluate_any, expect_kind
from .model import DRIVE_KINDS, Drive, Imaging, Legs, Port, Rig, Species

_PER_FIELD = tuple(f - g for f, g in zip(units.FREQUENCY, units.FIELD))  # Hz/G: qubit shift per field

_INTENSITY = tuple(w - 2 * m for w, m in zip(units.POWER, units.LENGTH))  # W/m²

RIG_SETTINGS = {
    "tick": p.Key(p.positive(p.duration, "tick"), required=True, doc="the sequencer clock period, e.g. 2 ns"),
    "counter_bits": p.Key(p.integer(8, 64), 32, doc="width of the sequencer's duration counter"),
    "environment": p.Key(p.non_negative(p.temperature, "environment temperature"), 300.0,
                         doc="temperature of the surroundings, for black-body decay"),
    # rms of the quasi-static magnetic field offset shared by the whole array (one value per shot);
    # each species feels it through its `field_sensitivity`.
    "field_rms": p.Key(p.non_negative(p.quantity(units.FIELD)), 0.0),
}

E_FIELD = tuple(v - l for v, l in zip(units.VOLTAGE, units.LENGTH))
PER_LENGTH = tuple(-x for x in units.LENGTH)
HZ_PER_M = tuple(f - l for f, l in zip(units.FREQUENCY, units.LENGTH))
VELOCITY = tuple(l - t for l, t in zip(units.LENGTH, units.DURATION))
ACCELERATION = tuple(l - 2 * t for l, t in zip(units.LENGTH, units.DURATION))
DEFAULT_MIN_SPACING_M = 1e-6  # about one diffraction-limited tweezer spot (common practice)


def _axis(expr, scope):
    """``(0, 0, 1)``: a direction; normalised."""
    value = evaluate_any(expr, scope)
    if not isinstance(value, tuple) or len(value) != 3:
        raise EvalError(error("expected a direction such as `(0, 0, 1)`", expr.span))
    comps = [expect_kind(q, units.DIMENSIONLESS, expr.span) for q in value]
    norm = math.sqrt(sum(c * c for c in comps))
    if norm == 0:
        raise EvalError(error("the quantisation axis cannot be zero", expr.span))
    return tuple(c / norm for c in comps)


RIG_SETTINGS_PAIRS = {
    "quantization_axis": p.Key(_axis, None, doc="direction of the bias field, e.g. (0, 0, 1)"),
    "min_spacing": p.Key(p.positive(p.length, "minimum spacing"), DEFAULT_MIN_SPACING_M,
                         doc="closest two sites may come, e.g. 1.5 um"),
}

SPECIES_KEYS = {
    "qubit": p.Key(lambda e, s: e, None, doc="`clock` or `(F=1, mF=0) <-> (F=2, mF=0)`"),
    "rydberg": p.Key(lambda e, s: e, None, doc="the Rydberg level, e.g. 58S1/2"),
    "temperature": p.Key(p.non_negative(p.temperature, "temperature"), 0.0),
    # Noise and preparation data read by the simulator (see docs/language.md).
    "trap_radial": p.Key(p.non_negative(p.frequency), 0.0),
    "trap_axial": p.Key(p.non_negative(p.frequency), 0.0),
    "prep_error": p.Key(p.fraction, 0.0),
    "decay_to_qubit": p.Key(p.fraction, 0.0),
    "t2_star": p.Key(p.non_negative(p.duration), 0.0),
    "field_noise": p.Key(p.non_negative(p.frequency), 0.0),
    "field_noise_freq": p.Key(p.non_negative(p.frequency), 0.0),
    "resonant_with": p.Key(lambda e, s: e, None, doc="a species whose pair with this one is modelled as C3/R^3"),
    "field_sensitivity": p.Key(p.quantity(_PER_FIELD), 0.0),
    # Light shift of the Rydberg level by the trap light while the traps are on.
    "trap_rydberg_shift": p.Key(p.frequency, 0.0),
    # Arrays (docs/arrays.md): stochastic loading and the survival of rearrangement moves.
    "loading": p.Key(p.fraction, 1.0, doc="probability that a trap of this species loads an atom"),
    "move_survival": p.Key(p.fraction, 1.0, doc="probability that an atom survives one relocation"),
    "move_loss_length": p.Key(p.positive(p.length, "loss length"), None,
                              doc="1/e length of transport survival: exp(-L/length)"),
}

_COMMON_DRIVE_KEYS = {
    "rabi": p.Key(p.positive(p.frequency, "maximum Rabi frequency"), required=True,
                  doc="the maximum Rabi frequency Ω/2π"),
    "detuning": p.Key(p.frequency_range, p.UNBOUNDED),
    "reach": p.Key(p.choice("all", "each"), "all"),
    "port": p.Key(p.channel, required=True, doc="the sequencer output, e.g. awg0.1"),
    "gate": p.Key(p.channel, None),
    "gate_lead": p.Key(p.early_by("gate lead", "the whole table is shifted by the largest gate lead"), 0.0),
    "gate_lag": p.Key(p.early_by("gate lag", "every gate window is held open that long"), 0.0),
    "latency": p.Key(p.latency, 0.0),
    "rise": p.Key(p.non_negative(p.duration), 0.0),
    "sample_rate": p.Key(p.positive(p.frequency, "sample rate"), None),
    "amplitude_bits": p.Key(p.integer(1, 32), 16),
    # Noise data read by the simulator.
    "linewidth": p.Key(p.non_negative(p.frequency), 0.0),
    "intensity_noise": p.Key(p.fraction, 0.0),
    "detuning_error": p.Key(p.frequency, 0.0),
    "line_offset": p.Key(p.frequency, 0.0, doc="where the drive's resonance was measured, from its nominal "
                                               "frequency: tables play detuning + line_offset"),
    "waist": p.Key(p.non_negative(p.length), 0.0),
    "servo_bump": p.Key(p.non_negative(p.frequency), 0.0),
    "servo_width": p.Key(p.non_negative(p.frequency), 0.0),
    "servo_height": p.Key(p.non_negative(p.quantity(units.DIMENSIONLESS)), 0.0),
}

_RYDBERG_KEYS = {
    "lower_wavelength": p.Key(p.positive(p.length, "wavelength"), None),
    "upper_wavelength": p.Key(p.positive(p.length, "wavelength"), None),
    "intermediate": p.Key(p.frequency, None, doc="the intermediate-state detuning Δ/2π"),
    "lower_rabi": p.Key(p.positive(p.frequency), None),
    "upper_rabi": p.Key(p.positive(p.frequency), None),
    "geometry": p.Key(p.choice("counter", "co"), "counter"),
}

IMAGE_KEYS = {
    "port": p.Key(p.channel, required=True, doc="the camera or light output, e.g. ttl.9"),
    "duration": p.Key(p.positive(p.duration, "imaging time"), required=True),
    "fidelity": p.Key(p.fraction, 1.0),
    "loss": p.Key(p.fraction, 0.0),
    "latency": p.Key(p.latency, 0.0),
    "false_positive": p.Key(p.fraction, 0.0),
    "false_negative": p.Key(p.fraction, 0.0),
    # Feed-forward: camera read-out plus processing, from the end of the imaging to
    # the first operation that may depend on its record.
    "decision_latency": p.Key(p.non_negative(p.duration), 0.0),
    # Imaging crosstalk: the imaging light's wavelength (default: the species' D2 line) and its
    # intensity, or its saturation parameter on the imaged species' D2 line.
    "light_wavelength": p.Key(p.positive(p.length, "wavelength"), None),
    "light_intensity": p.Key(p.non_negative(p.quantity(_INTENSITY)), None),
    "saturation": p.Key(p.non_negative(p.quantity(units.DIMENSIONLESS)), None),
}

PORT_KEYS = {
    "kind": p.Key(p.choice("digital", "analog", "deflector"), "digital"),
    "latency": p.Key(p.latency, 0.0),
    "width": p.Key(p.positive(p.duration, "trigger width"), 1e-6),
    "range": p.Key(p.any_range, None),
    # electrodes (analog) and deflectors: see PORT_EXTRA_KEYS and docs/language.md
    "field_per_volt": p.Key(p.positive(p.quantity(PER_LENGTH), "calibration"), None),
    "axis": p.Key(p.choice("x", "y", "z"), None),
    "scale": p.Key(p.quantity(HZ_PER_M), None),
    "center": p.Key(p.positive(p.frequency, "centre frequency"), None),
    "sample_rate": p.Key(p.positive(p.frequency, "sample rate"), None),
    "steers": p.Key(lambda e, s: e, None, doc="the species whose tweezers it steers"),
    "max_velocity": p.Key(p.positive(p.quantity(VELOCITY), "maximum velocity"), None),
    "max_acceleration": p.Key(p.positive(p.quantity(ACCELERATION), "maximum acceleration"), None),
    # `role traps`: this digital line switches the tweezer light (on = traps on).
    "role": p.Key(p.choice("plain", "traps"), "plain"),
}
PORT_KINDS = ("digital", "analog", "deflector")
DEFLECTOR_REQUIRED = ("axis", "scale", "center", "sample_rate")


def drive_keys(kind: str) -> dict[str, p.Key]:
    """The properties a drive of this kind accepts."""
    return {**_COMMON_DRIVE_KEYS, **(_RYDBERG_KEYS if kind == "rydberg" else {})}


def resolve_rig(rig: ast.RigDef, path: str, scope: Scope, diags: list[Diagnostic]) -> Rig:
    """Build the Rig; every problem found is appended to `diags`."""
    _bind_lets(rig.lets, scope, diags)
    settings = p.read_props(rig.settings, {**RIG_SETTINGS, **RIG_SETTINGS_PAIRS}, scope, f"rig `{rig.name.name}`",
                            rig.name.span, diags)
    species = _unique(rig.species, lambda d: d.name, "species", diags)
    species_map = {name: _species(decl, scope, diags) for name, decl in species.items()}
    drives = _unique(rig.drives, lambda d: d.name, "drive", diags)
    drive_map = {name: _drive(decl, species_map, scope, settings["tick"], diags) for name, decl in drives.items()}
    images = _unique(rig.images, lambda d: d.species, "imaging", diags)
    image_map = {name: _imaging(decl, species_map, scope, diags) for name, decl in images.items()}
    ports = _unique(rig.ports, lambda d: d.name, "port", diags)
    port_map = {name: _port(decl, scope, diags) for name, decl in ports.items()}
    return Rig(rig.name.name, path, settings["tick"] or 1e-9, settings["counter_bits"],
               {k: v for k, v in species_map.items() if v is not None},
               {k: v for k, v in drive_map.items() if v is not None},
               {k: v for k, v in image_map.items() if v is not None}, port_map, rig.span,
               settings["environment"] if settings["environment"] is not None else 300.0,
               settings["quantization_axis"], settings["min_spacing"] or DEFAULT_MIN_SPACING_M,
               _resonant_pairs(species, species_map, diags), settings["field_rms"] or 0.0)


def _resonant_pairs(decls: dict, species_map: dict, diags: list[Diagnostic]) -> frozenset:
    """Species pairs declared `resonant_with` each other (order-free)."""
    out = set()
    for name, decl in decls.items():
        for prop in (q for q in decl.props if q.key_name == "resonant_with"):
            other = prop.value.name if isinstance(prop.value, ast.NameRef) else None
            if other not in species_map:
                diags.append(error("expected the name of a species of this rig", prop.value.span,
                                   did_you_mean(other or "", species_map)))
                continue
            out.add(frozenset((name, other)))
    return frozenset(out)


def _bind_lets(lets, scope: Scope, diags: list[Diagnostic]) -> None:
    for let in lets:
        if let.name.name in scope.pinned:
            continue  # a scan of the sequence overrides this rig constant
        try:
            scope.values[let.name.name] = evaluate(let.value, scope)
        except EvalError as exc:
            diags.append(exc.diagnostic)


def _unique(decls, name_of, what: str, diags: list[Diagnostic]) -> dict:
    out: dict = {}
    for decl in decls:
        ident = name_of(decl)
        if ident.name in out:
            diags.append(error(f"{what} `{ident.name}` is declared twice", ident.span))
        else:
            out[ident.name] = decl
    return out


def _species(decl: ast.SpeciesDecl, scope: Scope, diags: list[Diagnostic]) -> Species | None:
    isotope = decl.isotope.name
    try:
        data = species_table.lookup(isotope)
    except KeyError:
        diags.append(error(f"unknown isotope `{isotope}`", decl.isotope.span,
                           did_you_mean(isotope, species_table.names())
                           or f"known: {', '.join(species_table.names())}"))
        return None
    values = p.read_props(decl.props, SPECIES_KEYS, scope, f"species `{decl.name.name}`", decl.name.span, diags)
    qubit = _qubit(values["qubit"], data, diags)
    level = _level(values["rydberg"], data, diags)
    extra = {k: v for k, v in values.items() if k not in ("qubit", "rydberg", "temperature", "__spans__",
                                                         "resonant_with")}
    return Species(decl.name.name, data, qubit, level, values["temperature"] or 0.0, extra, decl.span)


def _qubit(expr, data, diags: list[Diagnostic]):
    clock = species_table.clock_states(data)
    if expr is None or (isinstance(expr, ast.NameRef) and expr.name == "clock"):
        return clock
    if not isinstance(expr, ast.StatePair):
        diags.append(error("expected `clock` or `(F=…, mF=…) <-> (F=…, mF=…)`", expr.span))
        return clock
    try:
        states = (_hf_state(expr.lower, expr.span), _hf_state(expr.upper, expr.span))
        species_table.qubit_frequency_hz(data, *states)
        return states
    except (EvalError, ValueError) as exc:
        diags.append(exc.diagnostic if isinstance(exc, EvalError) else error(str(exc), expr.span))
        return clock


def _hf_state(items, span):
    values = {}
    for ident, expr in items:
        if ident.name not in ("F", "mF"):
            raise EvalError(error(f"expected `F` or `mF`, got `{ident.name}`", ident.span))
        values[ident.name] = p.quantity(units.DIMENSIONLESS)(expr, Scope())
    if set(values) != {"F", "mF"}:
        raise EvalError(error("a hyperfine state needs both `F` and `mF`", span))
    return species_table.QubitState(values["F"], values["mF"])


def _level(expr, data, diags: list[Diagnostic]):
    if expr is None:
        return None
    if not isinstance(expr, ast.LevelExpr):
        diags.append(error("expected a Rydberg level such as `58S1/2`", expr.span))
        return None
    try:
        return species_table.parse_level(expr.text, data)
    except ValueError as exc:
        diags.append(error(str(exc), expr.span))
        return None


def _drive(decl: ast.DriveDecl, species: dict, scope: Scope, tick: float | None,
           diags: list[Diagnostic]) -> Drive | None:
    kind, owner = decl.kind.name, f"drive `{decl.name.name}`"
    if kind not in DRIVE_KINDS:
        diags.append(error(f"unknown drive kind `{kind}`", decl.kind.span,
                           did_you_mean(kind, DRIVE_KINDS) or f"known: {', '.join(DRIVE_KINDS)}"))
        return None
    if decl.species.name not in species:
        diags.append(error(f"unknown species `{decl.species.name}`", decl.species.span,
                           did_you_mean(decl.species.name, species)))
        return None
    v = p.read_props(decl.props, drive_keys(kind), scope, owner, decl.name.span, diags)
    if v["rabi"] is None or v["port"] is None:
        return None
    legs = _legs(v, decl, species[decl.species.name], diags) if kind == "rydberg" else None
    extra = {k: v[k] for k in ("linewidth", "intensity_noise", "detuning_error", "line_offset", "waist",
                               "servo_bump", "servo_width", "servo_height")}
    return Drive(decl.name.name, kind, decl.species.name, v["reach"], v["rabi"], v["detuning"],
                 v["port"], v["gate"], v["gate_lead"], v["gate_lag"], v["latency"], v["rise"],
                 v["sample_rate"] or 1.0 / (tick or 1e-9), v["amplitude_bits"], legs, extra, decl.span)


def _legs(v: dict, decl: ast.DriveDecl, sp: Species | None, diags: list[Diagnostic]) -> Legs | None:
    if sp is not None and sp.rydberg is None:
        diags.append(error(f"rydberg drive `{decl.name.name}` needs a Rydberg level on species "
                           f"`{decl.species.name}`", decl.species.span, "add `rydberg 58S1/2` to the species"))
    if v["lower_wavelength"] is None or v["upper_wavelength"] is None:
        return None
    if sp is not None and sp.rydberg is not None:
        diags += _check_leg_wavelengths(v["lower_wavelength"], v["upper_wavelength"], sp, v["__spans__"])
    return Legs(v["lower_wavelength"], v["upper_wavelength"], v["intermediate"] or math.inf,
                v["geometry"] == "counter", v["lower_rabi"], v["upper_rabi"])


def _imaging(decl: ast.ImageDecl, species: dict, scope: Scope, diags: list[Diagnostic]) -> Imaging | None:
    if decl.species.name not in species:
        diags.append(error(f"unknown species `{decl.species.name}`", decl.species.span,
                           did_you_mean(decl.species.name, species)))
        return None
    v = p.read_props(decl.props, IMAGE_KEYS, scope, f"imaging of `{decl.species.name}`", decl.species.span, diags)
    if v["port"] is None or v["duration"] is None:
        return None
    extra = {"false_positive": v["false_positive"], "false_negative": v["false_negative"]}
    extra.update({k: v[k] for k in ("light_wavelength", "light_intensity", "saturation") if v[k] is not None})
    return Imaging(decl.species.name, v["port"], v["duration"], v["fidelity"], v["loss"], v["latency"],
                   extra, decl.span, v["decision_latency"] or 0.0)


def _port(decl: ast.PortDecl, scope: Scope, diags: list[Diagnostic]) -> Port:
    v = p.read_props(decl.props, PORT_KEYS, scope, f"port `{decl.name.name}`", decl.name.span, diags)
    value_range = v["range"]
    if value_range is not None and v["kind"] == "digital":
        diags.append(error("a digital port has no value range", v["__spans__"]["range"], "add `kind analog`"))
    if v["role"] == "traps" and v["kind"] != "digital":
        diags.append(error("the trap switch must be a digital port", v["__spans__"]["role"], "add `kind digital`"))
    bounds = (value_range[0], value_range[1]) if value_range else None
    return Port(decl.name.name, decl.channel.text, v["kind"], v["latency"], v["width"], bounds,
                value_range[2] if value_range else None, decl.span, _port_extra(decl, v, diags),
                role=v["role"])


def _port_extra(decl: ast.PortDecl, v: dict, diags: list[Diagnostic]) -> dict:
    """Electrode calibration and deflector settings, each allowed only on its kind."""
    spans, kind = v["__spans__"], v["kind"]
    deflector_keys = ("axis", "scale", "center", "sample_rate", "steers", "max_velocity", "max_acceleration")
    for key in deflector_keys:
        if key in spans and kind != "deflector":
            diags.append(error(f"`{key}` belongs to a deflector port", spans[key], "add `kind deflector`"))
    if "field_per_volt" in spans and kind != "analog":
        diags.append(error("`field_per_volt` belongs to an analog (electrode) port", spans["field_per_volt"]))
    if kind == "deflector":
        for key in (k for k in DEFLECTOR_REQUIRED if v[k] is None):
            diags.append(error(f"deflector port `{decl.name.name}` needs `{key}`", decl.name.span))
    extra = {k: v[k] for k in deflector_keys + ("field_per_volt",) if v[k] is not None}
    if isinstance(extra.get("steers"), ast.NameRef):
        extra["steers"] = extra["steers"].name
    return extra


# ---- leg wavelengths against the species' lines ------------------------------
LOWER_LEG_RTOL = 0.005  # the lower leg sits within 0.5 % of a first-step line (intermediate detunings are GHz)
LADDER_SUM_RTOL = 0.01  # the two photons add up to the Rydberg level within 1 %
SPEED_OF_LIGHT = 299_792_458.0  # m/s, exact (SI)


def _check_leg_wavelengths(lower_m: float, upper_m: float, sp: Species, spans: dict) -> list[Diagnostic]:
    """Legs that cannot belong to this species' ladder to its declared Rydberg level.

    Level energies from the alkali Rydberg calculator (ARC ``getEnergy``, cached on
    disk by :mod:`seqlang.atoms.rydberg`); a wrong species is tens of THz off.
    """
    from ..atoms import rydberg
    try:
        steps, rydberg_hz = _ladder_frequencies(sp, rydberg)
    except (ValueError, ArithmeticError, KeyError):
        return []  # a level the calculator does not hold: nothing to compare with
    out = []
    lower_hz = SPEED_OF_LIGHT / lower_m
    if not any(abs(lower_hz - f) <= LOWER_LEG_RTOL * f for _, f in steps):
        lines = ", ".join(f"{name} {_nm(f)}" for name, f in steps)
        out.append(error(f"lower leg {_nm(lower_hz)} matches no first step of {sp.data.name} "
                         f"({lines}) within {LOWER_LEG_RTOL:.1%}", spans["lower_wavelength"],
                         "is this a wavelength of another species?"))
        return out
    total = lower_hz + SPEED_OF_LIGHT / upper_m
    if abs(total - rydberg_hz) > LADDER_SUM_RTOL * rydberg_hz:
        wanted = SPEED_OF_LIGHT / (rydberg_hz - lower_hz)
        out.append(error(f"the legs add up to {total / 1e12:.6g} THz, but {sp.rydberg.label} of {sp.data.name} "
                         f"lies {rydberg_hz / 1e12:.6g} THz above the ground state "
                         f"(tolerance {LADDER_SUM_RTOL:.0%})", spans["upper_wavelength"],
                         f"with this lower leg the upper leg is near {wanted * 1e9:.2f} nm"))
    return out


def _ladder_frequencies(sp: Species, rydberg) -> tuple[list[tuple[str, float]], float]:
    """First-step lines (nP1/2, nP3/2 of the two lowest P shells) and the Rydberg level, Hz above ground."""
    from ..atoms.species import RydbergLevel
    n0 = sp.data.ground_state_n
    ground = rydberg.energy_hz(sp.data, RydbergLevel(n0, 0, 0.5))
    steps = [(RydbergLevel(n, 1, j).label, rydberg.energy_hz(sp.data, RydbergLevel(n, 1, j)) - ground)
             for n in (n0, n0 + 1) for j in (0.5, 1.5)]
    return steps, rydberg.energy_hz(sp.data, sp.rydberg) - ground


def _nm(frequency_hz: float) -> str:
    return f"{SPEED_OF_LIGHT / frequency_hz * 1e9:.2f} nm"
