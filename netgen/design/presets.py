"""Named parameter sets of the angelov device (``device.preset``): invented generic devices.

These are not real parts: the values were chosen to give plausible behaviour of a technology
(a low-voltage and a high-voltage one) and are documented with their units in docs/devices.md.
Values are design-file text, parsed by :mod:`netgen.design.schema` like any ``[device]`` key; a
key the design gives itself overrides the preset.
"""

from __future__ import annotations

__all__ = ["DEVICE_PRESETS"]

#: preset name -> [device] keys (design-file text)
DEVICE_PRESETS: dict[str, dict[str, object]] = {
    # an invented low-voltage (about 12 V) depletion-mode device of about 2 W: Schottky gate
    "lv_gan_2w": {
        "ipk": "0.4 A", "vpk": "-1.2 V", "p1": 1.6, "p2": 0.1, "p3": 0.05,
        "alpha": 2.5, "lambda": 0.01, "rd": "0.3 ohm", "rs": "0.2 ohm",
        "cgs0": "2.5 pF", "cgd0": "0.15 pF", "vbi": "1 V", "mj": 0.5, "vcj": "0 V",
        "rev_is": "1e-12 A", "rev_n": 1.0, "cout": "0.6 pF",
    },
    # an invented high-voltage (about 28 V to 50 V) enhancement-mode device of about 30 W:
    # insulated gate, so the gate junctions are offset (vcj) beyond any gate swing
    "hv_ldmos_30w": {
        "ipk": "2.5 A", "vpk": "4.5 V", "p1": 0.9, "p2": 0.0, "p3": 0.02,
        "alpha": 0.6, "lambda": 0.005, "rd": "0.2 ohm", "rs": "0.05 ohm",
        "cgs0": "120 pF", "cgd0": "7 pF", "vbi": "0.8 V", "mj": 0.4, "vcj": "40 V",
        "rev_is": "1e-10 A", "rev_n": 1.0, "cout": "12 pF",
    },
}
