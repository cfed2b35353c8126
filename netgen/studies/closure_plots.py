"""Figures of tuning and load-pull (matplotlib, Agg): the objective history and Smith charts.

Our own drawing style: a warm paper background, a teal-ochre-plum palette, the Smith chart's
resistance circles and reactance arcs in a faint line, contours labelled in place, the optimum
as an open diamond. Every function takes plain arrays (what a test can compare with the data)
and writes one PNG atomically (a temporary file beside it, then os.replace).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
from matplotlib.colors import LinearSegmentedColormap

__all__ = ["PALETTE", "plot_history", "plot_ring", "plot_smith_contours", "smith_grid_lines"]

PALETTE = {
    "paper": "#fbf8f1",
    "ink": "#2b2d33",
    "teal": "#0f5c63",
    "ochre": "#c4862a",
    "plum": "#74395f",
    "slate": "#56606b",
    "faint": "#d8d3c7",
}
#: contour colour scale: teal (low) -> ochre -> plum (high)
_CMAP = LinearSegmentedColormap.from_list("netgen_closure", [PALETTE["teal"], "#8fb3a2", PALETTE["ochre"], PALETTE["plum"]])
_RC = {"font.size": 9, "axes.facecolor": PALETTE["paper"], "figure.facecolor": "white",
       "axes.edgecolor": PALETTE["slate"], "axes.labelcolor": PALETTE["ink"], "xtick.color": PALETTE["slate"],
       "ytick.color": PALETTE["slate"]}


def _save(fig, path: Path) -> Path:
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".png")
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=110, bbox_inches="tight")
        os.replace(tmp, path)
    finally:
        plt.close(fig)
        if os.path.exists(tmp):
            os.remove(tmp)
    return path


def plot_history(path: Path, j: np.ndarray, best: np.ndarray, stages: list[str], traces: dict) -> Path:
    """Objective of every evaluation (dots, by stage) and the best so far (line); below, the goal
    metrics of every evaluation.

    Parameters
    ----------
    j, best : ndarray
        Objective and running minimum per evaluation.
    stages : list of str
        ``start`` / ``global`` / ``polish`` / ``final`` per evaluation.
    traces : dict of label -> ndarray
        Metric values per evaluation (NaN where a candidate failed).
    """
    with plt.rc_context(_RC):
        fig, (ax, bx) = plt.subplots(2, 1, figsize=(7.0, 5.6), sharex=True, gridspec_kw={"height_ratios": [3, 2]})
        n = np.arange(1, len(j) + 1)
        shift = min(0.0, float(np.nanmin(best))) if len(best) else 0.0
        offset = 1e-6 - shift  # plotted on a log axis: J - min(J) + 1e-6 when J goes negative
        colours = {"start": PALETTE["ink"], "global": PALETTE["ochre"], "polish": PALETTE["teal"], "final": PALETTE["plum"]}
        for stage, colour in colours.items():
            sel = np.array([s == stage for s in stages])
            if sel.any():
                ax.plot(n[sel], np.asarray(j)[sel] + offset, "o", ms=3.2, color=colour, alpha=0.75, label=stage)
        ax.plot(n, np.asarray(best) + offset, "-", color=PALETTE["plum"], lw=1.6, label="best so far")
        ax.set_yscale("log")
        ax.set_ylabel("objective" + (f" + {offset:.3g}" if offset > 1e-6 else ""))
        ax.grid(True, color=PALETTE["faint"], lw=0.6)
        ax.legend(loc="upper right", frameon=False, fontsize=8)
        ax.set_title("tuning: objective of each evaluation (periodic estimate)", color=PALETTE["ink"], loc="left")
        palette = [PALETTE["teal"], PALETTE["ochre"], PALETTE["plum"], PALETTE["slate"]]
        for k, (label, values) in enumerate(traces.items()):
            bx.plot(n, values, ".-", ms=2.5, lw=0.7, color=palette[k % len(palette)], label=label)
        bx.set_xlabel("evaluation")
        bx.grid(True, color=PALETTE["faint"], lw=0.6)
        if traces:
            bx.legend(loc="best", frameon=False, fontsize=8)
        return _save(fig, path)


def smith_grid_lines(resolution: int = 361) -> list[np.ndarray]:
    """Complex reflection-coefficient polylines of the chart: resistance circles r = 0.2, 0.5,
    1, 2, 5 and reactance arcs x = +-0.2, 0.5, 1, 2, 5 (normalised), inside |Gamma| <= 1.

    Gamma = (z - 1)/(z + 1) of the normalised impedance z = r + jx (any microwave text, e.g.
    Pozar, "Microwave Engineering", the Smith chart).
    """
    lines = []
    t = np.concatenate([-np.logspace(3, -3, resolution // 2), [0.0], np.logspace(-3, 3, resolution // 2)])
    for r in (0.2, 0.5, 1.0, 2.0, 5.0):
        z = r + 1j * t
        lines.append((z - 1) / (z + 1))
    rr = np.logspace(-3, 3, resolution)
    for x in (0.2, 0.5, 1.0, 2.0, 5.0):
        for sx in (1, -1):
            z = rr + 1j * sx * x
            lines.append((z - 1) / (z + 1))
    return lines


def _chart(ax, z0_ohm: float) -> None:
    circle = np.exp(1j * np.linspace(0, 2 * np.pi, 361))
    ax.plot(circle.real, circle.imag, color=PALETTE["slate"], lw=1.0)
    for g in smith_grid_lines():
        ax.plot(g.real, g.imag, color=PALETTE["faint"], lw=0.6, zorder=0)
    ax.plot([-1, 1], [0, 0], color=PALETTE["faint"], lw=0.6, zorder=0)
    ax.set_aspect("equal")
    ax.set_xlim(-1.05, 1.05)
    ax.set_ylim(-1.05, 1.05)
    ax.set_xticks([])
    ax.set_yticks([])
    for side in ax.spines.values():
        side.set_visible(False)
    ax.text(1.02, -1.02, f"Z0 = {z0_ohm:.4g} ohm", ha="right", va="bottom", fontsize=7, color=PALETTE["slate"])


def plot_smith_contours(path: Path, gamma: np.ndarray, fields: dict, z0_ohm: float, title: str,
                        best: complex | None = None) -> Path:
    """One Smith chart per field with filled contours over the reflection-coefficient points.

    Parameters
    ----------
    gamma : ndarray of complex
        Reflection coefficients of the grid (against ``z0_ohm``).
    fields : dict of label -> ndarray
        Values at the points (NaN: failed); e.g. efficiency (%), Pout (W), peak drain voltage (V).
    best : complex, optional
        Reflection coefficient of the efficiency optimum (drawn as an open diamond on every chart).
    """
    with plt.rc_context(_RC):
        n = len(fields)
        fig, axes = plt.subplots(1, n, figsize=(4.2 * n, 4.4), squeeze=False)
        for ax, (label, values) in zip(axes[0], fields.items()):
            _chart(ax, z0_ohm)
            v = np.asarray(values, dtype=float)
            ok = np.isfinite(v)
            if ok.sum() >= 4:
                cs = ax.tricontourf(gamma.real[ok], gamma.imag[ok], v[ok], levels=12, cmap=_CMAP, alpha=0.85)
                lines = ax.tricontour(gamma.real[ok], gamma.imag[ok], v[ok], levels=cs.levels[::2],
                                      colors=PALETTE["ink"], linewidths=0.5)
                ax.clabel(lines, fontsize=6.5, fmt="%.3g")
            ax.plot(gamma.real[~ok], gamma.imag[~ok], "x", color=PALETTE["slate"], ms=3)
            if best is not None:
                ax.plot([best.real], [best.imag], "D", mfc="none", mec=PALETTE["ink"], ms=8, mew=1.4)
            ax.set_title(label, color=PALETTE["ink"], fontsize=9)
        fig.suptitle(title, x=0.02, ha="left", color=PALETTE["ink"], fontsize=10)
        return _save(fig, path)


def plot_ring(path: Path, phase_deg: np.ndarray, fields: dict, title: str, xlabel: str) -> Path:
    """Metrics against the phase of a harmonic termination swept at a fixed reflection magnitude."""
    with plt.rc_context(_RC):
        n = len(fields)
        fig, axes = plt.subplots(n, 1, figsize=(6.4, 1.9 * n + 0.6), sharex=True, squeeze=False)
        palette = [PALETTE["teal"], PALETTE["ochre"], PALETTE["plum"]]
        order = np.argsort(phase_deg)
        for k, (ax, (label, values)) in enumerate(zip(axes[:, 0], fields.items())):
            ax.plot(np.asarray(phase_deg)[order], np.asarray(values, float)[order], "o-", ms=3, lw=1.2,
                    color=palette[k % 3])
            ax.set_ylabel(label)
            ax.grid(True, color=PALETTE["faint"], lw=0.6)
        axes[-1, 0].set_xlabel(xlabel)
        axes[0, 0].set_title(title, loc="left", color=PALETTE["ink"], fontsize=10)
        return _save(fig, path)
