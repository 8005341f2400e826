"""The HTML survey report: one self-contained file a reviewer can open anywhere.

Figures are PNGs embedded as base64 ``data:`` URIs and the CSS is inline, so the
file makes no network request and needs no companion files.
"""

from __future__ import annotations

import base64
import html
import io
import re
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from .. import __version__
from ..caveats import CAVEATS
from ._atomic import write_bytes_atomic
from ._figmap import load_relief, map_figure
from ._figstats import counted_area_m2, dd_figure, distributions_figure, ripley_figure, sfd_figure
from ._geopackage import SurveyOutput, read_survey

__all__ = ["build_report", "render_preview_png", "figure_png"]

_DPI = 100
_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;max-width:1100px;margin:1.5em auto;
padding:0 1em;color:#222;line-height:1.45}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.2em;border-bottom:1px solid #ccc;margin-top:1.6em}
.caveats{background:#fff6e0;border-left:4px solid #d58a00;padding:.6em 1em;white-space:pre-wrap}
.note{color:#555;font-size:.9em}figure{margin:.8em 0}img{max-width:100%;height:auto;border:1px solid #ddd}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}td,th{border:1px solid #ccc;padding:.25em .5em;
vertical-align:top;text-align:left}th{background:#f0f0f0}td.num{text-align:right;font-variant-numeric:tabular-nums}
.pair{display:flex;flex-wrap:wrap;gap:1em}.pair figure{flex:1 1 480px}
pre{white-space:pre-wrap;word-break:break-all;font-size:.95em;margin:0}
"""
_URL = re.compile(r"\b(?:https?|ftp)://", re.IGNORECASE)


def _text(value) -> str:
    """Escaped text; URL schemes dropped so the file holds no network address."""
    return html.escape(_URL.sub("", str(value)))


def figure_png(fig: Figure) -> bytes:
    """PNG bytes of a figure (Agg canvas; no software stamp, so bytes are reproducible)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, metadata={"Software": None})
    return buf.getvalue()


def _img(fig, alt: str) -> str:
    data = base64.b64encode(figure_png(fig)).decode("ascii")
    return f'<img alt="{_text(alt)}" src="data:image/png;base64,{data}">'


def _section(title: str, fig, note: str, alt: str) -> str:
    body = _img(fig, alt) if fig is not None else ""
    return f"<h2>{_text(title)}</h2><figure>{body}<figcaption class=note>{_text(note)}</figcaption></figure>"


def _fmt(v) -> str:
    if isinstance(v, (float, np.floating)):
        return "" if not np.isfinite(v) else f"{v:.4g}"
    return str(v)


def _table(frame, numeric=()) -> str:
    head = "".join(f"<th>{_text(c)}</th>" for c in frame.columns)
    rows = []
    for rec in frame.itertuples(index=False):
        cells = "".join(f'<td class="num">{_text(_fmt(v))}</td>' if c in numeric else f"<td>{_text(_fmt(v))}</td>"
                        for c, v in zip(frame.columns, rec, strict=True))
        rows.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def _summary(survey: SurveyOutput) -> str:
    c = survey.craters
    items = [("craters", str(len(c))), ("input", survey.run.get("input_file", "?")),
             ("input SHA-256", survey.run.get("input_sha256", "?")), ("body", survey.run.get("body", "?")),
             ("run ended (UTC)", survey.run.get("end_time_utc", "?")),
             ("tiles failed", survey.run.get("tiles_failed_count", "0"))]
    if "verdict" in c.columns and len(c):
        counts = c["verdict"].astype(str).value_counts().sort_index()
        items.append(("verdicts", ", ".join(f"{k}: {v}" for k, v in counts.items())))
    rows = "".join(f"<tr><th>{_text(k)}</th><td>{_text(v)}</td></tr>" for k, v in items)
    return f"<table>{rows}</table>"


def _provenance(run: dict) -> str:
    rows = "".join(f"<tr><th>{_text(k)}</th><td><pre>{_text(v)}</pre></td></tr>"
                   for k, v in run.items() if k != "caveats")
    return f"<details open><summary>Provenance: {len(run)} entries of the run table</summary><table>{rows}</table></details>"


def _maps(survey: SurveyOutput, relief) -> str:
    figs = [map_figure(survey.craters, colour_by=key, relief=relief, footprint=survey.footprint,
                       title=f"Crater rims coloured by {key}") for key in ("verdict", "p_impact")
            if key in survey.craters.columns or key == "verdict"]
    return "<div class=pair>" + "".join(f"<figure>{_img(f, 'crater map')}</figure>" for f in figs) + "</div>"


def build_report(gpkg_path, out_html, *, dem_path=None, overwrite: bool = False) -> Path:
    """Write a self-contained HTML report of a survey GeoPackage.

    Parameters
    ----------
    gpkg_path : path-like
        GeoPackage written by :func:`morpho.outputs.write_geopackage`.
    out_html : path-like
        The ``.html`` file to write (atomically).
    dem_path : path-like, optional
        The surveyed DEM, for a shaded-relief background (read through
        :func:`morpho.ingest.read_dem`); without it the map shows outlines only.
    overwrite : bool, default False
        Replace an existing report.

    Returns
    -------
    pathlib.Path
        The report written.

    Notes
    -----
    Sections: caveats; summary; maps by verdict and p_impact; d/D against D with the
    body's published fresh-crater relation; cumulative SFD and R-plot; Ripley L with
    its envelope; feature distributions by verdict; population statistics; provenance.
    """
    from ._atomic import check_targets

    check_targets([out_html], overwrite=overwrite)
    survey = read_survey(gpkg_path)
    relief, relief_note = load_relief(dem_path, survey.craters.crs)
    area, area_note = counted_area_m2(survey.footprint, survey.population)
    body = survey.run.get("body") or None
    parts = [
        f"<h1>morpho survey report: {_text(survey.run.get('input_file', Path(gpkg_path).name))}</h1>",
        f"<p class=note>From {_text(Path(gpkg_path).name)}, written by morpho {_text(__version__)}.</p>",
        f"<h2>Read first: caveats</h2><div class=caveats>{_text(CAVEATS)}</div>",
        "<h2>Summary</h2>", _summary(survey),
        "<h2>Map</h2>", _maps(survey, relief), f"<p class=note>{_text(relief_note)}</p>",
        _section("Depth/diameter against diameter", *dd_figure(survey.craters, body), "d/D against D"),
        _section("Size-frequency distribution", *_with_note(sfd_figure(survey.craters, area), area_note),
                 "cumulative SFD and R-plot"),
        _section("Spatial randomness: Ripley L", *ripley_figure(survey.envelope), "Ripley L envelope"),
        _section("Feature distributions by verdict", *distributions_figure(survey.craters),
                 "feature histograms"),
        "<h2>Population statistics</h2>",
        _table(survey.population, numeric=("value", "p_value", "n")) if len(survey.population)
        else "<p class=note>No population statistics in the GeoPackage.</p>",
        "<h2>Provenance</h2>", _provenance(survey.run),
    ]
    page = ("<!DOCTYPE html><html lang=en><head><meta charset=utf-8>"
            f"<title>morpho report: {_text(survey.run.get('input_file', ''))}</title>"
            f"<style>{_CSS}</style></head><body>{''.join(parts)}</body></html>\n")
    return write_bytes_atomic(out_html, page.encode("utf-8"), overwrite=overwrite)


def _with_note(fig_note, extra):
    fig, note = fig_note
    return fig, f"{note} Area: {extra}."


def render_preview_png(gpkg_path, out_png, *, dem_path=None, overwrite: bool = False) -> Path:
    """Quick-look PNG of the survey map (rims coloured by verdict) for ``survey --preview``.

    Parameters
    ----------
    gpkg_path : path-like
        Survey GeoPackage.
    out_png : path-like
        PNG to write (atomically).
    dem_path : path-like, optional
        DEM for the shaded relief.
    overwrite : bool, default False
        Replace an existing file.
    """
    from ._atomic import check_targets

    check_targets([out_png], overwrite=overwrite)
    survey = read_survey(gpkg_path)
    relief, _ = load_relief(dem_path, survey.craters.crs)
    fig = map_figure(survey.craters, colour_by="verdict", relief=relief, footprint=survey.footprint,
                     title=f"morpho: {survey.run.get('input_file', '')}", figsize=(8.0, 7.0))
    return write_bytes_atomic(out_png, figure_png(fig), overwrite=overwrite)
