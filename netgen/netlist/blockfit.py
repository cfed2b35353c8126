"""The rational fit of a Touchstone block, its passivity, and the SPICE subcircuit ngspice runs.

Vector fitting (B. Gustavsen and A. Semlyen, "Rational approximation of frequency domain
responses by vector fitting", IEEE Trans. Power Delivery 14(3), 1999) as scikit-rf implements it
(``skrf.vectorFitting.VectorFitting.vector_fit``), on the file's points above 0 Hz. With
``block.order = 0`` the orders 1, 2, ... are tried in turn (real poles + 2 x complex pairs) and
the first fit is kept whose worst error ``max |S_fit - S_file|`` over the points from DC to
N f0 (DC: the file's lowest point, see netgen.netlist.touchstone) is within ``block.fit_tol`` and
whose poles lie below :data:`POLE_LIMIT` times the file's top angular frequency (a pole far above
the data is unconstrained by it and makes the trapezoidal integration ring: the rule's
amplification of a mode p h >> 1 is close to -1).

Passivity of the fit is tested with scikit-rf's half-size test matrix (``passivity_test``;
B. Gustavsen and A. Semlyen, IEEE Trans. MTT 56(12), 2008); where that test cannot be formed
(a direct term with a singular value exactly 1) the largest singular value is sampled on a dense
grid to 100 x the top frequency. A non-passive fit is enforced (``passivity_enforce``: singular
value perturbation, T. Dhaene, D. Deschrijver and N. Stevens, IEEE Trans. MTT 57(2), 2009) and
tested again, or refused, as ``block.passivity`` says.

The subcircuit is scikit-rf's ``write_spice_subcircuit_s`` (the state-space realisation of
S. Grivet-Talocia and B. Gustavsen, "Passive Macromodeling", Wiley 2016): R, C, V, G and F
cards only, each port referred to ground. It runs in ngspice 39 (tests/test_touchstone.py) and
is inside the portable dialect's rules (F and G are SPICE3 elements).
"""

from __future__ import annotations

import copy
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from netgen.errors import DesignError

__all__ = ["Fit", "fit_block", "subckt_text", "POLE_LIMIT", "MAX_AUTO_ORDER"]

#: poles above this multiple of the file's top angular frequency make a fit unusable
POLE_LIMIT = 50.0
#: highest order block.order = 0 tries
MAX_AUTO_ORDER = 30
#: pole-relocation iterations per attempt (scikit-rf's default is 100; a good order converges in a few)
_ITERATIONS = 30


@dataclass(frozen=True)
class Fit:
    """A rational fit ``S(s) = D + sum_k R_k / (s - p_k)`` (conjugate pairs implied).

    Attributes
    ----------
    order : int
        Real poles + 2 x complex pairs.
    poles : ndarray (K,)
        rad/s; one of each conjugate pair (positive imaginary part), as scikit-rf stores them.
    residues : ndarray (n*n, K)
    constant : ndarray (n*n,)
    worst_error : float
        max |S_fit - S_file| over the points from DC to ``check_to_hz``.
    worst_at_hz : float
    passivity : str
        ``passive`` (as fitted) or ``enforced``.
    vf : object
        The scikit-rf VectorFitting object (writes the subcircuit).
    """

    order: int
    poles: np.ndarray = field(repr=False)
    residues: np.ndarray = field(repr=False)
    constant: np.ndarray = field(repr=False)
    worst_error: float = 0.0
    worst_at_hz: float = 0.0
    passivity: str = "passive"
    vf: object = field(default=None, repr=False, compare=False)

    def response(self, s: np.ndarray) -> np.ndarray:
        """S (len(s), n, n) at complex frequencies ``s`` (rad/s)."""
        return _response(self.poles, self.residues, self.constant, np.asarray(s, dtype=complex))


def _response(poles, residues, constant, s) -> np.ndarray:
    n = int(round(np.sqrt(len(constant))))
    out = np.tile(constant.astype(complex), (len(s), 1))
    for k, p in enumerate(poles):
        out += residues[None, :, k] / (s[:, None] - p)
        if p.imag != 0:
            out += np.conj(residues[None, :, k]) / (s[:, None] - np.conj(p))
    return out.reshape(len(s), n, n)


def _model(vf) -> tuple:
    return (np.asarray(vf.poles, dtype=complex).copy(), np.asarray(vf.residues, dtype=complex).copy(),
            np.asarray(vf.constant_coeff, dtype=float).copy())


def _error(model, f_hz, s, check_to_hz) -> tuple[float, float]:
    """Worst |S_fit - S_file| over the points up to check_to_hz, DC (the lowest point) included."""
    sel = f_hz <= check_to_hz * (1 + 1e-9)
    f = np.concatenate([[0.0], f_hz[sel]])
    ref = np.concatenate([s[:1], s[sel]])
    got = _response(*model, 1j * 2 * np.pi * f)
    err = np.abs(got - ref).reshape(len(f), -1).max(axis=1)
    i = int(np.argmax(err))
    return float(err[i]), float(f[i])


def _orders(order: int):
    """(real, complex-pair) pole counts to try: the given order, or 1..MAX_AUTO_ORDER."""
    for m in ([order] if order else range(1, MAX_AUTO_ORDER + 1)):
        seen = []
        for nr in (m % 2, m % 2 + 2):
            nc = (m - nr) // 2
            if nc >= 0 and nr + 2 * nc == m and (nr, nc) not in seen:
                seen.append((nr, nc))
                yield m, nr, nc


def _try_fit(ntw, nr: int, nc: int):
    from skrf.vectorFitting import VectorFitting

    vf = VectorFitting(ntw)
    vf.max_iterations = _ITERATIONS
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            vf.vector_fit(n_poles_real=nr, n_poles_cmplx=nc, fit_constant=True, fit_proportional=False,
                          enforce_dc=False)
    except (np.linalg.LinAlgError, ValueError, ZeroDivisionError, FloatingPointError):
        return None
    if vf.poles is None or not (np.all(np.isfinite(vf.poles)) and np.all(np.isfinite(vf.residues))
                                and np.all(np.isfinite(vf.constant_coeff))):
        return None
    return vf


def fit_block(f_hz: np.ndarray, s: np.ndarray, z0_ohm: np.ndarray, *, order: int, fit_tol: float,
              passivity: str, check_to_hz: float, name: str) -> Fit:
    """Fit the file's data (see the module docstring) and make the fit passive or refuse it.

    Parameters
    ----------
    f_hz, s, z0_ohm : ndarray
        The file's frequencies (Hz), S-parameters (K, n, n) and real port references (ohm).
    order : int
        ``block.order`` (0: lowest order meeting ``fit_tol``).
    fit_tol : float
        Largest allowed |S_fit - S_file| from DC to ``check_to_hz``.
    passivity : {"enforce", "refuse"}
    check_to_hz : float
        N f0, Hz.
    name : str
        The file's name, for messages.

    Raises
    ------
    DesignError
        No order meets the tolerance, or the fit is not passive (and may not or cannot be made so).
    """
    import skrf

    pos = f_hz > 0
    if pos.sum() < 2:
        raise DesignError(f"block.file: '{name}' needs at least two points above 0 Hz for the rational fit.")
    ntw = skrf.Network(frequency=skrf.Frequency.from_f(f_hz[pos], unit="Hz"), s=s[pos],
                       z0=np.tile(z0_ohm, (int(pos.sum()), 1)))
    w_top = 2 * np.pi * f_hz[-1]
    best = None  # (error, order, vf)
    for m, nr, nc in _orders(order):
        vf = _try_fit(ntw, nr, nc)
        if vf is None or np.max(np.abs(vf.poles)) > POLE_LIMIT * w_top:
            continue
        err, _ = _error(_model(vf), f_hz, s, check_to_hz)
        if best is None or err < best[0]:
            best = (err, m, vf)
        if err <= fit_tol:
            break
    if best is None or best[0] > fit_tol:
        got = "no usable fit" if best is None else f"the best fit (order {best[1]}) is off by {best[0]:.3g}"
        tried = f"order {order}" if order else f"orders 1 to {MAX_AUTO_ORDER}"
        raise DesignError(f"block.file: no rational fit of '{name}' meets block.fit_tol = {fit_tol:g} ({tried}: {got}); "
                          "raise block.fit_tol or set block.order.")
    _, m, vf = best
    how = "passive"
    bands = _violations(vf, f_hz[-1])
    if len(bands):
        where = f"{bands[0][0]:.4g} to {bands[0][1]:.4g} Hz"
        if passivity == "refuse":
            raise DesignError(f"block.file: the rational fit of '{name}' (order {m}) is not passive ({where}); "
                              "set block.passivity = \"enforce\" or try another block.order.")
        vf, how = _enforce(vf, bands, f_hz, s, check_to_hz, fit_tol)
        if vf is None:
            raise DesignError(f"block.file: the rational fit of '{name}' (order {m}) is not passive ({where}) and "
                              f"enforcement did not make it so within block.fit_tol = {fit_tol:g}; try another "
                              "block.order or check the file.")
    model = _model(vf)
    err, at = _error(model, f_hz, s, check_to_hz)
    if err > fit_tol:
        raise DesignError(f"block.file: after passivity enforcement the fit of '{name}' is off by {err:.3g} at "
                          f"{at:.6g} Hz, more than block.fit_tol = {fit_tol:g}; raise block.fit_tol or set block.order.")
    return Fit(order=m, poles=model[0], residues=model[1], constant=model[2], worst_error=err, worst_at_hz=at,
               passivity=how, vf=vf)


def _enforce(vf, bands, f_hz, s, check_to_hz, fit_tol):
    """A passive copy of the fit and how it was made so, or (None, "") when neither way keeps the
    error within fit_tol: scikit-rf's ``passivity_enforce`` first; failing that, all residues and
    the direct term scaled by 1/sigma_peak (sigma_peak the largest singular value found in the
    violation bands), which bounds ||S||_2 by 1 at the cost of at most sigma_peak - 1 in |S|
    (our own simple fallback for fits that touch 1 where the data are lossless, e.g. a series
    capacitor at DC or a shunt capacitor at high frequencies)."""
    trial = copy.deepcopy(vf)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            trial.passivity_enforce(f_max=f_hz[-1])
        ok = not _violations(trial, f_hz[-1]) and _error(_model(trial), f_hz, s, check_to_hz)[0] <= fit_tol
    except (np.linalg.LinAlgError, ValueError, RuntimeError):
        ok = False
    if ok:
        return trial, "enforced"
    peak = _peak_sigma(vf, bands, f_hz[-1])
    trial = copy.deepcopy(vf)
    scale = 1.0 / (peak * (1 + 1e-9))
    trial.residues = trial.residues * scale
    trial.constant_coeff = trial.constant_coeff * scale
    if not _violations(trial, f_hz[-1]) and _error(_model(trial), f_hz, s, check_to_hz)[0] <= fit_tol:
        return trial, "enforced"
    return None, ""


def _peak_sigma(vf, bands, f_top_hz: float) -> float:
    """Largest singular value of the fit sampled densely in each violation band (and at infinity)."""
    poles, residues, constant = _model(vf)
    n = int(round(np.sqrt(len(constant))))
    peak = float(np.linalg.svd(constant.reshape(n, n), compute_uv=False).max())
    for a, b in bands:
        hi = min(b, max(10 * a, 100 * f_top_hz)) if np.isfinite(b) else max(10 * a, 100 * f_top_hz)
        f = np.unique(np.concatenate([np.linspace(a, hi, 4001), np.geomspace(max(a, 1e-3), hi, 4001)]))
        sig = np.linalg.svd(_response(poles, residues, constant, 1j * 2 * np.pi * f), compute_uv=False)
        peak = max(peak, float(sig.max()))
    return peak


def _violations(vf, f_top_hz: float) -> list:
    """Frequency bands (Hz) where the fit is not passive: scikit-rf's test, or a sampled check."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            bands = vf.passivity_test()
        return [tuple(b) for b in np.atleast_2d(bands) if len(b) == 2]
    except (np.linalg.LinAlgError, ValueError):
        f = np.concatenate([np.linspace(0, f_top_hz, 2001), np.geomspace(f_top_hz, 100 * f_top_hz, 2001)])
        sig = np.linalg.svd(_response(*_model(vf), 1j * 2 * np.pi * f), compute_uv=False).max(axis=1)
        bad = f[sig > 1 + 1e-9]
        return [(float(bad[0]), float(bad[-1]))] if len(bad) else []


def subckt_text(fit: Fit, name: str, label: str) -> str:
    """The fit as ``.subckt <name> p1 [p2] ... .ends`` (scikit-rf's writer; our comment lines)."""
    with tempfile.TemporaryDirectory(prefix="netgen-block-") as tmp:
        out = Path(tmp) / "block.sub"
        fit.vf.write_spice_subcircuit_s(str(out), fitted_model_name=name)
        body = out.read_text(encoding="ascii")
    label = label.encode("ascii", "replace").decode("ascii").replace("?", "_")
    lines = [f"* Touchstone block {label}: rational fit of order {fit.order} (scikit-rf vector fitting), "
             f"worst |dS| {fit.worst_error:.3g}, {fit.passivity}"]
    lines += [ln.rstrip() for ln in body.splitlines() if ln.strip() and not ln.lstrip().startswith("*")]
    return "\n".join(lines)
