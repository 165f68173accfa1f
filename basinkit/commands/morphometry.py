"""``basinkit morphometry``: network, shape and relief descriptors of the catchments above
one or more outlets; hypsometric curves as CSV and PNG."""

import click

from ._common import overwrite_option, parse_area, parse_length


def _read_outlet_file(path, crs):
    """(x, y, ids) from a CSV with columns x, y [, id] or a point layer [, id]."""
    from pathlib import Path

    import numpy as np

    from ..errors import InputError

    p = Path(path)
    if not p.exists():
        raise InputError(f"the outlet file {str(p)!r} does not exist")
    if p.suffix.lower() in (".csv", ".txt"):
        import pandas as pd

        try:
            df = pd.read_csv(p)
        except Exception as exc:  # noqa: BLE001 - any reader failure is an input problem
            raise InputError(f"cannot read the outlet table {str(p)!r}: {exc}") from None
        cols = {c.lower().strip(): c for c in df.columns}
        if "x" not in cols or "y" not in cols:
            raise InputError(f"the outlet table {str(p)!r} needs columns x and y (map "
                             f"coordinates in the DEM's CRS); it has {list(df.columns)}")
        x = pd.to_numeric(df[cols["x"]], errors="coerce").to_numpy(float)
        y = pd.to_numeric(df[cols["y"]], errors="coerce").to_numpy(float)
        ids = (df[cols["id"]].astype(str).to_numpy() if "id" in cols
               else np.arange(1, len(df) + 1).astype(str))
        return x, y, ids
    import geopandas as gpd

    try:
        gdf = gpd.read_file(p)
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"cannot read the outlet layer {str(p)!r}: {exc}") from None
    if gdf.crs is not None:
        gdf = gdf.to_crs(crs.to_wkt())
    geom = gdf.geometry
    if len(gdf) == 0 or not (geom.geom_type == "Point").all():
        raise InputError(f"the outlet layer {str(p)!r} must hold points")
    ids = (gdf["id"].astype(str).to_numpy() if "id" in gdf.columns
           else np.arange(1, len(gdf) + 1).astype(str))
    return geom.x.to_numpy(), geom.y.to_numpy(), ids


def outlet_cells_from_options(fm, outlets=(), outlets_file=None, snap_m=0.0):
    """Flat outlet cells from ``--outlet X,Y`` options and/or an outlet file.

    Each outlet may move to the cell of largest D8 upstream area within ``snap_m`` metres
    (on the ground). Returns (cells int64, ids list of str). Raises OutletError for a point
    off the grid or on nodata.
    """
    import numpy as np

    from ..errors import InputError, OutletError

    xs, ys, ids = [], [], []
    for k, text in enumerate(outlets):
        parts = str(text).replace(" ", "").split(",")
        try:
            x, y = float(parts[0]), float(parts[1])
            if len(parts) != 2:
                raise ValueError
        except (ValueError, IndexError):
            raise InputError(f"cannot read the outlet {text!r}; write X,Y in the DEM's "
                             "CRS, e.g. --outlet 512300,4901250") from None
        xs.append(x)
        ys.append(y)
        ids.append(str(k + 1))
    if outlets_file:
        x, y, i = _read_outlet_file(outlets_file, fm.terrain.crs)
        xs += list(x)
        ys += list(y)
        ids += [str(s) for s in i]
    if not xs:
        raise InputError("give at least one outlet: --outlet X,Y or --outlets FILE")
    if len(set(ids)) != len(ids):
        raise InputError("outlet ids repeat; give each outlet its own id (the id column "
                         "of the outlet file, or leave the ids out)")
    t = fm.terrain
    rows, cols = t.rowcol_of(np.asarray(xs), np.asarray(ys))
    area = fm.d8_upstream_area_flat()
    nr, nc = t.shape
    g = t.geometry
    cells = []
    for k, (r, c) in enumerate(zip(rows, cols)):
        if not (0 <= r < nr and 0 <= c < nc) or not np.isfinite(xs[k] + ys[k]):
            raise OutletError(f"outlet {ids[k]} ({xs[k]}, {ys[k]}) lies outside the DEM; "
                              "check its coordinates and CRS")
        if not t.valid[r, c]:
            raise OutletError(f"outlet {ids[k]} ({xs[k]}, {ys[k]}) lies on a nodata cell; "
                              "move it onto the channel")
        cell = int(r * nc + c)
        if snap_m > 0:
            hr = int(np.ceil(snap_m / max(g.dy_down[r], 1e-9)))
            hc = int(np.ceil(snap_m / max(g.dx[r], 1e-9)))
            r0, r1 = max(r - hr, 0), min(r + hr, nr - 1)
            c0, c1 = max(c - hc, 0), min(c + hc, nc - 1)
            rr, cc = np.mgrid[r0:r1 + 1, c0:c1 + 1]
            dist = np.hypot((rr - r) * g.dy_down[r], (cc - c) * g.dx[r])
            cand = (rr * nc + cc).ravel()
            a = np.where(dist.ravel() <= snap_m, np.nan_to_num(area[cand], nan=-1), -1)
            cell = int(cand[int(np.argmax(a))])
        cells.append(cell)
    return np.asarray(cells, dtype=np.int64), ids


def catchment_masks(fm, cells):
    """Label grid when no outlet lies upstream of another, else one full mask per outlet
    (a nested outlet's catchment is part of the one below it)."""
    import numpy as np

    labels = fm.label_outlets(cells)
    rec = fm.receiver[cells]
    below = np.where(rec >= 0, labels.ravel()[np.where(rec >= 0, rec, 0)], 0)
    unique = np.unique(cells).size == cells.size
    if unique and not (below > 0).any():
        return labels
    return [fm.upstream_mask(int(c)) for c in cells]


@click.command("morphometry")
@click.argument("flowdir", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Folder to write morphometry.csv, morphometry.json and hypsometric "
                   "curves.")
@click.option("--outlet", "outlets", multiple=True, metavar="X,Y",
              help="Outlet in map coordinates of the DEM's CRS; repeat for more.")
@click.option("--outlets", "outlets_file", type=click.Path(), default=None,
              help="CSV (columns x, y, optional id) or point layer of outlets.")
@click.option("--snap-distance", default="0m", show_default=True,
              help="Move each outlet to the cell of largest upstream area within this "
                   "ground distance (e.g. 60m).")
@click.option("--min-area", default=None,
              help="Channel threshold (e.g. 0.5km2) for the network measures (stream "
                   "counts, Horton ratios, drainage density); without it they are left "
                   "out.")
@click.option("--slope-area-exponent", type=float, default=None,
              help="Exponent α of a slope–area channel criterion A·S^α ≥ C.")
@click.option("--slope-area-constant", type=float, default=None,
              help="Constant C of the slope–area criterion.")
@click.option("--figures/--no-figures", default=True, show_default=True,
              help="Write a PNG of each hypsometric curve.")
@overwrite_option
@click.pass_obj
def command(console, flowdir, output, outlets, outlets_file, snap_distance, min_area,
            slope_area_exponent, slope_area_constant, figures, overwrite):
    """Measure the catchments above the outlets: area, perimeter, lengths, elongation,
    circularity, relief, hypsometry, slope, aspect and (with --min-area) the channel
    network's orders, Horton ratios and drainage density.

    Example: basinkit morphometry flow/ --outlet 512300,4901250 --min-area 0.5km2 -o morph/
    """
    import re
    import time
    from pathlib import Path

    import numpy as np

    from ..channels import extract_channels
    from ..errors import InputError
    from ..morphometry import CAUTIONS, morphometry_table, write_hypsometric_curve
    from ..routing import load_flow
    from ..writers import prepare_output_dir, provenance, write_csv, write_json

    t0 = time.perf_counter()
    if (slope_area_exponent is None) != (slope_area_constant is None):
        raise InputError("the slope–area criterion needs both --slope-area-exponent and "
                         "--slope-area-constant")
    snap_m = parse_length(snap_distance, "--snap-distance")
    min_area_m2 = parse_area(min_area, "--min-area") if min_area is not None else None
    out = prepare_output_dir(output, overwrite)
    fm = load_flow(flowdir)
    cells, ids = outlet_cells_from_options(fm, outlets, outlets_file, snap_m)
    net = None
    if min_area_m2 is not None:
        sa = (None if slope_area_exponent is None
              else (slope_area_exponent, slope_area_constant))
        net = extract_channels(fm, min_area_m2, slope_area=sa, outlet_cells=cells,
                               geometry=False)
    else:
        console.warn("no --min-area given: network measures (stream counts, Horton ratios, "
                     "drainage density) are left out")
    masks = catchment_masks(fm, cells)
    table, curves = morphometry_table(fm, masks, cells, ids=np.arange(1, len(ids) + 1),
                                      network=net, return_curves=True)
    curves = {ids[k - 1]: v for k, v in curves.items()}
    table.insert(0, "outlet_id", ids)
    table = table.drop(columns="catchment_id")
    write_csv(out / "morphometry.csv", table)
    hyps = out / "hypsometry"
    files = ["morphometry.csv"]
    for k, oid in enumerate(ids):
        curve = curves.get(oid)
        if curve is None:
            continue
        safe = re.sub(r"[^A-Za-z0-9_.-]+", "_", str(oid)).strip("._") or f"outlet{k + 1}"
        hi = table.loc[k, "hypsometric_integral"]
        write_hypsometric_curve(curve, hyps / f"hypsometric_curve_{safe}.csv",
                                hyps / f"hypsometric_curve_{safe}.png" if figures else None,
                                label=f"outlet {oid}", integral=float(hi))
        files.append(str(Path("hypsometry") / f"hypsometric_curve_{safe}.csv"))
    params = {"outlets": list(outlets), "outlets_file": outlets_file, "snap_distance_m": snap_m,
              "min_area_m2": min_area_m2, "slope_area_exponent": slope_area_exponent,
              "slope_area_constant": slope_area_constant}
    t = fm.terrain
    records = table.replace({np.nan: None}).to_dict(orient="records")
    meta = provenance(params, {"flow": fm.parameters.get("flow_folder"), "dem": t.source},
                      crs=t.crs, shape=t.shape, catchments=records, files=files,
                      nested_outlets=not isinstance(masks, np.ndarray), cautions=CAUTIONS,
                      seconds=round(time.perf_counter() - t0, 3))
    write_json(out / "morphometry.json", meta)
    bad = (table["error"] != "").sum()
    if bad:
        console.warn(f"{bad} of {len(table)} catchments could not be measured (see the "
                     "error column)")
    console.info(f"measured {len(table) - bad} catchments; wrote {out} "
                 f"({time.perf_counter() - t0:.1f} s)")
