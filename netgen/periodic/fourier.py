"""Exact Fourier integrals of piecewise-linear waveforms (the simulator's own points).

A transient simulator returns samples joined by straight lines; integrating that polyline
exactly against cos/sin (instead of resampling it onto a uniform grid for an FFT) keeps a
short, sharp feature, such as a 4f0 short seen by a switch, where it is. Used by the settle
judge, the harmonic table of a settled run and the metrics.

Convention: x(t) = c0 + sum_n |c_n| cos(n w0 t + angle(c_n)).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["fourier", "fourier_series", "fourier_pwl", "periods_in", "pwl_mean_square"]



def periods_in(t_s: np.ndarray, f0_hz: float) -> int:
    """Number of whole periods a uniform grid (end excluded) spans.

    Raises
    ------
    ValueError
        If the grid is not uniform or does not span a whole number of periods.
    """
    t_s = np.asarray(t_s, dtype=float)
    if t_s.size < 4:
        raise ValueError("the waveform grid has fewer than 4 points")
    dt = np.diff(t_s)
    if not np.allclose(dt, dt[0], rtol=1e-6, atol=0.0):
        raise ValueError("the waveform time grid is not uniform; resample before analysis")
    span = t_s.size * dt[0] * f0_hz
    periods = int(round(span))
    if periods < 1 or abs(span - periods) > 1e-6 * max(span, 1.0):
        raise ValueError(f"the waveform grid spans {span:.6g} periods, not a whole number")
    return periods


def fourier(x: np.ndarray, periods: int, n_max: int | None = None) -> np.ndarray:
    """Complex Fourier coefficients c_0..c_nmax of a sampled periodic signal.

    Parameters
    ----------
    x : ndarray
        Samples on a uniform grid spanning exactly ``periods`` periods (end excluded).
    periods : int
        Number of whole periods in ``x`` (coherent sampling: harmonic n sits
        exactly in DFT bin n*periods, no window needed).
    n_max : int, optional
        Highest harmonic returned (default: all up to Nyquist).

    Returns
    -------
    ndarray of complex
        ``c[0]`` is the mean (real); for n >= 1
        x(t) = c0 + sum_n |c_n| cos(n w0 t + angle(c_n)), i.e. c_n = 2 X[n p]/N
        with X the DFT (Fourier series, any signals-and-systems textbook).
    """
    x = np.asarray(x, dtype=float)
    spec = np.fft.rfft(x) / x.size
    n_avail = (spec.size - 1) // periods
    if n_max is None:
        n_max = n_avail
    if n_max > n_avail:
        raise ValueError(f"harmonic {n_max} is above Nyquist ({n_avail}) for this grid; use more points per cycle")
    out = spec[: n_max * periods + 1 : periods].copy()
    out[1:] *= 2.0
    out[0] = out[0].real
    return out


#: below this |z| = n w h / 2 the segment kernel g(z) = (sin z - z cos z)/z^3 uses its Taylor series
_SERIES_Z = 0.1


def _kernel_g(z: np.ndarray) -> np.ndarray:
    """g(z) = (sin z - z cos z) / z^3, with its Taylor series 1/3 - z^2/30 + z^4/840 - z^6/45360 near 0."""
    z = np.asarray(z, dtype=float)
    out = np.empty_like(z)
    small = np.abs(z) < _SERIES_Z
    zs = z[small] ** 2
    out[small] = 1.0 / 3.0 - zs / 30.0 + zs**2 / 840.0 - zs**3 / 45360.0
    zl = z[~small]
    out[~small] = (np.sin(zl) - zl * np.cos(zl)) / zl**3
    return out


def _clip_window(t: np.ndarray, x: np.ndarray, t0: float, t1: float) -> tuple[np.ndarray, np.ndarray]:
    """The points of (t, x) strictly inside (t0, t1) with interpolated values added at both ends
    (``x`` 1-D, or 2-D with one signal per row on the common time base ``t``)."""
    inside = (t > t0) & (t < t1)
    rows = np.atleast_2d(x)
    ends = np.array([np.interp([t0, t1], t, r) for r in rows])
    xw = np.concatenate((ends[:, :1], rows[:, inside], ends[:, 1:]), axis=1)
    return np.concatenate(([t0], t[inside], [t1])), (xw if np.ndim(x) == 2 else xw[0])


def fourier_pwl(t_s: np.ndarray, x: np.ndarray, t0_s: float, period_s: float, n_max: int,
                periods: int = 1) -> np.ndarray:
    """Exact Fourier coefficients of the piecewise-linear signal through the simulator's points.

    ngspice returns its solution at non-uniform time points (short steps at the switching
    instants, sometimes two points at nearly the same time across a jump). This integrates the
    straight lines between those points in closed form, so no resampling moves a jump.

    Parameters
    ----------
    t_s : ndarray
        Time points, s, non-decreasing (repeated times allowed: a zero-width segment adds nothing).
    x : ndarray
        Values at ``t_s`` (any unit); 2-D for several signals on the same time points (one per
        row: the segment kernels are computed once for all of them).
    t0_s : float
        Start of the window, s; the phase reference (t = t0 is phase 0).
    period_s : float
        The period T = 1/f0, s.
    n_max : int
        Highest harmonic returned.
    periods : int
        Window length in periods (k): [t0, t0 + k T]. The points must cover it (to within
        1e-4 T, the end value held); the first and last segments are clipped at the window ends
        by linear interpolation.

    Returns
    -------
    ndarray of complex, length n_max + 1 (rows x (n_max + 1) for a 2-D ``x``)
        ``c[0]`` the mean (real); for n >= 1, x(t) = c0 + sum |c_n| cos(n w0 (t - t0) + angle c_n),
        the convention of :func:`fourier`.

    Notes
    -----
    Fourier series (any signals-and-systems textbook): c_n = (2/(kT)) int x(t) e^{-j n w0 (t - t0)} dt.
    On a segment [a, b] of length h, midpoint m, mean value xm = (x_a + x_b)/2, with
    Omega = n w0 and z = Omega h / 2, the integral of the straight line is (by direct integration)

    .. math:: e^{-j\\Omega (m - t_0)}\\, h\\,[x_m\\,\\mathrm{sinc}(z) - j (x_b - x_a)\\,\\tfrac{z}{2}\\, g(z)],
              \\quad g(z) = \\frac{\\sin z - z\\cos z}{z^3}

    with sinc(z) = sin z / z; g uses its Taylor series for |z| < 0.1 (no cancellation for the
    picosecond segments at a switching edge). n = 0 gives the trapezoidal mean.
    """
    t = np.asarray(t_s, dtype=float)
    xv = np.asarray(x, dtype=float)
    if t.ndim != 1 or t.size < 2 or xv.ndim not in (1, 2) or xv.shape[-1] != t.size:
        raise ValueError("fourier_pwl needs two 1-D arrays of equal length (at least two points)")
    span = periods * period_s
    t1 = t0_s + span
    tol = 1e-4 * period_s  # ngspice's first stored point can sit a few fs after t = 0: held constant
    if t[0] > t0_s + tol or t[-1] < t1 - tol:
        raise ValueError(f"the time points cover [{t[0]:.6g}, {t[-1]:.6g}] s, not the window "
                         f"[{t0_s:.6g}, {t1:.6g}] s")
    tw, xw = _clip_window(t, xv, t0_s, t1)
    xw = np.atleast_2d(xw)
    h = np.diff(tw)
    mid = 0.5 * (tw[1:] + tw[:-1]) - t0_s
    xm = 0.5 * (xw[:, 1:] + xw[:, :-1])
    dx = np.diff(xw, axis=1)
    w0 = 2.0 * math.pi / period_s
    n = np.arange(n_max + 1, dtype=float)[:, None]
    z = 0.5 * n * w0 * h[None, :]
    rot = np.exp(-1j * n * w0 * mid[None, :]) * h[None, :] / span   # (n, segments)
    a = rot * np.sinc(z / math.pi)
    b = rot * (-0.5j * z * _kernel_g(z))
    c = xm @ a.T + dx @ b.T                                          # (rows, n)
    c[:, 1:] *= 2.0
    c[:, 0] = c[:, 0].real
    return c if xv.ndim == 2 else c[0]


def pwl_mean_square(t_s: np.ndarray, x: np.ndarray, t0_s: float, t1_s: float) -> float:
    """Exact mean of x^2 over [t0, t1] for the piecewise-linear signal through (t, x).

    A straight line from x_a to x_b over h integrates to h (x_a^2 + x_a x_b + x_b^2)/3
    (direct integration).
    """
    tw, xw = _clip_window(np.asarray(t_s, float), np.asarray(x, float), t0_s, t1_s)
    h = np.diff(tw)
    a, b = xw[:-1], xw[1:]
    return float(np.sum(h * (a * a + a * b + b * b)) / 3.0 / (t1_s - t0_s))


#: ``fourier`` under the name the package exports: ``netgen.periodic.fourier`` is this module once
#: any module of the package imports it, so the function cannot be reached by that name
fourier_series = fourier
