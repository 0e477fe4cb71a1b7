"""`seqlang report FILE -o report.html`: one self-contained HTML page per run.

The page holds the program text, the rig summary, the compile report with an
excerpt of the timing table, the Rydberg pairs, the prediction with error bars,
the error budget, the provenance and the safety caution. Figures are inline
SVG; there are no scripts to run and no network resources. Every number shown
comes from the same documents that `seqlang simulate --json`, `seqlang budget
--json` and timing.json hold; they are embedded in the page as JSON
(``<script type="application/json" id="seqlang-data">``) and each shown number
carries its exact value in a ``data-value`` attribute.

>>> html = build_report(seqlang.load("programs/bell_pair.seq"), shots=50)   # doctest: +SKIP
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass

from .. import __version__
from ..emit.tables import CAUTION, provenance, timing_csv
from ..lang import units
from ..show import compile_summary, pair_rows, quantity

TABLE_EXCERPT_ROWS = 30
# Sources that cut every driven segment into fine steps; recording populations at many
# points inside each step makes a history run with them far slower than the run that
# gives the numbers, so the population curves are drawn without them (and say so).
HISTORY_SKIPS = ("laser_noise", "field_noise")
SIMULATION_NOTE = "model prediction for the played (tick-quantized) timeline; not a guarantee of the apparatus"


@dataclass(frozen=True)
class ReportOptions:
    """What to simulate for the report (the same meaning as `seqlang simulate`)."""

    noise: tuple[str, ...] | str = "all"
    shots: int = 200
    seed: int = 1
    budget: bool = True
    piecewise: bool = True
    engine: str = "auto"


def build_report(sequence, **options) -> str:
    """The report of a loaded :class:`seqlang.Sequence` as an HTML string (deterministic)."""
    opts = ReportOptions(**options)
    data = _simulate(sequence, opts)
    context = {
        "title": f"{sequence.program.name} — seqlang report",
        "program": sequence.program.name,
        "caution": CAUTION,
        "note": SIMULATION_NOTE,
        "sources": _sources(sequence),
        "rig": _rig_summary(sequence.program),
        "compiled": _compiled(sequence, opts),
        "pairs": _pairs(sequence.program),
        "prediction": _prediction(sequence, data, opts),
        "budget": _budget(data.get("budget")),
        "provenance": _provenance(sequence, data, opts),
        "data_json": _script_json(data["documents"]),
    }
    return _template().render(**context)


def write_report(sequence, path: str, **options) -> None:
    """Build the report and write it atomically to `path`."""
    from ..emit.atomic import write_text
    write_text(path, build_report(sequence, **options))


# ---- data ------------------------------------------------------------------------
def _simulate(sequence, opts: ReportOptions) -> dict:
    from ..sim.api import simulate
    from ..sim.commands import as_document
    from ..sim.noise import parse_sources
    sources = parse_sources(opts.noise) if isinstance(opts.noise, str) else tuple(opts.noise)
    common = {"shots": opts.shots, "seed": opts.seed, "repetitions": opts.shots, "engine": opts.engine}
    result = simulate(sequence, noise=sources, **common)
    history = simulate(sequence, noise=tuple(s for s in sources if s not in HISTORY_SKIPS), history=True, **common)
    documents = {"simulation": as_document(result), "timing_provenance": provenance(sequence.checked)}
    out = {"result": result, "history": history, "documents": documents,
           "history_skipped": [s for s in sources if s in HISTORY_SKIPS]}
    if opts.budget and sequence.program.expects:
        from ..sim.budget import budget
        out["budget"] = budget(sequence, shots=opts.shots, seed=opts.seed, engine=opts.engine)
        documents["budget"] = out["budget"]
    return out


def _script_json(documents: dict) -> str:
    """JSON that is safe inside a <script> element."""
    text = json.dumps(documents, indent=1, ensure_ascii=False, sort_keys=False)
    return text.replace("</", "<\\/")


def _sources(sequence) -> list[dict]:
    """Every source file (sequence first, then the rig and imports) with numbered lines."""
    program = sequence.program
    base = os.path.dirname(os.path.abspath(program.path))
    paths = sorted(program.sources, key=lambda p: (os.path.abspath(p) != os.path.abspath(program.path), p))
    out = []
    for path in paths:
        with open(path, encoding="utf-8") as handle:
            lines = handle.read().splitlines()
        out.append({"name": os.path.relpath(os.path.abspath(path), base).replace(os.sep, "/"),
                    "sha256": program.sources[path], "lines": list(enumerate(lines, 1))})
    return out


def _rig_summary(program) -> dict:
    rig = program.rig
    species = [{"name": s.name, "isotope": s.data.name, "rydberg": s.rydberg.label if s.rydberg else "—",
                "temperature": quantity(s.temperature_k, units.TEMPERATURE) if s.temperature_k else "—",
                "sites": ", ".join(n for n, site in program.sites.items() if site.species == s.name) or "—"}
               for s in rig.species.values()]
    drives = [{"name": d.name, "kind": d.kind, "species": d.species, "reach": d.reach,
               "rabi": quantity(d.max_rabi_hz, units.FREQUENCY), "port": d.port, "gate": d.gate or "—",
               "latency": _q(d.latency_s, units.DURATION)} for d in rig.drives.values()]
    imaging = [{"species": i.species, "port": i.port, "duration": quantity(i.duration_s, units.DURATION),
                "fidelity": f"{i.fidelity * 100:.4g} %", "loss": f"{i.loss * 100:.4g} %"}
               for i in rig.imaging.values()]
    ports = [{"name": p.name, "channel": p.channel, "kind": p.kind,
              "latency": _q(p.latency_s, units.DURATION)} for p in rig.ports.values()]
    return {"name": rig.name, "tick": quantity(rig.tick_s, units.DURATION), "species": species,
            "drives": drives, "imaging": imaging, "ports": ports}


def _compiled(sequence, opts: ReportOptions) -> dict:
    from ..plot.timeline import timeline_figure
    lines = timing_csv(sequence.checked).splitlines()
    comments = [line for line in lines if line.startswith("#")]
    header, *rows = [line.split(",") for line in lines if not line.startswith("#")]
    return {"summary": compile_summary(sequence.checked).splitlines(), "header": header,
            "rows": rows[:TABLE_EXCERPT_ROWS], "total_rows": len(rows), "comments": comments,
            "timeline_svg": _svg(timeline_figure(sequence.checked, opts.piecewise)),
            "events": len(sequence.played.events), "duration": _q(sequence.played.duration_s, units.DURATION)}


def _q(value: float, dim) -> str:
    """A quantity for a table; zero is just 0 (not "0 ps")."""
    return "0" if value == 0 else quantity(value, dim)


def _pairs(program) -> list[dict]:
    if len(program.sites) < 2:
        return []
    return [{"pair": r["pair"], "levels": r["levels"], "distance": quantity(r["distance_m"], units.LENGTH),
             "c6": f"{r['c6_hz_m6'] * 1e27:.4g}", "interaction": quantity(r["interaction_hz"], units.FREQUENCY),
             "radius": quantity(r["blockade_radius_m"], units.LENGTH), "rabi": quantity(r["rabi_hz"], units.FREQUENCY),
             "forster": r["near_forster"]} for r in pair_rows(program)]


def _prediction(sequence, data: dict, opts: ReportOptions) -> dict:
    from ..plot.results import (CORRELATORS, correlator_errors, correlators_figure, noise_caption,
                                populations_figure, repetitions)
    from ..sim import observables
    result, document = data["result"], data["documents"]["simulation"]
    n = repetitions(result)
    expectations = []
    for e in document["expectations"]:
        entry = {"sites": ", ".join(e["sites"]), "state": e["state"], "fidelity": e["fidelity"],
                 "fidelity_error": e.get("fidelity_error"), "residual_rydberg": e["residual_rydberg"],
                 "loss": e["loss"],
                 "populations": [(k, v, e.get("populations_error", {}).get(k)) for k, v in e["populations"].items()],
                 "conditioned": e.get("conditioned", [])}
        if "correlators" in e:
            ideal = observables.ideal_correlators(e["state"].strip("|>"), e["state"].startswith("|"))
            errors = correlator_errors(e["correlators"], n, e.get("correlators_error"))
            entry["correlators"] = [(k, e["correlators"][k], errors[k], ideal[k]) for k in CORRELATORS]
        expectations.append(entry)
    has_pairs = any("correlators" in e for e in document["expectations"])
    info = document["noise"]
    short = ("noiseless" if not info.get("sources") else
             f"{len(info['sources'])} noise sources, {info.get('shots')} shots")
    return {"caption": noise_caption(result), "short_caption": short, "expectations": expectations, "records": document["records"],
            "site_populations": document["site_populations"], "engine": document["engine"],
            "populations_svg": _svg(populations_figure(data["history"], sequence, opts.piecewise)),
            "history_skipped": ", ".join(data["history_skipped"]),
            "correlators_svg": _svg(correlators_figure(result)) if has_pairs else None}


def _budget(numbers: dict | None) -> dict | None:
    if numbers is None:
        return None
    from ..plot.budget import budget_figure, budget_rows
    tables = []
    for e in numbers["expectations"]:
        rows = budget_rows(e, numbers.get("not_declared", {}))
        sources = [r for r in rows if r.kind in ("markovian", "sampled") and r.value and r.value > 0]
        tables.append({"title": f"{', '.join(e['sites'])} as {e['state']}", "rows": rows,
                       "largest": sources[0] if sources else None})
    return {"tables": tables, "svg": _svg(budget_figure(numbers, what_if=True)), "shots": numbers["shots"],
            "seed": numbers["seed"], "engines": ", ".join(numbers.get("engines", []))}


def _provenance(sequence, data: dict, opts: ReportOptions) -> dict:
    from importlib import metadata
    import platform
    versions = {"seqlang": __version__, "python": platform.python_version()}
    for name in ("numpy", "scipy", "qutip", "matplotlib", "arc-alkali-rydberg-calculator", "lark"):
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    info = data["documents"]["simulation"]["noise"]
    timing = data["documents"]["timing_provenance"]
    return {"versions": versions, "sources": timing["sources"], "tick_ns": timing["tick_ns"],
            "format": timing["format"], "seed": info.get("seed"), "shots": info.get("shots"),
            "repetitions": info.get("repetitions"), "noise": ", ".join(info.get("sources", [])) or "off",
            "engine": data["documents"]["simulation"]["engine"]}


# ---- rendering -------------------------------------------------------------------
def _svg(fig) -> str:
    """Inline SVG markup of a figure (the XML prologue dropped)."""
    from ..plot.save import figure_bytes
    text = figure_bytes(fig, "svg").decode("utf-8")
    return text[text.index("<svg"):]


def number(value, digits: int = 4, style: str = "f") -> str:
    """A shown number with its exact value kept in data-value (what the tests compare)."""
    from markupsafe import Markup, escape
    if value is None:
        return Markup("—")
    shown = f"{value:.{digits}{style}}" if isinstance(value, float) and math.isfinite(value) else str(value)
    return Markup(f'<span class="num" data-value="{escape(repr(value))}">{escape(shown)}</span>')


def _template():
    import jinja2
    from markupsafe import Markup
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(os.path.dirname(__file__)),
                             autoescape=True, trim_blocks=True, lstrip_blocks=True,
                             undefined=jinja2.StrictUndefined)
    env.filters["num"] = number
    env.filters["safe_svg"] = Markup
    return env.get_template("report.html")
