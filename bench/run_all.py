"""The one benchmark command: steady state vs naive transient, settling, overhead, memory, sweep.

    python bench/run_all.py            # full run (about 20-25 minutes on 2 cores), writes bench/results.json
    python bench/run_all.py --quick    # smoke run with tiny sizes (two fast topologies)

Run nothing else heavy meanwhile. See docs/benchmarks.md for what is measured and how.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import bench_steady as bs  # noqa: E402
from common import TOL, TOPOLOGIES, load_sized, machine_info  # noqa: E402

#: targets (docs/benchmarks.md)
TARGET_RATIO = 10.0
TARGET_EFF_POINTS = 0.2
TARGET_WARM_CYCLES = 20

#: (design, cold cycles, warm cycles) of the full run; long enough that the tail of the reference
#: run has stopped changing (checked and reported as ref_tail_change_*)
FULL_PLAN = [("demo", 3000, 1000)] + [(t, 3000, 1000) for t in TOPOLOGIES]
QUICK_PLAN = [("class_b_tuned", 120, 60), ("class_e", 120, 60)]


def _fmt(x, spec=".3g", none="-"):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return none
    return format(x, spec)


def _table(rows: list[dict]) -> str:
    head = (f"{'design':<15} {'pashape s':>8} {'cyc':>4} {'ok':>3} {'naive s':>8} {'cold cyc':>8} {'warm cyc':>8} "
            f"{'ratio':>6} {'dEff pt':>8} {'dP1 %':>7} {'DC-start s (cyc)':>16} {'400cyc dP1 %':>12}")
    lines = [head, "-" * len(head)]
    for r in rows:
        ng, nv, w = r["netgen"], r["naive"], r.get("warm", {})
        dc = r.get("netgen_dc_start", {})
        at = nv.get("at_400", {})
        dc_txt = f"{dc['seconds']:.2f} ({dc['cycles']})" if dc else "-"
        lines.append(
            f"{r['design']:<15} {ng['seconds']:>8.2f} {ng['cycles']:>4d} {('yes' if ng['within_tol'] else 'NO'):>3} "
            f"{_fmt(nv['seconds_to_tol'], '.2f'):>8} {_fmt(nv['cycles_to_tol'], 'd'):>8} "
            f"{_fmt(w.get('cycles_to_tol'), 'd'):>8} {_fmt(r['ratio'], '.2f'):>6} "
            f"{ng['efficiency_diff_points']:>8.3f} {100 * ng['p1_err']:>7.3f} {dc_txt:>16} "
            f"{_fmt(100 * at['p1_err'] if at else None, '.3f'):>12}")
    return "\n".join(lines)


def _guard(fn, log):
    """Run one benchmark stage; a failure is recorded in the results instead of ending the run."""
    try:
        return fn()
    except Exception as exc:  # noqa: BLE001 - a benchmark stage failing must not lose the others
        log(f"stage failed: {type(exc).__name__}: {exc}")
        return {"error": f"{type(exc).__name__}: {exc}"}


def _sweep(quick: bool, log) -> dict:
    script = HERE / "bench_sweep.py"
    if quick:
        return {"skipped": "not run with --quick"}
    if not script.exists():
        return {"skipped": "bench/bench_sweep.py is not present"}
    log("sweep throughput (bench/bench_sweep.py) ...")
    t0 = time.monotonic()
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=3600)
    out = {"returncode": proc.returncode, "wall_s": round(time.monotonic() - t0, 2),
           "stdout_tail": proc.stdout.strip().splitlines()[-4:]}
    if proc.returncode != 0:
        out["stderr_tail"] = proc.stderr.strip().splitlines()[-6:]
        return out
    try:
        out["result"] = json.loads((HERE / "sweep.json").read_text())
    except (OSError, ValueError) as exc:
        out["error"] = f"bench/sweep.json unreadable: {exc}"
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smoke run: two fast topologies, short runs")
    ap.add_argument("--out", type=Path, default=None, help="results file (default bench/results.json; "
                    "--quick writes netgen_bench_quick.json in the temp folder unless given)")
    ap.add_argument("--only", nargs="*", default=None, help="designs to run (default: all of the plan)")
    ap.add_argument("--no-sweep", action="store_true", help="skip bench/bench_sweep.py")
    args = ap.parse_args(argv)

    from netgen.simulator import engine
    from netgen.fileio import atomic_write_text

    quick = args.quick
    if args.out is not None:
        out_path = args.out
    elif quick:  # a smoke run never overwrites the committed results
        import tempfile

        out_path = Path(tempfile.gettempdir()) / "netgen_bench_quick.json"
    else:
        out_path = HERE / "results.json"
    plan = QUICK_PLAN if quick else FULL_PLAN
    if args.only:
        plan = [p for p in plan if p[0] in args.only]
    repeats = 1 if quick else 5
    t_start = time.monotonic()

    def log(msg):
        print(f"[{time.monotonic() - t_start:7.1f} s] {msg}", flush=True)

    results: dict = {"machine": machine_info(), "quick": quick, "tolerance": TOL,
                     "targets": {"ratio_demo_min": TARGET_RATIO, "efficiency_points_max": TARGET_EFF_POINTS,
                                 "warm_cycles_max": TARGET_WARM_CYCLES}}
    log(f"machine: {results['machine']['host_cpu']}, {results['machine']['cpus']} cpus, "
        f"ngspice {results['machine']['ngspice_version']}")

    rows = []
    for name, n_cold, n_warm in plan:
        log(f"{name}: pashape x{repeats}, naive cold {n_cold} cycles, warm {n_warm} cycles")
        rows.append(bs.measure_design(name, load_sized(name), cold_cycles=n_cold, warm_cycles=n_warm,
                                      repeats=repeats, chunk=10 if quick else 50, progress=log))
    results["designs"] = rows

    # bias networks on the demo: the default choke vs a large choke and block (both x10; x100 would
    # need ~15000 cold and as many warm cycles, longer than this command may take; docs/benchmarks.md)
    bias = {}
    default = next((r for r in rows if r["design"] == "demo"), None)
    if default is not None:
        bias["default"] = {"feed_l_h": default["feed_l_h"], "block_c_f": default["block_c_f"],
                           "cold_cycles": default["naive"]["cycles_to_tol"],
                           "warm_cycles": default.get("warm", {}).get("cycles_to_tol"),
                           "netgen_cycles": default["netgen"]["cycles"], "netgen_s": default["netgen"]["seconds"]}
    scale, n_big = (10.0, 60) if quick else (10.0, 5000)
    big_name = "class_b_tuned" if quick else "demo"
    if not args.only or big_name in args.only:
        log(f"{big_name} with a large choke and block (x{scale:g}): cold and warm {n_big} cycles")
        big = bs.measure_design(big_name, load_sized(big_name, feed_scale=scale, block_scale=scale),
                                cold_cycles=n_big, warm_cycles=n_big, repeats=1 if quick else 3, chunk=10 if quick else 50,
                                budget_s=30.0 if quick else 330.0, progress=log)
        bias["large_choke"] = {"design": big_name, "scale": scale, "feed_l_h": big["feed_l_h"],
                               "block_c_f": big["block_c_f"], "cold_cycles": big["naive"]["cycles_to_tol"],
                               "warm_cycles": big.get("warm", {}).get("cycles_to_tol"),
                               "netgen_cycles": big["netgen"]["cycles"], "netgen_s": big["netgen"]["seconds"],
                               "netgen_settled": big["netgen"]["settled"], "netgen_within_tol": big["netgen"]["within_tol"],
                               "detail": big}
    results["bias_networks"] = bias

    if not quick and not args.only:
        log("device starts: the angelov device (collocation) and a SPICE subcircuit (extrapolation)")
        results["device_starts"] = _guard(lambda: bs.device_starts(repeats=3, progress=log), log)

    log("per-run overhead: shared library vs batch executable")
    results["overhead"] = _guard(lambda: bs.overhead(runs=5 if quick else 30), log)
    if not quick:
        log("stop/resume chunk overhead and line-segment cost")
        results["chunk_overhead"] = _guard(lambda: bs.chunk_overhead("class_f_lumped", 600), log)
        results["line_segments"] = _guard(lambda: bs.line_segments(60), log)

    log("peak memory")
    mem_name = "class_b_tuned" if quick else "demo"
    mem = {"what": "VmHWM (peak RSS) of the shared-library worker process after netgen.periodic.steady.simulate runs "
                   "(fresh worker per design), from /proc/<pid>/status; batch: ru_maxrss of the ngspice "
                   "executable (RUSAGE_CHILDREN in a fresh Python process); bench process: RUSAGE_SELF."}
    mem["shared_worker_per_design_mb"] = {r["design"]: r["netgen"]["worker_peak_rss_mb"] for r in rows}
    mem["shared_worker_after_long_cold_run_mb"] = {r["design"]: r["naive"]["worker_peak_rss_mb"] for r in rows}
    mem["batch"] = _guard(lambda: bs.memory_batch(mem_name), log)
    mem["bench_process_maxrss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    results["memory"] = mem
    engine.shutdown()

    results["sweep"] = {"skipped": "--no-sweep"} if args.no_sweep else _sweep(quick, log)

    # targets
    demo = default or (rows[0] if rows else None)
    met = {}
    if demo is not None:
        met["ratio"] = {"design": demo["design"], "value": demo["ratio"],
                        "met": bool(demo["ratio"] is not None and demo["ratio"] >= TARGET_RATIO)}
        met["efficiency"] = {"design": demo["design"], "value_points": demo["netgen"]["efficiency_diff_points"],
                             "met": bool(abs(demo["netgen"]["efficiency_diff_points"]) <= TARGET_EFF_POINTS)}
    warm = {r["design"]: r.get("warm", {}).get("cycles_to_tol") for r in rows}
    met["warm_cycles"] = {"values": warm,
                          "met": bool(all(v is not None and v <= TARGET_WARM_CYCLES for v in warm.values()))}
    results["targets_met"] = met
    results["wall_s"] = round(time.monotonic() - t_start, 1)

    print()
    print(_table(rows))
    print("pashape s: median wall time of netgen.periodic.steady.simulate (periodic start); cyc: its cycles; ok: its Pdc "
          f"and P1 within {TOL:.1%} of the long cold reference; naive s / cold cyc: plain .tran until Pdc and P1 "
          f"stay within {TOL:.1%}; warm cyc: the same for the netlist pashape started (run long); dEff pt: pashape "
          "efficiency - reference (points); DC-start: pashape with sim.periodic_start = false (the DC warm start "
          "with bias nulling), one run; 400cyc: error of a fixed 400-cycle naive run")
    for key, b in bias.items():
        print(f"bias network {key}: feed {b['feed_l_h']:.3g} H, block {b['block_c_f']:.3g} F: cold {b['cold_cycles']} "
              f"cycles, warm {b['warm_cycles']} cycles, pashape stopped at {b['netgen_cycles']} ({b['netgen_s']:.1f} s)")
    o = results["overhead"]
    if "error" not in o:
        print(f"per-run overhead (tiny transient, median of {o['runs']}): shared {1e3 * o['shared_median_s']:.1f} ms, "
          f"batch {1e3 * o['batch_median_s']:.1f} ms; worker start {1e3 * o['shared_first_run_s']:.0f} ms")
    print(f"targets: {json.dumps({k: v['met'] for k, v in met.items()})}; total {results['wall_s']:.0f} s")

    atomic_write_text(out_path, json.dumps(results, indent=1, default=_json_default) + "\n")
    print(f"wrote {out_path}")
    return 0


def _json_default(obj):
    import numpy as np

    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(type(obj).__name__)


if __name__ == "__main__":
    sys.exit(main())
