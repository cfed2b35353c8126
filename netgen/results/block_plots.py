"""The Touchstone block's figure: |S| of the file and of its fit, a Smith chart, the fit error.

One PNG (``block.png``) for a design with a ``[block]`` (netgen.netlist.touchstone): the file's
points as markers and the rational fit ngspice ran as lines, the harmonics n f0 marked, and the
fit's error ``|S_fit - S_file|`` with the tolerance it was held to.
"""

from __future__ import annotations

import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from netgen.fileio import atomic_write_bytes  # noqa: E402

__all__ = ["plot_block"]

_PAIRS_1 = ((0, 0, "S11"),)
_PAIRS_2 = ((0, 0, "S11"), (1, 0, "S21"), (1, 1, "S22"))
_COLS = {"S11": "#1f5fa8", "S21": "#c0392b", "S22": "#2e8b57"}


_RC = {"figure.facecolor": "white", "axes.grid": True, "grid.color": "#e3e3e3", "axes.spines.top": False,
       "axes.spines.right": False, "font.size": 10, "axes.titlesize": 11, "axes.titleweight": "bold",
       "legend.frameon": False}


def _gamma(z_norm):
    return (np.asarray(z_norm) - 1) / (np.asarray(z_norm) + 1)


def _save(fig, path) -> Path:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, facecolor="white")
    plt.close(fig)
    return atomic_write_bytes(Path(path), buf.getvalue())


def _title(metrics: dict | None, what: str) -> str:
    d = (metrics or {}).get("design", {})
    return f"{what} - {d['name']} ({d.get('topology', '')})" if d.get("name") else what


def _smith_grid(ax) -> None:
    big = np.concatenate([-np.logspace(4, -3, 300), [0.0], np.logspace(-3, 4, 300)])
    for r in (0.0, 0.2, 0.5, 1.0, 2.0, 5.0):
        g = _gamma(r + 1j * big)
        ax.plot(g.real, g.imag, color="#c9c9c9" if r else "#555555", lw=0.7 if r else 1.2)
    rr = np.logspace(-3, 3, 300)
    for x in (0.2, 0.5, 1.0, 2.0, 5.0):
        for sign in (1, -1):
            g = _gamma(np.concatenate([[0.0], rr]) + 1j * sign * x)
            ax.plot(g.real, g.imag, color="#c9c9c9", lw=0.7)
    ax.plot([-1, 1], [0, 0], color="#c9c9c9", lw=0.7)
    ax.set_aspect("equal")
    ax.set_xlim(-1.1, 1.1)
    ax.set_ylim(-1.1, 1.1)
    ax.axis("off")


def plot_block(path, block, metrics: dict | None = None) -> Path:
    """Write the block's figure to ``path`` and return it.

    Parameters
    ----------
    path : path
    block : netgen.netlist.touchstone.Block
    metrics : dict, optional
        For the title (design name).
    """
    f = block.f_hz
    f_fine = np.linspace(f[0], f[-1], 1200)
    model_fine = block.s_model(f_fine)
    model_pts = block.s_model(f)
    pairs = _PAIRS_1 if block.nports == 1 else _PAIRS_2
    f0, n = block.f0_hz, block.n_required
    scale, unit = (1e9, "GHz") if f[-1] >= 2e9 else ((1e6, "MHz") if f[-1] >= 2e6 else (1e3, "kHz"))
    with plt.rc_context(_RC):
        fig = plt.figure(figsize=(12.5, 4.6))
        ax1 = fig.add_subplot(1, 3, 1)
        for i, j, lab in pairs:
            db = 20 * np.log10(np.maximum(np.abs(block.s[:, i, j]), 1e-12))
            ax1.plot(f / scale, db, "o", ms=3, color=_COLS[lab], label=f"{lab} file")
            ax1.plot(f_fine / scale, 20 * np.log10(np.maximum(np.abs(model_fine[:, i, j]), 1e-12)), "-",
                     lw=1.0, color=_COLS[lab], alpha=0.8, label=f"{lab} fit")
        for k in range(1, n + 1):
            ax1.axvline(k * f0 / scale, color="#999999", lw=0.6, ls=":")
        ax1.set_ylim(bottom=max(ax1.get_ylim()[0], -60))
        ax1.set_xlabel(f"frequency ({unit}); dotted: n f0")
        ax1.set_ylabel("|S| (dB)")
        ax1.legend(fontsize=7, ncol=2)
        ax1.set_title("magnitude", loc="left")
        ax2 = fig.add_subplot(1, 3, 2)
        _smith_grid(ax2)
        for i, j, lab in pairs:
            if i != j:
                continue
            ax2.plot(block.s[:, i, j].real, block.s[:, i, j].imag, "o", ms=2.5, color=_COLS[lab], label=f"{lab} file")
            ax2.plot(model_fine[:, i, j].real, model_fine[:, i, j].imag, "-", lw=0.9, color=_COLS[lab], alpha=0.8)
            for k in range(1, n + 1):
                g = block.s_data(k * f0)[0, i, j]
                ax2.annotate(f"{k}f0", (g.real, g.imag), xytext=(4, 4), textcoords="offset points", fontsize=7)
        ax2.set_title(f"Smith chart (reference {block.z0_ohm[0]:g} ohm)", loc="left")
        ax2.legend(fontsize=7, loc="lower left")
        ax3 = fig.add_subplot(1, 3, 3)
        err = np.abs(model_pts - block.s).reshape(len(f), -1).max(axis=1)
        ax3.semilogy(f / scale, np.maximum(err, 1e-16), ".-", lw=0.8, color="#444444", label="max |S_fit - S_file|")
        fit = block.fit
        ax3.axhline(fit.worst_error, color="#c0392b", lw=0.8, ls="--",
                    label=f"worst to {n} f0: {fit.worst_error:.2g}")
        ax3.axvline(n * f0 / scale, color="#999999", lw=0.6, ls=":")
        ax3.set_xlabel(f"frequency ({unit})")
        ax3.set_ylabel("fit error")
        ax3.legend(fontsize=7)
        ax3.set_title(f"rational fit: order {fit.order}, {fit.passivity}", loc="left")
        fig.suptitle(_title(metrics, f"Touchstone block {block.name} ({block.section})"), x=0.01, ha="left")
        fig.tight_layout()
        return _save(fig, path)
