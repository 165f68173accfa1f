"""Network measures of a catchment (Horton 1945, Strahler 1957): stream counts, lengths
and areas by Strahler order, Horton ratios and drainage density, from the catchment's
channel cells (one catchment: :func:`network_numbers`; nested catchments all at once:
``_nested_network.range_network``, which sums in the same order)."""

from __future__ import annotations

import numpy as np


def _regress_ratio(orders, values, sign):
    """Horton ratio from the slope of log10(value) on order: 10**(sign * slope)."""
    ok = np.isfinite(values) & (values > 0)
    if ok.sum() < 2:
        return np.nan
    b = np.polyfit(np.asarray(orders, float)[ok], np.log10(values[ok]), 1)[0]
    return float(10.0 ** (sign * b))


def network_numbers(fm, stream_flat, strahler_flat, cells, member):
    """``(channel cells, streams, highest order, total length (m), n_k, l_k, a_k)`` of the
    catchment whose channel cells are ``cells`` (flat): per order k (index k) the number
    of Strahler streams, their summed length and their summed largest upstream area;
    ``member(flat cells)`` tells which cells belong to the catchment (a stream leaving it
    is cut at its edge)."""
    if cells.size == 0:
        return 0, 0, 0, 0.0, None, None, None
    rec = fm.receiver[cells]
    inside = rec >= 0
    inside[inside] = member(rec[inside])
    step = np.where(inside, fm.receiver_distance()[cells], 0.0)
    stream = stream_flat[cells]
    order = strahler_flat[cells].astype(np.int64)
    area = fm.d8_upstream_area_flat()[cells]
    u, inv = np.unique(stream, return_inverse=True)
    s_len = np.bincount(inv, weights=step, minlength=u.size)
    s_ord = np.zeros(u.size, np.int64)
    s_ord[inv] = order
    s_area = np.zeros(u.size)
    np.maximum.at(s_area, inv, area)
    kmax = int(s_ord.max())
    n_k = np.bincount(s_ord, minlength=kmax + 1)
    l_k = np.bincount(s_ord, weights=s_len, minlength=kmax + 1)
    a_k = np.bincount(s_ord, weights=s_area, minlength=kmax + 1)
    return int(cells.size), int(u.size), kmax, float(step.sum()), n_k, l_k, a_k


def network_keys(out, area_m2, ncells, nstreams, kmax, total, n_k, l_k, a_k):
    """Write the network keys of a catchment of ``area_m2`` into ``out`` from the numbers
    of :func:`network_numbers` (arrays indexed by order, at least ``kmax + 1`` long)."""
    out["channel_cells"] = int(ncells)
    if ncells == 0:
        for k in ("stream_count", "total_stream_length_m", "max_strahler_order",
                  "bifurcation_ratio", "length_ratio", "area_ratio",
                  "drainage_density_km_per_km2", "stream_frequency_per_km2",
                  "channel_maintenance_km2_per_km", "overland_flow_length_m"):
            out[k] = 0 if k in ("stream_count", "total_stream_length_m",
                                "max_strahler_order") else np.nan
        out["drainage_density_km_per_km2"] = 0.0
        out["stream_frequency_per_km2"] = 0.0
        return
    kmax = int(kmax)
    ks = np.arange(1, kmax + 1)
    n_k = np.asarray(n_k)[1:kmax + 1].astype(float)
    l_k = np.asarray(l_k)[1:kmax + 1]
    a_k = np.asarray(a_k)[1:kmax + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_l = l_k / n_k
        mean_a = a_k / n_k
    total = float(total)
    out["max_strahler_order"] = kmax
    out["stream_count"] = int(nstreams)
    out["total_stream_length_m"] = total
    for k in ks:
        out[f"stream_count_order_{k}"] = int(n_k[k - 1])
        out[f"stream_length_order_{k}_m"] = float(l_k[k - 1])
    out["bifurcation_ratio"] = _regress_ratio(ks, n_k, -1)
    out["length_ratio"] = _regress_ratio(ks, mean_l, 1)
    out["area_ratio"] = _regress_ratio(ks, mean_a, 1)
    a_km2 = area_m2 / 1e6
    dd = (total / 1e3) / a_km2 if a_km2 > 0 else np.nan
    out["drainage_density_km_per_km2"] = dd
    out["stream_frequency_per_km2"] = nstreams / a_km2 if a_km2 > 0 else np.nan
    out["channel_maintenance_km2_per_km"] = 1.0 / dd if dd > 0 else np.nan
    out["overland_flow_length_m"] = 1e3 / (2.0 * dd) if dd > 0 else np.nan
