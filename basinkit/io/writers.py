"""Writers: every output goes to a temporary file beside its target and is renamed into
place, so an interrupted run never leaves a half-written file under the final name."""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from pathlib import Path

import numpy as np

from ..errors import OutputExistsError

__all__ = ["atomic_path", "write_geotiff", "raster_codec", "codec_available", "write_json",
           "write_csv", "csv_rows", "CsvStream", "provenance", "prepare_output_dir", "check_output"]


def check_output(path, overwrite: bool):
    """Refuse an existing output unless ``overwrite``."""
    p = Path(path)
    if p.exists() and not overwrite:
        raise OutputExistsError(f"{str(p)!r} already exists; choose another output or pass "
                                "--overwrite to replace it")
    return p


def prepare_output_dir(path, overwrite: bool) -> Path:
    """Create an output folder; refuse a non-empty existing one unless ``overwrite``."""
    p = Path(path)
    if p.exists():
        if not p.is_dir():
            raise OutputExistsError(f"{str(p)!r} exists and is not a folder")
        if any(p.iterdir()) and not overwrite:
            raise OutputExistsError(f"the folder {str(p)!r} already holds files; choose "
                                    "another output or pass --overwrite to replace them")
    p.mkdir(parents=True, exist_ok=True)
    return p


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part" + path.suffix,
                               dir=path.parent)
    os.close(fd)
    os.unlink(tmp)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


#: GeoTIFF codec of the products: ZSTD level 1 (about as small as DEFLATE level 6 on
#: elevations, directions and accumulations, and 5-10 times faster to write), compressed
#: in GDAL's worker threads. GDAL reads ZSTD from version 2.3 on; a GDAL built without it
#: writes DEFLATE instead (see :func:`raster_codec`).
DEFAULT_CODEC = "zstd"
#: compression level per codec when none is given; DEFLATE, when it stands in for a
#: missing ZSTD, is written at its fast level 1
CODEC_LEVELS = {"zstd": 1, "deflate": 1}
_CODEC_SUPPORT: dict = {}


def codec_available(codec: str) -> bool:
    """Whether this GDAL writes GeoTIFFs compressed with ``codec`` (probed once, in
    memory: GDAL ignores a codec it lacks, with a warning, and writes the file
    uncompressed)."""
    codec = codec.lower()
    if codec not in _CODEC_SUPPORT:
        import warnings

        import rasterio
        from rasterio.io import MemoryFile

        ok = False
        try:
            with warnings.catch_warnings(), rasterio.Env(CPL_LOG="/dev/null"):
                warnings.simplefilter("ignore")
                with MemoryFile() as mem:
                    # georeferenced, so that reading it back warns of nothing (the
                    # filter above is not thread-safe: the flow folder writes in a thread)
                    with mem.open(driver="GTiff", height=1, width=1, count=1,
                                  dtype="uint8", compress=codec,
                                  transform=rasterio.transform.from_origin(0, 1, 1, 1)) as ds:
                        ds.write(np.zeros((1, 1, 1), np.uint8))
                    with mem.open() as ds:
                        ok = str(ds.profile.get("compress", "")).lower() == codec
        except Exception:  # noqa: BLE001 - any failure means: do not use this codec
            ok = False
        _CODEC_SUPPORT[codec] = ok
    return _CODEC_SUPPORT[codec]


def raster_codec() -> str:
    """The codec :func:`write_geotiff` uses by default here: ``"zstd"``, or ``"deflate"``
    where this GDAL lacks ZSTD."""
    return DEFAULT_CODEC if codec_available(DEFAULT_CODEC) else "deflate"


def write_geotiff(path, array, transform, crs, nodata=None, tags=None, *, codec=None,
                  level=None):
    """Write one band as a tiled, compressed GeoTIFF with the given georeferencing.

    Parameters
    ----------
    codec : {"zstd", "deflate"}, optional
        Default :func:`raster_codec` (ZSTD level 1, or DEFLATE level 1 where GDAL lacks
        ZSTD). Files shipped for others to read (the demo DEM) pass ``"deflate"``.
    level : int, optional
        Compression level (default :data:`CODEC_LEVELS`).

    Notes
    -----
    Tiles of 256 x 256 cells are compressed in GDAL's worker threads (``NUM_THREADS``);
    the file's bytes do not depend on the number of threads. float32 bands use the
    floating-point predictor (about 12 % smaller elevations); integer and float64 bands
    none, which measured smaller and faster for directions, counts and areas.
    """
    import rasterio

    array = np.asarray(array)
    codec = (codec or raster_codec()).lower()
    if level is None:
        level = CODEC_LEVELS.get(codec, 6)
    profile = dict(driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                   dtype=array.dtype, transform=transform, crs=_rio_crs(crs), nodata=nodata,
                   compress=codec, num_threads="ALL_CPUS")
    if codec == "zstd":
        profile.update(zstd_level=level,
                       predictor=3 if array.dtype == np.float32 else 1)
    else:
        profile.update(zlevel=level, predictor=2 if array.dtype.kind in "iu" else 3)
    if array.shape[0] >= 256 and array.shape[1] >= 256:
        profile.update(tiled=True, blockxsize=256, blockysize=256)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **profile) as ds:
            # a (1, rows, cols) view: written as it is (a band index would copy the grid)
            ds.write(np.ascontiguousarray(array)[np.newaxis], [1])
            if tags:
                ds.update_tags(**{k: (v if isinstance(v, str) else json.dumps(v))
                                  for k, v in tags.items()})
    return Path(path)


def _rio_crs(crs):
    from rasterio.crs import CRS

    if crs is None:
        return None
    if hasattr(crs, "to_wkt"):
        return CRS.from_wkt(crs.to_wkt())
    return CRS.from_user_input(crs)


def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o)}")


def write_json(path, obj):
    """Write JSON (sorted keys, UTF-8) atomically."""
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="utf-8") as f:
            json.dump(obj, f, indent=2, sort_keys=True, default=_json_default,
                      allow_nan=True)
            f.write("\n")
    return Path(path)


def write_csv(path, frame):
    """Write a pandas DataFrame as CSV atomically (no index, floats as ``%.10g``, missing
    values empty, ``\n`` line ends): the bytes of pandas'
    ``to_csv(index=False, float_format="%.10g", lineterminator="\n")``."""
    with atomic_path(path) as tmp:
        text = _csv_text(frame)
        if text is None:  # column names that are not text: pandas writes them
            _floats_as_text(frame).to_csv(tmp, index=False, lineterminator="\n")
        else:
            with open(tmp, "w", encoding="utf-8", newline="") as fh:
                fh.writelines(text)
    return Path(path)


def _quote(text: str) -> str:
    """A CSV field as pandas (the csv module, QUOTE_MINIMAL) writes it."""
    if "," in text or '"' in text or "\n" in text or "\r" in text:
        return '"' + text.replace('"', '""') + '"'
    return text


def _column_text(values):
    """One column as a list of CSV fields, or None for a kind left to pandas."""
    kind = values.dtype.kind
    if kind == "f":
        fmt = "%.10g".__mod__
        return [fmt(x) if x == x else "" for x in values.tolist()]
    if kind in "iu":
        return list(map(str, values.tolist()))
    if kind == "b":
        return ["True" if x else "False" for x in values.tolist()]
    if kind == "O":
        return _object_text(values)
    return None


def _object_text(values):
    """Fields of an object column of text, integers and booleans (missing values empty),
    or None when it holds anything else (numbers with decimals, dates, ...)."""
    import numpy as np
    import pandas as pd

    vals = values.tolist()
    missing = pd.isna(values)
    floats = False
    for tp in set(map(type, vals)):
        if issubclass(tp, (float, np.floating)):
            floats = True  # allowed only as missing values (NaN)
        elif not (issubclass(tp, (str, int, np.integer, np.bool_)) or tp is type(None)
                  or tp is type(pd.NA)):
            return None
    if floats and any(isinstance(x, (float, np.floating)) and not m
                      for x, m in zip(vals, missing.tolist())):
        return None
    text = list(map(str, vals))
    for i in np.flatnonzero(missing).tolist():
        text[i] = ""
    joined = "".join(text)
    if "," in joined or '"' in joined or "\n" in joined or "\r" in joined:
        text = [_quote(x) for x in text]
    return text


def _csv_text(frame):
    """The CSV text of ``frame`` as chunks of lines, formatted column by column (the tables
    of a 1 000-outlet job hold millions of values; pandas' per-value writer took most of
    their writing time), or None for column names that are not text (pandas writes
    those)."""
    if not all(isinstance(c, str) for c in frame.columns) or not len(frame.columns):
        return None
    return [csv_header(frame.columns), csv_rows(frame, list(frame.columns))]


def csv_header(columns) -> str:
    """The header line of a CSV table with these columns."""
    return ",".join(_quote(str(c)) for c in columns) + "\n"


# tables of fewer values are formatted in Python (a first run on a new machine compiles the
# kernels in about two seconds, which a small table does not earn back)
_KERNEL_MIN_VALUES = 1_000


def csv_rows(frame, columns) -> str:
    """The rows of ``frame`` as CSV text in the order of ``columns`` (a column the frame
    lacks is written empty), formatted as :func:`write_csv` does. Per-outlet work formats
    its rows with this in the worker processes, and the table is streamed
    (:class:`CsvStream`).

    Numbers, text and booleans are formatted and joined by compiled kernels
    (``io/_csv_text.py``), which give the same bytes as the per-value path
    (:func:`_rows_by_lists`, kept for the rare column they leave to it); a column of
    another kind (dates, decimals in an object column) leaves the rows to pandas."""
    from . import _csv_text as K

    n = len(frame)
    if not n:
        return ""
    if len(columns) == 1 or n * len(columns) < _KERNEL_MIN_VALUES:
        return _rows_by_lists(frame, columns)
    if frame.attrs:  # pandas deep-copies them into every column taken
        frame = frame.copy(deep=False)
        frame.attrs = {}
    bufs = []
    for c in columns:
        if c not in frame.columns:
            bufs.append(b"\0" * n)
            continue
        values = frame[c].to_numpy()
        kind = values.dtype.kind
        if kind == "f":
            b = K.float_fields(values)
        elif kind in "iu":
            b = K.int_fields(values)
        else:
            text = _column_text(values)
            if text is None:
                return _rows_by_pandas(frame, columns)
            b = K.text_fields(text)
        if b is None:  # a NUL in a text, or integers beyond int64
            return _rows_by_lists(frame, columns)
        bufs.append(b)
    return K.rows_text(bufs, n)


def _rows_by_lists(frame, columns) -> str:
    """:func:`csv_rows` value by value in Python."""
    n = len(frame)
    cols = []
    for c in columns:
        if c in frame.columns:
            text = _column_text(frame[c].to_numpy())
            if text is None:
                return _rows_by_pandas(frame, columns)
        else:
            text = [""] * n
        cols.append(text)
    if len(cols) == 1:  # the csv module writes a lone empty field as "", not an empty line
        cols[0] = [x if x else '""' for x in cols[0]]
    return "\n".join(map(",".join, zip(*cols))) + "\n"


def _rows_by_pandas(frame, columns) -> str:
    """:func:`csv_rows` by pandas' writer (floats as :func:`write_csv` gives them)."""
    return _floats_as_text(frame.reindex(columns=columns)).to_csv(
        header=False, index=False, lineterminator="\n")


class CsvStream:
    """A CSV table written piece by piece to a temporary file beside ``path`` and renamed
    into place by :meth:`close` (removed by :meth:`discard`): a table of millions of rows
    never has to be held whole."""

    def __init__(self, path, columns):
        self.path = Path(path)
        self.columns = list(columns)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        # a free name beside the target, then a file made as every other output is (the
        # user's umask decides its permissions, as for the files of atomic_path)
        fd, tmp = tempfile.mkstemp(prefix=f".{self.path.name}.",
                                   suffix=".part" + self.path.suffix, dir=self.path.parent)
        os.close(fd)
        os.unlink(tmp)
        self._tmp = Path(tmp)
        self._fh = open(self._tmp, "x", encoding="utf-8", newline="")
        self._fh.write(csv_header(self.columns))

    def write_text(self, text: str) -> None:
        """Append rows already formatted by :func:`csv_rows` for these columns."""
        self._fh.write(text)

    def close(self) -> Path:
        self._fh.close()
        os.replace(self._tmp, self.path)
        return self.path

    def discard(self) -> None:
        with contextlib.suppress(OSError):
            self._fh.close()
        with contextlib.suppress(OSError):
            os.unlink(self._tmp)


def _floats_as_text(frame):
    """Float columns formatted ``%.10g`` (NaN empty), the bytes pandas writes with
    ``float_format="%.10g"`` (for frames the fast writer leaves to pandas)."""
    import numpy as np

    cols = [c for c in frame.columns if frame[c].dtype.kind == "f"]
    if not cols:
        return frame
    out = frame.copy(deep=False)
    fmt = "%.10g".__mod__
    for c in cols:
        v = frame[c].to_numpy()
        text = np.array([fmt(x) for x in v.tolist()], dtype=object)
        text[np.isnan(v)] = ""
        out[c] = text
    return out


def provenance(parameters: dict, inputs: dict | None = None, crs=None, shape=None,
               **extra) -> dict:
    """Provenance block carried by every output: version, parameters, input hashes, CRS."""
    from .. import __version__

    out = {"software": "basinkit", "version": __version__, "parameters": parameters,
           "inputs": inputs or {}}
    if crs is not None:
        out["crs"] = crs.to_wkt() if hasattr(crs, "to_wkt") else str(crs)
        if hasattr(crs, "to_epsg") and crs.to_epsg():
            out["crs_epsg"] = crs.to_epsg()
    if shape is not None:
        out["grid_shape"] = [int(s) for s in shape]
    out.update(extra)
    return out
