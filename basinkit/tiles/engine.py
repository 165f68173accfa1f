"""The engine of the tiled passes: tiles as Dask tasks, the passes that join them on the
client.

A tile task is a plain function ``task(spec, ti, tj, *args)``. ``spec`` names the tile
store: the store object itself when the tasks run in this process (Dask's threaded or
synchronous scheduler), or, on a dask.distributed cluster, a picklable callable that opens
the store again on the worker (for the store on disk, ``TileFolder.open`` bound to its
folder): a store in memory cannot reach other processes. Tasks write their outputs into the
store and return only small things (border links), so the client never holds a whole
grid.

The local default needs no cluster: ``scheduler=None`` runs the tasks in Dask's threaded
scheduler (the kernels release the GIL), ``"synchronous"`` one after the other in this
thread. Any other string is the address of a running dask.distributed scheduler
(``"tcp://host:8786"``); a ``distributed.Client`` is used as given.
"""

from __future__ import annotations

import functools

from ..errors import InputError

__all__ = ["Engine", "open_store", "store_spec", "run_tiles"]

LOCAL_SCHEDULERS = ("threads", "synchronous", "sync")


def open_store(spec):
    """The tile store a task works on: ``spec`` itself when it is a store, else
    ``spec()``."""
    if hasattr(spec, "read") and hasattr(spec, "write") and hasattr(spec, "has"):
        return spec
    return spec()


def store_spec(store, distributed: bool):
    """What the tasks are given to reach ``store`` (see the module notes)."""
    if not distributed:
        return store
    folder = getattr(store, "folder", None)
    opener = getattr(type(store), "open", None)
    if folder is None or opener is None:
        raise InputError(
            "a tile store in memory cannot be shared with the workers of a dask cluster; "
            "use a tile folder on disk (basinkit.io.tile_folder.TileFolder) on a file "
            "system that every worker can reach")
    return functools.partial(opener, str(folder))


class Engine:
    """Runs tile tasks on Dask (see the module notes for ``scheduler``).

    ``workers`` sets the number of threads of the local threaded scheduler (default:
    Dask's, one per core). Use as a context manager, or call :meth:`close`, so that a
    client opened on an address is closed again (the cluster itself is left running).
    """

    def __init__(self, scheduler=None, workers: int | None = None):
        self.workers = workers
        self._client = None
        self._own_client = False
        if scheduler is None or scheduler == "threads":
            self.local = "threads"
        elif scheduler in ("synchronous", "sync"):
            self.local = "synchronous"
        elif isinstance(scheduler, str):
            from distributed import Client

            self.local = None
            try:
                self._client = Client(scheduler, set_as_default=False)
            except (OSError, TimeoutError) as exc:
                raise InputError(f"cannot reach a dask scheduler at {scheduler!r} ({exc}); "
                                 "check the address, or leave it out to run here") from None
            self._own_client = True
        elif hasattr(scheduler, "submit") and hasattr(scheduler, "gather"):
            self.local = None
            self._client = scheduler
        else:
            raise InputError(f"unknown scheduler {scheduler!r}; give a dask scheduler address "
                             "such as tcp://host:8786, 'threads' or 'synchronous'")

    @property
    def distributed(self) -> bool:
        return self._client is not None

    def spec(self, store):
        return store_spec(store, self.distributed)

    def map(self, task, spec, items, shared=()):
        """``task(spec, ti, tj, *extra, *shared)`` for every ``(ti, tj, extra)`` in
        ``items``; returns the results in the order of ``items``. ``shared`` arguments are
        the same for every task (sent to a cluster once)."""
        items = list(items)
        if not items:
            return []
        if self._client is not None:
            c = self._client
            sh = [c.scatter(s, broadcast=True) if _big(s) else s for s in shared]
            sp = c.scatter(spec, broadcast=True) if not callable(spec) else spec
            futs = [c.submit(task, sp, ti, tj, *extra, *sh, pure=False)
                    for ti, tj, extra in items]
            return c.gather(futs)
        import dask

        calls = [dask.delayed(task, pure=False)(spec, ti, tj, *extra, *shared)
                 for ti, tj, extra in items]
        kw = {"scheduler": self.local}
        if self.local == "threads" and self.workers:
            kw["num_workers"] = int(self.workers)
        return list(dask.compute(*calls, **kw))

    def close(self):
        if self._own_client and self._client is not None:
            self._client.close()
        self._client = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _big(obj) -> bool:
    nbytes = getattr(obj, "nbytes", None)
    return nbytes is not None and nbytes > 100_000


def check_settings(store, name: str, settings: dict) -> None:
    """Record the settings of a run in the store's metadata ``name``, or, when a run with
    other settings left its tiles there, refuse to mix them (resuming needs the same
    settings)."""
    if store.has_meta(name):
        found = store.read_meta(name)
        if found != settings:
            diff = sorted(k for k in set(found) | set(settings) if found.get(k) != settings.get(k))
            raise InputError(f"the tile store already holds {name.split('.')[0]!r} tiles made "
                             f"with other settings ({', '.join(diff)}); use a new tile store "
                             "or another layer name")
        return
    store.write_meta(name, settings)


def digest(*arrays) -> str:
    """SHA-256 of arrays' bytes, dtypes and shapes (to recognise the settings of a run)."""
    import hashlib

    import numpy as np

    h = hashlib.sha256()
    for a in arrays:
        a = np.ascontiguousarray(a)
        h.update(f"{a.dtype.str}{a.shape}".encode())
        h.update(a.tobytes())
    return h.hexdigest()


def run_tiles(engine, store, task, tiles, shared=()):
    """``task(store, ti, tj, *shared)`` for each tile: as Dask tasks on ``engine``
    (:class:`~basinkit.tiles.engine.Engine`), or one after the other here without one."""
    if engine is None:
        return [task(store, ti, tj, *shared) for ti, tj in tiles]
    return engine.map(task, engine.spec(store), [(ti, tj, ()) for ti, tj in tiles],
                      shared=shared)
