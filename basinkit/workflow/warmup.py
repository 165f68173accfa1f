"""Loading the kernels of ``route`` in a background thread while the DEM is read.

Loading numba and the compiled kernels from the on-disk cache takes about a second per
process, most of it Python work; reading a large DEM is mostly GDAL work, which releases
the GIL. Started before the read, the warm-up routes a small surface of the same types
(float32 elevations, the same conditioning and method) so that every kernel ``route``
will call is loaded by the time the real grid arrives; on a new machine it compiles them
there instead. Grids of PARALLEL_MIN_CELLS cells or more use the parallel versions, which
the warm-up then loads (see :func:`basinkit._jit.parallel_versions`).

On a new machine (an empty kernel cache) a job also compiles the kernels of its later
stages, which takes longer than the job itself; numba compiles one kernel at a time in a
process. :func:`compile_ahead` forks one process that compiles those kernels, from the
last stage's backwards, for the argument types the job will give them
(:data:`LATER_KERNELS`), and writes them to the on-disk cache, while this process routes
and goes on stage by stage from the first: where this process comes to a kernel the other
has compiled, it loads it from the cache. The job tells the other process each stage it
comes to (:func:`stage_begins`) and compiles the listed kernels of that stage the other has
not taken, from the first, while the other goes on from the last, kernel by kernel; the job
waits for a kernel the other is compiling. So the two meet wherever the job is, even within
a stage, share the compiling between two cores and never compile one kernel twice.
With the cache filled, or on a machine without a free core, no process starts.
"""

from __future__ import annotations

import threading

__all__ = ["start_warmup", "Warmup", "compile_ahead", "stage_begins",
           "stop_compile_ahead", "LATER_KERNELS"]

#: side of the warm-up surface, and of the tiles its tiled fill uses for grids that the
#: real fill will fill by tiles (larger than one 512-cell tile): the same kernels, for
#: the same argument types, on a surface small enough that the warm-up computes next to
#: nothing besides loading them
_SIDE = 64
_WARM_TILE = 32
#: cells above which the fill goes by tiles (conditioning/_tiled_fill.TILE squared)
_TILED_CELLS = 512 * 512


class Warmup:
    """A warm-up running in a daemon thread; :meth:`join` waits for it. Failures are
    ignored: the real run meets them again and reports them properly."""

    def __init__(self, cells: int, method: str = "d8", conditioning: str = "fill"):
        self.error = None
        self._thread = threading.Thread(target=self._run, name="basinkit-warmup",
                                        args=(int(cells), method, conditioning),
                                        daemon=True)
        self._thread.start()

    def _run(self, cells, method, conditioning):
        try:
            warm_route_kernels(cells, method, conditioning)
        except Exception as exc:  # noqa: BLE001 - the real run reports any problem
            self.error = exc

    def join(self):
        self._thread.join()
        return self


def warm_route_kernels(cells: int, method: str = "d8", conditioning: str = "fill"):
    """Route a small surface as ``route`` would route a grid of ``cells`` cells, loading
    (or compiling) the same kernels."""
    import contextlib

    import numpy as np

    from .._jit import PARALLEL_MIN_CELLS, parallel_versions
    from ..conditioning import exit_cells
    from ..conditioning._tiled_fill import fill_exact_tiled
    from ..routing import route
    from ..terrain import terrain_from_array

    rng = np.random.default_rng(0)
    # a tilted plane with rounded noise: pits to fill and flats to drain
    z = np.add.outer(np.arange(_SIDE, 0, -1) * 0.5, np.zeros(_SIDE))
    z = np.round(z + rng.normal(0, 2.0, (_SIDE, _SIDE))).astype(np.float32)
    terrain = terrain_from_array(z, cellsize=10.0)
    big = cells >= PARALLEL_MIN_CELLS
    with parallel_versions() if big else contextlib.nullcontext():
        if cells > _TILED_CELLS and conditioning in ("fill", "breach"):
            # the tiled fill's kernels, on small tiles; a filled surface is then routed
            # as it is (route would fill it whole, with a kernel the grid does not use)
            filled = z.copy()
            fill_exact_tiled(filled, terrain.valid, exit_cells(terrain), tile=_WARM_TILE)
            if conditioning == "fill":
                terrain, conditioning = terrain.with_elevation(filled), "none"
        fm = route(terrain, method=method, conditioning=conditioning)
        fm.direction_d8()
        fm.accumulation(unit="cells")
        fm.upstream_area()


def start_warmup(cells: int, method: str = "d8", conditioning: str = "fill") -> Warmup:
    """Start :func:`warm_route_kernels` in a background thread."""
    return Warmup(cells, method, conditioning)


#: The kernels a job calls after ``route``, by stage, each in the order the job first calls
#: it, with the argument types it gives it: ``(module under basinkit, name, types)``. Types:
#: ``i2 i4 i8 u1 u4 u8 f4 f8 b1`` (integers, floats, booleans), an array of them with one
#: ``:`` per dimension (C order), ``r`` after it for a read-only array. A job may call
#: others (other options); those compile when called, as any kernel does.
#: ``tests/test_compile_ahead.py`` checks that the demo job calls each of these.
LATER_KERNELS = {
    "flow": [  # reading the flow folder back
        ("routing._d8", "azimuth_to_receivers", "i4[:] i8 i8"),
        ("routing._stack", "accumulate_area", "i4[:] i4[:] i8 f8[:]"),
    ],
    "catchments": [
        ("routing._d8", "label_nearest_outlet", "i4[:] i4[:] i8[:] i4[:] i8"),
        ("analysis._catchments", "remap", "i4[:] i4[:]"),
        ("analysis._catchments", "label_summary", "i4[:] i8 i8 f8[:] f8[:] b1[:]"),
        ("analysis._trace", "label_edges", "i4[:] i8 i8 i8"),
        ("analysis._trace", "trace_range", "i4[:] i8 i8 i8[:] i8 i8 i8 i8"),
        # the tables' text, from any stage on that writes a table (every argument type of
        # a kernel goes in the first stage that may call it: see _Ahead)
        ("io._csv_text", "_ints", "i8[:] u1[:]"),
        ("io._csv_text", "_ints", "i8[:]r u1[:]"),
        ("io._csv_text", "_g10", "f8[:]r f8[:] u1[:] b1[:]"),
        ("io._csv_text", "_interleave", "u1[:]r i8[:] i8 u1[:]"),
    ],
    "channels": [
        ("routing._d8", "receiver_distance", "i4[:] i8 f8[:,:]"),
        ("analysis._channels", "build_network",
         "i4[:] i4[:] f8[:]r f8 b1[:] b1 f8[:]r b1[:]"),
        ("analysis._channels", "strahler_streams", "i2[:] i4[:]"),
        ("analysis._channels", "segment_paths", "i4[:] b1[:] i8[:] i8[:]"),
    ],
    # many nested catchments, measured all at once on the cells listed by label (a few
    # are measured each on its window: analysis.morphometry.WINDOW_MAX_CATCHMENTS)
    "nested_morphometry": [
        ("analysis._catchments", "cells_by_label", "i4[:] b1[:] i8"),
        ("analysis._order_stats", "_order_keys", "f4[:] u4[:] u4"),
        ("analysis._order_stats", "_radix_order", "u4[:] i8"),
        ("analysis._label_sums", "label_sums",
         "i4[:] i8[:] i8 f8[:] f4[:] f8[:] f8[:] f8[:]"),
        ("analysis._order_stats", "_order_keys", "f8[:] u8[:] u8"),
        ("analysis._order_stats", "_ranks_from_order", "i4[:] u4[:]"),
        ("analysis._label_sums", "range_sums",
         "i8[:] i8[:] f8[:,:] f8[:,:] i8[:,:] f8[:,:] f8[:,:]"),
        ("analysis._order_stats", "_radix_order", "u8[:] i8"),
        ("analysis._order_stats", "_ranks_from_order", "i4[:] u8[:]"),
        ("analysis._order_stats", "build_wavelet", "i4[:] i8"),
        ("analysis._order_stats", "counts_below", "u8[:,:,:] i8[:] i8[:] i8[:] i8[:,:]"),
        ("analysis._order_stats", "kth_ranks", "u8[:,:,:] i8[:] i8[:] i8[:] i8[:,:]"),
        ("analysis._nested_network", "range_network",
         "i8[:] i8[:] i8[:] i4[:] i4[:] i4[:] f8[:]r i4[:] i2[:] f8[:]r i8 i8"),
    ],
    "morphometry": [
        ("analysis._channels", "label_bounding_boxes", "i4[:,:] i8"),
        ("analysis._channels", "horn_slope_aspect", "f8[:,:] f8[:] f8[:] f8[:]"),
        ("routing._d8", "downstream_length", "i4[:] i4[:] f8[:]r"),
    ],
    "profiles": [
        ("analysis._profiles", "donor_lists", "i4[:]"),
        ("analysis._profiles", "upstream_cells", "i4[:] i4[:] i8[:] i2[:] i8 i8[:]"),
        ("analysis._profiles", "preferred_donor", "i4[:] i4[:] f8[:]r f8[:]r"),
        ("analysis._profiles", "cumulate_upstream", "i8[:] f8[:]"),
        ("analysis._profiles", "stream_ids", "i8[:] i8[:]"),
        ("analysis._profiles", "chi_local", "i8[:] f8[:] f8[:] f8"),
        ("analysis._profiles", "window_slope", "i8[:] i8[:] f8[:] f8[:] f8 i8 f8"),
        ("analysis._profiles", "knickpoints_one", "f8[:] f8[:] i8 f8 f8 f8 i8"),
        ("routing._d8", "upstream_length", "i4[:] i4[:] f8[:]r"),
        ("analysis._profiles", "trace_donors", "i4[:]r i8"),
        ("analysis._profiles", "upstream_cells", "i4[:] i4[:] i8[:] u1[:] i8 i8[:]"),
    ],
}

_TYPE_NAMES = {"b1": "boolean", "u1": "uint8", "i2": "int16", "i4": "int32", "i8": "int64",
               "u4": "uint32", "u8": "uint64", "f4": "float32", "f8": "float64"}


def argument_types(text: str) -> tuple:
    """The numba types written as in :data:`LATER_KERNELS`.

    Examples
    --------
    >>> [str(t) for t in argument_types("i4[:] f8[:,:]r u4")]
    ['array(int32, 1d, C)', 'readonly array(float64, 2d, C)', 'uint32']
    """
    from numba.core import types

    out = []
    for word in text.split():
        code, _, dims = word.partition("[")
        t = getattr(types, _TYPE_NAMES[code])
        if dims:
            shape, _, flag = dims.partition("]")
            t = types.Array(t, shape.count(":"), "C", readonly=flag == "r")
        out.append(t)
    return tuple(out)


def _kernel(module: str, name: str):
    import importlib

    return getattr(importlib.import_module(f"basinkit.{module}"), name)


def _in_cache(kernel, types) -> bool:
    """Whether numba's on-disk cache holds ``kernel`` for ``types`` (read from its index,
    without loading it); False when that cannot be told."""
    try:
        cache = kernel._cache
        key = cache._index_key(types, kernel.targetctx.codegen())
        return key in cache._cache_file._load_index()
    except Exception:  # noqa: BLE001 - numba's internals changed: compile (it loads)
        return False


def missing_kernels(entries) -> list:
    """The ``entries`` (as in :data:`LATER_KERNELS`) that numba's on-disk cache does not
    hold (reading the cache's index files only: a few milliseconds)."""
    out = []
    for e in entries:
        try:
            cached = _in_cache(_kernel(e[0], e[1]), argument_types(e[2]))
        except Exception:  # noqa: BLE001 - a kernel renamed: the job compiles what it uses
            cached = True
        if not cached:
            out.append(e)
    return out


def compile_kernels(entries) -> list:
    """Compile ``entries`` (as in :data:`LATER_KERNELS`) in this process, in their
    order, each unless the on-disk cache holds it by then; numba saves each to the cache.
    Returns the ``(module, name, types)`` compiled. A kernel that fails to compile is
    passed over (the job meets it again and reports it)."""
    done = []
    for e in entries:
        try:
            kernel, types = _kernel(e[0], e[1]), argument_types(e[2])
            if _in_cache(kernel, types):
                continue
            kernel.compile(types)
            done.append(e)
        except Exception:  # noqa: BLE001
            continue
    return done


def later_kernels(stages) -> list:
    """The entries of :data:`LATER_KERNELS` for ``stages``, in the order a job calls
    them."""
    return [e for stage in LATER_KERNELS if stage in stages for e in LATER_KERNELS[stage]]


def _stage_index(name) -> int:
    """The position of stage ``name`` in :data:`LATER_KERNELS` (``read``, before them all:
    -1; a stage after them, e.g. ``design_flow``: their number)."""
    stages = list(LATER_KERNELS)
    return stages.index(name) if name in stages else (-1 if name == "read" else len(stages))


#: states of a listed kernel, shared by the two processes
_FREE, _THEIRS, _DONE_THERE, _DONE_HERE = 0, 1, 2, 3


class _Ahead:
    """The other process, and what the two share (under ``lock``): ``state``, one byte
    per listed kernel: free, being compiled by the other process, compiled there, or
    taken by this one. The other process takes the kernels one by one from the last,
    this one from the first as the job comes to their stage (:func:`stage_begins`); the
    other stops where it meets one this process took, and this one waits for a kernel
    the other is compiling. So every kernel is compiled once, by one of the two, and
    the two meet wherever the job is: numba's cache of a kernel is one index file per
    kernel, which two processes saving different argument types at the same moment
    could leave wrong."""

    def __init__(self, ctx, items):
        import os

        self.items = items
        self.lock = ctx.Lock()
        self.state = ctx.RawArray("b", len(items))
        self.proc = ctx.Process(target=_compile_backwards,
                                args=(os.getpid(), items, self.lock, self.state),
                                name="basinkit-compile-ahead", daemon=True)


def _compile_backwards(parent_pid, items, lock, state):
    """The other process: ``items`` = ``[(stage index, entry)]``, the last first, until
    it meets one its parent has taken."""
    from .._processes import worker_init

    worker_init(parent_pid)
    for j in reversed(range(len(items))):
        with lock:
            if state[j] != _FREE:  # the job's side from here on
                return
            state[j] = _THEIRS
        try:
            compile_kernels([items[j][1]])
        finally:
            with lock:
                state[j] = _DONE_THERE


_AHEAD: list = []


def stage_begins(name: str, wait: float = 300.0):
    """Tell the process of :func:`compile_ahead` (if any) that the job comes to stage
    ``name``, and compile here the listed kernels of this stage and the earlier ones
    that the other process has not taken (it takes none of them from now on); one it is
    compiling is waited for (at most ``wait`` seconds, then it is stopped), so that this
    process loads it instead of compiling it too."""
    import time

    if not _AHEAD:
        return
    a, k = _AHEAD[-1], _stage_index(name)
    deadline = time.monotonic() + wait
    for j, (stage, entry) in enumerate(a.items):
        if stage > k:
            break
        while True:
            with a.lock:
                st = a.state[j]
                if st == _FREE:
                    a.state[j] = _DONE_HERE
            if st == _FREE:
                compile_kernels([entry])
                break
            if st != _THEIRS or not a.proc.is_alive():
                break
            if time.monotonic() > deadline:
                stop_compile_ahead()
                return
            time.sleep(0.02)


def _core_free() -> bool:
    """Whether a core is free for a second process: two cores or more, and the load
    average of the last minute under their number less a half (``os.getloadavg``; it
    counts this job's own earlier runs too, finished or not). On a
    machine busy with other work, two processes get no more time than one (Linux shares
    the cores between sessions first), and the second one adds work of its own (the
    helpers that kernels share compiled again), so the job would end later."""
    import os

    try:
        cores = os.cpu_count() or 1
        return cores >= 2 and os.getloadavg()[0] < cores - 0.5
    except OSError:  # no load average (not a Unix system): no second process
        return False


#: ``BASINKIT_COMPILE_AHEAD=0`` never starts the second process, ``=1`` starts it even on a
#: busy machine (for tests and benchmarks); unset, only with a core free
COMPILE_AHEAD_ENV = "BASINKIT_COMPILE_AHEAD"


def _looks_cached(entry) -> bool:
    """Whether numba's cache has an index file for ``entry``'s kernel, from file names
    alone (without importing numba, which takes half a second): in ``NUMBA_CACHE_DIR``,
    else beside the module (``__pycache__``) or in the user's cache folder, as numba's
    cache locators place them (``<module>.<name>-<line>.py<version>.nbi`` in a folder
    named after the module's folder and the SHA-1 of its path). Where numba changes these
    names the answer is False and :func:`missing_kernels` decides, in the other process."""
    import glob
    import hashlib
    import os
    import sys

    module, name = entry[0], entry[1]
    folder = os.path.join(os.path.dirname(os.path.abspath(__file__)), os.pardir,
                          *module.split(".")[:-1])
    folder = os.path.normpath(folder)
    sub = f"{os.path.basename(folder)}_{hashlib.sha1(folder.encode()).hexdigest()}"
    pattern = f"{module.split('.')[-1]}.{name}-*.py{sys.version_info[0]}" \
              f"{sys.version_info[1]}*.nbi"
    if os.environ.get("NUMBA_CACHE_DIR"):
        places = [os.path.join(os.path.abspath(os.environ["NUMBA_CACHE_DIR"]), sub)]
    else:
        user = os.environ.get("XDG_CACHE_HOME") or os.path.expanduser("~/.cache")
        places = [os.path.join(folder, "__pycache__"), os.path.join(user, "numba", sub)]
    return any(glob.glob(os.path.join(glob.escape(p), pattern)) for p in places)


def compile_ahead(stages, *, when_busy: bool = False):
    """Fork a process that compiles the kernels of ``stages`` (keys of
    :data:`LATER_KERNELS`) from the last backwards into the on-disk cache, and return it.

    None (no process) where forking is not available, numba's compiler is off, the cache
    holds the last kernel (:func:`_looks_cached`; the usual case: the process would
    compile it first), or no core is free (:func:`_core_free`) unless ``when_busy``;
    :data:`COMPILE_AHEAD_ENV` overrides the last. The process checks every kernel in the
    cache before it compiles it (:func:`compile_kernels`).

    Call it before any kernel compiles in this process (before :func:`start_warmup`),
    tell it each stage the job comes to (:func:`stage_begins`) and stop it with
    :func:`stop_compile_ahead`. The process ends with this one (as the workers do,
    :func:`basinkit._processes.worker_init`), once it has gone through the list, and
    when the job comes to the stage of the next kernel in it."""
    import multiprocessing as mp
    import os

    from .._processes import signals_held

    if "fork" not in mp.get_all_start_methods() or _disabled():
        return None
    mode = os.environ.get(COMPILE_AHEAD_ENV, "").strip()
    if mode == "0" or not (when_busy or mode == "1" or _core_free()):
        return None
    items = [(_stage_index(stage), e) for stage in LATER_KERNELS if stage in stages
             for e in LATER_KERNELS[stage]]
    # the usual case: the kernel the process would compile first is in the cache (the
    # process checks every kernel before compiling it)
    if not items or _looks_cached(items[-1][1]):
        return None
    _set_up_numba()  # once, for both processes (this one would do it first thing anyway)
    ahead = _Ahead(mp.get_context("fork"), items)
    try:
        with signals_held():  # as the pools: signals wait until the process is set up
            ahead.proc.start()
    except (OSError, AssertionError):  # no process left (EAGAIN), or in a daemon process
        return None
    _AHEAD.append(ahead)
    return ahead.proc


def _set_up_numba():
    """Import numba and set up its typing and compiling contexts (about a second, done
    before a process's first compile), so that the forked process inherits them."""
    try:
        from numba.core.registry import cpu_target

        cpu_target.typing_context.refresh()
        cpu_target.target_context.refresh()
    except Exception:  # noqa: BLE001 - the first compile sets them up instead
        pass


def _disabled() -> bool:
    """numba's cache turned off (``NUMBA_DISABLE_JIT``): nothing to share."""
    import os

    return os.environ.get("NUMBA_DISABLE_JIT", "0") not in ("", "0")


def stop_compile_ahead(wait: float = 5.0):
    """End the processes of :func:`compile_ahead` still running (``SIGTERM``) and reap
    them."""
    while _AHEAD:
        proc = _AHEAD.pop().proc
        try:
            if proc.is_alive():
                proc.terminate()
            proc.join(wait)
            if proc.is_alive():
                proc.kill()
                proc.join(1)
        except (OSError, ValueError, AssertionError):
            pass
