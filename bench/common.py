"""Helpers shared by the benchmarks: designs, netlist edits, per-cycle powers, settle counts.

Everything here uses pashape's public API only (``netgen.design.schema.load_design``,
``netgen.synthesis.sizing.size``, ``netgen.netlist.renderer.render``, ``netgen.simulator.engine.run_transient``,
``netgen.periodic.steady.simulate``). Times are wall-clock seconds from ``time.monotonic()``
(system-wide on Linux, so the simulator worker's time stamps compare with ours).
"""

from __future__ import annotations

import dataclasses
import math
import os
import platform
import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
SIMS = REPO / "sims"
#: the built-in topologies, each with its example design sims/<name>.toml
TOPOLOGIES = ("class_f_line", "class_f_feed", "class_f_lumped", "inverse_f_line", "class_e", "class_b_tuned")
#: relative tolerance of "an accurate answer" (the DC and fundamental load power)
TOL = 1e-3

__all__ = ["REPO", "SIMS", "TOPOLOGIES", "TOL", "REF_TAIL", "reference_tail", "load_sized", "plain_tran", "set_tstop", "cycle_powers",
           "waveform_powers", "CycleStats", "cycles_to_tol", "jitter", "tail_change", "machine_info", "proc_peak_rss_mb"]


def load_sized(name: str, *, feed_scale: float = 1.0, block_scale: float = 1.0):
    """Size ``sims/<name>.toml``; optionally scale the DC-feed choke and the DC block.

    Returns
    -------
    SizedDesign
    """
    from netgen.design.schema import load_design
    from netgen.synthesis.sizing import size

    design = load_design(SIMS / f"{name}.toml")
    sized = size(design)
    if feed_scale != 1.0 or block_scale != 1.0:
        net = design.network
        repl = {}
        if "feed_l" in sized.components:
            repl["feed_l_h"] = sized.value("feed_l") * feed_scale
        if "block_c" in sized.components:
            repl["block_c_f"] = sized.value("block_c") * block_scale
        design = dataclasses.replace(design, network=dataclasses.replace(net, **repl))
        sized = size(design)
    return sized


_TRAN = re.compile(r"^\s*\.tran\b.*$", re.IGNORECASE | re.MULTILINE)


def plain_tran(netlist: str) -> str:
    """The netlist with ``uic`` removed from its ``.tran`` line (ngspice then starts from a DC point)."""
    def fix(m):
        return re.sub(r"\s+uic\b", "", m.group(0), flags=re.IGNORECASE)

    return _TRAN.sub(fix, netlist, count=1)


def set_tstop(netlist: str, tstop_s: float) -> str:
    """The netlist with the stop time (third field) of its ``.tran`` line replaced, s."""
    def fix(m):
        parts = m.group(0).split()
        parts[2] = f"{tstop_s:.12g}"
        return " ".join(parts)

    return _TRAN.sub(fix, netlist, count=1)


def cycle_powers(t_s, v_load, i_vdd_branch, *, t0_s: float, period_s: float, vdd_v: float, rload_ohm: float,
                 points: int = 512) -> tuple[float, float, float]:
    """DC power, fundamental load power and total load power of the cycle [t0, t0 + T), W.

    The cycle is resampled at ``points`` midpoints (linear interpolation). Pdc = Vdd mean(-i(VDD))
    (ngspice's branch current is negative when the source delivers power); P1 = |c1|^2 / (2 RL)
    with c1 = (2/m) sum v_k exp(-j 2 pi (k + 1/2)/m), the Fourier-series fundamental amplitude;
    Pload = mean(v^2)/RL.
    """
    grid = t0_s + (np.arange(points) + 0.5) * (period_s / points)
    v = np.interp(grid, t_s, v_load)
    i = -np.interp(grid, t_s, i_vdd_branch)
    phase = np.exp(-2j * np.pi * (np.arange(points) + 0.5) / points)
    c1 = 2.0 / points * np.sum(v * phase)
    return vdd_v * float(i.mean()), abs(c1) ** 2 / (2.0 * rload_ohm), float(np.mean(v ** 2)) / rload_ohm


def waveform_powers(wf, *, vdd_v: float, rload_ohm: float) -> tuple[float, float, float]:
    """Pdc, P1, Pload (W) of pashape's settled :class:`~netgen.design.records.Waveforms` (whole periods on a uniform grid)."""
    t = np.asarray(wf.t_s, dtype=float)
    n = len(t)
    period = 1.0 / wf.f0_hz
    cycles = max(1, int(round((t[-1] - t[0] + (t[1] - t[0])) / period)))
    v = np.asarray(wf.v["load"], dtype=float)
    i = np.asarray(wf.i["supply"], dtype=float)
    spec = np.fft.rfft(v) / n
    c1 = 2.0 * abs(spec[cycles])
    return vdd_v * float(i.mean()), c1 ** 2 / (2.0 * rload_ohm), float(np.mean(v ** 2)) / rload_ohm


@dataclasses.dataclass
class CycleStats:
    """A ``stop_check`` for ``netgen.simulator.engine.run_transient`` that records per-cycle powers and never
    stops the run early unless ``budget_s`` of wall time has passed.

    It runs inside the simulator worker process, so it is a plain picklable object; the engine
    returns it as ``result.checker`` with ``pdc_w``, ``p1_w``, ``pload_w`` (one value per completed
    cycle) and ``stamps`` ((cycles completed, time.monotonic()) after each chunk).
    """

    period_s: float
    vdd_v: float
    rload_ohm: float
    budget_s: float = math.inf
    started: float = 0.0
    points: int = 512
    pdc_w: list = dataclasses.field(default_factory=list)
    p1_w: list = dataclasses.field(default_factory=list)
    pload_w: list = dataclasses.field(default_factory=list)
    stamps: list = dataclasses.field(default_factory=list)
    points_per_cycle: list = dataclasses.field(default_factory=list)
    _t: np.ndarray | None = None
    _v: np.ndarray | None = None
    _i: np.ndarray | None = None

    def __call__(self, t_end: float, vecs) -> tuple[bool, str]:
        t = np.asarray(vecs["time"], dtype=float)
        v = np.asarray(vecs["load"], dtype=float)
        i = np.asarray(vecs["vdd#branch"], dtype=float)
        if self._t is not None:
            keep = t > self._t[-1]
            t = np.concatenate([self._t, t[keep]])
            v = np.concatenate([self._v, v[keep]])
            i = np.concatenate([self._i, i[keep]])
        T = self.period_s
        while True:
            k = len(self.pdc_w)
            if t[-1] < (k + 1) * T * (1 - 1e-12):
                break
            pdc, p1, pl = cycle_powers(t, v, i, t0_s=k * T, period_s=T, vdd_v=self.vdd_v,
                                       rload_ohm=self.rload_ohm, points=self.points)
            self.pdc_w.append(pdc)
            self.p1_w.append(p1)
            self.pload_w.append(pl)
            a, b = np.searchsorted(t, [k * T, (k + 1) * T])
            self.points_per_cycle.append(int(b - a))
            cut = max(int(b) - 1, 0)
            t, v, i = t[cut:], v[cut:], i[cut:]
        self._t, self._v, self._i = t, v, i
        now = time.monotonic()
        self.stamps.append((len(self.pdc_w), now))
        over = (now - self.started) > self.budget_s
        return over, f"{len(self.pdc_w)} cycles"


#: cycles averaged for the converged value of a long run (see reference_tail)
REF_TAIL = 100


def reference_tail(n_cycles: int) -> int:
    """Cycles at the end of an ``n_cycles`` run whose mean is taken as the converged value.

    100 cycles (at most a tenth of the run, at least 10). The lossless-line designs scatter by
    0.02-0.05 % per cycle with a correlation of tens of cycles (switch edges against line
    breakpoints), so a mean of only the last 10 cycles can sit 0.05 % away from the level the run
    holds from cycle ~20 on (measured: class_f_line, 1000 warm cycles); the mean of a stationary
    series' last n values estimates its level with an error falling as 1/sqrt(n) (common
    statistics).
    """
    return int(min(REF_TAIL, max(10, n_cycles // 10)))


def cycles_to_tol(series: dict, tol: float = TOL, final: dict | None = None, tail: int | None = None,
                  smooth: int = 1):
    """Cycles one must simulate before every series stays within ``tol`` (relative) of its final value.

    Parameters
    ----------
    series : dict of name -> sequence
        One value per cycle (W).
    final : dict of name -> float, optional
        The converged values; default the mean of the last ``tail`` cycles of each series
        (default :func:`reference_tail` of its length).
    smooth : int
        Judge the trailing mean of this many cycles instead of single cycles (for circuits whose
        per-cycle values jitter by about ``tol`` for numerical reasons; see docs/benchmarks.md).

    Returns
    -------
    int or None
        N such that the values (or trailing means) at cycles N, N+1, ... (1-based) are all within
        tolerance; None when the last one is still outside it.
    """
    worst = smooth
    for name, values in series.items():
        x = np.asarray(values, dtype=float)
        ref = final[name] if final else float(x[-(tail or reference_tail(len(x))):].mean())
        if smooth > 1:
            x = np.convolve(x, np.ones(smooth) / smooth, mode="valid")  # x[j] ends at cycle j + smooth - 1
        bad = np.nonzero(np.abs(x / ref - 1.0) > tol)[0]
        if bad.size:
            if bad[-1] == len(x) - 1:
                return None
            worst = max(worst, int(bad[-1]) + smooth + 1)
    return worst


def jitter(values, n: int = 100) -> float:
    """Standard deviation of the last ``n`` values relative to their mean (cycle-to-cycle noise floor)."""
    x = np.asarray(values, dtype=float)[-n:]
    return float(x.std() / abs(x.mean()))


def tail_change(values, parts: int = 4) -> float:
    """Relative change between the means of the last two ``1/parts`` slices of a series.

    A check that the long reference run has itself converged (a slow drift shows up here).
    """
    x = np.asarray(values, dtype=float)
    n = max(len(x) // parts, 1)
    a, b = x[-2 * n:-n].mean(), x[-n:].mean()
    return float(abs(b - a) / abs(b))


def proc_peak_rss_mb(pid: int | None) -> float | None:
    """Peak resident set size (VmHWM, Linux) of a live process, MB; None when unavailable."""
    if pid is None:
        return None
    try:
        text = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    m = re.search(r"^VmHWM:\s+(\d+)\s+kB", text, re.MULTILINE)
    return int(m.group(1)) / 1024.0 if m else None


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def machine_info() -> dict:
    """Machine, software versions and the source tree state the numbers belong to."""
    from netgen import __version__
    from netgen.simulator import engine

    try:
        mem_kb = int(re.search(r"MemTotal:\s+(\d+)", Path("/proc/meminfo").read_text()).group(1))
        mem_gb = round(mem_kb / 1024 ** 2, 1)
    except (OSError, AttributeError):
        mem_gb = None
    try:
        commit = subprocess.run(["git", "-C", str(REPO), "rev-parse", "--short", "HEAD"], capture_output=True,
                                text=True, timeout=10).stdout.strip() or None
        dirty = bool(subprocess.run(["git", "-C", str(REPO), "status", "--porcelain", "netgen", "templates"],
                                    capture_output=True, text=True, timeout=10).stdout.strip())
    except (OSError, subprocess.TimeoutExpired):
        commit, dirty = None, None
    try:
        from importlib.metadata import version

        pyspice = version("PySpice")
    except Exception:  # noqa: BLE001 - informational only
        pyspice = None
    found = engine.find_ngspice()
    return {
        "date_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "host_cpu": _cpu_model(),
        "cpus": os.cpu_count(),
        "memory_gb": mem_gb,
        "os": f"{platform.system()} {platform.release()}",
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "pyspice": pyspice,
        "ngspice_version": found.get("version"),
        "ngspice_library": found.get("library"),
        "netgen_version": __version__,
        "git_commit": commit,
        "netgen_tree_modified": dirty,
        "load_average_at_start": list(os.getloadavg()) if hasattr(os, "getloadavg") else None,
    }
