"""Internal consistency of the published tables in basinkit/hydrology/tables.py, which
were typed from memory (the tables themselves were not at hand to copy).

Sources named beside each check:
- TR-55 (1986) appendix B / Chow, Maidment & Mays (1988) table 14.4.1, the NRCS 24-hour
  distributions: cumulative fractions from 0 at 0 h to 1 at 24 h, never falling; type II's
  steepest hour lies around 11.5-12.5 h and holds roughly 0.43-0.45 of the 24-hour depth;
  types II and III are close to symmetric about the storm's middle away from its central
  hour (value from memory).
- NEH 630 ch. 16 table 16-1: the mass-curve column Qa/Q is the running integral of the
  q/qp column divided by its total (closed form), to the three decimals of the table.
"""

import numpy as np
import pytest

from basinkit.hydrology import tables as T


def _at(name, hours):
    return np.interp(hours, T.NRCS_24H_TIME_H, T.NRCS_24H_DISTRIBUTIONS[name])


@pytest.mark.parametrize("name", sorted(T.NRCS_24H_DISTRIBUTIONS))
def test_distribution_endpoints_and_monotonic(name):
    """Cumulative fractions: 0 at 0 h, 1 at 24 h, non-decreasing (definition)."""
    t, f = T.NRCS_24H_TIME_H, T.NRCS_24H_DISTRIBUTIONS[name]
    assert t[0] == 0.0 and t[-1] == 24.0 and np.all(np.diff(t) > 0)
    assert f.shape == t.shape
    assert f[0] == 0.0 and f[-1] == 1.0
    assert np.all(np.diff(f) >= 0)
    assert np.all((f >= 0) & (f <= 1))


def _steepest_hour(name, step=0.05):
    start = np.arange(0.0, 23.0 + 1e-9, step)
    share = _at(name, start + 1.0) - _at(name, start)
    k = int(np.argmax(share))
    return float(start[k]), float(share[k])


def test_type_ii_steepest_hour():
    """TR-55 type II (value from memory): the most intense hour runs about 11.5-12.5 h and
    holds roughly 0.43 of the 24-hour depth (0.40-0.47 accepted)."""
    start, share = _steepest_hour("nrcs_type_ii")
    assert 11.0 <= start <= 12.0 and 11.5 <= start + 1.0 <= 13.0
    assert 0.40 <= share <= 0.47


def test_type_iii_and_i_steepest_hours():
    """TR-55 type III (value from memory) peaks at the same hour as type II but less
    sharply; type I peaks earlier (about 9.5-10.5 h) and type IA earlier still and
    flatter."""
    s2, q2 = _steepest_hour("nrcs_type_ii")
    s3, q3 = _steepest_hour("nrcs_type_iii")
    s1, q1 = _steepest_hour("nrcs_type_i")
    sa, qa = _steepest_hour("nrcs_type_ia")
    assert 11.0 <= s3 <= 12.0 and q3 < q2
    assert 9.0 <= s1 <= 10.0 and q1 < q3
    assert sa < s1 and qa < q1


@pytest.mark.parametrize("name", ["nrcs_type_ii", "nrcs_type_iii"])
def test_types_ii_and_iii_nearly_symmetric(name):
    """Value from memory: P(12 − h) + P(12 + h) ≈ 1 for the hours tabulated on both
    sides (h = 1, 2, 4, 8, 12), within 0.01."""
    for h in (1.0, 2.0, 4.0, 8.0, 12.0):
        assert _at(name, 12.0 - h) + _at(name, 12.0 + h) == pytest.approx(1.0, abs=0.01), h


def test_table_16_1_mass_curve_is_the_integral_of_the_ordinates():
    """NEH 630 table 16-1: Qa/Q = ∫₀ᵗ q dt / ∫₀^∞ q dt (closed form; trapezoids over the
    table's own rows) to within the table's rounding (0.006)."""
    x, q, m = T.DUH_T_OVER_TP, T.DUH_Q_OVER_QP, T.DUH_MASS
    cum = np.concatenate([[0.0], np.cumsum(np.diff(x) * (q[1:] + q[:-1]) / 2)])
    cum /= cum[-1]
    assert np.max(np.abs(cum - m)) < 0.006
    assert m[0] == 0.0 and m[-1] == 1.0 and np.all(np.diff(m) >= 0)
    # the peak row: q/qp = 1 at t/Tp = 1, and 0.375 of the volume has passed by then
    i = int(np.argmax(q))
    assert x[i] == 1.0 and q[i] == 1.0 and m[i] == pytest.approx(0.375)
