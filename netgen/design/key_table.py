"""The one table of design keys: every key's unit, default, range and meaning, and the file limits.

Loading and validation (:mod:`netgen.design.schema`), the reference page and the dotted paths of
sweeps and tolerances (:mod:`netgen.design.keys`) all read :data:`SCHEMA`, so they cannot drift
apart. The order of the table is the order of the reference page (docs/design_reference.md).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from .presets import DEVICE_PRESETS

__all__ = ["BLOCK_SECTIONS", "DEVICE_MODELS", "Key", "MAX_DEPTH", "MAX_FILE_BYTES", "MAX_KEYS", "SAFE_NAME", "SCHEMA", "TOPOLOGIES"]


#: Built-in topology names (see :mod:`netgen.synthesis.topologies`).
TOPOLOGIES = (
    "class_f_line",
    "class_f_feed",
    "class_f_lumped",
    "inverse_f_line",
    "class_e",
    "class_b_tuned",
)
DEVICE_MODELS = ("switch", "gm", "spice", "angelov")
#: what a Touchstone block replaces (docs/touchstone_blocks.md)
BLOCK_SECTIONS = ("network", "match", "template")

#: Names that reach a netlist (design name, subcircuit name, component names).
SAFE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,63}$")
#: A design file larger than this is refused (hand-written designs are a few kB).
MAX_FILE_BYTES = 1_000_000
#: deepest nesting of tables and arrays in a design file (a design needs 3: [network.values])
MAX_DEPTH = 8
#: most keys and array items in a design file, counted over all tables (a design has tens)
MAX_KEYS = 5_000


@dataclass(frozen=True)
class Key:
    """One key of the schema: its unit ('' plain number, 'str', 'bool', 'int'), default and range."""

    attr: str
    unit: str
    default: Any
    doc: str
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False  # True: value must be > lo (else >= lo)
    choices: tuple[str, ...] | None = None
    required: bool = False


_INF = math.inf

#: section -> key -> Key. The order is the order of the reference page.
SCHEMA: dict[str, dict[str, Key]] = {
    "design": {
        "name": Key("name", "str", None, "Design name; letters, digits, underscore; starts with a letter.", required=True),
        "topology": Key("topology", "str", None, "A built-in topology (" + ", ".join(TOPOLOGIES) + ") or a path to a user template (*.j2), relative to the design file.", required=True),
        "f0": Key("f0_hz", "Hz", None, "Fundamental (operating) frequency.", lo=1e3, hi=1e12, required=True),
        "vdd": Key("vdd_v", "V", None, "Drain supply voltage.", lo=0.0, hi=10e3, lo_open=True, required=True),
        "load": Key("load_ohm", "ohm", "50 ohm", "Load (antenna port) resistance RL.", lo=0.01, hi=1e6),
        "load_x": Key("load_x_ohm", "ohm", "0 ohm", "Load reactance at f0 (load-pull / mismatch studies); realised as a series L (>0) or C (<0) sized at f0.", lo=-1e6, hi=1e6),
        "pout": Key("pout_w", "W", None, "Target fundamental output power; Ropt is sized from it. Give pout or ropt.", lo=0.0, hi=1e7, lo_open=True),
        "ropt": Key("ropt_ohm", "ohm", None, "Optimum drain load resistance at f0 (overrides pout).", lo=0.01, hi=1e6),
    },
    "device": {
        "model": Key("model", "str", "switch", "Device model: switch (idealised switch), gm (transconductance device with knee), spice (user subcircuit), angelov (the Angelov compact FET model, docs/devices.md).", choices=DEVICE_MODELS),
        "ron": Key("ron_ohm", "ohm", "0.2 ohm", "Switch on-resistance.", lo=1e-6, hi=1e4),
        "roff": Key("roff_ohm", "ohm", "1 Mohm", "Switch off-resistance.", lo=1.0, hi=1e15),
        "transition": Key("transition", "", 0.0, "Switch edge time as a fraction of the period; 0 is an abrupt switch. A finite edge is a real loss (the switch conducts while the voltage is high).", lo=0.0, hi=0.25),
        "reverse_conduction": Key("reverse_conduction", "str", "diode", "switch: what conducts when the drain is driven below ground. diode: a body diode across the switch, piecewise linear (no current above -diode_vf, then 1/diode_ron), as real switches conduct in reverse (body diode or channel); none: only the switch's off resistance (the drain may swing far negative, as no real device allows).", choices=("diode", "none")),
        "diode_vf": Key("diode_vf_v", "V", "0.7 V", "switch with reverse_conduction = diode: forward drop at which the diode starts to conduct (0.7 V is a silicon body diode, common practice).", lo=0.0, hi=100.0),
        "diode_ron": Key("diode_ron_ohm", "ohm", None, "switch with reverse_conduction = diode: the diode's resistance above its forward drop; default: device.ron.", lo=1e-6, hi=1e4),
        "duty": Key("duty", "", 0.5, "Fraction of the period the switch is on.", lo=0.05, hi=0.95),
        "cout": Key("cout_f", "F", "0 F", "Device output capacitance (drain to source, at the current generator: the intrinsic plane). Sizing absorbs it (docs/topologies.md, 'The intrinsic plane'). switch, gm and angelov: the netlist adds it as COUT (angelov with cds_law = junction: a junction diode whose capacitance at Vdd is this value). spice: the model holds its own output capacitance, so the netlist adds nothing; give the model's value here so that sizing absorbs it (counted once).", lo=0.0, hi=1.0),
        "package_l": Key("package_l_h", "H", "0 H", "Package series inductance Ld between Cout and the drain terminal (bond wire); absorbed in sizing like Cout.", lo=0.0, hi=1.0),
        "package_c": Key("package_c_f", "F", "0 F", "Package shunt capacitance Cp at the drain terminal (the package plane); absorbed in sizing like Cout.", lo=0.0, hi=1.0),
        "imax": Key("imax_a", "A", None, "gm device: peak drain current; default sized from the design (Raab/Cripps Fourier coefficients).", lo=0.0, hi=1e4, lo_open=True),
        "vknee": Key("vknee_v", "V", "0 V", "gm device: knee voltage (drain current = gm-limited current x tanh(vds/vknee)).", lo=0.0, hi=1e3),
        "conduction_angle": Key("conduction_angle_deg", "deg", "180 deg", "gm device: conduction angle at full drive (180 deg is class-B bias).", lo=10.0, hi=360.0),
        "drive": Key("drive", "", 1.0, "gm and spice devices: relative drive level (1.0 reaches imax).", lo=0.0, hi=20.0, lo_open=True),
        "rgate": Key("rgate_ohm", "ohm", "50 ohm", "gm device: gate input resistance used for the drive power (PAE).", lo=0.01, hi=1e6),
        "include": Key("include", "str", None, "spice device: path of the model file to .include (relative to the design file, inside its folder; models, subcircuits and .param only)."),
        "subckt": Key("subckt", "str", None, "spice device: subcircuit name in the included file."),
        "pins": Key("pins", "pins", None, "spice device: subcircuit pin order as a list of 'drain', 'gate', 'source', e.g. [\"drain\", \"gate\", \"source\"]."),
        "vgate_bias": Key("vgate_bias_v", "V", "0 V", "spice and angelov devices: gate DC bias (angelov: the source of [drive] sits on it).", lo=-1e3, hi=1e3),
        "vgate_amp": Key("vgate_amp_v", "V", "1 V", "spice device: gate drive amplitude (sine at f0), scaled by drive.", lo=0.0, hi=1e3),
        "preset": Key("preset", "str", None, "angelov device: a named parameter set of an invented generic device (" + ", ".join(DEVICE_PRESETS) + "; docs/devices.md); keys given in [device] override it.", choices=tuple(DEVICE_PRESETS)),
        "ipk": Key("ipk_a", "A", "0.5 A", "angelov: Ipk, drain current at the peak of the transconductance (Ids = Ipk (1 + tanh psi) tanh(alpha Vds)(1 + lambda Vds)).", lo=0.0, hi=1e4, lo_open=True),
        "vpk": Key("vpk_v", "V", "-1 V", "angelov: Vpk, gate-source voltage at the peak of the transconductance.", lo=-100.0, hi=100.0),
        "p1": Key("p1_per_v", "", 1.5, "angelov: P1 in 1/V, linear coefficient of psi = P1 (Vgs - Vpk) + P2 (Vgs - Vpk)^2 + P3 (Vgs - Vpk)^3.", lo=1e-3, hi=1e3),
        "p2": Key("p2_per_v2", "", 0.0, "angelov: P2 in 1/V^2, quadratic coefficient of psi.", lo=-1e3, hi=1e3),
        "p3": Key("p3_per_v3", "", 0.0, "angelov: P3 in 1/V^3, cubic coefficient of psi.", lo=-1e3, hi=1e3),
        "alpha": Key("alpha_per_v", "", 2.0, "angelov: alpha in 1/V, the knee (saturation) parameter of tanh(alpha Vds).", lo=1e-3, hi=1e4),
        "lambda": Key("lambda_per_v", "", 0.0, "angelov: lambda in 1/V, channel-length modulation (output conductance) of (1 + lambda Vds).", lo=0.0, hi=1.0),
        "rd": Key("rd_ohm", "ohm", "0 ohm", "angelov: drain access resistance Rd (0: none).", lo=0.0, hi=1e3),
        "rs": Key("rs_ohm", "ohm", "0 ohm", "angelov: source access resistance Rs (0: none; it degenerates the gate drive).", lo=0.0, hi=1e3),
        "ri": Key("ri_ohm", "ohm", "0 ohm", "angelov: intrinsic gate resistance Ri in series with the gate junctions (Cgs, Cgd) behind the gate terminal; the channel is controlled by the voltage behind it, and the drive's input power is lost in it (0: none; docs/devices.md).", lo=0.0, hi=1e3),
        "cgs0": Key("cgs0_f", "F", "1 pF", "angelov: gate-source junction capacitance at zero bias (Cgs = Cgs0 / (1 - Vgs/Vbi)^M, a SPICE junction diode).", lo=0.0, hi=1.0),
        "cgd0": Key("cgd0_f", "F", "0.1 pF", "angelov: gate-drain junction capacitance at zero bias (Cgd = Cgd0 / (1 - Vgd/Vbi)^M).", lo=0.0, hi=1.0),
        "vbi": Key("vbi_v", "V", "0.8 V", "angelov: built-in potential Vbi of the gate junctions.", lo=0.05, hi=5.0),
        "mj": Key("mj", "", 0.5, "angelov: grading exponent M of the gate junctions.", lo=0.05, hi=0.95),
        "vcj": Key("vcj_v", "V", "0 V", "angelov: offset of both gate junctions, a DC source in series with each diode (C = C0 / (1 - (V - Vcj)/Vbi)^M); 0 for a Schottky gate (it conducts forward as a real one), above the largest gate swing for an insulated gate.", lo=-100.0, hi=100.0),
        "rev_is": Key("rev_is_a", "A", "1e-12 A", "angelov: saturation current of the reverse-conduction (body/channel) diode from source to drain.", lo=1e-30, hi=1.0),
        "rev_n": Key("rev_n", "", 1.0, "angelov: emission coefficient of the reverse-conduction diode.", lo=0.5, hi=5.0),
        "cds_law": Key("cds_law", "str", "linear", "angelov: the drain-source capacitance. linear: device.cout, a fixed capacitor COUT; junction: a reverse-biased junction Cds(Vds) = Cds0 / (1 + Vds/cds_vj)^cds_m (the depletion law, a SPICE junction diode DCDS in place of COUT), with device.cout its value at Vds = Vdd (Cds0 = cout (1 + Vdd/cds_vj)^cds_m); sizing absorbs cout, the nonlinear part is left to the simulation (docs/devices.md).", choices=("linear", "junction")),
        "cds_vj": Key("cds_vj_v", "V", "0.8 V", "angelov with cds_law = junction: built-in potential Vj of the drain-source junction.", lo=0.05, hi=10.0),
        "cds_m": Key("cds_m", "", 0.5, "angelov with cds_law = junction: grading exponent M of the drain-source junction (0.5 abrupt, 0.33 linearly graded, common practice).", lo=0.05, hi=0.95),
    },
    "drive": {
        "pin": Key("pin_dbm", "dBm", "20 dBm", "angelov device: available power of the gate source, Pavail = |Vs|^2/(8 Rs) (dBm, or W converted to dBm).", lo=-100.0, hi=90.0),
        "source_r": Key("source_r_ohm", "ohm", "50 ohm", "angelov device: source resistance Rs of the gate drive.", lo=0.01, hi=1e6),
        "match": Key("match", "str", "none", "angelov device: input matching network from the source resistance to the device's input impedance at f0 at the bias point: none (the gate behind the source resistance), lowpass (the L-section with the shunt capacitor) or highpass (the L-section with the shunt inductor; needs drive.bias); Pozar's L-section formulas, docs/devices.md.", choices=("none", "lowpass", "highpass")),
        "bias": Key("bias", "str", "none", "angelov device: gate bias network: none (the drive source carries device.vgate_bias), choke (an RF choke from a gate-bias supply at device.vgate_bias, with a DC block toward the source) or resistor (a resistor feed, drive.bias_r, with the DC block).", choices=("none", "choke", "resistor")),
        "bias_r": Key("bias_r_ohm", "ohm", "1 kohm", "angelov device: resistance of the resistor gate feed (drive.bias = resistor).", lo=1.0, hi=1e8),
        "values": Key("values", "values", {}, "angelov device: explicit values of the input network by name (in_series_l, in_shunt_c, in_block_c, in_feed_l, in_feed_r ...; `pashape size` lists them); they override sizing."),
    },
    "network": {
        "loaded_q": Key("loaded_q", "", 5.0, "Loaded Q of the f0 tank / series-tuned output (sets tank L and C).", lo=0.5, hi=1000.0),
        "resonator_z": Key("resonator_z_ohm", "ohm", None, "class_f_lumped: characteristic impedance sqrt(L/C) of the harmonic resonators (default: balances the even-harmonic short against the odd-harmonic open for the inductor Q, about 0.1-0.2 Ropt; see netgen.synthesis.sizing.lumped_resonator_z).", lo=0.1, hi=1e5),
        "harmonics": Key("harmonics", "int", 2, "class_f_lumped: number of odd harmonics with a resonator (3f0 .. (2N+1)f0); with a device Cout (or package) in class F and inverse F: number of harmonics the Cout compensator opens (class F 3f0 .. (2N+1)f0, inverse F 2f0 .. 2N f0).", lo=1, hi=10),
        "eps_eff": Key("eps_eff", "", 1.0, "Effective relative permittivity of the lines (for the physical length of a quarter-wave line).", lo=1.0, hi=200.0),
        "inductor_q": Key("inductor_q", "", _INF, "Unloaded Q of every inductor at f0 (series loss resistance omega0*L/Q at f0; network.inductor_loss_law says how it scales with frequency); inf is lossless.", lo=1.0, hi=_INF),
        "inductor_loss_law": Key("inductor_loss_law", "str", "constant_q", "How an inductor's loss resistance scales with frequency: constant_q (R = omega L/Q, proportional to f: the part keeps its Q at every harmonic), skin (R proportional to sqrt(f), anchored at omega0 L/Q at f0: skin-effect conductor loss, Q rises as sqrt(f)) or fixed (the f0 value at every frequency). Realised in the transient netlist as a fitted passive RL ladder (docs/losses.md).", choices=("constant_q", "skin", "fixed")),
        "capacitor_esr": Key("capacitor_esr_ohm", "ohm", "0 ohm", "Series resistance of every RF capacitor at f0 (network.capacitor_loss_law says how it scales with frequency).", lo=0.0, hi=100.0),
        "capacitor_loss_law": Key("capacitor_loss_law", "str", "constant_esr", "How a capacitor's ESR scales with frequency: constant_esr (the same at every frequency) or constant_q (a constant loss tangent, ESR = tan(delta)/(omega C), proportional to 1/f, anchored at network.capacitor_esr at f0). constant_q is realised as a fitted passive RC ladder (docs/losses.md).", choices=("constant_esr", "constant_q")),
        "line_loss": Key("line_loss_db", "dB", "0 dB", "Loss of each quarter-wave line at f0 (realised as distributed series resistance; network.line_loss_law says how it scales with frequency).", lo=0.0, hi=10.0),
        "line_loss_law": Key("line_loss_law", "str", "conductor_dielectric", "How line attenuation scales with frequency: conductor_dielectric (alpha(f) = a_c sqrt(f/f0) + a_d f/f0, conductor plus dielectric loss, split by network.line_dielectric_share) or fixed (the f0 loss at every frequency).", choices=("conductor_dielectric", "fixed")),
        "line_dielectric_share": Key("line_dielectric_share", "", 0.0, "Share of network.line_loss at f0 that is dielectric loss (a_d; proportional to f), the rest being conductor loss (a_c; proportional to sqrt(f)); 0 suits a low-loss laminate where conductor loss dominates.", lo=0.0, hi=1.0),
        "feed_l": Key("feed_l_h", "H", None, "DC-feed choke inductance (default: reactance 60 x Ropt at f0).", lo=0.0, hi=1.0, lo_open=True),
        "block_c": Key("block_c_f", "F", None, "DC-block capacitance (default: reactance Ropt/60 at f0).", lo=0.0, hi=1.0, lo_open=True),
        "match": Key("match", "str", "lowpass", "Ropt -> RL matching section where the topology needs one: lowpass or highpass L-section.", choices=("lowpass", "highpass")),
        "match_shunt": Key("match_shunt", "str", "auto", "Where the L-section's shunt element sits: auto (at the higher-resistance side, decided from Ropt and RL when sizing), input (drain side), load (across the load) or none (series element only). `pashape size` and sweeps write the nominal choice, so a sized design keeps its circuit when Vdd or the load move Ropt across RL.", choices=("auto", "input", "load", "none")),
        "values": Key("values", "values", {}, "Explicit component values by name (e.g. tank_l = \"2.4 nH\"); they override sizing."),
        "srf": Key("srf_hz", "srf", {}, "Self-resonant frequency of a part by component name (e.g. tank_l = \"6 GHz\", from its datasheet); `pashape size` and `pashape run` warn when it is below 2 x the highest harmonic the part acts at (docs/losses.md, buildability)."),
    },
    "block": {
        "file": Key("file", "str", None, "Touchstone file (.s1p/.s2p, version 1 or 2) of a measured or EM-simulated network, relative to the design file; the block replaces block.section (docs/touchstone_blocks.md)."),
        "section": Key("section", "str", "network", "What the block replaces: network (everything between the drain and RLOAD except the DC feed; port 1 at the drain, port 2 at RLOAD), match (the L-section match and load reactance before RLOAD), or template (a user template places it with dev.touchstone(...)).", choices=BLOCK_SECTIONS),
        "order": Key("order", "int", 0, "Order of the rational (vector) fit ngspice runs: real poles + 2 x complex pairs; 0 picks the lowest order that meets block.fit_tol.", lo=0, hi=60),
        "fit_tol": Key("fit_tol", "", 0.01, "Largest allowed |S_fit - S_file| over the file's points from DC to sim.harmonics x f0; a worse fit is refused.", lo=1e-6, hi=0.5),
        "passivity": Key("passivity", "str", "enforce", "A rational fit that is not passive: enforce (scikit-rf's passivity enforcement, then re-checked) or refuse.", choices=("enforce", "refuse")),
    },
    "sim": {
        "points_per_cycle": Key("points_per_cycle", "int", 1000, "Maximum time step as a fraction of the period (TMAX = T/points_per_cycle).", lo=50, hi=20000),
        "settle_tol": Key("settle_tol", "", 1e-3, "Relative tolerance on DC power, load power and drain waveform for periodic steady state.", lo=1e-6, hi=0.1),
        "min_cycles": Key("min_cycles", "int", 6, "Cycles simulated before convergence is judged.", lo=2, hi=1_000_000),
        "max_cycles": Key("max_cycles", "int", 3000, "Give up (and report 'not settled') after this many cycles.", lo=4, hi=1_000_000),
        "timeout": Key("timeout_s", "s", "600 s", "Wall-clock limit of one simulation.", lo=0.1, hi=1e6),
        "harmonics": Key("harmonics", "int", 5, "Harmonics analysed and reported (n = 1..N).", lo=1, hi=50),
        "average_periods": Key("average_periods", "int", 6, "Settled periods averaged for the harmonic table (V_n, I_n, Z_n, power per harmonic); raise it where harmonics scatter from cycle to cycle (lossless lines with a hard switch).", lo=2, hi=100_000),
        "warm_start": Key("warm_start", "bool", True, "Start warm (true; see periodic_start) or from zero (false)."),
        "periodic_start": Key("periodic_start", "bool", True, "Warm start on the periodic steady state computed directly from the netlist (true; where the netlist has parts that computation does not model, and with false, the DC state of feed and block with bias-mode nulling)."),
        "backend": Key("backend", "str", "shared", "Simulator path: shared (libngspice through PySpice) or batch (the ngspice executable).", choices=("shared", "batch")),
    },
}

# Keys the sweep / tolerance commands may add at the top level of a design file.
_EXTRA_SECTIONS = ("sweep", "tolerance", "meta")


