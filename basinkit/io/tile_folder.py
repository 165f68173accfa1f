"""The tile store on disk: a working folder of per-tile ``.npy`` files and small metadata
files, each written to a temporary name and renamed, so that a killed run leaves only
complete tiles behind and can resume from them.

Layout of the folder::

    layout.json                 the TileLayout (rows, columns, tile size)
    LAYER/TI_TJ.npy             one array per tile and layer
    meta/NAME.pkl               small objects: border graphs, per-tile summaries

It stands in for :class:`basinkit.tiles.MemoryTiles` (same methods), which the algorithms of
the tiles room take.
"""

from __future__ import annotations

import json
import os
import pickle
from pathlib import Path

import numpy as np

from ..tiles.layout import TileLayout

__all__ = ["TileFolder"]


def _replace(tmp: Path, final: Path) -> None:
    try:
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


class TileFolder:
    """Per-tile arrays in ``folder``. An existing folder is reused only if its layout is the
    same (that is how a killed run resumes); otherwise ``ValueError``."""

    def __init__(self, folder, layout: TileLayout):
        self.folder = Path(folder)
        self.layout = layout
        self.folder.mkdir(parents=True, exist_ok=True)
        lay = self.folder / "layout.json"
        if lay.exists():
            found = TileLayout.from_dict(json.loads(lay.read_text()))
            if found != layout:
                raise ValueError(f"the tile folder {str(self.folder)!r} holds tiles of another layout "
                                 f"({found}); use an empty folder or remove it")
        else:
            tmp = lay.with_name(f".layout.json.{os.getpid()}.tmp")
            tmp.write_text(json.dumps(layout.to_dict()))
            _replace(tmp, lay)

    @classmethod
    def open(cls, folder) -> "TileFolder":
        """An existing tile folder, its layout read from it."""
        lay = Path(folder) / "layout.json"
        return cls(folder, TileLayout.from_dict(json.loads(lay.read_text())))

    def path(self, layer: str, ti: int, tj: int) -> Path:
        return self.folder / layer / f"{ti}_{tj}.npy"

    def has(self, layer: str, ti: int, tj: int) -> bool:
        return self.path(layer, ti, tj).exists()

    def read(self, layer: str, ti: int, tj: int, *, mmap: bool = False) -> np.ndarray:
        p = self.path(layer, ti, tj)
        try:
            return np.load(p, mmap_mode="r" if mmap else None, allow_pickle=False)
        except FileNotFoundError:
            raise KeyError(f"tile ({ti}, {tj}) of layer {layer!r} has not been written") from None

    def write(self, layer: str, ti: int, tj: int, array: np.ndarray) -> None:
        expected = self.layout.tile_shape(ti, tj)
        if array.shape[:2] != expected:
            raise ValueError(f"tile ({ti}, {tj}) of layer {layer!r} has shape {array.shape}, expected {expected}")
        final = self.path(layer, ti, tj)
        final.parent.mkdir(exist_ok=True)
        tmp = final.with_name(f".{final.stem}.{os.getpid()}.tmp.npy")
        with open(tmp, "wb") as fh:
            np.save(fh, np.ascontiguousarray(array), allow_pickle=False)
        _replace(tmp, final)

    def _meta_path(self, name: str) -> Path:
        return self.folder / "meta" / f"{name}.pkl"

    def has_meta(self, name: str) -> bool:
        return self._meta_path(name).exists()

    def read_meta(self, name: str):
        with open(self._meta_path(name), "rb") as fh:
            return pickle.load(fh)

    def write_meta(self, name: str, obj) -> None:
        final = self._meta_path(name)
        final.parent.mkdir(exist_ok=True)
        tmp = final.with_name(f".{name}.{os.getpid()}.tmp")
        with open(tmp, "wb") as fh:
            pickle.dump(obj, fh, protocol=pickle.HIGHEST_PROTOCOL)
        _replace(tmp, final)
