"""Outlets: points from values or arrays, placing them on the grid and snapping them to the
flow network (outlet files are read by :mod:`basinkit.io.outlets`).

An outlet table is a pandas DataFrame with one row per outlet. Outlets that cannot be used
(unparseable or missing coordinates, a repeated id, outside the grid, on nodata, no channel
within reach) are moved to an *errors* table with the reason and the line or feature they
came from; the rest carry on. :func:`sanitize_ids` turns ids into file names.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, OutletError

__all__ = ["outlets_from_text", "outlets_from_points", "locate_outlets",
           "snap_outlets", "default_snap_radius", "prepare_outlets", "sanitize_ids", "ERROR_COLUMNS",
           "FILE_ID_MAX_LENGTH"]

ERROR_COLUMNS = ["outlet_id", "source", "x_given", "y_given", "reason"]
RAW_COLUMNS = ["outlet_id", "source", "x_given", "y_given", "given_crs"]

# snapping warnings (common practice, no source): a snap longer than half the search radius
# (and more than five cells), or an upstream area 10x that of the cell the point fell in
LONG_SNAP_FRACTION = 0.5
LONG_SNAP_CELLS = 5.0
AREA_JUMP_FACTOR = 10.0
# a point already on a drainage line (>= 100 cells) whose snap changes the area by > 1.5x
# has probably moved across a confluence: the catchment is then not the one asked for
ON_CHANNEL_CELLS = 100
CONFLUENCE_FACTOR = 1.5
# a point placed on a channel should stay within about a cell or two of where it was put:
# the default search radius is max(30 m, one cell) on the ground (common practice, no
# source), in both modes; a wider search is the user's choice (--snap-radius)
DEFAULT_SNAP_RADIUS_M = 30.0
# any snap that changes the upstream area by more than this fraction is reported
AREA_CHANGE_WARN = 0.05
MAX_WINDOW_CELLS = 4_000_000  # candidate cells per outlet (a radius of ~1000 cells)

_WINDOWS_RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(1, 10)),
                     *(f"lpt{i}" for i in range(1, 10))}


def _errors_frame(rows=()):
    return pd.DataFrame(list(rows), columns=ERROR_COLUMNS)


def _raw_frame(rows):
    f = pd.DataFrame(list(rows), columns=RAW_COLUMNS)
    f["x_given"] = f["x_given"].astype(float)
    f["y_given"] = f["y_given"].astype(float)
    f["outlet_id"] = f["outlet_id"].astype(str)
    return f


def _to_float(text):
    try:
        return float(str(text).strip())
    except (TypeError, ValueError):
        return None


def outlets_from_text(values, crs=None, first_number=1):
    """Outlets from command-line values ``"X,Y"`` or ``"NAME=X,Y"``.

    Parameters
    ----------
    values : iterable of str
    crs : str or pyproj.CRS, optional
        CRS of the coordinates (None: the DEM's, decided later).
    first_number : int
        Unnamed outlets get ids ``outlet_<n>`` counting from here.

    Returns
    -------
    (DataFrame, DataFrame)
        The outlets (``outlet_id, source, x_given, y_given, given_crs``) and the errors
        (``outlet_id, source, x_given, y_given, reason``).
    """
    rows, errs = [], []
    for n, text in enumerate(values, start=first_number):
        s = str(text).strip()
        oid = f"outlet_{n}"
        if "=" in s:
            name, s = s.split("=", 1)
            oid = name.strip() or oid
        parts = [p for p in re.split(r"[,;\s]+", s.strip()) if p]
        src = f"--outlet {text}"
        if len(parts) != 2:
            errs.append((oid, src, np.nan, np.nan,
                         f"cannot read {text!r} as X,Y (two numbers separated by a comma)"))
            continue
        x, y = _to_float(parts[0]), _to_float(parts[1])
        if x is None or y is None:
            errs.append((oid, src, np.nan, np.nan,
                         f"cannot read the coordinates in {text!r} as numbers"))
            continue
        rows.append((oid, src, x, y, None if crs is None else str(crs)))
    return _raw_frame(rows), _errors_frame(errs)


def outlets_from_points(x, y, ids=None, crs=None, source="points"):
    """Outlets from coordinate arrays (Python API).

    Parameters
    ----------
    x, y : array_like of float
    ids : sequence of str, optional
        Defaults to ``outlet_1, outlet_2, ...``.
    crs : optional
        CRS of the coordinates (None: the DEM's).

    Returns
    -------
    DataFrame
        Columns ``outlet_id, source, x_given, y_given, given_crs``.
    """
    x = np.atleast_1d(np.asarray(x, dtype=float))
    y = np.atleast_1d(np.asarray(y, dtype=float))
    if x.shape != y.shape:
        raise InputError(f"x and y hold {x.size} and {y.size} values; give one pair per "
                         "outlet")
    if ids is None:
        ids = [f"outlet_{i + 1}" for i in range(x.size)]
    ids = [str(i) for i in ids]
    if len(ids) != x.size:
        raise InputError(f"{len(ids)} ids for {x.size} outlets")
    return _raw_frame(zip(ids, [f"{source} {i + 1}" for i in range(x.size)], x, y,
                          [None if crs is None else str(crs)] * x.size))


FILE_ID_MAX_LENGTH = 64  # longest file id (characters), hash suffix included
_HASH_LENGTH = 8


def _clean_id(raw) -> str:
    import unicodedata

    s = unicodedata.normalize("NFKD", str(raw)).encode("ascii", "ignore").decode()
    s = re.sub(r"[^A-Za-z0-9._-]+", "_", s)
    s = re.sub(r"_+", "_", s)
    s = s.lstrip("._-").rstrip("._ ")
    s = re.sub(r"\.{2,}", ".", s) or "outlet"
    if s.split(".")[0].lower() in _WINDOWS_RESERVED:
        s = "_" + s
    return s


def _hashed(clean, key) -> str:
    """``clean`` cut to leave room for ``_`` and a hash of ``key`` (the raw id)."""
    import hashlib

    h = hashlib.sha256(str(key).encode("utf-8")).hexdigest()[:_HASH_LENGTH]
    base = clean[:FILE_ID_MAX_LENGTH - _HASH_LENGTH - 1].rstrip("._-") or "outlet"
    return f"{base}_{h}"


def sanitize_ids(ids):
    """File-name-safe, unique, length-bounded and stable versions of outlet ids.

    The one sanitiser for every file name and HTML anchor built from an outlet id (the
    ``file_id`` column of the output tables).

    Accented letters lose their accents (NFKD); characters other than ASCII letters,
    digits, ``.``, ``-`` and ``_`` become ``_``; leading dots and separators are dropped
    (no hidden files, no ``..``, no path separators); reserved device names get a leading
    ``_``. An id that is already clean, unique (ignoring case, for case-insensitive file
    systems) and at most :data:`FILE_ID_MAX_LENGTH` characters long is kept as it is.
    Otherwise -- the cleaned name is too long, or several ids clean to one name -- the name
    is cut and ends in ``_`` and the first 8 hex digits of the SHA-256 of the id itself, so
    that each gets a name of its own that does not depend on the order of the ids: among
    ids cleaning to one name, the one already equal to that name (if any) keeps it, and the
    others get their hash suffix. Identical ids get one suffix per repetition.

    Parameters
    ----------
    ids : iterable of str

    Returns
    -------
    list of str
        Names of 1 to 64 characters from ``[A-Za-z0-9._-]``, unique ignoring case.

    Examples
    --------
    >>> sanitize_ids(["../etc/passwd", "a b", "A_B", "", "Zürich Süd"])
    ['etc_passwd', 'a_b_c8687a08', 'A_B', 'outlet', 'Zurich_Sud']
    >>> len(sanitize_ids(["x" * 300])[0])
    64
    """
    raw = [str(i) for i in ids]
    clean = [_clean_id(r) for r in raw]
    groups: dict = {}
    for i, c in enumerate(clean):
        groups.setdefault(c.lower(), []).append(i)
    out = [""] * len(raw)
    for members in groups.values():
        keeper = next((i for i in members if raw[i] == clean[i]
                       and len(clean[i]) <= FILE_ID_MAX_LENGTH), None)
        if keeper is None and len(members) == 1 and len(clean[members[0]]) <= \
                FILE_ID_MAX_LENGTH:
            keeper = members[0]
        for i in members:
            out[i] = clean[i] if i == keeper else _hashed(clean[i], raw[i])
    # a hashed name may meet an id that is literally that name, and identical ids hash
    # alike: later ones get the hash of the id and its repetition number
    seen: set = set()
    for i, name in enumerate(out):
        k = 2
        while name.lower() in seen:
            name = _hashed(clean[i], f"{raw[i]}\x00{k}")
            k += 1
        seen.add(name.lower())
        out[i] = name
    return out


def _transformer(src, dst):
    from pyproj import CRS, Transformer
    from pyproj.exceptions import CRSError

    try:
        s = CRS.from_user_input(src)
    except CRSError as exc:
        raise InputError(f"cannot understand the outlet CRS {src!r}: {exc}") from None
    if s == dst:
        return None
    return Transformer.from_crs(s, dst, always_xy=True)


def locate_outlets(terrain, raw, crs=None):
    """Reproject outlets to the DEM's CRS and find the cell each falls in.

    Parameters
    ----------
    terrain : Terrain
    raw : DataFrame
        As returned by :func:`read_outlet_file`, :func:`outlets_from_text` or
        :func:`outlets_from_points`.
    crs : optional
        CRS of rows whose ``given_crs`` is empty (default: the DEM's).

    Returns
    -------
    (DataFrame, DataFrame)
        Outlets with ``x, y`` (DEM CRS), ``row_given, col_given, cell_given`` added, and the
        errors (NaN coordinates, duplicate ids, outside the grid, on nodata).
    """
    f = raw.copy().reset_index(drop=True)
    f["given_crs"] = f["given_crs"].where(f["given_crs"].notna(),
                                          None if crs is None else str(crs))
    f["x"] = np.nan
    f["y"] = np.nan
    for g, idx in f.groupby(f["given_crs"].fillna(""), sort=True).groups.items():
        idx = np.asarray(idx)
        xs = f.loc[idx, "x_given"].to_numpy(float)
        ys = f.loc[idx, "y_given"].to_numpy(float)
        tr = _transformer(g, terrain.crs) if g else None
        if tr is not None:
            with np.errstate(invalid="ignore"):
                xs, ys = tr.transform(xs, ys, errcheck=False)
        f.loc[idx, "x"] = xs
        f.loc[idx, "y"] = ys
    reason = pd.Series([None] * len(f), dtype=object)
    finite = (np.isfinite(f["x_given"]) & np.isfinite(f["y_given"])).to_numpy()
    reason[~finite] = "coordinate is NaN or infinite"
    proj_ok = (np.isfinite(f["x"]) & np.isfinite(f["y"])).to_numpy()
    reason[finite & ~proj_ok] = "cannot reproject the point to the DEM's CRS"
    dup = f["outlet_id"].duplicated(keep="first").to_numpy()
    if dup.any():  # the first outlet of an id is used; later ones fail, naming the first
        first_src = dict(zip(f["outlet_id"][::-1], f["source"][::-1]))
        todo = dup & reason.isna().to_numpy()
        reason[todo] = [f"duplicate id: {first_src[o]} already has the id {o!r}; give "
                        "every outlet its own id" for o in f.loc[todo, "outlet_id"]]
    nr, nc = terrain.shape
    ok = reason.isna().to_numpy().copy()
    row = np.full(len(f), -1, dtype=np.int64)
    col = np.full(len(f), -1, dtype=np.int64)
    if ok.any():
        r, c = terrain.rowcol_of(f["x"].to_numpy()[ok], f["y"].to_numpy()[ok])
        row[ok], col[ok] = r, c
    inside = (row >= 0) & (row < nr) & (col >= 0) & (col < nc)
    reason[ok & ~inside] = "outside the grid (check the coordinates and --outlet-crs)"
    ok &= inside
    cell = np.where(ok, row * nc + col, -1)
    onvalid = np.zeros(len(f), bool)
    onvalid[ok] = terrain.valid.ravel()[cell[ok]]
    reason[ok & ~onvalid] = "on a nodata cell of the DEM"
    ok &= onvalid
    f["row_given"], f["col_given"], f["cell_given"] = row, col, cell
    errs = f.loc[~ok, ["outlet_id", "source", "x_given", "y_given"]].copy()
    errs["reason"] = reason[~ok].to_numpy()
    return f.loc[ok].reset_index(drop=True), errs[ERROR_COLUMNS].reset_index(drop=True)


def _metres_per_unit(crs):
    from ..terrain.geometry import _linear_unit_to_metres

    return _linear_unit_to_metres(crs)


def _distances(terrain, x, y, cells):
    """Ground distance (m) from points (x, y) (DEM CRS) to the centres of ``cells``."""
    nc = terrain.shape[1]
    xc, yc = terrain.xy_of(cells // nc, cells % nc)
    if terrain.crs.is_geographic:
        from pyproj import Geod

        ell = terrain.crs.ellipsoid
        f = 1.0 / ell.inverse_flattening if ell.inverse_flattening else 0.0
        _, _, d = Geod(a=ell.semi_major_metre, f=f).inv(
            np.broadcast_to(x, np.shape(xc)).ravel(), np.broadcast_to(y, np.shape(yc)).ravel(),
            np.ravel(xc), np.ravel(yc))
        return np.abs(np.asarray(d)).reshape(np.shape(xc))
    k = _metres_per_unit(terrain.crs)
    return np.hypot((xc - x) * k, (yc - y) * k)


def snap_outlets(fm, located, radius_m=None, channel_area_m2=None):
    """Snap outlets to the flow network, vectorised over all outlets.

    Two modes:

    - greatest upstream area (default): the outlet moves to the cell of greatest D8
      upstream area whose centre lies within ``radius_m`` of the given point (the cell the
      point falls in is always a candidate); ties go to the nearest cell, then the lowest
      cell index.
    - nearest channel (``channel_area_m2`` given): the outlet moves to the nearest cell
      (centre within ``radius_m``) whose upstream area is at least ``channel_area_m2``;
      outlets with no such cell go to the errors table.

    Parameters
    ----------
    fm : FlowModel
    located : DataFrame
        As returned by :func:`locate_outlets`.
    radius_m : float, optional
        Search radius on the ground in metres. Default: ``max(30 m, one cell)``
        (:func:`default_snap_radius`), the cell size taken as the larger side of a cell in
        the grid's middle row. 0 keeps every outlet on its own cell.
    channel_area_m2 : float, optional
        Minimum upstream area of a channel cell (m²).

    Returns
    -------
    (DataFrame, DataFrame)
        Outlets with ``row, col, cell, x_snapped, y_snapped, snap_distance_m,
        upstream_area_m2, upstream_area_given_cell_m2, snap_warning`` added; errors.
        Outlets that land on one cell are all kept (they share its catchment), each with
        a note in ``snap_warning`` naming the others.

    Notes
    -----
    Distances are planar in metres on projected grids and geodesic (Karney 2013, through
    pyproj) on geographic grids. The warnings (a snap longer than half the radius and five
    cells; an upstream area at least 10 times the area at the given cell, which suggests a
    different branch; any change of the upstream area by more than 5 %) are common
    practice (no source).
    """
    t = fm.terrain
    nr, nc = t.shape
    g = t.geometry
    mid = nr // 2
    cell_m = float(max(g.dx[mid], g.dy_down[mid]))
    cell_area = float(g.area[mid])
    channel = channel_area_m2 is not None
    if radius_m is None:
        radius_m = default_snap_radius(fm)
    radius_m = float(radius_m)
    if not radius_m >= 0 or not math.isfinite(radius_m):
        raise InputError(f"the snap radius must be a finite length >= 0, got {radius_m}")
    area = fm.d8_upstream_area_flat()
    valid = t.valid.ravel()
    n = len(located)
    rows0 = located["row_given"].to_numpy(np.int64)
    cols0 = located["col_given"].to_numpy(np.int64)
    x = located["x"].to_numpy(float)
    y = located["y"].to_numpy(float)
    # candidate window in cells, wide enough for the narrowest cells of the grid
    kr = int(min(nr, math.ceil(radius_m / max(float(g.dy_down.min()), 1e-9)) + 1))
    kc = int(min(nc, math.ceil(radius_m / max(float(g.dx.min()), 1e-9)) + 1))
    if radius_m == 0:
        kr = kc = 0
    if (2 * kr + 1) * (2 * kc + 1) > MAX_WINDOW_CELLS:
        raise InputError(f"a snap radius of {radius_m:g} m spans about {kr} x {kc} cells "
                         "on each side; snapping searches that whole window, so use a "
                         f"radius under {int(cell_m * 900):d} m here "
                         "(an outlet should be placed near its stream, not kilometres "
                         "away)")
    dr, dc = np.meshgrid(np.arange(-kr, kr + 1), np.arange(-kc, kc + 1), indexing="ij")
    dr, dc = dr.ravel(), dc.ravel()
    K = dr.size
    pick = np.empty(n, dtype=np.int64)
    found = np.ones(n, dtype=bool)
    dist_pick = np.empty(n)
    chunk = max(1, int(2_000_000 // K))
    for s in range(0, n, chunk):
        e = min(n, s + chunk)
        R = rows0[s:e, None] + dr[None, :]
        C = cols0[s:e, None] + dc[None, :]
        inside = (R >= 0) & (R < nr) & (C >= 0) & (C < nc)
        cells = np.where(inside, R * nc + C, 0)
        ok = inside & valid[cells]
        dist = np.full(cells.shape, np.inf)
        if ok.any():
            dist[ok] = _distances(t, np.broadcast_to(x[s:e, None], cells.shape)[ok],
                                  np.broadcast_to(y[s:e, None], cells.shape)[ok], cells[ok])
        own = (dr == 0) & (dc == 0)
        ok &= (dist <= radius_m) | own[None, :]
        a = np.where(ok, area[cells], -np.inf)
        if channel:
            cand = ok & (a >= channel_area_m2)
        else:
            cand = ok & (a == a.max(axis=1, keepdims=True))
        # nearest candidate, then lowest cell index (the window is in index order)
        dsel = np.where(cand, dist, np.inf)
        j = np.argmin(dsel, axis=1)
        ii = np.arange(e - s)
        pick[s:e] = cells[ii, j]
        dist_pick[s:e] = dsel[ii, j]
        found[s:e] = cand.any(axis=1)
    out = located.copy()
    out["row"] = pick // nc
    out["col"] = pick % nc
    out["cell"] = pick
    xs, ys = t.xy_of(pick // nc, pick % nc)
    out["x_snapped"], out["y_snapped"] = xs, ys
    out["snap_distance_m"] = np.where(found, dist_pick, np.nan)
    out["upstream_area_m2"] = np.where(found, area[pick], np.nan)
    given_area = area[located["cell_given"].to_numpy(np.int64)] if n else np.zeros(0)
    out["upstream_area_given_cell_m2"] = given_area
    warn = []
    long_snap = max(LONG_SNAP_FRACTION * radius_m, LONG_SNAP_CELLS * cell_m)
    for d, a1, a0 in zip(out["snap_distance_m"], out["upstream_area_m2"], given_area):
        w = []
        if d > long_snap:
            w.append(f"long snap ({d:.0f} m)")
        if a1 >= AREA_JUMP_FACTOR * a0:
            w.append(f"upstream area jumps {a1 / a0:.0f}x from the given cell: the snap may "
                     "have landed on another branch")
        elif a0 >= ON_CHANNEL_CELLS * cell_area and a1 > CONFLUENCE_FACTOR * a0:
            w.append(f"the given point already drains {a0 / 1e6:.3g} km2 but the snap moved "
                     f"it to {a1 / 1e6:.3g} km2, probably across a confluence; check the "
                     "position or use a smaller --snap-radius")
        elif a0 > 0 and abs(a1 - a0) > AREA_CHANGE_WARN * a0:
            w.append(f"snapping changed the upstream area by {100 * (a1 - a0) / a0:+.1f} % "
                     f"({a0 / 1e6:.4g} km2 at the given point, {a1 / 1e6:.4g} km2 at the "
                     "snapped cell); check the position or set --snap-radius")
        warn.append("; ".join(w))
    errs = out.loc[~found, ["outlet_id", "source", "x_given", "y_given"]].copy()
    errs["reason"] = (f"no channel cell (upstream area >= {channel_area_m2:g} m2) within "
                      f"{radius_m:g} m; raise --snap-radius or lower --snap-to-channel"
                      if channel else "no valid cell within the snap radius")
    # outlets that land on one cell share its catchment: all are kept, each with a note
    keep = np.flatnonzero(found)
    shared = pd.Series(pick[keep]).duplicated(keep=False).to_numpy()
    if shared.any():
        ids_at = {}
        for i in keep[shared]:
            ids_at.setdefault(int(pick[i]), []).append(str(out["outlet_id"].iloc[i]))
        for i in keep[shared]:
            others = [o for o in ids_at[int(pick[i])] if o != str(out["outlet_id"].iloc[i])]
            names = ", ".join(repr(o) for o in others[:5]) + (
                f" and {len(others) - 5} more" if len(others) > 5 else "")
            note = (f"shares its cell with outlet{'s' if len(others) > 1 else ''} {names} "
                    "(after snapping): they get the same catchment")
            warn[i] = f"{warn[i]}; {note}" if warn[i] else note
    out["snap_warning"] = warn
    out["snap_radius_m"] = radius_m
    out = out.loc[found].reset_index(drop=True)
    return out, errs[ERROR_COLUMNS].reset_index(drop=True)


def default_snap_radius(fm) -> float:
    """The default snap search radius (m): ``max(30 m, one cell)``, the cell taken as the
    larger side of a cell in the grid's middle row (metres on the ground).

    Examples
    --------
    >>> import numpy as np
    >>> from basinkit import terrain_from_array, route
    >>> z = np.add.outer(np.arange(5.0, 0, -1), np.zeros(4))
    >>> default_snap_radius(route(terrain_from_array(z, cellsize=10)))
    30.0
    >>> default_snap_radius(route(terrain_from_array(z, cellsize=90)))
    90.0
    """
    g = fm.terrain.geometry
    mid = fm.terrain.shape[0] // 2
    return max(DEFAULT_SNAP_RADIUS_M, float(max(g.dx[mid], g.dy_down[mid])))


def prepare_outlets(fm, outlets, crs=None, radius_m=None, channel_area_m2=None,
                    id_column=None):
    """Read, locate and snap outlets in one call.

    Parameters
    ----------
    fm : FlowModel
    outlets : (DataFrame, DataFrame), DataFrame, sequence of (x, y) or (id, x, y), or array
        The pair read from a file by :func:`basinkit.read_outlet_file` (its rows that could
        not be read join the errors), an outlet frame from this module, or points.
    crs : optional
        CRS of the coordinates when they carry none (default: the DEM's).
    radius_m, channel_area_m2 : float, optional
        See :func:`snap_outlets`.
    id_column : str, optional
        Unused (kept for callers of earlier versions; give it to
        :func:`basinkit.read_outlet_file`).

    Returns
    -------
    (DataFrame, DataFrame)
        Snapped outlets (with sanitised ``file_id``) and errors.
    """
    errs = [_errors_frame()]
    if isinstance(outlets, (str, Path)):
        raise InputError(f"outlets given as a file name ({str(outlets)!r}): read the file "
                         "first with basinkit.read_outlet_file(path) and pass the "
                         "(outlets, errors) pair it returns")
    if _is_read_pair(outlets):
        raw, e = outlets
        errs.append(e)
    elif isinstance(outlets, pd.DataFrame):
        raw = outlets
        if "given_crs" not in raw.columns:
            raw = outlets_from_points(outlets["x_given"] if "x_given" in outlets else
                                      outlets["x"],
                                      outlets["y_given"] if "y_given" in outlets else
                                      outlets["y"],
                                      ids=outlets.get("outlet_id"), crs=crs)
    else:
        seq = list(outlets)
        if seq and len(seq[0]) == 3:
            ids = [s[0] for s in seq]
            xs = [s[1] for s in seq]
            ys = [s[2] for s in seq]
        else:
            arr = np.asarray(seq, dtype=float).reshape(-1, 2)
            ids, xs, ys = None, arr[:, 0], arr[:, 1]
        raw = outlets_from_points(xs, ys, ids=ids, crs=crs)
    loc, e = locate_outlets(fm.terrain, raw, crs=crs)
    errs.append(e)
    snapped, e = snap_outlets(fm, loc, radius_m=radius_m, channel_area_m2=channel_area_m2)
    errs.append(e)
    snapped["file_id"] = sanitize_ids(snapped["outlet_id"])
    errors = pd.concat([x for x in errs if len(x)] or [_errors_frame()], ignore_index=True)
    return snapped, errors[ERROR_COLUMNS]


def _is_read_pair(obj) -> bool:
    """True for the (outlets, errors) pair of :func:`basinkit.read_outlet_file`."""
    return (isinstance(obj, tuple) and len(obj) == 2
            and all(isinstance(o, pd.DataFrame) for o in obj)
            and "given_crs" in obj[0].columns and "reason" in obj[1].columns)


def require_outlets(snapped, errors):
    """Raise :class:`OutletError` when no outlet is usable (with the first reasons)."""
    if len(snapped):
        return
    if len(errors):
        why = "; ".join(f"{a}: {b}" for a, b in
                        zip(errors["outlet_id"][:5], errors["reason"][:5]))
        raise OutletError(f"none of the {len(errors)} outlets can be used ({why})")
    raise OutletError("no outlets given; pass --outlet X,Y or --outlets FILE")
