"""The outputs of a tuning: the tuned design file, tune.json, the report and the ngspice confirmation.

:func:`write_tuning` writes into one output folder (atomically, :class:`netgen.pipeline.atomic_folder`):

* ``tuned.toml``: the design as given with ``[network.values]`` holding every part of the
  network as evaluated (pinned as sized, each free key at its tuned value), each with a comment
  saying how it was obtained;
* ``tune.json``: problem, start and end values, metrics (estimate and ngspice), the history;
* ``objective.png`` (:func:`netgen.studies.closure_plots.plot_history`) and ``report.html``;
* ``confirm/``: the full ngspice run of the tuned design (metrics.json, plots, its report).
"""

from __future__ import annotations

import html
import json
import math
from pathlib import Path

import numpy as np

from netgen.design import format_quantity

from .fast import disagreement, ngspice_turn_on
from .grammar import metric_value
from .tune import TuneResult, engine_counts

__all__ = ["TABLE_METRICS", "confirm_tuned", "tuned_toml", "write_tuning"]

#: rows of the before/after table (besides the goals' metrics)
TABLE_METRICS = ("pout_w", "pdc_w", "drain_efficiency", "peak_vd_v", "peak_vd_over_vdd", "h2_dbc", "h3_dbc")


def tuned_toml(source_text: str, result: TuneResult) -> str:
    """The design text with ``[network.values]`` (and any free design key) set as tuned."""
    import tomlkit

    doc = tomlkit.parse(source_text)
    pinned = (result.problem.base_doc.get("network") or {}).get("values") or {}
    given = ((doc.get("network") or {}).get("values") or {})
    free = {f.path: (f, x0, x) for f, x0, x in zip(result.problem.free, result.x0, result.x)}
    if "network" not in doc:
        doc["network"] = tomlkit.table()
    if "values" not in doc["network"]:
        doc["network"]["values"] = tomlkit.table()
    values = doc["network"]["values"]
    for name, text in pinned.items():
        path = f"network.values.{name}"
        if path in free or name in given:
            continue
        item = tomlkit.string(str(text))
        item.comment("as sized (pinned while tuning)")
        values[name] = item
    for path, (f, x0, x) in free.items():
        section, key, *rest = path.split(".")
        text = f"{x:.6g} {f.unit}".strip() if f.unit else float(f"{x:.6g}")
        item = tomlkit.string(text) if isinstance(text, str) else tomlkit.item(text)
        how = (f"tuned by pashape tune from {_fmt_si(x0, f.unit)} within {_fmt_si(f.lo, f.unit)}..{_fmt_si(f.hi, f.unit)} "
               f"toward {', '.join(sorted({g.text for g in result.problem.goals}))}")
        item.comment(how)
        if rest:
            doc[section][key][rest[0]] = item
        else:
            doc[section][key] = item
    return tomlkit.dumps(doc)


def _fmt_si(x: float, unit: str) -> str:
    return format_quantity(x, unit) if unit else f"{x:.6g}"


def confirm_tuned(design, outdir: Path) -> tuple[dict, dict]:
    """Run the tuned design in ngspice with its full outputs in ``outdir``; (metrics, files)."""
    from netgen.pipeline import run_design

    res = run_design(design, outdir, plots=True)
    metrics = dict(res.metrics)
    metrics.update(ngspice_turn_on(res))
    return metrics, {k: str(Path(v).name) for k, v in res.files.items()}


def write_tuning(result: TuneResult, out: Path, source_text: str, *, confirm: bool = True) -> dict:
    """Write every output of a tuning into ``out`` (see the module docstring); returns a summary
    with ``files``, the ngspice metrics (``confirm``) and the target check (``targets``)."""
    from netgen.pipeline import atomic_folder

    from .closure_plots import plot_history

    final_design = result.problem.design_at(result.x)
    with atomic_folder(Path(out)) as tmp:
        toml_text = tuned_toml(source_text, result)
        (tmp / "tuned.toml").write_text(toml_text, encoding="utf-8")
        full, run_files = ({}, {})
        if confirm:
            full, run_files = confirm_tuned(final_design, tmp / "confirm")
        hist = result.history
        traces = {g.metric: np.array([np.nan if h["metrics"].get(g.metric) is None else h["metrics"][g.metric]
                                      for h in hist], dtype=float)
                  for g in result.problem.goals}
        plot_history(tmp / "objective.png", np.array([h["j"] for h in hist]), np.array([h["best"] for h in hist]),
                     [h["stage"] for h in hist], traces)
        summary = _summary(result, full if confirm else None)
        (tmp / "tune.json").write_text(json.dumps(_jsonable(summary), indent=1, sort_keys=True) + "\n", encoding="utf-8")
        (tmp / "report.html").write_text(_html(result, summary, run_files), encoding="utf-8")
    summary["files"] = {k: str(Path(out) / k) for k in ("tuned.toml", "tune.json", "objective.png", "report.html")}
    if confirm:
        summary["files"]["confirm"] = str(Path(out) / "confirm")
    return summary


def _summary(result: TuneResult, full: dict | None) -> dict:
    p = result.problem
    goals = p.goals
    targets = []
    for g in goals:
        if g.op in ("max", "min"):
            continue
        b = g.bound(p.vdd_v)
        fast = metric_value(result.metrics, g.metric)
        sim = metric_value(full, g.metric) if full else None
        targets.append({"goal": g.text, "metric": g.metric, "op": g.op, "value": b, "estimate": fast, "ngspice": sim,
                        "ngspice_rel": (sim / b - 1.0) if (sim is not None and b) else None})
    return {
        "method": result.method, "seconds": result.seconds, "evaluations": len(result.history),
        "evaluations_by_engine": engine_counts(result.history),
        "free": [{"path": f.path, "low": f.lo, "high": f.hi, "unit": f.unit, "start": x0, "tuned": x,
                  "log_scale": f.log} for f, x0, x in zip(p.free, result.x0, result.x)],
        "goals": [g.text for g in goals], "objective_start": result.j0, "objective_end": result.j,
        "before": _pick(result.metrics0, goals), "after": _pick(result.metrics, goals),
        "ngspice": _pick(full, goals) if full else None,
        "confirm": disagreement(result.metrics or {}, full) if full else None,
        "targets": targets,
        "history": [{k: h.get(k) for k in ("n", "stage", "x", "j", "best", "error", "engine", "metrics")}
                    for h in result.history],
    }


def _pick(metrics: dict | None, goals) -> dict:
    if not metrics:
        return {}
    keys = list(TABLE_METRICS) + [g.metric for g in goals if g.metric not in TABLE_METRICS]
    out = {k: metric_value(metrics, k) for k in keys}
    out["engine"] = metrics.get("engine")
    return out


def _jsonable(obj):
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, np.integer)):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def _cell(x) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.5g}"
    return html.escape(str(x))


def _pct(x) -> str:
    return "-" if x is None else f"{100 * x:+.2f} %"


def _html(result: TuneResult, s: dict, run_files: dict) -> str:
    """report.html: what was free, the goals, the before/after table, the history, the cautions."""
    from netgen.results import caution_texts

    p = result.problem
    rows = []
    for k in s["after"]:
        if k == "engine":
            continue
        rows.append(f"<tr><td class=l>{html.escape(k)}</td><td>{_cell(s['before'].get(k))}</td>"
                    f"<td>{_cell(s['after'].get(k))}</td><td>{_cell((s['ngspice'] or {}).get(k))}</td></tr>")
    free = "".join(f"<tr><td class=l>{html.escape(f['path'])}</td><td>{_fmt_si(f['start'], f['unit'])}</td>"
                   f"<td>{_fmt_si(f['tuned'], f['unit'])}</td><td>{_fmt_si(f['low'], f['unit'])} .. "
                   f"{_fmt_si(f['high'], f['unit'])}{' (log)' if f['log_scale'] else ''}</td></tr>" for f in s["free"])
    targ = "".join(f"<tr><td class=l>{html.escape(t['goal'])}</td><td>{_cell(t['value'])}</td><td>{_cell(t['estimate'])}</td>"
                   f"<td>{_cell(t['ngspice'])}</td><td>{_pct(t['ngspice_rel'])}</td></tr>"
                   for t in s["targets"])
    conf = s.get("confirm")
    conf_text = ("no ngspice confirmation (--no-confirm)" if not conf else
                 f"ngspice against the estimate at the tuned point: Pout {100 * (conf['pout_rel'] or 0):+.3f} %, "
                 f"efficiency {100 * (conf['efficiency_rel'] or 0):+.3f} %"
                 + (" (more than 0.2 % apart: trust the ngspice column)" if conf["flagged"] else ""))
    link = f" <a href='confirm/{run_files['report']}'>full ngspice report</a>" if run_files.get("report") else ""
    cautions = "".join(f"<li>{html.escape(c)}</li>" for c in caution_texts())
    name = html.escape(str((p.base_doc.get("design") or {}).get("name", "design")))
    return f"""<!doctype html><html><head><meta charset=utf-8><title>tuning {name}</title>
<style>body{{font-family:Georgia,serif;background:#fbf8f1;color:#2b2d33;max-width:980px;margin:0 auto;padding:18px}}
h1{{color:#0f5c63;font-size:22px}}h2{{color:#74395f;font-size:16px;border-bottom:1px solid #d8d3c7}}
table{{border-collapse:collapse;font-size:13px}}td,th{{border:1px solid #d8d3c7;padding:3px 9px;text-align:right}}
td.l,th.l{{text-align:left}}th{{background:#efe9dc}}.note{{color:#56606b;font-size:13px}}
.caution{{border-left:4px solid #c4862a;background:#fff3dc;padding:6px 12px}}</style></head><body>
<h1>Tuning of {name}</h1>
<p class=note>{html.escape(s['method'])}; {s['evaluations']} evaluations in {s['seconds']:.1f} s;
objective {s['objective_start']:.4g} -> {s['objective_end']:.4g}.</p>
<h2>Free values</h2><table><tr><th class=l>key</th><th>start</th><th>tuned</th><th>range</th></tr>{free}</table>
<h2>Goals</h2><table><tr><th class=l>goal</th><th>value</th><th>estimate</th><th>ngspice</th><th>ngspice vs goal</th></tr>{targ}</table>
<p class=note>{html.escape(conf_text)}.{link}</p>
<h2>Before and after</h2><table><tr><th class=l>metric</th><th>before (estimate)</th><th>after (estimate)</th>
<th>after (ngspice)</th></tr>{''.join(rows)}</table>
<h2>Objective history</h2><img src=objective.png alt="objective history" style="max-width:100%">
<h2>Cautions</h2><div class=caution><ul>{cautions}</ul></div>
</body></html>
"""
