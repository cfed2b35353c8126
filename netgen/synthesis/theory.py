"""Ideal efficiency bounds and closed forms of ideal switching-PA waveforms.

Everything here is computed from its definition (Fourier integrals, a linear
programme over harmonic amplitudes, a direct solve of the class-E conditions)
rather than typed from a table, so the tests can compare it with the published
values.

References
----------
.. [Raab97] F. H. Raab, "Class-F power amplifiers with maximally flat
   waveforms", IEEE Trans. MTT, 1997.
.. [Raab01] F. H. Raab, "Maximum efficiency and output of class-F power
   amplifiers", IEEE Trans. MTT, 2001.
.. [Raab77] F. H. Raab, "Idealized operation of the class E tuned power
   amplifier", IEEE Trans. Circuits and Systems, 1977.
.. [Sokal75] N. O. Sokal and A. D. Sokal, "Class E - a new class of
   high-efficiency tuned single-ended switching power amplifiers", IEEE JSSC, 1975.
.. [Cripps] S. C. Cripps, "RF Power Amplifiers for Wireless Communications".
"""

from __future__ import annotations

import dataclasses
import math
from functools import lru_cache

import numpy as np

__all__ = [
    "max_v1_over_vdc",
    "max_i1_over_idc",
    "raab_max_efficiency",
    "maxflat_voltage_coefficients",
    "maxflat_efficiency",
    "square_wave_harmonics",
    "half_sine_harmonics",
    "class_e_ideal",
    "bound_for",
    "CLASS_B_EFFICIENCY",
]

#: Tuned-load class B: half-sine current, sinusoidal voltage of amplitude Vdd [Cripps].
CLASS_B_EFFICIENCY = math.pi / 4

_GRID = 20001  # constraint points on [0, pi] for the linear programmes


@lru_cache(maxsize=64)
def _lp_max_fundamental(harmonics: tuple[int, ...]) -> float:
    """Largest a1 with 1 + a1 cos(t) + sum_k a_k cos(k t) >= 0 for all t.

    Solved as a linear programme over (a1, a_k) with the non-negativity
    imposed on a dense grid of t in [0, pi] (cosine series are even, so
    [0, pi] covers the period). The optimum waveform touches zero with zero
    slope, so the grid error is O(h^2) ~ 1e-8. (scipy is imported here, not with the module:
    the simulator worker imports this module's importers and never needs it.)
    """
    from scipy.optimize import linprog

    t = np.linspace(0.0, math.pi, _GRID)
    ks = (1,) + harmonics
    # constraint: -(a1 cos t + sum a_k cos kt) <= 1
    a_ub = -np.column_stack([np.cos(k * t) for k in ks])
    b_ub = np.ones_like(t)
    c = np.zeros(len(ks))
    c[0] = -1.0  # maximise a1
    res = linprog(c, A_ub=a_ub, b_ub=b_ub, bounds=[(None, None)] * len(ks), method="highs")
    if not res.success:  # pragma: no cover - the programme is always feasible (a = 0)
        raise RuntimeError(f"linear programme failed: {res.message}")
    return float(res.x[0])


def max_v1_over_vdc(n: float) -> float:
    """Maximum fundamental drain-voltage amplitude V1/Vdc with odd harmonics up to ``n``.

    Parameters
    ----------
    n : int or math.inf
        Highest (odd) voltage harmonic; 1 means a sinusoidal voltage.

    Returns
    -------
    float
        max V1/Vdc subject to v(t) >= 0 [Raab01]; 4/pi (square wave) for n = inf.
    """
    if math.isinf(n):
        return 4.0 / math.pi  # square wave, Fourier series
    n = int(n)
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")
    return _lp_max_fundamental(tuple(range(3, n + 1, 2)))


def max_i1_over_idc(m: float) -> float:
    """Maximum fundamental drain-current amplitude I1/Idc with even harmonics up to ``m``.

    Returns pi/2 (half sine) for m = inf [Raab01].
    """
    if math.isinf(m):
        return math.pi / 2.0  # half-sine current, Fourier series
    m = int(m)
    if m < 1:
        raise ValueError(f"m must be >= 1, got {m}")
    return _lp_max_fundamental(tuple(range(2, m + 1, 2)))


def raab_max_efficiency(n: float, m: float) -> float:
    """Maximum drain efficiency with voltage harmonics up to ``n`` and current harmonics up to ``m``.

    Notes
    -----
    .. math:: \\eta = \\tfrac12 (V_1/V_{dc}) (I_1/I_{dc})

    because odd voltage harmonics and even current harmonics carry no power
    at n >= 2 [Raab01].
    """
    return 0.5 * max_v1_over_vdc(n) * max_i1_over_idc(m)


def maxflat_voltage_coefficients(n: int) -> np.ndarray:
    """Coefficients a_k (k = 1, 3, .., n) of the maximally flat voltage [Raab97].

    v(t)/Vdc = 1 + sum_k a_k cos(k t) with v(0) = 0 and the first (K-1) even
    derivatives zero at t = 0 (K = number of odd harmonics). For n = 3:
    a = (-9/8, 1/8); V1/Vdc = -a_1.
    """
    ks = np.arange(1, n + 1, 2, dtype=float)
    rows = [np.ones_like(ks)] + [ks ** (2 * j) for j in range(1, len(ks))]
    rhs = np.zeros(len(ks))
    rhs[0] = -1.0
    return np.linalg.solve(np.array(rows), rhs)


def maxflat_efficiency(n: int) -> float:
    """Efficiency of a maximally flat voltage (odd harmonics to n) with a half-sine current.

    eta = 1/2 (V1/Vdc)(pi/2) [Raab97]; 88.36 % for n = 3, 92.04 % for n = 5.
    """
    return 0.5 * float(-maxflat_voltage_coefficients(n)[0]) * math.pi / 2.0


def square_wave_harmonics(n_max: int, vdd_v: float = 1.0) -> np.ndarray:
    """Amplitudes V_0..V_nmax of a 50 % square wave swinging 0..2 Vdd (Fourier series).

    V0 = Vdd; V_n = 4 Vdd/(n pi) for odd n; 0 for even n.
    """
    out = np.zeros(n_max + 1)
    out[0] = vdd_v
    for n in range(1, n_max + 1, 2):
        out[n] = 4.0 * vdd_v / (n * math.pi)
    return out


def half_sine_harmonics(n_max: int, imax_a: float = 1.0) -> np.ndarray:
    """Amplitudes I_0..I_nmax of a half-rectified sine of peak ``imax_a`` (Fourier series).

    I0 = Imax/pi; I1 = Imax/2; I_n = 2 Imax/(pi (n^2 - 1)) for even n; 0 for odd n > 1.
    """
    out = np.zeros(n_max + 1)
    out[0] = imax_a / math.pi
    if n_max >= 1:
        out[1] = imax_a / 2.0
    for n in range(2, n_max + 1, 2):
        out[n] = 2.0 * imax_a / (math.pi * (n * n - 1))
    return out


@lru_cache(maxsize=1)
def class_e_ideal(n_harmonics: int = 5) -> dict:
    """Ideal class E (50 % duty, shunt C only, infinite-Q series load), solved directly.

    Off interval 0 <= theta < pi: the shunt capacitor carries Idc - i_o. With
    i_o = Idc (c cos + s sin), the conditions v(pi) = 0 (zero-voltage switching)
    and dv/dtheta(pi) = 0 (zero slope) give c = -1, s = pi/2, hence
    v(theta)/Vdd = pi (theta + sin theta + (pi/2)(cos theta - 1)) [Raab77].
    Everything else (R, C, X, peaks, harmonics) follows from this waveform by
    numerical Fourier integrals on a dense grid.

    Returns
    -------
    dict
        ``r_norm`` R P/Vdd^2 (0.5768), ``wcr`` omega C R (0.1836), ``x_over_r``
        (1.1525), ``peak_v_over_vdd`` (3.562), ``peak_i_over_idc`` (2.862),
        ``im_over_idc`` (1.8621), ``phi_rad`` output current phase (tan = -2/pi),
        ``v_harmonics_over_vdd`` array for n = 1..n_harmonics [Sokal75].
    """
    npts = 200_000
    theta = np.arange(npts) * (2.0 * math.pi / npts)
    off = theta < math.pi
    v = np.where(off, math.pi * (theta + np.sin(theta) + (math.pi / 2.0) * (np.cos(theta) - 1.0)), 0.0)
    # load current / Idc (out of the drain node), and switch current / Idc
    i_o = -np.cos(theta) + (math.pi / 2.0) * np.sin(theta)
    i_sw = np.where(off, 0.0, 1.0 - i_o)
    vdd = float(np.mean(v))  # = 1 by construction (checked in tests)
    coeffs = 2.0 * np.fft.rfft(v)[: n_harmonics + 1] / npts
    v1 = coeffs[1]  # phasor: v = Re(V e^{j theta})
    i1 = complex(-1.0, -math.pi / 2.0)  # phasor of c cos + s sin is c - j s
    z = v1 / i1
    p = 0.5 * (v1 * np.conj(i1)).real  # Vdd = Idc = 1 units
    r = z.real
    return {
        "vdd_check": vdd,
        "r_norm": float(r * p / vdd**2),
        "wcr": float(r / (math.pi * vdd)),  # omega C = Idc/(pi Vdd) from mean(v) = Vdd
        "x_over_r": float(z.imag / z.real),
        "peak_v_over_vdd": float(v.max() / vdd),
        "peak_i_over_idc": float(i_sw.max()),
        "im_over_idc": float(abs(i1)),
        "phi_rad": float(math.atan(-2.0 / math.pi)),
        "efficiency": float(p / (vdd * 1.0)),  # Pout/(Vdd Idc), Idc = 1
        "v_harmonics_over_vdd": np.abs(coeffs[1:]) / vdd,
    }


# ----------------------------------------------------------------- bounds

_SRC_RAAB01 = "Raab, 'Maximum efficiency and output of class-F power amplifiers', IEEE Trans. MTT, 2001"
_SRC_SOKAL = "Sokal & Sokal, IEEE JSSC, 1975; Raab, IEEE Trans. Circuits and Systems, 1977"
_SRC_CRIPPS = "Cripps, 'RF Power Amplifiers for Wireless Communications' (tuned-load class B, pi/4)"


def bound_for(sized) -> dict:
    """Ideal drain-efficiency bound for a sized design, with its name and source.

    Works from ``sized.design.topology`` and ``sized.design.network.harmonics``
    (a :class:`netgen.design.schema.Design` also works). The bound assumes an ideal
    switch and an ideal network of that topology: it is what the harmonics the
    network controls allow, not a prediction for a lossy circuit.

    Choices
    -------
    * class_f_line, class_f_feed: the quarter-wave line presents open circuits
      at every odd and short circuits at every even harmonic: square voltage,
      half-sine current, 100 % [Raab01, n = m = inf].
    * inverse_f_line: the dual (shorts at odd, opens at even): 100 %.
    * class_f_lumped with N resonators: the series resonators open 3f0..(2N+1)f0;
      above that, and at every even harmonic, the shunt f0 tank's capacitor
      is a low impedance. Voltage harmonics up to n = 2N+1, current harmonics
      unlimited (half sine): Raab01 eta(n = 2N+1, m = inf), e.g. 0.9069 (N=1),
      0.9481 (N=2).
    * class_b_tuned: every harmonic shorted: pi/4 [Cripps].
    * with a device output capacitance, the line topologies control the harmonics up to the
      compensator's order (``network.harmonics`` = K): class F opens 3f0 .. (2K+1) f0,
      eta(n = 2K+1, m = inf); inverse F opens 2f0 .. 2K f0, by duality eta(n = inf, m = 2K).
    * class_e: 100 % [Sokal75].
    * a user template: no bound (``efficiency`` None).

    Returns
    -------
    dict
        ``efficiency`` (0..1 or None), ``name`` (saying what it assumes), ``source``; where the
        bound allows only some voltage harmonics, ``voltage_harmonics`` lists them (a simulation
        with voltage elsewhere may beat the bound, and the analysis says so).

    Length: one branch per topology family, each naming its assumptions and source.
    """
    design = getattr(sized, "design", sized)
    topo = design.topology
    dev = design.device
    if (dev.cout_f > 0 or getattr(dev, "package_c_f", 0.0) > 0) and topo in ("class_f_line", "class_f_feed", "inverse_f_line"):
        # the compensator opens the harmonics up to its order; above it Cout shorts them
        # (netgen.synthesis.intrinsic.controlled_pattern)
        k = int(design.network.harmonics)
        if topo == "inverse_f_line":
            return {"efficiency": raab_max_efficiency(math.inf, 2 * k),
                    "name": f"inverse class F with Cout absorbed: voltage harmonics up to {2 * k}f0, square current",
                    "source": _SRC_RAAB01 + f" (dual waveforms), n = infinity, m = {2 * k} (linear programme)"}
        return {"efficiency": raab_max_efficiency(2 * k + 1, math.inf),
                "name": f"class F with Cout absorbed: voltage harmonics up to {2 * k + 1}f0, half-sine current",
                "source": _SRC_RAAB01 + f", n = {2 * k + 1}, m = infinity (linear programme)"}
    if topo in ("class_f_line", "class_f_feed"):
        return {"efficiency": 1.0, "name": "ideal class F (every harmonic controlled by the line)",
                "source": _SRC_RAAB01 + ", n = m = infinity"}
    if topo == "inverse_f_line":
        return {"efficiency": 1.0, "name": "ideal inverse class F (half-sine voltage, square current)",
                "source": _SRC_RAAB01 + " (dual waveforms), n = m = infinity"}
    if topo == "class_f_lumped":
        n_res = int(design.network.harmonics)
        n = 2 * n_res + 1
        return {"efficiency": raab_max_efficiency(n, math.inf),
                "name": f"class F with voltage harmonics up to {n}f0, half-sine current; it assumes an ideal device and "
                        f"zero drain impedance at every even harmonic and above {n}f0",
                "source": _SRC_RAAB01 + f", n = {n}, m = infinity (linear programme)",
                "voltage_harmonics": list(range(1, n + 1, 2))}
    if topo == "class_b_tuned":
        return {"efficiency": CLASS_B_EFFICIENCY, "name": "tuned-load class B (sine voltage, half-sine current); it "
                "assumes an ideal device and every harmonic shorted",
                "source": _SRC_CRIPPS, "voltage_harmonics": [1]}
    if topo == "class_e":
        return {"efficiency": 1.0, "name": "ideal class E (zero-voltage, zero-slope switching)",
                "source": _SRC_SOKAL}
    # a user template: the bound of the built-in sizing it declares ({# sizing: <topology> #}),
    # marked as such, since the template's own network may control other harmonics
    try:
        from netgen.errors import NetgenError

        from .topologies import resolve_topology

        base = resolve_topology(design).name
    except (ImportError, NetgenError):
        return {"efficiency": None, "name": "no ideal bound (user template)", "source": ""}
    bound = bound_for(dataclasses.replace(design, topology=base))
    bound["name"] += f" (user template sized as {base}; valid only if it controls the same harmonics)"
    return bound
