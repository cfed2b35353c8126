"""Harmonic load-pull at the intrinsic plane: an ideal device against ideal frequency-selective terminations.

The rest of the output network is removed: the drain is fed from Vdd through an ideal choke
(DC short to the supply) and sees, at each harmonic n f0 of the period, an impedance Z_n that the
study sets directly (Z_1 over a Smith-chart grid, Z_2 and Z_3 swept in phase at a reflection
magnitude, or short/open/any value). The periodic state is solved per harmonic bin, with no
netlist: the estimate path's idea (netgen.periodic.estimator) with the impedance injected
per bin instead of assembled from parts. Nothing here is an ngspice run.

The device (:class:`IdealDevice`)
---------------------------------
``current``: an ideal current source with a drive waveform d(t) >= 0 (a half sine of peak Imax,
class B; or Raab's current of largest I1/Idc with even harmonics up to m), a knee and a
reverse diode: ``i = d(t) tanh(max(v, 0)/Vk) + g_r min(v, 0)``, g_r = Imax/Vk (the knee
Vk = 0.1 % of Vdd by default: the source cannot pull the drain below ~0 V).
``switch``: conductance 1/Ron for a fraction ``duty`` of the period centred on t = 0, 1/Roff off.

Equations
---------
On M points a period, bin k (harmonic k) of the drain voltage V_k and of the current into the
device I_k obey ``V_k = Vdd delta_k0 - Z_k I_k``, written ``a_k V_k + b_k I_k = a_k Vdd delta_k0``
with (a, b) = (1, Z_k) for |Z_k| <= Z0 and (1/Z_k, 1) above (an open is (0, 1): I_k = 0), so shorts
and opens are both well posed. In the time domain these are circulant operators; with the
device law i(v) Newton's method solves ``A v + B i(v) = c`` (dense M x M Jacobian ``A + B diag(di/dv)``,
Armijo backtracking, continuation from a soft knee to the set one). A switch is linear: one solve.

Outputs per point: drain efficiency P1/Pdc with P1 = -Re(V1 I1*)/2 (power delivered at f0 at the
drain; Cripps, "RF Power Amplifiers for Wireless Communications"), Pout = P1, Pdc, peak and
minimum drain voltage.
"""

from __future__ import annotations

import cmath
import math
import re
from dataclasses import dataclass, field

import numpy as np

from netgen.errors import DesignError

__all__ = [
    "LP_POINTS",
    "NEWTON_MAX",
    "IdealDevice",
    "LoadPullPlan",
    "Termination",
    "drive_current",
    "free_open_harmonics",
    "make_loadpull_plan",
    "parse_termination",
    "raab_coefficients",
    "raab_current",
    "solve_point",
    "solve_waveforms",
]

#: grid points a period of the load-pull solve
LP_POINTS = 256
#: Newton iterations per continuation step
NEWTON_MAX = 60
#: default knee as a fraction of Vdd
KNEE_FRACTION = 1e-3


# ---------------------------------------------------------------- the device

def raab_coefficients(m: int) -> tuple[list[int], np.ndarray, float]:
    """(orders, a_n, peak) of Raab's current ``1 + sum a_n cos(n theta)`` with DC, the fundamental
    and even harmonics 2..m of largest I1/Idc (Idc = 1), and its peak (at theta = 0).

    The linear programme of Raab, "Maximum efficiency and output of class-F power amplifiers",
    IEEE Trans. MTT 2001 (maximise I1 subject to i(theta) >= 0 on a fine grid), solved with
    scipy.optimize.linprog; m = 1 gives 1 + cos, m = 2 gives 1 + sqrt(2) cos + cos(2)/2.
    """
    from scipy.optimize import linprog

    if m < 1:
        raise DesignError(f"--current even:{m}: give m >= 1.")
    orders = [1] + list(range(2, m + 1, 2))
    theta = np.linspace(0.0, np.pi, 4001)  # even in theta: cosines only
    # variables: coefficients of cos(n theta) for n in orders; i = 1 + sum a_n cos(n theta) >= 0
    A = -np.cos(np.outer(theta, orders))
    res = linprog(c=-np.eye(len(orders))[0], A_ub=A, b_ub=np.ones(theta.size), bounds=[(None, None)] * len(orders),
                  method="highs")
    if not res.success:  # pragma: no cover - the programme is always feasible (a = 0)
        raise DesignError(f"--current even:{m}: the linear programme failed ({res.message}).")
    return orders, np.asarray(res.x, dtype=float), float(1.0 + np.sum(res.x))


def raab_current(m: int, points: int = LP_POINTS) -> np.ndarray:
    """Raab's current of :func:`raab_coefficients` sampled on ``points`` (peak at t = 0), clipped at 0."""
    orders, a, _peak = raab_coefficients(m)
    th = 2 * np.pi * np.arange(points) / points
    i = 1.0 + np.cos(np.outer(th, orders)) @ a
    return np.maximum(i, 0.0)


def drive_current(kind: str, imax_a: float, points: int = LP_POINTS) -> np.ndarray:
    """Drive waveform d(t) of the current source: ``half-sine`` (peak ``imax_a``, class B) or
    ``even:m`` (:func:`raab_current`, scaled to peak ``imax_a``)."""
    th = 2 * np.pi * np.arange(points) / points
    if kind in ("half-sine", "half_sine", "class-b"):
        return imax_a * np.maximum(np.cos(th), 0.0)
    m = re.fullmatch(r"even:(\d+)", kind)
    if m:
        i = raab_current(int(m.group(1)), points)
        return imax_a * i / i.max()
    raise DesignError(f"--current {kind!r}: use half-sine or even:M (Raab's current with even harmonics up to M).")


def free_open_harmonics(device: "IdealDevice", plan: "LoadPullPlan") -> list[int]:
    """Harmonics n >= 2 terminated open somewhere in the study where the current source's drive
    has no component (|I_n| below 1e-9 |I_1|: a half sine's odd harmonics, Raab's even:M current's
    odd ones): the drain voltage there is held only where the knee touches, so it, and the peak
    drain voltage, are nearly undetermined (docs/closure.md); efficiency and P1 are not (V_n I_n = 0).
    Empty for the switch, whose current follows the drain voltage."""
    if device.kind != "current":
        return []
    spectrum = np.abs(np.fft.rfft(drive_current(device.current, 1.0, device.points)))
    out = []
    for t in plan.terms:
        n = t.harmonic
        if n >= 2 and n < spectrum.size and any(not np.isfinite(complex(z)) for z in t.values) \
                and spectrum[n] < 1e-9 * spectrum[1]:
            out.append(n)
    return out


@dataclass(frozen=True)
class IdealDevice:
    """The ideal device at the intrinsic plane (see the module docstring)."""

    kind: str
    vdd_v: float
    imax_a: float
    current: str = "half-sine"
    vknee_v: float | None = None
    ron_ohm: float = 0.0
    roff_ohm: float = 1e9
    duty: float = 0.5
    points: int = LP_POINTS

    @property
    def knee_v(self) -> float:
        return self.vknee_v if self.vknee_v else KNEE_FRACTION * self.vdd_v


# ---------------------------------------------------------------- terminations

@dataclass(frozen=True)
class Termination:
    """The values one harmonic takes over the study: a list of impedances (ohm; inf = open)
    with their axis labels (reflection magnitude and phase against Z0)."""

    harmonic: int
    values: tuple
    kind: str  # fixed, grid, ring
    text: str = ""


def _gamma_to_z(g: complex, z0: float) -> complex:
    return complex(np.inf) if abs(1 - g) < 1e-15 else z0 * (1 + g) / (1 - g)


def parse_termination(text: str, n: int, z0_ohm: float) -> Termination:
    """One harmonic's termination: ``short``, ``open``, ``R+jX`` (ohm, e.g. ``20+5j``), ``C=2pF``
    (a capacitor), ``gamma:MAG@DEG``, ``ring:MAG:N`` (N phases at |Gamma| = MAG), or
    ``grid:N[:MAX]`` (a square grid of N x N reflection coefficients inside |Gamma| <= MAX,
    default 0.95), all against Z0."""
    t = text.strip().lower().replace(" ", "")
    where = "--rest" if n == 0 else (f"--z{n} {text!r}" if n <= 3 else f"--zn {n}={text!r}")
    if t == "short":
        return Termination(n, (0j,), "fixed", text)
    if t == "open":
        return Termination(n, (complex(np.inf),), "fixed", text)
    m = re.fullmatch(r"ring:([0-9.]+):(\d+)", t)
    if m:
        mag, k = float(m.group(1)), int(m.group(2))
        if not 0 <= mag <= 1 or k < 1:
            raise DesignError(f"{where}: write ring:MAG:N with 0 <= MAG <= 1 and N >= 1.")
        gs = [mag * cmath.exp(2j * math.pi * j / k) for j in range(k)]
        return Termination(n, tuple(_gamma_to_z(g, z0_ohm) for g in gs), "ring", text)
    m = re.fullmatch(r"grid:(\d+)(?::([0-9.]+))?", t)
    if m:
        k, rmax = int(m.group(1)), float(m.group(2) or 0.95)
        if k < 2 or not 0 < rmax < 1:
            raise DesignError(f"{where}: write grid:N[:MAX] with N >= 2 and 0 < MAX < 1.")
        axis = np.linspace(-rmax, rmax, k)
        gs = [complex(x, y) for y in axis for x in axis if abs(complex(x, y)) <= rmax + 1e-12]
        return Termination(n, tuple(_gamma_to_z(g, z0_ohm) for g in gs), "grid", text)
    m = re.fullmatch(r"gamma:([0-9.]+)@([-+0-9.]+)", t)
    if m:
        g = float(m.group(1)) * cmath.exp(1j * math.radians(float(m.group(2))))
        return Termination(n, (_gamma_to_z(g, z0_ohm),), "fixed", text)
    m = re.fullmatch(r"c=(.+)", t)
    if m:
        from netgen.design import parse_quantity

        c = parse_quantity(m.group(1), "F", where)
        return Termination(n, (("C", c),), "fixed", text)
    try:
        z = complex(t.replace("i", "j"))
    except ValueError:
        raise DesignError(f"{where}: write short, open, R+jX (ohm), C=VALUE, gamma:MAG@DEG, ring:MAG:N or grid:N.") from None
    if z.real < 0:
        raise DesignError(f"{where}: a passive termination has Re(Z) >= 0.")
    return Termination(n, (z,), "fixed", text)


def _z_at(value, n: int, f0_hz: float) -> complex:
    if isinstance(value, tuple):  # ("C", farads)
        return 1.0 / (1j * 2 * math.pi * n * f0_hz * value[1]) if value[1] > 0 else complex(np.inf)
    return complex(value)


# ---------------------------------------------------------------- one point

def solve_point(device: IdealDevice, z_n: dict[int, complex], *, rest=0j, f0_hz: float = 1.0, z0_ohm: float = 1.0) -> dict:
    """The periodic state of the device against Z_n (n = 1, 2, ...; others ``rest``).

    Parameters
    ----------
    device : IdealDevice
    z_n : dict of harmonic -> complex ohm (``inf`` = open) or ("C", farads)
    rest : complex or ("C", farads)
        Termination of every harmonic not in ``z_n`` (default a short).
    f0_hz : float
        Fundamental (only for capacitor terminations), Hz.
    z0_ohm : float
        Scale that separates the impedance and admittance forms (numerics only).

    Returns
    -------
    dict
        ``drain_efficiency``, ``pout_w`` (P1 at the drain), ``pdc_w``, ``idc_a``, ``peak_vd_v``,
        ``min_vd_v``, ``peak_vd_over_vdd``, ``v_n``/``i_n`` (complex peak amplitudes, n = 0..5), ``newton``
        (iterations), ``settled`` (True: solved).

    Raises
    ------
    ArithmeticError
        When Newton's method does not converge.
    """
    v, i, iters = solve_waveforms(device, z_n, rest=rest, f0_hz=f0_hz, z0_ohm=z0_ohm)
    return _point_metrics(device, v, i, iters)


def solve_waveforms(device: IdealDevice, z_n: dict[int, complex], *, rest=0j, f0_hz: float = 1.0,
                    z0_ohm: float = 1.0) -> tuple[np.ndarray, np.ndarray, int]:
    """(drain voltage in V, current into the device in A, Newton iterations) of :func:`solve_point`,
    on the device's grid of ``points`` a period from t = 0."""
    M = int(device.points)
    K = M // 2 + 1
    z = np.array([_z_at(z_n.get(k, rest), k, f0_hz) if k else 0j for k in range(K)], dtype=complex)
    z[-1] = complex(z[-1].real, 0.0) if np.isfinite(z[-1]) else z[-1]
    big = ~np.isfinite(z) | (np.abs(z) > z0_ohm)
    a = np.where(big, 0j, 1.0 + 0j)
    b = z.copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        a[big] = np.where(np.isfinite(z[big]), 1.0 / z[big], 0.0)
    b[big] = 1.0
    c = np.zeros(K, complex)
    c[0] = a[0] * device.vdd_v * M
    idx = (np.arange(M)[:, None] - np.arange(M)[None, :]) % M
    A, B = np.fft.irfft(a, M)[idx], np.fft.irfft(b, M)[idx]
    cc = np.fft.irfft(c, M)
    if device.kind == "switch":
        th = 2 * np.pi * np.arange(M) / M
        on = np.cos(th) >= math.cos(math.pi * device.duty)
        g = np.where(on, 1.0 / max(device.ron_ohm, 1e-6), 1.0 / device.roff_ohm)
        v = np.linalg.solve(A + B * g[None, :], cc)
        return v, g * v, 1
    return _newton(device, A, B, cc)


def _newton(device: IdealDevice, A: np.ndarray, B: np.ndarray, cc: np.ndarray):
    d = drive_current(device.current, device.imax_a, device.points)
    vk_final = device.knee_v
    gr = device.imax_a / vk_final

    def law(v, vk):
        pos = np.maximum(v, 0.0)
        th = np.tanh(pos / vk)
        return d * th + gr * np.minimum(v, 0.0), np.where(v > 0, d * (1 - th**2) / vk, gr)

    v = np.full(A.shape[0], device.vdd_v)
    steps = [f * device.vdd_v for f in (0.3, 0.1, 0.03, 0.01) if f * device.vdd_v > vk_final] + [vk_final]
    total = 0
    scale = device.vdd_v * math.sqrt(A.shape[0])
    for vk in steps:
        for _ in range(NEWTON_MAX):
            total += 1
            i, g = law(v, vk)
            r = A @ v + B @ i - cc
            n0 = float(np.linalg.norm(r))
            if n0 < 1e-11 * scale:
                break
            dv = np.linalg.solve(A + B * g[None, :], -r)
            lam = 1.0
            while True:
                vn = v + lam * dv
                rn = A @ vn + B @ law(vn, vk)[0] - cc
                if float(np.linalg.norm(rn)) <= (1 - 0.25 * lam) * n0 or lam < 1e-4:
                    break
                lam *= 0.5
            v = vn
        else:
            raise ArithmeticError(f"the load-pull point did not converge in {NEWTON_MAX} Newton steps")
    return v, law(v, vk_final)[0], total


def _point_metrics(device: IdealDevice, v: np.ndarray, i: np.ndarray, iters: int) -> dict:
    M = v.size
    V = np.fft.rfft(v) / M
    I = np.fft.rfft(i) / M
    V[1:] *= 2
    I[1:] *= 2
    idc = float(I[0].real)
    pdc = device.vdd_v * idc
    p1 = float(-0.5 * (V[1] * np.conj(I[1])).real)
    return {"engine": "loadpull", "settled": True, "drain_efficiency": p1 / pdc if pdc > 0 else None,
            "pout_w": p1, "pdc_w": pdc, "idc_a": idc, "peak_vd_v": float(v.max()), "min_vd_v": float(v.min()),
            "peak_vd_over_vdd": float(v.max() / device.vdd_v), "newton": iters,
            "v_n": [[float(x.real), float(x.imag)] for x in V[:6]],
            "i_n": [[float(x.real), float(x.imag)] for x in I[:6]]}


# ---------------------------------------------------------------- the plan

@dataclass
class LoadPullPlan:
    """The product of the harmonic terminations (first given fastest last, as in a sweep)."""

    device: IdealDevice
    terms: list[Termination]
    z0_ohm: float
    f0_hz: float
    rest: object = 0j
    rest_text: str = "short"
    extra: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(len(t.values) for t in self.terms)

    @property
    def n_points(self) -> int:
        return int(np.prod(self.shape)) if self.terms else 1

    def point(self, idx: int) -> dict:
        """``z`` {harmonic: value} and ``axes`` (re/im of Z and |Gamma|, angle per harmonic) of point ``idx``."""
        js = np.unravel_index(idx, self.shape)
        z, axes = {}, {}
        for t, j in zip(self.terms, js):
            val = t.values[int(j)]
            z[t.harmonic] = val
            zz = _z_at(val, t.harmonic, self.f0_hz)
            g = 1.0 + 0j if not np.isfinite(zz) else (zz - self.z0_ohm) / (zz + self.z0_ohm)
            axes[f"z{t.harmonic}_re_ohm"] = float(zz.real) if np.isfinite(zz) else "open"
            axes[f"z{t.harmonic}_im_ohm"] = float(zz.imag) if np.isfinite(zz) else "open"
            axes[f"gamma{t.harmonic}_mag"] = float(abs(g))
            axes[f"gamma{t.harmonic}_deg"] = float(math.degrees(cmath.phase(g)))
        return {"z": z, "axes": axes}

    def spec(self) -> dict:
        d = self.device
        return {"kind": "loadpull", "device": [d.kind, d.vdd_v, d.imax_a, d.current, d.knee_v, d.ron_ohm, d.duty, d.points],
                "terms": [[t.harmonic, t.text] for t in self.terms], "z0_ohm": self.z0_ohm, "f0_hz": self.f0_hz,
                "rest": self.rest_text}

    def run(self, idx: int) -> dict:
        return solve_point(self.device, self.point(idx)["z"], rest=self.rest, f0_hz=self.f0_hz, z0_ohm=self.z0_ohm)


def make_loadpull_plan(device: IdealDevice, *, z0_ohm: float, f0_hz: float, terms: dict[int, str],
                       rest: str = "short") -> LoadPullPlan:
    """Parse the terminations (harmonic -> text, see :func:`parse_termination`) into a plan."""
    if z0_ohm <= 0:
        raise DesignError(f"--z0 {z0_ohm:g}: the reference impedance must be positive.")
    if 1 not in terms:
        raise DesignError("--z1: give the fundamental termination (e.g. grid:15 or 25+10j).")
    parsed = [parse_termination(text, n, z0_ohm) for n, text in sorted(terms.items())]
    bad = [n for n in terms if not 1 <= n < device.points // 2]
    if bad:
        raise DesignError(f"--zn {bad[0]}: harmonics go from 1 to {device.points // 2 - 1}.")
    r = parse_termination(rest, 0, z0_ohm)
    if r.kind != "fixed":
        raise DesignError(f"--rest {rest!r}: the other harmonics take one value (short, open, R+jX or C=VALUE).")
    return LoadPullPlan(device, parsed, z0_ohm, f0_hz, r.values[0], rest)
