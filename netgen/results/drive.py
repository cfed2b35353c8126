"""The input side of a driven device: available and delivered drive power, gains (metrics.json).

See docs/metrics.md (pin_avail_w, pin_dbm, gain_transducer_db, gain_power_db, input_mismatch_db)
and docs/devices.md (the angelov device's gate drive).
"""

from __future__ import annotations

import math

__all__ = ["drive_metrics"]


def _f(x) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _db(ratio: float) -> float | None:
    return 10.0 * math.log10(ratio) if ratio > 0 and math.isfinite(ratio) else None


def drive_metrics(design, pout_w: float, pin_w: float | None) -> dict:
    """The input side of a device driven from a source with a resistance (the angelov device's
    [drive]): available power, delivered power, transducer and power gain.

    Pavail = |Vs|^2 / (8 Rs) (maximum power transfer, Pozar "Microwave Engineering", 4th ed., sec. 2.6);
    transducer gain G_T = Pout / Pavail, power gain G_P = Pout / Pin (Pin delivered at the gate;
    the same text, sec. 12.1). Gains in dB; null where the device has no such drive.
    """
    if design.device.model != "angelov":
        return {"pin_avail_w": None, "pin_avail_dbm": None, "pin_dbm": None,
                "gain_transducer_db": None, "gain_power_db": None, "input_mismatch_db": None}
    pav = design.drive.pin_avail_w
    pin_ok = pin_w is not None and pin_w > 0
    return {
        "pin_avail_w": _f(pav),
        "pin_avail_dbm": _f(design.drive.pin_dbm),
        "pin_dbm": _f(10.0 * math.log10(pin_w / 1e-3)) if pin_ok else None,
        "gain_transducer_db": _db(pout_w / pav) if pout_w > 0 else None,
        "gain_power_db": _db(pout_w / pin_w) if (pin_ok and pout_w > 0) else None,
        # power the source could give but the gate reflects: 10 log10(Pavail / Pin) >= 0
        "input_mismatch_db": _db(pav / pin_w) if pin_ok else None,
    }
