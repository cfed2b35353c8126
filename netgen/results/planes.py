"""The two reference planes of every result: intrinsic (the current generator) and package (the drain terminal).

The intrinsic plane is the device's current generator, inside its output capacitance Cout and
package (docs/netlist_conventions.md: node ``dint``, current ``visw#branch``); the package
plane is the drain terminal where the output network connects (node ``drain``, current
``vidrain#branch``). Waveform engineering is defined at the intrinsic plane (Cripps, "RF Power
Amplifiers for Wireless Communications"; Grebennikov, "RF and Microwave Power Amplifier
Design"; recalled from memory), so the pattern warnings look there.

The intrinsic current is the drain-terminal current minus the Cout (and package) current,
``i_gen = i_drain - Cout dv/dt``; the netlist senses it directly with the zero-volt source
``VISW`` in series with the generator.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from netgen.synthesis import controlled_pattern, resolve_topology, z_drain, z_intrinsic

__all__ = ["PLANES", "intrinsic_columns", "plane_warnings", "OPEN_MIN_ROPT", "SHORT_MAX_ROPT", "F0_TOL"]

#: the planes and what they are (metrics.json ``planes``)
PLANES = {
    "intrinsic": "the device's current generator inside Cout and the package (node dint, current through VISW)",
    "package": "the device's drain terminal where the output network connects (node drain, current through VIDRAIN)",
}
#: a wanted open below OPEN_MIN_ROPT x Ropt, a wanted short above Ropt / SHORT_MAX_ROPT, or f0
#: off Ropt by more than F0_TOL is said (our thresholds: a third of the way to Ropt on a log scale)
OPEN_MIN_ROPT = 3.0
SHORT_MAX_ROPT = 3.0
F0_TOL = 0.10


def intrinsic_columns(v_int: np.ndarray, i_gen: np.ndarray, n_h: int, impedance) -> list[dict]:
    """Per harmonic n = 1..n_h: ``vint_v``, ``vint_deg``, ``igen_a``, ``igen_deg``, ``z_int_re_ohm``,
    ``z_int_im_ohm`` (Z = V/(-I) presented to the generator; null where the current is too small)."""
    z = impedance(v_int, i_gen)
    rows = []
    for n in range(1, n_h + 1):
        zn = z[n - 1]
        rows.append({
            "vint_v": _f(abs(v_int[n])), "vint_deg": _f(math.degrees(np.angle(v_int[n]))),
            "igen_a": _f(abs(i_gen[n])), "igen_deg": _f(math.degrees(np.angle(i_gen[n]))),
            "z_int_re_ohm": None if zn is None else _f(zn.real),
            "z_int_im_ohm": None if zn is None else _f(zn.imag),
        })
    return rows


def _f(x):
    x = float(x)
    return x if math.isfinite(x) else None


def _meets(z: complex, want: str, ropt: float) -> bool:
    if want == "open":
        return abs(z) >= OPEN_MIN_ROPT * ropt
    if want == "short":
        return abs(z) <= ropt / SHORT_MAX_ROPT
    return abs(z - ropt) <= F0_TOL * ropt


def _lossless(sized):
    net = dataclasses.replace(sized.design.network, inductor_q=math.inf, capacitor_esr_ohm=0.0, line_loss_db=0.0)
    return dataclasses.replace(sized, design=dataclasses.replace(sized.design, network=net))


def _causes(sized, misses: list[tuple[int, str]], metrics: dict) -> list[str]:
    """The likely cause of each missed target (harmonic n, wanted), from the network model
    (netgen.synthesis.network), evaluated at all the missed harmonics at once."""
    if not misses:
        return []
    d = sized.design
    ropt = sized.ropt_ohm
    f = [n * d.f0_hz for n, _ in misses]
    try:
        from netgen.synthesis import parasitics, to_intrinsic

        z_pkg_all = z_drain(sized, f)
        z_int_all = to_intrinsic(z_pkg_all, f, parasitics(d))  # z_intrinsic without a second z_drain
        z_ideal_all = z_intrinsic(_lossless(sized), f)
    except (KeyError, ValueError, ZeroDivisionError, FloatingPointError):
        return ["the template's own network (not modelled)"] * len(misses)
    dev = d.device
    out = []
    for (n, want), z_int, z_int_ideal, z_pkg in zip(misses, z_int_all, z_ideal_all, z_pkg_all):
        z_int, z_int_ideal, z_pkg = complex(z_int), complex(z_int_ideal), complex(z_pkg)
        if not _meets(z_int, want, ropt):
            if _meets(z_int_ideal, want, ropt):
                out.append(f"lossy resonator (the network model gives {abs(z_int_ideal):.3g} ohm with lossless parts and "
                           f"{abs(z_int):.3g} ohm with network.inductor_q / capacitor_esr / line_loss)")
            elif _meets(z_pkg, want, ropt) and (dev.cout_f > 0 or dev.package_l_h > 0 or dev.package_c_f > 0):
                out.append(f"device Cout / package not absorbed (the network alone gives {abs(z_pkg):.3g} ohm at the "
                           "package plane; a [network.values] override or a user template?)")
            else:
                out.append(f"the sized network itself (model {abs(z_int):.3g} ohm; loaded Q, network.harmonics or overrides)")
        elif (metrics.get("cout_series_ohm") or 0) > 0:
            out.append(f"the series resistance {metrics['cout_series_ohm']:.3g} ohm the simulation gives Cout in designs "
                       f"with lines (docs/simulation.md; the network model gives {abs(z_int):.3g} ohm)")
        else:
            out.append(f"the device waveform rather than the network (the network model gives {abs(z_int):.3g} ohm)")
    return out


def plane_warnings(sized, metrics: dict) -> list[str]:
    """Sentences for each controlled harmonic that misses its target at the intrinsic plane.

    Targets: Ropt at f0 within 10 %, opens above 3 Ropt, shorts below Ropt/3, at the
    harmonics :func:`netgen.synthesis.controlled_pattern` lists (class F: opens at odd,
    shorts at even; inverse F reversed; Raab 2001). Class E has no such targets (Sokal 1975).
    """
    d = sized.design
    try:
        topo = resolve_topology(d).name
    except Exception:  # noqa: BLE001 - a user template without a known sizing: nothing to compare
        return []
    if topo == "class_e":
        return []
    ropt = float(sized.ropt_ohm)
    want = {1: "ropt", **controlled_pattern(topo, d)}
    missed = []
    for row in metrics.get("harmonics", []):
        n = row["n"]
        if n not in want or row.get("z_int_re_ohm") is None:
            continue
        z = complex(row["z_int_re_ohm"], row["z_int_im_ohm"])
        if not _meets(z, want[n], ropt):
            missed.append((n, want[n], z))
    causes = _causes(sized, [(n, w) for n, w, _ in missed], metrics)
    out = []
    for (n, w, z), cause in zip(missed, causes):
        target = {"open": f"an open (> {OPEN_MIN_ROPT:g} Ropt = {OPEN_MIN_ROPT * ropt:.3g} ohm)",
                  "short": f"a short (< Ropt/{SHORT_MAX_ROPT:g} = {ropt / SHORT_MAX_ROPT:.3g} ohm)",
                  "ropt": f"Ropt = {ropt:.4g} ohm within {F0_TOL:.0%}"}[w]
        label = "f0" if n == 1 else f"{n} f0"
        out.append(f"{label} at the intrinsic plane: Z = {z.real:.3g} {z.imag:+.3g}j ohm (|Z| = {abs(z):.3g} ohm), "
                   f"wanted {target}; likely cause: {cause}")
    return out
