"""Generate the bundled demo basin: a fictional upland valley with a proposed road crossing.

Everything here is invented. The terrain is grown from a tilted, noisy surface by a simple
landscape-evolution model: uniform uplift, detachment-limited stream-power incision
(E = K A^m S^n with n = 1, solved implicitly along the D8 stack after Braun & Willett 2013)
and linear hillslope diffusion, with the southern edge held as base level. Flow is routed
with basinkit's own ``route`` at every step. Afterwards a few closed depressions (a kettle
pond, a borrow pit and a small sinkhole) are pressed in, and a road embankment is built
across the main valley; the culvert that is meant to pass the stream under it is written as
a line layer so that it can be burned into the DEM.

Run from anywhere (the outputs land beside this script, or in the folder given)::

    python demo_rasters/make_demo.py [OUTPUT_FOLDER]

The output is deterministic: the same seed gives byte-identical files.

References
----------
Braun, J., Willett, S. D. (2013). A very efficient O(n), implicit and parallel method to
solve the stream power equation governing fluvial incision and landscape evolution.
Geomorphology 180-181:170-179.
Howard, A. D. (1994). A detachment-limited model of drainage basin evolution. Water
Resources Research 30:2261-2285.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from affine import Affine
from numba import njit

from basinkit import route, terrain_from_array
from basinkit.io.writers import write_csv, write_geotiff, write_json

HERE = Path(__file__).resolve().parent
SEED = 20261201
NROWS = NCOLS = 300
CELL = 10.0  # m
CRS = "EPSG:32633"  # WGS 84 / UTM zone 33N (the place itself is fictional)
X0, Y0 = 512_000.0, 5_206_000.0  # upper-left corner
TRANSFORM = Affine(CELL, 0.0, X0, 0.0, -CELL, Y0)

# landscape-evolution parameters (chosen for a plausible upland relief, not calibrated)
UPLIFT = 2e-3        # m / yr
K_EROSION = 8e-5     # 1 / yr  (with m = 0.5, A in m²)
M_EXPONENT = 0.5
DIFFUSIVITY = 0.01   # m² / yr
DT = 5000.0          # yr
STEPS = 100

RELIEF_SCALE = 0.5        # vertical scaling of the evolved relief
EDGE_BAND = 6             # cells along the north, east and west edges that drain outward
EMBANKMENT_HEIGHT = 8.0   # m above the valley floor at the crossing
ROAD_HALF_WIDTH = 12.0    # m, crest
SIDE_SLOPE = 0.5          # m per m (1 vertical : 2 horizontal)


def fractal_noise(rng, n, m, beta=1.8):
    """Spectral-synthesis noise with a power spectrum ~ k^-2β, scaled to unit range."""
    fy = np.fft.fftfreq(n)[:, None]
    fx = np.fft.fftfreq(m)[None, :]
    k = np.sqrt(fx ** 2 + fy ** 2)
    k[0, 0] = 1.0
    spec = (rng.normal(size=(n, m)) + 1j * rng.normal(size=(n, m))) / k ** beta
    spec[0, 0] = 0.0
    z = np.real(np.fft.ifft2(spec))
    return (z - z.min()) / np.ptp(z)


@njit(cache=False)
def _implicit_incision(z, receiver, stack, area, dist, fixed, uplift, k, m, dt):
    """One implicit stream-power step (n = 1) over the stack, downstream to upstream."""
    for j in range(stack.shape[0]):
        i = stack[j]
        if fixed[i]:
            continue
        r = receiver[i]
        if r < 0:
            z[i] += uplift * dt  # an exit on a rising edge: no channel to cut it
            continue
        f = k * dt * area[i] ** m / dist[i]
        z[i] = (z[i] + uplift * dt + f * z[r]) / (1.0 + f)


def initial_surface(rng):
    rows = np.arange(NROWS)[:, None].astype(float)
    cols = np.arange(NCOLS)[None, :].astype(float)
    north = (NROWS - 1 - rows) / (NROWS - 1)          # 0 at the south edge, 1 at the north
    across = (cols - 0.55 * NCOLS) / (0.5 * NCOLS)     # a broad trough slightly east of centre
    z = 420.0 + 60.0 * north + 25.0 * across ** 2
    # a rim along the north, east and west edges keeps the valley draining south
    rim = np.exp(-np.minimum(np.minimum(cols, NCOLS - 1 - cols), NROWS - 1 - rows) / 8.0)
    z = z + 40.0 * rim
    z = z + 12.0 * fractal_noise(rng, NROWS, NCOLS)
    return z


def evolve(z, rng):
    fixed = np.zeros((NROWS, NCOLS), dtype=bool)
    fixed[-1, :] = True                                  # the south edge is base level
    fixedf = fixed.ravel()
    for _ in range(STEPS):
        # route over a slightly jittered copy so that channels do not lock onto the eight
        # D8 directions (the jitter changes directions only, not the surface)
        jitter = rng.normal(0.0, 0.6, size=z.shape)
        jitter[fixed] = 0.0
        fm = route(terrain_from_array((z + jitter).astype(np.float32), transform=TRANSFORM,
                                      crs=CRS))
        zc = np.maximum(z, fm.terrain.elevation - jitter).ravel().copy()
        area = fm.accumulation(unit="m2").ravel().astype(np.float64)
        dist = fm.receiver_distance().astype(np.float64)
        _implicit_incision(zc, fm.receiver.astype(np.int64), fm.stack.astype(np.int64), area,
                           dist, fixedf, UPLIFT, K_EROSION, M_EXPONENT, DT)
        z = zc.reshape(NROWS, NCOLS)
        # linear hillslope diffusion (explicit, stable for D dt / dx² < 0.25)
        for _sub in range(5):
            lap = np.zeros_like(z)
            lap[1:-1, 1:-1] = (z[:-2, 1:-1] + z[2:, 1:-1] + z[1:-1, :-2] + z[1:-1, 2:]
                               - 4.0 * z[1:-1, 1:-1]) / CELL ** 2
            z = z + DIFFUSIVITY * DT / 5 * lap
    return z


def main_stem(fm, start):
    """Cells from ``start`` down to the grid edge along D8 receivers."""
    path = [start]
    while fm.receiver[path[-1]] >= 0:
        path.append(int(fm.receiver[path[-1]]))
    return path


def xy(i):
    r, c = divmod(int(i), NCOLS)
    return X0 + (c + 0.5) * CELL, Y0 - (r + 0.5) * CELL


def press_depressions(z, rng):
    """Three closed hollows: (row, col, radius m, depth m, name)."""
    specs = [(70, 60, 45.0, 4.0, "kettle pond"), (150, 235, 30.0, 3.0, "old borrow pit"),
             (235, 95, 20.0, 2.5, "sinkhole")]
    rr, cc = np.mgrid[:NROWS, :NCOLS]
    out = []
    for r, c, rad, depth, name in specs:
        d = np.hypot(rr - r, cc - c) * CELL
        rim = float(z[(d >= rad) & (d < rad + CELL)].min())
        inside = d < rad
        # a closed bowl whatever the slope: its floor lies below the lowest point of its rim
        bowl = rim - 0.2 - depth * (1.0 - (d / rad) ** 2)
        z = np.where(inside, np.minimum(z, bowl), z)
        out.append({"name": name, "row": r, "col": c, "radius_m": rad, "depth_m": depth})
    return z, out


def build():
    rng = np.random.default_rng(SEED)
    z = evolve(initial_surface(rng), rng)
    # the model leaves small pits where the jitter fell; fill them (exact Priority-Flood)
    from basinkit import fill_depressions
    z = fill_depressions(terrain_from_array(z.astype(np.float32), transform=TRANSFORM,
                                            crs=CRS)).elevation.astype(np.float64)
    # the model's hillslopes come out alpine; halve the relief above the outlet level for
    # the gentler slopes of an upland valley (a monotonic rescaling keeps every flow path)
    base = float(z.min())
    z = base + RELIEF_SCALE * (z - base)
    # the map is cut a little outside the valley's divide: the outermost cells of the
    # north, east and west edges fall away outward, so the basin lies wholly on the map
    b = EDGE_BAND
    out = z.copy()
    ramp = 5.0 * (b - np.arange(b, dtype=float))  # m below the ridge line, edge cell first
    out[:b, :] = np.minimum(out[:b, :], z[b, :][None, :] - ramp[:, None])
    out[:, :b] = np.minimum(out[:, :b], z[:, b][:, None] - ramp[None, :])
    out[:, -b:] = np.minimum(out[:, -b:], z[:, -b - 1][:, None] - ramp[None, ::-1])
    z = out
    # fine surface roughness (survey noise, vegetation): a few decimetres
    z = z + 0.15 * (fractal_noise(rng, NROWS, NCOLS, beta=1.0) - 0.5)
    z, hollows = press_depressions(z, rng)

    # find the main valley on the natural surface: the largest catchment on the south edge
    fm = route(terrain_from_array(z.astype(np.float32), transform=TRANSFORM, crs=CRS))
    acc = fm.accumulation(unit="cells").ravel()
    exits = np.flatnonzero(fm.receiver == -1)
    mouth = int(exits[np.argmax(acc[exits])])
    # walk up the main stem (largest donor each time) to about 40 % of the basin's area
    donors = {}
    for i in np.flatnonzero(fm.receiver >= 0):
        donors.setdefault(int(fm.receiver[i]), []).append(int(i))
    stem_up = [mouth]
    while stem_up[-1] in donors:
        stem_up.append(max(donors[stem_up[-1]], key=lambda d: acc[d]))
    total = acc[mouth]
    # (not right at a junction: the main donor carries nearly all of the crossing's area)
    crossing = next(i for i in stem_up if acc[i] <= 0.4 * total and i in donors
                    and max(acc[d] for d in donors[i]) >= 0.97 * acc[i])
    cr, cc = divmod(crossing, NCOLS)

    # road: straight line across the valley, bearing roughly east-west, through the crossing
    floor = float(z[cr, cc])
    crest = floor + EMBANKMENT_HEIGHT
    angle = np.deg2rad(8.0)  # road bearing: 8° anticlockwise from due east
    ux, uy = np.cos(angle), np.sin(angle)
    cx, cy = xy(crossing)
    half_len = 450.0
    rr, ccg = np.mgrid[:NROWS, :NCOLS]
    gx = X0 + (ccg + 0.5) * CELL
    gy = Y0 - (rr + 0.5) * CELL
    along = (gx - cx) * ux + (gy - cy) * uy
    off = np.abs(-(gx - cx) * uy + (gy - cy) * ux)
    on_road = np.abs(along) <= half_len
    fill_to = np.where(off <= ROAD_HALF_WIDTH, crest,
                       crest - (off - ROAD_HALF_WIDTH) * SIDE_SLOPE)
    embank = on_road & (fill_to > z)
    z = np.where(embank, fill_to, z)
    road_line = [[cx - half_len * ux, cy - half_len * uy], [cx + half_len * ux, cy + half_len * uy]]

    # culvert: a straight pipe from toe to toe of the embankment, following the stream
    k = stem_up.index(crossing)
    n_toe = int(np.ceil((ROAD_HALF_WIDTH + EMBANKMENT_HEIGHT / SIDE_SLOPE) / CELL)) + 1
    inlet, outfall = stem_up[min(k + n_toe, len(stem_up) - 1)], stem_up[max(k - n_toe, 0)]
    culvert_line = [list(xy(inlet)), list(xy(outfall))]

    z = z.astype(np.float32)
    return z, dict(crossing=crossing, inlet=inlet, crest=crest, floor=floor, road=road_line,
                   culvert=culvert_line, hollows=hollows, embankment_cells=int(embank.sum()))


def sampling_points(z, info, rng):
    """The crossing plus a dozen downstream points (main stem and tributary mouths)."""
    # route with the culvert open (cells along its line lowered) to place points on streams
    zz = z.astype(np.float64).copy()
    (x1, y1), (x2, y2) = info["culvert"]
    for t in np.linspace(0.0, 1.0, 40):
        x, y = x1 + t * (x2 - x1), y1 + t * (y2 - y1)
        r, c = int((Y0 - y) // CELL), int((x - X0) // CELL)
        zz[r, c] = min(zz[r, c], info["floor"] - 1.0)
    fm = route(terrain_from_array(zz.astype(np.float32), transform=TRANSFORM, crs=CRS))
    acc = fm.accumulation(unit="m2").ravel()
    stem = main_stem(fm, info["crossing"])
    # main-stem points: evenly spaced below the crossing (not the very edge)
    picks = np.linspace(len(stem) * 0.12, len(stem) * 0.88, 8).astype(int)
    points = [("crossing", info["inlet"], "Proposed road crossing: culvert inlet on the "
               "upstream side of the embankment")]
    for n, j in enumerate(picks, 1):
        points.append((f"main_{n}", stem[j], f"Main stream sampling point {n} below the "
                       "crossing"))
    # tributary mouths: donors of the main stem (below the crossing) with the largest area
    onstem = set(stem)
    trib = []
    for i in np.flatnonzero(np.isin(fm.receiver, stem[6:int(len(stem) * 0.9)])):
        if int(i) not in onstem and acc[i] > 8e3:
            trib.append((acc[i], int(i)))
    trib.sort(reverse=True)
    chosen = [(None, *divmod(stem[j], NCOLS)) for j in [0, *picks]]
    taken = len(chosen)
    for a, i in trib:
        ri, ci = divmod(i, NCOLS)
        if all(max(abs(ri - rj), abs(ci - cj)) > 4 for _, rj, cj in chosen):
            chosen.append((i, ri, ci))
        if len(chosen) == taken + 6:
            break
    for n, (i, _, _) in enumerate(sorted(chosen[taken:], key=lambda t: stem.index(
            int(fm.receiver[t[0]]))), 1):
        # a few cells up the tributary, so that its own catchment is delineated
        for _ in range(4):
            up = np.flatnonzero(fm.receiver == i)
            if up.size == 0 or acc[up].max() < 5e3:
                break
            i = int(up[np.argmax(acc[up])])
        points.append((f"tributary_{n}", i, f"Tributary {n} just above its junction with "
                       "the main stream"))
    rows = []
    for name, cell, desc in points:
        x, y = xy(cell)
        # field coordinates are never exactly on a cell centre: a few metres off it
        dx, dy = rng.uniform(-3.5, 3.5, size=2)
        rows.append({"id": name, "x": round(x + dx, 2), "y": round(y + dy, 2),
                     "description": desc})
    return rows


def main(out_dir=None):
    """Write the demo files into ``out_dir`` (default: beside this script)."""
    import pandas as pd

    out = Path(out_dir) if out_dir is not None else HERE
    out.mkdir(parents=True, exist_ok=True)

    z, info = build()
    rng = np.random.default_rng(SEED + 1)
    # DEFLATE level 6, which every GDAL reads (the products are written with ZSTD)
    write_geotiff(out / "upland_valley.tif", z, TRANSFORM, CRS, nodata=float("nan"),
                  codec="deflate", level=6)
    outlets = sampling_points(z, info, rng)
    write_csv(out / "outlets.csv", pd.DataFrame(outlets))
    crs_obj = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    culverts = {"type": "FeatureCollection", "crs": crs_obj, "features": [{
        "type": "Feature",
        "properties": {"id": "road_culvert", "description": "Proposed culvert under the road "
                       "embankment (1.2 m pipe, invert at the valley floor)"},
        "geometry": {"type": "LineString",
                     "coordinates": [[round(a, 2), round(b, 2)] for a, b in info["culvert"]]}}]}
    road = {"type": "FeatureCollection", "crs": crs_obj, "features": [{
        "type": "Feature",
        "properties": {"id": "proposed_road", "crest_elevation_m": round(info["crest"], 2)},
        "geometry": {"type": "LineString",
                     "coordinates": [[round(a, 2), round(b, 2)] for a, b in info["road"]]}}]}
    write_json(out / "culverts.geojson", culverts)
    write_json(out / "road.geojson", road)
    print(f"wrote {out / 'upland_valley.tif'}: {z.shape[0]} x {z.shape[1]} cells of "
          f"{CELL:g} m, elevation {np.nanmin(z):.1f}-{np.nanmax(z):.1f} m; "
          f"{len(outlets)} outlets; embankment {info['embankment_cells']} cells, crest "
          f"{info['crest']:.1f} m over a valley floor of {info['floor']:.1f} m")


if __name__ == "__main__":
    import sys

    main(sys.argv[1] if len(sys.argv) > 1 else None)
