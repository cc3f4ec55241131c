"""Drawing a finished folder: every figure into the folder, and the one-page HTML report of a run or an assignment.

:func:`draw_all` reads the finished datasets (:mod:`regimes.finished`),
draws each figure of :data:`regimes.figures.CATALOGUE` that the folder
supports, logging one line per figure, and only then writes the files, each
atomically. The report ``report.html`` holds the run's config, a data
summary, the figures (PNG embedded as ``data:`` URIs) and tables of
frequency, persistence and transition probabilities; it loads nothing from
anywhere, so it can be mailed or opened offline.
"""

from __future__ import annotations

import base64
import html
import io
import logging
import time
from pathlib import Path

import matplotlib
import numpy as np
from PIL import Image

from . import figures, finished, output

log = logging.getLogger("regimes")


def render(fig, fmt: str, dpi: int) -> bytes:
    """The figure as ``fmt`` (png, pdf or svg) bytes."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format=fmt, dpi=dpi)
    return buffer.getvalue()


def compact_png(png: bytes) -> bytes:
    """A PNG reduced to a 256-colour palette (without dithering) for embedding in the report; figures are mostly flat colour."""
    with Image.open(io.BytesIO(png)) as image:
        small = image.convert("RGB").quantize(256, dither=Image.Dither.NONE)
    buffer = io.BytesIO()
    small.save(buffer, format="PNG", optimize=True)
    return buffer.getvalue()


def draw_all(found: finished.Finished, style) -> list[Path]:
    """Draw every figure a finished folder supports, and the report of a run or assignment; returns the files written.

    Parameters
    ----------
    found : regimes.finished.Finished
        A finished run, assignment or scan (:func:`regimes.finished.open_folder`).
    style : types.SimpleNamespace
        Validated ``[figures]`` settings (:func:`regimes.config.validate_section`).
    """
    specs = figures.available(found)
    drawn = []
    with matplotlib.rc_context(figures.LOOK):
        for i, spec in enumerate(specs, 1):
            started = time.perf_counter()
            fig = spec.draw(found, style)
            content = render(fig, style.format, style.dpi)
            png = compact_png(content if style.format == "png" else render(fig, "png", style.dpi))
            drawn.append((spec, content, png))
            log.info("figure %d/%d: %s drawn in %.1f s", i, len(specs), spec.stem, time.perf_counter() - started)
    written = []
    for spec, content, _ in drawn:
        where = found.scan_folder if spec.needs == "scan" else found.folder
        written.append(output.write_bytes(content, where / f"{spec.stem}.{style.format}"))
    if found.has_results:
        written.append(output.write_bytes(page(found, [(spec, png) for spec, _, png in drawn]).encode("utf-8"), found.folder / "report.html"))
    log.info("wrote %d files into %s", len(written), found.folder)
    return written


# --------------------------------------------------------------------------
# the page
# --------------------------------------------------------------------------

METHODS = {"kmeans": "k-means", "gaussian-mixture": "Gaussian mixture"}

CSS = """
:root { --ink: #1d2430; --muted: #5b6472; --line: #d8dde4; --band: #f3f5f8; --accent: #2f5d8a; }
* { box-sizing: border-box; }
body { margin: 0; font: 15px/1.5 system-ui, -apple-system, "Segoe UI", "DejaVu Sans", sans-serif; color: var(--ink); background: #fff; }
header { background: var(--band); border-bottom: 3px solid var(--accent); padding: 1.4rem 2rem 1rem; }
header h1 { margin: 0 0 .2rem; font-size: 1.6rem; }
header p { margin: 0; color: var(--muted); }
nav { padding: .5rem 2rem; border-bottom: 1px solid var(--line); font-size: .9rem; }
nav a { color: var(--accent); margin-right: 1rem; text-decoration: none; }
main { max-width: 1080px; margin: 0 auto; padding: .5rem 2rem 3rem; }
h2 { font-size: 1.2rem; border-bottom: 1px solid var(--line); padding-bottom: .2rem; margin-top: 1.6rem; }
h3 { font-size: 1rem; margin-bottom: .2rem; }
.facts { display: grid; grid-template-columns: repeat(auto-fill, minmax(240px, 1fr)); gap: .5rem; margin: .8rem 0; }
.fact { border-left: 3px solid var(--accent); background: var(--band); padding: .3rem .6rem; font-size: .88rem; }
.fact b { display: block; font-size: .7rem; text-transform: uppercase; letter-spacing: .05em; color: var(--muted); }
figure { margin: 1.2rem 0 2rem; }
figure img { width: 100%; height: auto; border: 1px solid var(--line); }
figcaption { color: var(--muted); font-size: .9rem; margin-top: .3rem; }
table { border-collapse: collapse; margin: .6rem 0 1.2rem; font-size: .9rem; }
th, td { border-bottom: 1px solid var(--line); padding: .25rem .7rem; text-align: right; }
th { background: var(--band); }
td.name, th.name { text-align: left; }
pre { background: var(--band); border: 1px solid var(--line); padding: .8rem; overflow-x: auto; font-size: .82rem; }
.note { color: var(--muted); font-size: .85rem; }
"""


def _esc(value) -> str:
    return html.escape(str(value))


def _table(head: list[str], rows: list[list], names: int = 1) -> str:
    """An HTML table; the first ``names`` columns are text, aligned left."""
    def cells(row, tag):
        return "".join(f'<{tag}{" class=name" if i < names else ""}>{_esc(v)}</{tag}>' for i, v in enumerate(row))

    body = "".join(f"<tr>{cells(r, 'td')}</tr>" for r in rows)
    return f"<table><thead><tr>{cells(head, 'th')}</tr></thead><tbody>{body}</tbody></table>"


def data_summary(found: finished.Finished) -> list[tuple[str, str]]:
    """(label, value) pairs: files, period, grid, days used, points used and missing; the model of an assignment."""
    lab, comp, eofs = found.labels, found.composites, found.eofs
    first, last = (str(v)[:10] for v in lab["time"].values[[0, -1]])
    lat, lon = comp["lat"].values, comp["lon"].values
    used = int(np.isfinite(comp["anomaly_composite"].isel(regime=0).values).sum())
    total = lat.size * lon.size
    step = lambda v: f"{float(np.median(np.abs(np.diff(v)))):g}°" if v.size > 1 else "one point"  # noqa: E731
    settings = found.settings
    files = lab.attrs.get("input_files", "").split("\n")
    members = [("ensemble", f"{lab.sizes['member']} members, classified one by one")] if "member" in lab.dims else []
    if eofs is not None:
        modes = ("EOFs", f"{eofs.sizes['mode']} modes, {100 * float(eofs['variance_fraction'].sum()):.1f} % of variance, {settings['weighting']} weights")
    else:
        modes = ("EOFs", f"the model's {lab.sizes['mode']} modes, {settings['weighting']} weights")
    model = [("model", f"{lab.attrs['model_file']} (checksum {lab.attrs.get('model_checksum', '?')})"),
             ("climatology", lab.attrs.get("climatology_comment", lab.attrs.get("climatology_source", "")))] if found.kind == "assignment" else []
    return [
        ("variable", f"{settings['variable']} ({settings.get('units') or 'no units'})"),
        ("input files", f"{len(files)}: " + ", ".join(Path(f).name for f in files[:4]) + (" …" if len(files) > 4 else "")),
        ("period", f"{first} to {last}"),
        ("season", f"{figures.season_name(figures.season_months(found))}, {np.unique(lab['season_year']).size} season-years"),
        ("days used", f"{lab.sizes['time']} in {int(lab['segment_start'].sum())} runs of consecutive days"),
        *members,
        ("grid", f"{lat.size} × {lon.size} points, {step(lat)} × {step(lon)}; lat {lat.min():g} to {lat.max():g}, lon {lon.min():g} to {lon.max():g}"),
        ("grid points", f"{used} used, {total - used} missing at every time (left out)"),
        ("anomalies", f"climatology {settings['climatology']}" + (f", {settings['harmonics']} harmonics" if settings["climatology"] == "daily" else "")
         + (", detrended" if settings.get("detrend") else "")),
        modes,
        ("regimes", f"k = {settings['k']} by {METHODS.get(settings['method'], settings['method'])}"
         + (f", unassigned below a pattern correlation of {settings['unassigned_below']:g}" if settings.get("unassigned_below") is not None else "")),
        *model,
    ]


def regime_table(found: finished.Finished) -> str:
    """Frequency and persistence of each regime."""
    st = found.statistics
    rows = []
    for r, name in zip(st["regime"].values, st["regime_name"].values):  # label 0 (unassigned) included as a state
        p = float(st["transition_probability"].sel(regime_from=r, regime_to=r))
        rows.append([
            r, name, int((found.labels["label"] == r).sum()), f"{100 * float(st['frequency'].sel(regime=r)):.1f}",
            int(st["episode_count"].sel(regime=r)), f"{float(st['mean_duration'].sel(regime=r)):.1f}",
            f"{float(st['median_duration'].sel(regime=r)):.0f}", int(st["max_duration"].sel(regime=r)),
            f"{p:.3f}", f"{1 / (1 - p):.1f}" if p < 1 else "∞",
        ])
    unit, step = figures.duration_units(st)
    head = ["regime", "name", unit if "member" not in found.labels.dims else f"member-{unit}", "frequency %", "episodes",
            f"mean {step}", f"median {step}", f"longest {step}", "persistence p", f"1/(1−p) {step}"]
    return _table(head, rows, names=2)


def matrix_table(found: finished.Finished, name: str) -> str:
    """A regime-to-regime probability matrix, rows from, columns to."""
    values = found.statistics[name].values
    regimes = found.statistics["regime"].values
    rows = [[f"from {r}", *(f"{v:.3f}" if np.isfinite(v) else "–" for v in row)] for r, row in zip(regimes, values)]
    return _table(["", *(f"to {r}" for r in regimes)], rows)


def eof_table(found: finished.Finished) -> str:
    eofs = found.eofs
    fraction = eofs["variance_fraction"].values
    error = fraction * eofs["eigenvalue_error"].values / eofs["eigenvalue"].values
    rows = [[m, f"{100 * f:.2f}", f"{100 * e:.2f}", f"{100 * c:.2f}"]
            for m, f, e, c in zip(eofs["mode"].values, fraction, error, np.cumsum(fraction))]
    return _table(["mode", "variance %", "± %", "cumulative %"], rows)


def scan_table(scan) -> str:
    names = ("classifiability", "surrogate_quantile", "p_value", "within_total_variance_ratio", "silhouette",
             "split_half_stability", "bootstrap_stability", "bic")
    head = ["k", "classifiability", "noise quantile", "p", "significant", "within/total", "silhouette", "split-half", "bootstrap", "BIC"]
    rows = []
    for i, k in enumerate(scan["k"].values):
        v = [float(scan[n].values[i]) for n in names]
        rows.append([k, *(f"{x:.3f}" for x in v[:3]), "yes" if scan["significant"].values[i] else "no", *(f"{x:.3f}" for x in v[3:7]), f"{v[7]:.0f}"])
    return _table(head, rows)


def _figure_html(spec: figures.Spec, png: bytes) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure id="{spec.stem}"><img src="data:image/png;base64,{data}" alt="{_esc(spec.heading)}">'
            f"<figcaption>{_esc(spec.caption)}</figcaption></figure>")


def page(found: finished.Finished, images: list[tuple[figures.Spec, bytes]]) -> str:
    """The report of a finished run or assignment as one self-contained HTML page."""
    settings = found.settings
    lab = found.labels
    what = "Regimes" if found.kind == "run" else "Assigned regimes"
    title = f"{what} of {settings['variable']}: k = {settings['k']}, {figures.period_text(found)}"
    shown = {spec.stem: _figure_html(spec, png) for spec, png in images}
    headings = {spec.stem: spec.heading for spec, _ in images}
    facts = "".join(f'<div class="fact"><b>{_esc(k)}</b>{_esc(v)}</div>' for k, v in data_summary(found))
    sections = [("summary", "Data", f'<div class="facts">{facts}</div>')]
    sections.append(("regimes", "Regimes", shown.get("regime_maps", "") + "<h3>Frequency and persistence</h3>" + regime_table(found)))
    if found.eofs is not None:
        sections.append(("eofs", "EOFs", shown.get("eof_maps", "") + eof_table(found)))
    sections.append(("frequency", "Frequency", shown.get("monthly_frequency", "") + shown.get("yearly_frequency", "")))
    sections.append(("transitions", "Transitions", shown.get("transitions", "")
                     + "<h3>Day-to-day transition probability</h3>" + matrix_table(found, "transition_probability")
                     + "<h3>Next regime when an episode ends</h3>" + matrix_table(found, "next_regime_probability")))
    sections.append(("persistence", "Persistence", shown.get("durations", "") + shown.get("timeline", "")))
    if found.scan is not None:
        rec = found.scan.attrs.get("recommendation", "")
        sections.append(("scan", headings.get("scan_diagnostics", "Scan"), shown.get("scan_diagnostics", "")
                         + f"<p>{_esc(rec)}</p>" + scan_table(found.scan)
                         + f'<p class="note">Scan file: {_esc(found.scan_folder / finished.SCAN_FILE)}; {_esc(found.scan.attrs.get("history", ""))}</p>'))
    config_text = found.config_text or f"(the {found.kind} was started without a config file)"
    sections.append(("config", "Config", f"<pre>{_esc(config_text)}</pre>"))
    sections.append(("provenance", "Provenance", _table(["", "value"], [
        ["history", lab.attrs.get("history", "")], ["source", lab.attrs.get("source", "")],
        ["package versions", lab.attrs.get("package_versions", "")], ["folder", str(found.folder)],
    ], names=2)))
    nav = "".join(f'<a href="#{key}">{_esc(head)}</a>' for key, head, _ in sections)
    body = "".join(f'<section id="{key}"><h2>{_esc(head)}</h2>{content}</section>' for key, head, content in sections)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<link rel="icon" href="data:,"><title>{_esc(title)}</title><style>{CSS}</style></head>
<body><header><h1>{_esc(title)}</h1><p>{_esc(METHODS.get(settings['method'], settings['method']))} on {lab.sizes['mode']} principal components ·
{_esc(lab.attrs.get('history', ''))}</p></header>
<nav>{nav}</nav><main>{body}
<p class="note">Regime statistics are research diagnostics, not forecasts or warnings.</p></main></body></html>
"""
