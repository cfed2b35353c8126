"""The small-signal two-port of a driven design: S-parameters at f0 of the circuit linearised at its
bias point (ngspice's AC analysis of the rendered netlist, render mode ``ss``), converted with
scikit-rf.

Port 1 is the amplifier's input (node ``gin`` behind the source resistance, ``gate`` without an
input network), referred to drive.source_r; port 2 the load node, referred to RLOAD. Each port is
driven in turn (1 V AC in VDRIVE, then in VPORT2 in series with RLOAD) with both terminations in
place, so the bias point is the transient's; the two runs give the port voltages and currents,
Z = V I^-1, and scikit-rf converts Z to S for the reference impedances (power waves). With the
ports referred to the real source and load resistances, |S21|^2 is the transducer gain
(Pozar, "Microwave Engineering", 4th ed., sec. 12.1), which the low-drive transient's
gain_transducer_db approaches (tests/test_small_signal.py).
"""

from __future__ import annotations

import math

import numpy as np

from netgen.netlist import render
from netgen.simulator import run_ac

__all__ = ["small_signal_two_port"]


def _port_quantities(vecs: dict, port1: str) -> tuple[complex, complex, complex, complex]:
    """(V1, I1, V2, I2) of one AC run, currents into the two-port (ngspice's branch current of a
    V source flows from its + node through it, so a source delivers minus its branch current)."""
    v1 = complex(vecs[port1][0])
    i1 = -complex(vecs["vdrive#branch"][0])
    v2 = complex(vecs["load"][0])
    i2 = -complex(vecs["vport2#branch"][0])
    return v1, i1, v2, i2


def small_signal_two_port(sized, *, backend: str | None = None) -> dict:
    """S-parameters at f0 of an angelov design's amplifier linearised at its bias point.

    Returns ``s`` (2x2 complex ndarray, ports referred to ``z0_ohm``), ``z0_ohm`` ([Rs, RL]),
    ``z`` (the Z-matrix, ohm), ``s21_db`` (20 log10 |S21|: the small-signal transducer gain, dB),
    ``s21_deg``, ``s11_db`` (input return, dB) and ``zin_ohm`` (port 1 with port 2 in RL).
    """
    import skrf

    d = sized.design
    kw = {"backend": backend} if backend else {}
    cols = []
    for port in (1, 2):
        text = render(sized, "ss", ss_port=port)
        _freq, vecs = run_ac(text, **kw)
        vecs = {k.lower(): v for k, v in vecs.items()}
        port1 = "gin" if "gin" in vecs else "gate"
        cols.append(_port_quantities(vecs, port1))
    v = np.array([[cols[0][0], cols[1][0]], [cols[0][2], cols[1][2]]], dtype=complex)
    i = np.array([[cols[0][1], cols[1][1]], [cols[0][3], cols[1][3]]], dtype=complex)
    z = v @ np.linalg.inv(i)
    z0 = np.array([d.drive.source_r_ohm, d.load_ohm], dtype=float)
    s = skrf.network.z2s(z[np.newaxis, :, :], z0=z0, s_def="power")[0]
    zin = z[0, 0] - z[0, 1] * z[1, 0] / (z[1, 1] + d.load_ohm)
    return {
        "s": s, "z0_ohm": z0.tolist(), "z": z,
        "s21_db": float(20.0 * math.log10(abs(s[1, 0]))),
        "s21_deg": float(np.degrees(np.angle(s[1, 0]))),
        "s11_db": float(20.0 * math.log10(max(abs(s[0, 0]), 1e-300))),
        "zin_ohm": complex(zin),
    }
