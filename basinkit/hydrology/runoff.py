"""Runoff from design rainfall: the NRCS curve-number method and the Rational method's
runoff coefficient.

Curve-number runoff (NEH 630 ch. 10, eq. 10-9 to 10-11; TR-55 ch. 2, eq. 2-1 to 2-4)::

    S  = 1000/CN − 10            (inches; 25400/CN − 254 in mm)
    Ia = λ·S                     (λ = 0.2 by the handbook; 0.05 as an option)
    Q  = (P − Ia)² / (P − Ia + S)    for P > Ia, else 0

The antecedent runoff condition (ARC I dry, II average, III wet) converts the tabulated
(ARC II) curve number by the approximations of Chow, Maidment & Mays (1988, eq. 5.5.4 and
5.5.5) of the NEH table of ARC curve numbers::

    CN(I)   = 4.2·CN(II) / (10 − 0.058·CN(II))
    CN(III) = 23·CN(II)  / (10 + 0.13·CN(II))

With λ = 0.05 the retention may be converted as well, S₀.₀₅ = 1.33·S₀.₂^1.15 (S in inches;
Woodward et al. 2003; Hawkins et al. 2009, form as remembered), so that curve numbers
tabulated for λ = 0.2 keep their meaning; without the conversion only Ia changes.

References
----------
USDA NRCS (2004). National Engineering Handbook Part 630 Hydrology, ch. 10 Estimation of
direct runoff from storm rainfall.
USDA SCS (1986). Urban Hydrology for Small Watersheds, TR-55, ch. 2.
Chow, V. T., Maidment, D. R., Mays, L. W. (1988). Applied Hydrology, McGraw-Hill, §5.5.
Woodward, D. E., Hawkins, R. H., Jiang, R., Hjelmfelt, A. T., Van Mullem, J. A., Quan,
Q. D. (2003). Runoff curve number method: examination of the initial abstraction ratio.
World Water & Environmental Resources Congress, ASCE.
Hawkins, R. H., Ward, T. J., Woodward, D. E., Van Mullem, J. A. (2009). Curve Number
Hydrology: State of the Practice. ASCE.
Kuichling, E. (1889). The relation between the rainfall and the discharge of sewers in
populous districts. Transactions ASCE 20:1-56 (the Rational method).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .tables import MM_PER_IN

__all__ = ["retention_mm", "curve_number_runoff_mm", "convert_arc", "cn_for_ia_ratio",
           "check_curve_numbers", "check_runoff_coefficients", "CurveNumbers",
           "ARC_CONDITIONS", "CN_RANGE", "IA_RATIOS"]

CN_RANGE = (30.0, 100.0)
ARC_CONDITIONS = ("I", "II", "III")
IA_RATIOS = (0.2, 0.05)


def check_curve_numbers(cn, what="curve number"):
    """The values as float64, or an InputError when any is outside 30–100 (NaN passes:
    cells without a value are handled by the caller)."""
    a = np.asarray(cn, dtype=np.float64)
    f = a[np.isfinite(a)]
    if f.size and (f.min() < CN_RANGE[0] or f.max() > CN_RANGE[1]):
        bad = f[(f < CN_RANGE[0]) | (f > CN_RANGE[1])][0]
        raise InputError(f"a {what} of {bad:g} lies outside 30-100; curve numbers run from "
                         "about 30 (deep sand, woods) to 100 (water, pavement)")
    return a


def check_runoff_coefficients(c, what="runoff coefficient C"):
    """The values as float64, or an InputError when any is outside 0–1."""
    a = np.asarray(c, dtype=np.float64)
    f = a[np.isfinite(a)]
    if f.size and (f.min() < 0.0 or f.max() > 1.0):
        bad = f[(f < 0) | (f > 1)][0]
        raise InputError(f"a {what} of {bad:g} lies outside 0-1; the Rational method's C "
                         "is the share of rainfall that runs off")
    return a


def _check_ratio(ia_ratio):
    r = float(ia_ratio)
    if not any(abs(r - x) < 1e-12 for x in IA_RATIOS):
        raise InputError(f"the initial-abstraction ratio Ia/S must be 0.2 (the handbook's) "
                         f"or 0.05, got {ia_ratio!r}")
    return r


def retention_mm(cn):
    """Potential maximum retention S (mm) = 25400/CN − 254 (NEH 630 ch. 10, eq. 10-12)."""
    cn = np.asarray(cn, dtype=np.float64)
    return 25400.0 / cn - 254.0


def curve_number_runoff_mm(rainfall_mm, cn, ia_ratio=0.2):
    """Direct runoff depth Q (mm) from rainfall depth P (mm) and curve number CN.

    Q = (P − λS)² / (P − λS + S) for P > λS, else 0 (NEH 630 ch. 10 eq. 10-9; TR-55 eq.
    2-3 with λ = 0.2). Broadcasts over arrays; CN = 100 gives Q = P.

    Examples
    --------
    >>> round(float(curve_number_runoff_mm(5 * 25.4, 80)) / 25.4, 2)  # TR-55: 2.89 in
    2.89
    """
    p = np.asarray(rainfall_mm, dtype=np.float64)
    s = retention_mm(cn)
    ia = float(ia_ratio) * s
    with np.errstate(invalid="ignore", divide="ignore"):
        q = np.where(p > ia, (p - ia) ** 2 / np.maximum(p - ia + s, 1e-300), 0.0)
    return q


def convert_arc(cn, condition="II"):
    """Curve number for antecedent runoff condition I (dry), II (average: unchanged) or
    III (wet), from the ARC II value (Chow, Maidment & Mays 1988, eq. 5.5.4-5.5.5,
    approximating the NEH table of ARC curve numbers)."""
    c = str(condition).strip().upper()
    if c not in ARC_CONDITIONS:
        raise InputError(f"the antecedent runoff condition must be I, II or III, got "
                         f"{condition!r}")
    cn = np.asarray(cn, dtype=np.float64)
    if c == "I":
        return 4.2 * cn / (10.0 - 0.058 * cn)
    if c == "III":
        return 23.0 * cn / (10.0 + 0.13 * cn)
    return cn.copy()


def cn_for_ia_ratio(cn, ia_ratio=0.05):
    """The curve number to use with Ia = 0.05·S for a curve number tabulated for
    Ia = 0.2·S: S₀.₀₅ = 1.33·S₀.₂^1.15 with S in inches (Woodward et al. 2003; Hawkins et
    al. 2009). With ``ia_ratio = 0.2`` the input comes back unchanged."""
    r = _check_ratio(ia_ratio)
    cn = np.asarray(cn, dtype=np.float64)
    if r == 0.2:
        return cn.copy()
    s02 = 1000.0 / cn - 10.0
    s005 = 1.33 * np.power(np.maximum(s02, 0.0), 1.15)
    return 1000.0 / (10.0 + s005)


@dataclass
class CurveNumbers:
    """The curve numbers of one catchment as a distribution: distinct values and the area
    (m²) each covers, with the runoff settings.

    Attributes
    ----------
    values : ndarray
        Distinct ARC II curve numbers as given (tabulated for Ia = 0.2·S).
    area_m2 : ndarray
        Ground area carrying each value.
    weighting : {"area_weighted_cn", "runoff_per_cell"}
        ``area_weighted_cn``: one composite CN = Σ CN·a / Σ a, runoff from it (the
        handbook's composite curve number, TR-55 ch. 2); ``runoff_per_cell``: runoff of
        every cell from its own CN, summed (area-weighted mean depth). The second gives
        more runoff where CNs differ widely (TR-55 ch. 2 warns of composites of very
        different CNs).
    ia_ratio : float
        0.2 or 0.05.
    convert_for_ia_ratio : bool
        With 0.05, convert each CN by :func:`cn_for_ia_ratio` (default) or change only Ia.
    arc : {"I", "II", "III"}
        Antecedent runoff condition; the conversion applies after area-weighting for
        ``area_weighted_cn`` and to each value for ``runoff_per_cell``.
    """

    values: np.ndarray
    area_m2: np.ndarray
    weighting: str = "area_weighted_cn"
    ia_ratio: float = 0.2
    convert_for_ia_ratio: bool = True
    arc: str = "II"

    def __post_init__(self):
        self.values = check_curve_numbers(np.atleast_1d(self.values))
        self.area_m2 = np.atleast_1d(np.asarray(self.area_m2, dtype=np.float64))
        keep = self.area_m2 > 0
        self.values, self.area_m2 = self.values[keep], self.area_m2[keep]
        if self.values.size == 0 or not np.all(np.isfinite(self.values)):
            raise InputError("no curve number covers the catchment")
        if self.weighting not in ("area_weighted_cn", "runoff_per_cell"):
            raise InputError(f"the curve-number weighting must be area_weighted_cn or "
                             f"runoff_per_cell, got {self.weighting!r}")
        self.ia_ratio = _check_ratio(self.ia_ratio)
        self.arc = str(self.arc).strip().upper()
        convert_arc(100.0, self.arc)  # validates

    @classmethod
    def uniform(cls, cn, **kw):
        return cls(np.array([float(cn)]), np.array([1.0]), **kw)

    @property
    def composite_cn(self) -> float:
        """Area-weighted ARC II curve number as given."""
        return float(np.sum(self.values * self.area_m2) / np.sum(self.area_m2))

    def _effective(self, cn):
        cn = convert_arc(cn, self.arc)
        if self.ia_ratio != 0.2 and self.convert_for_ia_ratio:
            cn = cn_for_ia_ratio(cn, self.ia_ratio)
        return cn

    @property
    def effective_cn(self) -> float:
        """The curve number entering the runoff equation (after ARC and Ia-ratio
        conversion) for ``area_weighted_cn``; for ``runoff_per_cell`` the area-weighted
        mean of the converted values (for reporting only)."""
        if self.weighting == "area_weighted_cn":
            return float(self._effective(self.composite_cn))
        e = self._effective(self.values)
        return float(np.sum(e * self.area_m2) / np.sum(self.area_m2))

    @property
    def cn_range(self):
        return float(self.values.min()), float(self.values.max())

    def runoff_mm(self, rainfall_mm):
        """Catchment-mean direct runoff depth (mm) for cumulative rainfall depth(s)."""
        p = np.asarray(rainfall_mm, dtype=np.float64)
        if self.weighting == "area_weighted_cn":
            return curve_number_runoff_mm(p, self._effective(self.composite_cn),
                                          self.ia_ratio)
        e = self._effective(self.values)
        w = self.area_m2 / self.area_m2.sum()
        q = curve_number_runoff_mm(p[..., None], e, self.ia_ratio)
        return q @ w

    def retention_mm(self) -> float:
        """S (mm) of the effective composite curve number."""
        return float(retention_mm(self.effective_cn))

    def describe(self) -> dict:
        lo, hi = self.cn_range
        return {"curve_number_area_weighted": self.composite_cn,
                "curve_number_min": lo, "curve_number_max": hi,
                "curve_number_effective": self.effective_cn,
                "curve_number_weighting": self.weighting,
                "antecedent_runoff_condition": self.arc,
                "initial_abstraction_ratio": self.ia_ratio,
                "curve_number_converted_for_ia_ratio": bool(
                    self.ia_ratio != 0.2 and self.convert_for_ia_ratio)}

