"""Running a load-pull plan into a resumable store, its CSV, its Smith charts and its summary.

Every point is committed to ``OUT/loadpull.sqlite`` (:class:`netgen.studies.store.SweepStore`)
as it finishes; running the same study again skips stored points. The CSV is the sweep CSV
(:func:`netgen.studies.store.export_csv`): one column per axis (Z_n and Gamma_n of every swept
harmonic) and the key metrics.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np

from .loadpull import LoadPullPlan
from .store import SweepStore, export_csv

__all__ = ["LOADPULL_STORE", "confirm_study", "loadpull_outputs", "run_loadpull"]

LOADPULL_STORE = "loadpull.sqlite"
#: slices of the other axes drawn as Smith charts of Z1 at most
MAX_CHARTS = 4


def run_loadpull(plan: LoadPullPlan, out: Path, *, design_toml: str = "", progress=None) -> dict:
    """Solve every point not yet stored; returns ``ran``, ``skipped``, ``failed`` and the store path."""
    out = Path(out)
    counts = {"ran": 0, "skipped": 0, "failed": 0}
    with SweepStore(out / LOADPULL_STORE) as store:
        sid = store.open_sweep("loadpull", design_toml, plan.spec(), plan.n_points, None)
        done = store.done_indices(sid)
        counts["skipped"] = len(done)
        for idx in range(plan.n_points):
            if idx in done:
                continue
            t0 = time.perf_counter()
            inputs = {"axes": plan.point(idx)["axes"], "set": {}, "sample": None}
            try:
                metrics, status, error = plan.run(idx), "ok", None
            except (ArithmeticError, np.linalg.LinAlgError) as exc:
                metrics, status, error = None, "failed", f"{type(exc).__name__}: {exc}"
                counts["failed"] += 1
            store.record(sid, idx, inputs, status, metrics, error, time.perf_counter() - t0)
            counts["ran"] += 1
            if progress is not None:
                progress(counts["ran"] + counts["skipped"], plan.n_points)
    counts["store"] = str(out / LOADPULL_STORE)
    return counts


def confirm_study(plan: LoadPullPlan, out: Path, n_random: int = 0, *, seed: int = 1, optimum: bool = True,
                  progress=None) -> dict:
    """Confirm the efficiency optimum (``optimum``) and ``n_random`` other stored points drawn with
    ``numpy.random.default_rng(seed)`` in ngspice (:func:`netgen.studies.loadpull_confirm.confirm_loadpull`;
    points confirmed before are not run again). Returns the summary of every confirmed point in
    the store (:func:`_stored_confirmation`)."""
    from .loadpull_confirm import confirm_loadpull

    out = Path(out)
    with SweepStore(out / LOADPULL_STORE) as store:
        sid = store.sweep_info(None)["id"]
        rows = list(store.rows(sid))
        eligible = [r["idx"] for r in rows if r["status"] == "ok" and r["metrics"] and "confirmation" not in r["metrics"]]
        chosen: set[int] = set()
        eff = np.array([_value(r, "drain_efficiency") for r in rows])
        if optimum and np.isfinite(eff).any():
            chosen.add(rows[int(np.nanargmax(eff))]["idx"])
        pool = [i for i in eligible if i not in chosen]
        k = min(max(int(n_random), 0), len(pool))
        if k:
            chosen |= {int(i) for i in np.random.default_rng(int(seed)).choice(pool, size=k, replace=False)}
        confirm_loadpull(plan, store, sid, sorted(chosen & set(eligible)), progress=progress)
    return _stored_confirmation(out)


def _stored_confirmation(out: Path) -> dict | None:
    """:func:`netgen.studies.fast.summarize_confirmation` of every point of the store with a
    confirmation (None when there is none)."""
    from .fast import summarize_confirmation

    found = [{**r["metrics"]["confirmation"], "idx": r["idx"]} for r in _rows(out)
             if r["metrics"] and isinstance(r["metrics"].get("confirmation"), dict)]
    return summarize_confirmation(found) if found else None


def _rows(out: Path) -> list[dict]:
    with SweepStore(Path(out) / LOADPULL_STORE) as store:
        sid = store.sweep_info(None)["id"]
        return list(store.rows(sid))


def _value(row: dict, key: str) -> float:
    m = row["metrics"]
    if row["status"] != "ok" or not m or m.get(key) is None:
        return float("nan")
    return float(m[key])


def loadpull_outputs(plan: LoadPullPlan, out: Path, *, plots: bool = True) -> dict:
    """CSV, summary.json (the efficiency optimum and each slice's) and the figures, from the store."""
    from netgen.fileio import atomic_write_text

    out = Path(out)
    rows = _rows(out)
    csv_path = export_csv(out / LOADPULL_STORE, out / "loadpull.csv")
    eff = np.array([_value(r, "drain_efficiency") for r in rows])
    best_row = rows[int(np.nanargmax(eff))] if np.isfinite(eff).any() else None
    summary = {"points": plan.n_points, "stored": len(rows), "failed": sum(r["status"] == "failed" for r in rows),
               "z0_ohm": plan.z0_ohm, "device": plan.spec()["device"], "terminations": plan.spec()["terms"],
               "rest": plan.rest_text,
               "best": None if best_row is None else {"idx": best_row["idx"], **best_row["inputs"]["axes"],
                                                      **{k: best_row["metrics"][k] for k in
                                                         ("drain_efficiency", "pout_w", "pdc_w", "peak_vd_v")},
                                                      "engine": best_row["metrics"].get("engine"),
                                                      "confirmation": best_row["metrics"].get("confirmation")},
               "confirmation": _stored_confirmation(out)}
    files = {"csv": str(csv_path)}
    if plots and rows:
        files.update(_figures(plan, rows, out, best_row))
    atomic_write_text(out / "summary.json", json.dumps(summary, indent=1, sort_keys=True) + "\n")
    files["summary"] = str(out / "summary.json")
    summary["files"] = files
    return summary


def _figures(plan: LoadPullPlan, rows: list[dict], out: Path, best_row) -> dict:
    from .closure_plots import plot_ring, plot_smith_contours

    files = {}
    shape = plan.shape
    by_idx = {r["idx"]: r for r in rows}
    best_js = np.unravel_index(best_row["idx"], shape) if best_row else (0,) * len(shape)
    kinds = [t.kind for t in plan.terms]
    for axis, term in enumerate(plan.terms):
        others = [k for k in range(len(shape)) if k != axis]
        # the slice through the optimum along this axis (other axes at the optimum's values)
        idxs = []
        for j in range(shape[axis]):
            js = list(best_js)
            js[axis] = j
            idxs.append(int(np.ravel_multi_index(js, shape)))
        sel = [by_idx[i] for i in idxs if i in by_idx]
        if not sel or term.kind == "fixed":
            continue
        n = term.harmonic
        gam = np.array([r["inputs"]["axes"][f"gamma{n}_mag"] * np.exp(1j * np.radians(r["inputs"]["axes"][f"gamma{n}_deg"]))
                        for r in sel])
        fields = {"drain efficiency (%)": np.array([100 * _value(r, "drain_efficiency") for r in sel]),
                  "P1 at the drain (W)": np.array([_value(r, "pout_w") for r in sel]),
                  "peak drain voltage (V)": np.array([_value(r, "peak_vd_v") for r in sel])}
        fixed = ", ".join(f"Z{plan.terms[k].harmonic}: {plan.terms[k].text}" for k in others if kinds[k] == "fixed")
        where = "; other swept harmonics at the efficiency optimum" if any(kinds[k] != "fixed" for k in others) else ""
        title = f"load-pull over Z at {n} f0 (ideal terminations at the intrinsic plane{'; ' + fixed if fixed else ''}{where})"
        if term.kind == "grid":
            best = None if best_row is None else gam[int(np.nanargmax(fields["drain efficiency (%)"]))]
            files[f"smith_z{n}"] = str(plot_smith_contours(out / f"smith_z{n}.png", gam, fields, plan.z0_ohm, title, best))
        else:
            files[f"ring_z{n}"] = str(plot_ring(out / f"ring_z{n}.png", np.degrees(np.angle(gam)), fields, title,
                                                f"phase of Gamma at {n} f0 (deg), |Gamma| = {abs(gam[0]):.3g}"))
    return files
