"""Processes that end with their parent, and SIGTERM handled like Ctrl-C.

A worker process (a sweep's pool worker, the libngspice worker) must never outlive the process
that started it: a parent killed with SIGKILL cannot clean up, so each worker watches for the
death of its parent itself (:func:`watch_parent`):

* on Linux, ``prctl(PR_SET_PDEATHSIG, sig)`` (through ``ctypes``; prctl(2)) asks the kernel to
  send ``sig`` when the parent *thread* that started this process ends, so it is only used when
  that thread lives as long as its process (the caller says so);
* everywhere, a daemon thread compares ``os.getppid()`` with the parent's PID every
  ``poll_s`` seconds: a process whose parent died is re-parented (to init or a subreaper), so
  its parent PID changes.

:func:`raise_on_sigterm` makes SIGTERM (what ``timeout``, CI cancellation and cluster managers
send) raise :class:`Terminated`, a :class:`KeyboardInterrupt`, in the main thread, so that the
same ``finally`` blocks run as for Ctrl-C: stores are closed, children ended, temporary folders
removed. Library code never installs handlers itself; the command line and worker initialisers do.
"""

from __future__ import annotations

import ctypes
import os
import signal
import sys
import threading
import time
from typing import Callable

__all__ = ["Terminated", "raise_on_sigterm", "watch_parent", "death_signal_preexec", "EXIT_SIGTERM",
           "EXIT_PARENT_GONE"]

#: exit status of a process ended by SIGTERM (128 + 15, the shell convention)
EXIT_SIGTERM = 128 + signal.SIGTERM
#: exit status of a worker that ended because its parent was gone
EXIT_PARENT_GONE = 70

_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


class Terminated(KeyboardInterrupt):
    """SIGTERM arrived (raised by the handler :func:`raise_on_sigterm` installs)."""


def raise_on_sigterm(busy: Callable[[], bool] | None = None) -> None:
    """Install a SIGTERM handler (main thread only) that raises :class:`Terminated`.

    The first SIGTERM raises; later ones are ignored so that the clean-up the first one started
    is not cut short (SIGKILL still ends the process). ``busy``: for a pool worker, a function
    telling whether a task is running; when it returns False the process exits at once with
    :data:`EXIT_SIGTERM` (``SystemExit``, so ``atexit`` handlers run) instead of raising into
    the pool's own loop.
    """

    def handler(signum, frame):
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        if busy is not None and not busy():
            raise SystemExit(EXIT_SIGTERM)
        raise Terminated()

    signal.signal(signal.SIGTERM, handler)


def _set_pdeathsig(sig: int) -> bool:
    """``prctl(PR_SET_PDEATHSIG, sig)`` on Linux; False where it is not available."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return int(libc.prctl(_PR_SET_PDEATHSIG, int(sig), 0, 0, 0)) == 0
    except (OSError, AttributeError):
        return False


def watch_parent(parent_pid: int, *, kernel_signal: int | None = None, on_death: Callable[[], None] | None = None,
                 poll_s: float = 0.5, grace_s: float = 10.0) -> None:
    """End this process soon after ``parent_pid`` (its parent) ends.

    Parameters
    ----------
    parent_pid : int
        The PID of the process that started this one (passed in by it: the check fails safe when
        the parent is already gone by the time this runs).
    kernel_signal : int, optional
        Also ask the Linux kernel to send this signal at the parent's death (``PR_SET_PDEATHSIG``).
        Give it only when the parent started this process from a thread that lives as long as the
        parent (e.g. its main thread), since the kernel acts on the death of that thread.
    on_death : callable, optional
        Called by the watching thread when the parent is gone (e.g. to send this process SIGTERM
        and let the main thread clean up); the process is ended with ``os._exit`` after
        ``grace_s`` seconds regardless. Without it the process ends at once.
    poll_s : float
        Interval of the ``os.getppid()`` check, s.
    grace_s : float
        Time left to ``on_death``'s clean-up before the hard exit, s.
    """
    if kernel_signal is not None:
        _set_pdeathsig(kernel_signal)
    if os.getppid() != parent_pid:  # the parent died before the watch was set up
        os._exit(EXIT_PARENT_GONE)

    def watch():
        while os.getppid() == parent_pid:
            time.sleep(poll_s)
        if on_death is not None:
            try:
                on_death()
            except Exception:  # noqa: BLE001 - the hard exit below follows in any case
                pass
            time.sleep(grace_s)
        os._exit(EXIT_PARENT_GONE)

    threading.Thread(target=watch, name="netgen-parent-watch", daemon=True).start()


def death_signal_preexec(sig: int = signal.SIGKILL) -> Callable[[], None] | None:
    """A ``preexec_fn`` for :class:`subprocess.Popen` that gives the child the parent-death signal.

    For a child that is not Python (the ngspice executable) and so cannot watch for itself.
    Returns None (start the child without it) off Linux, or when called outside the main
    thread (the kernel sends the signal when the *thread* that started the child ends). The
    function only makes one prctl(2) call through a ``ctypes`` function looked up beforehand.
    """
    if not sys.platform.startswith("linux") or threading.current_thread() is not threading.main_thread():
        return None
    try:
        prctl = ctypes.CDLL(None, use_errno=True).prctl
    except (OSError, AttributeError):
        return None
    sig = int(sig)

    def preexec() -> None:
        prctl(_PR_SET_PDEATHSIG, sig, 0, 0, 0)

    return preexec
