"""Long studies survive faults of the machinery (netgen.studies.execute, netgen.studies.store, netgen.lifeline).

A point fails only when the design fails; a killed or crashed worker, a lost Dask scheduler or a
full disk leaves it ``lost`` and it runs again (docs/sweeps.md, "Faults of the machinery").
SIGTERM is handled like Ctrl-C and nothing outlives a killed sweep. Every process these tests
start runs on this machine (Dask on 127.0.0.1 only) and is ended by its PID; every wait is
bounded in count. The evaluators are closed-form (test_sweep.tuned_b_eval) where the pipeline
is not the subject; module-level, so worker processes can import them.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from netgen.studies.execute import run_sweep
from netgen.studies.grammar import parse_spec
from netgen.studies.plan import make_plan, summarize
from netgen.studies.store import STORE_NAME, SweepStore
from test_sweep import BASE, TESTS, _cli, _design_file, _run, slow_eval, tuned_b_eval  # noqa: F401 (slow_eval: named by --evaluator)

def _first_time(design, what: str) -> bool:
    """True the first time this point (by Vdd) gets here, across processes (a marker file in
    $NETGEN_TEST_MARKS), so an evaluator can fail like the machinery does: once."""
    marks = Path(os.environ["NETGEN_TEST_MARKS"])
    mark = marks / f"{what}_{design.vdd_v:g}"
    try:
        mark.touch(exist_ok=False)
    except FileExistsError:
        return False
    return True


def crash_once_eval(design) -> dict:
    """Kills its worker process the first time at Vdd = 11 V and 13 V (a kill or the OOM killer)."""
    if design.vdd_v in (11.0, 13.0) and _first_time(design, "crash"):
        os._exit(9)
    return tuned_b_eval(design)


def simulator_dies_once_eval(design) -> dict:
    """The simulator process dies once at Vdd = 11 V (what shared.py reports when libngspice's worker dies)."""
    from netgen.errors import SimulatorCrashError

    if design.vdd_v == 11.0 and _first_time(design, "sim"):
        raise SimulatorCrashError("The ngspice worker process died during the run (exit code -9).")
    return tuned_b_eval(design)


def simulator_always_dies_eval(design) -> dict:
    from netgen.errors import SimulatorCrashError

    if design.vdd_v == 11.0:
        raise SimulatorCrashError("The ngspice worker process died during the run (exit code -11).")
    return tuned_b_eval(design)


def crash_late_eval(design) -> dict:
    """Kills its worker process at Vdd = 12 V a moment after starting it (other points are done by then)."""
    if design.vdd_v == 12.0:
        time.sleep(0.5)
        os._exit(3)
    return tuned_b_eval(design)


def interrupted_at_13v_eval(design) -> dict:
    """Ctrl-C arrives while the point at Vdd = 13 V runs (in this process: workers=1)."""
    if design.vdd_v == 13.0:
        raise KeyboardInterrupt
    return tuned_b_eval(design)


#: an RC driven by a fast pulse for a long time: ngspice runs for minutes unless stopped
LONG_RUN = ("* long run\nV1 in 0 PULSE(0 1 0 1n 1n 4n 10n)\nR1 in out 1k\nC1 out 0 1p\n"
            ".tran 0.5n 50m\n.end\n")


def long_batch_eval(design) -> dict:
    """Runs the ngspice executable (backend "batch") on LONG_RUN: a point that is killed mid-run."""
    from netgen.simulator import run_transient

    run_transient(LONG_RUN, backend="batch", save=["out"], timeout_s=120.0)
    return tuned_b_eval(design)


def long_shared_eval(design) -> dict:
    """Runs libngspice in its worker process (backend "shared") on LONG_RUN."""
    from netgen.simulator import run_transient

    run_transient(LONG_RUN, backend="shared", save=["out"], timeout_s=120.0)
    return tuned_b_eval(design)


def small_disk_main() -> None:  # pragma: no cover - run as a separate process by a test
    """pashape's command line with a sweep store that may grow by $NETGEN_TEST_PAGES pages only:
    SQLite then fails with SQLITE_FULL, exactly as on a full disk (PRAGMA max_page_count,
    sqlite.org/pragma.html)."""
    from netgen.cli import main
    from netgen.studies import store

    opened = store.SweepStore.__init__

    def limited(self, path):
        opened(self, path)
        pages = self.con.execute("PRAGMA page_count").fetchone()[0]
        self.con.execute(f"PRAGMA max_page_count = {pages + int(os.environ['NETGEN_TEST_PAGES'])}")

    store.SweepStore.__init__ = limited
    main()


def test_a_worker_killed_once_costs_no_point(tmp_path, monkeypatch):
    # a worker process killed from outside is the machine's fault: the points re-run, none is failed
    monkeypatch.setenv("NETGEN_TEST_MARKS", str(tmp_path))
    plan, counts, rows = _run(tmp_path, crash_once_eval, vary=["design.vdd=10V,11V,12V,13V,14V"])
    assert [r["status"] for r in rows] == ["ok"] * 5
    assert (tmp_path / "crash_11").exists() and (tmp_path / "crash_13").exists()  # the crashes did happen
    assert counts["failed"] == 0 and counts["lost_left"] == 0


@pytest.mark.parametrize("workers", [1, 2])
def test_a_simulator_that_dies_once_is_tried_again(tmp_path, monkeypatch, workers):
    monkeypatch.setenv("NETGEN_TEST_MARKS", str(tmp_path))
    plan, counts, rows = _run(tmp_path, simulator_dies_once_eval, workers=workers, vary=["design.vdd=10V,11V,12V"])
    assert [r["status"] for r in rows] == ["ok"] * 3
    assert [r["attempts"] for r in rows] == [1, 2, 1]
    assert (counts["lost"], counts["retried"], counts["failed"]) == (1, 1, 0)


def test_a_simulator_that_dies_every_time_fails_the_point(tmp_path):
    plan, counts, rows = _run(tmp_path, simulator_always_dies_eval, workers=1, vary=["design.vdd=10V,11V"])
    assert [r["status"] for r in rows] == ["ok", "failed"]
    assert rows[1]["attempts"] == 3
    assert rows[1]["error"].startswith("SimulatorCrash: The ngspice worker process died")
    assert "in each of 3 attempts at this point alone, so the crash is taken as the design's" in rows[1]["error"]


def test_lost_points_run_again_on_resume_up_to_the_attempts(tmp_path):
    plan = make_plan(BASE, vary=["design.vdd=10V:13V:4"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        st.record(sid, 1, plan.point(1), "lost", None, "SchedulerLost: x", 0.0)
        st.record(sid, 2, plan.point(2), "lost", None, "TaskLost: y", 0.0)
        st.record(sid, 2, plan.point(2), "lost", None, "TaskLost: y", 0.0)  # 2 attempts
        counts = run_sweep(plan, st, sid, workers=1, evaluator=tuned_b_eval, attempts=2)
        rows = list(st.rows(sid))
        assert [r["status"] for r in rows] == ["ok", "ok", "lost", "ok"]
        assert counts["ran"] == 3 and counts["lost_left"] == 1
        s = summarize(rows, [parse_spec("drain_efficiency>=0.7")], plan.n_points)
        # the lost point is missing, not failing: the yield is over the 3 points with a result
        assert (s["results"], s["missing"], s["lost"], s["passed"], s["yield"]) == (3, 1, 1, 3, 1.0)
        counts = run_sweep(plan, st, sid, workers=1, evaluator=tuned_b_eval, attempts=3)  # a higher limit
        rows = list(st.rows(sid))
    assert [r["status"] for r in rows] == ["ok"] * 4 and rows[2]["attempts"] == 3
    assert counts["ran"] == 1


def _family(pid: int) -> list:
    """The process ``pid`` and all its descendants now (psutil, a dependency of distributed)."""
    import psutil

    proc = psutil.Process(pid)
    return [proc, *proc.children(recursive=True)]


def _alive(procs) -> list:
    import psutil

    out = []
    for p in procs:
        try:
            if p.is_running() and p.status() != psutil.STATUS_ZOMBIE:  # is_running also checks the start time
                out.append(p)
        except psutil.NoSuchProcess:
            pass
    return out


def _wait_gone(procs, tries: int = 600) -> list:
    """Wait (at most ``tries`` x 0.05 s) for the processes to end; the ones still alive."""
    for _ in range(tries):
        left = _alive(procs)
        if not left:
            return []
        time.sleep(0.05)
    return left


def _end(procs) -> None:
    """Kill by PID whatever a failed test would otherwise leave running."""
    for p in _alive(procs):
        try:
            p.kill()
        except Exception:
            pass


def _wait_rows(db: Path, proc, at_least: int, tries: int = 2400) -> int:
    """Wait (bounded) until the store holds ``at_least`` rows while ``proc`` runs; the row count."""
    n = 0
    for _ in range(tries):
        if proc.poll() is not None:
            break
        if db.exists():
            try:
                with sqlite3.connect(db) as con:
                    n = con.execute("SELECT COUNT(*) FROM points").fetchone()[0]
            except sqlite3.OperationalError:
                n = 0
            if n >= at_least:
                break
        time.sleep(0.05)
    return n


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_signal_to_the_sweep_alone_leaves_nothing_behind_and_resumes(tmp_path, sig):
    # SIGTERM is what timeout(1), CI cancellation and cluster managers send; SIGKILL cannot be caught.
    # Only the sweep's own process gets the signal (by PID): its pool workers must end by themselves.
    design = _design_file(tmp_path)
    out, tmp = tmp_path / "out", tmp_path / "tmp"
    tmp.mkdir()
    args = [str(design), "--vary", "design.vdd=10V:20V:8", "--vary", "design.ropt=90ohm,110ohm",
            "-o", str(out), "--workers", "2", "--quiet", "--no-plots", "--evaluator", "test_sweep_faults:slow_eval"]
    proc = _cli(args, env_extra={"TMPDIR": str(tmp)})
    family = []
    try:
        _wait_rows(out / STORE_NAME, proc, 3)
        assert proc.poll() is None, "the sweep ended before it could be interrupted"
        family = _family(proc.pid)
        assert len(family) >= 3  # the sweep and its two pool workers at least
        os.kill(proc.pid, sig)
        _, stderr = proc.communicate()
        assert _wait_gone(family) == []  # no pool worker, resource tracker or simulator left
    finally:
        _end(family)
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    if sig == signal.SIGTERM:  # handled like Ctrl-C (exit 128 + 15, the shell convention)
        assert proc.returncode == 143, stderr
        assert stderr.strip().splitlines()[-1] == "Terminated."
        assert "points have a result in" in stderr and "run the same command to resume" in stderr
    else:
        assert proc.returncode == -signal.SIGKILL
    assert list(tmp.iterdir()) == []  # no temporary folder left
    with sqlite3.connect(out / STORE_NAME) as con:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        partial = con.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    assert 3 <= partial < 16
    proc = _cli(args)
    stdout, stderr = proc.communicate()
    assert proc.returncode == 0, stderr
    with sqlite3.connect(out / STORE_NAME) as con:
        assert con.execute("SELECT COUNT(*), COUNT(DISTINCT idx) FROM points").fetchone() == (16, 16)
        assert con.execute("SELECT COUNT(*) FROM points WHERE status != 'ok'").fetchone()[0] == 0


def test_a_full_disk_stops_the_sweep_in_one_line_and_resume_works(tmp_path):
    design = _design_file(tmp_path)
    out = tmp_path / "out"
    args = [str(design), "--vary", "design.vdd=10V:20V:60", "-o", str(out), "--workers", "1", "--quiet",
            "--no-plots", "--evaluator", "test_sweep_faults:tuned_b_eval"]
    env = dict(os.environ, PYTHONPATH=str(TESTS) + os.pathsep + os.environ.get("PYTHONPATH", ""), NETGEN_TEST_PAGES="3")
    proc = subprocess.run([sys.executable, "-c", "import test_sweep_faults; test_sweep_faults.small_disk_main()", "sweep", *args],
                          env=env, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr
    (line,) = proc.stderr.strip().splitlines()  # one line, no traceback
    assert line.startswith(f"Error: {out / STORE_NAME}: the disk is full; the ") and "point(s) stored so far are kept" in line
    assert line.endswith("free some space and run the same command to resume.")
    assert not (out / "sweep.csv").exists()  # nothing half-written after the store failed
    with sqlite3.connect(out / STORE_NAME) as con:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        partial = con.execute("SELECT COUNT(*) FROM points").fetchone()[0]
    assert 0 < partial < 60
    done = _cli(args)  # space freed (no limit): the same command resumes
    stdout, stderr = done.communicate(timeout=300)
    assert done.returncode == 0, stderr
    assert f"60 points: 60 ok, 0 not settled, 0 failed ({partial} already stored, {60 - partial} run now)." in stdout


@pytest.mark.ngspice
@pytest.mark.parametrize("evaluator, workers, sig", [
    ("long_batch_eval", 1, signal.SIGTERM),   # the executable run by the sweep's own process
    ("long_batch_eval", 2, signal.SIGTERM),   # by pool workers, which the sweep ends
    ("long_batch_eval", 2, signal.SIGKILL),   # by pool workers that notice their parent is gone
    ("long_shared_eval", 1, signal.SIGKILL),  # libngspice's worker, which notices its parent is gone
    ("long_batch_eval", 1, signal.SIGKILL),   # the executable run by the sweep's own process, killed outright
])
def test_a_killed_sweep_leaves_no_simulator_and_no_temporary_folder(tmp_path, evaluator, workers, sig):
    design = _design_file(tmp_path)
    tmp = tmp_path / "tmp"
    tmp.mkdir()
    args = [str(design), "--vary", "design.vdd=10V,11V", "-o", str(tmp_path / "out"), "--workers", str(workers),
            "--quiet", "--no-plots", "--evaluator", f"test_sweep_faults:{evaluator}"]
    proc = _cli(args, env_extra={"TMPDIR": str(tmp)})
    family = []
    try:
        simulators = []
        for _ in range(1200):  # bounded wait until every worker runs its simulator
            if proc.poll() is not None:
                break
            family = _family(proc.pid)
            simulators = [p for p in family if p.name().startswith("ngspice") or "_worker_entry" in " ".join(p.cmdline())]
            if len(simulators) >= workers and (evaluator != "long_batch_eval" or len(list(tmp.iterdir())) >= workers):
                break
            time.sleep(0.05)
        assert proc.poll() is None and len(simulators) >= workers, proc.communicate()[1]
        time.sleep(0.5)  # well into the run
        family = _family(proc.pid)
        os.kill(proc.pid, sig)
        _, stderr = proc.communicate(timeout=120)
        assert _wait_gone(family) == []
    finally:
        _end(family)
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == (143 if sig == signal.SIGTERM else -signal.SIGKILL), stderr
    if workers > 1 or sig == signal.SIGTERM:
        assert list(tmp.iterdir()) == []
    else:  # a process killed outright cannot remove its own folder: the next simulator session does,
        # once the folder has been left alone for STALE_AGE_S (aged here instead of waiting)
        from netgen.simulator.common import STALE_AGE_S

        (left,) = list(tmp.iterdir())  # pashape-ng- (the executable's) or pashape-ngw- (libngspice's worker)
        assert left.name.startswith((f"pashape-ng-{proc.pid}-", f"pashape-ngw-{proc.pid}-")), left.name
        old = time.time() - STALE_AGE_S - 60
        os.utime(left, (old, old))
        code = ("from netgen.simulator import run_transient\n"
                "run_transient('* rc\\nV1 in 0 DC 1\\nR1 in out 1k\\nC1 out 0 1p\\n.tran 1n 10n\\n.end\\n', "
                "backend='batch', save=['out'], timeout_s=60.0)\n")
        done = subprocess.run([sys.executable, "-c", code], env=dict(os.environ, TMPDIR=str(tmp)),
                              capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, done.stderr
        assert list(tmp.iterdir()) == []


def _dask_process(kind: str, *args, env_extra=None):
    """``dask scheduler`` / ``dask worker`` as a process of this test, on 127.0.0.1 only."""
    env = dict(os.environ, PYTHONPATH=str(TESTS) + os.pathsep + os.environ.get("PYTHONPATH", ""), **(env_extra or {}))
    return subprocess.Popen([sys.executable, "-m", f"distributed.cli.dask_{kind}", *args], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _start_dask(tmp_path: Path, name: str, procs: list) -> str:
    """A scheduler and two single-thread workers (no nanny, so each is one process); its address."""
    info = tmp_path / f"{name}.json"
    procs.append(_dask_process("scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                               "--scheduler-file", str(info)))
    for _ in range(600):  # bounded wait for the scheduler file
        if info.exists() and info.stat().st_size:
            try:
                address = json.loads(info.read_text())["address"]
                break
            except (ValueError, KeyError):
                pass
        time.sleep(0.05)
    else:
        raise AssertionError("the Dask scheduler did not start")
    assert address.startswith("tcp://127.0.0.1:")
    for i in range(2):
        procs.append(_dask_process("worker", address, "--host", "127.0.0.1", "--nthreads", "1", "--no-nanny",
                                   "--no-dashboard", "--death-timeout", "5", "--name", f"{name}-w{i}"))
    distributed = pytest.importorskip("distributed")
    with distributed.Client(address, timeout=30) as client:
        client.wait_for_workers(2, timeout=60)
    return address


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_a_lost_scheduler_is_named_and_its_points_run_on_resume(tmp_path, sig):
    pytest.importorskip("distributed")
    design = _design_file(tmp_path)
    out, tmp = tmp_path / "out", tmp_path / "tmp"
    tmp.mkdir()
    procs: list = []
    family: list = []
    try:
        address = _start_dask(tmp_path, "first", procs)
        args = [str(design), "--vary", "design.vdd=10V:20V:10",
                "-o", str(out), "--quiet", "--no-plots", "--evaluator", "test_sweep_faults:slow_eval"]
        sweep = _cli([*args, "--cluster", address], env_extra={"TMPDIR": str(tmp)})
        _wait_rows(out / STORE_NAME, sweep, 3)
        assert sweep.poll() is None, "the sweep ended before the scheduler could be stopped"
        family = _family(sweep.pid)
        os.kill(procs[0].pid, sig)  # the scheduler, by PID
        _, stderr = sweep.communicate(timeout=120)
        # named as such, with what to do, in one line
        assert sweep.returncode == 2, stderr
        lines = stderr.strip().splitlines()
        assert len(lines) == 1, stderr
        last = lines[0]
        assert last.startswith(f"Error: --cluster {address}: the connection to the Dask scheduler was lost")
        assert last.endswith("restart the scheduler and its workers, then run the same command to resume.")
        for p in procs:  # the test ends the rest of the first cluster by PID
            p.terminate()
        for p in procs:  # a worker whose scheduler is gone can spend a minute closing: then SIGKILL
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(timeout=30)
        with sqlite3.connect(out / STORE_NAME) as con:
            statuses = dict(con.execute("SELECT status, COUNT(*) FROM points GROUP BY status").fetchall())
        assert "failed" not in statuses and statuses.get("lost", 0) >= 1  # in flight: lost, not failed
        address = _start_dask(tmp_path, "second", procs)
        again = _cli([*args, "--cluster", address], env_extra={"TMPDIR": str(tmp)})
        stdout, stderr = again.communicate(timeout=600)
        assert again.returncode == 0, stderr
        with sqlite3.connect(out / STORE_NAME) as con:
            assert con.execute("SELECT COUNT(*), COUNT(DISTINCT idx) FROM points").fetchone() == (10, 10)
            assert con.execute("SELECT COUNT(*) FROM points WHERE status != 'ok'").fetchone()[0] == 0
            # the points cut short by the lost scheduler ran again (a second attempt)
            assert con.execute("SELECT COUNT(*) FROM points WHERE attempts = 2").fetchone()[0] == statuses["lost"]
        assert "10 points: 10 ok, 0 not settled, 0 failed" in stdout
    finally:
        for p in procs:
            if p.poll() is None:
                p.terminate()
        for p in procs:
            try:
                p.wait(timeout=30)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
        _end(family)
    import psutil

    assert _wait_gone([*family, *(psutil.Process(p.pid) for p in procs if p.poll() is None)]) == []
    assert all(p.poll() is not None for p in procs)
    assert list(tmp.iterdir()) == []




def test_ctrl_c_in_one_process_keeps_the_points_finished_before_it(tmp_path):
    # in one process short points are stored together about every fifth of a second; an
    # interruption stores those finished before it (they are not lost with the batch), the
    # running one has no row, and a resume runs only what is missing
    with pytest.raises(KeyboardInterrupt):
        _run(tmp_path, interrupted_at_13v_eval, workers=1, vary=["design.vdd=10V:15V:6"])
    plan = make_plan(BASE, vary=["design.vdd=10V:15V:6"])
    with SweepStore(tmp_path / STORE_NAME) as st:
        sid = st.open_sweep(plan.design_digest(), "", plan.spec(), plan.n_points)
        assert sorted(st.done_indices(sid)) == [0, 1, 2]
    plan, counts, rows = _run(tmp_path, tuned_b_eval, workers=1, vary=["design.vdd=10V:15V:6"])
    assert counts["ran"] == 3 and counts["skipped"] == 3
    assert [r["status"] for r in rows] == ["ok"] * 6


def test_a_pool_found_broken_when_submitting_is_handled_like_one_found_broken_when_waiting(tmp_path, monkeypatch):
    # a worker can die between the coordinator's wait and its next submit; the pool then refuses
    # the submit (concurrent.futures: BrokenProcessPool from submit, docs.python.org). Here the
    # first pool's later submits wait until the crash has broken it, so that is what happens: the
    # points not sent run afterwards, the crash is pinned on its point alone, nothing else fails
    from concurrent.futures.process import BrokenProcessPool

    from netgen.studies import execute

    made, refused = [], []
    real_new_pool = execute._new_pool

    class SubmitAfterBreak:
        def __init__(self, pool):
            self.pool, self.calls = pool, 0

        def submit(self, *args):
            self.calls += 1
            if self.calls > 4:  # after the first window: wait (bounded) until the crash broke the pool
                for _ in range(200):
                    if self.pool._broken:
                        break
                    time.sleep(0.05)
            try:
                return self.pool.submit(*args)
            except BrokenProcessPool:
                refused.append(self.calls)
                raise

        def __getattr__(self, name):
            return getattr(self.pool, name)

    def new_pool(n, ctx):
        pool = real_new_pool(n, ctx)
        made.append(pool)
        return SubmitAfterBreak(pool) if len(made) == 1 else pool

    monkeypatch.setattr(execute, "_new_pool", new_pool)
    plan, counts, rows = _run(tmp_path, crash_late_eval, vary=["design.vdd=10V,11V,12V,13V,14V,15V"])
    assert refused, "the first pool was never found broken on submit: the case was not exercised"
    assert [r["status"] for r in rows] == ["ok", "ok", "failed", "ok", "ok", "ok"]
    assert rows[2]["error"].startswith("WorkerCrash")
    assert counts["ran"] == 6 and counts["failed"] == 1


def test_stale_simulator_folders_are_removed_only_when_their_process_is_gone_and_they_are_old(tmp_path):
    # the rule of netgen.simulator.common.remove_stale_folders: a pashape-ng-<pid>- folder goes when
    # no process <pid> exists (kill(pid, 0) fails with ESRCH, POSIX), it is this user's real folder,
    # and it has not changed for STALE_AGE_S; anything else stays
    from netgen.simulator.common import STALE_AGE_S, remove_stale_folders

    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()  # its pid no longer exists
    now = time.time()
    old = now - STALE_AGE_S - 1
    made = {}
    for key, name in [("dead_old", f"pashape-ng-{gone.pid}-a"), ("dead_new", f"pashape-ng-{gone.pid}-b"),
                      ("own", f"pashape-ng-{os.getpid()}-c"), ("alive", f"pashape-ng-{os.getppid()}-d"),
                      ("other", "pashape-other-1-e")]:
        made[key] = tmp_path / name
        made[key].mkdir()
        (made[key] / "run.raw").write_text("x")
        if key != "dead_new":
            os.utime(made[key], (old, old))
    target = tmp_path / "elsewhere"
    target.mkdir()
    (target / "keep.txt").write_text("keep")
    link = tmp_path / f"pashape-ng-{gone.pid}-link"
    link.symlink_to(target, target_is_directory=True)
    os.utime(link, (old, old), follow_symlinks=False)
    assert remove_stale_folders(str(tmp_path), now=now) == [made["dead_old"].name]
    assert not made["dead_old"].exists()
    assert all(made[k].is_dir() for k in ("dead_new", "own", "alive", "other"))
    assert link.is_symlink() and (target / "keep.txt").read_text() == "keep"
