"""Post-processing of settled periodic waveforms into the metrics.json contract.

Input: :class:`netgen.design.records.Waveforms` (an integer number of periods on a
uniform grid), the :class:`netgen.design.records.SizedDesign` and the netlist text
(for the ``RLOAD`` value and the ``RLOSS_*`` loss resistors). Output: a plain
dict (JSON-ready; ``None`` where a value does not exist) with the keys of the
contract in docs/metrics.md plus a few extras (``idc_a``, ``pin_w``,
``p1_drain_w``, ``loss_balance_error``, ``h2_dbc`` ...).

Conventions (docs/netlist_conventions.md)
------------------------------------------
* Fourier coefficients: x(t) = c0 + sum_n |c_n| cos(n w0 t + angle(c_n)).
* Drain current flows into the device; the harmonic impedance presented to
  the device is Z_n = V_n / (-I_n).
* Pdc = Vdd x mean(supply current); output power = fundamental power in RLOAD.
"""

from __future__ import annotations

import math

import numpy as np

from netgen.errors import SimulationError
from netgen.netlist import parse_spice_number
from netgen.periodic import fourier, periods_in, pwl_mean_product, pwl_point_energy
from netgen.synthesis import COUT_Q_WARN, bound_for

from .drive import angelov_warnings, conduction_angle_deg, drive_metrics, input_side, input_warnings
from .planes import PLANES, intrinsic_columns, plane_warnings
from .stress import buildability_warnings, fast_mean, part_stress, stress_summary


__all__ = [
    "parse_loss_elements",
    "load_resistance",
    "harmonic_impedance",
    "waveform_efficiency",
    "device_loss_split",
    "bound_warning",
    "analyse",
    "Z_CURRENT_FLOOR",
]

#: Z_n is reported only where |I_n| >= this fraction of |I_1| (else null).
Z_CURRENT_FLOOR = 1e-3



def harmonic_impedance(v_n: np.ndarray, i_n: np.ndarray, floor: float = Z_CURRENT_FLOOR) -> list:
    """Z_n = V_n/(-I_n) for n >= 1 (entry 0 of the inputs is DC and skipped).

    ``None`` where |I_n| < floor * |I_1| (the ratio would be noise).
    """
    i1 = abs(i_n[1]) if len(i_n) > 1 else 0.0
    out = []
    for n in range(1, len(v_n)):
        if i1 == 0.0 or abs(i_n[n]) < floor * i1:
            out.append(None)
        else:
            out.append(complex(v_n[n] / (-i_n[n])))
    return out


def waveform_efficiency(vd: np.ndarray, id_: np.ndarray, vdd_v: float, periods: int = 1) -> float:
    """Drain efficiency from drain waveforms alone: fundamental power leaving the drain / Pdc.

    eta = -Re(V1 I1*)/2 / (Vdd I0): Pdc = Vdd x mean current (the choke
    carries the DC); the device's current flows into the drain, so the power it
    delivers to the network at f0 is the negative of Re(V1 I1*)/2 [Cripps].
    """
    v = fourier(vd, periods, 1)
    i = fourier(id_, periods, 1)
    return float(-0.5 * (v[1] * np.conj(i[1])).real / (vdd_v * i[0].real))


# ------------------------------------------------------------ netlist reading

def _element_lines(netlist_text: str):
    for raw in netlist_text.splitlines():
        line = raw.strip()
        if not line or line[0] in "*+.;":
            continue
        yield line.split()


def parse_loss_elements(netlist_text: str) -> list[tuple[str, str, str, float]]:
    """``RLOSS_<name> a b <R>`` lines as (element name, node a, node b, R in ohm).

    The fallback for :func:`netgen.netlist.renderer.loss_elements`, following the
    convention in docs/netlist_conventions.md.
    """
    out = []
    for tok in _element_lines(netlist_text):
        if tok[0].upper().startswith("RLOSS_") and len(tok) >= 4:
            value = tok[3].split("=", 1)[-1]
            out.append((tok[0], tok[1], tok[2], parse_spice_number(value)))
    return out


def _loss_elements(netlist_text: str):
    try:
        from netgen.netlist import loss_elements  # the renderer owns the format
    except ImportError:
        return parse_loss_elements(netlist_text)
    return list(loss_elements(netlist_text))


def load_resistance(netlist_text: str, default_ohm: float) -> float:
    """Value of ``RLOAD`` in the netlist, else ``default_ohm``."""
    for tok in _element_lines(netlist_text):
        if tok[0].upper() == "RLOAD" and len(tok) >= 4:
            try:
                return parse_spice_number(tok[3].split("=", 1)[-1])
            except ValueError:
                break
    return default_ohm


# ------------------------------------------------------------- device loss

def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, length) of the True runs of a periodic boolean array (wrap-around joined)."""
    n = mask.size
    if mask.all():
        return [(0, n)]
    if not mask.any():
        return []
    first_false = int(np.argmin(mask))
    rolled = np.roll(mask, -first_false)
    edges = np.diff(np.concatenate(([0], rolled.astype(int), [0])))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)
    return [((int(s) + first_false) % n, int(e - s)) for s, e in zip(starts, stops)]


def device_loss_split(v_v: np.ndarray, i_sw_a: np.ndarray, vdd_v: float, *, model: str = "switch",
                      ron_ohm: float = 0.2, roff_ohm: float = 1e6, t_s: np.ndarray | None = None) -> dict:
    """Split the device dissipation mean(v x i_switch) into conduction and switching.

    Parameters
    ----------
    v_v : ndarray
        Voltage across the switch (the drain voltage; the sense sources are 0 V), V.
    i_sw_a : ndarray
        Switch/channel current (output capacitance excluded), A.
    vdd_v : float
    model, ron_ohm, roff_ohm
        The device model; the on/off test uses the switch resistances.
    t_s : ndarray, optional
        Time points of ``v_v`` and ``i_sw_a`` (the simulator's own, non-uniform, s). With them
        the dissipation is the exact integral of the straight lines between the points
        (:func:`netgen.periodic.pwl_point_energy`), so a capacitor-discharge spike a few
        picoseconds wide counts in full at any ``sim.points_per_cycle``; without them the samples
        are taken as a uniform grid (end excluded).

    Returns
    -------
    dict
        ``device_conduction`` and ``device_switching`` in W; they sum to mean(v i).

    Notes
    -----
    Our rule (a definition, not a published method): a sample is *on* when
    |v| < sqrt(Ron Roff) |i| (the switch looks closer to Ron than to Roff).
    In each on-interval, the leading samples until |v| has fallen below
    max(4 x median |v| of the interval, 0.02 Vdd) and then stopped falling
    (its first local minimum) are the turn-on transient:
    the hard discharge of the drain capacitance (device Cout and any
    capacitance the network presents) through Ron. Switching loss = that
    transient plus everything dissipated while off or in an edge;
    conduction loss = the rest of the on-state dissipation. For a
    non-switch device (gm, spice) the whole dissipation is reported as
    conduction (the device is a controlled current, not a switch).
    """
    v = np.asarray(v_v, dtype=float)
    i = np.asarray(i_sw_a, dtype=float)
    if t_s is None:
        p = v * i / v.size          # each sample's share of the mean
    else:
        t = np.asarray(t_s, dtype=float)
        p = pwl_point_energy(t, v, i) / (t[-1] - t[0])
    total = float(np.sum(p))
    if model != "switch":
        return {"device_conduction": total, "device_switching": 0.0}
    r_th = math.sqrt(ron_ohm * roff_ohm)
    on = np.abs(v) < r_th * np.abs(i)
    switching = ~on
    av = np.abs(v)
    n = v.size
    for start, length in _runs(on):
        idx = (start + np.arange(length)) % n
        thr = max(4.0 * float(np.median(av[idx])), 0.02 * vdd_v)
        seg = av[idx]
        above = seg > thr
        if above.all():
            lead = length
        else:
            lead = int(np.argmin(above))  # first sample at or below the threshold
            # keep following the decay down to its first local minimum
            while lead + 1 < length and seg[lead + 1] < seg[lead]:
                lead += 1
        switching[idx[:lead]] = True
    sw = float(np.sum(p[switching]))
    return {"device_conduction": total - sw, "device_switching": sw}


# ---------------------------------------------------------------- analyse

def _db(ratio: float) -> float | None:
    """10 log10(ratio); None below -200 dB (rounding noise of an absent harmonic) or when undefined."""
    return 10.0 * math.log10(ratio) if ratio > 1e-20 and math.isfinite(ratio) else None


def _f(x) -> float | None:
    """Plain float, None for NaN/inf (JSON has no NaN)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _exact_coefficients(wf, n_h: int) -> dict:
    """``wf.fourier`` entries with at least n_h harmonics, cut to c_0..c_nh (empty when absent).

    They are exact integrals of the simulator's own points (netgen.periodic.steady, :func:`fourier_pwl`);
    the uniform grid's FFT moves each switching jump by up to one grid step, which matters for
    the small harmonics (a 4f0 short carrying 8 % of I1 came out 16-47 % off at 1000 points a cycle).
    """
    coeffs = getattr(wf, "fourier", None) or {}
    return {k: np.asarray(c)[: n_h + 1] for k, c in coeffs.items() if len(c) >= n_h + 1}


def _range(peaks: dict, lo: str, hi: str):
    """[lowest, highest] of the per-period maxima over the averaged periods, or None."""
    return [_f(peaks[lo]), _f(peaks[hi])] if lo in peaks and hi in peaks else None


def _start(start: dict, pdc_w: float, pout_w: float) -> dict:
    """The ``start`` entry of the metrics: how the run started and, for a start on the periodic
    estimate, the estimate's Pdc and Pout with their relative deviation from ngspice's."""
    out = {"method": start.get("method", "unknown"), "reason": start.get("reason") or None,
           "estimate_pdc_w": None, "estimate_pout_w": None, "estimate_deviation": None,
           "estimate_peak_vd_v": None, "estimate_peak_id_a": None}
    if start.get("method") == "periodic":
        epdc, epout = float(start["pdc_w"]), float(start["pout_w"])
        dev = max(abs(epdc / pdc_w - 1.0) if pdc_w else math.inf, abs(epout / pout_w - 1.0) if pout_w else math.inf)
        out.update(estimate_pdc_w=epdc, estimate_pout_w=epout, estimate_deviation=_f(dev),
                   estimate_peak_vd_v=_f(start.get("vd_max_v")), estimate_peak_id_a=_f(start.get("id_max_a")))
    return out


def _harmonic_table(V: np.ndarray, I: np.ndarray, pload_n: np.ndarray, n_h: int) -> list[dict]:
    """Rows n = 1..n_h of the metrics' harmonic table (drain V and I, Z_n, load power, dBc)."""
    z = harmonic_impedance(V, I)
    pout = float(pload_n[1])
    table = []
    for n in range(1, n_h + 1):
        zn = z[n - 1]
        table.append({
            "n": n,
            "vd_v": _f(abs(V[n])),
            "vd_deg": _f(math.degrees(np.angle(V[n]))),
            "id_a": _f(abs(I[n])),
            "id_deg": _f(math.degrees(np.angle(I[n]))),
            "z_re_ohm": None if zn is None else _f(zn.real),
            "z_im_ohm": None if zn is None else _f(zn.imag),
            "pload_w": _f(pload_n[n]),
            "pload_dbc": 0.0 if n == 1 and pout > 0 else _db(pload_n[n] / pout if pout > 0 else math.nan),
        })
    return table


class _Window:
    """Means over the averaged window: exact integrals of the simulator's own points
    (``wf.points``) where the run kept them, else plain means of the uniform grid."""

    def __init__(self, wf):
        pts = getattr(wf, "points", None) or {}
        self.exact = "t_s" in pts and len(pts["t_s"]) >= 2
        self.t = np.asarray(pts["t_s"], dtype=float) if self.exact else None
        self.v = {k[2:]: np.asarray(x, float) for k, x in pts.items() if k.startswith("v:")} if self.exact else wf.v
        self.i = {k[2:]: np.asarray(x, float) for k, x in pts.items() if k.startswith("i:")} if self.exact else wf.i
        self.t_grid = wf.t_s

    def mean_product(self, x: np.ndarray, y: np.ndarray) -> float:
        return pwl_mean_product(self.t, x, y) if self.exact else fast_mean(x * y)

    def node(self, node: str, element: str) -> np.ndarray:
        if node in ("0", "gnd", "GND"):
            return np.zeros_like(self.t if self.exact else self.t_grid, dtype=float)
        for key in (node, node.lower()):
            if key in self.v:
                return np.asarray(self.v[key], dtype=float)
        raise SimulationError(
            f"The waveforms have no voltage of node '{node}' of {element}, so its loss cannot be computed.",
            hint="save every node of the RLOSS_* resistors in the transient run (netgen.periodic.steady does this for built-in templates; check the node names of a user template).",
        )


def _intrinsic_coefficients(wf, exact: dict, periods: int, n_h: int, V: np.ndarray, I: np.ndarray):
    """Fourier coefficients of the generator voltage (node dint) and current (VISW), the intrinsic
    plane; the drain-terminal ones where the run has no such node (a user template)."""
    v_int = exact.get("int_v")
    if v_int is None:
        v_int = fourier(np.asarray(wf.v["dint"], float), periods, n_h) if "dint" in wf.v else V
    i_gen = exact.get("switch_i")
    if i_gen is None:
        i_gen = fourier(np.asarray(wf.i["switch"], float), periods, n_h) if "switch" in wf.i else I
    return v_int, i_gen


def _loss_budget(win: _Window, design, netlist_text: str, load_harmonics_w: float) -> dict:
    """Every watt drawn from Vdd, by where it goes: the device (conduction, switching), each
    ``RLOSS_*`` resistor, and the load power outside the fundamental (W), all over the window
    and with the quadrature of Pdc and Pout (:class:`_Window`)."""
    dev = design.device
    vd = win.v["drain"]
    isw = win.i.get("switch", win.i["drain"])
    losses = device_loss_split(vd, isw, float(design.vdd_v), model=dev.model, ron_ohm=dev.ron_ohm,
                               roff_ohm=dev.roff_ohm, t_s=win.t)
    elements = _loss_elements(netlist_text)
    powers: list[float] = []
    if win.exact:
        for name, a, b, r in elements:
            dv = win.node(a, name) - win.node(b, name)
            powers.append(win.mean_product(dv, dv) / r)
    elif elements:  # a uniform grid: every resistor's mean of dv^2 in one step (row means, as fast_mean)
        at: dict[str, int] = {}
        rows = []
        for name, a, b, _ in elements:
            for x in (a, b):
                if x not in at:
                    at[x] = len(rows)
                    rows.append(win.node(x, name))
        V = np.stack(rows)
        dv = V[[at[a] for _, a, _, _ in elements]] - V[[at[b] for _, _, b, _ in elements]]
        sq = np.add.reduce(dv * dv, axis=1) / dv.shape[1]
        powers = [float(p) / r for p, (_, _, _, r) in zip(sq, elements)]
    for (name, _, _, _), p in zip(elements, powers):
        key = name[6:] if name.upper().startswith("RLOSS_") else name
        # the sections of a frequency-law ladder (RLOSS_<part>__s<k>, docs/losses.md) add to their part
        key = key.split("__", 1)[0]
        losses[key] = losses.get(key, 0.0) + p
    losses["load_harmonics"] = load_harmonics_w  # load power outside the fundamental (n >= 2, DC)
    return losses


def analyse(wf, sized, netlist_text: str, *, harmonics: int | None = None, engine: str = "ngspice") -> dict:
    """Metrics of one settled simulation (the metrics.json contract).

    Parameters
    ----------
    wf : netgen.design.records.Waveforms
        Needs ``v['drain']``, ``v['load']``, ``i['drain']``, ``i['supply']``; when
        ``wf.fourier`` holds ``drain_v``, ``drain_i``, ``load_v``, ``supply_i`` (exact
        coefficients from the simulator's points) the harmonic table, Pdc and the load power
        per harmonic come from them, else from the uniform grid;
        ``i['switch']`` for the device loss split (else ``i['drain']``);
        ``v['gate']`` and ``i['gate']`` for the PAE; the nodes of every RLOSS_*.
    sized : netgen.design.records.SizedDesign
    netlist_text : str
        The transient netlist (RLOAD value and RLOSS_* lines are read from it).
    harmonics : int, optional
        Harmonics reported (default ``sized.design.sim.harmonics``).
    engine : str
        What produced ``wf``, reported as ``metrics["engine"]``: ``"ngspice"`` (a simulation) or
        ``"estimate"`` (the periodic estimate alone, netgen.studies.fast).

    Returns
    -------
    dict
        See docs/metrics.md. Powers in W, voltages in V,
        currents in A, angles in degrees, efficiencies as fractions.

    Raises
    ------
    SimulationError
        If a node of a loss resistor is missing from ``wf.v``.

    Length: the computations in order (Fourier coefficients, powers on one window, intrinsic
    plane, loss budget, the energy check) and then the metrics contract as one dict literal, key
    by key as docs/metrics.md lists it.
    """
    design = sized.design
    n_h = int(harmonics if harmonics is not None else design.sim.harmonics)
    vdd = float(design.vdd_v)
    periods = periods_in(wf.t_s, wf.f0_hz)

    vd = np.asarray(wf.v["drain"], dtype=float)
    idr = np.asarray(wf.i["drain"], dtype=float)
    vl = np.asarray(wf.v["load"], dtype=float)
    isup = np.asarray(wf.i["supply"], dtype=float)

    rl = load_resistance(netlist_text, design.load_ohm)
    exact = _exact_coefficients(wf, n_h)
    V = exact.get("drain_v", None)
    V = V if V is not None else fourier(vd, periods, n_h)
    I = exact.get("drain_i", None)
    I = I if I is not None else fourier(idr, periods, n_h)
    VL = exact.get("load_v", None)
    VL = VL if VL is not None else fourier(vl, periods, n_h)

    idc = float(exact["supply_i"][0].real) if "supply_i" in exact else float(np.mean(isup))
    pdc = vdd * idc
    pload_n = np.abs(VL) ** 2 / (2.0 * rl)
    pload_n[0] = VL[0].real ** 2 / rl  # DC in the load (normally 0)
    pout = float(pload_n[1])
    win = _Window(wf)
    vl_w = win.v.get("load", vl)
    pload_total = win.mean_product(vl_w, vl_w) / rl
    p1_drain = float(-0.5 * (V[1] * np.conj(I[1])).real)

    pin = None
    if "gate" in win.v and "gate" in win.i:
        pin = win.mean_product(win.v["gate"], win.i["gate"])

    inside = input_side(win, exact, wf, design, netlist_text, pin, pout, complex(VL[1]), periods)
    pin_amp = inside["pin_port_w"] if inside["pin_port_w"] is not None else pin  # into the amplifier's input
    eff = pout / pdc if pdc > 0 else None
    pae = (pout - pin_amp) / pdc if (pin_amp is not None and pdc > 0) else None
    if pin_amp is not None and pin_amp < 0:
        pae = None  # the drive source absorbs power: no added-power figure (design_warnings says why)
    table = _harmonic_table(V, I, pload_n, n_h)
    v_int, i_gen = _intrinsic_coefficients(wf, exact, periods, n_h, V, I)
    for row, extra in zip(table, intrinsic_columns(v_int, i_gen, n_h, harmonic_impedance)):
        row.update(extra)

    losses = _loss_budget(win, design, netlist_text, pload_total - pout)
    device_w = losses["device_conduction"] + losses["device_switching"]
    coupled_pin = pin if design.device.model in ("spice", "angelov") else None  # a gm gate feeds only RGIN
    impossible = _impossible(pout, pdc, coupled_pin, device_w)
    if impossible:
        eff = pae = None  # never printed as a result (design_warnings says why)
    elif eff is not None and eff > 1.0:
        eff = 1.0  # within ROUNDING of 1: the arithmetic's own error, not a result above 1
    balance = (pdc - pout - sum(losses.values())) / pdc if pdc > 0 else None

    # extremes from the simulator's own time points when steady.py supplied them (the uniform
    # grid can step over a narrow switching spike); the grid otherwise
    peaks = getattr(wf, "peaks", None) or {}
    vd_max = float(peaks.get("vd_max_v", vd.max()))
    vd_min = float(peaks.get("vd_min_v", vd.min()))
    id_max = float(peaks.get("id_max_a", idr.max()))
    id_min = float(peaks.get("id_min_a", idr.min()))

    metrics = {
        "design": {
            "name": design.name,
            "topology": design.topology,
            "f0_hz": float(design.f0_hz),
            "vdd_v": vdd,
            "load_ohm": float(rl),
            "ropt_ohm": _f(sized.ropt_ohm),
        },
        "engine": engine,
        "settled": bool(wf.settled) and not (impossible and device_w >= 0),  # energy still leaving: not settled
        "cycles": int(wf.cycles),
        "settle_note": wf.note if not impossible else f"{impossible}; {wf.note}",
        "start": _start(getattr(wf, "start", None) or {}, pdc, pout),
        "pdc_w": _f(pdc),
        "idc_a": _f(idc),
        "pout_w": _f(pout),
        "pload_total_w": _f(pload_total),
        "p1_drain_w": _f(p1_drain),
        "pin_w": _f(pin),
        "drain_efficiency": _f(eff),
        "pae": _f(pae),
        **drive_metrics(design, pout, pin_amp),
        **inside,
        "conduction_angle_deg": _f(conduction_angle_deg(wf.i.get("switch", idr))) if design.device.model != "switch" else None,
        "peak_vd_v": _f(vd_max),
        "peak_vd_over_vdd": _f(vd_max / vdd),
        "min_vd_v": _f(vd_min),
        "peak_id_a": _f(id_max),
        "min_id_a": _f(id_min),
        "peak_vd_range_v": _range(peaks, "vd_max_lo_v", "vd_max_hi_v"),
        "peak_id_range_a": _range(peaks, "id_max_lo_a", "id_max_hi_a"),
        "peak_vint_v": _f(np.max(wf.v["dint"])) if "dint" in wf.v else _f(vd_max),
        "planes": dict(PLANES),
        "cout_series_ohm": _cout_series(netlist_text),
        "harmonics": table,
        "device_dissipation_w": _f(device_w),
        "losses": {k: _f(v) for k, v in losses.items()},
        "loss_balance_error": _f(balance),
        "bound": bound_for(sized),
    }
    for row in table[1:]:
        metrics[f"h{row['n']}_dbc"] = row["pload_dbc"]
    metrics["stress"] = {k: {kk: (_f(vv) if isinstance(vv, float) else vv) for kk, vv in r.items()}
                         for k, r in part_stress(wf, netlist_text, losses).items()}
    metrics.update({k: (_f(v) if isinstance(v, float) else v) for k, v in stress_summary(metrics["stress"]).items()})
    metrics["warnings"] = (([impossible] if impossible else []) + design_warnings(sized, metrics)
                           + plane_warnings(sized, metrics) + buildability_warnings(sized) + angelov_warnings(design)
                           + input_warnings(metrics))
    q = (sized.derived or {}).get("cout_q")
    if q and q[0] > COUT_Q_WARN:
        metrics["warnings"].append(f"the device capacitance has a Q of {q[0]:.3g} at f0 (omega0 (Cout + Cp) Ropt), absorbed by "
                                   "the network: a narrowband design sensitive to part loss and tolerance; lower f0, use a "
                                   "smaller device or a lower Ropt")
    if design.block.file is not None:
        from netgen.netlist import design_block

        metrics["block"] = design_block(design).summary()
    return metrics


def _cout_series(netlist_text: str) -> float:
    """The series resistance the transient netlist gives Cout (``RLOSS_cout``), ohm; 0 without."""
    for name, _a, _b, r in _loss_elements(netlist_text):
        if name.lower() == "rloss_cout":
            return float(r)
    return 0.0


#: relative surplus of load power over the supplied power taken as floating-point rounding
ROUNDING = 1e-6


def _impossible(pout_w: float, pdc_w: float, pin_w: float | None, device_w: float) -> str:
    """Why the powers cannot be a periodic steady state of a real amplifier ('' when they can).

    In a periodic state of a passive network fed by the supply and the drive, energy is conserved
    (Tellegen's theorem, any circuit-theory textbook): the load cannot take more than
    Pdc + Pin. A surplus is either a device model that delivers power (negative dissipation: an
    ideal controlled current flowing against the voltage) or stored energy still leaving the
    network (the run is not settled to that precision); either way the efficiency is withheld.
    """
    supplied = pdc_w + max(pin_w or 0.0, 0.0)
    if pout_w <= supplied * (1.0 + ROUNDING):
        return ""
    eff = f" (drain efficiency would read {pout_w / pdc_w:.2%})" if pdc_w > 0 else ""
    head = (f"the load received more power ({pout_w:.4g} W) than the supply and drive delivered "
            f"({supplied:.4g} W){eff}, which no real amplifier does")
    if device_w < 0:
        return (f"{head}: the device model delivers {-device_w:.3g} W (its dissipation is negative: current "
                "flows while the drain voltage is below zero), so the efficiency is not reported; give a "
                "gm device a knee (device.vknee) or lower device.drive")
    return (f"{head}: energy stored in the network was still leaving it during the averaged periods, so the "
            "efficiency is not reported; raise sim.min_cycles or tighten sim.settle_tol")


def bound_warning(metrics: dict, model: str) -> str:
    """Why a simulated drain efficiency exceeds its ideal bound ('' when it does not).

    The bound (netgen.synthesis.theory.bound_for) assumes an ideal device and the harmonics it
    lists; a simulation can beat it only by breaking an assumption, and the sentence names which:
    a device that delivers power (negative dissipation), voltage at harmonics the bound takes as
    shorted (the real network's finite impedance there), or drive power reaching the output.
    """
    eff = metrics.get("drain_efficiency")
    bound = metrics.get("bound") or {}
    limit = bound.get("efficiency")
    if eff is None or limit is None or eff <= limit * (1.0 + 1e-4):
        return ""
    why = []
    losses = metrics.get("losses") or {}
    device_w = (losses.get("device_conduction") or 0.0) + (losses.get("device_switching") or 0.0)
    if device_w < 0:
        why.append(f"the device model delivers {-device_w:.3g} W (current flows while the drain voltage is "
                   f"{metrics.get('min_vd_v') or 0.0:.3g} V at its lowest): an ideal current source without a knee; "
                   "set device.vknee")
    allowed = bound.get("voltage_harmonics")
    rows = metrics.get("harmonics") or []
    if allowed and rows:
        v1 = rows[0].get("vd_v") or 0.0
        extra = [f"{r['n']}f0 ({(r.get('vd_v') or 0.0) / v1:.1%} of V1)" for r in rows[1:]
                 if r["n"] not in allowed and v1 > 0 and (r.get("vd_v") or 0.0) > 0.01 * v1]
        if extra:
            why.append("the drain voltage has harmonics the bound assumes shorted, " + ", ".join(extra)
                       + ": the real network's impedance there is not zero, so the waveform is flatter than the "
                       "bound allows")
    pin = metrics.get("pin_w")
    if model == "spice" and pin:
        why.append(f"drive power ({pin:.3g} W) reaches the output through the device")
    reason = "; ".join(why) if why else "the simulated waveforms use freedoms the bound's assumptions exclude"
    return (f"the drain efficiency {eff:.2%} exceeds the ideal bound {limit:.2%} ({bound.get('name', '')}) because "
            f"{reason}")


#: per-period drain peaks spreading by more than this fraction over the averaged periods are said
PEAK_SPREAD_WARN = 0.05


def design_warnings(sized, metrics: dict) -> list[str]:
    """Plain sentences about results a user should not take at face value."""
    d = sized.design
    out = []
    has_line = any(c.kind == "Z0" for c in sized.components.values())
    if d.device.model == "switch" and d.device.cout_f == 0.0 and d.device.transition == 0.0 and has_line:
        out.append("an abrupt switch with no output capacitance interrupts current into a transmission line: "
                   "the drain peak includes edge spikes the time step does not resolve; set device.cout "
                   "(or device.transition) for a trustworthy peak voltage")
    beat = bound_warning(metrics, d.device.model)
    if beat:
        out.append(beat)
    pin = metrics.get("pin_w")
    if pin is not None and pin < 0:
        out.append(f"the drive power Pin is negative ({pin:.3g} W): over a period the drive source absorbs power fed "
                   "back from the drain through the device's gate-drain coupling, so PAE is not reported (it would "
                   "exceed the drain efficiency); drive the gate through a source resistance or a matching network "
                   "to measure a real input power")
    balance = metrics.get("loss_balance_error")
    if balance is not None and abs(balance) > 0.01:
        out.append(f"the loss budget misses {balance:+.1%} of Pdc: raise sim.points_per_cycle for a closer balance")
    span = metrics.get("peak_vd_range_v")
    if span and span[0] and span[1] / span[0] > 1.0 + PEAK_SPREAD_WARN:
        smooth = (metrics.get("start") or {}).get("estimate_peak_vd_v")
        also = f"; the computed periodic state peaks at {smooth / d.vdd_v:.2f} Vdd" if smooth else ""
        out.append(f"the drain peak changes from period to period, {span[0] / d.vdd_v:.2f} to {span[1] / d.vdd_v:.2f} "
                   f"Vdd over the averaged periods (the reported {metrics['peak_vd_over_vdd']:.2f} Vdd is their median): "
                   f"narrow switching spikes the simulation puts on the line{also}; rate the device for the "
                   "largest (on lossy lines they can die out after ~100 cycles: raise sim.min_cycles to see)")
    return out
