"""The output folder: the one place where the workflow steps write files.

Every step receives an :class:`OutputFolder` and writes through it (CSV, JSON, GeoTIFF,
GeoPackage, PNG), so that the folder knows every file it holds (for provenance and for
the manifest that says what a later ``--overwrite`` may replace), and so that the run is
written into a staging folder that is swapped in when complete
(:mod:`basinkit.io.transaction`). Each file is written
beside its final name and renamed (see :mod:`basinkit.io.writers`), so an interrupted run
never leaves a half-written file under the final name.
"""

from __future__ import annotations

import contextlib
from pathlib import Path

from ..errors import OutputError, OutputExistsError

__all__ = ["OutputFolder", "fixed_gpkg_timestamp", "png_bytes", "GPKG_TIMESTAMP",
           "settle_open_folders"]

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
    """A folder the steps write into, recording every file written, changed as a
    transaction (DESIGN.md, the output contract).

    Parameters
    ----------
    root : str or Path
        The folder.
    overwrite : bool
        Allow a folder that already holds files: the files an earlier run recorded (and
        that are unchanged since) are replaced; anything else is kept and named.
    reporter : optional
        Where the folder's notes go (files kept, leftovers of killed runs cleaned up);
        :meth:`open` and :meth:`commit` may also be given one.

    Notes
    -----
    :meth:`check` refuses a folder that holds files (unless ``overwrite``) without creating
    anything, so that a command can check its output before doing any work.
    :meth:`open` takes the folder's lock and starts a staging folder beside it
    (:class:`basinkit.io.transaction.FolderTransaction`): every step writes there, and
    :meth:`commit` swaps it in, so that a failed or killed run leaves the previous run as it
    was. Use it as ``with out.open(reporter): ...`` (commit at the end of the block, abort on
    an error). :meth:`sub` gives a view on a subfolder that shares the record (a job writes
    the flow folder into ``flow/``).
    """

    def __init__(self, root, overwrite: bool = False, reporter=None):
        self.root = Path(root)
        self.overwrite = bool(overwrite)
        self._prefix = ""
        self._files: dict = {}
        self._shared: dict = {"tx": None, "reporter": reporter}

    def __repr__(self):
        return f"OutputFolder({str(self.root / self._prefix)!r})"

    # ------------------------------------------------------------------ the folder
    @property
    def base(self) -> Path:
        """Where the files go now: the staging folder while a run is open, else the root."""
        tx = self._shared["tx"]
        return tx.staging if tx is not None and tx.active else self.root

    @property
    def folder(self) -> Path:
        """The folder this view writes into."""
        return self.base / self._prefix if self._prefix else self.base

    @property
    def destination(self) -> Path:
        """Where this view's files will be once the run is swapped in (for messages)."""
        return self.root / self._prefix if self._prefix else self.root

    def check(self):
        """Refuse an existing file in the way, or a folder that already holds files unless
        ``overwrite``; creates nothing."""
        from ..io.transaction import check_folder, real_target

        from ..io.lock import OutputLock

        if self._prefix:
            check_folder(self.root / self._prefix, self.overwrite)
            return self
        target = real_target(self.root)
        check_folder(target, self.overwrite)
        OutputLock(target).check()  # a run writing there now: say so before any work
        return self

    def open(self, reporter=None):
        """Check the folder, take its lock and start the staging folder the steps write
        into (see :meth:`commit`). Returns the folder (a context manager)."""
        from ..io.transaction import FolderTransaction

        self.check()
        tx = FolderTransaction(self.root, self.overwrite).begin()
        self._shared["tx"] = tx
        _OPEN.append(self)
        reporter = reporter or self._shared.get("reporter")
        self._shared["reporter"] = reporter
        for line in tx.recovered:
            if reporter is not None:
                reporter.info(line)
        if tx.lock.taken_over and reporter is not None:
            o = tx.lock.taken_over
            reporter.info(f"took over the lock of a run that is gone (pid {o.get('pid')}, "
                          f"started {o.get('started')})")
        return self

    def commit(self, reporter=None) -> list:
        """Swap the staging folder in: the run's files replace the earlier run's; the
        user's files and edited outputs of the old folder are kept (and named in a warning).
        Returns ``[(name, kept as, reason)]``."""
        tx = self._shared["tx"]
        if tx is None or not tx.active:
            return []
        _forget(self)
        kept = tx.commit(self.hashes())
        rep = reporter or self._shared.get("reporter")
        if kept and rep is not None:
            names = ", ".join(n if n == k else f"{n} (as {k})" for n, k, _ in kept[:10])
            more = f" and {len(kept) - 10} more" if len(kept) > 10 else ""
            rep.warn(f"kept {len(kept)} file(s) in {self.root} that this run did not write "
                     f"(the user's own or edited since): {names}{more}")
        return kept

    def abort(self):
        """Drop the staging folder and release the lock; the folder stays as it was."""
        tx = self._shared["tx"]
        _forget(self)
        if tx is not None and tx.active:
            tx.abort()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.commit()
        else:
            self.abort()
        return False

    def sub(self, name) -> "OutputFolder":
        """A view on the subfolder ``name`` sharing this folder's record of files."""
        view = OutputFolder.__new__(OutputFolder)
        view.root = self.root
        view.overwrite = self.overwrite
        view._prefix = f"{self._prefix}/{name}".strip("/")
        view._files = self._files
        view._shared = self._shared
        return view

    def name_of(self, name) -> str:
        """The name of a file relative to the root folder (as recorded)."""
        return f"{self._prefix}/{name}".strip("/") if self._prefix else str(name)

    def path(self, name) -> Path:
        """Target path of ``name`` (its parent folders are created)."""
        from ..errors import os_error_message

        p = self.folder / name
        try:
            p.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(os_error_message(exc, p.parent, "create the folder")) \
                from None
        return p

    def record(self, name) -> Path:
        """Record ``name`` (relative to this view) as written by this run (its hash, if
        taken before, is dropped: the file is new)."""
        self._files[self.name_of(name)] = None
        return self.folder / name

    @property
    def files(self) -> dict:
        """``{name relative to the root: Path}`` of every file written, in writing order
        (in the staging folder while the run is open)."""
        return {k: self.base / k for k in self._files}

    def hashes(self) -> dict:
        """``{name: SHA-256}`` of every file written (sorted by name)."""
        from ..io.hashing import file_sha256

        # each file is hashed once: provenance.json and the manifest both ask, and the
        # runner asks again after the report (only files written since are hashed then)
        out = {}
        for k, p in sorted(self.files.items()):
            if self._files[k] is None and p.is_file():
                self._files[k] = file_sha256(p)
            if self._files[k] is not None:
                out[k] = self._files[k]
        return out

    # ------------------------------------------------------------------ writers
    @contextlib.contextmanager
    def _writing(self, name):
        target = self.path(name)
        try:
            yield target
        except (OutputError, OutputExistsError):
            raise
        except Exception as exc:  # noqa: BLE001 - only the OS's and GDAL's errors
            if not _is_os_error(exc):
                raise
            from ..errors import os_error_message

            raise OutputError(os_error_message(exc, self.root / self.name_of(name))) \
                from None
        self.record(name)

    def csv(self, name, frame) -> Path:
        """Write a DataFrame as CSV (no index, ``%.10g`` floats, ``\\n`` line ends)."""
        from ..io.writers import write_csv

        with self._writing(name) as p:
            write_csv(p, frame)
        return p

    @contextlib.contextmanager
    def csv_stream(self, name, columns):
        """A CSV table written piece by piece (:class:`basinkit.io.writers.CsvStream`):
        ``with out.csv_stream("profile.csv", COLUMNS) as table: table.write_text(...)``.
        The file appears, complete, when the block ends without an error."""
        from ..io.writers import CsvStream

        with self._writing(name) as p:
            table = CsvStream(p, columns)
            try:
                yield table
            except BaseException:
                table.discard()
                raise
            table.close()

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

    @contextlib.contextmanager
    def gpkg_stream(self, name, schema: dict, metadata: dict | None = None,
                    geometry_types: dict | None = None):
        """A GeoPackage written chunk by chunk: ``schema`` is ``{layer: empty
        GeoDataFrame}`` giving the layers, in order, with their columns and types; the
        block gets a ``write(layer, frame)`` that appends rows (cast to the schema's
        types). The file appears, complete, when the block ends without an error; the
        same chunks give the same bytes (:func:`fixed_gpkg_timestamp`)."""
        import pyogrio

        from ..io.writers import atomic_path

        geometry_types = geometry_types or {}
        with self._writing(name) as p, atomic_path(p) as tmp:
            for i, (layer, empty) in enumerate(schema.items()):
                kw = ({"geometry_type": geometry_types[layer]}
                      if layer in geometry_types else {})
                with fixed_gpkg_timestamp():
                    pyogrio.write_dataframe(_plain_strings(empty), tmp, layer=layer,
                                            driver="GPKG", append=i > 0,
                                            layer_metadata=metadata, **kw)

            def write(layer, frame):
                if not len(frame):
                    return
                types = schema[layer].dtypes
                frame = frame[list(schema[layer].columns)]
                frame = frame.astype({c: t for c, t in types.items()
                                      if c != schema[layer].geometry.name})
                with fixed_gpkg_timestamp():
                    pyogrio.write_dataframe(_plain_strings(frame), tmp, layer=layer,
                                            driver="GPKG", append=True)

            yield write

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


# folders opened and not yet committed or aborted (see settle_open_folders)
_OPEN: list = []


def _forget(folder):
    _OPEN[:] = [f for f in _OPEN if f is not folder]


def settle_open_folders(ok: bool, reporter=None):
    """Commit (``ok``) or abort every output folder opened and not yet committed: the
    command line's safety net for a command that calls ``out.open()`` without ``with``."""
    while _OPEN:
        f = _OPEN[-1]
        if ok:
            f.commit(reporter)
        else:
            f.abort()
        _forget(f)


def _is_os_error(exc) -> bool:
    """An error of the operating system, or GDAL's report of one (rasterio's and pyogrio's
    I/O errors), rather than a bug."""
    if isinstance(exc, OSError):
        return True
    mod = type(exc).__module__ or ""
    return mod.startswith(("rasterio", "pyogrio")) and any(
        w in str(exc).lower() for w in ("space", "permission", "write", "i/o", "disk",
                                        "read-only", "too long", "no such file"))


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
