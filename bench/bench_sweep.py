"""Sweep throughput: points per second with 1 and with 2 local workers, side by side.

Runs the same sweep of the demo design (supply voltage over N points) twice, in
fresh stores, once with one worker process and once with two, and prints the
speed-up (target >= 1.8x on 2 cores). Writes bench/sweep.json.

    python bench/bench_sweep.py [--points 192] [--design path.toml]

192 points by default: a settled point now takes about 0.15 s, and with few
points the start-up of the worker processes (about 0.5 s each, Python and simulator) would dominate.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from importlib import resources
from pathlib import Path


def main() -> None:
    from netgen.design.schema import load_design
    from netgen.fileio import atomic_write_text
    from netgen.studies.store import STORE_NAME, SweepStore
    from netgen.studies.plan import make_plan
    from netgen.studies.execute import run_sweep

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=192)
    ap.add_argument("--design", type=Path, default=None)
    args = ap.parse_args()
    path = args.design or Path(str(resources.files("netgen.sims").joinpath("demo.toml")))
    design = load_design(path)
    vdd = design.vdd_v
    plan = make_plan(design.raw, source=design.source,
                     vary=[f"design.vdd={0.8 * vdd:.6g}V:{1.2 * vdd:.6g}V:{args.points}"])
    results = {}
    load_before = os.getloadavg()
    for workers in (1, 2):
        with tempfile.TemporaryDirectory() as tmp, SweepStore(Path(tmp) / STORE_NAME) as st:
            sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
            t0 = time.perf_counter()
            counts = run_sweep(plan, st, sid, workers=workers)
            dt = time.perf_counter() - t0
            n_ok = st.count(sid)
        results[workers] = {"workers": workers, "points": plan.n_points, "seconds": round(dt, 3),
                            "points_per_s": round(plan.n_points / dt, 4), "status": n_ok, "failed": counts["failed"]}
        print(f"{workers} worker(s): {plan.n_points} points in {dt:.2f} s = {plan.n_points / dt:.3f} points/s "
              f"({n_ok})", flush=True)
    ratio = results[2]["points_per_s"] / results[1]["points_per_s"]
    load_after = os.getloadavg()
    print(f"speed-up with 2 workers: {ratio:.2f}x (target >= 1.8x; cpus: {os.cpu_count()}; "
          f"1-min load average {load_before[0]:.1f} before, {load_after[0]:.1f} after: "
          "other processes on the machine lower the speed-up)")
    out = {"design": str(path), "cpus": os.cpu_count(), "runs": list(results.values()), "speedup": round(ratio, 3),
           "target": 1.8, "python": sys.version.split()[0],
           "loadavg_before": [round(x, 2) for x in load_before], "loadavg_after": [round(x, 2) for x in load_after]}
    atomic_write_text(Path(__file__).resolve().parent / "sweep.json", json.dumps(out, indent=2) + "\n")


if __name__ == "__main__":
    main()
