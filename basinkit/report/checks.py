"""Checks the report makes on the products: how deep conditioning filled closed depressions
inside each catchment, and which cells it lowered (burned lines, breaches).

The DEM as read and the conditioned DEM of the flow folder are compared strip by strip; with
a sub-catchment label raster every catchment is summed from its sub-catchments (its own and
those of the outlets upstream, listed in catchments.csv), in one pass over the grid however
many outlets there are. Without a label raster only the outlets with full sections are
checked, each inside its polygon.
"""

from __future__ import annotations

import numpy as np

__all__ = ["depression_stats", "LOWERED_CELLS_MAX", "FILL_DEPTH_M", "FILL_FRACTION",
           "FILL_NOISE_M"]

#: Depressions filled deeper than this, or raising more than FILL_FRACTION of a
#: catchment's cells by more than FILL_NOISE_M, earn a warning (common practice, no source).
FILL_DEPTH_M = 1.0
FILL_FRACTION = 0.02
FILL_NOISE_M = 0.05

#: At most this many lowered cells are kept for the maps.
LOWERED_CELLS_MAX = 50_000


def _upstream(rec):
    v = rec.get("upstream_outlet_ids")
    if isinstance(v, str) and v.strip():
        return [s for s in v.split(";") if s]
    return []


def _aggregate(d, stats, label_of):
    """Per outlet: (max depth, raised fraction, volume) from per-label sums."""
    n, nr, mx, sm = stats
    cat = d.tables["catchment"]
    out = {}
    for oid in d.ok_ids:
        rec = cat.get(oid)
        if rec is None or oid not in label_of:
            continue
        labs = [label_of[oid]] + [label_of[u] for u in _upstream(rec) if u in label_of]
        labs = np.unique(np.asarray(labs, dtype=np.int64))
        labs = labs[(labs > 0) & (labs < n.size)]
        cells = float(n[labs].sum())
        if cells <= 0:
            continue
        cell_area = (float(rec["area_m2"]) / float(rec["cell_count"])
                     if rec.get("cell_count") and rec.get("area_m2") else np.nan)
        out[oid] = (float(mx[labs].max()), float(nr[labs].sum()) / cells,
                    float(sm[labs].sum()) * cell_area)
    return out


def depression_stats(d, progress=None):
    """``({outlet id: (max fill depth m, fraction of cells raised, volume m³)},
    lowered cells (n, 2) or None)``; empty when the flow folder lacks a DEM."""
    run = d.run
    zin = run.input_elevation_raster()
    zc = run.folder / "flow" / "elevation_conditioned.tif"
    if zin is None or not zc.is_file():
        return {}, None
    labels = run.first_existing(("subcatchment_labels.tif", "catchment_labels.tif"))
    cat = d.tables["catchment"]
    label_of = {}
    for oid in d.ok_ids:
        lab = cat.get(oid, {}).get("label")
        try:
            label_of[oid] = int(lab)
        except (TypeError, ValueError):
            pass
    use_labels = labels is not None and label_of
    nlab = (max(label_of.values()) + 1) if use_labels else 0
    n = np.zeros(nlab, np.int64)
    nr = np.zeros(nlab, np.int64)
    mx = np.zeros(nlab)
    sm = np.zeros(nlab)
    low = []
    kept = 0
    paths = [zin, zc] + ([labels] if use_labels else [])
    try:
        tr = run.raster_info(zin)[0]
        for r0, arrs in run.raster_strips(paths):
            a, c = arrs[0], arrs[1]
            ok = ~(np.ma.getmaskarray(a) | np.ma.getmaskarray(c))
            diff = np.where(ok, np.ma.getdata(c).astype(np.float64)
                            - np.ma.getdata(a).astype(np.float64), 0.0)
            rr, cc = np.nonzero(diff < -FILL_NOISE_M)
            if rr.size and kept < LOWERED_CELLS_MAX:
                take = min(rr.size, LOWERED_CELLS_MAX - kept)
                rows, cols = rr[:take] + r0 + 0.5, cc[:take] + 0.5
                low.append(np.column_stack([tr.c + cols * tr.a, tr.f + rows * tr.e]))
                kept += take
            if use_labels:
                lab = np.ma.getdata(arrs[2]).astype(np.int64)
                sel = ok & (lab > 0) & (lab < nlab)
                lv, dv = lab[sel], np.maximum(diff[sel], 0.0)
                n += np.bincount(lv, minlength=nlab)
                nr += np.bincount(lv, weights=(dv > FILL_NOISE_M), minlength=nlab).astype(
                    np.int64)
                sm += np.bincount(lv, weights=dv, minlength=nlab)
                np.maximum.at(mx, lv, dv)
    except Exception as exc:  # noqa: BLE001 - the report goes on without this check
        run._problem("the flow folder's DEMs (depression check)", exc)
        return {}, None
    lowered = np.vstack(low) if low else np.zeros((0, 2))
    if use_labels:
        return _aggregate(d, (n, nr, mx, sm), label_of), lowered
    return _by_polygon(d, zin, zc), lowered


def _by_polygon(d, zin, zc):
    """The check for the outlets with full sections, each inside its catchment polygon."""
    from affine import Affine
    from rasterio.features import geometry_mask

    polys = d.run.layer("catchments_gpkg", ["catchments"], columns=["outlet_id"])
    if polys is None:
        return {}
    geo = dict(zip(polys["outlet_id"].astype(str), polys.geometry))
    out = {}
    for oid in d.sections:
        g = geo.get(oid)
        if g is None or g.is_empty:
            continue
        x0, y0, x1, y1 = g.bounds
        a = d.run.read_window(zin, (x0, x1, y0, y1), max_cells=4_000_000)
        c = d.run.read_window(zc, (x0, x1, y0, y1), max_cells=4_000_000)
        if a is None or c is None or a.array.shape != c.array.shape:
            continue
        h, w = a.array.shape
        tr = Affine((a.extent[1] - a.extent[0]) / w, 0.0, a.extent[0],
                    0.0, -(a.extent[3] - a.extent[2]) / h, a.extent[3])
        inside = ~geometry_mask([g], out_shape=(h, w), transform=tr)
        diff = np.maximum(np.nan_to_num(c.array - a.array), 0.0)[inside]
        if diff.size == 0:
            continue
        rec = d.tables["catchment"].get(oid, {})
        cell_area = (float(rec["area_m2"]) / float(rec["cell_count"])
                     if rec.get("cell_count") and rec.get("area_m2") else np.nan)
        out[oid] = (float(diff.max()), float((diff > FILL_NOISE_M).mean()),
                    float(diff.sum()) * cell_area * a.step ** 2)
    return out
