"""Outlets for the steps: what the user gave (:class:`OutletSpec`), read and placed on the
grid once (:func:`place_outlets`, giving :class:`PlacedOutlets`), the same way for every
command and for job files."""

from __future__ import annotations

from dataclasses import dataclass, field
import numpy as np

from ..errors import InputError
from .progress import as_reporter

__all__ = ["OutletSpec", "PlacedOutlets", "place_outlets", "FIGURE_OUTLETS_DEFAULT"]

FIGURE_OUTLETS_DEFAULT = 20  # figures for the first this many outlets unless named


@dataclass
class OutletSpec:
    """Outlets as given: command-line values and/or a file, and how to snap them.

    Attributes
    ----------
    values : tuple of str
        ``"X,Y"`` or ``"NAME=X,Y"`` values (``--outlet``); they come before the file's.
    file : str or Path, optional
        CSV, GeoJSON or GeoPackage points (``--outlets``, ``[inputs] outlets``).
    crs : str, optional
        CRS of values and CSV x/y columns (default: the DEM's; lon/lat: EPSG:4326).
    id_column : str, optional
    snap_radius_m : float, optional
        Search radius (default max(30 m, one cell); 0: none).
    snap_to_channel_m2 : float, optional
        Snap to the nearest cell with at least this upstream area instead of to the cell
        of greatest upstream area.
    """

    values: tuple = ()
    file: object = None
    crs: object = None
    id_column: object = None
    snap_radius_m: float | None = None
    snap_to_channel_m2: float | None = None

    def __bool__(self):
        return bool(self.values or self.file)

    def require(self):
        """Raise InputError when no outlet was given at all."""
        if not self:
            raise InputError("no outlets given; pass --outlet X,Y (repeatable) or "
                             "--outlets FILE")

    def read(self):
        """Outlets as given (``outlet_id, source, x_given, y_given, given_crs``) and the
        rows that could not be read (``outlet_id, source, x_given, y_given, reason``)."""
        import pandas as pd

        from ..analysis.outlets import ERROR_COLUMNS, outlets_from_text
        from ..io.outlets import read_outlets

        self.require()
        raws, errs = [], []
        if self.values:
            r, e = outlets_from_text(self.values, crs=self.crs)
            raws.append(r)
            errs.append(e)
        if self.file:
            f = read_outlets(self.file, crs=self.crs, id_column=self.id_column)
            raws.append(f.raw)
            errs.append(f.errors)
            self._descriptions, self.notes = f.descriptions, f.notes
        raw = pd.concat(raws, ignore_index=True)
        nonempty = [e for e in errs if len(e)]
        errors = pd.concat(nonempty, ignore_index=True) if nonempty else errs[0]
        return raw, errors[ERROR_COLUMNS].reset_index(drop=True)

    def descriptions(self) -> dict:
        """``{outlet id: description}`` from a CSV file's ``description`` column (known
        once :meth:`read` has run)."""
        return dict(getattr(self, "_descriptions", {}) or {})

    def inputs(self) -> dict:
        """The outlet file and its SHA-256 (for provenance records)."""
        if not self.file:
            return {}
        from ..io.hashing import file_sha256

        return {"outlets": {"path": str(self.file), "sha256": file_sha256(self.file)}}

    def parameters(self) -> dict:
        """The outlet settings for provenance records."""
        return {"outlets": list(self.values),
                "outlets_file": None if self.file is None else str(self.file),
                "outlet_crs": None if self.crs is None else str(self.crs),
                "id_column": self.id_column, "snap_radius_m": self.snap_radius_m,
                "snap_to_channel_m2": self.snap_to_channel_m2,
                "snap_mode": ("nearest channel cell" if self.snap_to_channel_m2 is not None
                              else "greatest upstream area")}


@dataclass
class PlacedOutlets:
    """Outlets placed on the grid.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per usable outlet in input order (columns of
        :func:`basinkit.analysis.outlets.prepare_outlets`: ``outlet_id``, ``source``,
        ``file_id``, ``cell``, snapped position, ``snap_distance_m``, ``snap_warning``, ...;
        ``description`` when the outlet file has that column).
    errors : pandas.DataFrame
        One row per outlet that could not be used: ``outlet_id, source, x_given, y_given,
        reason`` (unreadable rows, repeated ids, off the grid, on nodata, no channel).
    given : int
        Number of outlets given.
    snapping : dict
        The snapping used (mode, radius in metres, channel area) and the notes made
        reading the outlet file (``outlet_file_notes``), as every step's JSON records them.
    """

    table: object
    errors: object
    given: int
    snapping: dict = field(default_factory=dict)

    @property
    def cells(self) -> np.ndarray:
        """Flat cell of each usable outlet (outlets may share a cell)."""
        return self.table["cell"].to_numpy(np.int64)

    def figure_rows(self, wanted=None, first=FIGURE_OUTLETS_DEFAULT):
        """Positions in :attr:`table` of the outlets that get figures: those named in
        ``wanted`` (ids), else the first ``first`` outlets; and the named ids not found."""
        ids = self.table["outlet_id"].astype(str).tolist()
        if wanted:
            want = [str(w) for w in wanted]
            rows = [i for i, o in enumerate(ids) if o in set(want)]
            missing = [w for w in want if w not in set(ids)]
            return rows, missing
        return list(range(min(first, len(ids)))), []


def place_outlets(fm, spec: OutletSpec, raw=None, read_errors=None,
                  reporter=None) -> PlacedOutlets:
    """Read (unless ``raw`` is given), locate and snap outlets, as every command and job
    does (:func:`basinkit.analysis.outlets.prepare_outlets`); each usable outlet gets its
    ``file_id`` from :func:`basinkit.analysis.outlets.sanitize_ids`. Every outlet that
    cannot be used is told to ``reporter.outlet_failed`` (stage ``outlets``).

    Raises
    ------
    OutletError
        When no outlet at all can be used.
    """
    import pandas as pd

    from ..analysis.outlets import (AREA_CHANGE_WARN, DEFAULT_SNAP_RADIUS_M, ERROR_COLUMNS,
                                    prepare_outlets, require_outlets)

    if raw is None:
        raw, read_errors = spec.read()
    if read_errors is None:
        read_errors = pd.DataFrame(columns=ERROR_COLUMNS)
    if len(raw):
        table, errs = prepare_outlets(fm, raw, crs=spec.crs, radius_m=spec.snap_radius_m,
                                      channel_area_m2=spec.snap_to_channel_m2)
    else:
        table, errs = raw.assign(cell=pd.Series(dtype="int64")), read_errors.iloc[:0]
    parts = [x for x in (read_errors, errs) if len(x)]
    errors = (pd.concat(parts, ignore_index=True) if parts else errs)[ERROR_COLUMNS]
    rep = as_reporter(reporter)
    for note in getattr(spec, "notes", []):
        rep.warn(note)
    for r in errors.itertuples(index=False):
        rep.outlet_failed(str(r.outlet_id), str(r.reason), "outlets", source=str(r.source))
    require_outlets(table, errors)
    desc = spec.descriptions()
    if desc:
        table["description"] = [desc.get(str(o), "") for o in table["outlet_id"]]
    _tell_snap_warnings(rep, table)
    radius = float(table["snap_radius_m"].iloc[0])
    snapping = {
        "mode": ("nearest cell with upstream area >= snap_to_channel_m2"
                 if spec.snap_to_channel_m2 is not None
                 else "greatest upstream area within the radius"),
        "radius_m": radius,
        "radius_given": spec.snap_radius_m is not None,
        "radius_default": spec.snap_radius_m is None,
        "default_radius_rule": f"max({DEFAULT_SNAP_RADIUS_M:g} m, one cell)",
        "area_change_warning_percent": 100 * AREA_CHANGE_WARN,
        "outlets_with_snap_warning": int((table["snap_warning"].astype(str) != "").sum()),
        "snap_to_channel_m2": spec.snap_to_channel_m2,
        "outlet_crs": None if spec.crs is None else str(spec.crs),
        # how the outlet file was read (encoding fallback, ';' and decimal commas)
        "outlet_file_notes": list(getattr(spec, "notes", [])),
    }
    return PlacedOutlets(table.reset_index(drop=True), errors.reset_index(drop=True),
                         int(len(raw) + len(read_errors)), snapping)


SNAP_WARNINGS_SHOWN = 20  # snap warnings printed one by one; the rest are counted


def _tell_snap_warnings(rep, table):
    """Print each outlet's snap warning (long snap, area changed by more than 5 %, another
    branch, a shared cell) once, as every command that places outlets does."""
    warned = [(o, w) for o, w in zip(table["outlet_id"], table["snap_warning"].astype(str))
              if w]
    for o, w in warned[:SNAP_WARNINGS_SHOWN]:
        rep.warn(f"outlet {o!r}: {w}")
    if len(warned) > SNAP_WARNINGS_SHOWN:
        rep.warn(f"... and {len(warned) - SNAP_WARNINGS_SHOWN} more outlets with snap "
                 "warnings (see the warning column of the tables)")
