"""Confirming load-pull points in ngspice: the ideal terminations realised as a netlist.

A load-pull point (:mod:`netgen.studies.loadpull`) is solved per harmonic bin with the impedance
Z_n set directly. To confirm it in the simulator the terminations are built from ideal parts,
so that at every harmonic n f0 up to ``H`` the drain sees Z_n and above ``H`` a near short:

* ``L_feed`` from Vdd: the choke (a DC short to the supply, X = 1e4 Z0 at f0; its admittance at
  the harmonics is taken out of the branches below, so the drain sees none of it).
* ``C_HF`` from the drain to ground: X = 0.1 Z0 at (H + 1) f0, the short of the harmonics
  above ``H`` (the study's default ``--rest short``).
* one branch per harmonic n = 1..H from the drain to ground: the impedance
  ``Zt_n = 1/(1/Z_n - j n w0 C_HF + j/(n w0 L_feed))`` (the branch with C_HF and the choke in
  parallel gives Z_n; an open gives the reactance that resonates them, a short a short), as a resistor ``Re Zt_n`` (the
  fundamental's is ``RLOAD``), a series L and C and, for every other harmonic m <= H, a parallel
  tank resonant at m f0 (an open there: the branch carries only its own harmonic). The series C is
  chosen so that the reactances in the branch add to ``Im Zt_n`` at n f0. Foster's reactance
  theorem (1924) for the resonators; the sums are exact at the harmonics for ideal parts.
* the device: the current source as a B source ``d(t) tanh(uramp(v)/Vk) + g_r min(v, 0)`` (the
  drive as its Fourier series in ``time``), or the switch as an ``S`` element with its pulse.

The netlist follows docs/netlist_conventions.md (``VIDRAIN``, ``VISW``, the device between ``dsw``
and ground), so :func:`netgen.periodic.simulate_netlist` runs it as any design: the periodic
estimate as the start, the transient until the judge says settled. The confirmed figures (drain
efficiency P1/Pdc, P1 at the drain, Pdc, peak drain voltage) come from the settled periods and
are compared with the load-pull point's (:func:`netgen.studies.fast.disagreement`; above
:data:`netgen.studies.fast.CONFIRM_TOL` the point is flagged and its stored figures become
ngspice's, as for a sweep's ``--confirm``).
"""

from __future__ import annotations

import dataclasses
import math
import time

import numpy as np

from .loadpull import LoadPullPlan, _z_at, raab_coefficients, solve_waveforms

__all__ = ["CONFIRM_HARMONICS", "confirm_loadpull", "loadpull_netlist", "ngspice_point"]

#: harmonics realised by branches at least (more when the study sets a higher one)
CONFIRM_HARMONICS = 7
#: reactances of the parts against Z0: the choke at f0, C_HF at (H + 1) f0, each tank's inductor
#: at its resonance, each series inductor at its harmonic (before the reactance asked for)
X_CHOKE, X_HF, X_TANK, X_SERIES = 1e4, 0.1, 1.0, 3.0
#: simulator grid (points a period) of the confirmation
CONFIRM_PPC = 500


def _fmt(x: float) -> str:
    return f"{x:.12g}"


def _branch_targets(plan: LoadPullPlan, z_n: dict, H: int, c_hf: float, l_feed: float) -> dict[int, complex]:
    """Zt_n = 1/(1/Z_n - j n w0 C_HF + j/(n w0 L_feed)) for n = 1..H (0 for a short): with C_HF and
    the choke in parallel the branch gives Z_n."""
    w0 = 2 * math.pi * plan.f0_hz
    out = {}
    for n in range(1, H + 1):
        z = _z_at(z_n.get(n, plan.rest), n, plan.f0_hz)
        y = 0j if not np.isfinite(z) else (complex(np.inf) if z == 0 else 1.0 / z)
        out[n] = 0j if not np.isfinite(y) else 1.0 / (y - 1j * n * w0 * c_hf + 1j / (n * w0 * l_feed))
    return out


def _branches(plan: LoadPullPlan, z_n: dict, H: int, c_hf: float, l_feed: float) -> list[list[tuple]]:
    """Per harmonic n = 1..H the branch's parts in order from the drain: ``(name, kind, value)``
    with kind ``R``, ``L``, ``C`` (series) or ``T`` (a parallel tank: value = (L, C))."""
    z0, w0 = plan.z0_ohm, 2 * math.pi * plan.f0_hz
    targets = _branch_targets(plan, z_n, H, c_hf, l_feed)
    if targets[1].real <= 1e-9 * z0:
        raise ValueError("the point has no resistance at f0 (no output power): nothing to confirm")
    if any(t.real < -1e-9 * z0 for t in targets.values()):
        raise ValueError("a termination has a negative resistance")
    out = []
    for n in range(1, H + 1):
        wn, zt = n * w0, targets[n]
        tanks = [(m, X_TANK * z0 / (m * w0), 1.0 / (m * w0 * X_TANK * z0)) for m in range(1, H + 1) if m != n]
        x_tanks = sum(wn * lt / (1.0 - wn * wn * lt * ct) for _m, lt, ct in tanks)
        ls = (X_SERIES * z0 + max(0.0, zt.imag - x_tanks)) / wn
        cs = 1.0 / (wn * (wn * ls + x_tanks - zt.imag))
        parts = [(f"L_H{n}", "L", ls), (f"C_H{n}", "C", cs)]
        parts += [(f"H{n}T{m}", "T", (lt, ct)) for m, lt, ct in tanks]
        parts.append(("RLOAD" if n == 1 else f"R_H{n}", "R", zt.real) if zt.real > 1e-9 * z0 else (f"V_H{n}", "R", 0.0))
        out.append(parts)
    return out


def _part_z(kind: str, value, w: float) -> complex:
    """A part's impedance at angular frequency ``w`` (inf for a tank at its resonance)."""
    if kind == "R":
        return complex(value)
    if kind == "L":
        return 1j * w * value
    if kind == "C":
        return complex(np.inf) if w == 0 else 1.0 / (1j * w * value)
    lt, ct = value
    den = 1.0 - w * w * lt * ct
    return complex(np.inf) if abs(den) < 1e-12 else 1j * w * lt / den


def _initial_conditions(plan: LoadPullPlan, branches, c_hf: float, l_feed: float, v: np.ndarray,
                        i: np.ndarray) -> dict[str, float]:
    """IC of every inductor current and capacitor voltage at t = 0 from the load-pull solution
    (drain voltage ``v``, device current ``i`` on its grid): each harmonic's phasor through the
    branch impedances (a tank at its resonance carries the drain voltage, no branch current).
    DC: the series capacitors hold Vdd, the choke the device's mean current."""
    w0, M = 2 * math.pi * plan.f0_hz, v.size
    V = np.fft.rfft(v) / M
    V[1:] *= 2
    I = np.fft.rfft(i) / M
    I[1:] *= 2
    # per harmonic: the parts' impedances and the branch currents; a branch that is a short at its own
    # harmonic (V_k = 0 there) carries what the device draws less what the others carry (KCL at the drain)
    currents = {}
    for k in range(1, V.size):
        w = k * w0
        zs = [[_part_z(kind, val, w) for _n, kind, val in parts] for parts in branches]
        totals = [sum(z) for z in zs]
        ib = [0j if not np.isfinite(t) or abs(t) < 1e-9 * plan.z0_ohm else V[k] / t for t in totals]
        short = [b for b, t in enumerate(totals) if np.isfinite(t) and abs(t) < 1e-9 * plan.z0_ohm]
        if short:
            rest = sum(ib) + V[k] * 1j * w * c_hf + V[k] / (1j * w * l_feed)
            ib[short[0]] = -I[k] - rest
        currents[k] = (zs, ib)
    ic: dict[str, float] = {"C_HF": float(v[0]), "L_feed": float(np.mean(i))}
    for k in range(1, V.size):  # the choke's ripple
        ic["L_feed"] -= float((V[k] / (1j * k * w0 * l_feed)).real)
    for n, parts in enumerate(branches, start=1):
        ic[f"C_H{n}"] = float(V[0].real)
        for name, kind, _val in parts:
            if kind == "L":
                ic[name] = 0.0
            elif kind == "T":
                ic[f"L_{name}"] = ic[f"C_{name}"] = 0.0
        for k in range(1, V.size):
            w = k * w0
            zs, ibs = currents[k]
            ib = ibs[n - 1]
            for (name, kind, val), z in zip(parts, zs[n - 1]):
                if kind == "L":
                    ic[name] += float(ib.real)
                elif kind == "C":
                    ic[name] += float((ib * z).real)
                elif kind == "T":
                    vt = V[k] if not np.isfinite(z) else ib * z
                    ic[f"C_{name}"] += float(vt.real)
                    ic[f"L_{name}"] += float((vt / (1j * w * val[0])).real)
    return ic


def loadpull_netlist(plan: LoadPullPlan, idx: int, *, cycles: int = 400, ppc: int = CONFIRM_PPC,
                     solution: tuple | None = None) -> str:
    """The ngspice transient netlist of load-pull point ``idx`` (see the module docstring), its
    inductors and capacitors started (``IC=``, ``uic``) on ``solution`` (the point's (v, i) from
    :func:`netgen.studies.loadpull.solve_waveforms`) when given.

    Raises
    ------
    ValueError
        When the point cannot be realised for the simulator (no resistance at f0: nothing to
        confirm; ``--rest`` other than a short; a termination with negative resistance).
    """
    dev, z0, f0 = plan.device, plan.z0_ohm, plan.f0_hz
    if _z_at(plan.rest, 99, f0) != 0:
        raise ValueError(f"--rest {plan.rest_text}: the confirmation realises a short above the given harmonics only")
    z_n = plan.point(idx)["z"]
    H = max([CONFIRM_HARMONICS, *z_n])
    w0, T = 2 * math.pi * f0, 1.0 / f0
    c_hf = 1.0 / ((H + 1) * w0 * X_HF * z0)
    l_feed = X_CHOKE * z0 / w0
    branches = _branches(plan, z_n, H, c_hf, l_feed)
    ic = _initial_conditions(plan, branches, c_hf, l_feed, *solution) if solution is not None else {}

    def card(name, a, b, value):
        init = f" IC={ic[name]:.12g}" if name in ic and name[0] in "LC" else ""
        return f"{name} {a} {b} {_fmt(value)}{init}"

    lines = [f"* pashape loadpull point {idx}: ideal terminations at the intrinsic plane (confirmation)",
             f"VDD vdd 0 DC {_fmt(dev.vdd_v)}", card("L_feed", "vdd", "drain", l_feed), card("C_HF", "drain", "0", c_hf)]
    for n, parts in enumerate(branches, start=1):
        lines.append(f"* harmonic {n}")
        node = "drain"
        for j, (name, kind, val) in enumerate(parts):
            last = j == len(parts) - 1
            nxt = "0" if last else f"h{n}n{j}"
            if kind == "T":
                lines += [card(f"L_{name}", node, nxt, val[0]), card(f"C_{name}", node, nxt, val[1])]
            elif name == "RLOAD":
                lines += [f"V_H1 {node} load DC 0", f"RLOAD load 0 {_fmt(val)}"]
            elif name.startswith("V_"):
                lines.append(f"{name} {node} 0 DC 0")
            else:
                lines.append(card(name, node, nxt, val))
            node = nxt
    lines += ["VIDRAIN drain dint DC 0", "VISW dint dsw DC 0"]
    lines += _device_cards(plan)
    h = T / ppc
    lines += [".options method=trap", f".tran {_fmt(h)} {_fmt(cycles * T)} 0 {_fmt(h)} uic", ".end"]
    return "\n".join(lines) + "\n"


def _device_cards(plan: LoadPullPlan) -> list[str]:
    """The ideal device of the study as netlist cards (module docstring)."""
    dev, f0 = plan.device, plan.f0_hz
    T = 1.0 / f0
    wt = f"{_fmt(2 * math.pi * f0)}*time"
    if dev.kind == "switch":
        tr = T / 2000
        return ["S_SW dsw 0 ctrl 0 SWMOD", f".model SWMOD SW(RON={_fmt(max(dev.ron_ohm, 1e-6))} ROFF={_fmt(dev.roff_ohm)} VT=0.5 VH=0.25)",
                # on from -duty T/2 to +duty T/2 (centred on t = 0, as the study's switch)
                f"VCTRL ctrl 0 PULSE(1 0 {_fmt(dev.duty * T / 2 - tr / 2)} {_fmt(tr)} {_fmt(tr)} "
                f"{_fmt((1 - dev.duty) * T - tr)} {_fmt(T)})", "RCTRL ctrl 0 1e6"]
    if dev.current in ("half-sine", "half_sine", "class-b"):
        drive = f"{_fmt(dev.imax_a)}*uramp(cos({wt}))"
    else:
        orders, coef, peak = raab_coefficients(int(dev.current.split(":")[1]))
        terms = "".join(f"{a:+.12g}*cos({n}*{wt})" for n, a in zip(orders, coef))
        drive = f"{_fmt(dev.imax_a / peak)}*uramp(1{terms})"
    vk, gr = dev.knee_v, dev.imax_a / dev.knee_v
    return [f"BDEV dsw 0 I={drive}*tanh(uramp(v(dsw))/{_fmt(vk)})+{_fmt(gr)}*min(v(dsw),0)"]


def ngspice_point(plan: LoadPullPlan, idx: int, *, backend: str | None = None) -> dict:
    """The load-pull figures of point ``idx`` from ngspice (the netlist of :func:`loadpull_netlist`
    run to periodic steady state): ``drain_efficiency``, ``pout_w`` (P1 at the drain), ``pdc_w``,
    ``idc_a``, ``peak_vd_v``, ``min_vd_v``, ``peak_vd_over_vdd``, ``settled``, ``cycles``, ``engine``
    ("ngspice"). The Fourier coefficients are the simulator's exact ones of the settled periods."""
    from netgen.design import SimSpec
    from netgen.periodic import simulate_netlist

    sim = SimSpec(points_per_cycle=CONFIRM_PPC, max_cycles=400, harmonics=5)

    d = plan.device
    # the start: the point solved again on the simulator's finer grid (closer to its periodic state)
    fine = dataclasses.replace(d, points=max(d.points, CONFIRM_PPC))
    solution = solve_waveforms(fine, plan.point(idx)["z"], rest=plan.rest, f0_hz=plan.f0_hz, z0_ohm=plan.z0_ohm)[:2]

    def make_tran(ic, tstop_s):  # started on the load-pull solution (the periodic estimate replaces it where it applies)
        return loadpull_netlist(plan, idx, cycles=max(1, round(tstop_s * plan.f0_hz)), solution=solution)

    wf = simulate_netlist(make_tran, f0_hz=plan.f0_hz, vdd_v=plan.device.vdd_v, sim=sim, backend=backend)
    four = getattr(wf, "fourier", None) or {}
    if "drain_v" in four and "drain_i" in four and "supply_i" in four:
        V, I, idc = four["drain_v"], four["drain_i"], float(four["supply_i"][0].real)
    else:  # the two periods of the uniform grid
        v, i = np.asarray(wf.v["drain"]), np.asarray(wf.i["drain"])
        V, I = np.fft.rfft(v)[::2] / v.size, np.fft.rfft(i)[::2] / i.size
        V[1:] *= 2
        I[1:] *= 2
        idc = float(np.mean(wf.i["supply"]))
    pdc = plan.device.vdd_v * idc
    p1 = float(-0.5 * (V[1] * np.conj(I[1])).real)
    peaks = getattr(wf, "peaks", None) or {}
    vmax = float(peaks.get("vd_max_v", np.max(wf.v["drain"])))
    vmin = float(peaks.get("vd_min_v", np.min(wf.v["drain"])))
    return {"engine": "ngspice", "settled": bool(wf.settled), "cycles": int(wf.cycles),
            "drain_efficiency": p1 / pdc if pdc > 0 else None, "pout_w": p1, "pdc_w": pdc, "idc_a": idc,
            "peak_vd_v": vmax, "min_vd_v": vmin, "peak_vd_over_vdd": vmax / plan.device.vdd_v}


def confirm_loadpull(plan: LoadPullPlan, store, sweep_id: int, indices, *, progress=None) -> dict:
    """Re-run stored load-pull points in ngspice and record the disagreement (the contract of
    :func:`netgen.studies.fast.confirm_points`): ``metrics["confirmation"]`` on each, a flagged
    point's figures replaced by ngspice's (the load-pull solve's kept beside them).

    Returns
    -------
    dict
        As :func:`netgen.studies.fast.summarize_confirmation` (``points``, ``confirmed``,
        ``errors``, ``flagged``, ``worst_pout_rel``, ``worst_efficiency_rel``, ``tolerance``).
    """
    from .fast import disagreement, store_confirmed, summarize_confirmation

    wanted = {int(i) for i in indices}
    results = []
    for row in store.rows(sweep_id):
        m = row["metrics"]
        if row["idx"] not in wanted or row["status"] != "ok" or not m or "confirmation" in m:
            continue
        t0 = time.perf_counter()
        try:
            full = ngspice_point(plan, row["idx"])
        except Exception as exc:  # noqa: BLE001 - a confirmation failing is reported, never fatal
            results.append({"idx": row["idx"], "error": f"{type(exc).__name__}: {exc}"})
            continue
        d = disagreement(m, full)
        if not full["settled"]:
            d["flagged"] = True
        d.update(idx=row["idx"], seconds=time.perf_counter() - t0, ngspice_pout_w=full["pout_w"],
                 ngspice_drain_efficiency=full["drain_efficiency"], ngspice_peak_vd_v=full["peak_vd_v"],
                 ngspice_settled=full["settled"])
        solved = {k: v for k, v in m.items() if k not in ("v_n", "i_n", "newton")}  # the solve's own, not ngspice's
        kept = {**solved, **{k: full[k] for k in full if k != "cycles"}} if d["flagged"] else dict(m)
        store_confirmed(store, sweep_id, row, kept, d, m)
        results.append(d)
        if progress is not None:
            progress(d)
    return summarize_confirmation(results)
