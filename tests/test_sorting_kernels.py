"""The kernels' own sort and search against numpy's (reference library: NumPy
``argsort(kind="stable")`` and ``searchsorted``)."""

import numpy as np
import pytest

from basinkit.analysis._sorting import argsort_stable, search_left


@pytest.mark.parametrize("n", [0, 1, 2, 15, 16, 17, 33, 1000, 4099])
@pytest.mark.parametrize("high", [3, 10**12])
def test_argsort_stable_as_numpy(n, high):
    rng = np.random.default_rng(n + high)
    a = rng.integers(-high, high, n)
    np.testing.assert_array_equal(argsort_stable(a), np.argsort(a, kind="stable"))
    f = a.astype(np.float64) / 7.0
    np.testing.assert_array_equal(argsort_stable(f), np.argsort(f, kind="stable"))


def test_search_left_as_numpy():
    rng = np.random.default_rng(5)
    a = np.sort(rng.integers(0, 50, 200))
    for x in range(-2, 53):
        assert search_left(a, x) == np.searchsorted(a, x, side="left")
    assert search_left(a[:0], 3) == 0
