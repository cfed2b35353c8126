"""PNG figures of one run: waveforms, load line, harmonics, network impedance, Smith chart, settling.

Each ``plot_*`` function writes one PNG (atomically) and returns its path.
:func:`plot_all` makes every figure the data allows and returns {kind: path}.
Only this module imports matplotlib (Agg backend, no display needed).

Style: white background, light grid, one colour per quantity throughout
(drain voltage blue, drain current vermilion, load green, reference lines
grey), units in every axis label.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from netgen.fileio import atomic_write_bytes  # noqa: E402

__all__ = [
    "COLORS",
    "plot_waveforms",
    "plot_load_line",
    "plot_harmonics",
    "plot_network_impedance",
    "plot_smith",
    "plot_settling",
    "plot_all",
    "reactance_label",
]

#: Our palette: one colour per quantity in every figure.
COLORS = {
    "voltage": "#1d5f8a",
    "current": "#c4462b",
    "load": "#3d8a3a",
    "ref": "#7a7a7a",
    "accent": "#7b4fa0",
    "grid": "#e3e3e3",
}

_RC = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#444444",
    "axes.grid": True,
    "grid.color": COLORS["grid"],
    "grid.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "legend.frameon": False,
    "lines.linewidth": 1.6,
    "axes.axisbelow": True,
}


def _time_scale(f0_hz: float) -> tuple[float, str]:
    """Factor and unit label that show two periods of f0 in readable numbers."""
    period = 1.0 / f0_hz
    for factor, unit in ((1e12, "ps"), (1e9, "ns"), (1e6, "µs"), (1e3, "ms")):
        if period * factor < 1000:
            return factor, unit
    return 1.0, "s"


def _freq_scale(f_hz: float) -> tuple[float, str]:
    for factor, unit in ((1e-9, "GHz"), (1e-6, "MHz"), (1e-3, "kHz")):
        if f_hz * factor >= 1:
            return factor, unit
    return 1.0, "Hz"


def _save(fig, path: str | Path) -> Path:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, facecolor="white")
    plt.close(fig)
    return atomic_write_bytes(Path(path), buf.getvalue())


def _title(metrics: dict | None, what: str) -> str:
    if not metrics:
        return what
    d = metrics.get("design", {})
    tag = "" if metrics.get("settled", True) else "  [NOT SETTLED]"
    return f"{what} - {d.get('name', '')} ({d.get('topology', '')}){tag}"


def _planes(wf) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(plane, voltage, current) for the intrinsic plane (generator node dint, switch current) and
    the package plane (drain terminal, drain current); the intrinsic plane first (results/planes.py)."""
    out = []
    if "dint" in wf.v and "switch" in wf.i:
        out.append(("intrinsic", np.asarray(wf.v["dint"]), np.asarray(wf.i["switch"])))
    out.append(("package", np.asarray(wf.v["drain"]), np.asarray(wf.i["drain"])))
    return out


def plot_waveforms(path, wf, vdd_v: float, metrics: dict | None = None) -> Path:
    """Voltage (V) and current (A) at the intrinsic plane (the generator inside Cout, solid) with the
    package plane (the drain terminal, dashed) beside it, over the stored periods; two panels sharing time."""
    with plt.rc_context(_RC):
        k, unit = _time_scale(wf.f0_hz)
        t = np.asarray(wf.t_s) * k
        fig, (ax_v, ax_i) = plt.subplots(2, 1, figsize=(9.5, 5.5), sharex=True)
        planes = _planes(wf)
        for j, (plane, v, i) in enumerate(planes):
            ls, lw = ("-", 1.6) if j == 0 else ("--", 1.0)
            ax_v.plot(t, v, color=COLORS["voltage"], ls=ls, lw=lw, label=f"voltage, {plane} plane")
            ax_i.plot(t, i, color=COLORS["current"] if j == 0 else COLORS["accent"], ls=ls, lw=lw,
                      label=f"current, {plane} plane")
        if "load" in wf.v:
            ax_v.plot(t, wf.v["load"], color=COLORS["load"], lw=1.0, alpha=0.8, label="load voltage")
        ax_v.axhline(vdd_v, color=COLORS["ref"], ls="--", lw=1.0, label="Vdd")
        ax_v.set_ylabel("voltage (V)")
        ax_v.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=9)
        ax_v.set_title(_title(metrics, f"Waveforms at the {planes[0][0]} plane"))
        ax_i.axhline(0.0, color=COLORS["ref"], lw=0.8)
        ax_i.set_ylabel("current (A)")
        ax_i.set_xlabel(f"time ({unit})")
        ax_i.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=9)
        fig.tight_layout()
        return _save(fig, path)


def plot_load_line(path, wf, vdd_v: float, ropt_ohm: float, metrics: dict | None = None) -> Path:
    """Dynamic load line: current (A) against voltage (V) at the intrinsic plane, with the package
    plane beside it, each with Vdd and the Ropt line.

    The reference line has slope -1/Ropt through the operating point
    (Vdd, Idc): the load line of the fundamental alone (common practice); it applies at the
    intrinsic plane, where the network is sized to present Ropt.
    """
    planes = _planes(wf)
    with plt.rc_context(_RC):
        fig, axes = plt.subplots(1, len(planes), figsize=(6.0 * len(planes), 5), squeeze=False)
        for ax, (plane, v, i) in zip(axes[0], planes):
            ax.plot(v, i, color=COLORS["voltage"], lw=1.2, label="i(v), simulated")
            ax.axvline(vdd_v, color=COLORS["ref"], ls="--", lw=1.0, label=f"Vdd = {vdd_v:g} V")
            if ropt_ohm and ropt_ohm > 0:
                idc = float(np.mean(i))
                vv = np.linspace(0.0, 2.0 * vdd_v, 50)
                ax.plot(vv, idc - (vv - vdd_v) / ropt_ohm, color=COLORS["current"], ls=":", lw=1.6,
                        label=f"slope -1/Ropt ({ropt_ohm:.4g} ohm) through (Vdd, Idc)")
                ax.plot([vdd_v], [idc], "s", color=COLORS["current"], ms=6)
            ax.axhline(0.0, color=COLORS["ref"], lw=0.8)
            ax.set_xlabel(f"voltage, {plane} plane (V)")
            ax.set_ylabel(f"current, {plane} plane (A)")
            ax.set_title(_title(metrics, f"Dynamic load line, {plane} plane") if plane == planes[0][0]
                         else f"{plane} plane (drain terminal)", loc="left")
            ax.legend(loc="best", fontsize=8)
        fig.tight_layout()
        return _save(fig, path)


def plot_harmonics(path, metrics: dict) -> Path:
    """Bars per harmonic: drain voltage (V), drain current (A), load power (dBc)."""
    rows = metrics["harmonics"]
    n = np.array([r["n"] for r in rows])
    with plt.rc_context(_RC):
        fig, axes = plt.subplots(1, 3, figsize=(10, 3.6))
        vd = [r["vd_v"] or 0.0 for r in rows]
        idd = [r["id_a"] or 0.0 for r in rows]
        axes[0].bar(n, vd, color=COLORS["voltage"], width=0.6)
        axes[0].set_ylabel("drain voltage amplitude (V)")
        axes[1].bar(n, idd, color=COLORS["current"], width=0.6)
        axes[1].set_ylabel("drain current amplitude (A)")
        dbc = [r["pload_dbc"] for r in rows]
        floor = min([d for d in dbc if d is not None] + [-10.0]) - 10.0
        shown = [d if d is not None else floor for d in dbc]
        axes[2].bar(n, [s - floor for s in shown], bottom=floor, color=COLORS["load"], width=0.6)
        axes[2].set_ylabel("load power (dBc)")
        axes[2].set_ylim(floor, 5.0)
        for nn, d in zip(n, dbc):
            if d is None:
                axes[2].annotate("none", (nn, floor), xytext=(0, 3), textcoords="offset points", ha="center",
                                 fontsize=8, color=COLORS["ref"])
        for ax in axes:
            ax.set_xlabel("harmonic n")
            ax.set_xticks(n)
        axes[0].set_title(_title(metrics, "Harmonics"))
        fig.tight_layout()
        return _save(fig, path)


def plot_network_impedance(path, f_hz, z_ohm, f0_hz: float, metrics: dict | None = None) -> Path:
    """|Z(f)| of the passive network seen from the drain (log scale), n f0 markers, transient Z_n points.

    Parameters
    ----------
    f_hz, z_ohm : ndarray
        Frequencies (Hz) and complex impedance (ohm), e.g. from netgen.synthesis.network.z_drain.
    f0_hz : float
    metrics : dict, optional
        When given, the harmonic impedances measured from the transient are
        drawn as points on top of the curve.
    """
    f_hz = np.asarray(f_hz, dtype=float)
    z = np.asarray(z_ohm, dtype=complex)
    k, unit = _freq_scale(f0_hz)
    with plt.rc_context(_RC):
        fig, ax = plt.subplots(figsize=(8, 4.5))
        ax.semilogy(f_hz * k, np.maximum(np.abs(z), 1e-6), color=COLORS["voltage"], label="|Z(f)|, network analysis")
        n_max = int(f_hz.max() / f0_hz + 1e-9)
        for n in range(1, n_max + 1):
            ax.axvline(n * f0_hz * k, color=COLORS["ref"], lw=0.8, ls=":")
            ax.annotate(f"{n}f0", (n * f0_hz * k, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(2, -12), textcoords="offset points", fontsize=8, color=COLORS["ref"])
        mag = np.abs(z)
        mag = mag[np.isfinite(mag) & (mag > 0)]
        lo, hi = (mag.min() / 10, mag.max() * 10) if mag.size else (1e-3, 1e6)
        if metrics:
            pts = [(r["n"], abs(complex(r["z_re_ohm"], r["z_im_ohm"]))) for r in metrics["harmonics"]
                   if r["z_re_ohm"] is not None]
            inside = [(n, m) for n, m in pts if lo <= m <= hi]
            below = [(n, lo) for n, m in pts if m < lo]
            above = [(n, hi) for n, m in pts if m > hi]
            if inside:
                ax.plot([n * f0_hz * k for n, _ in inside], [m for _, m in inside], "o",
                        color=COLORS["current"], ms=7, label="Z_n from the transient")
            for group, marker, text in ((below, "v", "below the scale"), (above, "^", "above the scale")):
                if group:
                    ax.plot([n * f0_hz * k for n, _ in group], [m for _, m in group], marker, color=COLORS["current"],
                            ms=8, clip_on=False, label=f"Z_n from the transient, {text}")
            ropt = metrics.get("design", {}).get("ropt_ohm")
            if ropt:
                ax.axhline(ropt, color=COLORS["load"], ls="--", lw=1.0, label=f"Ropt = {ropt:.4g} ohm")
        ax.set_ylim(lo, hi)
        ax.set_xlabel(f"frequency ({unit})")
        ax.set_ylabel("|Z| at the drain (ohm)")
        ax.set_title(_title(metrics, "Network impedance"))
        ax.legend(loc="lower right", fontsize=9)
        fig.tight_layout()
        return _save(fig, path)


def _gamma(z_norm):
    return (z_norm - 1.0) / (z_norm + 1.0)


#: metrics.json harmonic keys of each plane's impedance (docs/metrics.md)
PLANE_Z_KEYS = {"intrinsic": ("z_int_re_ohm", "z_int_im_ohm"), "package": ("z_re_ohm", "z_im_ohm")}


def _smith_grid(ax) -> None:
    big = np.concatenate([-np.logspace(4, -3, 400), [0.0], np.logspace(-3, 4, 400)])  # reactance sweep
    for r in (0.0, 0.2, 0.5, 1.0, 2.0, 5.0):
        g = _gamma(r + 1j * big)
        ax.plot(g.real, g.imag, color="#c9c9c9" if r else "#555555", lw=0.8 if r else 1.3)
        if r:
            g0 = _gamma(complex(r, 0))
            ax.annotate(f"{r:g}", (g0.real, 0.0), xytext=(2, -9), textcoords="offset points", fontsize=7, color="#888888")
    rr = np.logspace(-3, 3, 400)
    for x in (0.2, 0.5, 1.0, 2.0, 5.0):
        for sign in (1, -1):
            g = _gamma(np.concatenate([[0.0], rr]) + 1j * sign * x)
            ax.plot(g.real, g.imag, color="#c9c9c9", lw=0.8)
            _reactance_label(ax, sign * x)
    ax.plot([-1, 1], [0, 0], color="#c9c9c9", lw=0.8)


def _smith_points(ax, rows: list[dict], keys: tuple[str, str], z_ref_ohm: float) -> None:
    colors = plt.get_cmap("viridis")
    rows = [r for r in rows if r.get(keys[0]) is not None]
    labels: dict[tuple, list[str]] = {}  # coincident points share one label ("2f0, 4f0")
    for k, r in enumerate(rows):
        g = _gamma(complex(r[keys[0]], r[keys[1]]) / z_ref_ohm)
        c = COLORS["current"] if r["n"] == 1 else colors(0.15 + 0.7 * k / max(len(rows), 1))
        ax.plot(g.real, g.imag, "o", color=c, ms=8, mec="black", mew=0.5, zorder=3)
        # points closer than a label's size share one label ("2f0, 4f0"), so no label hides another
        near = next((key for key in labels if abs(complex(*key) - g) < 0.08), (g.real, g.imag))
        labels.setdefault(near, []).append(f"{r['n']}f0")
    for (gx, gy), names in labels.items():
        ax.annotate(", ".join(names), (gx, gy), xytext=(7, 7), textcoords="offset points", fontsize=9,
                    fontweight="bold", zorder=4, bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.8))


def plot_smith(path, metrics: dict, z_ref_ohm: float | None = None) -> Path:
    """Smith charts (our own grid) of the harmonic impedances Z_n presented to the device: at the
    intrinsic plane (the generator inside Cout) and, beside it, at the package plane (the drain terminal).

    The reference impedance defaults to Ropt: the fundamental then sits at the
    centre when the network is right, and harmonic shorts and opens sit at the
    left and right ends of the real axis.
    """
    if z_ref_ohm is None:
        z_ref_ohm = metrics.get("design", {}).get("ropt_ohm") or 50.0
        ref_name = "Ropt" if metrics.get("design", {}).get("ropt_ohm") else "50 ohm"
    else:
        ref_name = "chosen"
    rows = metrics["harmonics"]
    planes = [p for p in ("intrinsic", "package") if any(r.get(PLANE_Z_KEYS[p][0]) is not None for r in rows)]
    planes = planes or ["package"]
    with plt.rc_context({**_RC, "axes.grid": False}):
        fig, axes = plt.subplots(1, len(planes), figsize=(6.2 * len(planes), 6.2), squeeze=False)
        for j, (ax, plane) in enumerate(zip(axes[0], planes)):
            _smith_grid(ax)
            _smith_points(ax, rows, PLANE_Z_KEYS[plane], z_ref_ohm)
            ax.set_aspect("equal")
            ax.set_xlim(-1.22, 1.22)
            ax.set_ylim(-1.22, 1.22)
            ax.axis("off")
            what = f"Harmonic impedances, {plane} plane"
            # the design on a second line, so a long name is never cut off at the figure's edge
            title = _title(metrics, what).replace(" - ", "\n", 1) if j == 0 else what + "\n"
            ax.set_title(title, loc="left")
        # the footnote sits below the charts, clear of the circles and their labels; the top margin
        # keeps a two-line title inside the figure
        fig.tight_layout(rect=(0.0, 0.07, 1.0, 0.97))
        fig.text(0.03, 0.02, f"reference {ref_name} = {z_ref_ohm:.4g} ohm; left end short, right end open;"
                 "\nharmonics with negligible current are not shown", fontsize=8, color="#555555", va="bottom")
        return _save(fig, path)


def reactance_label(x_norm: float) -> str:
    """Normalised reactance as the trade writes it on a Smith chart: ``+j0.5``, ``-j2``."""
    return f"{'-' if x_norm < 0 else '+'}j{abs(x_norm):g}"


def _reactance_label(ax, x_norm: float) -> None:
    """Label the reactance circle x_norm where it meets the outer circle, just outside it."""
    g = _gamma(1j * x_norm)
    angle = np.angle(g)
    ux, uy = math.cos(angle), math.sin(angle)
    ha = "left" if ux > 0.2 else "right" if ux < -0.2 else "center"
    va = "bottom" if uy > 0.2 else "top" if uy < -0.2 else "center"
    ax.annotate(reactance_label(x_norm), (1.03 * ux, 1.03 * uy), fontsize=7.5, color="#777777", ha=ha, va=va)


def plot_settling(path, history: dict, *, settled: bool = True, metrics: dict | None = None,
                     tol: float | None = None, start: dict | None = None, window: int = 6) -> Path:
    """DC power and load power per simulated cycle, for judging settling.

    Top: the powers (W). Bottom: each cycle's deviation (%) from the mean of the last ``window``
    cycles (what the report averages), with the settling tolerance ``tol`` shaded and, for a run
    started on the periodic state computed from the netlist (``start``), that computation's own
    values as dashed lines.
    """
    series = [(key, label, color) for key, label, color in
              (("pdc_w", "DC power", COLORS["voltage"]), ("pload_w", "load power", COLORS["load"]))
              if np.asarray(history.get(key, [])).size]
    with plt.rc_context(_RC):
        fig, (ax, ax2) = plt.subplots(2, 1, figsize=(8, 5.2), sharex=True, height_ratios=(1, 1.3))
        for key, label, color in series:
            y = np.asarray(history[key], dtype=float)
            x = np.arange(1, y.size + 1)
            ax.plot(x, y, color=color, label=label, lw=1.2)
            ref = float(np.mean(y[-window:]))
            ax2.plot(x, 100.0 * (y / ref - 1.0), color=color, lw=1.2, marker="o" if y.size <= 40 else None, ms=3)
            if start and start.get("method") == "periodic" and start.get(key) is not None:
                ax2.axhline(100.0 * (float(start[key]) / ref - 1.0), color=color, ls="--", lw=1.0,
                            label=f"{label}: computed periodic state")
        if tol:
            ax2.axhspan(-100 * tol, 100 * tol, color=COLORS["grid"], alpha=0.7, lw=0, label=f"+/-{100 * tol:g} %")
        ax.set_ylabel("power per cycle (W)")
        ax2.set_ylabel("deviation from the\nreported value (%)")
        ax2.set_xlabel("cycle")
        ax.set_title(_title(metrics, "Settling") if metrics else "Settling" + ("" if settled else "  [NOT SETTLED]"))
        ax.legend(loc="lower right", fontsize=9)
        if ax2.get_legend_handles_labels()[0]:
            ax2.legend(loc="best", fontsize=8)
        fig.tight_layout()
        return _save(fig, path)


def plot_all(outdir, sized, wf, metrics: dict, z_f_hz=None, z_ohm=None) -> dict[str, Path]:
    """Every figure for one run, written into ``outdir``; returns {kind: path}.

    The network-impedance plot needs ``z_f_hz`` and ``z_ohm`` (skipped without
    them); the settling plot needs ``wf.history``.
    """
    outdir = Path(outdir)
    d = sized.design
    out = {
        "waveforms": plot_waveforms(outdir / "waveforms.png", wf, d.vdd_v, metrics),
        "load_line": plot_load_line(outdir / "load_line.png", wf, d.vdd_v, sized.ropt_ohm, metrics),
        "harmonics": plot_harmonics(outdir / "harmonics.png", metrics),
        "smith": plot_smith(outdir / "smith.png", metrics),
    }
    if z_f_hz is not None and z_ohm is not None and len(z_f_hz):
        out["impedance"] = plot_network_impedance(outdir / "impedance.png", z_f_hz, z_ohm, d.f0_hz, metrics)
    if wf.history and any(len(v) for v in wf.history.values()):
        out["settling"] = plot_settling(outdir / "settling.png", wf.history,
                                              settled=wf.settled, metrics=metrics, tol=d.sim.settle_tol,
                                              start=getattr(wf, "start", None), window=d.sim.average_periods)
    if d.block.file is not None:  # a Touchstone block: its S-parameters and fit (results.block_plots)
        from netgen.netlist import design_block

        from .block_plots import plot_block

        out["block"] = plot_block(outdir / "block.png", design_block(d), metrics)
    return out
