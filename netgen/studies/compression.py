"""Compression points of a drive sweep (P1dB, P3dB): pure functions of the swept curve.

The n-dB compression point is the drive at which the gain has fallen n dB below its
small-signal (low-drive) value (common practice; Cripps, "RF Power Amplifiers for Wireless
Communications", 2nd ed., ch. 1 and 3). A device biased near pinch-off (class B, AB) first shows
gain expansion, so by default the reference is the sweep's highest gain and the crossing is
searched after it (``reference="peak"``); ``reference="low_drive"`` takes the lowest-drive point.
The crossing is found by linear interpolation of the gain against the input power in dBm
between the two points that straddle it.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

__all__ = ["COMPRESSION_LEVELS_DB", "compression_points", "drive_compression"]

#: the compression levels reported, dB
COMPRESSION_LEVELS_DB = (1.0, 3.0)
#: the --vary axis of a drive sweep
DRIVE_AXIS = "drive.pin"


def compression_points(pin_dbm: Sequence[float], pout_dbm: Sequence[float],
                       levels_db: Sequence[float] = COMPRESSION_LEVELS_DB, reference: str = "peak") -> dict:
    """The n-dB compression points of a Pout(Pin) curve.

    Parameters
    ----------
    pin_dbm, pout_dbm : sequences of float
        Input (available) and output power in dBm, one entry per drive level; NaN entries (points
        without a settled result) are left out. Sorted by ``pin_dbm`` here.
    levels_db : sequence of float
        Compression levels, dB (default 1 and 3).
    reference : str
        ``"peak"`` (the highest gain, crossings searched after it) or ``"low_drive"`` (the gain
        of the lowest drive).

    Returns
    -------
    dict
        ``small_signal_gain_db`` (gain Pout - Pin of the lowest drive, dB, or None with no point),
        ``peak_gain_db``, ``reference_gain_db`` (the gain compression is counted from) and
        per level ``p{n}db`` (``p1db``, ``p3db``): ``{"pin_dbm", "pout_dbm", "gain_db"}`` at the
        crossing, or None where the sweep does not reach that compression.
    """
    pts = sorted((float(a), float(b)) for a, b in zip(pin_dbm, pout_dbm)
                 if a is not None and b is not None and math.isfinite(a) and math.isfinite(b))
    if reference not in ("peak", "low_drive"):
        raise ValueError(f"reference must be 'peak' or 'low_drive', not {reference!r}")
    out: dict = {"small_signal_gain_db": None, "peak_gain_db": None, "reference_gain_db": None}
    if not pts:
        for level in levels_db:
            out[_name(level)] = None
        return out
    pin = [p for p, _ in pts]
    gain = [q - p for p, q in pts]
    k0 = max(range(len(gain)), key=gain.__getitem__) if reference == "peak" else 0
    g0 = gain[k0]
    out.update(small_signal_gain_db=gain[0], peak_gain_db=max(gain), reference_gain_db=g0)
    for level in levels_db:
        out[_name(level)] = _crossing(pin[k0:], gain[k0:], g0 - level)
    return out


def _name(level: float) -> str:
    return f"p{level:g}db"


def _crossing(pin: list[float], gain: list[float], g_target: float) -> dict | None:
    """The first point where the gain falls to ``g_target``, interpolated linearly in Pin."""
    for k in range(1, len(pin)):
        if gain[k] <= g_target < gain[k - 1]:
            t = (gain[k - 1] - g_target) / (gain[k - 1] - gain[k])
            p = pin[k - 1] + t * (pin[k] - pin[k - 1])
            return {"pin_dbm": p, "pout_dbm": p + g_target, "gain_db": g_target}
    return None


def drive_compression(rows: Iterable[dict]) -> dict | None:
    """P1dB and P3dB of a stored drive sweep (rows of netgen.studies.store with the ``drive.pin``
    axis, in dBm); None when the study does not vary ``drive.pin``. Only settled points count."""
    pin, pout = [], []
    seen = False
    for row in rows:
        axes = row["inputs"].get("axes", {})
        if DRIVE_AXIS not in axes:
            continue
        seen = True
        m = row.get("metrics") or {}
        p = m.get("pout_w")
        if row["status"] == "ok" and p and p > 0:
            pin.append(float(axes[DRIVE_AXIS]))
            pout.append(10.0 * math.log10(p / 1e-3))
    return compression_points(pin, pout) if seen else None
