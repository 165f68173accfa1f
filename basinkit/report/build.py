"""The report of an output folder: one self-contained HTML file (figures embedded as PNG,
style and script inline, nothing fetched from the network), printable from a browser.

Built only from the files the workflow steps wrote (listed in io/products.py): catchments.csv and
.gpkg, channels.gpkg, morphometry.csv, hypsometry.csv, profile.csv, steepness.csv,
knickpoints.csv, flow_paths.csv, provenance.json and the flow folder. A product that is not
there leaves its part out, and the report says so.

Up to ``full_sections_max`` delineated outlets, every outlet gets a full section (map,
figure table, long profile, χ plot, hypsometric curve, warnings). Above that the report
summarises: a sortable table of every outlet, an overview map without outlet labels and the
distributions of area and the key descriptors, plus full sections for the outlets named in
``report_outlets`` (else the first few).
"""

from __future__ import annotations

from pathlib import Path

from . import sections as H
from ._assets import CSS, SCRIPT
from .design import design_html

__all__ = ["write_report", "render_report", "SUMMARY_SECTIONS"]

#: Outlets given full sections in a summary when the job names none.
SUMMARY_SECTIONS = 10


def _img(uri, alt, caption=None):
    cap = f"<figcaption>{H.esc(caption)}</figcaption>" if caption else ""
    return f'<figure><img src="{uri}" alt="{H.esc(alt)}">{cap}</figure>'


def _outlet_section(d, figs, oid):
    fid = d.file_id[oid]
    out = [f'<section class="outlet" id="outlet-{H.esc(fid)}">',
           f"<h2>Outlet {H.esc(oid)}</h2>"]
    desc = d.tables["catchment"].get(oid, {}).get("description")
    if isinstance(desc, str) and desc.strip():
        out.append(f'<p class="desc">{H.esc(desc)}</p>')
    m = figs.outlet_map(oid)
    out.append('<div class="pair">')
    out.append(_img(m, f"map of the catchment of {oid}",
                    "Shaded relief with the catchment divide, channels by Strahler order, the "
                    "outlet as given (circle) and snapped (triangle); coordinates in the DEM's "
                    "CRS.") if m else '<p class="note">No map: the catchment polygon and '
                                      "the DEM are not in this folder.</p>")
    out.append("<div><h3>Catchment figures</h3>" + H.figure_table_html(d, oid) + "</div>")
    out.append("</div>")
    lp, chi, hy = figs.long_profile(oid), figs.chi_plot(oid), figs.hypsometry(oid)
    missing = []
    out.append('<div class="pair">')
    if lp:
        out.append(_img(lp, f"long profile of {oid}",
                        "Elevation along the longest flow path, DEM as read and conditioned; "
                        "knickpoints on the path marked."))
    else:
        missing.append("the longest flow path's profile (profile.csv)")
    if chi:
        out.append(_img(chi, f"chi plot of {oid}",
                        "χ against elevation for the channels upstream (main stem dark); a "
                        "straight line means uniform steepness k_sn."))
    else:
        missing.append("the χ–elevation plot (channel nodes in profile.csv)")
    out.append("</div>")
    out.append('<div class="pair">')
    if hy:
        out.append(_img(hy, f"hypsometric curve of {oid}",
                        "Share of the catchment above each relative height (Strahler 1952)."))
    else:
        missing.append("the hypsometric curve (hypsometry.csv)")
    out.append("<div>" + H.warnings_html(d, oid) + "</div>")
    out.append("</div>")
    out.append(design_html(d, oid))
    if missing:
        out.append('<p class="note">Not shown, not in this folder for this outlet: '
                   + H.esc("; ".join(missing)) + ".</p>")
    out.append("</section>")
    return "".join(out)


_STATE: dict = {}


#: The report's own figures of the whole folder, drawn in the same workers as the outlet
#: sections (first: they take longest): job key -> Figures method.
_WHOLE_FIGURES = {("figure", "overview"): "overview",
                  ("figure", "distributions"): "distributions"}


def _section_job(oid):
    """``(key, result)``: an outlet's full section (``oid`` its id), or for a key of
    :data:`_WHOLE_FIGURES` what that Figures method returns (the overview also with the
    outlets it labelled)."""
    import warnings

    figs = _STATE["figs"]
    if oid in _WHOLE_FIGURES:
        res = getattr(figs, _WHOLE_FIGURES[oid])()
        return oid, ((res, figs.overview_labels) if oid == ("figure", "overview") else res)
    with warnings.catch_warnings():  # empty legends, all-NaN medians: the figure says it
        warnings.simplefilter("ignore", UserWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        return oid, _outlet_section(_STATE["d"], figs, oid)


def _sections(d, figs, ids, workers, progress):
    """The full sections (and the whole-folder figures among ``ids``, keys of
    :data:`_WHOLE_FIGURES`), drawn in ``workers`` forked processes when there are several
    (figures are independent and matplotlib draws on one core), else one by one; the
    output does not depend on it."""
    import gc
    import os

    if workers is None:
        workers = min(2, os.cpu_count() or 1)
    figs.preload()
    _STATE.update(d=d, figs=figs)
    try:
        if workers > 1 and len(ids) >= 4:
            import multiprocessing as mp
            from concurrent.futures import ProcessPoolExecutor
            from concurrent.futures.process import BrokenProcessPool

            try:
                ctx = mp.get_context("fork")
            except ValueError:  # no fork on this platform
                ctx = None
            if ctx is not None:
                from .._processes import signals_held, stop_executor, worker_init

                try:
                    # the workers end with this process (even when it is killed) and
                    # leave Ctrl-C to it; an error or an interrupt stops them now
                    pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx,
                                               initializer=worker_init,
                                               initargs=(os.getpid(),))
                    try:
                        # the objects alive now stay out of the workers' collections:
                        # they are not walked (and their pages not copied) in each worker
                        gc.freeze()
                        try:
                            with signals_held():  # the workers are forked by the first
                                it = pool.map(_section_job, ids)  # submit
                        finally:
                            gc.unfreeze()  # this process collects them as before
                        sections = _gathered(it, ids, progress)
                    except BaseException:
                        stop_executor(pool)
                        raise
                    pool.shutdown()
                    return sections
                except (OSError, BrokenProcessPool):
                    pass  # drawn in this process below
        return _gathered((_section_job(i) for i in ids), ids, progress)
    finally:
        _STATE.clear()


def _gathered(results, ids, progress):
    """``{key: result}`` of the ``(key, result)`` pairs, the outlet sections counted by
    ``progress`` (the whole-folder figures not)."""
    done = {}

    def sections():
        for key, res in results:
            done[key] = res
            if key not in _WHOLE_FIGURES:
                yield key

    n = sum(1 for k in ids if k not in _WHOLE_FIGURES)
    it = sections() if progress is None else progress(sections(), total=n,
                                                         desc="report sections")
    for _ in it:
        pass
    return done


def render_report(folder, *, report_outlets=(), full_sections_max=50, progress=None,
                  workers=None) -> str:
    """The report of an output folder as one HTML string.

    Parameters
    ----------
    folder : str or Path
        An output folder of ``basinkit run`` or of the commands.
    report_outlets : sequence of str
        Outlets to give full sections (default: all up to ``full_sections_max``, else the
        first :data:`SUMMARY_SECTIONS`).
    full_sections_max : int
        Up to this many delineated outlets every one gets a full section; above it the
        report summarises.
    progress : callable, optional
        ``progress(iterable, total=, desc=)`` wrapper (e.g. a progress bar or a logger).
    workers : int, optional
        Processes drawing the full sections (default: up to 2; 1 draws in this process).

    Returns
    -------
    str
        A complete, self-contained HTML document (UTF-8).

    Raises
    ------
    InputError
        ``folder`` is not a folder.

    References
    ----------
    Strahler, A. N. (1952). Hypsometric (area-altitude) analysis of erosional topography.
    GSA Bulletin 63:1117-1142 (the hypsometric curve).
    Perron, J. T., Royden, L. (2013). An integral approach to bedrock river profile
    analysis. Earth Surface Processes and Landforms 38:570-576 (the χ plot).
    """
    from ..io.products import RunFolder
    from .collect import collect
    from .figures import Figures

    run = RunFolder(folder)
    d = collect(run, report_outlets=report_outlets, full_sections_max=int(full_sections_max),
                summary_sections=SUMMARY_SECTIONS, progress=progress)
    figs = Figures(d)
    job = d.prov.get("job") if isinstance(d.prov.get("job"), dict) else {}
    params_job = (d.prov.get("parameters") or {}).get("job") or {}
    title = job.get("name") or params_job.get("name") or Path(folder).resolve().name
    desc = params_job.get("description") or ""
    n_all, n_ok = len(d.outlets), len(d.ok_ids)
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{H.esc(title)} – basinkit report</title>", f"<style>{CSS}</style>",
        "</head><body>",
        f'<header class="top"><div class="inner"><h1>{H.esc(title)}</h1>',
        f"<p>{H.esc(desc)}</p>" if desc else "",
        f"<p>{n_ok:,} of {n_all:,} outlet(s) delineated · "
        + ("summary of every outlet, full sections for " if d.summary_mode else
           "full sections for ") + f"{len(d.sections):,} · basinkit "
        f"{H.esc(d.prov.get('version', ''))}</p>",
        "</div></header><main>",
        '<section class="cautions"><h2>Read this first</h2><ul>'
        + "".join(f"<li>{H.esc(c)}</li>" for c in d.cautions) + "</ul></section>",
        '<h2 id="run">The DEM and the run</h2>', H.facts_html(d),
    ]
    if d.job_notes:
        parts.append('<div class="warnings"><h3>Warnings about the whole run</h3><ul>'
                     + "".join(f"<li>{H.esc(m)}</li>" for m in d.job_notes) + "</ul></div>")
    parts += ['<h2 id="products">What this folder holds</h2>', H.products_html(d)]
    whole = [k for k, want in ((("figure", "overview"), True),
                               (("figure", "distributions"), n_ok >= 10)) if want]
    done = _sections(d, figs, whole + list(d.sections), workers, progress)
    ov, figs.overview_labels = done.get(("figure", "overview"), (None, None))
    if ov:
        cap = ("Shaded relief of the DEM, catchment divides"
               + (" (sub-catchments)" if d.summary_mode else "")
               + ", channels coloured by Strahler order, snapped outlets"
               + (" with their ids." if figs.overview_labels else
                  " (not labelled: find them in the table below)."))
        parts += ['<h2 id="overview">Overview</h2>', _img(ov, "overview map", cap)]
    if n_ok >= 10:
        uri, shown = done[("figure", "distributions")]
        if uri:
            parts += ['<h2 id="distributions">Distributions</h2>',
                      f'<p class="note">Over the {n_ok:,} delineated outlets; dashed: the '
                      "median. Nested catchments count once each, so the larger ones "
                      "share area with the smaller ones inside them.</p>",
                      _img(uri, "histograms of " + ", ".join(shown))]
    parts += ['<h2 id="outlets">Outlets</h2>',
              '<p class="note">Click a heading to sort by it (again for the other way). '
              "Warnings: edge = the divide reaches the DEM's edge, snap = snapped far or "
              "doubtfully, fill = deep or widespread filled depressions."
              + (f" {H.esc(d.section_note)}." if d.section_note else "") + "</p>",
              H.outlet_table_html(d)]
    if d.sections:
        parts.append('<nav class="toc">' + "".join(
            f'<div><a href="#outlet-{H.esc(d.file_id[i])}">{H.esc(i)}</a></div>'
            for i in d.sections) + "</nav>")
    parts += [done[oid] for oid in d.sections]
    parts += ['<section class="provenance"><h2 id="provenance">Provenance</h2>',
              H.provenance_html(d), "</section>",
              "<footer>Written by basinkit from the files of this folder. Methods: "
              "Priority-Flood depression filling (Barnes et al. 2014), D8 routing "
              "(O'Callaghan &amp; Mark 1984) on a stack (Braun &amp; Willett 2013), Strahler "
              "(1957) order, χ (Perron &amp; Royden 2013), hypsometry (Strahler 1952).</footer>",
              f"</main><script>{SCRIPT}</script></body></html>"]
    return "\n".join(p for p in parts if p)


def write_report(folder, path=None, *, report_outlets=(), full_sections_max=50,
                 progress=None, workers=None) -> Path:
    """Write the report of an output folder (see :func:`render_report`) to ``path``
    (default: ``folder/report.html``) through a temporary file, so that an interrupted run
    never leaves half a report.

    Examples
    --------
    >>> write_report("basinkit-demo-output")  # doctest: +SKIP
    PosixPath('basinkit-demo-output/report.html')
    """
    from ..io.writers import atomic_path

    path = Path(folder) / "report.html" if path is None else Path(path)
    text = render_report(folder, report_outlets=report_outlets,
                         full_sections_max=full_sections_max, progress=progress,
                         workers=workers)
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return path
