"""Periodic steady state: warm start, chunked transient, drift-aware convergence.

:func:`simulate` renders the design's transient netlist (``netgen.render``),
starts the bias network from its DC state (warm start), runs ngspice in chunks
of a few cycles and stops once DC power, load power and the drain waveform
have settled to ``sim.settle_tol`` -- judged so that slow drift is caught --
or at ``sim.max_cycles`` (then ``settled=False``, with the reason in ``note``).

Convergence (see docs/simulation.md)
-----------------------------------
Per cycle k the checker computes Pdc_k, Pload_k and the drain waveform on a
uniform grid. Over the last 3w cycles (w = max(2, n // 6) grows with the run)
it forms three window means S1, S2, S3 and their differences d1 = S2 - S1,
d2 = S3 - S2. For a sum of decaying exponentials dominated by the slowest
pole, d2/d1 = q is that pole's decay per window and the change still to come
is d2*q/(1-q) (Aitken's delta-squared extrapolation). The run is settled when,
for Pdc and Pload, that predicted remaining change (or, when the windows do not
decay geometrically, a conservative bound) is below tol relative, and the
window-mean drain waveform changed by less than tol (rms, relative). A slow
drift makes q close to 1 and the prediction large, so consecutive cycles that
agree to 0.1 % do not pass.

Warm start and bias nulling
---------------------------
(a) a DC operating point of the passive network (``render(mode="op")``, the
device replaced by a DC sink of the estimated Idc) gives the current of every
inductor and the voltage of every capacitor; they become ``IC=`` values with
``uic``. (b) The run netlist gets zero-valued auxiliary DC sources across the
feed inductors and in series with the DC blocks (:func:`with_aux_sources`);
:class:`BiasNulling` sets them at a few cycle boundaries with ``alter`` so
that the slow choke-block states sit at their periodic values, then keeps them
constant (the circuit is then exactly equivalent to the real one: in the
periodic state the sources deliver no average power). See docs/simulation.md.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from . import engine
from .design import SimSpec
from .analysis import fourier_pwl, pwl_mean_square
from .errors import SimulationError
from .records import SizedDesign, Waveforms

__all__ = ["simulate", "simulate_netlist", "SettleCheck", "BiasNulling", "AuxSource", "with_aux_sources", "judge",
           "dc_initial_conditions",
           "netlist_elements", "window_peaks", "window_fourier", "FOURIER_VECTORS"]

#: cycles per chunk (ngspice stop/resume); small chunks stop sooner, large ones cost less overhead
CHUNK_CYCLES = 5
#: window-to-window noise floor as a fraction of tol: smaller changes count as settled whatever their trend
NOISE_FRACTION = 0.05
#: drain-voltage harmonics (DC..N f0) compared between windows
HARMONICS_JUDGED = 5
#: harmonic impedances are judged where the drain current is at least this fraction of I1
Z_CURRENT_FLOOR = 0.01
#: largest change of a judged harmonic impedance between the last two windows, relative to
#: max(|Z_n|, Z_SCALE_FRACTION*|Z_1|)
Z_CHANGE_TOL = 0.004
#: ... at the default settle_tol of 1e-3; a tighter sim.settle_tol tightens it in proportion
#: (a looser one leaves it at Z_CHANGE_TOL: reported impedances stay within about 2 %)
Z_TOL_PER_SETTLE_TOL = Z_CHANGE_TOL / 1e-3
#: impedances below this fraction of |Z_1| (harmonic shorts: the voltage they leave is under 5 %
#: of V_1 x I_n/I_1) are judged against it: the integrator's own cycle-to-cycle scatter of a
#: near-zero V_n is ~1e-3 |Z_1| |I_n| (measured on sims/class_f_feed.toml: |Z_2|, |Z_4| ~ 0.3 ohm,
#: 1 % of |Z_1|, scatter 25-50 % of themselves from cycle to cycle after 300 cycles)
Z_SCALE_FRACTION = 0.05
#: periods (even: a period-2 residue of a line mode cancels) over which Waveforms.fourier averages
FOURIER_PERIODS = 8


# ---------------------------------------------------------------- netlist parsing helpers

def netlist_elements(netlist: str) -> dict[str, list[str]]:
    """Element lines of a netlist: upper-case element name -> tokens (continuations joined)."""
    out: dict[str, list[str]] = {}
    lines: list[str] = []
    for raw in netlist.splitlines()[1:]:  # the first line is the title
        s = raw.strip()
        if not s or s.startswith("*"):
            continue
        if s.startswith("+") and lines:
            lines[-1] += " " + s[1:]
            continue
        lines.append(s)
    inside = False
    for s in lines:
        low = s.lower()
        if low.startswith((".control", ".exec")):
            inside = True
        elif low.startswith(".endc"):
            inside = False
        elif not inside and not s.startswith("."):
            tokens = s.split(";")[0].split()
            out[tokens[0].upper()] = tokens
    return out


def _rload(elements: dict) -> float:
    tokens = elements.get("RLOAD")
    if tokens is None or len(tokens) < 4:
        raise SimulationError("The netlist has no 'RLOAD load 0 <R>' line; the load power needs it "
                              "(docs/netlist_conventions.md).")
    value = re.sub(r"^r=", "", tokens[3], flags=re.I)
    return engine._spice_number(value)


# ---------------------------------------------------------------- convergence

def judge(series: dict[str, np.ndarray], waves: np.ndarray | None, tol: float,
          min_cycles: int, iwaves: np.ndarray | None = None) -> tuple[bool, str]:
    """Decide from per-cycle values whether the run has settled.

    Parameters
    ----------
    series : dict of name -> ndarray
        One value per completed cycle (``pdc_w``, ``pload_w``), W.
    waves : ndarray (cycles, h) or None
        Fourier coefficients DC..5f0 of each cycle's drain voltage, V.
    iwaves : ndarray (cycles, h) or None
        The same for the drain current, A. With it, the harmonic impedance V_n/I_n at every
        harmonic whose current is at least 1 % of the fundamental must have stopped changing
        (change between the last two windows below ``Z_CHANGE_TOL`` relative to
        max(|Z_n|, ``Z_SCALE_FRACTION``*|Z_1|)): lightly damped modes of a lossless line near a
        harmonic hardly touch the powers but move the small odd-harmonic currents, and with them
        the reported impedances. The floor keeps the integrator's scatter on a good short (a
        V_n near zero) from counting as a change.
    tol : float
        Relative tolerance (sim.settle_tol).
    min_cycles : int

    Returns
    -------
    (settled, reason) : (bool, str)

    Notes
    -----
    Aitken's delta-squared extrapolation on window means (see the module
    docstring): remaining = |d2 * q / (1 - q)| with q = d2/d1 when 0 <= q < 0.95;
    when q is negative (ringing) the bound is max(|d1|, |d2|); when q >= 0.95
    (too slow to extrapolate) the run is not settled unless both differences are
    below the noise floor NOISE_FRACTION*tol.
    """
    n = min(len(v) for v in series.values()) if series else 0
    if n < max(min_cycles, 6):
        return False, f"{n} cycles, fewer than the {max(min_cycles, 6)} needed to judge"
    w = max(2, n // 6)
    worst_name, worst = "", 0.0
    for name, values in series.items():
        x = np.asarray(values[-3 * w:], dtype=float)
        s1, s2, s3 = x[:w].mean(), x[w:2 * w].mean(), x[2 * w:].mean()
        scale = max(abs(s3), 1e-30)
        d1, d2 = s2 - s1, s3 - s2
        floor = NOISE_FRACTION * tol * scale
        if abs(d1) < floor and abs(d2) < floor:
            remaining = max(abs(d1), abs(d2))
        elif d1 == 0.0:
            remaining = math.inf
        else:
            q = d2 / d1
            if q < 0:
                remaining = max(abs(d1), abs(d2))
            elif q < 0.95:
                remaining = abs(d2 * q / (1.0 - q)) + abs(d2)
            else:
                remaining = math.inf
        rel = remaining / scale
        if rel > worst:
            worst_name, worst = name, rel
    if worst >= tol:
        return False, (f"{worst_name} still changing: predicted remaining change {worst:.2g} "
                       f"(relative) over windows of {w} cycles, tolerance {tol:g}")
    if waves is not None and len(waves) >= 2 * w:
        # drain waveform judged on its first harmonics (DC..5f0), which do not jitter with
        # the position of the switching edges on the sampling grid
        a = waves[-2 * w:-w].mean(axis=0)
        b = waves[-w:].mean(axis=0)
        scale = max(float(np.sqrt(np.sum(np.abs(b) ** 2))), 1e-30)
        change = float(np.sqrt(np.sum(np.abs(b - a) ** 2))) / scale
        if change >= tol:
            return False, f"drain waveform still changing ({change:.2g} relative), tolerance {tol:g}"
        if iwaves is not None and len(iwaves) >= 2 * w:
            ia = iwaves[-2 * w:-w].mean(axis=0)
            ib = iwaves[-w:].mean(axis=0)
            i1 = abs(ib[1])
            z1 = abs(b[1] / ib[1]) if i1 > 0.0 else 0.0
            for k in range(1, min(len(ib), len(b))):
                if abs(ib[k]) < Z_CURRENT_FLOOR * i1 or abs(ia[k]) == 0.0 or abs(b[k]) == 0.0:
                    continue
                za, zb = a[k] / ia[k], b[k] / ib[k]
                zchange = abs(zb - za) / max(abs(zb), Z_SCALE_FRACTION * z1)
                ztol = min(Z_CHANGE_TOL, Z_TOL_PER_SETTLE_TOL * tol)
                if zchange >= ztol:
                    return False, (f"drain impedance at {k} f0 still changing ({zchange:.2g} relative "
                                   f"between windows of {w} cycles), tolerance {ztol:g}")
    return True, f"settled after {n} cycles (predicted remaining change {worst:.1e} relative)"


@dataclass
class SettleCheck:
    """The ``stop_check`` run inside the engine after every chunk (picklable, keeps state).

    Attributes filled during the run: ``pdc_w``, ``pload_w``, ``idrain_a`` (lists, one
    value per cycle), ``waves`` (per-cycle drain-voltage Fourier coefficients, DC..5f0),
    ``settled``, ``reason``.
    """

    period_s: float
    vdd_v: float
    rload_ohm: float
    tol: float
    min_cycles: int
    points: int = 256  # unused since the cycle integrals became exact (fourier_pwl); kept for callers
    pdc_w: list = field(default_factory=list)
    pload_w: list = field(default_factory=list)
    idrain_a: list = field(default_factory=list)
    waves: list = field(default_factory=list)
    iwaves: list = field(default_factory=list)
    settled: bool = False
    reason: str = ""
    #: extra vectors whose cycle means are kept in ``means`` (vector name -> list, one per cycle)
    extra: tuple = ()
    means: dict = field(default_factory=dict)
    #: the judge sees only cycles from this index on (cycles before a change of the circuit are not evidence)
    judge_from: int = 0
    #: cycles the judge needs after judge_from (line modes excited by the corrections must show)
    judge_min_after: int = 6
    _buf: dict | None = None

    def _append(self, vecs) -> None:
        names = {"time": "time", "drain": "drain", "load": "load", "supply": "vdd#branch",
                 "idrain": "vidrain#branch"}
        names.update({f"x:{v}": v for v in self.extra})
        new = {k: np.asarray(vecs[v], dtype=float) for k, v in names.items() if v in vecs}
        if self._buf is None:
            self._buf = new
            return
        t_old = self._buf["time"]
        keep = new["time"] > t_old[-1]
        for k in self._buf:
            self._buf[k] = np.concatenate([self._buf[k], new[k][keep]])

    def __call__(self, t_end: float, vecs) -> tuple[bool, str]:
        self._append(vecs)
        buf = self._buf
        T = self.period_s
        while True:
            k = len(self.pdc_w)
            t_a, t_b = k * T, (k + 1) * T
            if buf["time"][-1] < t_b * (1 - 1e-12):
                break
            # exact integrals of the simulator's piecewise-linear points over the cycle (no
            # resampling: a jump at a switching instant keeps its timing, fourier_pwl)
            tb = buf["time"]

            def mean(key):
                return float(fourier_pwl(tb, buf[key], t_a, T, 0)[0].real)

            self.pdc_w.append(-self.vdd_v * mean("supply"))
            self.pload_w.append(pwl_mean_square(tb, buf["load"], t_a, t_b) / self.rload_ohm)
            ci = fourier_pwl(tb, buf["idrain"], t_a, T, HARMONICS_JUDGED) if "idrain" in buf else None
            if ci is not None:
                self.idrain_a.append(float(ci[0].real))
            for v in self.extra:
                if f"x:{v}" in buf:
                    self.means.setdefault(v, []).append(mean(f"x:{v}"))
            self.waves.append(fourier_pwl(tb, buf["drain"], t_a, T, HARMONICS_JUDGED))
            if ci is not None:
                self.iwaves.append(ci)
            # drop what is no longer needed (keep one point before the next cycle)
            cut = max(int(np.searchsorted(buf["time"], t_b)) - 1, 0)
            for key in buf:
                buf[key] = buf[key][cut:]
        n = len(self.pdc_w)
        j = self.judge_from
        ok, why = judge({"pdc_w": np.array(self.pdc_w[j:]), "pload_w": np.array(self.pload_w[j:])},
                        np.array(self.waves[j:]) if self.waves[j:] else None, self.tol,
                        max(self.min_cycles - j, self.judge_min_after) if j else self.min_cycles,
                        np.array(self.iwaves[j:]) if len(self.iwaves) == len(self.waves) and self.iwaves[j:] else None)
        if ok and j:
            why = f"settled after {n} cycles ({n - j} judged after the last bias correction; {why.split('(', 1)[-1]}"
        self.settled, self.reason = ok, why
        pdc = self.pdc_w[-1] if self.pdc_w else float("nan")
        pl = self.pload_w[-1] if self.pload_w else float("nan")
        return ok, f"cycle {n}: Pdc {pdc:.5g} W, Pload {pl:.5g} W; {why}"


# ---------------------------------------------------------------- nulling the slow bias mode

#: cycle boundaries (cycles completed) at which the auxiliary bias sources are corrected
CORRECT_AT = (6, 10, 14, 18, 22)
#: cycles per stop once the corrections are done
LATE_CHUNK_CYCLES = 2


@dataclass(frozen=True)
class AuxSource:
    """One auxiliary DC source added for the bias correction (see :func:`with_aux_sources`).

    ``kind`` is ``"feed"`` (a current source across a feed element, A) or ``"block"`` (a voltage
    source in series with a DC-block capacitor, V); ``element`` its netlist name; ``node`` the
    node whose cycle mean it steers (the block's DC side) or the saved feed current vector
    (``l_feed#branch``); ``base``, ``slope``: that quantity's periodic cycle mean is
    ``base + slope*Idc`` (from two DC operating points).
    """

    kind: str
    element: str
    vector: str
    base: float
    slope: float


def with_aux_sources(netlist: str, feeds, blocks, dc_a: dict, dc_b: dict, idc_a: float,
                     idc_b: float) -> tuple[str, list[AuxSource]]:
    """The transient netlist with zero-valued auxiliary DC sources at the feed and DC-block elements.

    ``I_AUX_FEED<k> a b DC 0`` in parallel with each feed element ``X a b`` and
    ``V_AUX_BLOCK<k> d aux_blk<k> DC 0`` in series with each block capacitor on its DC side
    ``d`` (the node with the larger DC voltage). At zero they change nothing; a constant value
    changes no periodic voltage or current of the real circuit except the split of DC current
    between the feed and its source, and the DC voltage of the capacitor (both dissipate no
    average power in the periodic state: their DC quantity times a zero-mean partner).

    Parameters
    ----------
    feeds, blocks : sequence of str
        Element names (``L_feed``, ``C_block``); names not in the netlist are skipped.
    dc_a, dc_b : dict
        DC operating points of the passive network (``run_op`` vectors) with the drain sinking
        ``idc_a`` and ``idc_b`` A; the periodic cycle means are affine in the mean drain current
        (the network is linear; over a period an inductor's mean voltage and a capacitor's mean
        current vanish, so the cycle means satisfy the DC equations).

    Returns
    -------
    (netlist, sources)
    """
    lines = netlist.splitlines()
    index = {}
    for n, raw in enumerate(lines):
        toks = raw.split()
        if toks and not raw.lstrip().startswith(("*", "+", ".")):
            index[toks[0].upper()] = n
    out_extra: list[str] = []
    sources: list[AuxSource] = []
    span = idc_b - idc_a

    def affine(key: str) -> tuple[float, float]:
        a, b = float(dc_a.get(key, 0.0)), float(dc_b.get(key, 0.0))
        slope = (b - a) / span
        return a - slope * idc_a, slope

    for k, name in enumerate(feeds):
        n = index.get(name.upper())
        if (n is None or not name.upper().startswith("L")
                or n + 1 < len(lines) and lines[n + 1].lstrip().startswith("+")):
            continue
        toks = lines[n].split()
        src = f"I_AUX_FEED{k or ''}"
        out_extra.append(f"{src} {toks[1]} {toks[2]} DC 0")
        vec = f"{toks[0].lower()}#branch"
        base, slope = affine(vec)
        sources.append(AuxSource("feed", src.lower(), vec, base, slope))
    for k, name in enumerate(blocks):
        n = index.get(name.upper())
        if n is None or n + 1 < len(lines) and lines[n + 1].lstrip().startswith("+"):
            continue
        toks = lines[n].split()
        va = 0.0 if toks[1] in ("0", "gnd") else float(dc_a.get(toks[1].lower(), 0.0))
        vb = 0.0 if toks[2] in ("0", "gnd") else float(dc_a.get(toks[2].lower(), 0.0))
        side = 1 if abs(va) >= abs(vb) else 2
        node = toks[side]
        if node in ("0", "gnd"):
            continue
        src, aux = f"V_AUX_BLOCK{k or ''}", f"aux_blk{k}"
        toks[side] = aux
        lines[n] = " ".join(toks)
        out_extra.append(f"{src} {node} {aux} DC 0")
        base, slope = affine(node.lower())
        sources.append(AuxSource("block", src.lower(), node.lower(), base, slope))
    if not sources:
        return netlist, []
    at = max(i for i, ln in enumerate(lines) if ln.strip()) if lines else 0
    if lines[at].strip().lower().startswith(".end"):
        lines[at:at] = out_extra
    else:
        lines += out_extra
    return "\n".join(lines) + "\n", sources


@dataclass
class BiasNulling(SettleCheck):
    """A :class:`SettleCheck` that also steers the auxiliary bias sources at cycle boundaries.

    At each cycle count in ``correct_at`` (a deadbeat step on the two slow states):
    Idc = cycle-mean drain current; each block source moves by the error of its DC node's cycle
    mean against ``base + slope*Idc``; each feed source is set so that feed element + source
    carry ``base + slope*Idc``. Cycle means are extrapolated half a cycle to the boundary with
    the last two cycles' trend. After the last correction the sources stay constant (the circuit
    is then exactly equivalent to the real one) and the judge sees only the cycles after it.
    """

    sources: list = field(default_factory=list)
    correct_at: tuple = CORRECT_AT
    late_chunk_cycles: int = LATE_CHUNK_CYCLES
    values: dict = field(default_factory=dict)
    log: list = field(default_factory=list)
    scale_idc: bool = True

    def _end(self, name: str, k: int) -> float:
        """Cycle mean of ``name`` extrapolated to the boundary after cycle k: two-cycle means
        (a period-2 component of line designs cancels), trend from the two pairs before."""
        m = self.means[name] if name != "vidrain#branch" else self.idrain_a
        last, prev = 0.5 * (m[k - 1] + m[k - 2]), 0.5 * (m[k - 3] + m[k - 4])
        return last + 0.5 * (last - prev)

    def __call__(self, t_end: float, vecs):
        ok, message = super().__call__(t_end, vecs)
        n = len(self.pdc_w)
        T = self.period_s
        pending = [c for c in self.correct_at if c > n]
        if n in self.correct_at and self.sources and n >= 4 and len(self.idrain_a) >= n:
            idc = self._end("vidrain#branch", n)
            if self.scale_idc:
                feed = [x for x in self.sources if x.kind == "feed"]
                blk = [x for x in self.sources if x.kind == "block"]
                if feed and blk:
                    f_now = self._end(feed[0].vector, n) + self.values.get(feed[0].element, 0.0)
                    vd = self._end(blk[0].vector, n)
                    vt = blk[0].base + blk[0].slope * f_now
                    idc = f_now * vt / vd if vd > 0 else idc
            cmds = []
            for src in self.sources:
                target = src.base + src.slope * idc
                old = self.values.get(src.element, 0.0)
                if src.kind == "block":
                    new = old - (self._end(src.vector, n) - target)
                else:
                    new = target - self._end(src.vector, n)
                self.values[src.element] = new
                cmds.append(f"alter {src.element} dc = {new:.12g}")
            self.log.append((n, idc, dict(self.values)))
            self.judge_from = n
            ok, self.settled = False, False
            message += f"; bias correction at cycle {n}"
            nxt = pending[0] if pending else n + self.late_chunk_cycles
            return False, message, engine.Resume(tuple(cmds), (nxt + 1e-6) * T)
        if ok:
            return ok, message
        nxt = pending[0] if pending else n + self.late_chunk_cycles
        return False, message, engine.Resume((), (nxt + 1e-6) * T)


# ---------------------------------------------------------------- warm start

def dc_initial_conditions(op_netlist: str, tran_netlist: str, *, backend: str = "shared",
                          timeout_s: float = 60.0, op: dict | None = None) -> dict[str, float]:
    """Initial conditions from a DC operating point of the passive network.

    Every inductor of the op netlist gets its DC branch current (A), every capacitor
    its DC voltage (V, first node minus second); the device's ``COUT`` gets the DC
    drain voltage. Only elements that exist in ``tran_netlist`` are returned, keyed
    by their netlist spelling (``L_feed``). ``op``: the op netlist's vectors when already run.
    """
    if op is None:
        op = engine.run_op(op_netlist, backend=backend, timeout_s=timeout_s)
    elems = netlist_elements(op_netlist)
    tran = {k.upper(): v for k, v in netlist_elements(tran_netlist).items()}

    def volt(node: str) -> float:
        node = node.lower()
        return 0.0 if node in ("0", "gnd") else float(op.get(node, 0.0))

    ic: dict[str, float] = {}
    for key, tokens in elems.items():
        if key not in tran:
            continue
        name = tran[key][0]
        if key.startswith("L"):
            ic[name] = float(op.get(key.lower() + "#branch", 0.0))
        elif key.startswith("C"):
            ic[name] = volt(tokens[1]) - volt(tokens[2])
    if "COUT" in tran:
        ic[tran["COUT"][0]] = volt("drain")
    return ic


# ---------------------------------------------------------------- simulation

def _save_list(elements: dict) -> tuple[list[str], list[str]]:
    nodes = {"drain", "vdd", "load"}
    all_nodes = {t.lower() for toks in elements.values() for t in toks[1:3]}
    if "gate" in all_nodes:
        nodes.add("gate")
    for key, toks in elements.items():
        if key.startswith("RLOSS_"):
            nodes.update(t.lower() for t in toks[1:3] if t not in ("0", "gnd"))
    branches = [f"{s.lower()}#branch" for s in ("VDD", "VIDRAIN", "VISW", "VDRIVE") if s in elements]
    return sorted(nodes), branches


def _final_waveforms(vecs, f0_hz: float, ppc: int, nodes: list[str], elements: dict) -> tuple:
    T = 1.0 / f0_hz
    t = np.asarray(vecs["time"], dtype=float)
    end = math.floor(t[-1] / T * (1 + 1e-12)) * T
    start = end - 2 * T
    if start < t[0] - 1e-6 * T:
        raise SimulationError("The transient run ended before two full cycles were simulated; "
                              "raise sim.max_cycles.")
    grid = start + np.arange(2 * ppc) * (T / ppc)
    v = {n: np.interp(grid, t, vecs[n]) for n in nodes if n in vecs}
    i = {}
    if "vidrain#branch" in vecs:
        i["drain"] = np.interp(grid, t, vecs["vidrain#branch"])
    if "visw#branch" in vecs:
        i["switch"] = np.interp(grid, t, vecs["visw#branch"])
    if "vdd#branch" in vecs:
        i["supply"] = -np.interp(grid, t, vecs["vdd#branch"])
    if "vdrive#branch" in vecs:
        i["gate"] = -np.interp(grid, t, vecs["vdrive#branch"])
    # extremes: the median over the kept periods of each period's extreme (a narrow edge spike
    # whose height depends on where the simulator's points fall differs from period to period;
    # what every period does is the amplifier's)
    k_avail = int(math.floor((end - max(t[0], end - FOURIER_PERIODS * T)) / T * (1 + 1e-9)))
    per = [window_peaks(t, vecs, end - (j + 1) * T, end - j * T) for j in range(max(k_avail, 1))]
    peaks = {key: float(np.median([p[key] for p in per])) for key in per[0]}
    return grid - start, v, i, int(round(end / T)), peaks


def window_peaks(t: np.ndarray, vecs, start_s: float, end_s: float) -> dict[str, float]:
    """Extremes of the drain voltage and current over [start_s, end_s] from the simulator's own points.

    The uniform output grid interpolates between ngspice's time points and can step over a
    switching spike narrower than one grid step; every grid value lies between two
    simulator points, so these extremes are never smaller than the grid's.

    Parameters
    ----------
    t : ndarray
        ngspice's time points, s (increasing).
    vecs : mapping
        ``drain`` (V) and ``vidrain#branch`` (A, into the device's drain) where saved.
    start_s, end_s : float
        The window, s; the values interpolated at both ends are included.

    Returns
    -------
    dict
        ``vd_max_v``, ``vd_min_v`` (V), ``id_max_a``, ``id_min_a`` (A); keys whose vector
        is missing are left out.
    """
    t = np.asarray(t, dtype=float)
    inside = (t >= start_s) & (t <= end_s)
    peaks: dict[str, float] = {}
    for name, key, unit in (("drain", "vd", "v"), ("vidrain#branch", "id", "a")):
        if name not in vecs:
            continue
        y = np.asarray(vecs[name], dtype=float)
        ends = np.interp([start_s, end_s], t, y)
        values = np.concatenate([y[inside], ends])
        peaks[f"{key}_max_{unit}"] = float(values.max())
        peaks[f"{key}_min_{unit}"] = float(values.min())
    return peaks


#: Waveforms.fourier key -> (saved vector, sign): currents follow the Waveforms.i conventions
FOURIER_VECTORS = {
    "drain_v": ("drain", 1.0), "load_v": ("load", 1.0), "vdd_v": ("vdd", 1.0), "gate_v": ("gate", 1.0),
    "drain_i": ("vidrain#branch", 1.0), "switch_i": ("visw#branch", 1.0),
    "supply_i": ("vdd#branch", -1.0), "gate_i": ("vdrive#branch", -1.0),
}


def window_fourier(t: np.ndarray, vecs, start_s: float, period_s: float, periods: int,
                   n_max: int) -> dict[str, np.ndarray]:
    """Exact Fourier coefficients c_0..c_nmax over the final window from the simulator's own points.

    Parameters
    ----------
    t : ndarray
        ngspice's time points, s.
    vecs : mapping
        Saved vectors (``drain``, ``load``, ``vidrain#branch``, ``vdd#branch`` ...).
    start_s, period_s : float
        Window start (phase reference) and period, s.
    periods : int
        Window length in periods.
    n_max : int
        Highest harmonic.

    Returns
    -------
    dict
        The keys of :data:`FOURIER_VECTORS` whose vector was saved (``drain_v``, ``drain_i``,
        ``load_v``, ``supply_i`` ...), each :func:`netgen.analysis.fourier_pwl` of the vector
        (sign as in ``Waveforms.i``: supply and gate currents positive when delivered).
    """
    out: dict[str, np.ndarray] = {}
    for key, (name, sign) in FOURIER_VECTORS.items():
        if name in vecs:
            out[key] = sign * fourier_pwl(t, np.asarray(vecs[name], dtype=float), start_s, period_s,
                                          n_max, periods)
    return out


def simulate_netlist(make_tran: Callable[[dict | None, float], str], *, f0_hz: float, vdd_v: float,
                     sim: SimSpec | None = None, make_op: Callable[[float], str] | None = None,
                     idc_est_a: float | None = None, progress: Callable[[str], None] | None = None,
                     backend: str | None = None, feeds=(), blocks=()) -> Waveforms:
    """Run a transient netlist to periodic steady state.

    Parameters
    ----------
    make_tran : callable (ic, tstop_s) -> str
        Returns the ngspice transient netlist with the given initial conditions
        (element name -> A or V; None for none) and stop time, s.
    f0_hz, vdd_v : float
        Fundamental, Hz; supply voltage, V (Pdc = vdd_v * mean supply current).
    sim : SimSpec
        ``settle_tol``, ``min_cycles``, ``max_cycles``, ``timeout_s``, ``points_per_cycle``,
        ``warm_start``, ``backend``.
    make_op : callable (idc_a) -> str, optional
        The DC operating-point netlist of the passive network with the drain sinking
        ``idc_a``; needed for the warm start.
    idc_est_a : float, optional
        Expected DC current, A (the first warm start).
    feeds, blocks : sequence of str, optional
        Element names of the DC-feed inductors and DC-block capacitors (``L_feed``,
        ``C_block``). With the warm start, auxiliary sources there null the slow bias mode
        (:func:`with_aux_sources`, :class:`BiasNulling`); without them the run is plain.

    Returns
    -------
    Waveforms
        Two periods on a uniform grid, ``settled``, ``cycles`` (all attempts), ``history``.
    """
    sim = sim or SimSpec()
    backend = backend or sim.backend
    T = 1.0 / f0_hz
    tstop = sim.max_cycles * T
    probe = make_tran(None, tstop)
    elements = netlist_elements(probe)
    rload = _rload(elements)
    nodes, branches = _save_list(elements)
    save = nodes + branches
    warm = bool(sim.warm_start and make_op is not None and idc_est_a is not None)
    ic = None
    sources: list[AuxSource] = []
    if warm:
        op_netlist = make_op(idc_est_a)
        op = engine.run_op(op_netlist, backend=backend, timeout_s=sim.timeout_s)
        ic = dc_initial_conditions(op_netlist, probe, op=op)
    netlist = make_tran(ic, tstop)
    if warm and (feeds or blocks):
        idc_b = 0.5 * idc_est_a if idc_est_a else 0.1
        op_b = engine.run_op(make_op(idc_b), backend=backend, timeout_s=sim.timeout_s)
        netlist, sources = with_aux_sources(netlist, feeds, blocks, op, op_b, idc_est_a, idc_b)
    if sources:
        extra = tuple(sorted({s_.vector for s_ in sources}))
        save = save + [v for v in extra if v not in save]
        check = BiasNulling(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                            min_cycles=sim.min_cycles, extra=extra, sources=sources,
                            scale_idc=any(k.startswith("S") for k in elements),)
        chunk = (CORRECT_AT[0] + 1e-6) * T
    else:
        check = SettleCheck(period_s=T, vdd_v=vdd_v, rload_ohm=rload, tol=sim.settle_tol,
                            min_cycles=sim.min_cycles)
        chunk = CHUNK_CYCLES * T
    vecs = engine.run_transient(netlist, save=save, backend=backend, timeout_s=sim.timeout_s,
                                stop_check=check, chunk_s=chunk, progress=progress,
                                keep_s=(FOURIER_PERIODS + 1) * T)
    check = vecs.checker
    t_s, v, i, end_cycles, peaks = _final_waveforms(vecs, f0_hz, sim.points_per_cycle, nodes, elements)
    # the harmonic table averages FOURIER_PERIODS settled periods (fewer when the run is short)
    t_all = np.asarray(vecs["time"], dtype=float)
    k_avail = int(math.floor((end_cycles * T - t_all[0]) / T * (1 + 1e-9)))
    k_f = max(2, min(FOURIER_PERIODS, k_avail - k_avail % 2))
    coeffs = window_fourier(t_all, vecs, (end_cycles - k_f) * T, T, k_f, int(sim.harmonics))
    settled = bool(check.settled)
    if settled:
        note = check.reason + (" (warm start, bias mode nulled)" if sources else
                               " (warm start)" if warm else " (cold start)")
    else:
        note = (f"not settled within sim.max_cycles = {sim.max_cycles}: {check.reason}; "
                "raise sim.max_cycles" + ("" if warm else " or set sim.warm_start = true"))
    return Waveforms(f0_hz=f0_hz, t_s=t_s, v=v, i=i, settled=settled, cycles=len(check.pdc_w),
                     history={"pdc_w": np.array(check.pdc_w), "pload_w": np.array(check.pload_w)},
                     note=note, peaks=peaks, fourier=coeffs)


def simulate(sized: SizedDesign, *, progress: Callable[[str], None] | None = None,
             backend: str | None = None) -> Waveforms:
    """Simulate a sized design to periodic steady state (see the module docstring).

    Uses ``netgen.render.render(sized, mode="tran", ic=..., tstop_s=...)`` and, for the
    warm start, ``render(sized, mode="op", idc_a=...)``.
    """
    from . import render as _render  # written alongside; imported late so the engine works alone

    design = sized.design

    def make_tran(ic, tstop_s):
        return _render.render(sized, mode="tran", ic=ic, tstop_s=tstop_s)

    def make_op(idc_a):
        return _render.render(sized, mode="op", idc_a=idc_a)

    from .sizing import element_name

    def names(role: str) -> list[str]:
        return [element_name(c.name) for c in sized.components.values() if c.role == role]

    return simulate_netlist(make_tran, f0_hz=design.f0_hz, vdd_v=design.vdd_v, sim=design.sim,
                            make_op=make_op, idc_est_a=sized.idc_est_a, progress=progress,
                            backend=backend, feeds=names("feed"), blocks=names("block"))
