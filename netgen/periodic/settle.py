"""Convergence to periodic steady state, judged from per-cycle values (used by netgen.periodic.steady).

:func:`judge` decides from per-cycle powers, drain harmonics, harmonic impedances and switching
peaks whether a run has settled; :class:`SettleCheck` is the picklable ``stop_check`` that the
engine runs after every chunk of a transient, computing those per-cycle values from the
simulator's own points (:func:`netgen.results.analysis.fourier_pwl`). The rules are in the docstring of
:func:`judge` and in docs/simulation.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from netgen import simulator

from .pwl_fourier import _clip_window, fourier_pwl, pwl_mean_product, pwl_mean_square

__all__ = ["judge", "settle_hint", "SettleCheck", "Anchor", "window_peaks", "HARMONICS_JUDGED", "LATE_CHUNK_CYCLES",
           "Z_CHANGE_TOL", "Z_SCALE_FRACTION", "Z_CURRENT_FLOOR", "NOISE_FRACTION", "NOISE_SIGMAS",
           "PEAK_TOL", "ANCHOR_Z_TOL"]

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
#: standard errors of a window mean within which a change of a harmonic impedance counts as the
#: simulator's scatter (runs started on the periodic estimate only, see judge)
NOISE_SIGMAS = 3.0
#: largest change of the window-median per-cycle drain peak (voltage and current) between windows
#: of a run that is not on the estimated orbit (see judge)
PEAK_TOL = 0.03
#: a run's window-mean harmonic impedance within this fraction of max(|Z_n|, Z_SCALE_FRACTION |Z_1|)
#: of the periodic estimate's counts as "on the estimated orbit" (measured agreement: 0.01-8 %,
#: the larger values at harmonic shorts of lossless-line designs, docs/simulation.md)
ANCHOR_Z_TOL = 0.1


#: cycles per stop once the first judged chunk is done
LATE_CHUNK_CYCLES = 2


@dataclass(frozen=True)
class Anchor:
    """What the periodic estimate a run started from predicts (:mod:`netgen.periodic.estimator`).

    ``pdc_w``, ``pload_w``: one cycle's DC and load power, W; ``z``: V_n/I_n of the drain
    voltage and the current into the device, n = 0..HARMONICS_JUDGED (complex, ohm; NaN where
    the current is zero).
    """

    pdc_w: float
    pload_w: float
    z: np.ndarray


def _scatter(x: np.ndarray) -> float:
    """Cycle-to-cycle scatter of a per-cycle series (rms of consecutive differences / sqrt 2):
    the standard deviation of white noise, insensitive to a slow trend."""
    d = np.diff(np.asarray(x), axis=0)
    return float(np.sqrt(np.mean(np.abs(d) ** 2 if d.ndim == 1 else np.sum(np.abs(d) ** 2, axis=1)) / 2.0))


def judge(series: dict[str, np.ndarray], waves: np.ndarray | None, tol: float,
          min_cycles: int, iwaves: np.ndarray | None = None,
          anchor: Anchor | None = None, peaks: dict | None = None,
          pin_w: np.ndarray | None = None) -> tuple[bool, str]:
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
    anchor : Anchor or None
        The periodic estimate the run started from. When the last window's powers agree with it
        within tol (the run is on the estimated orbit, so no large transient is decaying), a
        change between windows that the simulator's own cycle-to-cycle scatter explains
        (``NOISE_SIGMAS`` standard errors of a window-mean difference) is not taken for drift:
        in the powers, the drain waveform and -- where the window-mean Z_n also lies within
        ``ANCHOR_Z_TOL`` of the estimate's -- the harmonic impedances. Lossless-line designs
        scatter by 0.1-3 % of |Z_1| per cycle at the harmonic shorts and opens whatever the run
        length (measured on sims/*.toml, docs/simulation.md); without an anchor such scatter
        keeps the run going until two windows happen to agree.
    peaks : dict of name -> ndarray, optional
        Each cycle's largest drain voltage (``vd_max_v``) and current (``id_max_a``). Off the
        estimated orbit (a DC or cold start, whose transients move the whole waveform) the
        median of the last window must lie within ``PEAK_TOL`` of the window before. On the
        orbit the smooth part of the peaks is right from the first cycle, and what changes from
        cycle to cycle are narrow switching spikes on lines, whose period-to-period statistics
        settle in no affordable run (sims/class_f_line.toml: 2.09-4.4 Vdd per period over 1000
        cycles, median 2.66, the smooth waveform 2.09) or only after ~100 cycles
        (class_f_feed.toml: 2.0-2.9 Vdd, then 1.98); the outputs give their range and a warning
        instead (netgen.results.analysis.design_warnings).
    pin_w : ndarray, optional
        Each cycle's drive power delivered into the device input, W (driven devices). A run whose
        last window puts more power into the load than the supply and the drive deliver
        (mean Pload > mean Pdc + mean Pin) is not settled, whatever the trends: in a periodic state
        of a passive network energy is conserved (Tellegen's theorem, any circuit-theory
        textbook), so the surplus is energy stored in the network still leaving it, and the
        efficiency would read above 100 %.

    Returns
    -------
    (settled, reason) : (bool, str)

    Notes
    -----
    Aitken's delta-squared extrapolation on window means (see the module
    docstring): remaining = |d2 * q / (1 - q)| with q = d2/d1 when 0 <= q < 0.95;
    when q is negative (ringing) the bound is max(|d1|, |d2|); when q >= 0.95
    (too slow to extrapolate) the run is not settled unless both differences are
    below the noise floor NOISE_FRACTION*tol (or, on the estimated orbit, within the scatter).

    Length: the settle criteria in the order they are applied (powers, extrapolated drift,
    waveform, harmonic impedances, switching peaks, the estimate as anchor); kept together so
    the verdict's order can be read top to bottom.
    """
    n = min(len(v) for v in series.values()) if series else 0
    if n < max(min_cycles, 6):
        return False, f"only {n} cycles were simulated, fewer than the {max(min_cycles, 6)} needed to judge"
    w = max(2, n // 6)
    spread = NOISE_SIGMAS * math.sqrt(2.0 / w)  # standard errors of a difference of two w-cycle means
    predicted = {"pdc_w": anchor.pdc_w, "pload_w": anchor.pload_w} if anchor is not None else {}
    on_orbit = bool(predicted) and all(
        name in series and abs(float(np.mean(series[name][-w:])) - value) <= tol * abs(value)
        for name, value in predicted.items())
    worst_name, worst = "", 0.0
    for name, values in series.items():
        x = np.asarray(values[-3 * w:], dtype=float)
        s1, s2, s3 = x[:w].mean(), x[w:2 * w].mean(), x[2 * w:].mean()
        scale = max(abs(s3), 1e-30)
        d1, d2 = s2 - s1, s3 - s2
        floor = NOISE_FRACTION * tol * scale
        if on_orbit:
            floor = max(floor, spread * _scatter(x))
        if abs(d1) <= floor and abs(d2) <= floor:
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
        return False, _still_changing(worst_name, worst, w, tol)
    if "pdc_w" in series and "pload_w" in series:
        supplied = float(np.mean(series["pdc_w"][-w:]))
        if pin_w is not None and len(pin_w) >= w:
            supplied += max(float(np.mean(pin_w[-w:])), 0.0)
        surplus = float(np.mean(series["pload_w"][-w:])) - supplied
        if surplus > 0.0:
            return False, (f"the load took {surplus / max(abs(supplied), 1e-30):.2g} more power (relative) than "
                           f"the supply delivered over the last {w} cycles, so energy stored in the network is "
                           "still leaving it")
    if waves is not None and len(waves) >= 2 * w:
        # drain waveform judged on its first harmonics (DC..5f0), which do not jitter with
        # the position of the switching edges on the sampling grid
        a = waves[-2 * w:-w].mean(axis=0)
        b = waves[-w:].mean(axis=0)
        scale = max(float(np.sqrt(np.sum(np.abs(b) ** 2))), 1e-30)
        change = float(np.sqrt(np.sum(np.abs(b - a) ** 2))) / scale
        allowed = max(tol, spread * _scatter(waves[-2 * w:]) / scale) if on_orbit else tol
        if change >= allowed:
            return False, f"the drain waveform is still changing ({change:.2g} relative, tolerance {allowed:.2g})"
        if iwaves is not None and len(iwaves) >= 2 * w:
            ia = iwaves[-2 * w:-w].mean(axis=0)
            ib = iwaves[-w:].mean(axis=0)
            i1 = abs(ib[1])
            z1 = abs(b[1] / ib[1]) if i1 > 0.0 else 0.0
            for k in range(1, min(len(ib), len(b))):
                if abs(ib[k]) < Z_CURRENT_FLOOR * i1 or abs(ia[k]) == 0.0 or abs(b[k]) == 0.0:
                    continue
                za, zb = a[k] / ia[k], b[k] / ib[k]
                scale = max(abs(zb), Z_SCALE_FRACTION * z1)
                zchange = abs(zb - za) / scale
                ztol = min(Z_CHANGE_TOL, Z_TOL_PER_SETTLE_TOL * tol)
                if on_orbit and k < len(anchor.z) and np.isfinite(anchor.z[k]):
                    with np.errstate(all="ignore"):
                        sigma = _scatter(waves[-2 * w:, k] / iwaves[-2 * w:, k])
                    near = abs(zb - anchor.z[k]) <= ANCHOR_Z_TOL * scale + NOISE_SIGMAS * sigma / math.sqrt(w)
                    if np.isfinite(sigma) and near:
                        ztol = max(ztol, spread * sigma / scale)
                if zchange >= ztol:
                    return False, (f"the drain impedance at {k} f0 is still changing ({zchange:.2g} relative "
                                   f"between windows of {w} cycles, tolerance {ztol:.2g})")
    for name, values in (peaks or {}).items() if not on_orbit else ():
        x = np.asarray(values, dtype=float)
        if len(x) < 2 * w:
            continue
        pa, pb = float(np.median(x[-2 * w:-w])), float(np.median(x[-w:]))
        scale = max(abs(pb), 1e-30)
        if abs(pb - pa) <= PEAK_TOL * scale:
            continue
        what = "drain voltage" if name.startswith("vd") else "drain current"
        return False, (f"the peak {what} is still changing ({(pb - pa) / scale:+.2g} relative between windows of "
                       f"{w} cycles, tolerance {PEAK_TOL:g})")
    return True, f"settled after {n} cycles (predicted remaining change {worst:.1e} relative)"


_WHAT = {"pdc_w": "DC power", "pload_w": "load power"}


def _still_changing(name: str, worst: float, w: int, tol: float) -> str:
    """The judge's reason for a power still changing, in words (an infinite prediction means the
    windows did not decay geometrically: a drift too slow to extrapolate)."""
    what = _WHAT.get(name, name)
    if math.isfinite(worst):
        return (f"the {what} is still changing: about {worst:.2g} (relative) of change is predicted to come, "
                f"judged over windows of {w} cycles against a tolerance of {tol:g}")
    return (f"the {what} is still changing: successive windows of {w} cycles keep moving one way, too slowly "
            f"to predict where it ends (tolerance {tol:g})")


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
    #: drive power into the device input per cycle, W (driven devices only)
    pin_w: list = field(default_factory=list)
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
    #: when set, the run stops every ``step_cycles`` cycles after the first chunk (engine Resume)
    step_cycles: int | None = None
    #: the periodic estimate the run started from (see judge)
    anchor: Anchor | None = None
    #: each cycle's largest drain voltage and current (``vd_max_v``, ``id_max_a``)
    peaks: dict = field(default_factory=dict)
    #: sent at the first stop, then cleared (engine Resume): retires the line-history sources
    #: and sets the next stop (netgen.periodic.initial_state.history_release)
    release: object = None
    _buf: dict | None = None

    def _append(self, vecs) -> None:
        names = {"time": "time", "drain": "drain", "load": "load", "supply": "vdd#branch",
                 "idrain": "vidrain#branch", "gate": "gate", "igate": "vdrive#branch"}
        names.update({f"x:{v}": v for v in self.extra})
        new = {k: np.asarray(vecs[v], dtype=float) for k, v in names.items() if v in vecs}
        if "vigate#branch" in vecs:  # behind an input network: the gate's own current (sign of vdrive#branch)
            new["igate"] = -np.asarray(vecs["vigate#branch"], dtype=float)
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
            # resampling: a jump at a switching instant keeps its timing, fourier_pwl), all
            # vectors of the cycle in one call
            tb = buf["time"]
            keys = ["drain", "supply"] + (["idrain"] if "idrain" in buf else []) + \
                [f"x:{v}" for v in self.extra if f"x:{v}" in buf]
            c = dict(zip(keys, fourier_pwl(tb, np.array([buf[k] for k in keys]), t_a, T, HARMONICS_JUDGED)))
            self.pdc_w.append(-self.vdd_v * float(c["supply"][0].real))
            self.pload_w.append(pwl_mean_square(tb, buf["load"], t_a, t_b) / self.rload_ohm)
            self.waves.append(c["drain"])
            if "gate" in buf and "igate" in buf:
                tg, xg = _clip_window(tb, np.array([buf["gate"], buf["igate"]]), t_a, t_b)
                self.pin_w.append(-pwl_mean_product(tg, xg[0], xg[1]))
            cyc = window_peaks(tb, {"drain": buf["drain"], **({"vidrain#branch": buf["idrain"]} if "idrain" in buf else {})},
                               t_a, t_b)
            for key in ("vd_max_v", "id_max_a"):
                if key in cyc:
                    self.peaks.setdefault(key, []).append(cyc[key])
            if "idrain" in c:
                self.idrain_a.append(float(c["idrain"][0].real))
                self.iwaves.append(c["idrain"])
            for v in self.extra:
                if f"x:{v}" in c:
                    self.means.setdefault(v, []).append(float(c[f"x:{v}"][0].real))
            # drop what is no longer needed (keep one point before the next cycle)
            cut = max(int(np.searchsorted(buf["time"], t_b)) - 1, 0)
            for key in buf:
                buf[key] = buf[key][cut:]
        n = len(self.pdc_w)
        j = self.judge_from
        ok, why = judge({"pdc_w": np.array(self.pdc_w[j:]), "pload_w": np.array(self.pload_w[j:])},
                        np.array(self.waves[j:]) if self.waves[j:] else None, self.tol,
                        max(self.min_cycles - j, self.judge_min_after) if j else self.min_cycles,
                        np.array(self.iwaves[j:]) if len(self.iwaves) == len(self.waves) and self.iwaves[j:] else None,
                        self.anchor, {k: np.array(v[j:]) for k, v in self.peaks.items()},
                        np.array(self.pin_w[j:]) if len(self.pin_w) == len(self.pdc_w) and self.pin_w[j:] else None)
        if ok and j:
            why = f"settled after {n} cycles ({n - j} judged after the last bias correction; {why.split('(', 1)[-1]}"
        self.settled, self.reason = ok, why
        pdc = self.pdc_w[-1] if self.pdc_w else float("nan")
        pl = self.pload_w[-1] if self.pload_w else float("nan")
        change = abs(self.pdc_w[-1] - self.pdc_w[-2]) / max(abs(self.pdc_w[-1]), 1e-30) if n >= 2 else float("nan")
        message = f"cycle {n}, change {change:.1e}: Pdc {pdc:.5g} W, Pload {pl:.5g} W; {why}"
        if self.release is not None:
            action, self.release = self.release, None
            if not ok:
                return ok, message, action
        if self.step_cycles and not ok:
            return ok, message, simulator.Resume((), (n + self.step_cycles + 1e-6) * self.period_s)
        return ok, message


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


def settle_hint(reason: str, *, settle_tol: float, max_cycles: int, warm: bool, periodic: bool,
                bias_nulled: bool = False) -> str:
    """What to change when a run did not settle, from the cause the judge saw (its ``reason``).

    Returns one or two sentences naming the keys to change: the judge's reasons are written by
    :func:`judge` in this module, so the classification below follows them.
    """
    tight = settle_tol < 1e-3
    tol_note = (f" sim.settle_tol = {settle_tol:g} is tighter than the default 0.001; loosen it if that "
                "precision is not needed.") if tight else ""
    if "fewer than the" in reason:
        return f"The run was too short to be judged: raise sim.max_cycles (now {max_cycles})."
    if "energy stored in the network" in reason:
        return ("A high-Q network was still giving back the energy of its start-up: raise sim.max_cycles "
                f"(now {max_cycles}) or sim.min_cycles." + tol_note)
    if "impedance at" in reason or "drain waveform" in reason or "peak drain" in reason:
        return ("The harmonics scatter from cycle to cycle (narrow switching edges on a lightly damped line or "
                "resonator): raise sim.average_periods and sim.max_cycles, or give the switch a finite "
                "device.transition or device.cout." + tol_note)
    if "power is still changing" in reason:
        if not warm:
            return ("A slow mode is still decaying from the cold start: set sim.warm_start = true, or raise "
                    f"sim.max_cycles (now {max_cycles})." + tol_note)
        if not periodic:
            what = "the bias mode of the DC feed and block (nulled at the start)" if bias_nulled else \
                "the bias mode of the DC feed and block"
            return (f"A slow mode, most likely {what}, is still decaying: raise sim.max_cycles (now {max_cycles}), "
                    "or give network.feed_l and network.block_c values with a faster bias resonance." + tol_note)
        return (f"A slow mode is still decaying: raise sim.max_cycles (now {max_cycles})." + tol_note)
    return f"Raise sim.max_cycles (now {max_cycles})." + tol_note
