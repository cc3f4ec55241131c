"""The whole job, stage by stage, from a validated config to the output folder.

Read top to bottom, :func:`run` is the job. Each stage takes and returns
xarray objects. The full field is only ever evaluated at the named points
marked ``# named point``: small reductions, or the (sample x feature) anomaly
matrix kept in memory when it is smaller than :data:`MEMORY_BUDGET_BYTES`.
"""

from __future__ import annotations

import contextlib
import logging
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import dask
import numpy as np
import xarray as xr
from dask.diagnostics import ProgressBar

from . import anomalies, data, output, results, stats
from .cluster import make_clusterer
from .eof import EOF
from .errors import UserError
from .stacking import Layout
from .weights import area_weights

log = logging.getLogger("regimes")

MEMORY_BUDGET_BYTES = 2 * 1024**3
"""The selected anomaly matrix is held in memory when it is smaller than this."""

BLOCK_BYTES = 128 * 1024**2
"""Largest block of samples of the anomaly matrix (float32); there are at least four blocks so both cores work.
Few large blocks keep dask's overhead low."""


@dataclass
class Prepared:
    """The field ready for analysis: stacked anomalies and what is needed to undo the stacking."""

    anomaly: xr.DataArray  # (sample, feature), weighted stages apply weights themselves
    raw: xr.DataArray  # (sample, feature), the field itself on the same samples
    weights: xr.DataArray  # (feature)
    layout: Layout
    template: xr.DataArray  # the selected field (lazy), for coordinates and attributes
    climatology: xr.DataArray | None  # (term, lat, lon) coefficients
    climatology_kind: str  # 'daily', 'monthly' or 'none'
    segment_start: np.ndarray  # (sample) bool
    season_year: np.ndarray  # (sample) int
    summary: dict


@contextlib.contextmanager
def stage(name: str):
    """Log a stage's start and its wall time; on a terminal, show a progress bar for dask work over 2 s."""
    log.info("%s ...", name)
    started = time.perf_counter()
    show = sys.stderr.isatty() and log.isEnabledFor(logging.INFO)
    with ProgressBar(minimum=2.0, dt=0.1, out=sys.stderr) if show else contextlib.nullcontext():
        yield
    log.info("%s done in %.1f s", name, time.perf_counter() - started)


def prepare(cfg: SimpleNamespace) -> Prepared:
    """Read, select, find missing points, remove the climatology, cut the season, stack."""
    d, a = cfg.data, cfg.anomalies
    ds = data.open_inputs(d.paths)
    field = data.standardise(data.pick_variable(ds, d.variable), ds, d.chunk_days)
    data.segment_starts(field["time"])  # refuses unsorted or duplicated time steps
    field = data.select(field, d.lat, d.lon, d.level, d.period)
    kind = data.time_step_kind(field["time"]) if a.climatology == "auto" else a.climatology
    basis, coefficients = anomalies.climatology_coefficients(field, kind, a.harmonics, a.base_period)
    # named point: the missing-value census and the climatology fit share one read of the field
    census, coefficients = dask.compute(missing_census(field), coefficients)
    complete, keep = check_missing(field, census, d.drop_incomplete_days)
    if complete.size < field.sizes["time"]:
        field = field.isel(time=complete)
        basis, coefficients = anomalies.climatology_coefficients(field, kind, a.harmonics, a.base_period)
        coefficients = coefficients.compute() if coefficients is not None else None  # named point: refit without the dropped days
    layout = Layout(field.isel(time=0, drop=True), keep)
    if coefficients is not None:
        anomaly = field - anomalies.evaluate(basis, coefficients, field)
    else:
        anomaly = field
    anomaly = anomalies.running_mean(anomaly, a.running_mean_days)
    anomaly = data.select_months(anomaly, d.months)
    if a.detrend:
        anomaly, _ = anomalies.detrend(anomaly)
    stacked, raw = layout.stack(anomaly), layout.stack(field.sel(time=anomaly["time"]))
    rows = max(1, min(BLOCK_BYTES // (4 * stacked.sizes["feature"]), -(-stacked.sizes["sample"] // 4)))
    stacked, raw = stacked.chunk({"sample": rows}), raw.chunk({"sample": rows})
    if 2 * stacked.size * 4 < MEMORY_BUDGET_BYTES:
        stacked, raw = dask.persist(stacked, raw)  # named point: the selected anomalies and field fit in memory (one read)
    time_axis = anomaly["time"]
    segment_start = data.segment_starts(time_axis)
    summary = {
        "files": ds.attrs["input_files"],
        "days": int(time_axis.size),
        "first_day": str(time_axis.values[0])[:10],
        "last_day": str(time_axis.values[-1])[:10],
        "grid_points": int(keep.size),
        "points_used": int(keep.sum()),
        "segments": int(segment_start.sum()),
    }
    return Prepared(
        anomaly=stacked,
        raw=raw,
        weights=layout.flatten(area_weights(field, cfg.eof.weighting)),
        layout=layout,
        template=field,
        climatology=coefficients,
        climatology_kind=kind,
        segment_start=segment_start,
        season_year=data.season_year(time_axis, d.months).values,
        summary=summary,
    )


def missing_census(field: xr.DataArray) -> tuple[xr.DataArray, xr.DataArray]:
    """Number of missing values at each grid point and on each day (lazy)."""
    missing = field.isnull()
    return missing.sum("time"), missing.sum([d for d in field.dims if d != "time"])


def check_missing(field: xr.DataArray, census, drop_days: bool) -> tuple[np.ndarray, np.ndarray]:
    """Grid points missing at every time are left out; other gaps are an error or drop their days.

    Parameters
    ----------
    census : (per_point, per_day)
        Computed :func:`missing_census` of ``field``.

    Returns
    -------
    complete : numpy.ndarray of int
        Indices of the days kept.
    keep : numpy.ndarray of bool
        Flat mask of the grid points kept.

    Raises
    ------
    UserError
        If every point is missing, or some days miss values at points that are
        present on other days and ``drop_days`` is false.
    """
    per_point, per_day = census
    n_time = field.sizes["time"]
    always = per_point.values == n_time
    if always.all():
        raise UserError(f"variable '{field.name}' is missing at every selected grid point and time; check the variable, box and period")
    extra = per_day.values - always.sum()
    bad = np.flatnonzero(extra > 0)
    if bad.size:
        if not drop_days:
            raise UserError(
                f"variable '{field.name}' has missing values on {bad.size} day(s), first on {str(field['time'].values[bad[0]])[:10]}, "
                "at points present on other days; set data.drop_incomplete_days = true to leave those days out"
            )
        log.warning("leaving out %d day(s) with missing values, first %s", bad.size, str(field["time"].values[bad[0]])[:10])
    if always.any():
        log.info("%d grid point(s) missing at every time are left out", int(always.sum()))
    return np.flatnonzero(extra == 0), ~always.ravel()


def analyse(cfg: SimpleNamespace, prep: Prepared) -> dict:
    """EOFs, clustering and statistics of prepared data."""
    e, r = cfg.eof, cfg.regimes
    rng = np.random.default_rng(r.seed)
    with stage("EOF analysis"):
        eof = EOF(e.modes, e.variance_fraction, e.solver, seed=int(rng.integers(2**31 - 1))).fit(prep.anomaly, prep.weights)
        pcs = eof.transform(prep.anomaly).compute()  # named point: (sample x mode) PCs
        log.info(
            "%s solver kept %d modes explaining %.1f %% of the variance",
            eof.solver_, eof.components_.sizes["mode"], 100 * float(eof.variance_fraction_.sum()),
        )
    with stage(f"clustering ({r.method}, k = {r.k}, {r.restarts} restarts)"):
        clusterer = make_clusterer(r.method, r.k, r.restarts, r.max_iterations, rng).fit(pcs)
    labels = clusterer.labels_.values
    states = np.arange(1, r.k + 1)
    with stage("composites and statistics"):
        sums = dask.compute(  # named point: per-regime sums, one pass
            stats.composite_sums(prep.anomaly, labels, states), stats.composite_sums(prep.raw, labels, states)
        )
        runs = stats.episodes(labels, prep.segment_start)
        months = pcs["sample"].dt.month.values
        summary = {
            "frequency": stats.frequency(labels, states),
            "monthly_frequency": stats.frequency_by(labels, months, states, "month"),
            "yearly_frequency": stats.frequency_by(labels, prep.season_year, states, "season_year"),
            "durations": stats.durations(runs, states, r.min_duration_days),
            "transitions": stats.transitions(labels, prep.segment_start, states),
            "episodes": runs,
        }
    return {"eof": eof, "pcs": pcs, "clusterer": clusterer, "sums": sums, "stats": summary}


def run(cfg: SimpleNamespace, config_text: str | None, output_dir: str | None = None, overwrite: bool = False, command: str = "regimes run") -> Path:
    """Run the job described by ``cfg`` and write its results.

    Parameters
    ----------
    cfg : types.SimpleNamespace
        Validated config (:func:`regimes.config.load`).
    config_text : str
        The config file's text, recorded in every output file.
    output_dir : str, optional
        Overrides ``output.dir``.
    overwrite : bool
        Allow an existing, non-empty output folder.

    Returns
    -------
    pathlib.Path
        The output folder.
    """
    started = time.perf_counter()
    folder = output.check_folder(output_dir or cfg.output.dir, overwrite, data.expand_paths(cfg.data.paths))
    with stage("reading and preparing the field"):
        prep = prepare(cfg)
    log.info(
        "%d days from %s to %s in %d runs of consecutive days; %d of %d grid points used",
        prep.summary["days"], prep.summary["first_day"], prep.summary["last_day"], prep.summary["segments"],
        prep.summary["points_used"], prep.summary["grid_points"],
    )
    found = analyse(cfg, prep)
    with stage(f"writing results to {folder}"):
        files = results.assemble(cfg, prep, found, output.provenance(command, config_text, prep.summary["files"]))
        output.write_all(files, folder, overwrite)
        output.remove_drawn(folder)  # figures of an earlier run in this folder would not show these results
    if cfg.figures.draw:
        from . import finished, report  # matplotlib and cartopy are imported only to draw

        with stage("figures and report"):
            report.draw_all(finished.open_folder(folder), cfg.figures)
    log.info("finished in %.1f s; results in %s", time.perf_counter() - started, folder)
    return folder
