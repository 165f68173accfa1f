"""HTML pieces of the report: the facts of the run, the products, the outlet table, the
per-outlet figure tables and warnings, and the provenance."""

from __future__ import annotations

import html
import json
import math

import numpy as np

from ..analysis.catchments import ACRE_M2, SQUARE_MILE_M2

__all__ = ["FIGURE_ROWS", "TABLE_COLUMNS", "esc", "facts_html", "products_html",
           "outlet_table_html", "figure_table_html", "warnings_html", "provenance_html",
           "value_of"]

#: Rows of a full section's figure table: (label, table, column, unit, format). ``table``
#: names the product the value comes from: "catchment" (catchments.csv), "morphometry"
#: (morphometry.csv), "path" (flow_paths.csv, longest flow path) or "outlet" (positions).
FIGURE_ROWS = [
    ("Catchment area", "catchment", "area_km2", "km²", "{:.4g}"),
    ("Catchment area", "catchment", "area_ha", "ha", "{:.4g}"),
    ("Catchment area", "catchment", "area_acres", "acres", "{:,.1f}"),
    ("Catchment area", "catchment", "area_mi2", "mi²", "{:.4g}"),
    ("Perimeter (smoothed)", "morphometry", "perimeter_m", "m", "{:,.0f}"),
    ("Outlet, snapped (x, y)", "outlet", "xy_snapped", "map units", None),
    ("Outlet as given (x, y)", "outlet", "xy_given", "map units", None),
    ("Snap distance", "catchment", "snap_distance_m", "m", "{:.1f}"),
    ("Outlets upstream", "catchment", "upstream_outlet_count", "", "{:d}"),
    ("Lowest elevation", "catchment", "elevation_min_m", "m", "{:.1f}"),
    ("Mean elevation", "catchment", "elevation_mean_m", "m", "{:.1f}"),
    ("Highest elevation", "catchment", "elevation_max_m", "m", "{:.1f}"),
    ("Relief", "catchment", "relief_m", "m", "{:.1f}"),
    ("Mean slope", "morphometry", "mean_slope_m_per_m", "m/m", "{:.3f}"),
    ("Longest flow path", "path", "length_m", "m", "{:,.0f}"),
    ("Flow path slope, 10–85", "path", "slope_10_85_m_per_m", "m/m", "{:.4f}"),
    ("Flow path slope, average", "path", "average_slope_m_per_m", "m/m", "{:.4f}"),
    ("Basin length (straight)", "morphometry", "basin_length_straight_m", "m", "{:,.0f}"),
    ("Elongation ratio (Schumm)", "morphometry", "elongation_ratio", "–", "{:.3f}"),
    ("Circularity ratio (Miller)", "morphometry", "circularity_ratio", "–", "{:.3f}"),
    ("Form factor (Horton)", "morphometry", "form_factor", "–", "{:.3f}"),
    ("Relief ratio (Schumm)", "morphometry", "relief_ratio", "m/m", "{:.4f}"),
    ("Melton ruggedness", "morphometry", "melton_ruggedness", "–", "{:.3f}"),
    ("Hypsometric integral", "morphometry", "hypsometric_integral", "–", "{:.3f}"),
    ("Highest Strahler order", "morphometry", "max_strahler_order", "", "{:d}"),
    ("Streams (Strahler)", "morphometry", "stream_count", "", "{:d}"),
    ("Total stream length", "morphometry", "total_stream_length_m", "m", "{:,.0f}"),
    ("Drainage density", "morphometry", "drainage_density_km_per_km2", "km/km²", "{:.2f}"),
    ("Bifurcation ratio", "morphometry", "bifurcation_ratio", "–", "{:.2f}"),
]

#: Columns of the outlet table: (heading, [(table, column), ...] tried in turn, format).
TABLE_COLUMNS = [
    ("Area km²", [("catchment", "area_km2"), ("morphometry", "area_km2")], "{:.4g}"),
    ("Area acres", [("catchment", "area_acres"), ("calc", "area_acres")], "{:,.1f}"),
    ("Area mi²", [("catchment", "area_mi2"), ("calc", "area_mi2")], "{:.4g}"),
    ("Relief m", [("catchment", "relief_m"), ("morphometry", "relief_m")], "{:.1f}"),
    ("Mean slope m/m", [("morphometry", "mean_slope_m_per_m")], "{:.3f}"),
    ("Hypsometric integral", [("morphometry", "hypsometric_integral")], "{:.3f}"),
    ("Longest flow path m", [("path", "length_m"), ("morphometry", "longest_flow_path_m")],
     "{:,.0f}"),
    ("10–85 slope m/m", [("path", "slope_10_85_m_per_m")], "{:.4f}"),
    ("Snap distance m", [("catchment", "snap_distance_m")], "{:.1f}"),
]


def esc(x) -> str:
    return html.escape(str(x), quote=True)


def _float(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def fmt(value, spec):
    f = _float(value)
    if f is None:
        return "–"
    if spec == "{:d}":
        return f"{int(round(f)):d}"
    return spec.format(f)


def value_of(d, oid, sources):
    """The first finite value of ``sources`` [(table, column)] for an outlet; "calc"
    derives acres and mi² from the area in m² (international acre and mile, exact)."""
    for src, key in sources:
        if src == "calc":
            m2 = _float(d.tables["catchment"].get(oid, {}).get("area_m2"))
            if m2 is None:
                km2 = _float(d.tables["catchment"].get(oid, {}).get("area_km2"))
                m2 = None if km2 is None else km2 * 1e6
            if m2 is not None:
                return m2 / (ACRE_M2 if key == "area_acres" else SQUARE_MILE_M2)
            continue
        v = _float(d.tables[src].get(oid, {}).get(key))
        if v is not None:
            return v
    return None


def _raw(v):
    return "" if v is None else f"{v:.10g}"


# ---------------------------------------------------------------------------- the run
def _cell_size_text(dem):
    if "cell_size" not in dem:
        return "not known (no DEM in the flow folder)"
    cx, cy = dem["cell_size"]
    if dem.get("geographic"):
        mpu = dem.get("metres_per_unit", 1.0)
        return (f"{cx:.6g}° × {cy:.6g}° ({cx * 3600:.3g}″ × {cy * 3600:.3g}″; about "
                f"{cx * mpu:,.1f} m × {cy * 111_000:,.1f} m on the ground at the centre)")
    mpu = dem.get("metres_per_unit", 1.0)
    unit = "m" if abs(mpu - 1.0) < 1e-12 else "map units"
    text = f"{cx:g} × {cy:g} {unit}"
    if unit != "m":
        text += f" ({cx * mpu:.4g} m × {cy * mpu:.4g} m)"
    return text


def _crs_text(crs):
    if crs is None:
        return "not recorded"
    epsg = crs.to_epsg()
    kind = "geographic (longitude, latitude)" if crs.is_geographic else "projected"
    return f"{crs.name}" + (f" (EPSG:{epsg})" if epsg else "") + f", {kind}"


def facts_html(d) -> str:
    dem = d.dem
    rows = []
    if dem.get("file"):
        rows.append(("DEM", f"<code>{esc(dem['file'])}</code>"))
    if dem.get("shape"):
        r, c = dem["shape"]
        rows.append(("Grid", f"{r:,} rows × {c:,} columns"))
    rows.append(("CRS", esc(_crs_text(dem.get("crs")))))
    rows.append(("Cell size", esc(_cell_size_text(dem))))
    vu = dem.get("vertical_units")
    rows.append(("Vertical units", esc(f"{vu[0]} ({vu[1]})") if vu else
                 "not recorded by the run or the DEM file; basinkit treats elevations as "
                 "metres"))
    cond = dem.get("conditioning") or {}
    if cond:
        bits = [str(cond.get("method", "?"))]
        for k, label in (("depressions", "depressions filled"),
                         ("cells_raised", "cells raised"), ("burned_cells", "cells burned"),
                         ("cells_lowered", "cells lowered")):
            if _float(cond.get(k)) is not None:
                bits.append(f"{int(cond[k]):,} {label}")
        rows.append(("Conditioning", esc("; ".join(bits))))
    if dem.get("routing"):
        rows.append(("Flow routing", esc(str(dem["routing"]).upper())))
    rows.append(("Snapping", esc(d.snapping)))
    params = d.prov.get("parameters") or {}
    ch = params.get("channels") or {}
    if _float(ch.get("min_area")) is not None:
        rows.append(("Channels from", esc(f"{float(ch['min_area']) / 1e4:g} ha upstream area")))
    n_all, n_ok = len(d.outlets), len(d.ok_ids)
    rows.append(("Outlets", f"{n_all:,} given, {n_ok:,} delineated, "
                            f"{n_all - n_ok:,} failed"))
    return ('<dl class="facts">' + "".join(f"<div><dt>{k}</dt><dd>{v}</dd></div>"
                                           for k, v in rows) + "</dl>")


def products_html(d) -> str:
    items = [f'<li><code>{esc(n)}</code> <span class="ok">found</span></li>'
             for n, _ in d.present]
    items += [f'<li class="absent"><code>{esc(n)}</code>: not in this folder ({esc(s)} was '
              "turned off or not run); the parts of the report built from it are left "
              "out</li>" for n, s in d.absent]
    items += [f'<li class="absent">{esc(p)}; the parts built from it are left out</li>'
              for p in d.run.problems]
    return '<ul class="products">' + "".join(items) + "</ul>"


# ---------------------------------------------------------------------------- outlets
def outlet_table_html(d) -> str:
    """Every outlet, one row each, sortable by any column (plain JavaScript)."""
    head = ['<th data-type="text">Outlet</th>', '<th data-type="text">Status</th>']
    head += [f'<th data-type="num">{esc(h)}</th>' for h, _, _ in TABLE_COLUMNS]
    head.append('<th data-type="num">Warnings</th>')
    body = []
    sections = set(d.sections)
    for r in d.outlets.to_dict("records"):
        oid = r["outlet_id"]
        fid = d.file_id[oid]
        name = (f'<a href="#outlet-{esc(fid)}">{esc(oid)}</a>' if oid in sections
                else esc(oid))
        if r["status"] != "ok":
            reason = esc(r["error"]) or "failed"
            body.append(f'<tr class="failed" data-warned="1"><td>{name}</td>'
                        f'<td data-v="failed">failed</td>'
                        f'<td colspan="{len(TABLE_COLUMNS) + 1}">{reason}</td></tr>')
            continue
        cells = [f"<td>{name}</td>", "<td>ok</td>"]
        for _, sources, spec in TABLE_COLUMNS:
            v = value_of(d, oid, sources)
            cells.append(f'<td class="n" data-v="{_raw(v)}">{fmt(v, spec)}</td>')
        flags = d.flags.get(oid, [])
        codes = ", ".join(c for c, _ in flags)
        cls = ' class="n w"' if flags else ' class="n"'
        cells.append(f'<td{cls} data-v="{len(flags)}">{len(flags)}'
                     + (f" ({codes})" if codes else "") + "</td>")
        warned = "1" if flags else "0"
        body.append(f'<tr data-warned="{warned}">' + "".join(cells) + "</tr>")
    tools = ('<div class="tools"><label>Find an outlet <input type="search" '
             'id="outlet-filter" placeholder="part of an id"></label>'
             '<label><input type="checkbox" id="outlet-warned"> only outlets with warnings'
             f'</label><span id="outlet-count">{len(body):,} outlets</span></div>')
    return (tools + '<div class="tablebox"><table class="outlets" id="outlet-table">'
            "<thead><tr>" + "".join(head) + "</tr></thead><tbody>" + "".join(body)
            + "</tbody></table></div>")


def _xy_text(x, y):
    x, y = _float(x), _float(y)
    if x is None or y is None:
        return "–"
    return f"{x:,.1f}, {y:,.1f}" if abs(x) > 360 else f"{x:.6f}, {y:.6f}"


def figure_table_html(d, oid) -> str:
    rows = []
    cat = d.tables["catchment"].get(oid, {})
    for label, src, key, unit, spec in FIGURE_ROWS:
        if src == "outlet":
            pre = "snapped" if key == "xy_snapped" else "given"
            text = _xy_text(cat.get(f"x_{pre}"), cat.get(f"y_{pre}"))
            if d.dem.get("geographic"):
                unit = "° (longitude, latitude)"
            elif abs(d.dem.get("metres_per_unit", 0.0) - 1.0) < 1e-12:
                unit = "m (easting, northing)"
            rows.append(f'<tr><th>{esc(label)}</th><td class="num" data-key="outlet:{key}">'
                        f'{text}</td><td class="unit">{esc(unit)}</td></tr>')
            continue
        rec = d.tables[src].get(oid)
        if rec is None or key not in rec:
            if key in ("area_acres", "area_mi2") and cat:
                v = value_of(d, oid, [("calc", key)])
                rows.append(f'<tr><th>{esc(label)}</th><td class="num" data-key="calc:{key}"'
                            f' data-value="{_raw(v)}">{fmt(v, spec)}</td>'
                            f'<td class="unit">{esc(unit)}</td></tr>')
            continue
        v = _float(rec[key])
        rows.append(f'<tr><th>{esc(label)}</th><td class="num" data-key="{src}:{key}" '
                    f'data-value="{_raw(v)}">{fmt(v, spec)}</td>'
                    f'<td class="unit">{esc(unit)}</td></tr>')
    return ('<table class="figures"><thead><tr><th>Figure</th><th>Value</th><th>Unit</th>'
            "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def warnings_html(d, oid) -> str:
    flags = d.flags.get(oid, [])
    # a note of the run that opens with the same words as one of the report's own
    # warnings says the same thing (with the run's rounding): shown once
    def head(text):
        return " ".join(text.lower().split()[:8])

    heads = {head(t) for _, t in flags}
    notes = [n for n in d.notes.get(oid, []) if head(n) not in heads]
    if not flags and not notes:
        return '<p class="ok">No warnings for this outlet.</p>'
    parts = ['<div class="warnings"><h3>Warnings</h3>']
    if flags:
        parts.append("<ul>" + "".join(f"<li>{esc(t)}</li>" for _, t in flags) + "</ul>")
    if notes:
        parts.append('<p class="note">Recorded by the run:</p><ul>'
                     + "".join(f"<li>{esc(n)}</li>" for n in notes) + "</ul>")
    parts.append("</div>")
    return "".join(parts)


# ---------------------------------------------------------------------------- provenance
def provenance_html(d) -> str:
    prov = d.prov
    if not prov:
        return ("<p>This folder holds no provenance.json: the versions, parameters and input "
                "hashes of the run are not known to this report.</p>")
    parts = [f"<p>{esc(prov.get('software', 'basinkit'))} {esc(prov.get('version', '?'))}"]
    parts.append(".</p>")
    ins = prov.get("inputs") or {}
    if ins:
        rows = "".join(
            f"<tr><td>{esc(k)}</td><td><code>{esc(str(v.get('path', '')).rsplit('/', 1)[-1])}"
            f"</code></td><td><code>{esc(v.get('sha256', ''))}</code></td></tr>"
            for k, v in ins.items() if isinstance(v, dict))
        parts.append("<h3>Inputs</h3><table><thead><tr><th>Input</th><th>File</th>"
                     "<th>SHA-256</th></tr></thead><tbody>" + rows + "</tbody></table>")
    stages = prov.get("stages") or {}
    if isinstance(stages, dict) and stages:
        rows = []
        for name, st in stages.items():
            if not isinstance(st, dict):
                continue
            status = "writing this report" if st.get("status") == "running" else \
                st.get("status", "")
            rows.append(f"<tr><td>{esc(name)}</td><td>{esc(status)}</td>"
                        f"<td>{esc(st.get('note', ''))}</td></tr>")
        parts.append("<h3>Steps</h3><table><thead><tr><th>Step</th><th>Status</th>"
                     "<th>Note</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
    params = prov.get("parameters")
    if params:
        parts.append("<h3>Parameters</h3><pre class=\"params\">"
                     + esc(json.dumps(params, indent=2, sort_keys=True, default=str))
                     + "</pre>")
    files = prov.get("files")
    if isinstance(files, (list, dict)) and files:
        parts.append(f"<p class=\"note\">provenance.json lists {len(files):,} files written "
                     "by the run, with their SHA-256 where recorded.</p>")
    return "".join(parts)

