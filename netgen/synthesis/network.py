"""The passive output network in numpy: drain impedance Z(f) and the drain->load ABCD matrix.

Independent of SPICE: each topology is described here as a cascade of series impedances,
shunt admittances and transmission lines from the drain to the load (``RLOAD``), built the
same way the templates build the netlist (loss resistors, the segmented lossy line, the
feed choke as a shunt to the supply, which is an AC short). The device and its output
capacitance are excluded (docs/netlist_conventions.md, ac mode).

ABCD matrices of series/shunt elements and lines: Pozar, "Microwave Engineering", table of
ABCD parameters of useful two-port circuits.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from netgen.design import SizedDesign

from .losses import LINE_SEGMENTS_LOSSY, line_loss_net, line_r_law_ohm, loss_net, loss_ohm, z_loss_net

__all__ = [
    "z_drain",
    "z_drain_with_section",
    "abcd_drain_to_load",
    "abcd_section",
    "SECTIONS",
    "z_port_matrix",
    "loss_ohm",
    "line_plan",
    "tail_plan",
    "LINE_SEGMENTS_LOSSY",
    "cascade",
    "abcd_tline",
    "z_in",
    "z_intrinsic",
    "comp_branches",
]

def line_plan(sized: SizedDesign, base: str) -> dict:
    """How line ``base`` is built: ``{z0, td_seg, k, r_seg, r_total, r0, sections}``.

    A lossy line (network.line_loss > 0 dB) is k = 3 lossless segments of TD/k with k-1
    equal series loss elements between them, each with the resistance ``r_seg`` at f0 (the law
    of :func:`netgen.synthesis.losses.line_r_law_ohm`: the matched line loses line_loss dB at f0,
    to within the small mismatch between the lumps; for low loss this is the distributed
    alpha = R'/(2 Z0) of Pozar, lossy transmission lines). Each element is a resistor ``r0``
    plus the ``R_k || L_k`` ``sections`` of the frequency law (:func:`line_loss_net`; none with
    network.line_loss_law = fixed).
    """
    z0 = sized.value(f"{base}_z0")
    td = sized.value(f"{base}_td")
    db = sized.design.network.line_loss_db
    if db <= 0:
        return {"z0": z0, "td_seg": td, "k": 1, "r_seg": 0.0, "r_total": 0.0, "r0": 0.0, "sections": ()}
    k = LINE_SEGMENTS_LOSSY
    r_seg = float(line_r_law_ohm(sized, base, sized.design.f0_hz)[0])
    ln = line_loss_net(sized, base)
    return {"z0": z0, "td_seg": td / k, "k": k, "r_seg": r_seg, "r_total": r_seg * (k - 1),
            "r0": ln.r0_ohm, "sections": ln.sections}


def tail_plan(sized: SizedDesign) -> list[tuple[str, str]]:
    """The elements between the topology's own part and RLOAD: match section, then load reactance.

    Returns ``[(component_name, "series" | "shunt"), ...]`` in circuit order.
    """
    out = []
    for name in sized.components:
        if name.startswith("match_series"):
            out.append((name, "series"))
        elif name.startswith("match_shunt"):
            out.append((name, "shunt"))
    for name in ("loadx_l", "loadx_c"):
        if name in sized.components:
            out.append((name, "series"))
    return out


# ---------------------------------------------------------------- element impedances

def _z_elem(sized: SizedDesign, name: str, w: np.ndarray) -> np.ndarray:
    comp = sized.components[name]
    if comp.kind not in ("L", "C"):
        raise ValueError(f"{name}: not an L or C")
    return z_loss_net(loss_net(sized, name), w)


def _abcd_series(z: np.ndarray) -> np.ndarray:
    m = np.zeros(z.shape + (2, 2), dtype=complex)
    m[..., 0, 0] = 1
    m[..., 0, 1] = z
    m[..., 1, 1] = 1
    return m


def _abcd_shunt(y: np.ndarray) -> np.ndarray:
    m = np.zeros(y.shape + (2, 2), dtype=complex)
    m[..., 0, 0] = 1
    m[..., 1, 0] = y
    m[..., 1, 1] = 1
    return m


def abcd_tline(z0: float, td: float, w: np.ndarray) -> np.ndarray:
    """ABCD of a lossless line of impedance ``z0`` (ohm) and delay ``td`` (s) at ``w`` (rad/s).

    ``[[cos bl, j Z0 sin bl], [j sin bl / Z0, cos bl]]`` with ``bl = w td`` (Pozar).
    """
    bl = w * td
    m = np.zeros(w.shape + (2, 2), dtype=complex)
    m[..., 0, 0] = np.cos(bl)
    m[..., 0, 1] = 1j * z0 * np.sin(bl)
    m[..., 1, 0] = 1j * np.sin(bl) / z0
    m[..., 1, 1] = np.cos(bl)
    return m


def _abcd_line(sized: SizedDesign, base: str, w: np.ndarray) -> np.ndarray:
    plan = line_plan(sized, base)
    seg = abcd_tline(plan["z0"], plan["td_seg"], w)
    m = seg
    if plan["k"] > 1:
        z_loss = z_loss_net(line_loss_net(sized, base), w)
        for _ in range(plan["k"] - 1):
            m = m @ _abcd_series(z_loss) @ seg
    return m


def cascade(mats: list[np.ndarray]) -> np.ndarray:
    """Product of ABCD matrices in order (first = drain side)."""
    out = mats[0]
    for m in mats[1:]:
        out = out @ m
    return out


def z_in(abcd: np.ndarray, zl: complex | np.ndarray) -> np.ndarray:
    """Input impedance of a two-port terminated in ``zl``: (A ZL + B)/(C ZL + D)."""
    a, b, c, d = abcd[..., 0, 0], abcd[..., 0, 1], abcd[..., 1, 0], abcd[..., 1, 1]
    return (a * zl + b) / (c * zl + d)


# ---------------------------------------------------------------- per topology

def _parallel(sized, names, w):
    """Admittance of components in parallel, S.

    A lossless tank exactly at resonance sums to zero; the result is floored at 1e-15 of the
    branch admittances (an open to 15 digits) so that a series tank stays a finite ABCD entry.
    """
    y = np.zeros(w.shape, dtype=complex)
    scale = np.zeros(w.shape)
    for n in names:
        yi = 1.0 / _z_elem(sized, n, w)
        y = y + yi
        scale = scale + np.abs(yi)
    floor = 1e-15 * scale
    return np.where(np.abs(y) < floor, floor, y)


def _feed(sized, w):
    return _abcd_shunt(1.0 / _z_elem(sized, "feed_l", w))


def _series_sum(sized, names, w):
    z = np.zeros(w.shape, dtype=complex)
    for n in names:
        z = z + _z_elem(sized, n, w)
    return _abcd_series(z)


def _tail(sized, w) -> list[np.ndarray]:
    mats = []
    for name, how in tail_plan(sized):
        z = _z_elem(sized, name, w)
        mats.append(_abcd_series(z) if how == "series" else _abcd_shunt(1.0 / z))
    return mats


def _chain_class_f_line(s, w):
    return [_feed(s, w), _series_sum(s, ["block_c"], w), _abcd_line(s, "line", w),
            _abcd_shunt(_parallel(s, ["tank_l", "tank_c"], w))] + _tail(s, w)


def _chain_class_f_feed(s, w):
    z_end = 1.0 / _parallel(s, ["bypass_c", "feed_l"], w)
    z_feed = z_in(_abcd_line(s, "feedline", w), z_end)
    return [_abcd_shunt(1.0 / z_feed), _series_sum(s, ["block_c"], w),
            _series_sum(s, ["res_l", "res_c"], w)] + _tail(s, w)


def _chain_class_f_lumped(s, w):
    mats = [_feed(s, w), _series_sum(s, ["block_c"], w)]
    for k in range(1, s.design.network.harmonics + 1):
        n = 2 * k + 1
        mats.append(_abcd_series(1.0 / _parallel(s, [f"res{n}_l", f"res{n}_c"], w)))
    mats.append(_abcd_shunt(_parallel(s, ["tank_l", "tank_c"], w)))
    return mats + _tail(s, w)


def _chain_inverse_f_line(s, w):
    return [_feed(s, w), _series_sum(s, ["block_c"], w), _abcd_line(s, "line", w),
            _series_sum(s, ["res_l", "res_c"], w)] + _tail(s, w)


def _chain_class_e(s, w):
    return [_feed(s, w), _abcd_shunt(1.0 / _z_elem(s, "shunt_c", w)),
            _series_sum(s, ["series_c", "series_l", "excess_l"], w)] + _tail(s, w)


def _chain_class_b_tuned(s, w):
    return [_feed(s, w), _series_sum(s, ["block_c"], w),
            _abcd_shunt(_parallel(s, ["tank_l", "tank_c"], w))] + _tail(s, w)


_CHAINS: dict[str, Callable] = {
    "class_f_line": _chain_class_f_line,
    "class_f_feed": _chain_class_f_feed,
    "class_f_lumped": _chain_class_f_lumped,
    "inverse_f_line": _chain_inverse_f_line,
    "class_e": _chain_class_e,
    "class_b_tuned": _chain_class_b_tuned,
}


#: smallest impedance a lossless compensator branch is given at its own resonance, ohm
Z_TRAP_FLOOR_OHM = 1e-12


def comp_branches(sized: SizedDesign) -> list[int]:
    """Numbers k of the Cout compensator branches ``comp<k>_l`` + ``comp<k>_c`` (drain to ground)."""
    out = []
    for name in sized.components:
        if name.startswith("comp") and name.endswith("_l") and name[4:-2].isdigit():
            out.append(int(name[4:-2]))
    return sorted(out)


def _comp(sized, w) -> list[np.ndarray]:
    ks = comp_branches(sized)
    if not ks:
        return []
    y = np.zeros(w.shape, dtype=complex)
    for k in ks:
        z = _z_elem(sized, f"comp{k}_l", w) + _z_elem(sized, f"comp{k}_c", w)
        # a lossless trap exactly at its resonance is a perfect short: kept finite (1e-12 ohm) so the
        # cascade stays a number (the drain impedance there is then ~1e-12 ohm, a short)
        y = y + 1.0 / np.where(np.abs(z) < Z_TRAP_FLOOR_OHM, Z_TRAP_FLOOR_OHM, z)
    return [_abcd_shunt(y)]


def abcd_drain_to_load(sized: SizedDesign, f_hz) -> np.ndarray:
    """ABCD matrix (shape ``(N, 2, 2)``) of the two-port from the drain to the top of RLOAD.

    The supply is an AC short (the feed choke is a shunt to ground); RLOAD itself is not
    included. Lossy elements carry their RLOSS resistance exactly as rendered.
    """
    from .topologies import resolve_topology

    w = 2 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float))
    name = resolve_topology(sized.design).name
    return cascade(_comp(sized, w) + _CHAINS[name](sized, w))


#: the named sections a Touchstone block may replace (design.schema BLOCK_SECTIONS less 'template')
SECTIONS = ("network", "match")


def _split(sized: SizedDesign, w: np.ndarray, section: str) -> tuple[list, list]:
    """The drain->load chain split into (before the section, the section)."""
    from .topologies import resolve_topology

    chain = _CHAINS[resolve_topology(sized.design).name](sized, w)
    if section == "network":  # everything after the DC feed (chain[0] in every topology)
        return chain[:1], chain[1:]
    if section == "match":
        n = len(tail_plan(sized))
        if n == 0:
            raise ValueError("the sized design has no match section")
        return chain[:-n], chain[-n:]
    raise ValueError(f"unknown section {section!r}")


def abcd_section(sized: SizedDesign, f_hz, section: str) -> np.ndarray:
    """ABCD (N, 2, 2) of a named section alone: ``network`` (drain to the top of RLOAD without the
    DC feed) or ``match`` (the tail_plan elements: L-section match and load reactance)."""
    w = 2 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float))
    return cascade(_split(sized, w, section)[1])


def z_drain_with_section(sized: SizedDesign, f_hz, section: str, z_section_ohm) -> np.ndarray:
    """Drain impedance with ``section`` replaced by a one-port of input impedance ``z_section_ohm``
    (the section's port 1 with RLOAD on its port 2), ohm: the rest of the chain terminated in it."""
    w = 2 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float))
    return z_in(cascade(_split(sized, w, section)[0]), np.asarray(z_section_ohm))


def z_drain(sized: SizedDesign, f_hz) -> np.ndarray:
    """Impedance the passive network presents at the drain, ohm (complex ndarray).

    Parameters
    ----------
    sized : SizedDesign
    f_hz : array_like
        Frequencies, Hz.

    Notes
    -----
    ``Zin = (A RL + B)/(C RL + D)`` of the drain->load ABCD matrix terminated in RL
    (Pozar, "Microwave Engineering", ABCD parameters).
    """
    return z_in(abcd_drain_to_load(sized, f_hz), sized.design.load_ohm)


def z_intrinsic(sized: SizedDesign, f_hz) -> np.ndarray:
    """Impedance the device's current generator sees (the intrinsic plane), ohm.

    :func:`z_drain` (the drain terminal, the package plane) seen through the package Cp, Ld
    and the output capacitance Cout (:func:`netgen.synthesis.intrinsic.to_intrinsic`). Cout
    is the physical capacitance, without the series resistance the transient netlist gives it
    in designs with lines (docs/simulation.md).
    """
    from .intrinsic import parasitics, to_intrinsic

    return to_intrinsic(z_drain(sized, f_hz), f_hz, parasitics(sized.design))


def z_port_matrix(sized: SizedDesign, f_hz) -> np.ndarray:
    """Z matrix (shape ``(N, 2, 2)``, ohm) of the drain->load two-port (port 2 at RLOAD's top).

    ``Z11 = A/C, Z12 = (AD - BC)/C, Z21 = 1/C, Z22 = D/C`` (Pozar, conversions between
    two-port parameters). For a Touchstone export, convert to S with scikit-rf.
    """
    m = abcd_drain_to_load(sized, f_hz)
    a, b, c, d = m[..., 0, 0], m[..., 0, 1], m[..., 1, 0], m[..., 1, 1]
    z = np.empty_like(m)
    z[..., 0, 0] = a / c
    z[..., 0, 1] = (a * d - b * c) / c
    z[..., 1, 0] = 1.0 / c
    z[..., 1, 1] = d / c
    return z
