"""The input side of a driven device: available and delivered drive power, gains (metrics.json).

See docs/metrics.md (pin_avail_w, pin_dbm, gain_transducer_db, gain_power_db, input_mismatch_db)
and docs/devices.md (the angelov device's gate drive).
"""

from __future__ import annotations

import math

__all__ = ["angelov_warnings", "drive_metrics"]


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


def angelov_warnings(design) -> list[str]:
    """A gate function psi(u) = P1 u + P2 u^2 + P3 u^3 that is not monotonic turns the channel back
    on at large negative (or positive) gate swing, an artefact of the polynomial outside its fitted
    range; psi' = P1 + 2 P2 u + 3 P3 u^2 > 0 for every u needs P2 = P3 = 0 or P3 > 0 and
    P2^2 < 3 P1 P3 (the discriminant of psi'; docs/devices.md)."""
    dev = design.device
    if dev.model != "angelov":
        return []
    p1, p2, p3 = dev.p1_per_v, dev.p2_per_v2, dev.p3_per_v3
    if (p2 == 0.0 and p3 == 0.0) or (p3 > 0.0 and p2 * p2 < 3.0 * p1 * p3):
        return []
    return [f"the angelov gate function psi is not monotonic (P1 = {p1:g}, P2 = {p2:g}, P3 = {p3:g}): the channel turns "
            "back on for a large gate swing; check that the swing stays where the parameters were fitted, or choose "
            "P3 > 0 with P2^2 < 3 P1 P3 (docs/devices.md)"]
