"""Published tables and unit factors the design-flow methods use.

The tables below were transcribed into the package by hand from the published NRCS tables
(the sources are named beside each). They were typed from memory of those tables, not
copied from a file: a user relying on them for design should compare them once with the
published tables (the test suite checks their documented points, endpoints and shape).

References
----------
USDA Soil Conservation Service (1986). Urban Hydrology for Small Watersheds. Technical
Release 55 (TR-55), 2nd ed., appendix B (the 24-hour rainfall distributions).
Chow, V. T., Maidment, D. R., Mays, L. W. (1988). Applied Hydrology. McGraw-Hill,
table 14.4.1 (the SCS 24-hour distributions tabulated).
USDA NRCS (2007). National Engineering Handbook, Part 630 Hydrology, chapter 16
Hydrographs, table 16-1 (the dimensionless unit hydrograph and its mass curve).
"""

from __future__ import annotations

import numpy as np

__all__ = ["NRCS_24H_TIME_H", "NRCS_24H_DISTRIBUTIONS", "DUH_T_OVER_TP", "DUH_Q_OVER_QP",
           "DUH_MASS", "MM_PER_IN", "M_PER_FT", "M3_PER_FT3", "M3_PER_ACRE_FT",
           "CFS_PER_CMS", "ACRE_M2", "SQUARE_MILE_M2", "PEAK_RATE_FACTOR_US",
           "US_TO_SI_PEAK_RATE", "NRCS_PATTERNS"]

# ------------------------------------------------------------------ unit factors (exact)
MM_PER_IN = 25.4                        # international inch (1959)
M_PER_FT = 0.3048                       # international foot (1959)
M3_PER_FT3 = M_PER_FT ** 3              # 0.028316846592
CFS_PER_CMS = 1.0 / M3_PER_FT3          # cubic feet per second in one m³/s
ACRE_M2 = 4046.8564224                  # international acre
SQUARE_MILE_M2 = 2589988.110336         # international square mile
M3_PER_ACRE_FT = ACRE_M2 * M_PER_FT     # 1233.48183754752

#: Peak rate factor of the standard NRCS dimensionless unit hydrograph in US customary
#: units (qp cfs = 484 · A mi² · Q in / Tp h; NEH 630 ch. 16).
PEAK_RATE_FACTOR_US = 484.0
#: Factor from the US peak rate factor to the SI one (qp m³/s = K_SI · A km² · Q mm / Tp h):
#: K_SI = K_US · ft³→m³ · (km² per mi²) / (mm per in); 484 → 0.2083 (NEH 630 ch. 16 quotes
#: 0.208).
US_TO_SI_PEAK_RATE = M3_PER_FT3 * (1e6 / SQUARE_MILE_M2) / MM_PER_IN

# ------------------------------------------------------ NRCS 24-hour rainfall distributions
#: Hours from the start of the 24-hour storm at which the cumulative fractions are given.
#: Steps of 0.25–0.5 h around the peaks of types I, II and III; coarser on the tails.
NRCS_24H_TIME_H = np.array([
    0.0, 2.0, 4.0, 6.0, 7.0, 8.0, 8.5, 9.0, 9.5, 9.75, 10.0, 10.5, 11.0, 11.5, 11.75,
    12.0, 12.5, 13.0, 13.5, 14.0, 16.0, 20.0, 24.0])

#: Cumulative fraction of the 24-hour depth, P(t)/P24, for each NRCS distribution
#: (TR-55 1986 appendix B; tabulated in Chow, Maidment & Mays 1988, table 14.4.1;
#: transcribed from memory, three decimals as published).
NRCS_24H_DISTRIBUTIONS = {
    "nrcs_type_i": np.array([
        0.000, 0.035, 0.076, 0.125, 0.156, 0.194, 0.219, 0.254, 0.303, 0.362, 0.515,
        0.583, 0.624, 0.654, 0.669, 0.682, 0.706, 0.727, 0.748, 0.767, 0.830, 0.926, 1.000]),
    "nrcs_type_ia": np.array([
        0.000, 0.050, 0.116, 0.206, 0.268, 0.425, 0.480, 0.520, 0.550, 0.564, 0.577,
        0.601, 0.624, 0.645, 0.655, 0.664, 0.683, 0.701, 0.719, 0.736, 0.800, 0.906, 1.000]),
    "nrcs_type_ii": np.array([
        0.000, 0.022, 0.048, 0.080, 0.098, 0.120, 0.133, 0.147, 0.163, 0.172, 0.181,
        0.204, 0.235, 0.283, 0.357, 0.663, 0.735, 0.772, 0.799, 0.820, 0.880, 0.952, 1.000]),
    "nrcs_type_iii": np.array([
        0.000, 0.020, 0.043, 0.072, 0.089, 0.115, 0.130, 0.148, 0.167, 0.178, 0.189,
        0.216, 0.250, 0.298, 0.339, 0.500, 0.702, 0.751, 0.785, 0.811, 0.886, 0.957, 1.000]),
}
NRCS_PATTERNS = tuple(NRCS_24H_DISTRIBUTIONS)

# ------------------------------------------------ NRCS dimensionless unit hydrograph
#: NEH 630 ch. 16, table 16-1: time ratio t/Tp, discharge ratio q/qp and mass curve
#: ratio Qa/Q (share of the runoff volume passed by time t).
_DUH = np.array([
    # t/Tp  q/qp   Qa/Q
    [0.0, 0.000, 0.000], [0.1, 0.030, 0.001], [0.2, 0.100, 0.006], [0.3, 0.190, 0.012],
    [0.4, 0.310, 0.035], [0.5, 0.470, 0.065], [0.6, 0.660, 0.107], [0.7, 0.820, 0.163],
    [0.8, 0.930, 0.228], [0.9, 0.990, 0.300], [1.0, 1.000, 0.375], [1.1, 0.990, 0.450],
    [1.2, 0.930, 0.522], [1.3, 0.860, 0.589], [1.4, 0.780, 0.650], [1.5, 0.680, 0.700],
    [1.6, 0.560, 0.751], [1.7, 0.460, 0.790], [1.8, 0.390, 0.822], [1.9, 0.330, 0.849],
    [2.0, 0.280, 0.871], [2.2, 0.207, 0.908], [2.4, 0.147, 0.934], [2.6, 0.107, 0.953],
    [2.8, 0.077, 0.967], [3.0, 0.055, 0.977], [3.2, 0.040, 0.984], [3.4, 0.029, 0.989],
    [3.6, 0.021, 0.993], [3.8, 0.015, 0.995], [4.0, 0.011, 0.997], [4.5, 0.005, 0.999],
    [5.0, 0.000, 1.000]])
DUH_T_OVER_TP = _DUH[:, 0].copy()
DUH_Q_OVER_QP = _DUH[:, 1].copy()
DUH_MASS = _DUH[:, 2].copy()
for _a in (NRCS_24H_TIME_H, DUH_T_OVER_TP, DUH_Q_OVER_QP, DUH_MASS,
           *NRCS_24H_DISTRIBUTIONS.values()):
    _a.flags.writeable = False
del _a, _DUH
