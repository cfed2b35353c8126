"""Outputs of one run: report.html, the terminal table, waveforms.csv and metrics.json.

Every file is written atomically (temp file + os.replace, :mod:`netgen.fileio`).
The HTML report is self-contained (inline CSS, images by relative file name in
the same folder, no scripts, no external resources). A result that did not
settle says so in every output.
"""

from __future__ import annotations

import dataclasses
import html
import io
import json
import math
import textwrap
from pathlib import Path

import numpy as np

from netgen.design import format_quantity
from netgen.fileio import atomic_write_text

from .cautions import CAUTION_SHORT, caution_texts

__all__ = ["write_report", "format_table", "write_waveforms_csv", "write_metrics_json", "clean_for_json"]

_CSS = """
body{font-family:Helvetica,Arial,sans-serif;margin:0;background:#e9e4da;color:#2b2620}
main{max-width:1100px;margin:0 auto;padding:18px 26px 40px;background:#fffcf6}
h1{font-size:24px;margin:8px 0 2px;color:#123f3c}
h2{font-size:17px;margin:28px 0 8px;padding-bottom:3px;border-bottom:2px solid #b5652b;color:#123f3c}
.sub{color:#6e6457;margin:0 0 14px}
.banner{background:#9c2218;color:#fff;font-weight:bold;font-size:20px;padding:14px 18px;margin:10px 0;border-radius:4px}
.warn{background:#fbf0da;border-left:4px solid #b7780a;padding:8px 12px}
.banner small{display:block;font-weight:normal;font-size:14px;margin-top:4px}
.ok{background:#e2efe7;color:#1d5a40;padding:6px 12px;border-radius:4px;display:inline-block}
.summary{display:flex;flex-wrap:wrap;gap:14px;align-items:flex-start}
.cards{display:flex;flex-wrap:wrap;gap:10px;flex:1 1 600px}
.card{border:1px solid #dcd3c3;border-radius:5px;padding:8px 14px;min-width:140px;background:#fffefb}
.card b{display:block;font-size:20px;color:#123f3c}
.card span{font-size:12px;color:#6e6457}
.card em.target{display:block;font-size:12px;font-style:normal;color:#8a4a1c;margin-top:2px}
.caution-short{flex:0 1 260px;background:#fcecdc;border-left:5px solid #c2561c;padding:8px 12px;font-size:13px}
.caution-short b{display:block;color:#8f3a10;margin-bottom:2px}
table{border-collapse:collapse;font-size:13px;margin:6px 0}
th,td{border:1px solid #dcd3c3;padding:3px 8px;text-align:right;vertical-align:top}
th{background:#f1eadd}
td.l,th.l{text-align:left}
figure{margin:12px 0;display:inline-block;max-width:100%}
figure img{max-width:100%;border:1px solid #dcd3c3}
figcaption{font-size:12px;color:#6e6457}
.caution{background:#fcecdc;border-left:5px solid #c2561c;padding:8px 14px}
.caution li{margin:4px 0}
a{color:#1d6a63}
pre{background:#f6f1e8;border:1px solid #dcd3c3;padding:8px;font-size:12px;overflow:auto}
"""

_PLOT_CAPTIONS = {
    "waveforms": "Voltage and current at the intrinsic plane (the current generator inside Cout and the package, "
                 "solid) and at the package plane (the drain terminal, dashed) over the stored periods.",
    "load_line": "Dynamic load line (current against voltage) at the intrinsic plane, the package plane beside it, "
                 "with Vdd and the Ropt line.",
    "harmonics": "Harmonic amplitudes at the drain and harmonic load power relative to the fundamental.",
    "impedance": "Impedance of the output network seen from the drain (network analysis) with the "
                 "harmonic impedances measured in the transient.",
    "smith": "Harmonic impedances presented to the device (Smith chart): at the intrinsic plane (where the "
             "waveform engineering happens) and, beside it, at the package plane (the drain terminal).",
    "settling": "Settling: DC and load power per simulated cycle.",
    "block": "Touchstone block: |S| of the file (markers) and of the rational fit ngspice ran (lines), "
             "a Smith chart of the reflections, and the fit error against the file's points.",
}


# ----------------------------------------------------------------- helpers

def clean_for_json(obj):
    """Plain JSON types: numpy scalars/arrays to Python, NaN and infinities to None, paths to str."""
    if isinstance(obj, dict):
        return {str(k): clean_for_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [clean_for_json(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [clean_for_json(v) for v in obj.tolist()]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, complex):
        return [clean_for_json(obj.real), clean_for_json(obj.imag)]
    if isinstance(obj, Path):
        return str(obj)
    return obj


def _num(x, fmt: str = "{:.4g}", none: str = "-") -> str:
    if x is None:
        return none
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(xf):
        return none
    return fmt.format(xf)


def _pct(x) -> str:
    return _num(None if x is None else 100.0 * x, "{:.2f}")


def _e(x) -> str:
    return html.escape(str(x))


def _si(value, unit: str) -> str:
    if value is None:
        return "-"
    try:
        return format_quantity(float(value), unit)
    except (TypeError, ValueError):
        return str(value)


# ------------------------------------------------------------------ table

def start_text(start: dict) -> str:
    """One sentence on how the run started (metrics ``start``), or '' when not recorded."""
    method = start.get("method")
    if method == "periodic":
        dev = start.get("estimate_deviation")
        agree = f"; ngspice's Pdc and Pout agree with it within {100 * dev:.2g} %" if dev is not None else ""
        return (f"Started on the periodic steady state computed from the netlist (Pdc "
                f"{_num(start.get('estimate_pdc_w'))} W, Pout {_num(start.get('estimate_pout_w'))} W{agree}).")
    if method == "dc":
        why = f" ({start['reason']})" if start.get("reason") else ""
        return f"Started from the DC state of feed and block{why}."
    if method == "cold":
        return "Started from zero (sim.warm_start = false)."
    return ""


def format_table(metrics: dict) -> str:
    """Compact plain-text summary for the terminal (fits 80 columns, units in the labels)."""
    d = metrics.get("design", {})
    lines = [f"{d.get('name', '?')}  {d.get('topology', '?')}  f0 {_si(d.get('f0_hz'), 'Hz')}  "
             f"Vdd {_si(d.get('vdd_v'), 'V')}  cycles {metrics.get('cycles', '?')}"]
    if not metrics.get("settled", False):
        lines.append("*** NOT SETTLED: values below are not periodic steady state ***")
    start = start_text(metrics.get("start") or {})
    if start:
        lines.extend(textwrap.wrap(start, 78, subsequent_indent="  "))
    for text in metrics.get("warnings") or ():
        lines.extend(textwrap.wrap(f"Note: {text}.", 78, subsequent_indent="  "))
    bound = metrics.get("bound") or {}
    pairs = [
        ("Pout (W)", _num(metrics.get("pout_w")), "Pdc (W)", _num(metrics.get("pdc_w"))),
        ("drain eff. (%)", _pct(metrics.get("drain_efficiency")), "ideal bound (%)", _pct(bound.get("efficiency"))),
        ("PAE (%)", _pct(metrics.get("pae")), "Pload total (W)", _num(metrics.get("pload_total_w"))),
        ("peak Vd (V)", _num(metrics.get("peak_vd_v")), "peak Vd/Vdd", _num(metrics.get("peak_vd_over_vdd"), "{:.3f}")),
        ("peak Id (A)", _num(metrics.get("peak_id_a")), "balance err (%)", _pct(metrics.get("loss_balance_error"))),
    ]
    if metrics.get("pin_avail_w") is not None:
        pairs.append(("Pin avail (dBm)", _num(metrics.get("pin_avail_dbm"), "{:.2f}"), "Pin gate (dBm)", _num(metrics.get("pin_dbm"), "{:.2f}")))
        pairs.append(("G_T (dB)", _num(metrics.get("gain_transducer_db"), "{:.2f}"), "G_P (dB)", _num(metrics.get("gain_power_db"), "{:.2f}")))
    for a, va, b, vb in pairs:
        lines.append(f"  {a:<16}{va:>12}     {b:<16}{vb:>12}")
    lines.append("")
    lines.append("  harmonics at the intrinsic plane (the generator inside Cout): V I and Z int;")
    lines.append("  Z pkg at the package plane (the drain terminal where the network connects)")
    lines.append(f"  {'n':>2} {'V (V)':>9} {'I (A)':>9} {'ReZ int':>10} {'ImZ int':>10} "
                 f"{'ReZ pkg':>10} {'ImZ pkg':>10} {'(dBc)':>7}")
    for h in metrics.get("harmonics", []):
        lines.append(f"  {h['n']:>2} {_num(h.get('vint_v', h['vd_v'])):>9} {_num(h.get('igen_a', h['id_a'])):>9} "
                     f"{_num(h.get('z_int_re_ohm', h['z_re_ohm'])):>10} {_num(h.get('z_int_im_ohm', h['z_im_ohm'])):>10} "
                     f"{_num(h['z_re_ohm']):>10} {_num(h['z_im_ohm']):>10} {_num(h['pload_dbc'], '{:.1f}'):>7}")
    losses = metrics.get("losses") or {}
    if losses:
        lines.append("")
        lines.append("  losses (W): " + ", ".join(f"{k} {_num(v, '{:.3g}')}" for k, v in losses.items()))
    if metrics.get("stress_cap_v_peak_part") or metrics.get("stress_ind_i_peak_part"):
        lines.append(f"  worst part stress: {metrics.get('stress_cap_v_peak_part')} {_num(metrics.get('stress_cap_v_peak_v'))} V peak, "
                     f"{metrics.get('stress_ind_i_peak_part')} {_num(metrics.get('stress_ind_i_peak_a'))} A peak "
                     "(every part in the report)")
    return "\n".join(_wrap80(line) for line in lines)


def _wrap80(line: str) -> str:
    if len(line) <= 80:
        return line
    out, cur = [], ""
    for word in line.split(", "):
        piece = word if not cur else cur + ", " + word
        if len(piece) > 78 and cur:
            out.append(cur + ",")
            cur = "    " + word
        else:
            cur = piece
    out.append(cur)
    return "\n".join(out)


# ------------------------------------------------------------- data files

def write_metrics_json(path, metrics: dict) -> Path:
    """metrics.json: indented, sorted as given, no NaN (null instead)."""
    text = json.dumps(clean_for_json(metrics), indent=2, allow_nan=False) + "\n"
    return atomic_write_text(path, text)


def write_waveforms_csv(path, wf, periods: int = 2) -> Path:
    """waveforms.csv: the last ``periods`` periods of every stored voltage and current.

    Columns ``t_s``, ``v_<node>_v``..., ``i_<name>_a``...; time restarts at 0.
    The first line is a ``#`` comment with f0 and the settled flag (read with
    ``comment='#'``).
    """
    t = np.asarray(wf.t_s, dtype=float)
    ppc = int(round(1.0 / (wf.f0_hz * (t[1] - t[0])))) if t.size > 1 else t.size
    keep = min(t.size, max(1, periods) * ppc)
    sl = slice(t.size - keep, t.size)
    cols = [("t_s", t[sl] - t[sl][0])]
    cols += [(f"v_{k}_v", np.asarray(v, float)[sl]) for k, v in wf.v.items()]
    cols += [(f"i_{k}_a", np.asarray(v, float)[sl]) for k, v in wf.i.items()]
    buf = io.StringIO()
    buf.write(f"# pashape waveforms; f0_hz={wf.f0_hz:.12g}; settled={'true' if wf.settled else 'false (NOT SETTLED)'}; "
              f"cycles={wf.cycles}\n")
    buf.write(",".join(name for name, _ in cols) + "\n")
    np.savetxt(buf, np.column_stack([c for _, c in cols]), delimiter=",", fmt="%.9g")
    return atomic_write_text(path, buf.getvalue())


# ------------------------------------------------------------------- HTML

def _kv_table(rows, head=("quantity", "value")) -> str:
    out = [f"<table><tr><th class=l>{_e(head[0])}</th><th class=l>{_e(head[1])}</th></tr>"]
    for k, v in rows:
        out.append(f"<tr><td class=l>{_e(k)}</td><td class=l>{_e(v)}</td></tr>")
    out.append("</table>")
    return "".join(out)


def _design_rows(design) -> list[tuple[str, str]]:
    units = {"hz": "Hz", "v": "V", "ohm": "ohm", "w": "W", "f": "F", "h": "H", "a": "A", "s": "s",
             "db": "dB", "deg": "deg"}
    rows = []

    def add(prefix, obj):
        for f in dataclasses.fields(obj):
            if f.name in ("raw", "source", "device", "network", "sim"):
                continue
            val = getattr(obj, f.name)
            suffix = f.name.rsplit("_", 1)[-1] if "_" in f.name else ""
            if isinstance(val, float) and suffix in units and math.isfinite(val):
                text = format_quantity(val, units[suffix])
            elif isinstance(val, dict):
                text = ", ".join(f"{k} = {v}" for k, v in val.items()) or "-"
            else:
                text = "-" if val is None else str(val)
            rows.append((f"{prefix}{f.name}", text))

    add("design.", design)
    for sec in ("device", "network", "sim"):
        if hasattr(design, sec):
            add(f"{sec}.", getattr(design, sec))
    return rows


def target_deviation(achieved, target) -> float | None:
    """(achieved - target)/target, or None when either is missing or the target is not positive."""
    try:
        a, g = float(achieved), float(target)
    except (TypeError, ValueError):
        return None
    return (a - g) / g if math.isfinite(a) and math.isfinite(g) and g > 0 else None


def _target_row(achieved, target) -> str:
    dev = target_deviation(achieved, target)
    if target is None:
        return "none (sized from design.ropt)"
    return f"{_num(target)} (achieved {_num(achieved)}, {_num(None if dev is None else 100 * dev, '{:+.0f}')} %)"


def _summary(metrics: dict, design) -> str:
    """The cards of the headline numbers, the Pout target beside what was achieved, and a short caution."""
    bound = metrics.get("bound") or {}
    pout = metrics.get("pout_w")
    dev = target_deviation(pout, design.pout_w)
    target = ("" if design.pout_w is None else
              f"target {_si(design.pout_w, 'W')}, achieved {_si(pout, 'W')}, "
              f"{_num(None if dev is None else 100 * dev, '{:+.0f}')} %")
    cards = [
        ("output power (fundamental)", _si(pout, "W"), target),
        ("drain efficiency", _pct(metrics.get("drain_efficiency")) + " %", ""),
        ("ideal bound", _pct(bound.get("efficiency")) + " %", ""),
        ("PAE", _pct(metrics.get("pae")) + (" %" if metrics.get("pae") is not None else ""), ""),
        ("DC power", _si(metrics.get("pdc_w"), "W"), ""),
        ("peak drain voltage", f"{_si(metrics.get('peak_vd_v'), 'V')} ({_num(metrics.get('peak_vd_over_vdd'), '{:.2f}')} Vdd)", ""),
    ]
    html_cards = "".join(f"<div class=card><b>{_e(v)}</b><span>{_e(k)}</span>"
                         + (f"<em class=target>{_e(extra)}</em>" if extra else "") + "</div>" for k, v, extra in cards)
    return (f"<div class=summary><div class=cards>{html_cards}</div>"
            f"<aside class=caution-short id=caution-short><b>Caution</b>{_e(CAUTION_SHORT)} "
            f"<a href=\"#cautions\">All cautions</a> are at the end.</aside></div>")


def _block_section(metrics: dict, plot_paths: dict) -> list[str]:
    """The Touchstone block's section (metrics ``block``, figure ``block``), beside the harmonics."""
    b = metrics.get("block")
    if not b:
        return []
    rows = [
        ("file", f"{b['file']} (sha256 {b['sha256'][:16]}...)"), ("replaces", b["section"]),
        ("ports, points", f"{b['ports']}, {b['points']}"),
        ("frequency range", f"{_si(b['f_min_hz'], 'Hz')} to {_si(b['f_max_hz'], 'Hz')}"),
        ("reference impedance", ", ".join(_si(z, "ohm") for z in b["z0_ohm"])), ("DC", b["dc"]),
        ("periodic estimate", "the file's data, interpolated, at every bin to "
         f"{_si(b['fit_checked_to_hz'], 'Hz')}; the fit above the file's last point"),
        ("ngspice", f"rational fit of order {b['fit_order']} ({b['fit_passivity']})"),
        ("worst fit error |S_fit - S_file|, DC to N f0",
         f"{_num(b['fit_max_error'], '{:.3g}')} at {_si(b['fit_max_error_at_hz'], 'Hz')}"),
    ]
    out = ["<h2>Touchstone block</h2>", _kv_table(rows)]
    if "block" in plot_paths:
        out.append(f"<figure><img src=\"{_e(Path(plot_paths['block']).name)}\" alt=block><figcaption>"
                   f"{_e(_PLOT_CAPTIONS.get('block', 'block'))}</figcaption></figure>")
    return out


def write_report(outdir, sized, metrics: dict, plot_paths: dict, netlist_text: str) -> Path:
    """Write ``outdir/report.html`` and return its path.

    Parameters
    ----------
    outdir : path
        Folder of the run; the plots are referenced by file name relative to it.
    sized : SizedDesign
    metrics : dict
        The analyse() result.
    plot_paths : dict
        kind -> PNG path or file name (only the file name is used).
    netlist_text : str
        Shown folded at the end.

    Length: the report's sections in page order, each a call or a short f-string; the page reads
    top to bottom as the code does.
    """
    outdir = Path(outdir)
    d = metrics.get("design", {})
    design = sized.design
    settled = bool(metrics.get("settled", False))
    bound = metrics.get("bound") or {}
    parts = [f"<!DOCTYPE html><html lang=en><head><meta charset=utf-8><title>{_e(d.get('name', 'design'))} - pashape report"
             f"</title><style>{_CSS}</style></head><body><main>"]
    parts.append(f"<h1>{_e(d.get('name', design.name))}</h1><p class=sub>{_e(design.topology)} &middot; "
                 f"f0 {_e(_si(design.f0_hz, 'Hz'))} &middot; Vdd {_e(_si(design.vdd_v, 'V'))} &middot; "
                 f"load {_e(_si(d.get('load_ohm', design.load_ohm), 'ohm'))} &middot; Ropt {_e(_si(sized.ropt_ohm, 'ohm'))}</p>")
    if not settled:
        note = (metrics.get("settle_note") or "").strip()
        note = note[:1].upper() + note[1:]
        parts.append(f"<div class=banner id=not-settled>NOT SETTLED<small>The simulation stopped after "
                     f"{_e(metrics.get('cycles'))} cycles, before reaching periodic steady state, so every number below "
                     f"describes a transient, not the amplifier. {_e(note)}</small></div>")
    else:
        note = metrics.get("settle_note") or ""
        lead = "" if note.lower().startswith("settled") else f"Settled after {_e(metrics.get('cycles'))} cycles. "
        parts.append(f"<p class=ok>{lead}{_e(note[:1].upper() + note[1:])}</p>")
    if start_text(metrics.get("start") or {}):
        parts.append(f"<p class=sub>{_e(start_text(metrics.get('start') or {}))}</p>")
    for text in metrics.get("warnings") or ():
        parts.append(f"<p class=warn>Note: {_e(text)}.</p>")

    parts.append(_summary(metrics, design))

    parts.append("<h2>Metrics</h2>")
    rows = [
        ("DC power Pdc (W)", _num(metrics.get("pdc_w"))), ("DC current (A)", _num(metrics.get("idc_a"))),
        ("fundamental load power Pout (W)", _num(metrics.get("pout_w"))),
        ("Pout target, design.pout (W)", _target_row(metrics.get("pout_w"), design.pout_w)),
        ("total load power (W)", _num(metrics.get("pload_total_w"))),
        ("fundamental power leaving the drain (W)", _num(metrics.get("p1_drain_w"))),
        ("drive power into the gate (W)", _num(metrics.get("pin_w"))),
        ("available drive power Pavail (dBm)", _num(metrics.get("pin_avail_dbm"), "{:.2f}")),
        ("drive power into the input port (W)", _num(metrics.get("pin_port_w"))),
        ("drive power into the input port (dBm)", _num(metrics.get("pin_dbm"), "{:.2f}")),
        ("reflected drive power (W)", _num(metrics.get("input_reflected_w"))),
        ("input network loss (W)", _num(metrics.get("input_network_loss_w"))),
        ("transducer gain Pout/Pavail (dB)", _num(metrics.get("gain_transducer_db"), "{:.2f}")),
        ("power gain Pout/Pin (dB)", _num(metrics.get("gain_power_db"), "{:.2f}")),
        ("output phase against the incident wave (deg)", _num(metrics.get("am_pm_deg"), "{:.1f}")),
        ("conduction angle (deg)", _num(metrics.get("conduction_angle_deg"), "{:.1f}")),
        ("drain efficiency (%)", _pct(metrics.get("drain_efficiency"))), ("PAE (%)", _pct(metrics.get("pae"))),
        ("peak drain voltage (V)", _num(metrics.get("peak_vd_v"))),
        ("peak drain voltage / Vdd", _num(metrics.get("peak_vd_over_vdd"), "{:.3f}")),
        ("lowest drain voltage (V)", _num(metrics.get("min_vd_v"))),
        ("peak drain current (A)", _num(metrics.get("peak_id_a"))),
        ("lowest drain current (A)", _num(metrics.get("min_id_a"))),
        ("cycles simulated", str(metrics.get("cycles"))), ("settled", "yes" if settled else "NO"),
    ]
    parts.append(_kv_table(rows))
    parts.append("<h2>Ideal bound</h2>")
    parts.append(f"<p><b>{_e(_pct(bound.get('efficiency')))} %</b> &mdash; {_e(bound.get('name', ''))}.<br>"
                 f"Source: {_e(bound.get('source', '') or 'none')}. The bound assumes an ideal switch and a "
                 f"lossless network; the simulated efficiency falls short by the losses listed below.</p>")

    parts.append("<h2>Harmonics at the intrinsic plane and the package plane</h2><table><tr><th>n</th>"
                 "<th>V int (V)</th><th>I gen (A)</th><th>Re Zn int (ohm)</th><th>Im Zn int (ohm)</th>"
                 "<th>Vd pkg (V)</th><th>Id pkg (A)</th><th>Re Zn pkg (ohm)</th><th>Im Zn pkg (ohm)</th>"
                 "<th>load power (W)</th><th>load power (dBc)</th></tr>")
    for h in metrics.get("harmonics", []):
        parts.append("<tr>" + "".join(f"<td>{_e(x)}</td>" for x in (
            h["n"], _num(h.get("vint_v")), _num(h.get("igen_a")), _num(h.get("z_int_re_ohm")), _num(h.get("z_int_im_ohm")),
            _num(h["vd_v"]), _num(h["id_a"]),
            _num(h["z_re_ohm"]), _num(h["z_im_ohm"]), _num(h["pload_w"]), _num(h["pload_dbc"], "{:.1f}"))) + "</tr>")
    parts.append("</table><p class=sub>Zn = Vn/(&minus;In), shown only where the current harmonic is at least "
                 "1e-3 of the fundamental. Intrinsic plane: the device's current generator inside its output "
                 "capacitance and package (node dint, current through VISW), where the class's waveforms are defined; "
                 "package plane: the drain terminal (node drain, current through VIDRAIN).</p>")

    stress = metrics.get("stress") or {}
    if stress:
        parts.append("<h2>Stress on every part</h2><table><tr><th class=l>element</th><th>peak |v| (V)</th>"
                     "<th>peak RF swing (V)</th><th>peak |i| (A)</th><th>RMS i (A)</th><th>dissipated (W)</th></tr>")
        for name, r in stress.items():
            parts.append(f"<tr><td class=l>{_e(name)}</td>" + "".join(f"<td>{_e(_num(r.get(k)))}</td>" for k in (
                "v_peak_v", "v_ac_peak_v", "i_peak_a", "i_rms_a", "p_loss_w")) + "</tr>")
        parts.append("</table><p class=sub>Across and through each inductor and capacitor over the stored periods "
                     "(the DC across a DC block included in the peak |v|); derate from these values. High RF "
                     "voltages and currents can burn: follow local codes and licensed practice when building "
                     "and measuring.</p>")

    parts += _block_section(metrics, plot_paths)
    parts.append("<h2>Loss budget</h2><table><tr><th class=l>where the DC power goes</th><th>W</th><th>% of Pdc</th></tr>")
    pdc = metrics.get("pdc_w") or 0.0
    budget = [("fundamental power in the load", metrics.get("pout_w"))] + list((metrics.get("losses") or {}).items())
    for name, w in budget:
        share = _num(None if not pdc or w is None else 100.0 * w / pdc, "{:.2f}")
        parts.append(f"<tr><td class=l>{_e(name)}</td><td>{_e(_num(w))}</td><td>{_e(share)}</td></tr>")
    parts.append(f"</table><p class=sub>Balance error (Pdc minus everything listed, relative to Pdc): "
                 f"{_e(_pct(metrics.get('loss_balance_error')))} %. device_switching counts the turn-on discharge "
                 f"of the drain capacitance and off-state dissipation; load_harmonics is load power outside the "
                 f"fundamental.</p>")

    if plot_paths:
        parts.append("<h2>Plots</h2>")
        for kind, p in plot_paths.items():
            if kind == "block":  # shown with the block's section
                continue
            name = Path(p).name
            cap = _PLOT_CAPTIONS.get(kind, kind)
            parts.append(f"<figure><img src=\"{_e(name)}\" alt=\"{_e(kind)}\"><figcaption>{_e(cap)}</figcaption></figure>")

    parts.append("<h2>Design inputs</h2>" + _kv_table(_design_rows(design), ("key", "value")))
    parts.append("<h2>Sized values</h2><table><tr><th class=l>component</th><th class=l>kind</th><th>value</th>"
                 "<th class=l>role</th><th class=l>how it was derived</th></tr>")
    for c in sized.components.values():
        parts.append(f"<tr><td class=l>{_e(c.name)}</td><td class=l>{_e(c.kind)}</td><td>{_e(_si(c.value, c.unit))}</td>"
                     f"<td class=l>{_e(c.role)}</td><td class=l>{_e(c.how)}</td></tr>")
    for name, val in (sized.derived or {}).items():
        v, unit, how = (tuple(val) + ("", "", ""))[:3]
        parts.append(f"<tr><td class=l>{_e(name)}</td><td class=l>derived</td><td>{_e(_si(v, unit) if unit else _num(v))}</td>"
                     f"<td class=l></td><td class=l>{_e(how)}</td></tr>")
    parts.append("</table>")

    parts.append("<h2 id=cautions>Cautions</h2><div class=caution><ul>"
                 + "".join(f"<li>{_e(c)}</li>" for c in caution_texts(metrics.get("peak_vd_over_vdd"))) + "</ul></div>")
    parts.append(f"<h2>Netlist</h2><details><summary>show the simulated netlist</summary><pre>{_e(netlist_text)}</pre></details>")
    parts.append("</main></body></html>\n")
    return atomic_write_text(outdir / "report.html", "\n".join(parts))
