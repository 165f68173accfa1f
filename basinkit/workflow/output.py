"""The output folder: the one place where the workflow steps write files.

Every step receives an :class:`OutputFolder` and writes through it (CSV, JSON, GeoTIFF,
GeoPackage, PNG), so that the folder knows every file it holds (for provenance and for
removing what an earlier run left) and so that the target can later be swapped for a
staging folder that is renamed into place when the run is complete. Each file is written
beside its final name and renamed (see :mod:`basinkit.io.writers`), so an interrupted run
never leaves a half-written file under the final name.
"""

from __future__ import annotations

import contextlib
from pathlib import Path

from ..errors import OutputError, OutputExistsError

__all__ = ["OutputFolder", "fixed_gpkg_timestamp", "png_bytes", "GPKG_TIMESTAMP"]

# the timestamp GDAL writes into GeoPackage tables; fixed, so that the same inputs give a
# byte-identical file
GPKG_TIMESTAMP = "2000-01-01T00:00:00.000Z"


@contextlib.contextmanager
def fixed_gpkg_timestamp():
    """Within this block GDAL stamps GeoPackage contents with :data:`GPKG_TIMESTAMP`."""
    import pyogrio

    old = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": GPKG_TIMESTAMP})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": old})


class OutputFolder:
    """A folder the steps write into, recording every file written.

    Parameters
    ----------
    root : str or Path
        The folder.
    overwrite : bool
        Allow a folder that already holds files (files of the same name are replaced).

    Notes
    -----
    :meth:`check` refuses a folder that holds files (unless ``overwrite``) without creating
    anything, so that a command can check its output before doing any work; the folder
    itself is created on the first write. :meth:`sub` gives a view on a subfolder that
    shares the record (a job writes the flow folder into ``flow/``).
    """

    def __init__(self, root, overwrite: bool = False):
        self.root = Path(root)
        self.overwrite = bool(overwrite)
        self._prefix = ""
        self._files: dict = {}

    def __repr__(self):
        return f"OutputFolder({str(self.root / self._prefix)!r})"

    # ------------------------------------------------------------------ the folder
    @property
    def folder(self) -> Path:
        """The folder this view writes into."""
        return self.root / self._prefix if self._prefix else self.root

    def check(self):
        """Refuse an existing file in the way, or a folder that already holds files unless
        ``overwrite``; creates nothing."""
        p = self.folder
        if p.exists():
            if not p.is_dir():
                raise OutputExistsError(f"{str(p)!r} exists and is not a folder; choose "
                                        "another output")
            if not self.overwrite and any(p.iterdir()):
                raise OutputExistsError(f"the folder {str(p)!r} already holds files; "
                                        "choose another output or pass --overwrite to "
                                        "replace them")
        return self

    def open(self):
        """Check the folder and create it."""
        self.check()
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create the output folder {str(self.folder)!r}: "
                              f"{exc.strerror or exc}") from None
        return self

    def sub(self, name) -> "OutputFolder":
        """A view on the subfolder ``name`` sharing this folder's record of files."""
        view = OutputFolder.__new__(OutputFolder)
        view.root = self.root
        view.overwrite = self.overwrite
        view._prefix = f"{self._prefix}/{name}".strip("/")
        view._files = self._files
        return view

    def name_of(self, name) -> str:
        """The name of a file relative to the root folder (as recorded)."""
        return f"{self._prefix}/{name}".strip("/") if self._prefix else str(name)

    def path(self, name) -> Path:
        """Target path of ``name`` (its parent folders are created)."""
        p = self.folder / name
        try:
            p.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create the folder {str(p.parent)!r}: "
                              f"{exc.strerror or exc}") from None
        return p

    def record(self, name) -> Path:
        """Record ``name`` (relative to this view) as written by this run."""
        p = self.folder / name
        self._files[self.name_of(name)] = p
        return p

    @property
    def files(self) -> dict:
        """``{name relative to the root: Path}`` of every file written, in writing order."""
        return dict(self._files)

    def hashes(self) -> dict:
        """``{name: SHA-256}`` of every file written (sorted by name)."""
        from ..io.hashing import file_sha256

        return {k: file_sha256(p) for k, p in sorted(self._files.items()) if p.is_file()}

    # ------------------------------------------------------------------ writers
    @contextlib.contextmanager
    def _writing(self, name):
        target = self.path(name)
        try:
            yield target
        except OSError as exc:
            if isinstance(exc, (OutputError, OutputExistsError)):
                raise
            raise OutputError(f"cannot write {str(target)!r}: {exc.strerror or exc}; check "
                              "the folder's permissions and free space") from None
        self.record(name)

    def csv(self, name, frame) -> Path:
        """Write a DataFrame as CSV (no index, ``%.10g`` floats, ``\\n`` line ends)."""
        from ..io.writers import write_csv

        with self._writing(name) as p:
            write_csv(p, frame)
        return p

    def json(self, name, obj) -> Path:
        """Write JSON (sorted keys, UTF-8)."""
        from ..io.writers import write_json

        with self._writing(name) as p:
            write_json(p, obj)
        return p

    def text(self, name, text: str) -> Path:
        """Write a UTF-8 text file."""
        from ..io.writers import atomic_path

        with self._writing(name) as p:
            with atomic_path(p) as tmp:
                Path(tmp).write_text(text, encoding="utf-8")
        return p

    def geotiff(self, name, array, transform, crs, nodata=None, tags=None) -> Path:
        """Write one band as a tiled, compressed GeoTIFF."""
        from ..io.writers import write_geotiff

        with self._writing(name) as p:
            write_geotiff(p, array, transform, crs, nodata=nodata, tags=tags)
        return p

    def gpkg(self, name, layers: dict, metadata: dict | None = None,
             geometry_types: dict | None = None) -> Path:
        """Write layers into one GeoPackage, byte-identical for the same data.

        Parameters
        ----------
        layers : dict
            ``{layer name: GeoDataFrame or DataFrame}`` in writing order; a plain DataFrame
            becomes a table without geometry.
        metadata : dict, optional
            Layer metadata (e.g. cautions, provenance) given to every layer.
        geometry_types : dict, optional
            ``{layer name: "Point" | "LineString" | ...}`` for layers that may be empty.
        """
        import pyogrio

        from ..io.writers import atomic_path

        geometry_types = geometry_types or {}
        with self._writing(name) as p, fixed_gpkg_timestamp():
            with atomic_path(p) as tmp:
                for i, (layer, frame) in enumerate(layers.items()):
                    kw = {}
                    if hasattr(frame, "geometry") and frame.geometry.name in frame:
                        gt = geometry_types.get(layer)
                        if gt is None and not len(frame):
                            gt = "Unknown"
                        if gt is not None:
                            kw["geometry_type"] = gt
                    pyogrio.write_dataframe(_plain_strings(frame), tmp, layer=layer,
                                            driver="GPKG", append=i > 0,
                                            layer_metadata=metadata, **kw)
        return p

    def figure(self, name, fig, dpi: int = 100) -> Path:
        """Write a matplotlib figure as PNG (no timestamp in the file), then close it."""
        return self.data(name, png_bytes(fig, dpi))

    def data(self, name, data: bytes) -> Path:
        """Write bytes (e.g. a PNG drawn in a worker process by :func:`png_bytes`)."""
        from ..io.writers import atomic_path

        with self._writing(name) as p:
            with atomic_path(p) as tmp:
                Path(tmp).write_bytes(data)
        return p

    def adopt(self, name) -> Path:
        """Record a file that another writer put at :meth:`path` ``(name)``."""
        return self.record(name)


def png_bytes(fig, dpi: int = 100) -> bytes:
    """A matplotlib figure as PNG bytes (no timestamp, so the same figure gives the same
    bytes); the figure is closed."""
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    _close(fig)
    return buf.getvalue()


def _close(fig):
    try:
        import matplotlib.pyplot as plt

        plt.close(fig)
    except Exception:  # noqa: BLE001 - a bare Figure is not registered with pyplot
        pass


def _plain_strings(frame):
    """Object columns as plain strings (empty for missing), so that GDAL sees one type."""
    import pandas as pd

    out = frame
    for c in frame.columns:
        if c == getattr(frame, "_geometry_column_name", None):
            continue
        s = frame[c]
        if s.dtype == object or isinstance(s.dtype, pd.StringDtype):
            if out is frame:
                out = frame.copy()
            out[c] = s.map(lambda v: "" if v is None or (isinstance(v, float) and v != v)
                           else str(v)).astype(object)
    return out
