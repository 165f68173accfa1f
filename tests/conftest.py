"""Shared test fixtures.

pysheds 0.5 (a reference library in the tests only) still calls ``np.in1d``, which NumPy 2.4
removed; give it the equivalent ``np.isin`` here and nowhere else.
"""

import numpy as np
import pytest

if not hasattr(np, "in1d"):
    np.in1d = np.isin


def fractal_dem(n, m=None, seed=0, beta=1.6, relief=500.0, holes=0, integer=False):
    """Spectral-synthesis fractal surface (power spectrum ~ k^-2β), optional nodata holes."""
    m = m or n
    rng = np.random.default_rng(seed)
    fy = np.fft.fftfreq(n)[:, None]
    fx = np.fft.fftfreq(m)[None, :]
    k = np.sqrt(fx ** 2 + fy ** 2)
    k[0, 0] = 1.0
    spec = (rng.normal(size=(n, m)) + 1j * rng.normal(size=(n, m))) / k ** beta
    z = np.real(np.fft.ifft2(spec))
    z = (z - z.min()) / (np.ptp(z) or 1.0) * relief
    z = z.astype(np.float32)
    if integer:
        z = np.round(z).astype(np.float32)
    for _ in range(holes):
        r, c = rng.integers(0, n), rng.integers(0, m)
        rad = rng.integers(1, max(2, n // 12))
        yy, xx = np.ogrid[:n, :m]
        z[(yy - r) ** 2 + (xx - c) ** 2 <= rad * rad] = np.nan
    return z


@pytest.fixture
def fractal():
    return fractal_dem


def pysheds_grid(z, ncols_cell=1.0):
    """A pysheds Grid + Raster holding ``z`` on a unit grid (reference library only)."""
    from affine import Affine
    from pysheds.grid import Grid
    from pysheds.view import Raster, ViewFinder

    nr, nc = z.shape
    vf = ViewFinder(affine=Affine(ncols_cell, 0, 0, 0, -ncols_cell, nr * ncols_cell),
                    shape=z.shape, nodata=np.float64(np.nan))
    grid = Grid(viewfinder=vf)
    return grid, Raster(np.asarray(z, dtype=np.float64), viewfinder=vf)


# our D8 azimuth codes shifted away from 0 (pysheds reads 0 as no-data), in its N..NW order
PYSHEDS_DIRMAP = tuple(1000 + 45 * k for k in range(8))


def pysheds_fdir(grid, direction):
    """Our azimuth raster as a pysheds direction Raster read with PYSHEDS_DIRMAP
    (-1 and nodata become 0, which pysheds reads as no flow)."""
    from pysheds.view import Raster, ViewFinder

    d = direction.astype(np.int64)
    vf = ViewFinder(affine=grid.viewfinder.affine, shape=d.shape, nodata=np.int64(0),
                    crs=grid.viewfinder.crs)
    return Raster(np.where(d >= 0, d + 1000, 0), viewfinder=vf)


def run_cli(argv, capsys=None):
    """Run the real entry point (its error handling included); returns (code, out, err)."""
    from basinkit.cli.main import main

    try:
        main([str(a) for a in argv])
        code = 0
    except SystemExit as exc:
        code = exc.code or 0
    if capsys is None:
        return code, "", ""
    cap = capsys.readouterr()
    return code, cap.out, cap.err
