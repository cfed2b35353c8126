"""Post-processing of settled periodic waveforms into the metrics.json contract.

Input: :class:`netgen.records.Waveforms` (an integer number of periods on a
uniform grid), the :class:`netgen.records.SizedDesign` and the netlist text
(for the ``RLOAD`` value and the ``RLOSS_*`` loss resistors). Output: a plain
dict (JSON-ready; ``None`` where a value does not exist) with the keys of the
contract in docs/DESIGN.md plus a few extras (``idc_a``, ``pin_w``,
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
import re

import numpy as np

from .errors import SimulationError
from .theory import bound_for

__all__ = [
    "fourier",
    "periods_in",
    "parse_spice_number",
    "parse_loss_elements",
    "load_resistance",
    "harmonic_impedance",
    "waveform_efficiency",
    "device_loss_split",
    "analyse",
    "Z_CURRENT_FLOOR",
]

#: Z_n is reported only where |I_n| >= this fraction of |I_1| (else null).
Z_CURRENT_FLOOR = 1e-3

_SUFFIX = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6, "µ": 1e-6,
           "n": 1e-9, "p": 1e-12, "f": 1e-15}
_NUM = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(meg|[tgkmuµnpf])?([a-zA-Zµ]*)$", re.IGNORECASE)


# ----------------------------------------------------------------- Fourier

def periods_in(t_s: np.ndarray, f0_hz: float) -> int:
    """Number of whole periods a uniform grid (end excluded) spans.

    Raises
    ------
    ValueError
        If the grid is not uniform or does not span a whole number of periods.
    """
    t_s = np.asarray(t_s, dtype=float)
    if t_s.size < 4:
        raise ValueError("the waveform grid has fewer than 4 points")
    dt = np.diff(t_s)
    if not np.allclose(dt, dt[0], rtol=1e-6, atol=0.0):
        raise ValueError("the waveform time grid is not uniform; resample before analysis")
    span = t_s.size * dt[0] * f0_hz
    periods = int(round(span))
    if periods < 1 or abs(span - periods) > 1e-6 * max(span, 1.0):
        raise ValueError(f"the waveform grid spans {span:.6g} periods, not a whole number")
    return periods


def fourier(x: np.ndarray, periods: int, n_max: int | None = None) -> np.ndarray:
    """Complex Fourier coefficients c_0..c_nmax of a sampled periodic signal.

    Parameters
    ----------
    x : ndarray
        Samples on a uniform grid spanning exactly ``periods`` periods (end excluded).
    periods : int
        Number of whole periods in ``x`` (coherent sampling: harmonic n sits
        exactly in DFT bin n*periods, no window needed).
    n_max : int, optional
        Highest harmonic returned (default: all up to Nyquist).

    Returns
    -------
    ndarray of complex
        ``c[0]`` is the mean (real); for n >= 1
        x(t) = c0 + sum_n |c_n| cos(n w0 t + angle(c_n)), i.e. c_n = 2 X[n p]/N
        with X the DFT (Fourier series, any signals-and-systems textbook).
    """
    x = np.asarray(x, dtype=float)
    spec = np.fft.rfft(x) / x.size
    n_avail = (spec.size - 1) // periods
    if n_max is None:
        n_max = n_avail
    if n_max > n_avail:
        raise ValueError(f"harmonic {n_max} is above Nyquist ({n_avail}) for this grid; use more points per cycle")
    out = spec[: n_max * periods + 1 : periods].copy()
    out[1:] *= 2.0
    out[0] = out[0].real
    return out


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

def parse_spice_number(text: str) -> float:
    """A SPICE value ("50", "2.2n", "1meg", "5e1", "0.2ohm") as a float."""
    m = _NUM.match(text.strip())
    if not m:
        raise ValueError(f"not a SPICE number: {text!r}")
    value = float(m.group(1))
    if m.group(2):
        value *= _SUFFIX[m.group(2).lower()]
    return value


def _element_lines(netlist_text: str):
    for raw in netlist_text.splitlines():
        line = raw.strip()
        if not line or line[0] in "*+.;":
            continue
        yield line.split()


def parse_loss_elements(netlist_text: str) -> list[tuple[str, str, str, float]]:
    """``RLOSS_<name> a b <R>`` lines as (element name, node a, node b, R in ohm).

    The fallback for :func:`netgen.render.loss_elements`, following the
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
        from .render import loss_elements  # the renderer owns the format
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


def _node_voltage(wf, node: str, element: str) -> np.ndarray:
    if node in ("0", "gnd", "GND"):
        return np.zeros_like(wf.t_s, dtype=float)
    for key in (node, node.lower()):
        if key in wf.v:
            return np.asarray(wf.v[key], dtype=float)
    raise SimulationError(
        f"The waveforms have no voltage of node '{node}' of {element}, so its loss cannot be computed.",
        hint="save every node of the RLOSS_* resistors in the transient run (netgen.steady does this for built-in templates; check the node names of a user template).",
    )


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
                      ron_ohm: float = 0.2, roff_ohm: float = 1e6) -> dict:
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
    p = v * i
    total = float(np.mean(p))
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
    sw = float(np.sum(p[switching]) / n)
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


def analyse(wf, sized, netlist_text: str, *, harmonics: int | None = None) -> dict:
    """Metrics of one settled simulation (the metrics.json contract).

    Parameters
    ----------
    wf : netgen.records.Waveforms
        Needs ``v['drain']``, ``v['load']``, ``i['drain']``, ``i['supply']``;
        ``i['switch']`` for the device loss split (else ``i['drain']``);
        ``v['gate']`` and ``i['gate']`` for the PAE; the nodes of every RLOSS_*.
    sized : netgen.records.SizedDesign
    netlist_text : str
        The transient netlist (RLOAD value and RLOSS_* lines are read from it).
    harmonics : int, optional
        Harmonics reported (default ``sized.design.sim.harmonics``).

    Returns
    -------
    dict
        See docs/DESIGN.md "metrics.json". Powers in W, voltages in V,
        currents in A, angles in degrees, efficiencies as fractions.

    Raises
    ------
    SimulationError
        If a node of a loss resistor is missing from ``wf.v``.
    """
    design = sized.design
    n_h = int(harmonics if harmonics is not None else design.sim.harmonics)
    vdd = float(design.vdd_v)
    periods = periods_in(wf.t_s, wf.f0_hz)

    vd = np.asarray(wf.v["drain"], dtype=float)
    idr = np.asarray(wf.i["drain"], dtype=float)
    isw = np.asarray(wf.i.get("switch", idr), dtype=float)
    vl = np.asarray(wf.v["load"], dtype=float)
    isup = np.asarray(wf.i["supply"], dtype=float)

    rl = load_resistance(netlist_text, design.load_ohm)
    V = fourier(vd, periods, n_h)
    I = fourier(idr, periods, n_h)
    VL = fourier(vl, periods, n_h)

    idc = float(np.mean(isup))
    pdc = vdd * idc
    pload_n = np.abs(VL) ** 2 / (2.0 * rl)
    pload_n[0] = VL[0].real ** 2 / rl  # DC in the load (normally 0)
    pout = float(pload_n[1])
    pload_total = float(np.mean(vl**2) / rl)
    p1_drain = float(-0.5 * (V[1] * np.conj(I[1])).real)

    pin = None
    if "gate" in wf.v and "gate" in wf.i:
        pin = float(np.mean(np.asarray(wf.v["gate"], float) * np.asarray(wf.i["gate"], float)))

    eff = pout / pdc if pdc > 0 else None
    pae = (pout - pin) / pdc if (pin is not None and pdc > 0) else None

    z = harmonic_impedance(V, I)
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

    # ----- loss budget: every watt drawn from Vdd, by where it goes
    dev = design.device
    losses = device_loss_split(vd, isw, vdd, model=dev.model, ron_ohm=dev.ron_ohm, roff_ohm=dev.roff_ohm)
    for name, a, b, r in _loss_elements(netlist_text):
        va = _node_voltage(wf, a, name)
        vb = _node_voltage(wf, b, name)
        key = name[6:] if name.upper().startswith("RLOSS_") else name
        losses[key] = float(np.mean((va - vb) ** 2) / r)
    losses["load_harmonics"] = pload_total - pout  # load power outside the fundamental (n >= 2, DC)
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
        "settled": bool(wf.settled),
        "cycles": int(wf.cycles),
        "settle_note": wf.note,
        "pdc_w": _f(pdc),
        "idc_a": _f(idc),
        "pout_w": _f(pout),
        "pload_total_w": _f(pload_total),
        "p1_drain_w": _f(p1_drain),
        "pin_w": _f(pin),
        "drain_efficiency": _f(eff),
        "pae": _f(pae),
        "peak_vd_v": _f(vd_max),
        "peak_vd_over_vdd": _f(vd_max / vdd),
        "min_vd_v": _f(vd_min),
        "peak_id_a": _f(id_max),
        "min_id_a": _f(id_min),
        "harmonics": table,
        "losses": {k: _f(v) for k, v in losses.items()},
        "loss_balance_error": _f(balance),
        "bound": bound_for(sized),
    }
    for row in table[1:]:
        metrics[f"h{row['n']}_dbc"] = row["pload_dbc"]
    return metrics
