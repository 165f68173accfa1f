"""Per-outlet work in forked worker processes, results in input order.

The steps of a batch of thousands of outlets do the same work for each outlet (profiles,
figures). :func:`map_outlets` runs a module-level function over the outlets in ``workers``
processes forked from this one, so that the flow model, the channel network and the
imported libraries are inherited (copy-on-write) instead of sent; only the per-outlet
results travel back. The results are those of a loop in this process, in the same order,
whatever the number of workers (each item is computed independently), so the products do
not depend on it.

The workers end with this process, even when it is killed, and leave ``Ctrl-C`` to it
(:func:`basinkit._processes.worker_init`); an error or an interrupt here, or closing the
generator, terminates the pool.
"""

from __future__ import annotations

__all__ = ["map_outlets", "shared", "FORK_MIN_ITEMS"]

# below this many items a pool costs more than it saves
FORK_MIN_ITEMS = 40

_SHARED: dict = {}


def shared(name):
    """An object handed to the workers by :func:`map_outlets` (``shared=``)."""
    return _SHARED[name]


# a worker hands its freed memory back to the system after this many items
TRIM_EVERY = 8
_DONE = [0]


def _trimmed(func, item):
    """``func(item)`` in a worker, returning freed memory every :data:`TRIM_EVERY` items
    (:func:`basinkit._processes.return_freed_memory`)."""
    result = func(item)
    _DONE[0] += 1
    if _DONE[0] % TRIM_EVERY == 0:
        from .._processes import return_freed_memory

        return_freed_memory()
    return result


def _fork_available() -> bool:
    import multiprocessing as mp

    return "fork" in mp.get_all_start_methods()


def map_outlets(func, items, workers=2, shared=None, progress=None, desc="", total=None,
                min_items=FORK_MIN_ITEMS):
    """``[func(item) for item in items]``, in forked worker processes when worth it.

    Parameters
    ----------
    func : callable
        A module-level function (picklable by name); it reads large inputs with
        :func:`shared` rather than from its argument.
    items : sequence
    workers : int
        Processes (1: everything in this process). Forking is used only where available
        and for at least :data:`FORK_MIN_ITEMS` items.
    shared : dict, optional
        Objects the workers read with :func:`shared` (inherited through the fork).
    progress : callable, optional
        ``progress(iterable, total=, desc=)`` (a reporter's progress).
    min_items : int
        Fork only for at least this many items (lower it for heavy items, e.g. figures,
        where a pool pays off with a handful).

    Yields
    ------
    The results, in the order of ``items``.
    """
    items = list(items)
    total = len(items) if total is None else total
    wrap = progress or (lambda it, total=None, desc="": it)
    _SHARED.clear()
    _SHARED.update(shared or {})
    try:
        if int(workers) <= 1 or len(items) < max(2, int(min_items)) or not _fork_available():
            for item in wrap(items, total=total, desc=desc):
                yield func(item)
            return
        import functools
        import gc
        import multiprocessing as mp
        import os

        from .._processes import return_freed_memory, signals_held, worker_init

        # the first item here: kernels compiled and modules imported before the fork
        first = func(items[0])
        chunk = max(1, min(16, len(items) // (8 * int(workers))))
        return_freed_memory()  # also finds the C library's trim before any fork
        # the objects alive now stay out of the workers' garbage collections: not walked
        # (their pages not copied) in every worker; this process collects them as before
        gc.freeze()
        try:
            with signals_held():  # Ctrl-C and SIGTERM wait until the workers are set up
                pool = mp.get_context("fork").Pool(int(workers), initializer=worker_init,
                                                   initargs=(os.getpid(),))
        finally:
            gc.unfreeze()
        with pool:
            results = pool.imap(functools.partial(_trimmed, func), items[1:],
                                chunksize=chunk)

            def all_results():
                yield first
                for k, r in enumerate(results, 2):
                    yield r
                    if k % TRIM_EVERY == 0:  # the results taken here, freed, handed back
                        return_freed_memory()

            yield from wrap(all_results(), total=total, desc=desc)
    finally:
        _SHARED.clear()
