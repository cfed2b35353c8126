"""The ngspice executable path of the engine (``backend="batch"``).

``ngspice -n -p`` (pipe mode, no ``.spiceinit``) in a fresh private temporary folder (also its HOME), driven by commands on its
standard input; results come back through raw files read by
:mod:`netgen.simulator.rawfile`. Chunked transient runs use ``stop when time > t`` /
``resume`` with ``delete all`` between stops, as the shared-library path does.

This module does not import PySpice (only :mod:`netgen.simulator.engine` does); it is
reached through :func:`netgen.simulator.engine.run_transient` / ``run_ac`` / ``run_op``
with ``backend="batch"``. It also holds the installation check behind
``netgen.simulator.engine.find_ngspice`` / ``doctor_report``.

ngspice's standard output and error are captured together; every failure is
diagnosed from them (:func:`netgen.simulator.engine.diagnose`), including a run after
which ngspice wrote no raw file.
"""

from __future__ import annotations

import queue
import subprocess
import tempfile
import threading
import time as _time
from pathlib import Path

import numpy as np

from netgen.errors import SimulationError, SimulatorCrashError, SimulatorNotFoundError
from netgen.lifeline import death_signal_preexec

from .checks import looks_failed, short_run, simulation_failure, tran_stop
from .common import (
    EXECUTABLE_ENV,
    MAX_COMMAND_CHARS,
    SENTINEL,
    canonical_name,
    check_verdict,
    executable_path,
    next_stop,
    private_env,
    remove_stale_folders_once,
    save_spelling,
    session_folder_prefix,
)
from .rawfile import read_raw

__all__ = ["run_batch"]

class _BatchSession:
    """``ngspice -p`` in a temporary folder, driven through its standard input."""

    def __init__(self, timeout_s: float):
        exe = executable_path()
        if exe is None:
            raise SimulatorNotFoundError(
                "The ngspice executable was not found on PATH.",
                hint=f"install ngspice (Debian: apt install ngspice) or set {EXECUTABLE_ENV} to its path")
        remove_stale_folders_once()  # what an earlier process killed outright left
        self.dir = tempfile.TemporaryDirectory(prefix=session_folder_prefix("ng"))
        self.deadline = _time.monotonic() + timeout_s
        self.timeout_s = timeout_s
        self.proc = None
        try:
            # -n: no .spiceinit from the working or home folder; the working folder and HOME are a
            # fresh private (0700) folder, so nothing a colleague's files left behind is read.
            # ngspice ends with this process even when it is killed outright (the parent-death signal on
            # Linux; elsewhere ngspice quits at the end of its standard input once its command is done)
            self.proc = subprocess.Popen([exe, "-n", "-p"], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                         stderr=subprocess.STDOUT, cwd=self.dir.name, text=True,
                                         encoding="utf-8", errors="replace", env=private_env(self.dir.name),
                                         preexec_fn=death_signal_preexec())
            self.lines: queue.Queue = queue.Queue()
            self.log: list[str] = []
            threading.Thread(target=self._reader, daemon=True).start()
            self.count = 0
            self.send(["set noaskquit", "set filetype=binary"])
        except BaseException:  # interrupted while starting (Ctrl-C, SIGTERM) or ngspice failed to start
            if self.proc is not None and self.proc.poll() is None:
                self.proc.kill()
                self.proc.wait()
            self.dir.cleanup()
            raise

    def _reader(self):
        for line in self.proc.stdout:
            self.lines.put(line.rstrip("\n"))
        self.lines.put(None)

    def send(self, commands: list[str]) -> str:
        self.count += 1
        mark = f"{SENTINEL}{self.count}"
        for c in commands:
            if len(c) > MAX_COMMAND_CHARS:
                raise SimulationError(f"An ngspice command of {len(c)} characters exceeds the limit of "
                                      f"{MAX_COMMAND_CHARS}; shorten node names or save fewer vectors.")
        try:
            self.proc.stdin.write("\n".join(commands + [f"echo {mark}"]) + "\n")
            self.proc.stdin.flush()
        except (BrokenPipeError, OSError):
            raise self._crashed() from None
        out: list[str] = []
        while True:
            remaining = self.deadline - _time.monotonic()
            if remaining <= 0:
                self.close(kill=True)
                raise SimulationError(
                    f"ngspice did not finish within the time limit of {self.timeout_s:g} s; the run was stopped.",
                    log="\n".join(self.log[-200:]),
                    hint="raise sim.timeout, or lower sim.max_cycles / sim.points_per_cycle")
            try:
                line = self.lines.get(timeout=min(remaining, 0.5))
            except queue.Empty:
                continue
            if line is None:
                raise self._crashed()
            if line.strip() == mark:
                return "\n".join(out)
            out.append(line)
            self.log.append(line)

    def _crashed(self) -> SimulatorCrashError:
        code = self.proc.wait(timeout=5)
        return SimulatorCrashError(f"The ngspice executable stopped unexpectedly (exit code {code}).",
                                   log="\n".join(self.log[-200:]),
                                   hint="see ngspice's messages in the log; run 'pashape doctor'")

    def close(self, kill: bool = False):
        if self.proc.poll() is None and not kill:
            try:
                self.proc.stdin.write("quit\n")
                self.proc.stdin.flush()
                self.proc.wait(timeout=2)
            except (OSError, subprocess.TimeoutExpired, ValueError):
                pass
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()
        self.dir.cleanup()

    def load(self, netlist: str, save):
        path = Path(self.dir.name) / "circuit.cir"
        text = netlist if netlist.rstrip().lower().endswith(".end") else netlist.rstrip() + "\n.end\n"
        path.write_text(text, encoding="utf-8")
        out = self.send(["source circuit.cir"])
        if looks_failed(out):
            raise simulation_failure("netlist loading", out, "check the netlist syntax")
        if save:
            self.send(["save " + " ".join(save_spelling(n) for n in save)])

    def result(self, what: str, start: int = 0, name: str = "out.raw") -> dict:
        """Vectors of the current plot (from point ``start`` on), read back through a raw file.

        When ngspice writes no usable file, the error carries ngspice's log and its diagnosis
        (``what`` names the analysis), not only the missing file.
        """
        path = Path(self.dir.name) / name
        path.unlink(missing_ok=True)
        self.send([f"write {name}"])
        try:
            plots = read_raw(path)
        except SimulationError:
            raise simulation_failure(what, "\n".join(self.log), "ngspice wrote no result; see its messages in the log") from None
        plot = plots[-1]
        out = {}
        for raw_name in plot.names:
            arr = plot.data[raw_name][start:]
            out[canonical_name(raw_name)] = arr
        return out


def run_batch(kind: str, netlist: str, opts: dict, timeout_s: float, progress) -> dict:
    """Run one analysis (``kind`` = "tran" | "ac" | "op") with the executable; the engine's result dict."""
    sess = _BatchSession(timeout_s)
    interrupted = False
    try:
        sess.load(netlist, opts.get("save"))
        if kind == "op":
            text = sess.send(["op"])
            if looks_failed(text) and "successfully" not in text.lower():
                raise simulation_failure("operating point", "\n".join(sess.log))
            vecs = sess.result("operating point")
            return {"vectors": {k: float(np.real(v[0])) for k, v in vecs.items()}, "log": "\n".join(sess.log)}
        if kind == "ac":
            text = sess.send(["run"])
            if looks_failed(text):
                raise simulation_failure("AC analysis", "\n".join(sess.log))
            vecs = sess.result("AC analysis")
            if "frequency" not in vecs:
                raise simulation_failure("AC analysis", "\n".join(sess.log))
            vecs["frequency"] = np.real(vecs["frequency"]).astype(np.float64)
            return {"vectors": vecs, "log": "\n".join(sess.log)}
        tstop = tran_stop(netlist)
        chunk = opts.get("chunk_s")
        check = opts.get("stop_check")
        stopped = False
        if not chunk:
            text = sess.send(["run"])
            if looks_failed(text):
                raise simulation_failure("transient analysis", "\n".join(sess.log))
            vecs = sess.result("transient analysis")
            t = vecs.get("time")
            if t is None or not t.size or t[-1] < tstop * (1 - 1e-9):
                raise short_run(float(t[-1]) if t is not None and t.size else None, tstop, "\n".join(sess.log))
        else:
            t_next, started, last, action = chunk, False, 0, None
            while True:
                cmds = ["delete all"] if started else []
                cmds += list(action.commands) if action else []
                if t_next < tstop * (1 - 1e-9):
                    cmds.append(f"stop when time > {t_next:.15g}")
                cmds.append("resume" if started else "run")
                started = True
                text = sess.send(cmds)
                if looks_failed(text):
                    raise simulation_failure("transient analysis", "\n".join(sess.log))
                part = sess.result("transient analysis", start=max(last - 1, 0))
                tp = part.get("time")
                if tp is None or not tp.size:
                    raise short_run(None, tstop, "\n".join(sess.log))
                last = max(last - 1, 0) + tp.size
                t_end = float(tp[-1])
                done = t_end >= tstop * (1 - 1e-9)
                if not done and t_end < t_next * (1 - 1e-9):
                    raise short_run(t_end, tstop, "\n".join(sess.log))
                action = None
                if check is not None:
                    verdict, message, action = check_verdict(check, t_end, part)
                    if message and progress is not None:
                        progress(str(message))
                    if verdict:
                        stopped = not done
                        break
                elif progress is not None:
                    progress(f"t = {t_end:.4g} s of {tstop:.4g} s")
                if done:
                    break
                t_next = next_stop(t_next, t_end, chunk, action)
            vecs = sess.result("transient analysis")
        keep = opts.get("keep_s")
        if keep:
            t = vecs["time"]
            start = max(int(np.searchsorted(t, t[-1] - keep)) - 1, 0)
            vecs = {k: v[start:] for k, v in vecs.items()}
        return {"vectors": vecs, "log": "\n".join(sess.log), "stopped": stopped, "checker": check}
    except BaseException:
        interrupted = True  # an error, Ctrl-C or SIGTERM: end ngspice at once, do not ask it to quit
        raise
    finally:
        sess.close(kill=interrupted)  # the temporary folder goes in every case


