"""The figures of a run, each drawn by one function from the finished result datasets.

Every function takes a :class:`regimes.finished.Finished` and the validated
``[figures]`` settings and returns a :class:`matplotlib.figure.Figure`
(object-oriented matplotlib, no pyplot state: headless by construction).
Nothing here recomputes the analysis; the only numbers derived are for
display (unit scaling, least-squares trend lines of the yearly frequencies,
the geometric duration law implied by the stored transition probabilities).
Panels carry the label ``panel`` so that they can be counted.

Colours: the anomaly maps use a ColorBrewer diverging scheme (colour-blind
safe; Harrower & Brewer 2003, Cartogr. J. 40, 27-37, from memory), one symmetric scale
shared by all panels of a figure; regimes are told apart by Paul Tol's
"muted" qualitative scheme (colour-blind safe; Tol 2021, SRON technical note
SRON/EPS/TN/09-002, from memory).
"""

from __future__ import annotations

import calendar as _calendar
import math
import textwrap
from dataclasses import dataclass
from typing import Callable

import cftime
import matplotlib
import numpy as np
import xarray as xr
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator, PercentFormatter
from scipy import stats as _stats

from . import data, maps
from .cluster import UNASSIGNED
from .finished import Finished

UNASSIGNED_COLOUR = "#BBBBBB"
"""The unassigned state (label 0): a neutral grey outside the regime scheme."""

REGIME_COLOURS = ("#CC6677", "#332288", "#DDCC77", "#117733", "#88CCEE", "#882255", "#44AA99", "#999933", "#AA4499")

WIDTH = 10.0
"""Figure width in inches; the report shows every figure at the same width."""

LOOK = {
    "font.size": 9,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 8.5,
    "axes.edgecolor": "#555555",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.frameon": False,
    "figure.titlesize": 11,
    "figure.titleweight": "bold",
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
}
"""The house style, applied with :func:`matplotlib.rc_context` around drawing and saving."""


# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------


def regime_colours(k: int) -> list:
    """One colour per regime 1..k (Tol's muted scheme; beyond nine, matplotlib's tab20)."""
    if k <= len(REGIME_COLOURS):
        return list(REGIME_COLOURS[:k])
    return [matplotlib.colormaps["tab20"](i % 20) for i in range(k)]


def state_colours(states) -> list:
    """One colour per state of the labels: each regime keeps its colour of :func:`regime_colours`, unassigned (0) is grey."""
    colours = regime_colours(int(max(states)))
    return [UNASSIGNED_COLOUR if s == UNASSIGNED else colours[s - 1] for s in states]


def regime_label(run: Finished, regime: int) -> str:
    """'Regime 2' or, when the config named the regimes, 'Regime 2 · blocked'; 'Unassigned' for label 0."""
    if regime == UNASSIGNED:
        return "Unassigned"
    name = str(run.statistics["regime_name"].sel(regime=regime).values)
    return f"Regime {regime}" if name == f"regime_{regime}" else f"Regime {regime} · {name}"


def display_units(units: str) -> tuple[float, str]:
    """Factor and units for display: pressures in Pa are shown in hPa (common practice on weather maps)."""
    return (0.01, "hPa") if units == "Pa" else (1.0, units)


def symmetric_levels(values: xr.DataArray, intervals: int) -> np.ndarray:
    """Contour levels symmetric about zero spanning the largest |value|, in about ``intervals`` nice steps."""
    top = float(np.nanmax(np.abs(values.values)))
    top = top if np.isfinite(top) and top > 0 else 1.0
    levels = MaxNLocator(nbins=intervals, symmetric=True, steps=[1, 2, 2.5, 5, 10]).tick_values(-top, top)
    return levels[np.abs(levels) <= top + (levels[1] - levels[0])]


def season_months(run: Finished) -> list[int]:
    """Calendar months of the season in season order (the whole year from January when none was selected)."""
    months = run.settings.get("months") or list(range(1, 13))
    start = data.season_start(months)
    return sorted(months, key=lambda m: (m - start) % 12)


def season_name(months: list[int]) -> str:
    """'DJF' for up to five months, else 'Nov-Mar'; 'all months' for the whole year."""
    if len(months) == 12:
        return "all months"
    if len(months) <= 5:
        return "".join(_calendar.month_abbr[m][0] for m in months)
    return f"{_calendar.month_abbr[months[0]]}–{_calendar.month_abbr[months[-1]]}"


def period_text(run: Finished) -> str:
    """Season, first and last season-year and number of days, e.g. 'DJF 1990–2010, 1805 days' (', 5 members' for an ensemble)."""
    years = run.labels["season_year"].values
    members = f", {run.labels.sizes['member']} members" if "member" in run.labels.dims else ""
    return f"{season_name(season_months(run))} {years.min()}–{years.max()}, {run.labels.sizes['time']} days{members}"


def _panel(ax):
    ax.set_label("panel")
    return ax


def _grid_shape(n: int, aspect: float = 0.7) -> tuple[int, int]:
    """Rows and columns of ``n`` panels of height/width ``aspect``: wide maps in fewer columns."""
    cols = min(n, 3) if n != 4 else 2
    if aspect < 0.3:
        cols = 1
    elif aspect < 0.45:
        cols = min(cols, 2)
    return math.ceil(n / cols), cols


def _figure(height: float) -> Figure:
    return Figure(figsize=(WIDTH, height), layout="constrained")


def _annotate_empty(ax, text: str = "not computed") -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color="#777777")


# --------------------------------------------------------------------------
# maps
# --------------------------------------------------------------------------


def _map_figure(fields: list[xr.DataArray], titles: list[str], units: str, what: str, heading: str, style) -> Figure:
    """Panels of (lat, lon) fields on one projection with one shared symmetric colour scale.

    Laid out by hand (a grid of panels, the colour bar below): cartopy's
    labelled gridlines make an automatic layout several times slower.
    """
    first = fields[0]
    region = maps.region_of(first["lat"].values, first["lon"].values)
    crs = maps.projection(region, maps.choose(region, style.projection))
    factor, shown = display_units(units)
    fields = [f * factor for f in fields]
    levels = symmetric_levels(xr.concat(fields, "panel"), style.levels)
    shape = maps.aspect(region, crs)
    rows, cols = _grid_shape(len(fields), shape)
    left, right, wspace = 0.05, 0.985, 0.14
    width = WIDTH * (right - left) / (cols + wspace * (cols - 1))  # of one panel, inches
    tall = width * min(max(shape, 0.1), 1.2)
    head, gap, foot = 0.75, 0.75, 1.05  # inches: headings; labels and title between rows; labels and colour bar
    height = head + rows * tall + (rows - 1) * gap + foot
    fig = Figure(figsize=(WIDTH, height))
    grid = fig.add_gridspec(rows, cols, left=left, right=right, top=1 - head / height, bottom=foot / height, wspace=wspace, hspace=gap / tall)
    axes = []
    for i, (field, title) in enumerate(zip(fields, titles)):
        ax = _panel(fig.add_subplot(grid[i // cols, i % cols], projection=crs))
        filled = maps.draw_field(ax, field, region, levels, matplotlib.colormaps[style.colormap])
        ax.set_title(title, loc="left", pad=18 if region.southern else 6)  # room for longitude labels on top
        axes.append(ax)
    bar = fig.colorbar(filled, cax=fig.add_axes((0.25, 0.42 / height, 0.5, 0.13 / height)), orientation="horizontal")
    bar.set_label(f"{what} ({shown})")
    bar.ax.tick_params(labelsize=7.5)
    fig.suptitle(heading, x=0.01, y=1 - 0.12 / height, ha="left", va="top")
    return fig


def regime_maps(run: Finished, style) -> Figure:
    """Mean anomaly of each regime (composite), one panel per regime, one shared symmetric colour scale."""
    comp = run.composites["anomaly_composite"]
    freq = run.statistics["frequency"]
    days = run.composites["day_count"]
    fields, titles = [], []
    for r in comp["regime"].values:
        fields.append(comp.sel(regime=r))
        titles.append(f"{regime_label(run, r)} · {100 * float(freq.sel(regime=r)):.1f} % of days ({int(days.sel(regime=r))})")
    variable = run.settings["variable"]
    return _map_figure(
        fields, titles, comp.attrs.get("units", ""), f"{variable} anomaly",
        f"Regime composites of {variable} anomalies · {period_text(run)}", style,
    )


def eof_maps(run: Finished, style) -> Figure:
    """The leading EOF patterns (anomaly for one standard deviation of the PC) with their variance fractions."""
    eofs = run.eofs
    modes = eofs["mode"].values[: style.eof_modes]
    fields, titles = [], []
    for m in modes:
        fraction = float(eofs["variance_fraction"].sel(mode=m))
        error = fraction * float(eofs["eigenvalue_error"].sel(mode=m) / eofs["eigenvalue"].sel(mode=m))
        fields.append(eofs["eof"].sel(mode=m))
        titles.append(f"EOF {m} · {100 * fraction:.1f} ± {100 * error:.1f} % of variance")
    variable = run.settings["variable"]
    total = 100 * float(eofs["variance_fraction"].sum())
    return _map_figure(
        fields, titles, eofs["eof"].attrs.get("units", ""), f"{variable} per standard deviation of the PC",
        f"Leading EOFs of {variable} anomalies ({eofs.sizes['mode']} modes kept, {total:.1f} % of variance)", style,
    )


# --------------------------------------------------------------------------
# frequencies
# --------------------------------------------------------------------------


def monthly_frequency(run: Finished, style) -> Figure:
    """Regime frequency by calendar month: grouped bars, months in season order."""
    table = run.statistics["monthly_frequency"]
    months = [m for m in season_months(run) if m in table["month"].values]
    regimes = table["regime"].values
    colours = state_colours(regimes)
    fig = _figure(3.6)
    ax = _panel(fig.add_subplot())
    width = 0.8 / regimes.size
    x = np.arange(len(months))
    for i, r in enumerate(regimes):
        values = 100 * table.sel(regime=r, month=months).values
        ax.bar(x + (i - (regimes.size - 1) / 2) * width, values, width * 0.92, color=colours[i], label=regime_label(run, r))
        overall = 100 * float(run.statistics["frequency"].sel(regime=r))
        ax.hlines(overall, x[0] - 0.45, x[-1] + 0.45, colors=colours[i], linestyles=(0, (1, 2)), linewidth=1.0)
    ax.set_xticks(x, [_calendar.month_abbr[m] for m in months])
    ax.yaxis.set_major_formatter(PercentFormatter(decimals=0))
    ax.set_ylabel("share of the month's days")
    ax.grid(axis="x", visible=False)
    ax.legend(ncols=min(regimes.size, 5), loc="upper left", bbox_to_anchor=(0, -0.1))
    ax.set_title("Regime frequency by calendar month (dotted: over the whole season)")
    return fig


def yearly_frequency(run: Finished, style) -> Figure:
    """Frequency of each regime per season-year with its least-squares trend line, one panel per regime."""
    table = run.statistics["yearly_frequency"]
    years = table["season_year"].values.astype(float)
    regimes = table["regime"].values
    colours = state_colours(regimes)
    rows, cols = _grid_shape(regimes.size)
    fig = _figure(rows * 2.2 + 0.6)
    axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
    for ax, r, colour in zip(axes, regimes, colours):
        _panel(ax)
        values = 100 * table.sel(regime=r).values
        ax.plot(years, values, color=colour, marker="o", markersize=3, linewidth=1.2)
        title = regime_label(run, r)
        if years.size >= 3:
            fit = _stats.linregress(years, values)
            ax.plot(years, fit.intercept + fit.slope * years, color="#222222", linewidth=1.0, linestyle="--")
            title += f" · trend {10 * fit.slope:+.1f} %/decade (p = {fit.pvalue:.2f})"
        ax.set_title(title)
        ax.yaxis.set_major_formatter(PercentFormatter(decimals=0))
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    for ax in axes[regimes.size:]:
        ax.set_visible(False)
    for ax in axes[(rows - 1) * cols:]:
        ax.set_xlabel("season-year (year the season starts)")
    fig.suptitle(f"Regime frequency per season-year, with least-squares trend · {period_text(run)}", x=0.01, ha="left")
    return fig


# --------------------------------------------------------------------------
# persistence and transitions
# --------------------------------------------------------------------------


def _matrix(ax, fig, values: np.ndarray, labels: list[str], title: str, note: str = "") -> None:
    image = ax.imshow(values, cmap="cividis", vmin=0.0, vmax=max(float(np.nanmax(values)), 1e-9))
    ax.grid(False)
    for (i, j), v in np.ndenumerate(values):
        if np.isfinite(v):
            light = image.norm(v) > 0.6
            ax.text(j, i, f"{v:.2f}", ha="center", va="center", fontsize=8.5, color="#111111" if light else "white")
    ticks = np.arange(len(labels))
    ax.set_xticks(ticks, labels)
    ax.set_yticks(ticks, labels)
    ax.set_xlabel(f"to regime{note}")
    ax.set_ylabel(f"from regime{note}")
    ax.set_title(title)
    fig.colorbar(image, ax=ax, shrink=0.8, label="probability")


def transitions(run: Finished, style) -> Figure:
    """Annotated transition matrices: day to day, and which regime follows when an episode ends."""
    st = run.statistics
    states = st["regime"].values
    labels = [str(r) for r in states]
    note = " (0: unassigned)" if UNASSIGNED in states else ""
    fig = _figure(4.4)
    left, right = fig.subplots(1, 2)
    _matrix(_panel(left), fig, st["transition_probability"].values, labels, "Day-to-day transition probability", note)
    following = st["next_regime_probability"].values.astype(float).copy()
    np.fill_diagonal(following, np.nan)
    _matrix(_panel(right), fig, following, labels, "Next regime when an episode ends", note)
    return fig


def duration_units(statistics: xr.Dataset) -> tuple[str, str]:
    """The unit of a statistics file's durations, one time step of the data ('days' or 'months'), and its short form ('d', 'mo')."""
    unit = statistics["mean_duration"].attrs.get("units", "days")
    return unit, {"days": "d", "months": "mo"}.get(unit, unit)


def durations(run: Finished, style) -> Figure:
    """Episode-duration distribution of each regime, with the geometric law of a first-order Markov chain.

    For a first-order Markov chain with persistence probability p, the time
    spent per visit is geometric, P(d) = (1 - p) p^(d - 1), with mean
    1 / (1 - p) (textbook; e.g. Wilks, Statistical Methods in the Atmospheric
    Sciences, Markov-chain chapter); when short episodes are left out
    (``min_duration_days`` = m) the law is conditioned on d >= m.
    """
    st = run.statistics
    hist = st["duration_histogram"]
    regimes = st["regime"].values
    shortest = max(int(st["episode_count"].attrs.get("min_duration_days", 0)), 1)
    colours = state_colours(regimes)
    rows, cols = _grid_shape(regimes.size)
    fig = _figure(rows * 2.2 + 0.6)
    axes = fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False).ravel()
    d = st["duration"].values
    unit, short = duration_units(st)
    for ax, r, colour in zip(axes, regimes, colours):
        _panel(ax)
        counts = hist.sel(regime=r).values.astype(float)
        total = counts.sum()
        share = counts / total if total > 0 else counts
        episodes = int(st["episode_count"].sel(regime=r))
        median, longest = float(st["median_duration"].sel(regime=r)), int(st["max_duration"].sel(regime=r))
        ax.bar(d, 100 * share, width=0.9, color=colour, label=f"{episodes} episodes, median {median:.0f} {short}, longest {longest} {short}")
        p = float(st["transition_probability"].sel(regime_from=r, regime_to=r))
        law = np.where(d >= shortest, (1 - p) * p ** (d - shortest), 0.0)
        ax.plot(d, 100 * law, color="#222222", linewidth=1.0, label=f"geometric law, p = {p:.2f}")
        mean = float(st["mean_duration"].sel(regime=r))
        if np.isfinite(mean):  # no mean when min_duration_days leaves out every episode of the regime
            ax.axvline(mean, color="#222222", linewidth=0.8, linestyle=":", label=f"mean {mean:.1f} {short}")
        ax.set_title(regime_label(run, r))
        ax.yaxis.set_major_formatter(PercentFormatter(decimals=0))
        ax.legend(loc="upper right")
    for ax in axes[regimes.size:]:
        ax.set_visible(False)
    for ax in axes[(rows - 1) * cols:]:
        ax.set_xlabel(f"episode duration ({unit})")
    fig.suptitle("Episode durations: share of episodes, and the geometric law of a first-order Markov chain", x=0.01, ha="left")
    return fig


def _ordinals(year, month, day, calendar: str) -> np.ndarray:
    dates = [cftime.datetime(int(y), int(m), int(d), calendar=calendar) for y, m, d in zip(year, month, day)]
    return np.asarray(cftime.date2num(dates, "days since 1850-01-01", calendar=calendar), dtype=float)


def most_members(label: xr.DataArray, states: np.ndarray) -> np.ndarray:
    """The state most members are in on each time step of ``label(member, time)`` (ties: the lowest state number)."""
    counts = np.stack([(label == s).sum("member").values for s in states])
    return states[counts.argmax(0)]


def timeline(run: Finished, style) -> Figure:
    """The daily (or monthly) regimes as a strip, one row per season-year; missing days are left blank.

    For an ensemble, each day shows the state of most members (:func:`most_members`).
    """
    lab = run.labels
    time = lab["time"]
    years = lab["season_year"].values
    months = season_months(run)
    start = months[0]
    step_months = data.time_step_kind(time) == "monthly"
    t_month = time.dt.month.values
    if step_months:
        offset = (t_month - start) % 12
        ticks = [(m - start) % 12 for m in months]
    else:
        calendar = time.encoding.get("calendar") or getattr(time.values[0], "calendar", "standard")
        start_of_season = _ordinals(years, np.full(years.size, start), np.ones(years.size), calendar)
        offset = (_ordinals(time.dt.year.values, t_month, time.dt.day.values, calendar) - start_of_season).astype(int)
        y0 = int(years.min())
        tick_years = [y0 + int(m < start) for m in months]
        ticks = list(_ordinals(tick_years, months, np.ones(len(months)), calendar) - _ordinals([y0], [start], [1], calendar)[0])
    rows = np.unique(years)
    states = run.statistics["regime"].values
    ensemble = "member" in lab["label"].dims
    daily = most_members(lab["label"], states) if ensemble else lab["label"].values
    strip = np.full((rows.size, int(offset.max()) + 1), -1)  # -1: no data; else the position of the state
    strip[np.searchsorted(rows, years), offset] = np.searchsorted(states, daily)
    colours = ["#ffffff", *state_colours(states)]
    fig = _figure(min(2.2 + 0.16 * rows.size, 12.0))
    ax = _panel(fig.add_subplot())
    ax.imshow(strip, aspect="auto", interpolation="nearest", cmap=ListedColormap(colours), vmin=-1.5, vmax=states.size - 0.5,
              extent=(-0.5, strip.shape[1] - 0.5, rows[-1] + 0.5, rows[0] - 0.5))
    ax.grid(False)
    ax.set_xticks(ticks, [_calendar.month_abbr[m] for m in months])
    ax.yaxis.set_major_locator(MaxNLocator(integer=True, nbins=min(rows.size, 12)))
    ax.set_ylabel("season-year")
    what = " (state of most members)" if ensemble else ""
    ax.set_title(f"{'Monthly' if step_months else 'Daily'} regime sequence{what} · {period_text(run)}")
    handles = [Patch(color=c, label=regime_label(run, r)) for r, c in zip(states, colours[1:])]
    handles.append(Patch(facecolor="#ffffff", edgecolor="#999999", label="no data"))
    ax.legend(handles=handles, ncols=min(len(handles), 6), loc="upper left", bbox_to_anchor=(0, -0.04 * max(1, 25 / rows.size)))
    return fig


# --------------------------------------------------------------------------
# the k-selection scan
# --------------------------------------------------------------------------


def scan_diagnostics(run: Finished, style) -> Figure:
    """Cluster-quality diagnostics against k from ``scan.nc``; the recommended k is shaded in every panel."""
    from .scan import STABLE

    ds = run.scan
    k = ds["k"].values
    best = int(ds.attrs.get("recommended_k", 0))
    fig = _figure(5.6)
    axes = fig.subplots(2, 3).ravel()
    dark = "#222222"

    def panel(ax, title):
        _panel(ax)
        ax.set_title(title)
        if best:
            ax.axvspan(best - 0.4, best + 0.4, color="#f1e3b4", zorder=0)
        return ax

    ax = panel(axes[0], "Classifiability vs red noise")
    observed = ds["classifiability"].values
    ax.plot(k, observed, color=dark, marker="o", label="observed")
    if ds.sizes.get("surrogate", 0) > 0:
        noise = ds["surrogate_classifiability"].values
        ax.fill_between(k, np.nanmin(noise, 0), np.nanmax(noise, 0), color="#88CCEE", alpha=0.45, label="surrogate range")
        level = 100 * float(ds.attrs["confidence_level"])
        ax.plot(k, ds["surrogate_quantile"].values, color="#332288", linestyle="--", label=f"surrogate {level:g} % quantile")
        significant = ds["significant"].values.astype(bool)
        ax.plot(k[significant], observed[significant], linestyle="none", marker="*", markersize=11, color="#CC6677", label="significant")

    for ax, name, title in (
        (axes[1], "within_total_variance_ratio", "Within / total variance"),
        (axes[2], "silhouette", "Silhouette"),
    ):
        panel(ax, title).plot(k, ds[name].values, color=dark, marker="o")

    ax = panel(axes[3], "Gaussian mixture information criteria")
    if np.isfinite(ds["bic"].values).any():
        ax.plot(k, ds["bic"].values, color="#117733", marker="o", label="BIC")
        ax.plot(k, ds["aic"].values, color="#882255", marker="s", label="AIC")
        ax.legend()
    else:
        _annotate_empty(ax)

    ax = panel(axes[4], "Stability of the regime patterns")
    ax.plot(k, ds["split_half_stability"].values, color=dark, marker="o", label="split halves")
    ax.plot(k, ds["bootstrap_stability"].values, color="#44AA99", marker="s", label="bootstrap")
    ax.axhline(STABLE, color="#777777", linewidth=0.8, linestyle=":")
    ax.legend(loc="lower left")

    notes = axes[5]
    notes.axis("off")
    notes.legend(*axes[0].get_legend_handles_labels(), loc="upper left", title="classifiability", alignment="left")
    words = ds.attrs.get("recommendation", "").split("; rule:")[0]
    notes.text(0.0, 0.0, textwrap.fill(words, 40), transform=notes.transAxes, va="bottom", fontsize=8)
    for ax in axes[:5]:
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xlabel("number of regimes k")
    fig.suptitle(f"Choosing k: {ds.attrs.get('samples', '?')} days, {ds.attrs.get('modes', '?')} PCs, "
                 f"{ds.attrs.get('surrogates', 0)} red-noise surrogates" + (f" · recommended k = {best}" if best else ""),
                 x=0.01, ha="left")
    return fig


# --------------------------------------------------------------------------
# the catalogue
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class Spec:
    """One figure: file stem, heading and caption in the report, drawing function, and what it is drawn from.

    ``needs`` is "results" (labels, composites and statistics: a run or an
    assignment), "eofs" (a run's eofs.nc) or "scan".
    """

    stem: str
    heading: str
    caption: str
    draw: Callable[[Finished, object], Figure]
    needs: str = "results"


CATALOGUE = (
    Spec("regime_maps", "Regime composites",
         "Mean anomaly over the days of each regime, filled contours with contour lines (negative dashed), one symmetric "
         "colour scale for all panels. Blank: grid points left out of the analysis. Unassigned days have no panel.", regime_maps),
    Spec("eof_maps", "Leading EOFs",
         "Anomaly for one standard deviation of each principal component; ± is the North et al. (1982) sampling error. "
         "The sign of an EOF is arbitrary.", eof_maps, needs="eofs"),
    Spec("monthly_frequency", "Frequency by calendar month",
         "Share of each calendar month's days spent in each regime; dotted lines give the share over the whole season.", monthly_frequency),
    Spec("yearly_frequency", "Frequency per season-year",
         "Share of each season's days per regime with a least-squares trend line; the p-value is that of the slope "
         "under independent residuals.", yearly_frequency),
    Spec("transitions", "Transitions",
         "Left: probability of each regime on the next day (consecutive days only). Right: which regime follows when an "
         "episode ends.", transitions),
    Spec("durations", "Episode durations",
         "Episodes are runs of one regime within runs of consecutive days. The line is the geometric law (1 − p) p^(d − 1) "
         "implied by the day-to-day persistence p.", durations),
    Spec("timeline", "Daily regime sequence",
         "One row per season-year; blank cells are days outside the data. For an ensemble, each day shows the state most "
         "members are in (ties: the lower number).", timeline),
    Spec("scan_diagnostics", "Choosing the number of regimes",
         "From regimes scan: classifiability against red-noise surrogates, within/total variance, silhouette, Gaussian-"
         "mixture BIC and AIC, and the stability of the regime patterns; the recommended k is shaded.",
         scan_diagnostics, needs="scan"),
)


def available(found: Finished) -> list[Spec]:
    """The figures that can be drawn from what the folder holds."""
    have = {"results": found.has_results, "eofs": found.eofs is not None, "scan": found.scan is not None}
    return [spec for spec in CATALOGUE if have[spec.needs]]
