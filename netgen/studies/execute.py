"""Running the points of a sweep: one point in a worker, local process pools and Dask.

Split from :mod:`netgen.studies.plan` (which owns the variation grammar, the plan,
specs and yield). Every point is independent; a point that fails is returned as
a failed row and never stops the sweep (see :func:`run_point`).

Two kinds of trouble are kept apart. A point **fails** when the design fails: the validation,
the sizing or the simulator refuses it; that verdict is final. A point is **lost** when the
machinery cuts it short: its worker process or the simulator process died (a crash, out of
memory, a kill), the Dask scheduler went away, a task was cancelled, the disk filled. A lost
point has no result; it is run again (at once where that makes sense, and on resume) until it
has been tried ``attempts`` times. A point that killed its worker process in every one of those
attempts, each time on its own, is then counted as failed: a crash that follows the point is
the design's. The same coordinator handles the three executors (in this process, a local
process pool, Dask), so they agree.
"""

from __future__ import annotations

import asyncio
import collections
import dataclasses
import errno
import json
import os
import signal
import time
import traceback
from pathlib import Path
from typing import Callable

import numpy as np

from netgen.design import COMPONENT_UNITS, design_from_dict, set_dotted
from netgen.errors import DesignError, NetgenError, OutputError, SimulatorCrashError
from netgen.periodic import blas_single_thread

from .grammar import format_value
from .plan import Evaluator, ProgressFn, SweepPlan, tolerance_key_value

__all__ = ["run_point", "run_sweep", "DEFAULT_ATTEMPTS"]

#: runs of a point lost to infrastructure faults before it is left out (docs/sweeps.md)
DEFAULT_ATTEMPTS = 3


# ---------------------------------------------------------------- one point (runs in a worker)

#: nominal (unscaled) design and sizing of the points seen last in this process, by point key:
#: the samples of a tolerance sweep share them (the sweep's base is pinned, so the nominal network
#: is the same at every sample of a grid point)
_NOMINAL: "collections.OrderedDict[str, tuple]" = collections.OrderedDict()
_NOMINAL_MAX = 16


def _nominal(doc: dict, source: Path | None, where: str, sizer: Callable | None, sized_too: bool):
    """(Design, SizedDesign or None) of a point's unscaled document, validated and sized once per
    document in this process (the key is the document's canonical JSON and the sizer)."""
    who = None if sizer is None else f"{getattr(sizer, '__module__', '')}.{getattr(sizer, '__qualname__', id(sizer))}"
    key = json.dumps([doc, str(source), who], sort_keys=True, default=str)
    hit = _NOMINAL.get(key)
    if hit is None or (sized_too and hit[1] is None):
        design = hit[0] if hit is not None else design_from_dict(doc, source=source, where=where)
        sized = None
        if sized_too:
            if sizer is None:
                from netgen.synthesis import size as sizer
            sized = sizer(design)
        hit = (design, sized)
        _NOMINAL[key] = hit
        while len(_NOMINAL) > _NOMINAL_MAX:
            _NOMINAL.popitem(last=False)
    _NOMINAL.move_to_end(key)
    return hit


def _point_design(base_doc: dict, source: Path | None, point: dict, sizer: Callable | None = None):
    """The validated Design of one point, and the component overrides applied for tolerances.

    A tolerance point scales the sized values of its grid point's nominal network. That nominal
    design is validated and sized once per process (:func:`_nominal`), not at every sample; the
    scaled values are written into ``[network.values]`` of a copy of the validated design (text
    pashape formatted for component names the sizing gave, which is all the validation of
    ``[network.values]`` checks; the sizing parses and checks the values). A point that also
    scales a design key (``device.ron``) is validated anew, with the key's range check.
    """
    doc = base_doc
    for path, value in point["set"].items():
        doc = set_dotted(doc, path, value)
    where = f"{source or 'design'} (sweep point)"
    if not point.get("scale"):
        return design_from_dict(doc, source=source, where=where), {}
    design, sized = _nominal(doc, source, where, sizer, sized_too=True)
    applied: dict[str, str] = {}
    keys_scaled = own = False
    for name, factor in point["scale"].items():
        if "." in name:  # a design key (device.ron, design.vdd): scaled from this point's value
            value, unit = tolerance_key_value(design, name)
            text = format_value(value * factor, unit)
            applied[name] = text
            doc, own = set_dotted(doc, name, text), True
            keys_scaled = True
            continue
        if name not in sized.components:
            raise DesignError(f"network.values.{name}: this point's design has no component '{name}' to vary.")
        comp = sized.components[name]
        text = format_value(comp.value * factor, COMPONENT_UNITS[comp.kind])
        applied[name] = text
        if own:  # the copy made below is this point's own: no copy per component
            doc["network"]["values"][name] = text
        else:
            doc, own = set_dotted(doc, f"network.values.{name}", text), True
    if keys_scaled:
        return design_from_dict(doc, source=source, where=where), applied
    values = {**design.network.values, **{n: t for n, t in applied.items() if "." not in n}}
    network = dataclasses.replace(design.network, values=values)
    return dataclasses.replace(design, network=network, raw=doc), applied


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
        ``idx``, ``status`` (``ok`` / ``not_settled`` / ``failed`` / ``lost``), ``metrics``
        (dict or None), ``error`` (text or None), ``seconds``, ``applied``
        (component overrides written for tolerances), ``fault`` (for ``lost``: ``crash``
        when the simulator process died, ``disk`` when the disk is full; else None).
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
        metrics = plain_json(metrics)  # plain, picklable, storable
        status = "ok" if metrics.get("settled") else "not_settled"
        return {"idx": idx, "status": status, "metrics": metrics, "error": None,
                "seconds": time.perf_counter() - t0, "applied": applied, "fault": None}
    except SimulatorCrashError as exc:  # the simulator process died: the machine or the design, tried again
        return _lost(idx, f"SimulatorCrash: {exc}", "crash", t0, applied)
    except MemoryError:
        return _lost(idx, "OutOfMemory: the worker ran out of memory on this point", "crash", t0, applied)
    except NetgenError as exc:
        if _disk_full(exc):
            return _lost(idx, f"DiskFull: {exc}", "disk", t0, applied)
        error = f"{type(exc).__name__}: {exc}"
        log = str(getattr(exc, "log", "") or "").strip()
        if log:  # the simulator's last words, enough to diagnose without re-running
            error += "\n" + "\n".join(log.splitlines()[-8:])
    except Exception as exc:  # a bug or numerical failure in one point must not stop the sweep
        if _disk_full(exc):
            return _lost(idx, f"DiskFull: {type(exc).__name__}: {exc}", "disk", t0, applied)
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" at {Path(tb[-1].filename).name}:{tb[-1].lineno}" if tb else ""
        error = f"{type(exc).__name__}: {exc}{where}"
    return _failed(idx, error, t0, applied)


def _failed(idx: int, error: str, t0: float, applied: dict) -> dict:
    return {"idx": idx, "status": "failed", "metrics": None, "error": error,
            "seconds": time.perf_counter() - t0, "applied": applied, "fault": None}


def _lost(idx: int, error: str, fault: str | None, t0: float | None = None, applied: dict | None = None) -> dict:
    return {"idx": idx, "status": "lost", "metrics": None, "error": error,
            "seconds": 0.0 if t0 is None else time.perf_counter() - t0, "applied": applied or {}, "fault": fault}


def _disk_full(exc: BaseException | None) -> bool:
    """True when ``exc`` or an exception it was raised from is "no space left" (ENOSPC, EDQUOT)."""
    seen = 0
    while exc is not None and seen < 8:
        if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
            return True
        exc = exc.__cause__ or exc.__context__
        seen += 1
    return False


_JSON_KEYS = {True: "true", False: "false", None: "null"}


def plain_json(obj):
    """What a JSON round trip (``json.loads(json.dumps(obj))``) gives, without the text in between.

    Dict keys become text as JSON writes them (``1`` -> ``"1"``, ``True`` -> ``"true"``), tuples
    lists, numpy numbers and arrays Python's, NaN and infinities stay; anything JSON cannot write
    becomes its ``str``. Several times faster than the round trip on a point's metrics.
    """
    t = type(obj)
    if t is float or t is str or t is int or t is bool or obj is None:
        return obj
    if t is dict:
        return {(k if type(k) is str else _json_key(k)): plain_json(v) for k, v in obj.items()}
    if t is list or t is tuple:
        return [plain_json(v) for v in obj]
    if isinstance(obj, dict):
        return {(k if type(k) is str else _json_key(k)): plain_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain_json(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, str):
        return str(obj)
    if isinstance(obj, np.ndarray):
        return plain_json(obj.tolist())
    return str(obj)


def _json_key(key) -> str:
    """A dict key as ``json.dumps`` writes it (numpy numbers, which json refuses, as their value)."""
    if isinstance(key, (bool, np.bool_)) or key is None:
        return _JSON_KEYS[None if key is None else bool(key)]
    if isinstance(key, (float, np.floating)):
        return float.__repr__(float(key))
    if isinstance(key, (int, np.integer)):
        return int.__repr__(int(key))
    return str(key)


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




# ---------------------------------------------------------------- the coordinator

class _Coordinator:
    """What the three executors share: which point runs next, recording, retries, counts.

    ``finish`` stores each attempt as it ends. A lost point is queued to run again while it has
    attempts left (``retry`` False when the executor itself is going away); a point lost to
    crashes in all its attempts becomes failed; a full disk stops the sweep (OutputError).
    """

    def __init__(self, plan: SweepPlan, store, sweep_id: int, attempts: int, progress, make_task):
        self.plan, self.store, self.sid = plan, store, sweep_id
        self.max_attempts = max(1, int(attempts))
        self.progress = progress
        self.task = make_task
        done = store.done_indices(sweep_id, self.max_attempts)
        self.tried = store.lost_attempts(sweep_id)  # idx -> attempts so far, for points still lost
        self.stored = len(store.done_indices(sweep_id))  # points with a result
        self.todo = (i for i in range(plan.n_points) if i not in done)
        self.again: collections.deque[int] = collections.deque()
        self.back: collections.deque[int] = collections.deque()
        self.counts = {"ran": 0, "skipped": len(done), "failed": 0, "lost": 0, "retried": 0}

    def put_back(self, idxs: list[int]) -> None:
        """Points taken but never started (the pool broke before they were sent): given out
        again first, not counted as retries."""
        self.back.extendleft(reversed(idxs))

    def next_index(self) -> int | None:
        if self.back:
            return self.back.popleft()
        if self.again:
            self.counts["retried"] += 1
            return self.again.popleft()
        return next(self.todo, None)

    def finish(self, res: dict, retry: bool = True) -> None:
        idx = res["idx"]
        inputs = self.plan.point(idx)
        if res.get("applied"):
            inputs["values"] = res["applied"]
        status, error = res["status"], res["error"]
        if status == "lost":
            n = self.tried.get(idx, 0) + 1
            if res.get("fault") == "crash" and n >= self.max_attempts:
                status = "failed"
                error = (f"{error} (the worker died in each of {n} attempts at this point alone, "
                         "so the crash is taken as the design's)")
            self.tried[idx] = n
        self.store.record(self.sid, idx, inputs, status, res["metrics"], error, res["seconds"])
        if res.get("fault") == "disk":
            raise OutputError(f"{error.split(': ', 1)[-1].splitlines()[0]} (the disk is full; the points stored so far "
                              "are kept; free some space and run the same command to resume)")
        if status == "lost":
            self.counts["lost"] += 1
            if retry and self.tried[idx] < self.max_attempts:
                self.again.append(idx)
        else:
            self.stored += 1
            self.counts["ran"] += 1
            self.counts["failed"] += status == "failed"
            self.tried.pop(idx, None)
        if self.progress is not None:
            self.progress(self.stored, self.plan.n_points, {**res, "status": status})

    def finish_all(self, results: list[dict], retry: bool = True) -> None:
        """:meth:`finish` for each result, committed to the store together (one transaction)."""
        with self.store.together():
            for res in results:
                self.finish(res, retry)

    def lost_now(self) -> int:
        """Points stored as lost at the end (no result; left for a resume or given up)."""
        return len(self.store.lost_attempts(self.sid))


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
    attempts: int = DEFAULT_ATTEMPTS,
) -> dict:
    """Run every point of ``plan`` not yet in ``store`` and store each as it finishes (in batches of
    short points; :meth:`SweepStore.together`).

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
        Called after each finished attempt (``done`` counts points with a result).
    cluster_timeout_s : float
        How long to try to reach the Dask scheduler, s.
    attempts : int
        Runs of a point lost to infrastructure faults before it is left out (stored as
        ``lost``, missing from the yield); a point lost to worker crashes in all of them is
        stored as failed. Points stored as lost with attempts left are run again.

    Returns
    -------
    dict
        ``ran`` (points given a result now), ``skipped`` (not run: already with a result, or
        lost ``attempts`` times), ``failed`` (of those run), ``lost`` (attempts lost now),
        ``retried`` (runs that were retries), ``lost_left`` (points stored as lost at the end).

    Raises
    ------
    NetgenError
        The Dask scheduler cannot be reached or was lost, or the cluster has no workers left.
    OutputError
        The store cannot be written (a full disk); what is stored stays consistent.
    """
    wd = str(wave_dir) if wave_dir else None
    if wd:
        Path(wd).mkdir(parents=True, exist_ok=True)
    src = str(plan.source) if plan.source else None

    def task(idx: int) -> tuple:
        return (plan.base_doc, src, idx, plan.point(idx), evaluator, wd, plan.sizer)

    co = _Coordinator(plan, store, sweep_id, attempts, progress, task)
    if cluster:
        _run_dask(cluster, co, cluster_timeout_s)
    else:
        n = max(1, int(workers or os.cpu_count() or 1))
        if n == 1:  # in this process: no pool to start (the engine still runs ngspice in its own process)
            with blas_single_thread():  # the estimate's small solves, limited once for all points
                _run_here(co)
        else:
            _run_local(n, co)
    return {**co.counts, "lost_left": co.lost_now()}


def _run_here(co: _Coordinator) -> None:
    """Every point in this process; finished points are stored together about every
    :data:`BATCH_TARGET_S` (each at once when a point takes longer, and a lost one at once: its
    retry is queued when it is stored), and those finished when the run is interrupted are
    stored before it ends."""
    done: list[dict] = []
    since = time.perf_counter()
    try:
        while True:
            idx = co.next_index()
            if idx is not None:
                done.append(run_point(*co.task(idx)))
            elif not done:
                break
            if (idx is None or done[-1]["status"] == "lost" or len(done) >= BATCH_MAX
                    or time.perf_counter() - since >= BATCH_TARGET_S):
                batch, done = done, []
                co.finish_all(batch)  # may queue retries, which next_index then gives
                since = time.perf_counter()
    finally:
        if done:  # points finished before an interruption (Ctrl-C, SIGTERM during the next point)
            co.finish_all(done)


# ---------------------------------------------------------------- local process pool

_TASK_RUNNING = False


def _pool_worker_init(parent_pid: int) -> None:  # pragma: no cover - runs in the pool worker
    """Set up a pool worker: SIGTERM unwinds a running point (its simulator and temporary
    folder are cleaned up) and ends the process; the parent's death sends SIGTERM."""
    from netgen.lifeline import raise_on_sigterm, watch_parent

    raise_on_sigterm(busy=lambda: _TASK_RUNNING)
    watch_parent(parent_pid, kernel_signal=signal.SIGTERM,
                 on_death=lambda: os.kill(os.getpid(), signal.SIGTERM))


def _pool_point(*args) -> dict:  # pragma: no cover - runs in the pool worker
    """:func:`run_point` in a pool worker; SIGTERM during the point ends the worker after the
    point's clean-up has run (the pool itself would otherwise carry on with the next point)."""
    global _TASK_RUNNING
    from netgen.lifeline import EXIT_SIGTERM, Terminated

    _TASK_RUNNING = True
    try:
        return run_point(*args)
    except Terminated:
        os._exit(EXIT_SIGTERM)
    finally:
        _TASK_RUNNING = False


def _pool_points(tasks: list[tuple]) -> list[dict]:  # pragma: no cover - runs in the pool worker
    """:func:`_pool_point` for each of a batch of points (one round trip to the worker for all)."""
    with blas_single_thread():
        return [_pool_point(*args) for args in tasks]


#: work a batch of points sent to a pool worker is sized for, s (short points travel in batches:
#: one round trip to the worker and back per batch instead of per point), and the largest batch
BATCH_TARGET_S = 0.2
BATCH_MAX = 16


def _batch_size(results: list[dict], current: int) -> int:
    """Points in the next batch: about :data:`BATCH_TARGET_S` of work by the seconds the last
    batch's points took (one point a batch from about 0.13 s a point, e.g. ngspice runs)."""
    secs = [r["seconds"] for r in results if r.get("seconds")]
    if not secs:
        return current
    return int(min(BATCH_MAX, max(1, round(BATCH_TARGET_S / max(sum(secs) / len(secs), 1e-6)))))


def _new_pool(n_workers: int, ctx):
    from concurrent.futures import ProcessPoolExecutor

    return ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx, initializer=_pool_worker_init,
                               initargs=(os.getpid(),))


def _run_local(n_workers: int, co: _Coordinator) -> None:
    """Process pool with a bounded window of submitted batches of points (memory flat with sweep
    size). A batch is one point at first and grows to about :data:`BATCH_TARGET_S` of work when
    points are short (the periodic estimate's few milliseconds: the round trip would otherwise
    cost as much as the point).

    A worker that dies (the simulator crashes the process, out of memory, a kill) breaks the
    pool; the points then in flight are re-run one by one in a fresh single-worker pool, so
    that a crash is pinned on the point that causes it (each such crash counts as an attempt).
    """
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, wait
    from concurrent.futures.process import BrokenProcessPool

    ctx = mp.get_context("spawn")  # a fresh interpreter per worker: one simulator each, no inherited state
    window = 2 * n_workers
    pool = _new_pool(n_workers, ctx)
    inflight: dict = {}
    batch = 1
    try:
        while True:
            broken = False
            while len(inflight) < window:
                idxs = []
                while len(idxs) < batch and (idx := co.next_index()) is not None:
                    idxs.append(idx)
                if not idxs:
                    break
                try:
                    inflight[pool.submit(_pool_points, [co.task(i) for i in idxs])] = idxs
                except BrokenProcessPool:  # a worker died since the last wait: these never ran
                    co.put_back(idxs)
                    broken = True
                    break
            if not inflight and not broken:
                break
            # a pool found broken on submit: collect what finished before it broke, the rest are suspects
            finished, _ = wait(inflight, timeout=0 if broken else None, return_when=FIRST_COMPLETED)
            for fut in finished:
                idxs = inflight.pop(fut)
                try:
                    results = fut.result()
                except BrokenProcessPool:
                    broken = True
                    inflight[fut] = idxs  # re-examined below
                    continue
                co.finish_all(results)
                batch = _batch_size(results, batch)
            if broken:
                suspects = sorted(i for idxs in inflight.values() for i in idxs)
                inflight.clear()
                _terminate(pool)
                for idx in suspects:
                    _run_alone(ctx, co, idx)
                pool = _new_pool(n_workers, ctx)
    except BaseException:  # interrupted (Ctrl-C, SIGTERM) or our own error: do not wait for running points
        _terminate(pool)
        raise
    pool.shutdown(wait=True)


def _terminate(pool) -> None:
    """Stop a pool's worker processes now (the points they run are lost and will re-run on resume).

    SIGTERM first, so that each worker ends its simulator and removes its temporary folders;
    SIGKILL for any that has not gone after a few seconds.
    """
    procs = list(getattr(pool, "_processes", {}).values())  # no public API before Python 3.14
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        if proc.is_alive():
            proc.terminate()
    for proc in procs:
        proc.join(timeout=5)
        if proc.is_alive():
            proc.kill()
            proc.join(timeout=5)


def _run_alone(ctx, co: _Coordinator, idx: int) -> None:
    """Run one suspect point in a pool of its own, again while it crashes and has attempts left."""
    from concurrent.futures.process import BrokenProcessPool

    while True:
        t0 = time.perf_counter()
        one = _new_pool(1, ctx)
        try:
            res = one.submit(_pool_point, *co.task(idx)).result()
        except BrokenProcessPool:
            res = _lost(idx, "WorkerCrash: the worker process died while running this point alone "
                             "(simulator crash, out of memory or killed)", "crash", t0)
        finally:
            _terminate(one)
        co.finish(res, retry=False)
        if res["status"] != "lost" or res.get("fault") != "crash" or idx not in co.tried:
            return
        if co.tried[idx] >= co.max_attempts:
            return


# ---------------------------------------------------------------- Dask

def _run_dask(address: str, co: _Coordinator, timeout_s: float = 30.0) -> None:
    """Submit points to a Dask distributed scheduler with a bounded window; record as they complete.

    A task that raises there (run_point itself never does) is an infrastructure fault: a
    cancelled task or a comm failure is lost and tried again; ``KilledWorker`` (Dask gave up
    after the task's workers died) is lost to a crash. When the connection to the scheduler
    drops, the points in flight are stored as lost and NetgenError names the scheduler.
    """
    try:
        from distributed import Client, as_completed
    except ImportError:  # pragma: no cover - dask[distributed] is a dependency
        raise NetgenError("--cluster needs the 'distributed' package; pip install 'dask[distributed]'.") from None
    import logging

    # Dask's own reports of a lost connection would repeat our one-line error as tracebacks; its
    # configuration gives some of its loggers levels of their own, so each is quietened
    names = ["distributed", *(n for n in logging.root.manager.loggerDict if n.startswith("distributed."))]
    levels = {n: logging.getLogger(n).level for n in names}
    for n in names:
        logging.getLogger(n).setLevel(logging.CRITICAL + 1)
    try:
        _dask_session(Client, as_completed, address, co, timeout_s)
    finally:
        for n, level in levels.items():
            logging.getLogger(n).setLevel(level)


def _dask_session(Client, as_completed, address: str, co: _Coordinator, timeout_s: float) -> None:
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
            idx = co.next_index()
            if idx is None:
                return False
            fut = client.submit(run_point, *co.task(idx), pure=False)
            keys[fut.key] = idx
            ac.add(fut)
            return True

        for _ in range(window):
            if not submit():
                break
        for fut in _completed(ac, client, keys, address, co):
            idx = keys.pop(fut.key)
            try:
                res = fut.result()
            except (Exception, asyncio.CancelledError) as exc:
                if client.status != "running":  # the futures were cancelled because the scheduler went away
                    keys[fut.key] = idx
                    _scheduler_lost(address, co, keys)
                crash = type(exc).__name__ == "KilledWorker"
                res = _lost(idx, f"{'WorkerCrash' if crash else 'TaskLost'}: {type(exc).__name__}: {exc}",
                            "crash" if crash else None)
            fut.release()
            co.finish(res)
            while len(keys) < window and submit():
                pass
    finally:
        try:
            client.close(timeout=2)
        except Exception:  # noqa: BLE001 - a client whose scheduler is gone may complain while closing
            pass


def _scheduler_lost(address: str, co: _Coordinator, keys: dict):
    """Store the points in flight as lost and raise the error that names the lost scheduler."""
    for idx in sorted(keys.values()):
        co.finish(_lost(idx, f"SchedulerLost: the connection to the Dask scheduler at {address} was lost "
                             "while this point ran", None), retry=False)
    n = len(keys)
    keys.clear()
    raise NetgenError(
        f"--cluster {address}: the connection to the Dask scheduler was lost (it stopped or the network "
        f"failed); {n} point(s) in flight are stored as lost and the finished ones are kept; restart the "
        "scheduler and its workers, then run the same command to resume.")


def _completed(ac, client, keys: dict, address: str, co: _Coordinator, poll_s: float = 30.0, lost_after: int = 2):
    """Yield finished futures; raise NetgenError when the scheduler is lost or has had no workers for a while.

    A point may legitimately run for minutes, so waiting is unbounded while the scheduler is
    connected and has workers; the connection is checked every 0.05 s (the client notices a
    closed connection at once), the workers every ``poll_s``.
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
        if client.status != "running":
            _scheduler_lost(address, co, keys)
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
