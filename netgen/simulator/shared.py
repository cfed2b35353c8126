"""The ngspice shared library (libngspice through PySpice) in a long-lived worker process.

The only module that imports PySpice (inside the worker). A simulator crash kills only the
worker, a hang is ended by killing it; both raise :class:`~netgen.errors.SimulationError` and the
next call starts a fresh worker. Reached through :mod:`netgen.simulator.engine`.
"""

from __future__ import annotations

import atexit
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time as _time
from pathlib import Path

import numpy as np

from netgen.errors import SimulationError, SimulatorCrashError, SimulatorNotFoundError

from .checks import looks_failed, short_run, simulation_failure, tran_stop
from .common import (
    LIBRARY_ENV,
    MAX_COMMAND_CHARS,
    canonical_name,
    check_verdict,
    next_stop,
    private_env,
    remove_stale_folders_once,
    save_spelling,
    session_folder_prefix,
)

__all__ = ["run_shared", "shutdown", "worker_pid"]


# ---------------------------------------------------------------- shared library (worker side)

class _SharedSession:
    """libngspice in this process (used only inside the worker process)."""

    def __init__(self):
        import logging
        import warnings

        logging.getLogger("PySpice").setLevel(logging.CRITICAL)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                from PySpice.Spice.NgSpice.Shared import NgSpiceShared, ffi
            except Exception as exc:  # pragma: no cover - depends on the installation
                raise SimulatorNotFoundError(f"PySpice cannot be imported ({exc}).",
                                             hint="install PySpice>=1.5 or use sim.backend = \"batch\"") from None
            log: list[str] = []

            class _Capture(NgSpiceShared):
                def send_char(self, message, ngspice_id):
                    log.append(message)
                    return 0

                def send_stat(self, message, ngspice_id):
                    return 0

            try:
                self.ng = _Capture.new_instance()
            except (OSError, NameError) as exc:
                raise SimulatorNotFoundError(
                    f"libngspice could not be loaded ({exc}).",
                    hint=f"install the ngspice shared library (Debian: libngspice0-dev), set {LIBRARY_ENV} "
                         "to its path, or use sim.backend = \"batch\"") from None
        self.ffi = ffi
        self.lib = self.ng._ngspice_shared
        self.log = log

    def cmd(self, text: str) -> int:
        if len(text) > MAX_COMMAND_CHARS:
            raise SimulationError(f"An ngspice command of {len(text)} characters exceeds the limit of "
                                  f"{MAX_COMMAND_CHARS}; shorten node names or save fewer vectors.")
        return int(self.lib.ngSpice_Command(text.encode("ascii")))

    def reset(self):
        self.cmd("destroy all")
        self.cmd("remcirc")
        self.log.clear()

    def load(self, netlist: str):
        lines = [ln for ln in netlist.splitlines() if ln.strip()]
        if not lines[-1].strip().lower().startswith(".end"):
            lines.append(".end")
        lines.append("")
        keep = [self.ffi.new("char[]", ln.encode("utf-8", "replace")) for ln in lines] + [self.ffi.NULL]
        arr = self.ffi.new("char *[]", keep)
        rc = self.lib.ngSpice_Circ(arr)
        text = "\n".join(self.log)
        if rc or looks_failed(text):
            raise simulation_failure("netlist loading", text, "check the netlist syntax")

    def save(self, names):
        if not names:
            return
        words = [save_spelling(n) for n in names]
        chunk: list[str] = []
        for w in words:
            if len("save " + " ".join(chunk + [w])) > MAX_COMMAND_CHARS:
                self.cmd("save " + " ".join(chunk))
                chunk = []
            chunk.append(w)
        self.cmd("save " + " ".join(chunk))

    def fetch(self, start: int = 0) -> dict:
        ffi, lib = self.ffi, self.lib
        plot = ffi.string(lib.ngSpice_CurPlot()).decode()
        allv = lib.ngSpice_AllVecs(plot.encode())
        out = {}
        i = 0
        while allv[i] != ffi.NULL:
            name = ffi.string(allv[i]).decode()
            i += 1
            info = lib.ngGet_Vec_Info(f"{plot}.{name}".encode())
            if info == ffi.NULL or info.v_length <= 0:
                continue
            n = info.v_length
            if info.v_compdata == ffi.NULL:
                arr = np.frombuffer(ffi.buffer(info.v_realdata, n * 8), dtype=np.float64)[start:].copy()
            else:
                raw = np.frombuffer(ffi.buffer(info.v_compdata, n * 16), dtype=np.float64)
                arr = (raw[0::2] + 1j * raw[1::2])[start:].astype(np.complex128)
            out[canonical_name(name)] = arr
        return out

    def run(self, kind: str, netlist: str, opts: dict, send) -> dict:
        self.reset()
        self.load(netlist)
        self.save(opts.get("save"))
        if kind == "op":
            rc = self.cmd("op")
            text = "\n".join(self.log)
            if rc or looks_failed(text) and "successfully" not in text.lower():
                raise simulation_failure("operating point", text)
            vecs = self.fetch()
            return {"vectors": {k: float(np.real(v[0])) for k, v in vecs.items()}, "log": text}
        if kind == "ac":
            rc = self.cmd("run")
            text = "\n".join(self.log)
            vecs = self.fetch()
            if rc or "frequency" not in vecs or looks_failed(text):
                raise simulation_failure("AC analysis", text)
            vecs["frequency"] = np.real(vecs["frequency"]).astype(np.float64)
            return {"vectors": vecs, "log": text}
        return self._tran(netlist, opts, send)

    def _tran(self, netlist: str, opts: dict, send) -> dict:
        tstop = tran_stop(netlist)
        chunk = opts.get("chunk_s")
        check = opts.get("stop_check")
        keep = opts.get("keep_s")
        stopped = False
        if not chunk:
            rc = self.cmd("run")
            text = "\n".join(self.log)
            t = self.fetch().get("time")
            if rc or looks_failed(text):
                raise simulation_failure("transient analysis", text)
            if t is None or not t.size or t[-1] < tstop * (1 - 1e-9):
                raise short_run(float(t[-1]) if t is not None and t.size else None, tstop, text)
        else:
            t_next = chunk
            started = False
            last = 0
            while True:
                if t_next < tstop * (1 - 1e-9):
                    self.cmd(f"stop when time > {t_next:.15g}")
                rc = self.cmd("resume" if started else "run")
                started = True
                text = "\n".join(self.log)
                part = self.fetch(start=max(last - 1, 0))
                tp = part.get("time")
                if (rc and (tp is None or not tp.size)) or looks_failed(text):
                    raise simulation_failure("transient analysis", text)
                if tp is None or not tp.size:
                    raise short_run(None, tstop, text)
                last = max(last - 1, 0) + tp.size
                t_end = float(tp[-1])
                done = t_end >= tstop * (1 - 1e-9)
                if not done and t_end < t_next * (1 - 1e-9):
                    raise short_run(t_end, tstop, text)
                action = None
                if check is not None:
                    verdict, message, action = check_verdict(check, t_end, part)
                    if message:
                        send(("progress", str(message)))
                    if verdict:
                        stopped = not done
                        break
                else:
                    send(("progress", f"t = {t_end:.4g} s of {tstop:.4g} s"))
                if done:
                    break
                self.cmd("delete all")
                for c in action.commands if action else ():
                    if self.cmd(c):
                        raise simulation_failure(f"command '{c[:60]}'", "\n".join(self.log))
                t_next = next_stop(t_next, t_end, chunk, action)
            text = "\n".join(self.log)
        full_t = self.fetch().get("time")
        start = 0
        if keep and full_t is not None:
            start = max(int(np.searchsorted(full_t, full_t[-1] - keep)) - 1, 0)
        vecs = self.fetch(start=start)
        return {"vectors": vecs, "log": text, "stopped": stopped, "checker": check}


def _worker_main(recv, send) -> None:  # pragma: no cover - runs in the worker process
    session = None
    while True:
        try:
            job = recv.recv()
        except (EOFError, OSError):
            return
        if job is None:
            return
        if job[0] == "init":
            for p in reversed(job[1]):
                if p not in sys.path:
                    sys.path.insert(0, p)
            continue
        kind, netlist, opts = job
        try:
            if session is None:
                session = _SharedSession()
            result = session.run(kind, netlist, opts, send.send)
            send.send(("ok", result))
        except SimulationError as exc:
            send.send(("err", (exc.args[0] if exc.args else "", exc.log, exc.hint,
                               isinstance(exc, SimulatorNotFoundError))))
        except BaseException as exc:  # noqa: BLE001 - PySpice raises NameError and friends
            log = "\n".join(session.log) if session else ""
            send.send(("err", (f"ngspice (shared library) failed: {type(exc).__name__}: {exc}.", log,
                               "see ngspice's messages in the log", False)))


def _worker_entry(read_fd: int, write_fd: int, parent_pid: int | None = None,
                  kernel_watch: bool = False) -> None:  # pragma: no cover - worker process
    """Entry point of the worker process (started with ``python -c``, so no main module is re-run).

    The worker ends within about a second of its parent's death (:func:`netgen.lifeline.watch_parent`;
    the kernel's parent-death signal too when the parent started it from its main thread), so a
    parent killed with SIGKILL leaves no simulator behind.
    """
    import signal
    from multiprocessing.connection import Connection

    if parent_pid is not None:
        from netgen.lifeline import watch_parent

        watch_parent(parent_pid, kernel_signal=signal.SIGKILL if kernel_watch else None)
    _worker_main(Connection(read_fd, writable=False), Connection(write_fd, readable=False))


class _Worker:
    """One warm worker process holding libngspice.

    Started as ``python -c`` with two inherited pipes (multiprocessing
    connections) rather than through ``multiprocessing``'s spawn, which would
    re-run the caller's main script in the worker.
    """

    def __init__(self):
        from multiprocessing.connection import Connection

        p2c_r, p2c_w = os.pipe()
        c2p_r, c2p_w = os.pipe()
        main_thread = threading.current_thread() is threading.main_thread()
        code = (f"from netgen.simulator.shared import _worker_entry; "
                f"_worker_entry({p2c_r}, {c2p_w}, {os.getpid()}, {main_thread})")
        # the worker (and libngspice in it) runs in a fresh private folder that is also its HOME:
        # libngspice reads .spiceinit from the working folder, else HOME (docs/reliability.md)
        remove_stale_folders_once()  # what an earlier process killed outright left
        self.dir = tempfile.mkdtemp(prefix=session_folder_prefix("ngw"))
        env = private_env(self.dir)
        pkg_parent = str(Path(__file__).resolve().parent.parent)
        env["PYTHONPATH"] = pkg_parent + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        try:
            self.proc = subprocess.Popen([sys.executable, "-c", code], pass_fds=(p2c_r, c2p_w),
                                         stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                                         stderr=subprocess.DEVNULL, env=env, close_fds=True, cwd=self.dir)
        except OSError:
            shutil.rmtree(self.dir, ignore_errors=True)
            raise
        finally:
            os.close(p2c_r)
            os.close(c2p_w)
        self.tx = Connection(p2c_w, readable=False)
        self.conn = Connection(c2p_r, writable=False)
        self.owner = os.getpid()
        # absolute paths: the worker's working folder is not ours ('' would mean its own folder)
        self.tx.send(("init", [os.path.abspath(p) if p else os.getcwd() for p in sys.path]))

    def alive(self) -> bool:
        return self.proc.poll() is None

    def kill(self):
        if self.proc.poll() is None:
            self.proc.kill()
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            pass
        for c in (self.tx, self.conn):
            try:
                c.close()
            except OSError:
                pass
        shutil.rmtree(self.dir, ignore_errors=True)

    def call(self, job, timeout_s: float, progress):
        deadline = _time.monotonic() + timeout_s
        try:
            self.tx.send(job)
        except (OSError, BrokenPipeError):
            raise self._crashed() from None
        except (AttributeError, TypeError, ValueError) as exc:  # pickling of stop_check
            raise SimulationError(f"The stop_check cannot be sent to the worker process ({exc}); "
                                  "define it at module level so that it can be pickled.") from None
        while True:
            remaining = deadline - _time.monotonic()
            if remaining <= 0:
                raise SimulationError(
                    f"ngspice did not finish within the time limit of {timeout_s:g} s; the run was stopped.",
                    hint="raise sim.timeout, or lower sim.max_cycles / sim.points_per_cycle")
            try:
                ready = self.conn.poll(min(remaining, 0.25))
            except (EOFError, OSError):
                ready = True
            if ready:
                try:
                    kind, payload = self.conn.recv()
                except (EOFError, OSError):
                    raise self._crashed() from None
                if kind == "progress":
                    if progress is not None:
                        progress(payload)
                    continue
                return kind, payload
            if not self.alive():
                raise self._crashed()

    def _crashed(self) -> SimulatorCrashError:
        try:
            code = self.proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            code = None
        return SimulatorCrashError(
            f"The ngspice worker process died during the run (exit code {code}); ngspice crashed or was killed.",
            hint="run 'pashape doctor'; try sim.backend = \"batch\" to use the ngspice executable instead")


_WORKER: _Worker | None = None
_LOCK = threading.Lock()


def shutdown() -> None:
    """Stop the worker process (it is restarted on the next shared-library run)."""
    global _WORKER
    with _LOCK:
        if _WORKER is not None and _WORKER.owner == os.getpid():
            try:
                _WORKER.tx.send(None)
            except OSError:
                pass
            _WORKER.kill()
        _WORKER = None


atexit.register(shutdown)


def worker_pid() -> int | None:
    """Process id of the current worker (None if none is running); for tests and diagnostics."""
    w = _WORKER
    return w.proc.pid if w is not None and w.owner == os.getpid() and w.alive() else None


def run_shared(kind, netlist, opts, timeout_s, progress):
    global _WORKER
    with _LOCK:
        if _WORKER is None or _WORKER.owner != os.getpid() or not _WORKER.alive():
            _WORKER = _Worker()
        worker = _WORKER
        try:
            status, payload = worker.call((kind, netlist, opts), timeout_s, progress)
        except SimulationError:
            worker.kill()  # a timed-out or crashed worker is never reused
            _WORKER = None
            raise
        except BaseException:
            worker.kill()
            _WORKER = None
            raise
    if status == "err":
        message, log, hint, not_found = payload
        cls = SimulatorNotFoundError if not_found else SimulationError
        raise cls(message, log=log, hint=hint)
    return payload


