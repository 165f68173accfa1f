"""Reading outlet files: CSV tables (any of ``,`` ``;`` tab ``|`` between fields, decimal
commas with ``;``, UTF-8 with or without a byte-order mark, UTF-16, or cp1252 with a note)
and point layers (GeoJSON, GeoPackage, ...).

A file that cannot be a table of outlets at all (missing, empty, binary, JSON under a .csv
name, a header and no rows, no coordinate columns) is refused with an
:class:`~basinkit.errors.InputError`; a row that cannot be used (too few fields, a
coordinate that is not a number) goes to the errors table with its line and reason, and the
other rows carry on.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..analysis.outlets import _errors_frame, _raw_frame
from ..errors import InputError
from .text import binary_kind, read_text, sniff_delimiter

__all__ = ["OutletFile", "read_outlets", "read_outlet_file", "ID_COLUMNS", "TABLE_SUFFIXES"]

ID_COLUMNS = ("outlet_id", "id", "name", "outlet", "site", "station", "gauge")
_XY_COLUMNS = (("x", "y"), ("easting", "northing"), ("east", "north"))
_LONLAT_COLUMNS = (("lon", "lat"), ("longitude", "latitude"), ("lng", "lat"),
                   ("long", "lat"))
TABLE_SUFFIXES = (".csv", ".txt", ".tsv")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+$")


@dataclass
class OutletFile:
    """An outlet file as read.

    Attributes
    ----------
    raw : DataFrame
        ``outlet_id, source, x_given, y_given, given_crs`` (one row per usable row).
    errors : DataFrame
        ``outlet_id, source, x_given, y_given, reason`` (rows that could not be read).
    descriptions : dict
        ``{outlet id: text}`` from a CSV's ``description`` column (else empty).
    notes : list of str
        What the reader assumed (a fallback encoding, decimal commas), for the user.
    """

    raw: object
    errors: object
    descriptions: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)


def _find_column(columns, names):
    low = {str(c).strip().lower(): c for c in columns}
    for n in names:
        if n in low:
            return low[n]
    return None


def read_outlet_file(path, crs=None, id_column=None):
    """Read outlets from a CSV table or a point layer (GeoJSON, GeoPackage, ...).

    Parameters
    ----------
    path : str or Path
        CSV: an id column (``outlet_id``, ``id``, ``name``, ...; else the row number) and
        ``x``/``y`` (also ``easting``/``northing``) or ``lon``/``lat`` columns. Vector
        files: point features in the layer's own CRS.
    crs : optional
        CRS of CSV coordinates. Default: the DEM's CRS for x/y columns, EPSG:4326 for
        lon/lat columns. Ignored for vector files that declare their CRS.
    id_column : str, optional
        Column holding the outlet ids.

    Returns
    -------
    (DataFrame, DataFrame)
        Outlets (``outlet_id, source, x_given, y_given, given_crs``) and the rows that
        could not be read (``outlet_id, source, x_given, y_given, reason``); pass the pair
        to :func:`basinkit.delineate` or :func:`basinkit.prepare_outlets`.

    Examples
    --------
    >>> import basinkit as bk
    >>> raw, errors = bk.read_outlet_file(bk.demo_job_path().parent / "outlets.csv")
    >>> raw["outlet_id"].iloc[0], len(errors)
    ('crossing', 0)
    """
    f = read_outlets(path, crs=crs, id_column=id_column)
    return f.raw, f.errors


def read_outlets(path, crs=None, id_column=None) -> OutletFile:
    """Read an outlet file (see :func:`read_outlet_file`) with its descriptions and notes.

    Raises
    ------
    InputError
        The file cannot be a table or layer of outlets; the message says why.
    """
    p = Path(path)
    if not p.exists():
        raise InputError(f"the outlet file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"the outlet file {str(p)!r} is a folder; give a CSV, GeoJSON or "
                         "GeoPackage file")
    if p.suffix.lower() in TABLE_SUFFIXES:
        return _read_csv(p, crs, id_column)
    return _read_vector(p, crs, id_column)


def _number(text, decimal_comma):
    s = str(text).strip()
    if decimal_comma and _DECIMAL_COMMA.match(s):
        s = s.replace(",", ".")
    try:
        return float(s)
    except ValueError:
        return None


def _read_csv(p, crs, id_column) -> OutletFile:
    what = "the outlet table"
    tf = read_text(p, what)
    text = tf.text
    head = text.lstrip()
    if head[:1] in ("{", "["):
        raise InputError(f"{what} {str(p)!r} holds JSON, not comma-separated values; if it "
                         "is GeoJSON, name it .geojson (points are read from it), else "
                         "give a CSV with id, x, y columns")
    lines = text.splitlines()
    delim = "\t" if p.suffix.lower() == ".tsv" else sniff_delimiter(lines)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delim, strict=True)
    records = []  # (line number, fields)
    try:
        start = 1
        for fields in reader:
            if any(f.strip() for f in fields):
                records.append((start, fields))
            start = reader.line_num + 1
    except csv.Error as exc:
        raise InputError(f"{what} {str(p)!r} cannot be read as CSV at line "
                         f"{reader.line_num}: {exc} (an unclosed or stray quote?)") from None
    if not records:
        raise InputError(f"{what} {str(p)!r} holds only separators, no values; give a "
                         "header such as id,x,y and one row per outlet")
    header = [h.strip() for h in records[0][1]]
    rows = records[1:]
    if all(_number(h, True) is not None for h in header if h):
        raise InputError(f"{what} {str(p)!r} has no header line (its first line holds "
                         f"numbers: {', '.join(header)}); add one such as id,x,y")
    if len(header) == 1:
        raise InputError(f"{what} {str(p)!r} has a single column ({header[0]!r}); separate "
                         "its fields with commas (or semicolons), e.g. id,x,y")
    if id_column is not None and id_column not in header:
        raise InputError(f"{what} {p.name!r} has no column {id_column!r}; its columns are "
                         f"{', '.join(header)}")
    idc = id_column if id_column is not None else _find_column(header, ID_COLUMNS)
    xc = yc = None
    lonlat = False
    for a, b in _XY_COLUMNS:
        xc, yc = _find_column(header, (a,)), _find_column(header, (b,))
        if xc is not None and yc is not None:
            break
    else:
        for a, b in _LONLAT_COLUMNS:
            xc, yc = _find_column(header, (a,)), _find_column(header, (b,))
            if xc is not None and yc is not None:
                lonlat = True
                break
    if xc is None or yc is None:
        raise InputError(f"{what} {p.name!r} needs x and y (or lon and lat) columns; its "
                         f"columns are {', '.join(header)}")
    if not rows:
        raise InputError(f"{what} {str(p)!r} has a header ({', '.join(header)}) but no rows; "
                         "add one row per outlet")
    ix, iy = header.index(xc), header.index(yc)
    ii = None if idc is None else header.index(idc)
    idesc = header.index(_find_column(header, ("description",))) \
        if _find_column(header, ("description",)) is not None else None
    decimal_comma = delim != ","
    given_crs = str(crs) if crs is not None else ("EPSG:4326" if lonlat else None)
    ended = text.endswith(("\n", "\r"))
    out, errs, desc = [], [], {}
    used_comma = False
    for k, (line, fields) in enumerate(rows, start=1):
        oid = fields[ii].strip() if ii is not None and ii < len(fields) else ""
        oid = oid or f"{p.stem}_{k}"
        src = f"{p.name} line {line}"
        if len(fields) < len(header):
            last = k == len(rows) and not ended
            errs.append((oid, src, np.nan, np.nan,
                         f"line {line} has {len(fields)} of the header's {len(header)} "
                         "fields" + (" (the last line: the file may be truncated)" if last
                                     else "")))
            continue
        if len(fields) > len(header):
            hint = (" (with decimal commas, separate the fields with ';')"
                    if delim == "," and any(_DECIMAL_COMMA.match(f"{a.strip()},{b.strip()}")
                                            for a, b in zip(fields, fields[1:]))
                    else f" (a value with an unquoted {delim!r}?)")
            errs.append((oid, src, np.nan, np.nan,
                         f"line {line} has {len(fields)} fields but the header has "
                         f"{len(header)}{hint}"))
            continue
        xs, ys = fields[ix].strip(), fields[iy].strip()
        x, y = _number(xs, decimal_comma), _number(ys, decimal_comma)
        if x is None or y is None:
            bad = xs if x is None else ys
            reason = ("missing coordinate" if bad == "" else
                      f"cannot read the coordinate {bad!r} as a number")
            errs.append((oid, src, np.nan if x is None else x, np.nan if y is None else y,
                         reason))
            continue
        used_comma |= "," in xs or "," in ys
        if idesc is not None:
            desc.setdefault(oid, fields[idesc])
        out.append((oid, src, x, y, given_crs))
    notes = list(tf.notes)
    if used_comma:
        notes.append(f"{what} {p.name!r} separates fields with {delim!r} and writes numbers "
                     "with decimal commas; read them as such")
    return OutletFile(_raw_frame(out), _errors_frame(errs), desc, notes)


def _read_vector(p, crs, id_column) -> OutletFile:
    import geopandas as gpd

    with open(p, "rb") as fh:
        first = fh.read(8192)
    if not first.strip():
        raise InputError(f"the outlet file {str(p)!r} is empty")
    kind = binary_kind(first)
    if kind is not None and "GeoPackage" not in kind and "ZIP" not in kind:
        raise InputError(f"the outlet file {str(p)!r} is {kind}, not outlet points; give a "
                         "CSV table, GeoJSON or GeoPackage points")
    try:
        gdf = gpd.read_file(p)
    except Exception as exc:  # noqa: BLE001 - pyogrio raises its own error classes
        raise InputError(f"cannot read the outlet layer {str(p)!r} (give a CSV table, "
                         f"GeoJSON or GeoPackage points): {exc}") from None
    cols = [c for c in gdf.columns if c != gdf.geometry.name]
    idc = id_column if id_column is not None else _find_column(cols, ID_COLUMNS)
    if id_column is not None and id_column not in cols:
        raise InputError(f"the outlet layer {p.name!r} has no column {id_column!r}")
    if gdf.crs is not None:
        given_crs = gdf.crs.to_string()
    elif p.suffix.lower() in (".geojson", ".json"):
        given_crs = "EPSG:4326"  # RFC 7946: GeoJSON coordinates are WGS 84 lon/lat
    else:
        given_crs = None if crs is None else str(crs)
    rows, errs = [], []
    for i, (geom, rec) in enumerate(zip(gdf.geometry, gdf[cols].itertuples(index=False))):
        vals = dict(zip(cols, rec))
        oid = str(vals[idc]).strip() if idc is not None and vals[idc] is not None else ""
        oid = oid or f"{p.stem}_{i + 1}"
        src = f"{p.name} feature {i + 1}"
        if geom is None or geom.is_empty:
            errs.append((oid, src, np.nan, np.nan, "feature without geometry"))
            continue
        if geom.geom_type != "Point":
            errs.append((oid, src, np.nan, np.nan,
                         f"outlets must be points, this feature is a {geom.geom_type}"))
            continue
        rows.append((oid, src, float(geom.x), float(geom.y), given_crs))
    if not rows and not errs:
        raise InputError(f"the outlet layer {str(p)!r} holds no features")
    return OutletFile(_raw_frame(rows), _errors_frame(errs))
