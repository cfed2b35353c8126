"""Plots of a sweep, drawn from the data read back from the store (matplotlib, Agg).

The ``*_data`` functions turn stored rows into arrays; the ``plot_*`` functions
draw those arrays, so a test can compare what is drawn with the database.
Failed and not-settled points are drawn as gaps (NaN), never as values.
"""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .grammar import Spec, metric_value, point_passes, yield_interval  # noqa: E402

__all__ = [
    "LINE_METRICS",
    "axis_names",
    "line_data",
    "grid_data",
    "sample_data",
    "circle_data",
    "CIRCLE_STRESS",
    "plot_line",
    "plot_grid",
    "plot_histograms",
    "plot_load_circle",
    "plot_sweep",
    "plot_drive",
]

#: metric -> (label, display scale)
LINE_METRICS = {
    "drain_efficiency": ("drain efficiency (%)", 100.0),
    "pout_w": ("output power (W)", 1.0),
    "peak_vd_over_vdd": ("peak drain voltage / Vdd", 1.0),
    "h2_dbc": ("2nd harmonic in load (dBc)", 1.0),
    "h3_dbc": ("3rd harmonic in load (dBc)", 1.0),
}

#: metric -> the smallest span of the value axis drawn, in display units. A metric that does
#: not move over the sweep (efficiency of a linear network against supply voltage, which
#: scales every voltage and current alike) is drawn as the flat line it is, not with an axis
#: magnified to show the simulator's last digits.
MIN_SPAN = {
    "drain_efficiency": 1.0,  # percentage points
    "peak_vd_over_vdd": 0.02,
    "h2_dbc": 1.0,  # dB
    "h3_dbc": 1.0,
}
MIN_SPAN_REL = 0.02  # other metrics: 2 % of their magnitude


def _value_limits(values: np.ndarray, metric: str) -> tuple[float, float] | None:
    """(low, high) for a value axis that would span less than the metric's smallest span, else None."""
    v = values[np.isfinite(values)]
    if v.size == 0:
        return None
    lo, hi = float(v.min()), float(v.max())
    span = MIN_SPAN.get(metric, MIN_SPAN_REL * max(abs(lo), abs(hi)))
    if span <= 0 or hi - lo >= span:
        return None
    mid = 0.5 * (lo + hi)
    return mid - span / 2, mid + span / 2


def _value(row: dict, metric: str) -> float:
    """The metric of a stored row, NaN unless the point ran and settled."""
    if row["status"] != "ok":
        return math.nan
    v = metric_value(row["metrics"], metric)
    return math.nan if v is None else v


def axis_names(rows: Sequence[dict]) -> list[str]:
    """Axis names in first-seen order."""
    names: list[str] = []
    for r in rows:
        for k in r["inputs"].get("axes", {}):
            if k not in names:
                names.append(k)
    return names


def line_data(rows: Sequence[dict], axis: str, metric: str) -> tuple[np.ndarray, np.ndarray]:
    """(x, y) sorted by x: the axis value and the metric of each stored point."""
    pts = sorted((r["inputs"]["axes"][axis], _value(r, metric)) for r in rows if axis in r["inputs"].get("axes", {}))
    return np.array([p[0] for p in pts], dtype=float), np.array([p[1] for p in pts], dtype=float)


def grid_data(rows: Sequence[dict], x_axis: str, y_axis: str, metric: str):
    """(xs, ys, Z) with Z[j, i] the metric at ys[j], xs[i]; NaN where no settled point is stored."""
    xs = sorted({r["inputs"]["axes"][x_axis] for r in rows})
    ys = sorted({r["inputs"]["axes"][y_axis] for r in rows})
    z = np.full((len(ys), len(xs)), np.nan)
    xi = {v: i for i, v in enumerate(xs)}
    yi = {v: j for j, v in enumerate(ys)}
    for r in rows:
        a = r["inputs"]["axes"]
        z[yi[a[y_axis]], xi[a[x_axis]]] = _value(r, metric)
    return np.array(xs, dtype=float), np.array(ys, dtype=float), z


def sample_data(rows: Sequence[dict], metric: str) -> np.ndarray:
    """The metric over the stored points that ran and settled."""
    v = np.array([_value(r, metric) for r in rows], dtype=float)
    return v[np.isfinite(v)]


#: the device stress figures of a load circle (metrics.json keys), drawn in its stress panels
CIRCLE_STRESS = ("peak_vd_v", "min_vd_v", "peak_id_a", "device_dissipation_w")


def circle_data(rows: Sequence[dict], rl_ohm: float) -> dict:
    """Reflection coefficients of the load-circle points, their load phase (deg, NaN when the
    row has none), efficiency, power and the device stress figures of ``CIRCLE_STRESS``; ``group``
    (each point's values of the other --vary axes, as text) and ``group_axes`` (their names).

    Gamma = (Z - RL)/(Z + RL) with Z = design.load + j design.load_x (Pozar).
    """
    from netgen.design import parse_quantity

    keys = ("drain_efficiency", "pout_w", *CIRCLE_STRESS)
    g, phase, group, names, vals = [], [], [], set(), {k: [] for k in keys}
    for r in rows:
        s = r["inputs"].get("set", {})
        if "design.load" not in s:
            continue
        z = complex(parse_quantity(s["design.load"], "ohm", "design.load"),
                    parse_quantity(s.get("design.load_x", "0 ohm"), "ohm", "design.load_x"))
        g.append((z - rl_ohm) / (z + rl_ohm))
        axes = r["inputs"].get("axes", {})
        phase.append(float(axes.get("load_phase_deg", math.nan)))
        others = sorted((k, v) for k, v in axes.items() if k != "load_phase_deg")
        group.append(", ".join(f"{k}={_axis_text(v)}" for k, v in others))
        names.update(k for k, _ in others)
        for k in keys:
            vals[k].append(_value(r, k))
    return {"gamma": np.array(g, dtype=complex), "phase_deg": np.array(phase, dtype=float), "group": group,
            "group_axes": sorted(names),
            **{k: np.array(v, dtype=float) for k, v in vals.items()}}


def _best_at_each_load(gamma: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct loads (to 1e-9 in Gamma) and the highest value at each (NaN where none ran)."""
    keys = np.round(gamma.real, 9) + 1j * np.round(gamma.imag, 9)
    uniq, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    best = np.full(len(uniq), np.nan)
    for k in range(len(uniq)):
        v = values[inverse == k]
        if np.isfinite(v).any():
            best[k] = np.nanmax(v)
    return gamma[first], best


def _axis_text(value) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


#: most groups (values of the other --vary axes) the stress panels draw as lines of their own
MAX_CIRCLE_GROUPS = 6


# ---------------------------------------------------------------- drawing

def _save(fig, path: Path) -> Path:
    """The figure as PNG at ``path``, written atomically with the user's umask (netgen.fileio)."""
    from netgen.fileio import atomic_write_bytes

    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=110)
    finally:
        plt.close(fig)
    return atomic_write_bytes(Path(path), buf.getvalue())


def _axis_label(name: str, unit: str) -> str:
    return f"{name} ({unit})" if unit else name


def plot_line(rows: Sequence[dict], axis: str, path: Path, unit: str = "",
              metrics: Sequence[str] = tuple(LINE_METRICS)) -> Path:
    """One panel per metric against the swept axis."""
    fig, axes = plt.subplots(len(metrics), 1, figsize=(6.4, 1.9 * len(metrics) + 0.6), sharex=True, squeeze=False)
    for ax, metric in zip(axes[:, 0], metrics):
        x, y = line_data(rows, axis, metric)
        label, scale = LINE_METRICS.get(metric, (metric, 1.0))
        ax.plot(x, y * scale, "o-", color="#1f4e79", ms=4, lw=1.2)
        lim = _value_limits(y * scale, metric)
        if lim is not None:
            ax.set_ylim(*lim)
        ax.ticklabel_format(axis="y", useOffset=False)
        ax.set_ylabel(label, fontsize=8)
        ax.grid(True, color="#dddddd", lw=0.6)
    axes[-1, 0].set_xlabel(_axis_label(axis, unit))
    fig.suptitle(f"sweep of {axis}", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_grid(rows: Sequence[dict], x_axis: str, y_axis: str, metric: str, path: Path,
              x_unit: str = "", y_unit: str = "") -> Path:
    """Heat map with contours of one metric over two swept axes."""
    xs, ys, z = grid_data(rows, x_axis, y_axis, metric)
    label, scale = LINE_METRICS.get(metric, (metric, 1.0))
    fig, ax = plt.subplots(figsize=(6.4, 4.8))
    lim = _value_limits(z * scale, metric)
    vmin, vmax = lim if lim is not None else (None, None)
    mesh = ax.pcolormesh(xs, ys, z * scale, shading="nearest", cmap="viridis", vmin=vmin, vmax=vmax)
    if lim is None and len(xs) > 1 and len(ys) > 1 and np.isfinite(z).sum() >= 4:
        cs = ax.contour(xs, ys, z * scale, colors="white", linewidths=0.7)
        ax.clabel(cs, fontsize=7)
    fig.colorbar(mesh, ax=ax, label=label)
    ax.set_xlabel(_axis_label(x_axis, x_unit))
    ax.set_ylabel(_axis_label(y_axis, y_unit))
    ax.set_title(f"{label} over {x_axis} and {y_axis}", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_histograms(rows: Sequence[dict], specs: Sequence[Spec], path: Path,
                    metrics: Sequence[str] | None = None) -> Path:
    """Histogram of each spec'd metric (or the default metrics) with its limit; the yield in the title."""
    names = list(dict.fromkeys([s.metric for s in specs] or list(metrics or ("drain_efficiency", "pout_w"))))
    fig, axes = plt.subplots(len(names), 1, figsize=(6.4, 2.2 * len(names) + 0.8), squeeze=False)
    for ax, metric in zip(axes[:, 0], names):
        v = sample_data(rows, metric)
        label, scale = LINE_METRICS.get(metric, (metric, 1.0))
        if v.size:
            ax.hist(v * scale, bins=max(5, min(40, int(np.sqrt(v.size)) + 1)), color="#7a9cc6", edgecolor="#1f4e79")
        for s in specs:
            if s.metric == metric:
                ax.axvline(s.limit * scale, color="#b22222", lw=1.5, ls="--")
                ax.text(s.limit * scale, ax.get_ylim()[1] * 0.9, f" {s.op} {s.limit * scale:g}", color="#b22222", fontsize=8)
        ax.set_xlabel(label, fontsize=8)
        ax.set_ylabel("points", fontsize=8)
    results = [r for r in rows if r["status"] != "lost"]  # a point lost to the machinery has no result
    n = len(results)
    lost = f", {len(rows) - n} lost" if len(rows) > n else ""
    if specs and n:
        k = sum(point_passes(r["status"], r["metrics"], specs) for r in results)
        lo, hi = yield_interval(k, n)
        title = (f"yield {100 * k / n:.1f}% ({k}/{n}{lost}), 95% interval {100 * lo:.1f}..{100 * hi:.1f}% "
                 "(Clopper-Pearson)")
    else:
        title = f"{n} points{lost}"
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return _save(fig, path)


def _worst(data: dict, key: str, pick, unit: str) -> str:
    """'<value> <unit> at <phase>' of the worst point of a stress figure (``pick``: np.nanargmax / nanargmin)."""
    v = data[key]
    if not np.isfinite(v).any():
        return "-"
    i = int(pick(v))
    where = f" at {data['phase_deg'][i]:g} deg" if np.isfinite(data["phase_deg"][i]) else ""
    group = data["group"][i] if data.get("group") else ""
    return f"{v[i]:.3g} {unit}{where}" + (f" ({group})" if group else "")


def _stress_panels(ax_v, ax_i, data: dict, vdd_v: float | None) -> None:
    """The device stress at each load against its phase: drain voltage extremes (V) on the left,
    peak drain current (A) and device dissipation (W) on the right; the worst of each in the title.

    With other --vary axes beside the load circle, each of their combinations (a group) is a line
    of its own (its values in the legend; solid, dashed, dotted ... in turn); above
    :data:`MAX_CIRCLE_GROUPS` groups the points are drawn unjoined.
    """
    x = data["phase_deg"]
    if not np.isfinite(x).all():
        x = np.arange(len(x), dtype=float)  # no phase axis: by point
        ax_v.set_xlabel("point")
    else:
        ax_v.set_xlabel("load phase (deg)")
    member = np.array(data.get("group") or [""] * len(x), dtype=object)
    groups = list(dict.fromkeys(member))
    joined = len(groups) <= MAX_CIRCLE_GROUPS
    styles = ("-", "--", ":", "-.", (0, (5, 1, 1, 1)), (0, (1, 3)))

    def draw(ax, key, marker, color, label, style="-"):
        for k, grp in enumerate(groups):
            pick = np.flatnonzero(member == grp)
            order = pick[np.argsort(x[pick], kind="stable")]
            ls = (style if len(groups) == 1 else styles[k % len(styles)]) if joined else "none"
            name = label if len(groups) == 1 else (f"{label}, {grp}" if joined else (label if k == 0 else None))
            ax.plot(x[order], data[key][order], marker=marker, ls=ls, color=color, ms=4, lw=1.0, label=name)

    draw(ax_v, "peak_vd_v", "^", "#b22222", "peak drain voltage")
    draw(ax_v, "min_vd_v", "v", "#1f4e79", "min drain voltage")
    ax_v.axhline(0.0, color="#888888", lw=0.7)
    if vdd_v and "design.vdd" not in data.get("group_axes", ()):
        ax_v.axhline(vdd_v, color="#888888", lw=0.7, ls=":", label="Vdd")  # one Vdd (not an axis)
    ax_v.set_ylabel("drain voltage (V)", fontsize=8)
    ax_v.legend(fontsize=7, loc="best")
    ax_v.set_title(f"drain voltage: peak {_worst(data, 'peak_vd_v', np.nanargmax, 'V')},\n"
                   f"min {_worst(data, 'min_vd_v', np.nanargmin, 'V')}", fontsize=8)
    if len(groups) > 1 and not joined:
        ax_v.text(0.01, 0.01, f"{len(groups)} combinations of the other axes at each load, unjoined",
                  transform=ax_v.transAxes, fontsize=7, color="#555555")
    draw(ax_i, "peak_id_a", "o", "#7a3b00", "peak drain current")
    ax_i.set_ylabel("peak drain current (A)", fontsize=8, color="#7a3b00")
    ax_i.set_xlabel(ax_v.get_xlabel())
    ax_w = ax_i.twinx()
    draw(ax_w, "device_dissipation_w", "s", "#2e7d32", "device dissipation", "--")
    ax_w.set_ylabel("device dissipation (W)", fontsize=8, color="#2e7d32")
    ax_i.set_title(f"peak current {_worst(data, 'peak_id_a', np.nanargmax, 'A')},\n"
                   f"dissipation {_worst(data, 'device_dissipation_w', np.nanargmax, 'W')}", fontsize=8)
    if len(groups) > 1 and joined:  # which line style is which combination, as on the left
        proxies = [ax_w.plot([], [], color="#555555", lw=1.0, ls=styles[k % len(styles)], label=grp)[0]
                   for k, grp in enumerate(groups)]
        ax_w.legend(handles=proxies, fontsize=7, loc="best", title="o current, s dissipation", title_fontsize=7)
    for ax in (ax_v, ax_i):
        ax.grid(True, color="#dddddd", lw=0.6)


def plot_load_circle(rows: Sequence[dict], rl_ohm: float, path: Path, vdd_v: float | None = None) -> Path:
    """Efficiency and output power at each load, on a reflection-coefficient plane with a
    Smith-like grid, and below them the device stress at each load (drain voltage extremes,
    peak drain current, device dissipation: what a mismatch does to the device)."""
    data = circle_data(rows, rl_ohm)
    fig, grid = plt.subplots(2, 2, figsize=(10, 8.6), gridspec_kw={"height_ratios": [1.25, 1.0]})
    axes = grid[0]
    t = np.linspace(0, 2 * np.pi, 361)
    for ax, key in zip(axes, ("drain_efficiency", "pout_w")):
        ax.plot(np.cos(t), np.sin(t), color="#888888", lw=0.8)
        for r in (0.2, 0.5, 1.0, 2.0, 5.0):  # constant-resistance circles, centre r/(1+r), radius 1/(1+r)
            ax.plot(r / (1 + r) + np.cos(t) / (1 + r), np.sin(t) / (1 + r), color="#dddddd", lw=0.6)
        for x in (0.5, 1.0, 2.0):  # constant-reactance arcs, centre (1, 1/x), radius 1/x, inside |G|<=1
            for sgn in (1, -1):
                c = 1 + 1j * sgn / x
                arc = c + np.exp(1j * t) / x
                arc[np.abs(arc) > 1.0001] = np.nan
                ax.plot(arc.real, arc.imag, "-", color="#dddddd", lw=0.6)
        ax.axhline(0, color="#dddddd", lw=0.6)
        label, scale = LINE_METRICS[key]
        g, vals = _best_at_each_load(data["gamma"], data[key])
        sc = ax.scatter(g.real, g.imag, c=vals * scale, cmap="viridis", s=40, edgecolors="k", linewidths=0.4)
        fig.colorbar(sc, ax=ax, label=label, shrink=0.8)
        n_groups = len(set(data["group"]))
        if n_groups > 1:  # the other axes' points sit on the same loads: the best of them is drawn
            label = f"{label}: the highest of {n_groups} points at each load"
        ax.set_aspect("equal")
        ax.set_xlim(-1.05, 1.05)
        ax.set_ylim(-1.05, 1.05)
        ax.set_xlabel("Re Γ")
        ax.set_ylabel("Im Γ")
        ax.set_title(label, fontsize=9)
    _stress_panels(grid[1][0], grid[1][1], data, vdd_v)
    fig.suptitle(f"load circle around {rl_ohm:g} ohm", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_drive(rows: Sequence[dict], path: Path) -> Path:
    """A drive sweep (axis drive.pin, dBm): Pout (dBm), transducer gain (dB, AM-AM) with the AM-PM
    (the output phase change from the lowest drive, degrees, on its own axis), drain efficiency and
    PAE (%) against the available input power, with P1dB and P3dB marked where reached
    (netgen.studies.compression)."""
    from .compression import DRIVE_AXIS, drive_compression

    x, pout = line_data(rows, DRIVE_AXIS, "pout_w")
    pout_dbm = 10.0 * np.log10(np.where(pout > 0, pout, np.nan) / 1e-3)
    _, eff = line_data(rows, DRIVE_AXIS, "drain_efficiency")
    _, pae = line_data(rows, DRIVE_AXIS, "pae")
    comp = drive_compression(rows) or {}
    fig, axes = plt.subplots(3, 1, figsize=(6.4, 6.6), sharex=True)
    axes[0].plot(x, pout_dbm, "o-", color="#1f4e79", ms=4, lw=1.2)
    axes[0].set_ylabel("output power (dBm)", fontsize=8)
    axes[1].plot(x, pout_dbm - x, "o-", color="#7a3b00", ms=4, lw=1.2, label="gain (AM-AM)")
    axes[1].set_ylabel("transducer gain (dB)", fontsize=8)
    _, phase = line_data(rows, DRIVE_AXIS, "am_pm_deg")
    ok = np.isfinite(phase)
    if ok.any():
        # AM-PM: the output's phase against the incident wave, relative to the lowest drive (unwrapped)
        unwrapped = np.full_like(phase, np.nan)
        unwrapped[ok] = np.degrees(np.unwrap(np.radians(phase[ok])))
        twin = axes[1].twinx()
        twin.plot(x, unwrapped - unwrapped[ok][0], "d:", color="#6a1b9a", ms=4, lw=1.2, label="phase (AM-PM)")
        twin.set_ylabel("AM-PM, phase change (deg)", fontsize=8, color="#6a1b9a")
        twin.tick_params(axis="y", labelsize=7, colors="#6a1b9a")
        lines = axes[1].get_lines() + twin.get_lines()
        axes[1].legend(lines, [ln.get_label() for ln in lines], fontsize=7, loc="lower left")
    axes[2].plot(x, eff * 100.0, "o-", color="#1f4e79", ms=4, lw=1.2, label="drain efficiency")
    axes[2].plot(x, pae * 100.0, "s--", color="#2e7d32", ms=4, lw=1.2, label="PAE")
    axes[2].set_ylabel("efficiency (%)", fontsize=8)
    axes[2].legend(fontsize=7, loc="upper left")
    for key, label, style, dy in (("p1db", "P1dB", ":", -12), ("p3db", "P3dB", "-.", -24)):
        c = comp.get(key)
        if not c:
            continue
        for ax in axes:
            ax.axvline(c["pin_dbm"], color="#888888", ls=style, lw=1.0)
        axes[0].annotate(f"{label} {c['pout_dbm']:.1f} dBm", (c["pin_dbm"], c["pout_dbm"]), fontsize=7,
                         xytext=(4, dy), textcoords="offset points")
    for ax in axes:
        ax.grid(True, color="#dddddd", lw=0.6)
    axes[-1].set_xlabel("available input power (dBm)")
    fig.suptitle("drive sweep", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_sweep(db, outdir, specs: Sequence[Spec] = ()) -> dict:
    """All plots that suit the stored sweep; returns {kind: path}.

    One numeric axis: metrics against it. Two: a heat map per line metric.
    A load circle: the reflection-coefficient plot. Monte Carlo (or any specs):
    the histograms.
    """
    import tomllib

    from .store import SweepStore

    outdir = Path(outdir)
    with SweepStore(db) as st:
        info = st.sweep_info()
        rows = list(st.rows(info["id"]))
    if not rows:
        return {}
    made: dict = {}
    spec = info["spec"]
    units = {v["name"]: v.get("unit", "") for v in spec["variations"]}
    numeric = [v["name"] for v in spec["variations"]
               if all(isinstance(a, (int, float)) for a in v["axis"]) and len(v["axis"]) > 1 and v["name"] != "load_phase_deg"]
    if "load_phase_deg" in units:
        from netgen.design import parse_quantity

        doc = tomllib.loads(info["design_toml"])
        rl = parse_quantity(doc.get("design", {}).get("load", "50 ohm"), "ohm", "design.load")
        vdd = doc.get("design", {}).get("vdd")
        vdd_v = parse_quantity(vdd, "V", "design.vdd") if vdd is not None else None
        made["load_circle"] = plot_load_circle(rows, rl, outdir / "load_circle.png", vdd_v)
        if len(units) == 1:
            made["line_load_phase_deg"] = plot_line(rows, "load_phase_deg", outdir / "sweep_load_phase.png", "deg")
    if numeric == ["drive.pin"] and not spec["samples"] and len(units) == 1:
        made["drive"] = plot_drive(rows, outdir / "drive_sweep.png")
    if len(numeric) == 1 and not spec["samples"] and len(units) == 1:
        made[f"line_{numeric[0]}"] = plot_line(rows, numeric[0], outdir / f"sweep_{numeric[0].replace('.', '_')}.png",
                                               units[numeric[0]])
    if len(numeric) == 2 and len(units) == 2 and not spec["samples"]:
        a, b = numeric
        for metric in ("drain_efficiency", "pout_w"):
            made[f"grid_{metric}"] = plot_grid(rows, a, b, metric, outdir / f"grid_{metric}.png", units[a], units[b])
    if spec["samples"] or specs:
        made["histograms"] = plot_histograms(rows, specs, outdir / "histograms.png")
    return made
