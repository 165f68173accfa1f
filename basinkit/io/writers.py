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

__all__ = ["atomic_path", "write_geotiff", "write_json", "write_csv", "provenance",
           "prepare_output_dir", "check_output"]


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


def write_geotiff(path, array, transform, crs, nodata=None, tags=None):
    """Write one band as a tiled, compressed GeoTIFF with the given georeferencing."""
    import rasterio

    array = np.asarray(array)
    profile = dict(driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                   dtype=array.dtype, transform=transform, crs=_rio_crs(crs), nodata=nodata,
                   compress="deflate", predictor=2 if array.dtype.kind in "iu" else 3,
                   zlevel=6)
    if array.shape[0] >= 256 and array.shape[1] >= 256:
        profile.update(tiled=True, blockxsize=256, blockysize=256)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **profile) as ds:
            ds.write(array, 1)
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
    """Write a pandas DataFrame as CSV atomically (no index, stable float format)."""
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    return Path(path)


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
