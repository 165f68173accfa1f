"""Reading the user's rainfall tables: IDF tables and hyetographs (CSV).

IDF table: one row per (duration, return period) with the unit in every column name —
``duration_min`` or ``duration_h``, ``return_period_yr``, and ``intensity_mm_per_h`` /
``intensity_in_per_h`` or ``depth_mm`` / ``depth_in``.

Hyetograph: a time column (``time_min`` or ``time_h``, from the start of the storm) and one
of ``cumulative_depth_mm`` / ``cumulative_depth_in`` (cumulative), ``depth_mm`` /
``depth_in`` (depth in the interval ending at that time) or ``cumulative_fraction`` (0…1 of
a design depth given separately).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..hydrology.rainfall import IDFTable, user_hyetograph

__all__ = ["read_idf_table", "read_hyetograph"]


def _read_csv(path, what):
    import pandas as pd

    p = Path(path)
    if not p.exists():
        raise InputError(f"the {what} file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{str(p)!r} is a folder, not a {what} file")
    try:
        df = pd.read_csv(p, sep=None, engine="python", comment="#")
    except Exception as exc:  # noqa: BLE001 - pandas raises several kinds for bad tables
        raise InputError(f"cannot read the {what} {str(p)!r}: {exc}") from None
    if df.empty:
        raise InputError(f"the {what} {str(p)!r} holds no rows")
    return p, df


def read_idf_table(path) -> IDFTable:
    """An :class:`~basinkit.hydrology.rainfall.IDFTable` from a CSV file (long layout)."""
    p, df = _read_csv(path, "IDF table")
    try:
        return IDFTable.from_frame(df, source=p.name)
    except InputError as e:
        raise InputError(f"{p.name}: {e}") from None


def _norm(c):
    return re.sub(r"[^a-z0-9]+", "_", str(c).strip().lower()).strip("_")


_VALUE_COLUMNS = {
    "cumulative_depth_mm": ("cumulative_mm", 1.0), "cumulative_depth_in": ("cumulative_mm", 25.4),
    "depth_mm": ("incremental_mm", 1.0), "depth_in": ("incremental_mm", 25.4),
    "cumulative_fraction": ("cumulative_fraction", 1.0)}


def read_hyetograph(path, depth=None):
    """A :class:`~basinkit.hydrology.rainfall.Hyetograph` from a CSV file.

    Parameters
    ----------
    depth : str, optional
        Design depth with its unit, for a ``cumulative_fraction`` table.
    """
    import pandas as pd

    p, df = _read_csv(path, "hyetograph")
    cols = {_norm(c): c for c in df.columns}
    tcol = next(((cols[k], f) for k, f in (("time_min", 1 / 60), ("time_h", 1.0),
                                           ("time_hr", 1.0)) if k in cols), None)
    vcol = next(((cols[k], kind, f) for k, (kind, f) in _VALUE_COLUMNS.items() if k in cols),
                None)
    if tcol is None or vcol is None:
        unitless = [c for c in df.columns if _norm(c) in ("time", "depth", "rain",
                                                          "rainfall", "cumulative")]
        hint = (f" (the column {unitless[0]!r} has no unit)" if unitless else "")
        raise InputError(f"the hyetograph {p.name!r} needs a time_min (or time_h) column and "
                         "one of cumulative_depth_mm, cumulative_depth_in, depth_mm, depth_in "
                         f"or cumulative_fraction{hint}; its columns are "
                         f"{', '.join(map(str, df.columns))}")

    def num(c):
        v = pd.to_numeric(df[c], errors="coerce").to_numpy(np.float64)
        if np.any(~np.isfinite(v)):
            raise InputError(f"the hyetograph {p.name!r} has an empty or non-numeric cell "
                             f"in {c!r}")
        return v

    t = num(tcol[0]) * tcol[1]
    v = num(vcol[0]) * vcol[2]
    try:
        h = user_hyetograph(t, v, kind=vcol[1], depth=depth)
    except InputError as e:
        raise InputError(f"{p.name}: {e}") from None
    h.description["hyetograph_file"] = p.name
    return h
