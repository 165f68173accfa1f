"""The tile layout and the two tile stores (in memory, on disk)."""

import numpy as np
import pytest

from basinkit.io.tile_folder import TileFolder
from basinkit.tiles import MemoryTiles, TileLayout


@pytest.mark.parametrize("shape,tile", [((7, 11), 3), ((8, 8), 4), ((5, 9), 1), ((6, 6), 10)])
def test_split_join_covers_every_cell_once(shape, tile):
    """Closed form: the tiles partition the grid (tiles need not divide it)."""
    lay = TileLayout.square(*shape, tile)
    grid = np.arange(shape[0] * shape[1]).reshape(shape)
    parts = lay.split(grid)
    assert sum(p.size for p in parts.values()) == grid.size
    assert np.array_equal(lay.join(parts), grid)
    assert lay.n_tile_rows == -(-shape[0] // tile)
    for (ti, tj), p in parts.items():
        r0, r1, c0, c1 = lay.window(ti, tj)
        assert lay.tile_of(r0, c0) == (ti, tj) and lay.tile_of(r1 - 1, c1 - 1) == (ti, tj)


def test_neighbours_in_package_order():
    lay = TileLayout.square(9, 9, 3)
    ks = [(k, a, b) for k, a, b in lay.neighbours(1, 1)]
    assert [k for k, _, _ in ks] == list(range(8))
    assert ks[0][1:] == (0, 1) and ks[2][1:] == (1, 2) and ks[4][1:] == (2, 1)
    assert [k for k, _, _ in lay.neighbours(0, 0)] == [2, 3, 4]


@pytest.mark.parametrize("store_kind", ["memory", "disk"])
def test_store_round_trip(tmp_path, store_kind):
    lay = TileLayout(5, 7, 2, 3)
    store = MemoryTiles(lay) if store_kind == "memory" else TileFolder(tmp_path / "t", lay)
    a = np.arange(6, dtype=np.float32).reshape(2, 3)
    assert not store.has("z", 0, 0)
    store.write("z", 0, 0, a)
    assert store.has("z", 0, 0)
    assert np.array_equal(store.read("z", 0, 0), a)
    with pytest.raises(ValueError):
        store.write("z", 2, 2, a)  # the last tile is 1 x 1
    with pytest.raises(KeyError):
        store.read("z", 1, 1)
    store.write_meta("graph", {"edges": np.array([1, 2])})
    assert store.has_meta("graph")
    assert np.array_equal(store.read_meta("graph")["edges"], [1, 2])


def test_disk_store_resumes_and_refuses_another_layout(tmp_path):
    lay = TileLayout(4, 4, 2, 2)
    s = TileFolder(tmp_path / "t", lay)
    s.write("z", 1, 1, np.ones((2, 2)))
    again = TileFolder.open(tmp_path / "t")
    assert again.layout == lay and again.has("z", 1, 1)
    assert not list((tmp_path / "t").rglob("*.tmp*"))
    with pytest.raises(ValueError, match="another layout"):
        TileFolder(tmp_path / "t", TileLayout(4, 4, 3, 3))
