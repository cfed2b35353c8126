"""Touchstone blocks: a measured or EM-simulated network (1- or 2-port) in place of ideal parts.

A design's ``[block]`` table names a Touchstone file (version 1 or 2, read by scikit-rf). This
module reads and checks it (:func:`read_touchstone`), holds the data and its rational fit
(:class:`Block`, made by :func:`design_block`; the fit is :mod:`netgen.netlist.blockfit`), and
evaluates it for the two engines:

* the periodic estimate (netgen.periodic.estimator) stamps the block's S-parameters in every
  frequency bin (:meth:`Block.s_bins`): the file's data, interpolated linearly in real and
  imaginary part between its points, at every bin up to ``sim.harmonics`` x f0 (the file must
  cover f0 .. N f0, or the design is refused naming the file and the missing frequency); DC is
  the file's lowest point (exact when the file has a 0 Hz point: the stated extrapolation is
  "S constant below the lowest point"); bins above the file's last point use the rational fit,
  the same model ngspice integrates;
* ngspice runs the rational fit written as a subcircuit (scikit-rf's
  ``VectorFitting.write_spice_subcircuit_s``), placed inline in the netlist.

The checks a file must pass (each refusal is one sentence naming ``block.file`` and the file):
1 or 2 ports as its extension says, finite data at increasing frequencies, a real reference
impedance per port (a complex or frequency-dependent one is renormalised to 50 ohm), and
passivity of the data: the largest singular value of S at every point at most
1 + :data:`DATA_PASSIVITY_TOL` (a passive network has ||S||_2 <= 1; Pozar, "Microwave
Engineering", lossless and lossy networks).
"""

from __future__ import annotations

import functools
import hashlib
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from netgen.errors import DesignError

__all__ = ["Block", "read_touchstone", "design_block", "DATA_PASSIVITY_TOL", "SUBCKT_NAME", "BLOCK_SUBCKT", "block_cards_ok"]

#: data with a singular value above 1 + this is refused as not passive (measurement noise on a
#: low-loss network stays well below; common practice for VNA data of passive parts)
DATA_PASSIVITY_TOL = 1e-3
#: the subcircuit name of the fitted block in every netlist
SUBCKT_NAME = "NGBLOCK"
BLOCK_SUBCKT = SUBCKT_NAME
#: relative slack on the file's frequency limits (a grid written with rounded frequencies)
_RANGE_SLACK = 1e-9


def _hz(x: float) -> str:
    return f"{x:.6g} Hz"


def read_touchstone(path: Path):
    """The file as a scikit-rf Network with real per-port reference impedances, checked.

    Raises
    ------
    DesignError
        One sentence naming ``block.file`` and the file: unreadable, not Touchstone, wrong port
        count, non-finite or unordered data, or not passive.
    """
    import skrf

    name = path.name
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ntw = skrf.Network(str(path))
    except OSError as exc:
        raise DesignError(f"block.file: cannot read '{name}' ({exc.strerror}); check the file.") from None
    except Exception as exc:  # scikit-rf raises many kinds for malformed files
        reason = " ".join(str(exc).split())[:120] or type(exc).__name__
        raise DesignError(f"block.file: '{name}' is not a Touchstone file scikit-rf can read ({reason}); check the file.") from None
    want = 1 if path.suffix.lower() == ".s1p" else 2
    if ntw.nports != want:
        raise DesignError(f"block.file: '{name}' holds {ntw.nports} ports but its extension says {want}; fix the file or its name.")
    f = np.asarray(ntw.f, dtype=float)
    if len(f) < 2 or not np.all(np.isfinite(f)) or np.any(np.diff(f) <= 0) or f[0] < 0:
        raise DesignError(f"block.file: '{name}' needs at least two points at increasing, non-negative frequencies.")
    if not np.all(np.isfinite(ntw.s)):
        raise DesignError(f"block.file: '{name}' has non-finite S-parameters; check the file.")
    z0 = np.asarray(ntw.z0)
    if np.any(np.abs(z0.imag) > 0) or np.any(np.ptp(z0.real, axis=0) > 0) or np.any(z0.real <= 0):
        ntw = ntw.copy()
        ntw.renormalize(50.0)
    sigma = np.linalg.svd(ntw.s, compute_uv=False).max(axis=1)
    worst = int(np.argmax(sigma))
    if sigma[worst] > 1.0 + DATA_PASSIVITY_TOL:
        raise DesignError(
            f"block.file: '{name}' is not passive (largest singular value of S {sigma[worst]:.4g} > 1 at "
            f"{_hz(f[worst])}); a passive output network has none above 1: check the file and its reference impedance.")
    return ntw


@dataclass(frozen=True)
class Block:
    """A Touchstone block: the file's data, its rational fit and the subcircuit ngspice runs.

    Attributes
    ----------
    path : Path
    sha256 : str
        Digest of the file's bytes.
    section : str
        What it replaces (``block.section``).
    f_hz : ndarray (K,)
        The file's frequencies, Hz.
    s : ndarray (K, n, n)
        The file's S-parameters (reference ``z0_ohm``).
    z0_ohm : ndarray (n,)
        Real reference impedance of each port, ohm.
    f0_hz : float
    n_required : int
        Harmonics the estimate needs from the data (``sim.harmonics``).
    fit : netgen.netlist.blockfit.Fit
    subckt : str
        The ``.subckt NGBLOCK p1 [p2] ... .ends`` text.
    """

    path: Path
    sha256: str
    section: str
    f_hz: np.ndarray = field(repr=False)
    s: np.ndarray = field(repr=False)
    z0_ohm: np.ndarray = field(repr=False)
    f0_hz: float = 0.0
    n_required: int = 1
    fit: object = field(default=None, repr=False)
    subckt: str = field(default="", repr=False)

    @property
    def nports(self) -> int:
        return int(self.s.shape[1])

    @property
    def name(self) -> str:
        return self.path.name

    def s_data(self, f_hz) -> np.ndarray:
        """The file's S at ``f_hz`` (array), linear interpolation of real and imaginary parts;
        below the lowest point the lowest point (the DC rule); above the last point the last point."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        out = np.empty(f.shape + self.s.shape[1:], dtype=complex)
        for i in range(self.nports):
            for j in range(self.nports):
                col = self.s[:, i, j]
                out[..., i, j] = np.interp(f, self.f_hz, col.real) + 1j * np.interp(f, self.f_hz, col.imag)
        return out

    def s_model(self, f_hz) -> np.ndarray:
        """The rational fit's S at ``f_hz`` (the model ngspice integrates)."""
        return self.fit.response(1j * 2 * np.pi * np.atleast_1d(np.asarray(f_hz, dtype=float)))

    def s_at(self, f_hz) -> np.ndarray:
        """The data inside the file's range (and the lowest point below it), the fit above it."""
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        above = f > self.f_hz[-1] * (1 + _RANGE_SLACK)
        out = self.s_data(f)
        if np.any(above):
            out[above] = self.s_model(f[above])
        return out

    def s_bins(self, f_hz: np.ndarray) -> np.ndarray:
        """S for the estimate's bins k = 0..K-1 at frequencies ``f_hz`` (the trapezoidal rule's
        image of k f0, ``(2/h) tan(pi k / M) / (2 pi)``): data for k <= n_required (clipped to the
        file's last point, which the range check put at or above N f0), else :meth:`s_at`."""
        f = np.asarray(f_hz, dtype=float)
        out = self.s_at(f)
        k = np.arange(len(f))
        need = k <= self.n_required
        out[need] = self.s_data(np.minimum(f[need], self.f_hz[-1]))
        return out

    def z_in(self, f_hz, z_load_ohm: float) -> np.ndarray:
        """Input impedance at port 1 with port 2 (2-port) terminated in ``z_load_ohm``, ohm.

        ``Gamma_in = S11 + S12 S21 Gamma_L / (1 - S22 Gamma_L)`` (Pozar, "Microwave Engineering",
        two-port power gains), ``Z = z0 (1 + Gamma)/(1 - Gamma)``."""
        s = self.s_at(f_hz)
        z1 = self.z0_ohm[0]
        if self.nports == 1:
            g = s[..., 0, 0]
        else:
            z2 = self.z0_ohm[1]
            gl = (z_load_ohm - z2) / (z_load_ohm + z2)
            g = s[..., 0, 0] + s[..., 0, 1] * s[..., 1, 0] * gl / (1 - s[..., 1, 1] * gl)
        with np.errstate(divide="ignore", invalid="ignore"):
            return z1 * (1 + g) / (1 - g)

    def summary(self) -> dict:
        """The block's record for metrics.json and the report (docs/metrics.md, ``block``)."""
        fit = self.fit
        return {
            "file": self.name,
            "sha256": self.sha256,
            "section": self.section,
            "ports": self.nports,
            "points": int(len(self.f_hz)),
            "f_min_hz": float(self.f_hz[0]),
            "f_max_hz": float(self.f_hz[-1]),
            "z0_ohm": [float(z) for z in self.z0_ohm],
            "dc": ("the file's 0 Hz point" if self.f_hz[0] == 0 else
                   f"the file's lowest point ({_hz(self.f_hz[0])}) taken as DC"),
            "fit_order": int(fit.order),
            "fit_max_error": float(fit.worst_error),
            "fit_max_error_at_hz": float(fit.worst_at_hz),
            "fit_checked_to_hz": float(self.n_required * self.f0_hz),
            "fit_passivity": fit.passivity,
        }


def _check_range(name: str, f_hz: np.ndarray, f0_hz: float, n: int) -> None:
    lo, hi = f_hz[0] * (1 - _RANGE_SLACK), f_hz[-1] * (1 + _RANGE_SLACK)
    for k in range(1, n + 1):
        f = k * f0_hz
        if not lo <= f <= hi:
            raise DesignError(
                f"block.file: '{name}' covers {_hz(f_hz[0])} to {_hz(f_hz[-1])}, but the simulation needs "
                f"{k} f0 = {_hz(f)} (sim.harmonics = {n}); supply data from f0 to at least {_hz(n * f0_hz)} "
                "or lower sim.harmonics.")


def block_cards_ok(text: str) -> bool:
    """True when ``text`` holds only comments, ``.subckt``/``.ends`` and R, C, L, V, E, F, G cards
    (what a model file may contain: no control, include or analysis cards)."""
    for line in text.splitlines():
        s = line.strip()
        if not s or s.startswith("*"):
            continue
        low = s.lower()
        if low.startswith((".subckt", ".ends")):
            continue
        if s[0].upper() not in "RCLVEFG":
            return False
    return True


@functools.lru_cache(maxsize=16)
def _load(path_text: str, mtime_ns: int, size: int, section: str, order: int, fit_tol: float,
          passivity: str, f0_hz: float, n: int) -> Block:
    from .blockfit import fit_block, subckt_text

    path = Path(path_text)
    try:
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError as exc:
        raise DesignError(f"block.file: cannot read '{path.name}' ({exc.strerror}); check the file.") from None
    ntw = read_touchstone(path)
    f = np.asarray(ntw.f, dtype=float)
    _check_range(path.name, f, f0_hz, n)
    z0 = np.asarray(ntw.z0[0].real, dtype=float)
    s = np.asarray(ntw.s, dtype=complex)
    fit = fit_block(f, s, z0, order=order, fit_tol=fit_tol, passivity=passivity, check_to_hz=n * f0_hz,
                    name=path.name)
    text = subckt_text(fit, SUBCKT_NAME, f"{path.name} sha256 {digest[:16]}")
    return Block(path=path, sha256=digest, section=section, f_hz=f, s=s, z0_ohm=z0, f0_hz=f0_hz,
                 n_required=n, fit=fit, subckt=text)


def design_block(design) -> Block | None:
    """The design's Touchstone block, read, checked and fitted (cached per file state and settings),
    or None when the design has no ``[block]``.

    Raises
    ------
    DesignError
        From the checks above, the range check, or the fit (netgen.netlist.blockfit).
    """
    spec = design.block
    if spec.file is None:
        return None
    path = Path(spec.file)
    try:
        st = path.stat()
    except OSError as exc:
        raise DesignError(f"block.file: cannot read '{path.name}' ({exc.strerror}); check the path.") from None
    return _load(str(path), st.st_mtime_ns, st.st_size, spec.section, int(spec.order), float(spec.fit_tol),
                 spec.passivity, float(design.f0_hz), int(design.sim.harmonics))
