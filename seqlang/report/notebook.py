"""Notebook views: compact HTML for Jupyter, and tables as xarray / pandas objects.

The API's objects call these (`Sequence._repr_html_`, `SimulationResult._repr_html_`,
`.to_xarray()`, `.to_dataframe()`). pandas is optional and imported only when a
DataFrame is asked for.
"""
from __future__ import annotations

import html

import numpy as np

from ..sim.model import LEVELS

CORRELATORS = tuple(a + b for a in "XYZ" for b in "XYZ")


# ---- HTML ------------------------------------------------------------------------
def _cell(value, digits: int = 5) -> str:
    if value is None:
        return "<td>—</td>"
    if isinstance(value, float):
        return f'<td style="text-align:right">{value:.{digits}g}</td>'
    return f"<td>{html.escape(str(value))}</td>"


def _table(header: list[str], rows: list[list]) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(_cell(v) for v in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def result_html(result, figures: bool = True) -> str:
    """Expectations (fidelity ± error, populations, Rydberg, loss), records, and the correlator figure."""
    from ..plot.results import noise_caption
    rows = []
    for e in result.expectations:
        pops = ", ".join(f"{k}: {v:.4f}" for k, v in e["populations"].items())
        rows.append([", ".join(e["sites"]), e["state"], e["fidelity"], e.get("fidelity_error"), pops,
                     e["residual_rydberg"], e["loss"]])
    parts = [f"<p><b>{html.escape(result.program_name)}</b> — {html.escape(noise_caption(result))}; "
             f"engine {html.escape(result.engine)}</p>",
             _table(["sites", "state", "fidelity", "± (Monte Carlo)", "populations", "Rydberg", "loss"], rows)]
    if result.records:
        parts.append(_table(["record", "site", "P(bright)"],
                            [[r, s, p] for r, sites in result.records.items() for s, p in sites.items()]))
    if figures and any("correlators" in e for e in result.expectations):
        from ..plot.results import correlators_figure
        parts.append(_inline_svg(correlators_figure(result)))
    return "\n".join(parts)


def sequence_html(sequence, figures: bool = True) -> str:
    """Name, counts, the compile report and the timeline figure."""
    from ..show import compile_summary
    summary = "".join(f"<li>{html.escape(line)}</li>" for line in compile_summary(sequence.checked).splitlines())
    parts = [f"<p><b>{html.escape(sequence.program.name)}</b> ({html.escape(sequence.path)}): "
             f"{len(sequence.program.sites)} sites, {len(sequence.played.events)} events, "
             f"{len(sequence.warnings)} warnings</p><ul>{summary}</ul>"]
    if figures:
        from ..plot.timeline import timeline_figure
        parts.append(_inline_svg(timeline_figure(sequence.checked)))
    return "\n".join(parts)


def _inline_svg(fig) -> str:
    from ..plot.save import figure_bytes
    text = figure_bytes(fig, "svg").decode("utf-8")
    return text[text.index("<svg"):]


# ---- xarray and pandas -----------------------------------------------------------
def result_dataset(result):
    """An xarray.Dataset: per expectation fidelity, errors, Rydberg, loss and correlators; per site
    and level the final populations; the population history when the run recorded one."""
    import xarray as xr
    labels = [f"{','.join(e['sites'])} as {e['state']}" for e in result.expectations]

    def column(key):
        return ("expectation", np.array([float(e.get(key, np.nan)) for e in result.expectations]))
    variables = {k: column(k) for k in ("fidelity", "fidelity_error", "residual_rydberg", "loss")}
    variables["correlators"] = (("expectation", "pauli"), np.array(
        [[e["correlators"][k] if "correlators" in e else np.nan for k in CORRELATORS]
         for e in result.expectations]).reshape(len(labels), len(CORRELATORS)))
    sites = [s for c in result.clusters for s in c.model.sites]
    final = np.concatenate([c.populations()[:, :len(LEVELS)] for c in result.clusters]) if result.clusters \
        else np.zeros((0, len(LEVELS)))
    variables["site_populations"] = (("site", "level"), final)
    coords = {"expectation": labels, "pauli": list(CORRELATORS), "site": sites, "level": list(LEVELS)}
    history = _history(result)
    if history is not None:
        coords["time_s"], variables["history"] = history[0], (("time_s", "site", "level"), history[1])
    info = getattr(result, "noise", {}) or {}
    attrs = {"program": result.program_name, "engine": result.engine,
             "noise": ",".join(info.get("sources", [])) or "off", "shots": int(info.get("shots", 1)),
             "seed": int(info.get("seed", 0)), "note": "model prediction for the played timeline"}
    return xr.Dataset(variables, coords=coords, attrs=attrs)


def _history(result):
    """(times, pops[time, site, level]) over all clusters when they share one time grid."""
    grids = []
    for cluster in result.clusters:
        history = tuple(getattr(cluster, "history", ()) or ())
        if not history:
            return None
        grids.append((np.array([t for t, _ in history]), np.array([np.asarray(p)[:, :len(LEVELS)]
                                                                   for _, p in history])))
    if not grids or any(len(g[0]) != len(grids[0][0]) or not np.allclose(g[0], grids[0][0]) for g in grids):
        return None
    return grids[0][0], np.concatenate([g[1] for g in grids], axis=1)


def _pandas():
    try:
        import pandas
    except ImportError:
        raise ImportError("to_dataframe() needs pandas, which seqlang does not require: pip install pandas; "
                          "or use to_xarray()") from None
    return pandas


def result_dataframe(result):
    """One row per expectation: fidelity, its error, Rydberg, loss, populations P_…, correlators."""
    pandas = _pandas()
    rows = []
    for e in result.expectations:
        row = {"sites": ",".join(e["sites"]), "state": e["state"], "fidelity": e["fidelity"],
               "fidelity_error": e.get("fidelity_error"), "residual_rydberg": e["residual_rydberg"],
               "loss": e["loss"]}
        row.update({f"P_{k}": v for k, v in e["populations"].items()})
        row.update({f"<{k}>": v for k, v in e.get("correlators", {}).items()})
        rows.append(row)
    return pandas.DataFrame(rows)


def timeline_dataframe(sequence):
    """The played timeline, one row per event (the columns of timing.json's "timeline")."""
    from ..emit.tables import timeline_entry
    pandas = _pandas()
    rows = [timeline_entry(sequence.checked, e) for e in sequence.played.events]
    frame = pandas.DataFrame(rows)
    if "targets" in frame:
        frame["targets"] = frame["targets"].map(" ".join)
    return frame.drop(columns=["shape_params"], errors="ignore")
