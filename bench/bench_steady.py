"""Time to a trustworthy periodic steady state: pashape's warm start vs a naive cold transient.

Per design (sims/<name>.toml):

* **pashape**: ``netgen.periodic.steady.simulate(sized)`` as a user gets it (start on the periodic state
  computed from the netlist, automatic stop), wall time (median of ``repeats`` runs before and
  ``repeats`` after the naive run, the first run of a fresh worker apart), its cycles, its Pdc /
  P1 / efficiency, and the seconds of its calls (estimate, ngspice).
* **pashape, DC start**: the same with ``sim.periodic_start = false`` (the DC state of feed and
  block with bias-mode nulling, the previous start), one run, side by side.
* **naive**: the same transient netlist (``netgen.netlist.renderer.render(sized, "tran")``, same step)
  without initial conditions and without ``uic`` -- a plain ``.tran`` that starts from ngspice's
  DC operating point -- run long once. Per-cycle Pdc and P1 give the converged reference (mean of
  the last 100 cycles, ``common.reference_tail``) and the cycles really needed to stay within
  0.1 % of it. The naive time to 0.1 % is read from the same long run's wall-clock stamps at
  that cycle (the run is chunked into ``chunk`` cycles only to take those stamps).
* **warm oracle**: the transient netlist pashape itself ran (captured from its call of
  ``netgen.simulator.engine.run_transient``, its initial state and line-history sources included) run
  long, to count the cycles the warm start really needs, independent of pashape's stopping rule.
"""

from __future__ import annotations

import dataclasses
import json
import statistics
import subprocess
import sys
import time
from contextlib import contextmanager

import numpy as np

try:  # run as a script from bench/ or imported as bench.bench_steady
    from common import (TOL, CycleStats, cycles_to_tol, jitter, load_sized, plain_tran, proc_peak_rss_mb,
                        reference_tail, set_tstop, tail_change, waveform_powers)
except ImportError:  # pragma: no cover
    from bench.common import (TOL, CycleStats, cycles_to_tol, jitter, load_sized, plain_tran, proc_peak_rss_mb,
                              reference_tail, set_tstop, tail_change, waveform_powers)

__all__ = ["warm_up", "netgen_runs", "long_run", "measure_design", "settle_cycles", "settle_summary", "overhead", "memory_batch",
           "chunk_overhead", "line_segments", "device_starts", "subcircuit_sized"]

_DIVIDER = """bench divider
V1 in 0 DC 10
R1 in out 1k
R2 out 0 1k
.op
.end
"""

_SMALL_TRAN = """bench overhead probe: RC driven by a pulse
V1 in 0 PULSE(0 1 0 1n 1n 5n 10n)
R1 in out 1k
C1 out 0 1p
.tran 0.1n 20n
.end
"""


def warm_up(backend: str = "shared") -> float:
    """Start the simulator worker (if needed) with a trivial operating point; seconds taken."""
    from netgen.simulator import engine

    t0 = time.monotonic()
    engine.run_op(_DIVIDER, backend=backend)
    return time.monotonic() - t0


@contextmanager
def _spy():
    """Record every ``engine.run_transient`` / ``engine.run_op`` call and every periodic estimate
    (``netgen.periodic.estimator.estimate``) made inside the block: [(kind, netlist, seconds)]."""
    from netgen import simulator  # the periodic stage calls the simulator through its package face
    from netgen.periodic import estimator

    calls = []
    originals = {(simulator, "run_transient"): "tran", (simulator, "run_op"): "op", (estimator, "estimate"): "estimate"}
    saved = {key: getattr(*key) for key in originals}

    def timed(kind, run):
        def wrapper(netlist, *a, **k):
            t0 = time.monotonic()
            try:
                return run(netlist, *a, **k)
            finally:
                calls.append((kind, netlist, time.monotonic() - t0))
        return wrapper

    for (mod, attr), kind in originals.items():
        setattr(mod, attr, timed(kind, saved[(mod, attr)]))
    try:
        yield calls
    finally:
        for (mod, attr), fn in saved.items():
            setattr(mod, attr, fn)


def netgen_runs(sized, repeats: int = 3) -> dict:
    """``netgen.periodic.steady.simulate(sized)`` ``repeats`` times; wall time, cycles and powers of the last run.

    ``engine_calls`` lists the last run's calls and their seconds: ``estimate`` (the periodic
    state, :mod:`netgen.periodic.estimator`), ``op`` and ``tran`` (ngspice)."""
    from netgen.periodic import steady

    d = sized.design
    times, calls = [], []
    wf = None
    for _ in range(repeats):
        with _spy() as spied:
            t0 = time.monotonic()
            wf = steady.simulate(sized)
            times.append(time.monotonic() - t0)
        calls = spied
    pdc, p1, pload = waveform_powers(wf, vdd_v=d.vdd_v, rload_ohm=d.load_ohm)
    trans = [c for c in calls if c[0] == "tran"]
    return {
        "seconds_all": [round(t, 3) for t in times],
        "seconds": statistics.median(times),
        "cycles": int(wf.cycles),
        "settled": bool(wf.settled),
        "note": wf.note,
        "pdc_w": pdc, "p1_w": p1, "pload_w": pload, "efficiency": p1 / pdc,
        "engine_calls": [(k, round(s, 4)) for k, _, s in calls],
        "warm_netlist": trans[-1][1] if trans else None,
    }


def long_run(netlist: str, sized, cycles: int, *, chunk: int = 50, budget_s: float = float("inf")) -> dict:
    """Run ``netlist`` for ``cycles`` periods, recording per-cycle powers and wall-clock stamps.

    Returns
    -------
    dict
        ``pdc_w``, ``p1_w``, ``pload_w`` (lists, W), ``wall_s``, ``stamps`` [(cycles, seconds since
        the call)], ``points_per_cycle`` (simulator time points per cycle), ``truncated`` (the
        wall-time budget ended it early).
    """
    from netgen.simulator import engine

    d = sized.design
    T = 1.0 / d.f0_hz
    net = set_tstop(netlist, cycles * T)
    t0 = time.monotonic()
    check = CycleStats(period_s=T, vdd_v=d.vdd_v, rload_ohm=d.load_ohm, budget_s=budget_s, started=t0)
    res = engine.run_transient(net, save=["load", "vdd#branch"], stop_check=check, chunk_s=chunk * T,
                               keep_s=2 * T, timeout_s=max(600.0, 3 * budget_s if budget_s < 1e9 else 7200.0))
    wall = time.monotonic() - t0
    c = res.checker
    return {"pdc_w": list(c.pdc_w), "p1_w": list(c.p1_w), "pload_w": list(c.pload_w), "wall_s": wall,
            "stamps": [(n, s - t0) for n, s in c.stamps], "points_per_cycle": list(c.points_per_cycle),
            "truncated": len(c.pdc_w) < cycles - 1}


def time_at_cycle(run: dict, n: int) -> float:
    """Wall time (s) the long run took to complete ``n`` cycles (linear between chunk stamps)."""
    xs = [0] + [c for c, _ in run["stamps"]]
    ys = [0.0] + [s for _, s in run["stamps"]]
    return float(np.interp(n, xs, ys))


#: trailing-mean length used when per-cycle values jitter by more than JITTER_LIMIT * TOL
SMOOTH_CYCLES = 10
JITTER_LIMIT = 0.2


def settle_cycles(run: dict, final: dict | None = None, smooth: int = 1) -> int | None:
    """Cycles until Pdc and P1 (or their ``smooth``-cycle trailing means) stay within TOL of ``final``
    (default: the mean of the run's own last 100 cycles)."""
    return cycles_to_tol({"pdc_w": run["pdc_w"], "p1_w": run["p1_w"]}, TOL, final=final, smooth=smooth)


def settle_summary(run: dict, final: dict) -> dict:
    """Cycles to TOL per cycle and on 10-cycle means, the jitter floor, and which count to trust."""
    jit = max(jitter(run["pdc_w"]), jitter(run["p1_w"]))
    raw = settle_cycles(run, final)
    smoothed = settle_cycles(run, final, SMOOTH_CYCLES)
    use_smooth = jit > JITTER_LIMIT * TOL
    return {"cycles_per_cycle": raw, "cycles_10_cycle_mean": smoothed, "jitter_rel": jit,
            "criterion": f"{SMOOTH_CYCLES}-cycle mean" if use_smooth else "per cycle",
            "cycles": smoothed if use_smooth else raw}


def _final(run: dict) -> dict:
    """The converged Pdc, P1, Pload of a long run: the mean of its last reference_tail cycles."""
    tail = reference_tail(len(run["pdc_w"]))
    return {k: float(np.mean(run[k][-tail:])) for k in ("pdc_w", "p1_w", "pload_w")}


def _rel(a: float, b: float) -> float:
    return (a - b) / b


def measure_design(name: str, sized, *, cold_cycles: int, warm_cycles: int, repeats: int = 3,
                   chunk: int = 50, budget_s: float = float("inf"), progress=print) -> dict:
    """All steady-state numbers of one design (see the module docstring)."""
    from netgen.simulator import engine
    from netgen.netlist.renderer import render

    d = sized.design
    T = 1.0 / d.f0_hz
    out: dict = {"design": name, "topology": d.topology, "f0_hz": d.f0_hz, "points_per_cycle": d.sim.points_per_cycle,
                 "feed_l_h": sized.components["feed_l"].value if "feed_l" in sized.components else None,
                 "block_c_f": sized.components["block_c"].value if "block_c" in sized.components else None}
    engine.shutdown()
    out["worker_start_s"] = round(warm_up(), 3)

    ng = netgen_runs(sized, repeats)
    out["netgen"] = {k: v for k, v in ng.items() if k != "warm_netlist"}
    out["netgen"]["worker_peak_rss_mb"] = proc_peak_rss_mb(engine.worker_pid())
    progress(f"  {name}: pashape {ng['seconds']:.2f} s, {ng['cycles']} cycles, settled={ng['settled']}")
    # the previous start, side by side: the DC state of feed and block with bias-mode nulling
    dc = netgen_runs(dataclasses.replace(sized, design=dataclasses.replace(
        d, sim=dataclasses.replace(d.sim, periodic_start=False))), 1)
    out["netgen_dc_start"] = {k: v for k, v in dc.items() if k not in ("warm_netlist", "seconds_all")}
    progress(f"  {name}: DC warm start {dc['seconds']:.2f} s, {dc['cycles']} cycles")

    cold_net = plain_tran(render(sized, mode="tran", tstop_s=cold_cycles * T))
    cold = long_run(cold_net, sized, cold_cycles, chunk=chunk, budget_s=budget_s)
    ref = _final(cold)
    cold_settle = settle_summary(cold, ref)
    n_cold = cold_settle["cycles"]
    naive = {
        "cycles_run": len(cold["pdc_w"]), "wall_s": round(cold["wall_s"], 3), "truncated": cold["truncated"],
        "s_per_cycle_late": None, "sim_points_per_cycle_late": int(np.median(cold["points_per_cycle"][-20:])),
        "ref_pdc_w": ref["pdc_w"], "ref_p1_w": ref["p1_w"], "ref_efficiency": ref["p1_w"] / ref["pdc_w"],
        "ref_tail_change_pdc": tail_change(cold["pdc_w"]), "ref_tail_change_p1": tail_change(cold["p1_w"]),
        "cycles_to_tol": n_cold, "settle": cold_settle,
        "seconds_to_tol": round(time_at_cycle(cold, n_cold), 3) if n_cold else None,
        "time_method": "wall-clock stamp of the long run at that cycle (chunks of %d cycles)" % chunk,
        "worker_peak_rss_mb": proc_peak_rss_mb(engine.worker_pid()),
    }
    st = cold["stamps"]
    if len(st) >= 3:
        (c_a, s_a), (c_b, s_b) = st[len(st) // 2], st[-1]
        if c_b > c_a:
            naive["s_per_cycle_late"] = round((s_b - s_a) / (c_b - c_a), 5)
    if len(cold["pdc_w"]) >= 400:
        k = 399
        naive["at_400"] = {
            "pdc_err": _rel(cold["pdc_w"][k], ref["pdc_w"]),
            "p1_err": _rel(cold["p1_w"][k], ref["p1_w"]),
            "efficiency_err_points": 100 * (cold["p1_w"][k] / cold["pdc_w"][k] - ref["p1_w"] / ref["pdc_w"]),
            "seconds": round(time_at_cycle(cold, 400), 3),
        }
    out["naive"] = naive
    progress(f"  {name}: naive {naive['cycles_run']} cycles in {naive['wall_s']:.1f} s, 0.1 % after {n_cold} cycles")
    # pashape again after the long run, so that its time is the median over runs on both sides of
    # the naive one (the machine's speed drifts); the first run of a fresh worker (its imports)
    # is kept apart as first_run_s
    again = netgen_runs(sized, repeats)
    runs = ng["seconds_all"][1:] + again["seconds_all"]
    ng["seconds"] = statistics.median(runs)
    out["netgen"].update(seconds=ng["seconds"], seconds_all=ng["seconds_all"] + again["seconds_all"],
                         first_run_s=ng["seconds_all"][0])

    for key, run in (("netgen", ng), ("netgen_dc_start", dc)):
        out[key]["pdc_err"] = _rel(run["pdc_w"], ref["pdc_w"])
        out[key]["p1_err"] = _rel(run["p1_w"], ref["p1_w"])
        out[key]["efficiency_diff_points"] = 100 * (run["efficiency"] - naive["ref_efficiency"])
        out[key]["within_tol"] = bool(abs(out[key]["pdc_err"]) <= TOL and abs(out[key]["p1_err"]) <= TOL)
    out["ratio"] = (naive["seconds_to_tol"] / ng["seconds"]) if naive["seconds_to_tol"] else None
    out["ratio_dc_start"] = (naive["seconds_to_tol"] / dc["seconds"]) if naive["seconds_to_tol"] else None

    if ng["warm_netlist"] is not None and warm_cycles > 0:
        warm = long_run(ng["warm_netlist"], sized, warm_cycles, chunk=chunk, budget_s=budget_s)
        wfin = _final(warm)
        warm_settle = settle_summary(warm, wfin)
        use = SMOOTH_CYCLES if warm_settle["criterion"] != "per cycle" else 1
        out["warm"] = {
            "cycles_run": len(warm["pdc_w"]), "wall_s": round(warm["wall_s"], 3), "truncated": warm["truncated"],
            "cycles_to_tol": warm_settle["cycles"], "settle": warm_settle,
            "cycles_to_tol_vs_cold_ref": settle_cycles(warm, ref, use),
            "final_vs_cold_ref_pdc": _rel(wfin["pdc_w"], ref["pdc_w"]),
            "final_vs_cold_ref_p1": _rel(wfin["p1_w"], ref["p1_w"]),
            "first_cycle_err_pdc": _rel(warm["pdc_w"][0], wfin["pdc_w"]),
            "first_cycle_err_p1": _rel(warm["p1_w"][0], wfin["p1_w"]),
            "tail_change_pdc": tail_change(warm["pdc_w"]),
        }
        progress(f"  {name}: warm start reaches 0.1 % after {out['warm']['cycles_to_tol']} cycles")
    else:
        out["warm"] = {"note": "pashape's transient netlist could not be captured (no engine.run_transient call seen)"}
    out["cold_first_cycle_err_pdc"] = _rel(cold["pdc_w"][0], ref["pdc_w"])
    return out


def overhead(runs: int = 20) -> dict:
    """Per-run wall time of a tiny transient (200 points) through the shared library and the batch executable."""
    from netgen.simulator import engine

    out = {"circuit": "RC driven by a pulse, .tran 0.1n 20n", "runs": runs}
    engine.shutdown()
    t0 = time.monotonic()
    engine.run_transient(_SMALL_TRAN, backend="shared")
    out["shared_first_run_s"] = round(time.monotonic() - t0, 4)
    for backend in ("shared", "batch"):
        ts = []
        for _ in range(runs):
            t0 = time.monotonic()
            engine.run_transient(_SMALL_TRAN, backend=backend)
            ts.append(time.monotonic() - t0)
        out[f"{backend}_median_s"] = round(statistics.median(ts), 5)
        out[f"{backend}_min_s"] = round(min(ts), 5)
        ts = []
        for _ in range(runs):
            t0 = time.monotonic()
            engine.run_op(_DIVIDER, backend=backend)
            ts.append(time.monotonic() - t0)
        out[f"{backend}_op_median_s"] = round(statistics.median(ts), 5)
    return out


def chunk_overhead(name: str, cycles: int, chunks=(5, 50)) -> dict:
    """Cost of stop/resume chunking: the cold netlist run straight vs in chunks of 5 and 50 cycles."""
    from netgen.simulator import engine
    from netgen.netlist.renderer import render

    sized = load_sized(name)
    d = sized.design
    T = 1.0 / d.f0_hz
    net = plain_tran(render(sized, mode="tran", tstop_s=cycles * T))
    warm_up()
    t0 = time.monotonic()
    engine.run_transient(net, save=["load", "vdd#branch"], keep_s=2 * T)
    out = {"design": name, "cycles": cycles, "straight_s": round(time.monotonic() - t0, 3)}
    for ch in chunks:
        run = long_run(net, sized, cycles, chunk=ch)
        out[f"chunk{ch}_s"] = round(run["wall_s"], 3)
    return out


def line_segments(cycles: int) -> dict:
    """Demo with its lossy line (8 lossless segments + series R) vs the same design with a lossless
    single line: simulator time points per cycle and seconds per cycle of a cold run."""
    import dataclasses

    from netgen.netlist.renderer import render
    from netgen.synthesis.sizing import size

    base = load_sized("demo")
    out = {"cycles": cycles}
    for label, db in (("lossy_line_8_segments", base.design.network.line_loss_db), ("lossless_single_line", 0.0)):
        design = dataclasses.replace(base.design, network=dataclasses.replace(base.design.network, line_loss_db=db))
        sized = size(design)
        T = 1.0 / design.f0_hz
        run = long_run(plain_tran(render(sized, mode="tran", tstop_s=cycles * T)), sized, cycles, chunk=25)
        late = run["points_per_cycle"][-10:]
        out[label] = {"s_per_cycle": round(run["wall_s"] / cycles, 5),
                      "sim_points_per_cycle_first": run["points_per_cycle"][0],
                      "sim_points_per_cycle_last10": int(np.median(late))}
    return out


_MEM_CHILD = """
import json, resource, sys, time
sys.path.insert(0, {bench!r})
from common import load_sized
from netgen.periodic import steady
sized = load_sized({name!r})
t0 = time.monotonic()
wf = steady.simulate(sized, backend="batch")
print(json.dumps({{"seconds": time.monotonic() - t0, "cycles": wf.cycles,
    "children_maxrss_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0,
    "self_maxrss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}}))
"""


def memory_batch(name: str) -> dict:
    """Peak RSS of the ngspice executable for one pashape run on the batch path, measured in a fresh
    Python process with ``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` (the largest child)."""
    from pathlib import Path

    code = _MEM_CHILD.format(bench=str(Path(__file__).resolve().parent), name=name)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=3600)
    if proc.returncode != 0:
        return {"design": name, "error": proc.stderr.strip().splitlines()[-1:] or ["failed"]}
    res = json.loads(proc.stdout.strip().splitlines()[-1])
    res["design"] = name
    return res


#: the class-E example with the user's own level-1 MOSFET subcircuit (tests/test_own_designs.py, DRYER)
SUBCIRCUIT_DESIGN = {
    "design": {"name": "dryer_1356", "topology": "class_e", "f0": "13.56 MHz", "vdd": "24 V",
               "load": "50 ohm", "pout": "25 W"},
    "device": {"model": "spice", "include": "nmos_l1.lib", "subckt": "NSW1",
               "pins": ["drain", "gate", "source"], "vgate_bias": "4 V", "vgate_amp": "6 V", "cout": "120 pF"},
    "network": {"loaded_q": 8},
    "sim": {"points_per_cycle": 500, "max_cycles": 800},
}


def subcircuit_sized():
    """The sized class-E design with the level-1 MOSFET subcircuit of tests/data/nmos_l1.lib."""
    import copy

    from common import REPO

    from netgen.design import design_from_dict
    from netgen.synthesis.sizing import size

    doc = copy.deepcopy(SUBCIRCUIT_DESIGN)
    data = REPO / "tests" / "data"
    doc["device"]["include"] = str(data / "nmos_l1.lib")
    return size(design_from_dict(doc, source=data / "own.toml"))


def device_starts(*, repeats: int = 3, cold_cycles: int = 600, progress=print) -> dict:
    """The periodic start of the two device paths against the naive run and the DC start, one run each.

    * ``angelov``: sims/class_b_angelov.toml, the device with nonlinear charges, started on the
      collocation estimate (netgen.periodic.collocation);
    * ``subcircuit``: the class-E design with the user's own level-1 MOSFET subcircuit, started on
      the state extrapolated from ngspice's cycles (netgen.periodic.extrapolate).

    Each row is :func:`measure_design` (no warm oracle) plus the ratios measured in this run:
    naive cycles (and seconds) to 0.1 % over pashape's, and the DC start's over pashape's.
    """
    out = {}
    for key, name, sized in (("angelov", "class_b_angelov", load_sized("class_b_angelov")),
                             ("subcircuit", "class_e_level1_subcircuit", subcircuit_sized())):
        progress(f"device start {key}: {name}")
        row = measure_design(name, sized, cold_cycles=cold_cycles, warm_cycles=0, repeats=repeats,
                             chunk=25, progress=progress)
        ng, dc, naive = row["netgen"], row["netgen_dc_start"], row["naive"]
        row["start_method"] = "periodic" if "periodic estimate)" in ng["note"] else (
            "extrapolated" if "extrapolated" in ng["note"] else "dc")
        row["cycle_ratio_naive"] = (naive["cycles_to_tol"] / ng["cycles"]) if naive["cycles_to_tol"] else None
        row["cycle_ratio_dc_start"] = dc["cycles"] / ng["cycles"]
        row["time_ratio_naive"] = row["ratio"]
        row["time_ratio_dc_start"] = dc["seconds"] / ng["seconds"]
        out[key] = row
        progress(f"  {key}: pashape {ng['cycles']} cycles {ng['seconds']:.2f} s; DC start {dc['cycles']} cycles "
                 f"{dc['seconds']:.2f} s; naive {naive['cycles_to_tol']} cycles {naive['seconds_to_tol']} s")
    return out


def main(argv=None) -> int:
    """``python bench/bench_steady.py --devices``: the device-start rows only, merged into
    bench/results.json under ``device_starts`` (the rest of the file is left as it is)."""
    import argparse
    from pathlib import Path

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--devices", action="store_true", help="measure the device starts (angelov, subcircuit)")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("-o", "--out", default=str(Path(__file__).resolve().parent / "results.json"))
    args = ap.parse_args(argv)
    if not args.devices:
        ap.error("nothing to do: give --devices (bench/run_all.py runs everything)")
    from common import machine_info

    from netgen.fileio import atomic_write_text

    rows = device_starts(repeats=args.repeats)
    path = Path(args.out)
    results = json.loads(path.read_text()) if path.exists() else {}
    results["device_starts"] = {"machine": machine_info(), **rows}
    atomic_write_text(path, json.dumps(results, indent=1, default=str) + "\n")
    for key, r in rows.items():
        print(f"{key}: {r['start_method']} start {r['netgen']['cycles']} cycles {r['netgen']['seconds']:.2f} s | "
              f"DC start {r['netgen_dc_start']['cycles']} cycles ({r['cycle_ratio_dc_start']:.1f}x), "
              f"{r['netgen_dc_start']['seconds']:.2f} s ({r['time_ratio_dc_start']:.2f}x) | naive "
              f"{r['naive']['cycles_to_tol']} cycles ({r['cycle_ratio_naive']:.1f}x), {r['naive']['seconds_to_tol']} s "
              f"({r['time_ratio_naive']:.2f}x) | Pdc {100 * r['netgen']['pdc_err']:+.3f} %, P1 {100 * r['netgen']['p1_err']:+.3f} % "
              "vs the naive reference")
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
