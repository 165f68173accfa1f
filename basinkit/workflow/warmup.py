"""Loading the kernels of ``route`` in a background thread while the DEM is read.

Loading numba and the compiled kernels from the on-disk cache takes about a second per
process, most of it Python work; reading a large DEM is mostly GDAL work, which releases
the GIL. Started before the read, the warm-up routes a small surface of the same types
(float32 elevations, the same conditioning and method) so that every kernel ``route``
will call is loaded by the time the real grid arrives; on a new machine it compiles them
there instead. Grids of PARALLEL_MIN_CELLS cells or more use the parallel versions, which
the warm-up then loads (see :func:`basinkit._jit.parallel_versions`).
"""

from __future__ import annotations

import threading

__all__ = ["start_warmup", "Warmup"]

#: side of the warm-up surface for grids larger than one fill tile (512 cells), so that
#: the tiled fill's kernels load too; 64 otherwise
_TILED_SIDE = 520


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
    from ..routing import route
    from ..terrain import terrain_from_array

    side = _TILED_SIDE if cells > 512 * 512 else 64
    rng = np.random.default_rng(0)
    # a tilted plane with rounded noise: pits to fill and flats to drain
    z = np.add.outer(np.arange(side, 0, -1) * 0.5, np.zeros(side))
    z = np.round(z + rng.normal(0, 2.0, (side, side))).astype(np.float32)
    big = cells >= PARALLEL_MIN_CELLS
    with parallel_versions() if big else contextlib.nullcontext():
        fm = route(terrain_from_array(z, cellsize=10.0), method=method,
                   conditioning=conditioning)
        fm.direction_d8()
        fm.accumulation(unit="cells")
        fm.upstream_area()


def start_warmup(cells: int, method: str = "d8", conditioning: str = "fill") -> Warmup:
    """Start :func:`warm_route_kernels` in a background thread."""
    return Warmup(cells, method, conditioning)
