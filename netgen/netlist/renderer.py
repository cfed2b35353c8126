"""Render a :class:`~netgen.design.records.SizedDesign` into netlist text through Jinja templates.

A user template renders in a sandboxed environment (``SandboxedEnvironment`` with bounded work,
netlist/sandbox.py), the templates shipped in the package in a plain one with the same settings
(package code; identical output); undefined names are errors (``StrictUndefined``), nothing is
escaped, and numbers reach the text only through our ``n`` filter (``'{:.10g}'``). The only user
text placed in a netlist is the validated design name (:data:`netgen.design.schema.SAFE_NAME`) and
the checked model-file path of a spice device.
Output is byte-identical for identical input (no timestamps). Every context variable is
documented in docs/template_context.md; the portable dialect in docs/portable_dialect.md.

Length (just over 600 lines): the template context is one mapping built in one place so that the
templates and docs/template_context.md can be checked against it; splitting it would scatter it.
"""

from __future__ import annotations

import functools
import math
import re
from fractions import Fraction
from pathlib import Path

import jinja2

from netgen import __version__
from netgen.design import SizedDesign
from netgen.errors import RenderError
from netgen.synthesis import comp_branches, element_name, line_plan, loss_net, loss_ohm, tail_plan

from .portable import format_number as _fmt
from .portable import portable_cards
from .safety import check_model_file, check_netlist_text
from .sandbox import BoundedEnvironment, LimitExceeded, bounded

__all__ = ["render", "cds_junction", "loss_elements", "dc_islands", "template_dir", "ac_grid", "template_context", "MODES", "DIALECTS"]

MODES = ("tran", "ac", "op")
#: the small-signal two-port of a driven angelov design (render only; netgen.studies.small_signal)
SS_MODE = "ss"
#: where an ``ac`` netlist puts its port: the drain terminal (the network alone) or the generator
PLANES = ("package", "intrinsic")
DIALECTS = ("ngspice", "portable")
#: default AC grid: this many points per f0 from f0/AC_POINTS_PER_F0 up to harmonics x f0
AC_POINTS_PER_F0 = 50
_MAX_AC_POINTS = 200_001
#: Cout series time constant in maximum time steps (resolved by the trapezoidal rule)...
COUT_TAU_STEPS = 4
#: ...and at least this fraction of the period (fixed physics when points_per_cycle >= 500)
COUT_TAU_PERIODS = 1.0 / 125.0
_RLOSS = re.compile(r"^(RLOSS_\S+)\s+(\S+)\s+(\S+)\s+(\S+)", re.IGNORECASE | re.MULTILINE)


def template_dir() -> Path:
    """Folder of the built-in templates (the ``netgen.templates`` package)."""
    import netgen.templates as pkg

    return Path(pkg.__file__).resolve().parent


def design_folder(design) -> Path:
    """The folder included files must lie in: the design file's folder (the current one without a file)."""
    return (design.source.parent if design.source is not None else Path.cwd()).resolve()




def _make_environment(cls):
    """An environment of class ``cls`` with the template folder and our settings and filter."""
    env = cls(
        loader=jinja2.FileSystemLoader(str(template_dir())),
        undefined=jinja2.StrictUndefined,
        autoescape=False,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    env.filters["n"] = _fmt  # our own filter: not wrapped in the sandbox (it only formats one number)
    env.globals["loss_chain_cards"] = loss_chain_cards
    return env


def loss_chain_cards(c: dict, b: str) -> str:
    """The cards of part ``c``'s loss from its internal node ``x_<name>`` to node ``b`` (the
    template context's component entry): ``RLOSS_<name>`` (R0), then the ladder sections
    ``RLOSS_<name>__s<k>`` || ``LLAD_/CLAD_<name>__s<k>`` of a frequency law (docs/losses.md), one
    card a line. The body of devices.j2's ``_loss_chain`` (a loop of a few cards a part, which
    Jinja's macro machinery made the slowest part of rendering)."""
    name, sections = c["name"], c["sections"]
    node = f"x_{name}"
    out = []
    if c["r0"] > 0:
        nxt = f"x_{name}__0" if sections else b
        out.append(f"RLOSS_{name} {node} {nxt} {_fmt(c['r0'])}")
        node = nxt
    for k, (r, x) in enumerate(sections, start=1):
        nxt = b if k == len(sections) else f"x_{name}__{k}"
        out.append(f"RLOSS_{name}__s{k} {node} {nxt} {_fmt(r)}")
        out.append(f"{c['kind']}LAD_{name}__s{k} {node} {nxt} {_fmt(x)}")
        node = nxt
    return "\n".join(out)


@functools.lru_cache(maxsize=1)
def _environment() -> BoundedEnvironment:
    """The shared sandboxed environment (built once per process; templates are cached)."""
    return _make_environment(BoundedEnvironment)


@functools.lru_cache(maxsize=1)
def _package_environment() -> jinja2.Environment:
    """The environment of the templates shipped in the package: the same loader, settings and
    filter as the sandbox, without its per-call checks (this is package code, as trusted as the
    renderer itself; the rendered text is checked all the same). Same output, about half the time:
    tests/test_render.py renders every shipped design both ways."""
    return _make_environment(jinja2.Environment)


def ac_grid(freqs_hz) -> tuple[int, float, float]:
    """One ``.ac lin N f1 f2`` grid that contains every requested frequency exactly.

    The step is the largest common divisor of the frequency differences (found with
    rational approximation to 1e-9 relative); N = (f2 - f1)/step + 1, and 3 instead of 2
    (ngspice 39 gives only f1 for ``lin 2``).

    Raises
    ------
    RenderError
        When no common step gives at most 200001 points.
    """
    f = sorted({float(x) for x in freqs_hz})
    if not f or f[0] <= 0:
        raise RenderError("ac_freqs_hz: give at least one positive frequency.")
    if len(f) == 1:
        return 1, f[0], f[0]
    scale = f[-1]
    step = None
    for x in f[1:]:
        frac = Fraction((x - f[0]) / scale).limit_denominator(10**7)
        step = frac if step is None else Fraction(math.gcd(step.numerator * frac.denominator, frac.numerator * step.denominator),
                                                   step.denominator * frac.denominator)
    n = int(round((f[-1] - f[0]) / (float(step) * scale))) + 1
    if n == 2:  # ngspice 39 returns only the start point of ".ac lin 2 f1 f2" (measured): add the midpoint
        n = 3
    if n > _MAX_AC_POINTS:
        raise RenderError(f"ac_freqs_hz: no common grid of at most {_MAX_AC_POINTS} points holds all {len(f)} frequencies; request fewer or rounder frequencies.")
    return n, f[0], f[-1]


def _comp_ctx(sized: SizedDesign) -> dict:
    out = {}
    for name, c in sized.components.items():
        ln = loss_net(sized, name) if c.kind in ("L", "C") else None
        out[name] = {
            "name": name,
            "kind": c.kind,
            "value": c.value,
            "unit": c.unit,
            "element": element_name(name),
            "rloss": loss_ohm(sized, name),
            # the rendered main value and the loss ladder (netgen.synthesis.losses; docs/losses.md)
            "main": ln.main if ln is not None else c.value,
            "r0": ln.r0_ohm if ln is not None else 0.0,
            "sections": ln.sections if ln is not None else (),
            "how": c.how,
            "role": c.role,
        }
    return out


def _header_lines(sized: SizedDesign, mode: str, dialect: str, digest: str) -> list[str]:
    d = sized.design
    lines = [
        f"pashape {__version__} netlist: design {d.name}, topology {d.topology if d.template_path is None else Path(d.topology).name}, mode {mode}, dialect {dialect}",
        f"f0 = {_fmt(d.f0_hz)} Hz, Vdd = {_fmt(d.vdd_v)} V, RL = {_fmt(d.load_ohm)} ohm, load_x = {_fmt(d.load_x_ohm)} ohm, device {d.device.model}",
        f"Ropt = {_fmt(sized.ropt_ohm)} ohm; sized-design digest {digest}",
        "components (name = value unit: how):",
    ]
    for c in sized.components.values():
        lines.append(f"  {c.name} = {_fmt(c.value)} {c.unit}: {c.how}")
    if d.block.file is not None:
        lines.append(f"Touchstone block: {_ascii(Path(d.block.file).name)} replaces {d.block.section}; subcircuit NGBLOCK "
                     "at the end of this netlist (docs/touchstone_blocks.md)")
    lines.append("derived values:")
    for k, (v, unit, how) in sized.derived.items():
        lines.append(f"  {k} = {_fmt(v)} {unit}: {how}")
    # header text is ours, but never let a line break escape the comment
    return ["* " + ln.replace("\n", " ").replace("\r", " ") for ln in lines]


def template_context(sized: SizedDesign, mode: str = "tran", dialect: str = "ngspice", *, tstop_s=None,
                     ic=None, ac_freqs_hz=None, idc_a=None, plane: str = "package", ss_port: int = 1) -> dict:
    """The variables a template sees (documented in docs/template_context.md).

    Length: one dict literal, entry by entry the documented template context
    (docs/template_context.md).
    """
    d = sized.design
    dev = d.device
    period = 1.0 / d.f0_hz
    tmax = period / d.sim.points_per_cycle
    tstop = float(tstop_s) if tstop_s is not None else d.sim.max_cycles * period
    if not (tstop > 0 and math.isfinite(tstop)):
        raise RenderError(f"tstop_s: {tstop_s!r} is not a positive finite time; give the simulated time in seconds.")
    digest = sized.digest()  # the header's and the context's
    if ac_freqs_hz is None:
        h = d.sim.harmonics
        ac = (AC_POINTS_PER_F0 * h, d.f0_hz / AC_POINTS_PER_F0, h * d.f0_hz)
    else:
        ac = ac_grid(ac_freqs_hz)
    lines = {}
    for name in sized.components:
        if name.endswith("_z0"):
            base = name[:-3]
            plan = line_plan(sized, base)
            plan["element"] = f"T_{base}"
            plan["base"] = base
            lines[base] = plan
    tail = []
    plan = tail_plan(sized)
    n_series = sum(1 for _, how in plan if how == "series")
    node = "t0" if n_series else "load"
    tail_in = node
    k = 0
    for name, how in plan:
        if how == "series":
            k += 1
            nxt = "load" if k == n_series else f"t{k}"
            tail.append({"comp": name, "how": "series", "a": node, "b": nxt})
            node = nxt
        else:
            tail.append({"comp": name, "how": "shunt", "a": node, "b": "0"})
    device = {
        "model": dev.model,
        "ron_ohm": dev.ron_ohm,
        "roff_ohm": dev.roff_ohm,
        "transition": dev.transition,
        "duty": dev.duty,
        "cout_f": dev.cout_f,
        "package_l_h": dev.package_l_h,
        "package_c_f": dev.package_c_f,
        "vknee_v": dev.vknee_v,
        "drive": dev.drive,
        "rgate_ohm": dev.rgate_ohm,
        "vgate_bias_v": dev.vgate_bias_v,
        "vgate_amp_v": dev.vgate_amp_v,
        "conduction_angle_deg": dev.conduction_angle_deg,
        "cds_law": "linear",
    }
    device["cout_rs_ohm"] = cout_series_ohm(dev.cout_f, period, tmax) if (lines and dev.cout_f > 0 and not _soft_turn_on(d)) else 0.0
    if dev.model == "switch":
        edge = dev.transition * period if dev.transition > 0 else period / 200.0
        pw = dev.duty * period - edge
        if pw <= 0:
            raise RenderError(f"device.transition: {dev.transition:g} of a period is longer than the on-time (device.duty = {dev.duty:g}); lower the transition.")
        device.update(edge_s=edge, pw_s=pw, reverse_conduction=dev.reverse_conduction, diode_vf_v=dev.diode_vf_v,
                      diode_g_s=1.0 / (dev.diode_ron_ohm if dev.diode_ron_ohm is not None else dev.ron_ohm))
    elif dev.model == "gm":
        alpha = math.radians(dev.conduction_angle_deg) / 2.0
        imax = sized.derived["imax_a"][0]
        device.update(imax_a=imax, vg_bias=-math.cos(alpha), gm_a_per_v=imax / (1.0 - math.cos(alpha)))
    elif dev.model == "angelov":
        device["angelov"] = _angelov_ctx(d, sized)
        if dev.cds_law == "junction":
            device.update(cds_law="junction", cds=cds_junction(dev.cout_f, d.vdd_v, dev.cds_vj_v, dev.cds_m))
    else:
        pins = {"drain": "dsw", "gate": "gate", "source": "0"}
        device["nodes"] = " ".join(pins[p] for p in dev.pins)
        device["subckt"] = dev.subckt
        device.update(_include(sized, dialect))
    ic = dict(ic or {})
    for k_, v_ in ic.items():
        _fmt(v_)
    block = _block_ctx(sized, tail)
    return {
        "design": {"name": d.name, "topology": d.topology, "f0_hz": d.f0_hz, "vdd_v": d.vdd_v,
                   "load_ohm": d.load_ohm, "load_x_ohm": d.load_x_ohm, "period_s": period},
        "device": device,
        "comp": _comp_ctx(sized),
        "lines": lines,
        "has_line": bool(lines),
        "tail": tail,
        "tail_in": tail_in,
        "block": block,
        "resonators": sorted(int(m.group(1)) for m in (re.match(r"^res(\d+)_l$", k) for k in sized.components) if m),
        "mode": mode,
        "dialect": dialect,
        "ic": ic,
        "tran": {"tstep_s": tmax, "tstop_s": tstop, "tmax_s": tmax, "minbreak_s": 0.01 * tmax},
        "ac": {"points": ac[0], "fstart_hz": ac[1], "fstop_hz": ac[2], "plane": plane},
        "ss_ports": {"port1": 1.0 if ss_port == 1 else 0.0, "port2": 1.0 if ss_port == 2 else 0.0},
        "comp_branches": comp_branches(sized),
        "idc_a": float(idc_a) if idc_a is not None else sized.idc_est_a,
        "header_lines": _header_lines(sized, mode, dialect, digest),
        "ropt_ohm": sized.ropt_ohm,
        "version": __version__,
        "digest": digest,
    }


def _input_ctx(sized: SizedDesign) -> dict | None:
    """The input network's netlist lines (templates/devices.j2 ``angelov``), source side first:
    ``elements`` (element, nodes a/b, value, series loss ``rloss`` as an ``RLIN_<name>`` resistor,
    the DC block's initial voltage), ``gx`` (the node before the gate sense VIGATE), ``bias``
    (whether a gate-bias supply VGG feeds gx). None without an input network (docs/devices.md)."""
    from netgen.synthesis import input_loss_ohm

    comps = sized.input_network
    if not comps:
        return None
    d = sized.design
    has_block = "in_block_c" in comps
    end = "gm" if has_block else "gx"
    elements = []
    match = [c for c in comps.values() if c.role == "input_match"]
    node = "gin"
    for k, c in enumerate(match):
        series = c.name.startswith("in_series")
        b = (end if k == len(match) - 1 else "gmid") if series else "0"
        elements.append({"name": c.name, "element": f"{c.kind}_{c.name[:-2]}", "a": node, "b": b,
                         "value": c.value, "rloss": input_loss_ohm(d, c), "ic": None})
        if series:
            node = b
    if not match:  # bias network only: the block straight from the source
        end = "gin"
    if has_block:
        c = comps["in_block_c"]
        # its DC voltage from the start: v(source side) - v(gate side) = 0 - Vgg (the source carries no DC)
        elements.append({"name": c.name, "element": "C_in_block", "a": end, "b": "gx", "value": c.value,
                         "rloss": input_loss_ohm(d, c), "ic": -d.device.vgate_bias_v})
        feed = comps.get("in_feed_l") or comps.get("in_feed_r")
        elements.append({"name": feed.name, "element": f"{feed.kind}_in_feed", "a": "vgg", "b": "gx",
                         "value": feed.value, "rloss": 0.0, "ic": None})
    elif node != "gx":
        raise RenderError("drive.match: the input network does not end at the gate; give its values in [drive.values].")
    return {"elements": elements, "bias": has_block}


def _angelov_ctx(design, sized: SizedDesign | None = None) -> dict:
    """Template values of the angelov device (templates/devices.j2 ``angelov``): its parameters,
    the intrinsic node names (``adi``/``asi``/``agi`` behind Rd/Rs/Ri, else ``dsw``/ground/``gate``),
    the control voltages as B-source text, the gate source amplitude from drive.pin and the input network
    (:func:`_input_ctx`; docs/devices.md)."""
    dev, drv = design.device, design.drive
    di = "adi" if dev.rd_ohm > 0 else "dsw"
    si = "asi" if dev.rs_ohm > 0 else "0"
    gi = "agi" if dev.ri_ohm > 0 else "gate"  # the intrinsic gate, behind Ri
    return {
        "ipk_a": dev.ipk_a, "vpk_v": dev.vpk_v, "p1": dev.p1_per_v, "p2": dev.p2_per_v2, "p3": dev.p3_per_v3,
        "alpha": dev.alpha_per_v, "lambda_": dev.lambda_per_v, "rd_ohm": dev.rd_ohm, "rs_ohm": dev.rs_ohm,
        "cgs0_f": dev.cgs0_f, "cgd0_f": dev.cgd0_f, "vbi_v": dev.vbi_v, "mj": dev.mj, "vcj_v": dev.vcj_v,
        "rev_is_a": dev.rev_is_a, "rev_n": dev.rev_n, "di": di, "si": si, "gi": gi, "ri_ohm": dev.ri_ohm,
        "vgs": f"v({gi})" if si == "0" else f"v({gi},{si})",
        "vds": f"v({di})" if si == "0" else f"v({di},{si})",
        "u": f"({f'v({gi})' if si == '0' else f'v({gi},{si})'}-({_fmt(dev.vpk_v)}))",
        "vs_peak_v": drv.vs_peak_v, "source_r_ohm": drv.source_r_ohm,
        "input": _input_ctx(sized) if sized is not None else None,
    }


#: the drain-source junction diode's saturation current, A: tiny, so that it is a capacitor only
#: (the device's reverse conduction is DREV's)
CDS_IS_A = 1e-18
#: SPICE3's forward-bias coefficient FC of the junction capacitance (its default, recalled from memory)
CDS_FC = 0.5


def cds_junction(cout_f: float, vdd_v: float, vj_v: float, m: float) -> dict:
    """The ``DCDS`` diode's model values (templates/devices.j2, docs/devices.md): a reverse-biased
    drain-source junction whose depletion capacitance Cds(Vds) = Cds0 / (1 + Vds/Vj)^M (the abrupt /
    graded junction law, S. M. Sze, "Physics of Semiconductor Devices", ch. 2, recalled from memory;
    the SPICE3 diode's CJO / (1 - V/VJ)^M with V = -Vds) equals ``cout_f`` at Vds = Vdd:
    Cds0 = cout (1 + Vdd/Vj)^M. Returns ``cj0_f`` (F), ``vj_v`` (V), ``m``, ``fc``, ``is_a`` (A)."""
    return {"cj0_f": cout_f * (1.0 + vdd_v / vj_v) ** m, "vj_v": vj_v, "m": m, "fc": CDS_FC, "is_a": CDS_IS_A}


def _soft_turn_on(design) -> bool:
    """Inverse class F: the switch turns on near zero voltage (half-sine drain voltage), so Cout is
    not hard-discharged into the line and needs no series resistance. Measured: sims/inverse_f_line.toml
    settles in 6 cycles with the ideal Cout (efficiency 0.9249 against 0.9194 with the resistance), and a
    5.8 GHz 0.8 pF design in 6 cycles (0.893 against 0.728: the resistance took 0.49 W of the circulating
    Cout current); the class-F examples do not settle without it (docs/simulation.md)."""
    from netgen.errors import NetgenError
    from netgen.synthesis import resolve_topology

    try:
        return resolve_topology(design).wave_class == "invF"
    except NetgenError:
        return False


def _block_ctx(sized: SizedDesign, tail: list) -> dict:
    """The ``block`` context (docs/template_context.md): section, ports, subcircuit name; empty
    section when the design has no Touchstone block (netgen.netlist.touchstone)."""
    from netgen.errors import DesignError

    from .touchstone import SUBCKT_NAME, design_block

    block = design_block(sized.design)
    if block is None:
        return {"section": "", "nports": 0, "subckt": SUBCKT_NAME, "file": ""}
    if block.section == "match" and not tail:
        raise DesignError("block.section: 'match', but the sized design has no match section (Ropt equals RL and "
                          "design.load_x is 0); use block.section = \"network\".")
    return {"section": block.section, "nports": block.nports, "subckt": SUBCKT_NAME, "file": _ascii(block.name)}


def _ascii(text: str) -> str:
    """A file name as plain printable ASCII (it reaches comment lines of the portable dialect)."""
    return "".join(ch if 32 <= ord(ch) < 127 else "_" for ch in text)


def _block_cards(text: str, sized: SizedDesign) -> str:
    """The block's subcircuit text, after checking the rendered netlist places it (one or more
    ``X... <nodes> NGBLOCK`` cards with one node per port); '' without a block."""
    from .touchstone import SUBCKT_NAME, design_block

    block = design_block(sized.design)
    if block is None:
        return ""
    uses = [ln.split() for ln in text.splitlines() if ln[:1] in ("x", "X") and ln.split()[-1].upper() == SUBCKT_NAME]
    if not uses:
        raise RenderError(f"block.file: the template places no block; call {{{{ dev.touchstone(...) }}}} with "
                          f"{block.nports} node(s) (docs/touchstone_blocks.md).")
    for toks in uses:
        if len(toks) != block.nports + 2:
            raise RenderError(f"block.file: {toks[0]} connects {len(toks) - 2} node(s), but '{block.name}' has "
                              f"{block.nports} port(s); give dev.touchstone one node per port.")
    return block.subckt


def cout_series_ohm(cout_f: float, period_s: float, tmax_s: float) -> float:
    """Series resistance given to the device output capacitance in designs with lines, ohm.

    R = tau / Cout with tau = max(COUT_TAU_STEPS * TMAX, COUT_TAU_PERIODS * T): an RC
    corner at f0 / (2 pi COUT_TAU_PERIODS), about 20 f0, above the harmonics analysed.

    Notes
    -----
    Why (measured on sims/demo.toml, see docs/simulation.md, "Hard switching with Cout"):
    a quarter-wave line modelled with frequency-independent loss keeps undamped
    resonances at every harmonic and returns each switching transient after exactly
    T/2, i.e. at the next switching instant. With an ideal Cout (discharge time constant
    Ron*Cout far below the step) the run never settled and the drain showed
    4-6 x Vdd spikes; with this resistance it settles and agrees with a SPICE-free
    harmonic-balance solution. The energy C V^2 / 2 of each hard turn-on is
    independent of the resistance it is dissipated in (textbook RC charging), so the
    discharge loss stays; it is reported as the ``cout`` loss (element ``RLOSS_cout``).
    """
    if cout_f <= 0:
        return 0.0
    tau_s = max(COUT_TAU_STEPS * tmax_s, COUT_TAU_PERIODS * period_s)
    return tau_s / cout_f


def _include(sized: SizedDesign, dialect: str) -> dict:
    path = sized.design.device.include
    if path is None:
        raise RenderError("device.include: a spice device needs a model file; set device.include.")
    path = Path(path).resolve()
    text_path = str(path)
    if any(ch in text_path for ch in "\"\n\r\x00;") or not path.is_file():
        raise RenderError(f"device.include: '{path.name}' is not a readable model file with a plain path; move it to a simple path.")
    # models, subcircuits and parameters only, inside the design folder (netlist/safety.py)
    check_model_file(text_path, "device.include", RenderError, [design_folder(sized.design)])
    text = path.read_text(encoding="utf-8")
    if dialect == "ngspice":
        return {"include_path": text_path, "include_text": ""}
    return {"include_path": "", "include_text": text.rstrip("\n")}


def render(sized: SizedDesign, mode: str = "tran", dialect: str = "ngspice", *, tstop_s=None, ic=None,
           ac_freqs_hz=None, idc_a=None, plane: str = "package", ss_port: int = 1) -> str:
    """Netlist text for ``sized``.

    Parameters
    ----------
    sized : SizedDesign
    mode : {"tran", "ac", "op", "ss"}
        Full circuit with the device and ``.tran ... uic``; the passive network driven by
        ``IPORT 0 drain AC 1`` with ``.ac``; ``IPORT drain 0 DC idc_a`` with ``.op``
        (docs/netlist_conventions.md); or ``ss``: the full circuit of an angelov design
        linearised at its bias point, ``.ac`` at f0 with an AC source of 1 V at port 1 (VDRIVE,
        behind the source resistance) or port 2 (VPORT2, in series with RLOAD), ``ss_port``
        (netgen.studies.small_signal).
    dialect : {"ngspice", "portable"}
    tstop_s : float, optional
        Simulated time, s (default ``sim.max_cycles`` periods).
    ic : dict, optional
        Element name (``L_feed``, ``C_block``) -> initial current (A) / voltage (V).
    ac_freqs_hz : array_like, optional
        Frequencies the ``.ac lin`` grid must contain exactly (default: f0/50 steps up to
        ``sim.harmonics`` x f0).
    idc_a : float, optional
        DC current drawn at the drain in ``op`` mode (default ``sized.idc_est_a``).
    plane : {"package", "intrinsic"}
        ``ac`` mode only: the port at the drain terminal with the device removed (``package``,
        Z = v(drain)), or at the generator node ``dint`` with the device's Cout and package
        kept (``intrinsic``, Z = v(dint); docs/netlist_conventions.md).

    Raises
    ------
    RenderError
        For an unknown mode/dialect, a missing or failing template.
    """
    if mode not in (*MODES, SS_MODE):
        raise RenderError(f"mode: '{mode}' is not one of {', '.join((*MODES, SS_MODE))}.")
    if dialect not in DIALECTS:
        raise RenderError(f"dialect: '{dialect}' is not one of {', '.join(DIALECTS)}.")
    if plane not in PLANES:
        raise RenderError(f"plane: '{plane}' is not one of {', '.join(PLANES)}.")
    if mode == "ss" and sized.design.device.model != "angelov":
        raise RenderError("mode: 'ss' (the small-signal two-port) needs device.model = \"angelov\" (a driven gate).")
    ctx = template_context(sized, mode, dialect, tstop_s=tstop_s, ic=ic, ac_freqs_hz=ac_freqs_hz, idc_a=idc_a,
                           plane=plane, ss_port=ss_port)
    d = sized.design
    name = d.topology if d.template_path is None else Path(d.topology).name
    text = _run_template(d, ctx, name)
    text = _finish(text, mode, _block_cards(text, sized))
    # nothing in the rendered text may run a command or include a file from outside the design
    # folder (netlist/safety.py); the simulator checks again before each run
    check_netlist_text(text, f"template {name}: rendered netlist", RenderError, [design_folder(d)])
    return portable_cards(text) if dialect == "portable" else text


#: largest user template read, bytes
MAX_TEMPLATE_BYTES = 1_000_000


def _run_template(d, ctx: dict, name: str, *, sandbox: bool = False) -> str:
    """Render the design's template with ``ctx``: a user template under the sandbox's bounds
    (netlist/sandbox.py), a shipped one in :func:`_package_environment` (``sandbox=True`` renders
    a shipped one in the sandbox too)."""
    env = _environment() if (d.template_path is not None or sandbox) else _package_environment()
    try:
        with bounded():
            if d.template_path is None and ctx["block"]["section"] == "network":
                tmpl = env.get_template("block_network.j2")  # a Touchstone block replaces the whole network
            elif d.template_path is None:
                from netgen.synthesis import get_topology

                tmpl = env.get_template(get_topology(d.topology).template)
            else:
                try:
                    size = d.template_path.stat().st_size
                    if size > MAX_TEMPLATE_BYTES:
                        raise RenderError(f"template {name}: {size} bytes, limit of {MAX_TEMPLATE_BYTES} exceeded; "
                                          "a netlist template is a few kB.")
                    src = d.template_path.read_text(encoding="utf-8")
                except (OSError, UnicodeDecodeError) as exc:
                    raise RenderError(f"design.topology: cannot read template '{d.topology}' ({exc}); check the file.") from None
                tmpl = env.from_string(src)
            return tmpl.render(**ctx)
    except LimitExceeded as exc:
        raise RenderError(f"template {name}: {exc}; simplify the template.") from None
    except MemoryError:
        raise RenderError(f"template {name}: memory limit exceeded (a value too large to build); "
                          "simplify the template.") from None
    except RecursionError:
        raise RenderError(f"template {name}: recursion depth exceeded (a macro or loop calling itself); "
                          "simplify the template.") from None
    except jinja2.UndefinedError as exc:
        raise RenderError(f"template for {d.topology}: {exc}; the name is not in the template context (docs/template_context.md).") from None
    except jinja2.TemplateSyntaxError as exc:
        raise RenderError(f"template for {d.topology}: syntax error at line {exc.lineno}: {exc.message}.") from None
    except jinja2.TemplateError as exc:
        raise RenderError(f"template for {d.topology}: {exc}.") from None
    except RenderError:
        raise
    except (TypeError, ValueError, OverflowError, ZeroDivisionError, ArithmeticError, LookupError,
            AttributeError) as exc:
        raise RenderError(f"template for {d.topology}: {type(exc).__name__}: {exc}; fix the template expression.") from None


def _finish(text: str, mode: str, block_text: str = "") -> str:
    """Normalise blank lines, add the Touchstone block's subcircuit, ``.save`` of the loss-resistor
    nodes (tran), end with ``.end``."""
    lines = [ln.rstrip() for ln in text.splitlines()]
    lines = [ln for ln in lines if ln]
    if lines and lines[-1].lower() == ".end":
        lines.pop()
    if mode == "op":
        floating = dc_islands("\n".join(lines))
        if floating:
            lines.append("* DC paths for nodes isolated by capacitors (op mode only; 1e12 ohm changes nothing else)")
            lines += [f"RDC_{n} {n} 0 1e12" for n in floating]
    if block_text:
        lines += block_text.splitlines()
    if mode == "tran":
        nodes = {}  # in order of first appearance
        for _, a, b, _r in loss_elements("\n".join(lines)):
            for node in (a, b):
                if node != "0":
                    nodes.setdefault(node, None)
        if nodes:
            lines.append(".save " + " ".join(f"v({n})" for n in nodes))
    lines.append(".end")
    return "\n".join(lines) + "\n"


def dc_islands(netlist_text: str) -> list[str]:
    """One node of each group of nodes with no DC path to ground (R, L, V and T lines conduct).

    Such an island (e.g. between a DC block and a series capacitor) makes the ``.op`` matrix
    singular; ngspice's gmin stepping then returns a wrong operating point for the rest of the
    circuit (measured on class_f_feed), so op mode ties each island to ground with 1e12 ohm.
    """
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        parent.setdefault(x, x)
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def union(a: str, b: str) -> None:
        parent[find(a)] = find(b)

    order: list[str] = []
    for line in netlist_text.splitlines():
        tok = line.split()
        if not tok or tok[0][0] in "*.+":
            continue
        kind = tok[0][0].upper()
        nodes = [t.lower() for t in tok[1:5] if "=" not in t]
        if kind in "RLVCI" and len(nodes) >= 2:
            nodes = nodes[:2]
        for n in nodes:
            if n not in parent:
                order.append(n)
            find(n)
        if kind in "RLV" and len(nodes) >= 2:
            union(nodes[0], nodes[1])
        elif kind == "T" and len(nodes) >= 4:
            union(nodes[0], nodes[2])
            union(nodes[1], nodes[3])
        elif kind not in "CI" and len(nodes) >= 2:
            for n in nodes[1:]:
                union(nodes[0], n)
    ground = find("0")
    seen, out = set(), []
    for n in order:
        root = find(n)
        if root != find(ground) and root not in seen:
            seen.add(root)
            out.append(n)
    return out


def loss_elements(netlist_text: str) -> list[tuple[str, str, str, float]]:
    """The ``RLOSS_*`` resistors of a netlist: ``[(name, node_a, node_b, r_ohm), ...]``."""
    return list(_loss_elements(netlist_text))


@functools.lru_cache(maxsize=8)
def _loss_elements(netlist_text: str) -> tuple:
    """:func:`loss_elements`, read once per netlist text (the rendering and the analysis of a point
    each ask for it)."""
    out = []
    for m in _RLOSS.finditer(netlist_text):
        try:
            r = float(m.group(4))
        except ValueError:
            raise RenderError(f"netlist: loss resistor {m.group(1)} has value '{m.group(4)}'; write plain numbers for RLOSS_ values.") from None
        out.append((m.group(1), m.group(2).lower(), m.group(3).lower(), r))
    return tuple(out)
