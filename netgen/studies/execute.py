"""Running the points of a sweep: one point in a worker, local process pools and Dask.

Split from :mod:`netgen.studies.plan` (which owns the variation grammar, the plan,
specs and yield). Every point is independent; a point that fails is returned as
a failed row and never stops the sweep (see :func:`run_point`).
"""

from __future__ import annotations

import json
import os
import time
import traceback
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from netgen.design import COMPONENT_UNITS, design_from_dict, set_dotted
from netgen.errors import DesignError, NetgenError

from .grammar import format_value
from .plan import Evaluator, ProgressFn, SweepPlan, tolerance_key_value

__all__ = ["run_point", "run_sweep"]


# ---------------------------------------------------------------- one point (runs in a worker)

def _point_design(base_doc: dict, source: Path | None, point: dict, sizer: Callable | None = None):
    """The validated Design of one point, and the component overrides applied for tolerances."""
    doc = base_doc
    for path, value in point["set"].items():
        doc = set_dotted(doc, path, value)
    where = f"{source or 'design'} (sweep point)"
    design = design_from_dict(doc, source=source, where=where)
    applied: dict[str, str] = {}
    if point.get("scale"):
        if sizer is None:
            from netgen.synthesis import size as sizer
        sized = sizer(design)
        for name, factor in point["scale"].items():
            if "." in name:  # a design key (device.ron, design.vdd): scaled from this point's value
                value, unit = tolerance_key_value(design, name)
                text = format_value(value * factor, unit)
                applied[name] = text
                doc = set_dotted(doc, name, text)
                continue
            if name not in sized.components:
                raise DesignError(f"network.values.{name}: this point's design has no component '{name}' to vary.")
            comp = sized.components[name]
            text = format_value(comp.value * factor, COMPONENT_UNITS[comp.kind])
            applied[name] = text
            doc = set_dotted(doc, f"network.values.{name}", text)
        design = design_from_dict(doc, source=source, where=where)
    return design, applied


def run_point(
    base_doc: dict,
    source: str | None,
    idx: int,
    point: dict,
    evaluator: Evaluator | None = None,
    wave_dir: str | None = None,
    sizer: Callable | None = None,
) -> dict:
    """Evaluate one point; never raises for a point's own failure.

    ``evaluator`` (Design -> metrics) and ``sizer`` (Design -> SizedDesign)
    default to :func:`netgen.pipeline.evaluate` and :func:`netgen.synthesis.sizing.size`;
    injected ones must be module-level functions (they are pickled to workers).

    Returns
    -------
    dict
        ``idx``, ``status`` (``ok`` / ``not_settled`` / ``failed``), ``metrics``
        (dict or None), ``error`` (text or None), ``seconds``, ``applied``
        (component overrides written for tolerances).
    """
    t0 = time.perf_counter()
    applied: dict = {}
    try:
        design, applied = _point_design(base_doc, Path(source) if source else None, point, sizer)
        if wave_dir:
            from netgen.pipeline import run_design

            res = run_design(design, None, plots=False)
            metrics = res.metrics
            _write_waves(Path(wave_dir) / f"point_{idx:06d}.csv", res.waveforms)
        elif evaluator is not None:
            metrics = evaluator(design)
        else:
            from netgen.pipeline import evaluate

            metrics = evaluate(design)
        metrics = json.loads(json.dumps(metrics, default=_json_default))  # plain, picklable, storable
        status = "ok" if metrics.get("settled") else "not_settled"
        return {"idx": idx, "status": status, "metrics": metrics, "error": None,
                "seconds": time.perf_counter() - t0, "applied": applied}
    except NetgenError as exc:
        error = f"{type(exc).__name__}: {exc}"
        log = str(getattr(exc, "log", "") or "").strip()
        if log:  # the simulator's last words, enough to diagnose without re-running
            error += "\n" + "\n".join(log.splitlines()[-8:])
    except Exception as exc:  # a bug or numerical failure in one point must not stop the sweep
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" at {Path(tb[-1].filename).name}:{tb[-1].lineno}" if tb else ""
        error = f"{type(exc).__name__}: {exc}{where}"
    return {"idx": idx, "status": "failed", "metrics": None, "error": error,
            "seconds": time.perf_counter() - t0, "applied": applied}


def _json_default(obj):
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, np.bool_):
        return bool(obj)
    return str(obj)


def _write_waves(path: Path, wf) -> None:
    from netgen.fileio import atomic_write_text

    cols = {"t_s": wf.t_s}
    cols.update({f"v_{k}_v": v for k, v in wf.v.items()})
    cols.update({f"i_{k}_a": v for k, v in wf.i.items()})
    data = np.column_stack([np.asarray(c, dtype=float) for c in cols.values()])
    import io

    buf = io.StringIO()
    np.savetxt(buf, data, delimiter=",", header=",".join(cols), comments="", fmt="%.9g")
    atomic_write_text(path, buf.getvalue())


# ---------------------------------------------------------------- executors

def _pending(plan: SweepPlan, done: set[int]) -> Iterator[int]:
    return (i for i in range(plan.n_points) if i not in done)


def run_sweep(
    plan: SweepPlan,
    store,
    sweep_id: int,
    *,
    workers: int | None = None,
    cluster: str | None = None,
    evaluator: Evaluator | None = None,
    wave_dir: str | Path | None = None,
    progress: ProgressFn | None = None,
    cluster_timeout_s: float = 30.0,
) -> dict:
    """Run every point of ``plan`` not yet in ``store`` and commit each as it finishes.

    Parameters
    ----------
    plan : SweepPlan
    store : netgen.studies.store.SweepStore
    sweep_id : int
        From ``store.open_sweep``.
    workers : int, optional
        Local worker processes (default ``os.cpu_count()``); ignored with
        ``cluster``. With 1 the points run one after another in this process.
    cluster : str, optional
        Address of a Dask distributed scheduler (``tcp://host:port``); the
        workers there must have pashape installed.
    evaluator : callable(Design) -> metrics, optional
        Module-level function (it is pickled); default :func:`netgen.pipeline.evaluate`.
    wave_dir : path, optional
        Write each point's settled waveforms there as ``point_<idx>.csv``.
    progress : callable(done, total, result), optional
        Called after each finished point (``done`` counts stored points).
    cluster_timeout_s : float
        How long to try to reach the Dask scheduler, s.

    Returns
    -------
    dict
        ``ran`` (points run now), ``skipped`` (already stored), ``failed`` (of those run).
    """
    done = store.done_indices(sweep_id)
    total = plan.n_points
    todo = _pending(plan, done)
    counts = {"ran": 0, "skipped": len(done), "failed": 0}
    wd = str(wave_dir) if wave_dir else None
    if wd:
        Path(wd).mkdir(parents=True, exist_ok=True)
    src = str(plan.source) if plan.source else None

    def task(idx: int) -> tuple:
        return (plan.base_doc, src, idx, plan.point(idx), evaluator, wd, plan.sizer)

    def finish(res: dict) -> None:
        idx = res["idx"]
        inputs = plan.point(idx)
        if res.get("applied"):
            inputs["values"] = res["applied"]
        store.record(sweep_id, idx, inputs, res["status"], res["metrics"], res["error"], res["seconds"])
        counts["ran"] += 1
        counts["failed"] += res["status"] == "failed"
        if progress is not None:
            progress(counts["ran"] + counts["skipped"], total, res)

    if cluster:
        _run_dask(cluster, todo, task, finish, cluster_timeout_s)
    else:
        n = max(1, int(workers or os.cpu_count() or 1))
        if n == 1:  # in this process: no pool to start (the engine still runs ngspice in its own process)
            for idx in todo:
                finish(run_point(*task(idx)))
        else:
            _run_local(n, todo, task, finish)
    return counts


def _run_local(n_workers: int, todo: Iterator[int], task, finish) -> None:
    """Process pool with a bounded window of submitted points (memory flat with sweep size).

    A worker that dies (e.g. the simulator crashes the process) breaks the pool;
    the points then in flight are re-run one by one in a fresh single-worker pool
    so that only the point that kills its worker is recorded as failed.
    """
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    ctx = mp.get_context("spawn")  # a fresh interpreter per worker: one simulator each, no inherited state
    window = 2 * n_workers
    pool = ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx)
    inflight: dict = {}
    try:
        while True:
            while len(inflight) < window:
                idx = next(todo, None)
                if idx is None:
                    break
                inflight[pool.submit(run_point, *task(idx))] = idx
            if not inflight:
                break
            finished, _ = wait(inflight, return_when=FIRST_COMPLETED)
            broken = False
            for fut in finished:
                idx = inflight.pop(fut)
                try:
                    finish(fut.result())
                except BrokenProcessPool:
                    broken = True
                    inflight[fut] = idx  # re-examined below
            if broken:
                suspects = sorted(inflight.values())
                inflight.clear()
                pool.shutdown(wait=False, cancel_futures=True)
                for idx in suspects:
                    finish(_run_isolated(ctx, task(idx), idx))
                pool = ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx)
    except BaseException:  # interrupted (Ctrl-C) or our own error: do not wait for running points
        _terminate(pool)
        raise
    pool.shutdown(wait=True)


def _terminate(pool) -> None:
    """Stop a pool's worker processes now (the points they run are lost and will re-run on resume)."""
    procs = list(getattr(pool, "_processes", {}).values())  # no public API before Python 3.14
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        if proc.is_alive():
            proc.terminate()
    for proc in procs:
        proc.join(timeout=5)


def _run_isolated(ctx, args: tuple, idx: int) -> dict:
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    t0 = time.perf_counter()
    with ProcessPoolExecutor(max_workers=1, mp_context=ctx) as one:
        try:
            return one.submit(run_point, *args).result()
        except BrokenProcessPool:
            return {"idx": idx, "status": "failed", "metrics": None,
                    "error": "WorkerCrash: the worker process died while running this point (simulator crash or out of memory).",
                    "seconds": time.perf_counter() - t0, "applied": {}}


def _run_dask(address: str, todo: Iterator[int], task, finish, timeout_s: float = 30.0) -> None:
    """Submit points to a Dask distributed scheduler with a bounded window; record as they complete."""
    try:
        from distributed import Client, as_completed
    except ImportError:  # pragma: no cover - dask[distributed] is a dependency
        raise NetgenError("--cluster needs the 'distributed' package; pip install 'dask[distributed]'.") from None
    try:
        client = Client(address, timeout=timeout_s)
    except (OSError, TimeoutError, ValueError) as exc:
        raise NetgenError(f"--cluster {address}: cannot reach the Dask scheduler ({exc}); check the address and that it is running.") from None
    try:
        nthreads = sum(client.nthreads().values()) or 1
        window = 2 * nthreads
        ac = as_completed()
        keys: dict = {}

        def submit() -> bool:
            idx = next(todo, None)
            if idx is None:
                return False
            fut = client.submit(run_point, *task(idx), pure=False)
            keys[fut.key] = idx
            ac.add(fut)
            return True

        for _ in range(window):
            if not submit():
                break
        for fut in _completed(ac, client, keys):
            idx = keys.pop(fut.key)
            try:
                res = fut.result()
            except Exception as exc:  # KilledWorker and the like: the point is failed, the sweep goes on
                res = {"idx": idx, "status": "failed", "metrics": None,
                       "error": f"WorkerCrash: {type(exc).__name__}: {exc}", "seconds": 0.0, "applied": {}}
            fut.release()
            finish(res)
            submit()
    finally:
        client.close()


def _completed(ac, client, keys: dict, poll_s: float = 30.0, lost_after: int = 2):
    """Yield finished futures; raise NetgenError when the cluster has had no workers for a while.

    A point may legitimately run for minutes, so waiting is unbounded while workers exist;
    but a cluster whose workers have all gone would otherwise leave the sweep waiting for ever.
    """
    empty = 0
    last_check = time.monotonic()
    while keys:
        batch = ac.next_batch(block=False)
        if batch:
            yield from batch
            empty = 0
            last_check = time.monotonic()
            continue
        time.sleep(0.05)
        if time.monotonic() - last_check < poll_s:
            continue
        last_check = time.monotonic()
        workers = client.scheduler_info().get("workers", {})
        empty = 0 if workers else empty + 1
        if empty >= lost_after:
            raise NetgenError(
                f"the Dask cluster has had no workers for {poll_s * lost_after:.0f} s; "
                f"{len(keys)} point(s) are not stored; restart the workers and run the same command to resume."
            )
