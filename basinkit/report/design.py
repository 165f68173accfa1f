"""The report's design-flow part of an outlet's section, built from design_flows.csv,
hydrographs.csv and design_flows.json (the files the design-flow step wrote): the design
storm and hydrograph figure, the peaks by method, Tc by method with the spread, every
input used, and each method's range of applicability with the outlet's flags."""

from __future__ import annotations

import math

from .sections import esc

__all__ = ["collect_design", "design_html", "DESIGN_TITLE"]

DESIGN_TITLE = "Design flows (planning-level estimate)"
_NAMES = {"kirpich": "Kirpich (1940)", "nrcs_lag": "NRCS watershed lag (NEH 630 ch. 15)",
          "tr55_velocity": "TR-55 velocity method", "rational": "Rational method",
          "nrcs_unit_hydrograph": "NRCS unit hydrograph (NEH 630 ch. 16)"}


def _f(v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _fmt(v, spec="{:.3g}"):
    x = _f(v)
    if x is None:
        return "–"
    if spec == "auto":
        return f"{x:,.0f}" if abs(x) >= 100 else f"{x:.3g}"
    return spec.format(x)


def _text(v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return str(v)


def collect_design(d):
    """Read the design-flow products into ``d``: ``d.design`` {outlet id: [rows]},
    ``d.design_meta`` (design_flows.json) and ``d.design_hydrographs`` {outlet id:
    frame} for the outlets with full sections; the design cautions join the report's."""
    d.design, d.design_meta, d.design_hydrographs = {}, {}, {}
    t = d.run.table("design_flows")
    if t is None or "outlet_id" not in t.columns:
        return
    for oid, g in t.groupby("outlet_id", sort=False):
        d.design[str(oid)] = g.to_dict("records")
    d.design_meta = d.run.json("design_flows_json") or {}
    want = [i for i in d.sections if i in d.design]
    if want:
        h = d.run.table("hydrographs", outlet_ids=want)
        if h is not None:
            for oid, g in h.groupby("outlet_id", sort=False):
                d.design_hydrographs[str(oid)] = g.reset_index(drop=True)
    extra = d.design_meta.get("design_flow_cautions")
    if isinstance(extra, str) and extra and extra not in d.cautions:
        d.cautions.insert(0, extra)


def _figure(d, oid, rows):
    from ..plot.hydrograph import plot_design_hydrograph
    from .figures import png_uri, step_figure_uri

    uri = step_figure_uri(d, oid, "design_hydrograph")
    if uri:  # the one the design-flow step drew
        return uri
    h = d.design_hydrographs.get(oid)
    uh = next((r for r in rows if r.get("method") == "nrcs_unit_hydrograph"
               and r.get("status") == "ok"), None)
    if h is None or uh is None or len(h) < 2:
        return None
    fig = plot_design_hydrograph(h, uh, title=f"outlet {oid}: design storm and hydrograph")
    return png_uri(fig)


def _flag_cell(r):
    if str(r.get("status")) != "ok":
        return f'<td class="note">{esc(_text(r.get("note")) or "not computed")}</td>'
    if str(r.get("outside_range")).lower() in ("true", "1"):
        return f'<td class="w">outside: {esc(_text(r.get("range_flags")))}</td>'
    return '<td class="ok">within</td>'


def _peak_table(rows):
    head = ("<tr><th>Method</th><th>Peak m³/s</th><th>Peak cfs</th><th>Time to peak h</th>"
            "<th>Tc used min</th><th>Runoff mm</th><th>Runoff in</th><th>Volume m³</th>"
            "<th>Volume acre-ft</th><th>Range of applicability</th></tr>")
    body = []
    for r in rows:
        if r.get("method_kind") != "peak_discharge":
            continue
        body.append(
            f"<tr><th>{esc(_NAMES.get(r['method'], r['method']))}</th>"
            f'<td class="num">{_fmt(r.get("peak_discharge_m3_per_s"))}</td>'
            f'<td class="num">{_fmt(r.get("peak_discharge_cfs"), "auto")}</td>'
            f'<td class="num">{_fmt(r.get("time_to_peak_h"), "{:.2f}")}</td>'
            f'<td class="num">{_fmt(r.get("tc_min"), "{:.1f}")}</td>'
            f'<td class="num">{_fmt(r.get("runoff_depth_mm"), "{:.1f}")}</td>'
            f'<td class="num">{_fmt(r.get("runoff_depth_in"), "{:.2f}")}</td>'
            f'<td class="num">{_fmt(r.get("runoff_volume_m3"), "{:,.0f}")}</td>'
            f'<td class="num">{_fmt(r.get("runoff_volume_acre_ft"), "{:.3g}")}</td>'
            + _flag_cell(r) + "</tr>")
    return '<table class="design peaks">' + head + "".join(body) + "</table>"


def _tc_table(rows):
    head = ("<tr><th>Method</th><th>Tc min</th><th>Tc h</th><th>Path length m</th>"
            "<th>Slope used m/m</th><th>Range of applicability</th></tr>")
    body = []
    tcs = [r for r in rows if r.get("method_kind") == "time_of_concentration"]
    for r in tcs:
        body.append(
            f"<tr><th>{esc(_NAMES.get(r['method'], r['method']))}</th>"
            f'<td class="num">{_fmt(r.get("tc_min"), "{:.1f}")}</td>'
            f'<td class="num">{_fmt(r.get("tc_h"), "{:.3f}")}</td>'
            f'<td class="num">{_fmt(r.get("path_length_m"), "{:,.0f}")}</td>'
            f'<td class="num">{_fmt(r.get("slope_used_m_per_m"), "{:.4f}")}</td>'
            + _flag_cell(r) + "</tr>")
    spread = ""
    if tcs:
        r = tcs[0]
        spread = (f'<p class="note">Spread between the methods: shortest '
                  f'{_fmt(r.get("tc_shortest_min"), "{:.1f}")} min, longest '
                  f'{_fmt(r.get("tc_longest_min"), "{:.1f}")} min (ratio '
                  f'{_fmt(r.get("tc_spread_ratio"), "{:.2f}")}). The peaks use: '
                  f"{esc(_text(_uh(rows).get('tc_method_used')))}.</p>")
    return '<table class="design tc">' + head + "".join(body) + "</table>" + spread


def _uh(rows):
    return next((r for r in rows if r.get("method") == "nrcs_unit_hydrograph"), {})


def _intensity_text(rat):
    if _f(rat.get("rainfall_intensity_mm_per_h")) is None:
        return "–"
    return (f"{_fmt(rat.get('rainfall_intensity_mm_per_h'), '{:.1f}')} mm/h "
            f"({_fmt(rat.get('rainfall_intensity_in_per_h'), '{:.2f}')} in/h) for "
            f"{_fmt(rat.get('rainfall_duration_used_min'), '{:.1f}')} min")


def _inputs_table(d, rows):
    uh = _uh(rows)
    rat = next((r for r in rows if r.get("method") == "rational"), {})
    vel = (d.design_meta.get("design_flow_inputs") or {}).get("velocity_method") or {}
    meta = d.design_meta.get("design_flow_inputs") or {}
    items = [
        ("Catchment area", f"{_fmt(uh.get('area_km2'), '{:.4g}')} km² = "
                           f"{_fmt(uh.get('area_ha'), '{:.4g}')} ha = "
                           f"{_fmt(uh.get('area_acres'), '{:,.1f}')} acres"),
        ("Rainfall", f"{_fmt(uh.get('rainfall_depth_mm'), '{:.1f}')} mm "
                     f"({_fmt(uh.get('rainfall_depth_in'), '{:.2f}')} in) in "
                     f"{_fmt(uh.get('rainfall_duration_h'), '{:g}')} h, "
                     f"{_text(uh.get('rainfall_pattern'))}, from "
                     f"{_text(uh.get('rainfall_source'))}"),
        ("Return period", f"{_fmt(uh.get('return_period_yr'), '{:g}')} years"),
        ("IDF table", _text(meta.get("idf_table")) or "none"),
        ("Curve number", f"area-weighted {_fmt(uh.get('curve_number_area_weighted'), '{:.1f}')}"
                         f" (range {_fmt(uh.get('curve_number_min'), '{:g}')}–"
                         f"{_fmt(uh.get('curve_number_max'), '{:g}')}), "
                         f"{_text(uh.get('curve_number_weighting'))}, ARC "
                         f"{_text(uh.get('antecedent_runoff_condition'))}, Ia/S "
                         f"{_fmt(uh.get('initial_abstraction_ratio'), '{:g}')}"),
        ("Runoff coefficient C", _fmt(rat.get("runoff_coefficient"), "{:.3f}")
         if _f(rat.get("runoff_coefficient")) is not None else "not given"),
        ("Rational intensity", _intensity_text(rat)),
        ("Mean land slope", f"{_fmt(uh.get('mean_land_slope_m_per_m'), '{:.3f}')} m/m"),
        ("Peak rate factor", f"{_fmt(uh.get('peak_rate_factor_us'), '{:g}')} (US) = "
                             f"{_fmt(uh.get('peak_rate_factor_si'), '{:.4f}')} (SI)"),
        ("Time step", f"{_fmt(uh.get('time_step_min'), '{:g}')} min"),
        ("Base flow", f"{_fmt(uh.get('base_flow_m3_per_s'), '{:g}')} m³/s"),
        ("Mass balance", "hydrograph volume within "
                         + _fmt(abs(_f(uh.get("mass_balance_error_fraction")) or 0) * 100,
                                "{:.2g}") + " % of runoff depth × area"),
    ]
    for k, label in (("sheet_flow_n", "Sheet-flow Manning's n"),
                     ("p2_24h_mm", "2-year 24-hour rainfall (mm)"),
                     ("sheet_flow_max_length_m", "Longest sheet flow (m)"),
                     ("shallow_surface", "Shallow-flow surface"),
                     ("channel_n", "Channel Manning's n"),
                     ("hydraulic_radius_m", "Channel hydraulic radius (m)"),
                     ("channel_threshold_m2", "Channel from upstream area (m²)")):
        v = vel.get(k)
        items.append((label, "not given" if v is None else
                      (_fmt(v, "{:.4g}") if _f(v) is not None else esc(str(v)))))
    return ('<table class="design inputs">' + "".join(
        f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in items) + "</table>")


def _ranges_html(rows):
    out = []
    for r in rows:
        text = _text(r.get("range_of_applicability"))
        if not text or not r.get("method"):
            continue
        flagged = str(r.get("outside_range")).lower() in ("true", "1")
        flag = (f' <strong class="w">This catchment is outside it: '
                f'{esc(_text(r.get("range_flags")))}.</strong>' if flagged else "")
        out.append(f"<li>{esc(text)}.{flag}</li>")
    return "<ul>" + "".join(out) + "</ul>"


def design_html(d, oid) -> str:
    """The design-flow part of an outlet's section ('' when the folder has none)."""
    rows = [r for r in d.design.get(oid, []) if _text(r.get("method"))]
    if not rows:
        failed = d.design.get(oid)
        if failed:
            return (f'<div class="design"><h3>{DESIGN_TITLE}</h3><p class="note">Not '
                    f"computed for this outlet: {esc(_text(failed[0].get('note')))}</p></div>")
        return ""
    parts = [f'<div class="design"><h3>{DESIGN_TITLE}</h3>',
             '<p class="note">Planning-level estimates: each method is valid only within '
             "its range of applicability (flagged below when this catchment falls outside "
             "it). Rainfall, land cover and method must follow the local agency's drainage "
             "manual; design is the work of a licensed professional. SI first, US customary "
             "beside.</p>"]
    uri = _figure(d, oid, rows)
    if uri:
        parts.append(f'<figure><img src="{uri}" alt="design storm and hydrograph of '
                     f'{esc(oid)}"><figcaption>Hyetograph on top (rainfall and the part '
                     "that runs off), design hydrograph below (NRCS unit hydrograph): peak, "
                     "lag from the rainfall centroid, rising and recession limbs, base flow "
                     "shaded.</figcaption></figure>")
    parts += ["<h4>Peak discharge by method</h4>", _peak_table(rows),
              "<h4>Time of concentration by method</h4>", _tc_table(rows),
              "<h4>Inputs used</h4>", _inputs_table(d, rows),
              "<h4>Ranges of applicability</h4>", _ranges_html(rows), "</div>"]
    return "".join(parts)
