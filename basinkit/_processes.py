"""Worker processes that end with the process that forked them, and the peak memory of a run.

basinkit forks workers for per-outlet work and figures (``workflow/parallel.py``,
``workflow/steps/_figures.py``) and for the report's sections (``report/build.py``). Each
pool runs :func:`worker_init` first in every worker (``initializer=worker_init,
initargs=(os.getpid(),)``), so that:

- a worker dies when its parent dies, even by ``SIGKILL`` (which no handler sees): on
  Linux the kernel sends the worker ``SIGKILL`` (``prctl(PR_SET_PDEATHSIG)``, prctl(2));
  where that is not available a thread in the worker checks twice a second whether its
  parent changed (``os.getppid()``: an orphan is adopted by another process) and ends the
  worker;
- ``Ctrl-C`` on a terminal, which sends ``SIGINT`` to every process of the foreground
  group, is left to the parent: the worker ignores it and the parent stops the pool as the
  interrupt unwinds (no traceback from every worker);
- ``SIGTERM`` ends the worker at once (``Pool.terminate`` sends it), even though the
  command line's handler that turns ``SIGTERM`` into an interrupt was inherited through
  the fork.

The pools are created inside :func:`signals_held`: ``SIGINT`` and ``SIGTERM`` wait while
the workers are forked, so that neither a worker not yet set up nor the parent in the
middle of the fork (where Python ignores an exception raised by a signal handler) gets
them; they are delivered, and the interrupt raised, as soon as the pool stands.

It sits at the top of the package, beside ``errors.py``, so that the workflow room and the
report room both use it (a room uses only the rooms below it).
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys

__all__ = ["worker_init", "signals_held", "stop_executor", "peak_memory",
           "PARENT_CHECK_SECONDS"]

#: How often a worker without ``PR_SET_PDEATHSIG`` checks that its parent is alive.
PARENT_CHECK_SECONDS = 0.5

_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def _parent_death_signal(sig) -> bool:
    """Ask the Linux kernel to send ``sig`` to this process when its parent dies; False
    where ``prctl`` is not available (not Linux, no C library through ctypes)."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(_PR_SET_PDEATHSIG, int(sig), 0, 0, 0) == 0
    except (OSError, AttributeError, TypeError):
        return False


def _watch_parent(parent_pid, interval=PARENT_CHECK_SECONDS):
    """A daemon thread that ends this process once its parent is no longer ``parent_pid``."""
    import threading
    import time

    def watch():
        while os.getppid() == parent_pid:
            time.sleep(interval)
        os._exit(1)

    threading.Thread(target=watch, name="basinkit-parent-watch", daemon=True).start()


def worker_init(parent_pid):
    """Run first in every forked worker: end with the parent, leave ``SIGINT`` to the
    parent, die at ``SIGTERM``.

    Parameters
    ----------
    parent_pid : int
        ``os.getpid()`` of the process that creates the pool (passed as ``initargs``).

    Notes
    -----
    ``PR_SET_PDEATHSIG`` fires when the *thread* that forked the worker ends (prctl(2));
    basinkit's pools are created, used and closed by one thread, which outlives them.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if not _parent_death_signal(signal.SIGKILL):
        _watch_parent(parent_pid)
    if os.getppid() != parent_pid:  # the parent died before the signal was asked for
        os._exit(1)
    if hasattr(signal, "pthread_sigmask"):  # held by the parent's signals_held()
        signal.pthread_sigmask(signal.SIG_UNBLOCK, _HELD)


_HELD = {signal.SIGINT, signal.SIGTERM}


@contextlib.contextmanager
def signals_held():
    """Hold ``SIGINT`` and ``SIGTERM`` in this thread for the block (create the pool in
    it); a signal that came meanwhile is delivered at its end. The forked workers start
    with them held too, until :func:`worker_init` has set their handlers."""
    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, _HELD)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def stop_executor(pool):
    """Stop a :class:`concurrent.futures.ProcessPoolExecutor` now (after an error or an
    interrupt): cancel the work not started, end the workers (``SIGTERM``) and reap them.

    ``shutdown(wait=True)``, what leaving its ``with`` block does, would wait for every
    submitted item to be done.
    """
    terminate = getattr(pool, "terminate_workers", None)  # Python 3.14
    procs = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    if terminate is not None:
        try:
            terminate()
        except Exception:  # noqa: BLE001 - already shut down: fall back to the processes
            pass
    for p in procs:
        try:
            if p.is_alive():
                p.terminate()
        except (OSError, ValueError, AttributeError):
            pass
    for p in procs:
        try:
            p.join(5)
            if p.is_alive():
                p.kill()
                p.join(1)
        except (OSError, ValueError, AttributeError, AssertionError):
            pass


def peak_memory() -> dict:
    """The peak resident memory of this process and of its largest worker, in bytes.

    ``{"peak_memory_bytes": ..., "peak_worker_memory_bytes": ...}`` from ``getrusage(2)``'s
    ``ru_maxrss`` for ``RUSAGE_SELF`` and ``RUSAGE_CHILDREN``; the latter is the largest
    peak of the child processes that have ended and been waited for (a forked worker
    counts the pages it shares with its parent), 0 when there were none. ``None`` values
    where the ``resource`` module is missing (Windows).

    Examples
    --------
    >>> peak = peak_memory()
    >>> peak["peak_memory_bytes"] > 0
    True
    """
    try:
        import resource
    except ImportError:
        return {"peak_memory_bytes": None, "peak_worker_memory_bytes": None}
    # kibibytes on Linux and the BSDs, bytes on macOS (getrusage(2) of each system)
    unit = 1 if sys.platform == "darwin" else 1024
    return {
        "peak_memory_bytes": int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * unit,
        "peak_worker_memory_bytes":
            int(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss) * unit,
    }


_LIBC = []


def return_freed_memory() -> bool:
    """Hand the memory this process has freed back to the system (glibc's
    ``malloc_trim(0)``, malloc_trim(3)); True where it was done.

    The C allocator keeps freed heap memory for later use, so a stage's many small
    temporary objects (the polygons traced for thousands of catchments, the tables of
    thousands of outlets) stay in the resident memory after they are gone, and the next
    stage's peak lands on top of them. Called at the end of every stage and every few
    dozen outlets in the workers. Elsewhere than glibc (macOS, musl, Windows) it does
    nothing.
    """
    if not _LIBC:
        import ctypes

        # the C library already loaded in this process (not ctypes.util.find_library,
        # which runs ldconfig: a subprocess started while a pool's thread forks a worker
        # waits for that worker to end)
        try:
            _LIBC.append(ctypes.CDLL(None).malloc_trim)
        except (OSError, AttributeError):
            _LIBC.append(None)
    trim = _LIBC[0]
    if trim is None:
        return False
    trim(0)
    return True
