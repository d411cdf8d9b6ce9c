"""Local worker processes that die with their parent and never print tracebacks on Ctrl-C.

Twists of a run and points of a sweep run in processes started with the
"spawn" method.  Three rules hold for every such worker:

* It ignores SIGINT: Ctrl-C in a terminal reaches the whole process group,
  and only the parent decides what happens (it stops the workers and says
  so in one line).  The parent's main thread blocks SIGINT while it starts
  the workers, so they inherit the blocked signal through ``exec`` and are
  quiet until their initializer ignores it.  In that window the parent's
  handler only records a Ctrl-C (pending for the main thread, or taken by
  another thread such as a progress bar's) and raises KeyboardInterrupt once
  the workers have started.  (Ignoring SIGINT in that window, as an earlier
  version did, lost the Ctrl-C whenever another thread took it: 2 of 8
  interrupts at 0.5 s into a run; letting it interrupt the start left a
  half-started worker printing a traceback.)
* It dies with its parent: on Linux through ``prctl(PR_SET_PDEATHSIG,
  SIGKILL)``; everywhere through a watchdog thread that ends the process
  when its parent process id changes (the parent died and the worker was
  re-parented).
* When the parent stops early (an error, Ctrl-C, SIGTERM) it terminates the
  workers instead of waiting for them to finish their task.

Nothing here knows about physics; :func:`map_in_processes` runs a function
over argument tuples and reports progress through a queue.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from contextlib import contextmanager
from typing import Callable

from .errors import NrgError

__all__ = ["Terminated", "WorkerDied", "can_spawn", "process_pool", "terminate_pool", "map_in_processes", "report",
           "install_termination_handler"]

#: Seconds between two checks of the watchdog thread.
WATCHDOG_PERIOD = 0.5

_QUEUE = None


class Terminated(KeyboardInterrupt):
    """SIGTERM (or SIGHUP) arrived: handled like Ctrl-C, but the exit code is 128 + the signal number."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


class WorkerDied(NrgError):
    """A worker process ended without finishing its task (killed, or out of memory)."""


def _raise_terminated(signum, frame):
    raise Terminated(signum)


def install_termination_handler() -> None:
    """In the main thread: turn SIGTERM and SIGHUP into :class:`Terminated` (so cleanup code runs)."""
    if threading.current_thread() is not threading.main_thread():
        return
    for sig in (signal.SIGTERM, getattr(signal, "SIGHUP", None)):
        if sig is not None:
            signal.signal(sig, _raise_terminated)


def _set_parent_death_signal() -> None:
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes
        libc = ctypes.CDLL(None, use_errno=True)
        PR_SET_PDEATHSIG = 1
        libc.prctl(PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):
        pass


def _watchdog(parent_pid: int) -> None:
    while True:
        if os.getppid() != parent_pid:
            os._exit(1)
        time.sleep(WATCHDOG_PERIOD)


def _init_worker(parent_pid: int, queue) -> None:
    """Initializer of every worker process (see the module docstring)."""
    global _QUEUE
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "pthread_sigmask"):        # inherited blocked from the parent's start-up window;
        signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})   # a pending Ctrl-C is dropped (ignored)
    # (the watchdog thread started below inherits this unblocked mask, but SIGINT stays ignored here)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    _set_parent_death_signal()
    if os.getppid() != parent_pid:          # the parent died before the death signal was set
        os._exit(1)
    threading.Thread(target=_watchdog, args=(parent_pid,), name="nrgsolve-watchdog", daemon=True).start()
    _QUEUE = queue


def report(n: int = 1) -> None:
    """In a worker: report ``n`` units of progress to the parent (no-op without a progress queue)."""
    if _QUEUE is not None:
        _QUEUE.put(n)


def reporter() -> Callable[[int], None] | None:
    """In a worker: a progress callback (one unit per call), or None when nobody listens."""
    return (lambda *_: report(1)) if _QUEUE is not None else None


@contextmanager
def _sigint_held_while_spawning():
    """Start workers without losing a Ctrl-C and without being interrupted half-way.

    The main thread blocks SIGINT, so that workers started now inherit it blocked; and SIGINT's handler
    only records the signal (another thread may take it while the main thread blocks it).  Afterwards a
    recorded Ctrl-C goes to the former handler: KeyboardInterrupt in the main thread, between starts.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    old = signal.signal(signal.SIGINT, lambda signum, frame: caught.append(signum))
    mask = hasattr(signal, "pthread_sigmask")
    if mask:
        signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        if mask:
            signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})   # a pending Ctrl-C is recorded here
        signal.signal(signal.SIGINT, old)
        if caught:
            if callable(old):
                old(signal.SIGINT, None)
            elif old == signal.SIG_DFL:
                signal.raise_signal(signal.SIGINT)


def terminate_pool(pool) -> None:
    """Stop a ProcessPoolExecutor now: terminate its processes, cancel what is queued."""
    procs = list((getattr(pool, "_processes", None) or {}).values())
    for p in procs:
        try:
            p.terminate()
        except (OSError, ValueError, AttributeError):
            pass
    pool.shutdown(wait=False, cancel_futures=True)
    for p in procs:
        try:
            p.join(timeout=5)
            if p.is_alive():
                p.kill()
                p.join(timeout=5)
        except (OSError, ValueError, AttributeError, AssertionError):
            pass


@contextmanager
def process_pool(workers: int, queue=None):
    """A spawn-context ProcessPoolExecutor whose workers obey the module's rules.

    On leaving normally it waits for the workers; on any exception (including
    KeyboardInterrupt and :class:`Terminated`) it terminates them first.
    """
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    ctx = mp.get_context("spawn")
    pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                               initargs=(os.getpid(), queue))
    try:
        yield pool
    except BaseException:
        terminate_pool(pool)
        raise
    pool.shutdown(wait=True)


def submit_all(pool, fn, arg_tuples) -> list:
    """Submit every task with SIGINT blocked, so that the workers started now inherit it blocked."""
    with _sigint_held_while_spawning():
        return [pool.submit(fn, *args) for args in arg_tuples]


def can_spawn() -> bool:
    """True when worker processes can start here: the main module is a notebook, an interactive session
    or a script file (code read from standard input cannot be re-imported by a spawned worker)."""
    main = sys.modules.get("__main__")
    path = getattr(main, "__file__", None)
    return path is None or os.path.isfile(path)


def map_in_processes(fn, arg_tuples, workers: int, progress: Callable[[int], None] | None = None) -> list:
    """``[fn(*a) for a in arg_tuples]`` in ``workers`` processes (results in order).

    Parameters
    ----------
    fn : callable
        A module-level function; it may call :func:`report` (or use :func:`reporter`).
    arg_tuples : list of tuple
    workers : int
    progress : callable, optional
        Called in the parent with the units reported by the workers.

    Raises
    ------
    WorkerDied
        A worker process ended without a result (killed, out of memory).
    Exception
        Whatever ``fn`` raised in a worker (re-raised here).
    """
    import multiprocessing as mp
    import queue as _q
    from concurrent.futures import FIRST_EXCEPTION, wait
    from concurrent.futures.process import BrokenProcessPool

    queue = mp.get_context("spawn").Queue() if progress is not None else None

    def drain(timeout):
        if queue is None:
            return
        try:
            n = queue.get(timeout=timeout) if timeout else queue.get_nowait()
            progress(n)
            while True:
                progress(queue.get_nowait())
        except _q.Empty:
            pass

    try:
        with process_pool(workers, queue) as pool:
            futs = submit_all(pool, fn, arg_tuples)
            while True:
                done, pending = wait(futs, timeout=0.2, return_when=FIRST_EXCEPTION)
                drain(0.0)
                if not pending or any(f.exception() is not None for f in done):
                    break
            try:
                return [f.result() for f in futs]
            except BrokenProcessPool:
                raise WorkerDied("a worker process ended before finishing its task (killed, or out of "
                                 "memory; from a Python script, its top level must be guarded by "
                                 "'if __name__ == \"__main__\":')") from None
    finally:
        if queue is not None:
            queue.close()
            queue.cancel_join_thread()
