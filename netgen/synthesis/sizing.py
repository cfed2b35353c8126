"""Sizing: published formulas turning a :class:`~netgen.design.schema.Design` into component values.

The per-topology functions live in :mod:`netgen.synthesis.sizers`, the shared formulas in
:mod:`netgen.synthesis.builder`; :func:`size` picks the topology through
:mod:`netgen.synthesis.topologies`, applies the load reactance, the ``[network.values]`` overrides and
computes the derived numbers (line length, bias resonance, expected DC current).

Component names follow ``<base>_<suffix>`` with suffix ``l`` (H), ``c`` (F), ``z0`` / ``td``
(line impedance / delay); the netlist element is ``<KIND>_<base>`` (``tank_l`` -> ``L_tank``,
``line_z0`` + ``line_td`` -> ``T_line``); see docs/netlist_conventions.md.

Effective supply (how the device's own drop is accounted for)
------------------------------------------------------------
* Idealised switch: while the switch conducts, the drain sits at Ron times the switch current,
  on average ``Ron * Idc / duty`` (the whole DC current flows in the on-time). That average is
  taken off the supply: ``Vdd_eff = Vdd - Ron * Idc / duty``. With ``P = a Vdd_eff^2 / R``
  (``a`` of the class, below) and ``Idc = P / Vdd_eff``:
  given ``pout``: ``Vdd_eff = (Vdd + sqrt(Vdd^2 - 4 (Ron/duty) P)) / 2``;
  given ``ropt``: ``Vdd_eff = Vdd / (1 + a Ron / (duty R))``.
  This is our own first-order estimate, not a published formula.
* Transconductance device: ``Vdd_eff = Vdd - Vknee`` (common practice; Cripps, "RF Power
  Amplifiers for Wireless Communications", the knee eats that much of the swing).
* User SPICE device: ``Vdd_eff = Vdd`` (nothing is known about it).

Class coefficients ``a`` in ``P = a Vdd_eff^2 / R``: class F ``8/pi^2`` (Raab 1997, Cripps);
inverse F ``pi^2/8``; tuned class B ``1/2``; class E ``0.5768`` (Sokal & Sokal 1975; Raab 1977).

Expected DC current (the warm start's ``idc_est_a``)
----------------------------------------------------
gm device: ``Imax`` times the DC Fourier coefficient of its conduction angle (Cripps). Switch and
user devices: :func:`switch_dc_estimate`, the class formula scaled by the f0 admittance the sized
(lossy) network really presents, divided by the efficiency bound of the harmonics it controls
(:func:`netgen.synthesis.theory.bound_for`), plus the hard-switching loss of the drain's high-frequency
capacitance (class_f_lumped only). Within 10 % of the settled simulation for every example.

class_f_lumped resonator impedance: :func:`lumped_resonator_z` (docs/template_context.md).
"""


import difflib
import math
from pathlib import Path

import numpy as np

from netgen.design import (
    COMPONENT_UNITS,
    Component,
    Design,
    SizedDesign,
    format_quantity,
    parse_quantity,
)
from netgen.errors import DesignError, SizingError

from .builder import (
    C0_M_S,
    CLASS_COEFF,
    PI,
    Builder,
    conduction_fourier,
    digits12,
    match_orientation,
    ropt_from_power,
)
from .network import z_drain
from .input_match import angelov_input_z, gate_voltage_ratio, input_network
from .theory import bound_for
from .topologies import resolve_topology

__all__ = ["size", "write_sized_toml", "sized_toml_text", "switch_dc_estimate", "drain_hf_capacitance",
           "cout_switching_loss"]

def size(design: Design) -> SizedDesign:
    """Size every component of ``design`` for its topology.

    Parameters
    ----------
    design : Design

    Returns
    -------
    SizedDesign
        Components in circuit order (drain to load), ``ropt_ohm``, ``derived`` numbers
        (name -> (SI value, unit, how)), ``idc_est_a`` and ``pout_est_w``.

    Raises
    ------
    SizingError
        When the specification cannot be realised.
    DesignError
        For an unknown or invalid ``[network.values]`` override.
    """
    topo = resolve_topology(design)
    cls = topo.wave_class
    ropt, veff, how_r = ropt_from_power(design, cls)
    a = CLASS_COEFF[cls]
    pout = a * veff**2 / ropt
    b = Builder(design)
    topo.sizer(b, ropt)
    comps = {c.name: c for c in b.items}
    comps = _apply_overrides(design, comps, topo.name)
    for name in design.network.srf_hz:
        if name not in comps or comps[name].kind not in ("L", "C"):
            parts = ", ".join(n for n, c in comps.items() if c.kind in ("L", "C"))
            raise DesignError(f"network.srf.{name}: the sized {topo.name} network has no inductor or capacitor of that name; "
                              f"name one of {parts}.")

    derived: dict[str, tuple] = {
        "ropt_ohm": (ropt, "ohm", how_r),
        "vdd_eff_v": (veff, "V", _veff_how(design)),
        "pout_est_w": (pout, "W", f"P = a Vdd_eff^2/R with a = {a:.6g} (class {cls})"),
    }
    dev = design.device
    in_comps, in_derived = input_network(design, ropt)
    derived.update(in_derived)
    if dev.model in ("gm", "angelov"):
        fdc, f1 = conduction_fourier(dev.conduction_angle_deg)
        v1 = math.sqrt(2.0 * pout * ropt)
        if dev.model == "angelov":
            imax, how_i = 2.0 * dev.ipk_a, "Imax = 2 Ipk (the Angelov I-V at tanh psi = 1, lambda neglected; docs/devices.md)"
        elif dev.imax_a is not None:
            imax, how_i = dev.imax_a, "set by device.imax"
        else:
            imax = v1 / ropt / f1
            how_i = "Imax = V1/(Ropt I1/Imax), V1 = sqrt(2 P Ropt), I1/Imax from the conduction angle (Cripps)"
        derived["imax_a"] = (imax, "A", how_i)
        idc = imax * fdc
        how_idc = "Idc = Imax (sin a - a cos a)/(pi (1 - cos a)) (Cripps, reduced conduction angle)"
        if dev.model == "angelov":
            idc, vg = angelov_idc_estimate(design, derived["vdd_eff_v"][0], in_comps, ropt)
            how_idc = (f"Idc = mean over a period of Ipk (1 + tanh psi(Vgg + Vg cos wt)), Vg = {vg:.4g} V: " + (
                       "|Vs| times the voltage ratio through Rs and the input network into the gate's small-signal input at bias"
                       if in_comps else "|Vs| divided by Rs and the gate capacitance Cgs + Cgd (1 + Vdd_eff/Vg) (Miller) at bias")
                       + " (our estimate; docs/devices.md)")
        derived["idc_est_a"] = (idc, "A", how_idc)
        pout_est = min(pout, 0.5 * (imax * f1) ** 2 * ropt)
    else:
        sized0 = SizedDesign(design=design, ropt_ohm=ropt, components=comps, derived=dict(derived))
        est = switch_dc_estimate(sized0, pout, veff)
        idc = est["idc_a"]
        derived["idc_est_a"] = (idc, "A", est["how"])
        derived["pfund_drain_est_w"] = (est["pfund_w"], "W", "P1 = a Vdd_eff^2 Re(Y1)/Re(Y1 lossless): the class formula with the sized network's f0 admittance")
        if est["pcap_w"] > 0:
            derived["hard_switching_est_w"] = (est["pcap_w"], "W", "1/2 C_hf (2 Vdd)^2 f0 (the network capacitance the drain sees at high harmonics) + the device Cout loss (cout_switching_loss): discharged by the switch each turn-on (estimate)")
        pout_est = pout
    _parasitic_derived(design, topo, ropt, derived)
    if "line_td" in comps or "feedline_td" in comps:
        base = "line" if "line_td" in comps else "feedline"
        td = comps[f"{base}_td"].value
        derived[f"{base}_length_m"] = (C0_M_S * td / math.sqrt(design.network.eps_eff), "m",
                                       "physical length = c0 TD/sqrt(eps_eff) (c0/(4 f0 sqrt(eps_eff)) for a quarter wave)")
    if "feed_l" in comps:
        lf = comps["feed_l"].value
        cb_name = "bypass_c" if "bypass_c" in comps else ("block_c" if "block_c" in comps else "series_c")
        cb = comps[cb_name].value
        fb = 1.0 / (2 * PI * math.sqrt(lf * cb))
        zb = math.sqrt(lf / cb)
        derived["bias_resonance_hz"] = (fb, "Hz", f"1/(2 pi sqrt(L_feed C_{cb_name[:-2]})), the slowest pole of the bias network")
        derived["bias_damping"] = (design.load_ohm / (2.0 * zb), "",
                                   f"zeta ~ RL/(2 sqrt(L_feed/C_{cb_name[:-2]})): a series loop closed through roughly RL (estimate)")
    return SizedDesign(design=design, ropt_ohm=ropt, components=comps, derived=derived,
                       idc_est_a=idc, pout_est_w=pout_est, input_network=in_comps)


#: above this omega0 Cout Ropt the absorbed Cout makes a narrowband, loss-sensitive network (our rule)
COUT_Q_WARN = 3.0


def _parasitic_derived(design: Design, topo, ropt: float, derived: dict) -> None:
    """``cout_q`` (omega0 Cout Ropt, the device's own Q at f0) and, for class E, ``class_e_fmax_hz``."""
    from .intrinsic import class_e_fmax_hz, parasitics

    par = parasitics(design)
    if par.cout_f <= 0 and par.cp_f <= 0:
        return
    w0 = 2 * PI * design.f0_hz
    q = w0 * (par.cout_f + par.cp_f) * ropt
    derived["cout_q"] = (q, "", ("omega0 (Cout + Cp) Ropt: the device capacitance's own Q at f0, absorbed by the network "
                                 f"(above {COUT_Q_WARN:g} the design is narrowband and sensitive to part loss and tolerance: "
                                 "lower f0, use a smaller device or a lower Ropt)"))
    if design.device.model == "angelov" and design.device.cds_law == "junction":
        _cds_derived(design, derived)
    if topo.wave_class == "E":
        derived["class_e_fmax_hz"] = (class_e_fmax_hz(ropt, par.cout_f + par.cp_f), "Hz",
                                      ("highest f0 at which class E absorbs Cout: 0.1836/(2 pi R Cout) = "
                                       "Imax/(56.5 Cout Vdd) (Sokal 1975; Raab 1977)"))


def _cds_derived(design: Design, derived: dict) -> None:
    """The junction drain-source capacitance (device.cds_law = "junction", docs/devices.md): sizing
    absorbs C(Vdd) = device.cout like a linear Cout; these values say how far the junction departs
    from it over a swing from 0 to 2 Vdd. Cds(V) = Cds0 / (1 + V/Vj)^M (the depletion law, S. M. Sze,
    "Physics of Semiconductor Devices", ch. 2, recalled from memory), its charge
    Q(V) = Cds0 Vj ((1 + V/Vj)^(1-M) - 1) / (1 - M) (the integral of C dV)."""
    dev, vdd = design.device, design.vdd_v
    vj, m = dev.cds_vj_v, dev.cds_m
    c0 = dev.cout_f * (1.0 + vdd / vj) ** m
    v2 = 2.0 * vdd
    c2 = c0 / (1.0 + v2 / vj) ** m
    q2 = c0 * vj * ((1.0 + v2 / vj) ** (1.0 - m) - 1.0) / (1.0 - m)
    derived["cds0_f"] = (c0, "F", "Cds0 = cout (1 + Vdd/Vj)^M: the junction's capacitance at Vds = 0 (cout is its value at Vdd)")
    derived["cds_cv_ratio"] = (c0 / c2, "", "Cds(0)/Cds(2 Vdd): the junction's C-V ratio over a swing from 0 to 2 Vdd; "
                                            "sizing absorbs Cds(Vdd) = cout, the nonlinear part is left to the simulation")
    derived["cds_charge_equiv_f"] = (q2 / v2, "F", "Q(2 Vdd)/(2 Vdd): the charge-equivalent (large-signal average) "
                                                   "capacitance over 0 to 2 Vdd, for comparison (not absorbed)")


def _lossless(design: Design) -> Design:
    """``design`` with lossless components (inductor Q inf, no ESR, no line loss)."""
    import dataclasses

    net = dataclasses.replace(design.network, inductor_q=math.inf, capacitor_esr_ohm=0.0, line_loss_db=0.0)
    return dataclasses.replace(design, network=net)


def drain_hf_capacitance(sized: SizedDesign) -> float:
    """Capacitance the drain sees at harmonics far above the network's resonances, F.

    Only class_f_lumped has one: the DC block, the resonator capacitors (each resonator tends to
    its capacitor above its resonance) and the shunt tank capacitor in series (the tank inductor
    and a lowpass match's series inductor are open there). The line topologies present a line
    (about Z0, resistive), class_f_feed's output starts with an inductor, and class E's shunt C
    is discharged at zero voltage by design: 0 for them.
    """
    if resolve_topology(sized.design).name != "class_f_lumped":
        return 0.0
    names = ["block_c", "tank_c"] + [n for n in sized.components if n.startswith("res") and n.endswith("_c")]
    return 1.0 / sum(1.0 / sized.value(n) for n in names)


def cout_switching_loss(sized: SizedDesign) -> float:
    """Expected loss of the device output capacitance in a class-F switch design, W.

    The square drain voltage is about 2 Vdd when the switch closes: 1/2 Cout (2 Vdd)^2 f0 is
    dumped into the switch (energy of a charged capacitor). With transmission lines Cout carries
    a series resistance (:func:`netgen.netlist.renderer.cout_series_ohm`) that also takes the charging
    energy at turn-off, so twice that. Class E and inverse class F switch at (near) zero voltage:
    0. Our estimate; it only seeds the warm start.
    """
    d = sized.design
    if d.device.model != "switch" or d.device.cout_f <= 0.0:
        return 0.0
    if resolve_topology(d).name not in ("class_f_line", "class_f_feed", "class_f_lumped"):
        return 0.0
    has_line = any(c.kind == "Z0" for c in sized.components.values())
    return (2.0 if has_line else 1.0) * 0.5 * d.device.cout_f * (2.0 * d.vdd_v) ** 2 * d.f0_hz


def switch_dc_estimate(sized: SizedDesign, pout_w: float, veff_v: float) -> dict:
    """Expected DC supply current of a switch (or user SPICE) device, A.

    Parameters
    ----------
    sized : SizedDesign
        The sized network (``idc_est_a`` not yet set).
    pout_w : float
        ``a Vdd_eff^2 / R`` of the waveform class (module docstring), W.
    veff_v : float
        Effective supply, V.

    Returns
    -------
    dict
        ``idc_a``, ``pfund_w`` (fundamental drain power), ``pcap_w`` (hard-switching loss),
        ``eta_bound``, ``how``.

    Notes
    -----
    The switch sets the drain voltage (its fundamental is that of the class's ideal waveform),
    so the fundamental power follows the admittance the sized network really presents at f0,
    losses included: ``P1 = a Vdd_eff^2 Re(Y1)/Re(Y1_lossless)`` (Y1 from
    :func:`netgen.synthesis.network.z_drain` of the sized and of the lossless network; the ratio is 1
    for ideal parts). The supply then delivers ``P1/eta_b`` (``eta_b``: the ideal efficiency
    bound of the harmonics the network controls, :func:`netgen.synthesis.theory.bound_for`; Raab 2001)
    plus the hard-switching loss ``1/2 C_hf (2 Vdd)^2 f0`` of the capacitance the drain sees at
    high harmonics (:func:`drain_hf_capacitance`; in class F the drain is at about 2 Vdd just
    before turn-on, the square wave). ``Idc = (P1/eta_b + P_cap)/Vdd_eff`` (Vdd_eff carries the
    Ron drop, as in the sizing). Our own first-order estimate; it only seeds the warm start.
    Measured against settled simulations of every example within 10 % (tests/test_sizing.py).
    """
    import numpy as np


    design = sized.design
    f0 = design.f0_hz
    ratio, how_g = 1.0, ""
    try:
        y1 = (1.0 / z_drain(sized, np.array([f0])))[0].real
        lossless = SizedDesign(design=_lossless(design), ropt_ohm=sized.ropt_ohm, components=sized.components)
        y1_ideal = (1.0 / z_drain(lossless, np.array([f0])))[0].real
        if y1 > 0 and y1_ideal > 0:
            ratio, how_g = y1 / y1_ideal, " Re(Y1)/Re(Y1 lossless)"
    except (KeyError, ValueError, ZeroDivisionError, FloatingPointError):
        ratio = 1.0  # a network z_drain cannot model (e.g. a user template's own parts)
    pfund = pout_w * ratio
    bound = bound_for(sized).get("efficiency") or 1.0
    pcap = 0.5 * drain_hf_capacitance(sized) * (2.0 * design.vdd_v) ** 2 * f0
    pcap += cout_switching_loss(sized)
    idc = (pfund / bound + pcap) / veff_v
    how = (f"Idc = (P1/eta_b + P_cap)/Vdd_eff, P1 = P x{how_g} {ratio:.4g}, eta_b = {bound:.4g} "
           f"(theory.bound_for, Raab 2001), P_cap = {pcap:.4g} W hard switching (our estimate)")
    return {"idc_a": idc, "pfund_w": pfund, "pcap_w": pcap, "eta_bound": bound, "how": how}


def angelov_idc_estimate(design: Design, veff_v: float, in_comps: dict | None = None, ropt_ohm: float | None = None,
                         n: int = 720) -> tuple[float, float]:
    """(Idc in A, gate amplitude Vg in V) of the angelov device for the warm start.

    The gate amplitude (behind the gate resistance Ri) is the source's |Vs| divided by the source
    resistance plus Ri and the input capacitance at the bias, Cgs + Cgd (1 + Vdd_eff/Vg) (the
    Miller effect with the drain swinging about Vdd_eff; solved by fixed-point iteration); the junction capacitances are C0/(1 - (V - Vcj)/Vbi)^M (SPICE
    diode, clamped at V - Vcj = Vbi/2). Idc is the mean of the Angelov law Ipk (1 + tanh psi) in
    saturation (tanh(alpha Vds) = 1) over one period. Our estimate: measured within 5 % of the
    settled simulation on sims/class_b_angelov.toml and the class-B check of tests/test_angelov.py.
    """
    dev, drv = design.device, design.drive
    w = 2.0 * math.pi * design.f0_hz

    def cj(c0: float, v: float) -> float:
        return c0 / (1.0 - min(v - dev.vcj_v, 0.5 * dev.vbi_v) / dev.vbi_v) ** dev.mj

    cgs = cj(dev.cgs0_f, dev.vgate_bias_v)
    cgd = cj(dev.cgd0_f, dev.vgate_bias_v - design.vdd_v)
    vs = drv.vs_peak_v
    vg = vs
    r_in = drv.source_r_ohm + dev.ri_ohm  # to the intrinsic gate (+ 0.0 without Ri: the same double)
    for _ in range(30):
        vg = vs / abs(1.0 + 1j * w * r_in * (cgs + cgd * (1.0 + veff_v / max(vg, 1e-12))))
    if in_comps:
        # behind an input network: |Vs| times the linear voltage ratio to the gate into the
        # device's small-signal input at the bias (input_match.gate_voltage_ratio), then across Ri
        zdev = angelov_input_z(design, z_drain_ohm=ropt_ohm)
        vg = vs * abs(gate_voltage_ratio(design, in_comps, zdev))
        if dev.ri_ohm > 0:
            vg *= abs((zdev - dev.ri_ohm) / zdev)
    th = np.linspace(0.0, 2.0 * np.pi, n, endpoint=False)
    u = dev.vgate_bias_v + vg * np.cos(th) - dev.vpk_v
    i = dev.ipk_a * (1.0 + np.tanh(dev.p1_per_v * u + dev.p2_per_v2 * u * u + dev.p3_per_v3 * u * u * u))
    return digits12(float(np.mean(i))), float(vg)  # numpy's cos and tanh: machine-dependent last bits


def _veff_how(design: Design) -> str:
    m = design.device.model
    if m == "switch":
        return "Vdd_eff = Vdd - Ron Idc/duty (mean on-state drop of the switch; our estimate)"
    if m == "gm":
        return "Vdd_eff = Vdd - Vknee (common practice; Cripps)"
    if m == "angelov":
        return "Vdd_eff = Vdd - (2/alpha + 2 Ipk (Rd + Rs)) (knee where tanh(alpha Vds) = 0.96, plus the access drop at Imax; our estimate)"
    return "Vdd_eff = Vdd (user device: no drop assumed)"


def _sibling(name: str, comps: dict[str, Component]) -> str | None:
    """The sized component that ``name`` replaces by its other kind (``match_series_l`` for a given
    ``match_series_c``): a reactance that changed sign when the design was re-sized keeps the
    element the user (or the pinned network of a sweep) chose."""
    if len(name) > 2 and name[-2:] in ("_l", "_c"):
        other = name[:-2] + ("_c" if name.endswith("_l") else "_l")
        if other in comps and name not in comps:
            return other
    return None


def _swap_siblings(design: Design, comps: dict[str, Component]) -> dict[str, Component]:
    """``comps`` (circuit order kept) with each sibling of a ``[network.values]`` name replaced by
    the named kind (:func:`_sibling`)."""
    swaps = {_sibling(n, comps): n for n in design.network.values if _sibling(n, comps)}
    if not swaps:
        return comps
    out = {}
    for name, comp in comps.items():
        if name in swaps:
            new = swaps[name]
            kind = "L" if new.endswith("_l") else "C"
            out[new] = Component(new, kind, comp.value, comp.how, comp.role, comp.lossy)
        else:
            out[name] = comp
    return out


#: name ending -> kind of a component a user template adds through [network.values]
_USER_KINDS = {"_l": "L", "_c": "C", "_r": "R"}


def _apply_overrides(design: Design, comps: dict[str, Component], topo: str) -> dict[str, Component]:
    comps = _swap_siblings(design, comps)
    out = dict(comps)
    for name, text in design.network.values.items():
        key = f"network.values.{name}"
        if name not in comps and design.topology.endswith(".j2") and name[-2:] in _USER_KINDS:
            # a component the user template adds: its kind from the name, its value from here
            kind = _USER_KINDS[name[-2:]]
            value = parse_quantity(text, COMPONENT_UNITS[kind], key)
            if not (value > 0 and math.isfinite(value)):
                raise DesignError(f"{key}: {value:g} {COMPONENT_UNITS[kind]} is not positive; give a value > 0.")
            out[name] = Component(name, kind, value, "set in [network.values] (a component of the user template)",
                                  "user", kind != "R")
            continue
        if name not in comps:
            close = difflib.get_close_matches(name, list(comps), n=1, cutoff=0.4)
            hint = f"did you mean '{close[0]}'?" if close else "valid names: " + ", ".join(comps)
            raise DesignError(f"{key}: {topo} has no component '{name}'; {hint}")
        comp = comps[name]
        value = parse_quantity(text, comp.unit, key)
        if not (value > 0):
            raise DesignError(f"{key}: {value:g} {comp.unit} is not positive; give a value > 0.")
        out[name] = Component(name, comp.kind, value, "set in [network.values]", comp.role, comp.lossy)
    for name, comp in out.items():
        if not math.isfinite(comp.value):
            raise SizingError(f"network.values.{name}: the L-section with network.match_shunt = "
                              f"'{design.network.match_shunt}' cannot reach Ropt from RL = {design.load_ohm:g} ohm by "
                              f"formula; give {name} in [network.values] or set network.match_shunt = 'auto'.")
    return out


# ---------------------------------------------------------------- sized design file

def sized_toml_text(sized: SizedDesign) -> str:
    """A fully valued design file: the input keys plus ``[network.values]`` with every component.

    Values are written with full float precision (``repr``) so that loading the file back
    and sizing gives identical values; a comment beside each says how it was obtained.
    """
    import tomlkit

    raw = sized.design.raw or {}
    doc = tomlkit.document()
    doc.add(tomlkit.comment(f"Sized design '{sized.design.name}' written by pashape; edit and load again."))
    doc.add(tomlkit.comment("[network.values] (and [drive.values], the input network) hold every component; each overrides sizing when loaded."))
    for section, table in raw.items():
        if not isinstance(table, dict):
            continue
        t = tomlkit.table()
        for key, value in table.items():
            if section == "network" and key in ("values", "match_shunt"):
                continue
            if section == "drive" and key == "values" and sized.input_network:
                continue
            t.add(key, value)
        if section == "network":
            _add_fixed_circuit(t, sized)
        if section == "drive" and sized.input_network:
            t.add("values", _values_table(sized, sized.input_network))  # the input network, [drive.values]
        doc.add(section, t)
    if "network" not in raw:
        t = tomlkit.table()
        _add_fixed_circuit(t, sized)
        doc.add("network", t)
    return tomlkit.dumps(doc)


def _add_fixed_circuit(t, sized: SizedDesign) -> None:
    """``match_shunt`` (the L-section's orientation as sized) and ``values``: what a loaded sized
    file needs to give back this circuit, whatever its supply or load are edited to."""
    t.add("match_shunt", match_orientation(sized.components))
    t.add("values", _values_table(sized))


def _values_table(sized: SizedDesign, comps=None):
    """``[network.values]`` (or ``comps``, the input network's ``[drive.values]``): every component,
    with how it was obtained as the comment."""
    import tomlkit

    vals = tomlkit.table()
    for comp in (sized.components if comps is None else comps).values():
        item = tomlkit.item(f"{comp.value!r} {comp.unit}")
        item.comment(f"{format_quantity(comp.value, comp.unit)}: {comp.how}")
        vals.add(comp.name, item)
    return vals


def write_sized_toml(sized: SizedDesign, path: str | Path) -> Path:
    """Write :func:`sized_toml_text` to ``path`` atomically (:func:`netgen.fileio.atomic_write_text`:
    the user's umask, no temporary file left behind when the disk is full)."""
    from netgen.fileio import atomic_write_text

    return atomic_write_text(Path(path), sized_toml_text(sized))
