"""The whole job, stage by stage, from a validated config to the output folder.

Read top to bottom, :func:`run` is the job. Each stage takes and returns
xarray objects. The full field is only ever evaluated at the named points
marked ``# named point``: small reductions, or the (sample x feature) anomaly
matrix kept in memory when it is smaller than :data:`MEMORY_BUDGET_BYTES`.
"""

from __future__ import annotations

import contextlib
import json
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

from . import anomalies, conform, data, output, results, scan, stats
from .cluster import leave_unassigned, make_clusterer
from .eof import EOF
from .errors import UserError
from .model import RegimeModel
from .stacking import Layout
from .weights import area_weights

log = logging.getLogger("regimes")

MEMORY_BUDGET_BYTES = 2 * 1024**3
"""The selected anomaly matrix is held in memory when it is smaller than this."""

TIME_BLOCK_BYTES = 4 * 1024**2
"""Size (float32) of the blocks of time steps the selected field is reduced in: fixed by the field's size,
not by ``data.chunk_days``, and small, since a few blocks are in flight per core."""

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
    members: xr.DataArray | None = None  # ensemble members; samples are then member-major (member, time) pairs


@contextlib.contextmanager
def stage(name: str):
    """Log a stage's start and its wall time; on a terminal, show a progress bar for dask work over 2 s."""
    log.info("%s ...", name)
    started = time.perf_counter()
    show = sys.stderr.isatty() and log.isEnabledFor(logging.INFO)
    with ProgressBar(minimum=2.0, dt=0.1, out=sys.stderr) if show else contextlib.nullcontext():
        yield
    log.info("%s done in %.1f s", name, time.perf_counter() - started)


def prepare(cfg: SimpleNamespace, model: RegimeModel | None = None) -> Prepared:
    """Read, select, find missing points, remove the climatology, cut the season, stack.

    With a saved ``model`` (``regimes assign``) the field is brought to the
    model's grid, units and level (:func:`regimes.conform.to_model`), and the
    model's grid points, weights and, unless ``assign.climatology = "own"``,
    its reference climatology are used. An ensemble's own climatology is
    fitted on the ensemble mean, one climatology for every member.
    """
    d, a = cfg.data, cfg.anomalies
    ds = data.open_inputs(d.paths, d.chunk_days)
    field = data.standardise(data.pick_variable(ds, d.variable), ds, d.chunk_days)
    step = data.typical_step(field["time"])  # refuses unsorted or duplicated time steps
    field, kind, reference, required = _selected(cfg, field, model)
    gaps = data.describe_gaps(field["time"], step)
    if gaps:
        log.info(gaps)
    # the analysis works in blocks fixed by the field's size, not by data.chunk_days, so that
    # sums over time (and so every result) are the same bit for bit whatever the read chunks
    field = field.chunk({"time": time_block(field)})

    def climatology(f):
        if reference is not None:
            return anomalies.basis_for(kind, f["time"], a.harmonics), reference
        return anomalies.climatology_coefficients(f.mean("member") if "member" in f.dims else f, kind, a.harmonics, a.base_period)

    basis, coefficients = climatology(field)
    # named point: the missing-value census and the climatology fit share one read of the field
    census, coefficients = dask.compute(missing_census(field), coefficients)
    complete, keep = check_missing(field, census, d.drop_incomplete_days, required)
    if complete.size < field.sizes["time"]:
        field = field.isel(time=complete)
        basis, coefficients = climatology(field)
        coefficients = coefficients.compute() if coefficients is not None else None  # named point: refit without the dropped days
    layout = model.layout() if model is not None else Layout(field.isel(time=0, drop=True), keep)
    if coefficients is not None:
        anomaly = field - anomalies.evaluate(basis, coefficients, field)
    else:
        anomaly = field
    anomaly = anomalies.running_mean(anomaly, a.running_mean_days)
    anomaly = data.select_months(anomaly, d.months)
    if a.detrend:
        anomaly, _ = anomalies.detrend(anomaly)
    members = anomaly["member"] if "member" in anomaly.dims else None
    stacked, raw = _stack(layout, anomaly), _stack(layout, field.sel(time=anomaly["time"]))
    stacked = stacked.chunk({"sample": block_rows(stacked.sizes["sample"], stacked.sizes["feature"])})
    if stacked.size * 4 < MEMORY_BUDGET_BYTES:
        stacked = stacked.persist()  # named point: the selected anomalies fit in memory
    time_axis = anomaly["time"]
    copies = 1 if members is None else members.size
    segment_start = np.tile(data.segment_starts(time_axis, step), copies)
    summary = {
        "files": ds.attrs["input_files"],
        "days": int(time_axis.size),
        "first_day": str(time_axis.values[0])[:10],
        "last_day": str(time_axis.values[-1])[:10],
        "grid_points": int(keep.size),
        "points_used": int(keep.sum()),
        "segments": int(segment_start.sum() // copies),
        "members": copies,
    }
    weights = model.weights(layout) if model is not None else layout.flatten(area_weights(field, cfg.eof.weighting))
    return Prepared(
        anomaly=stacked,
        raw=raw,
        weights=weights,
        layout=layout,
        template=field,
        climatology=coefficients,
        climatology_kind=kind,
        segment_start=segment_start,
        season_year=np.tile(data.season_year(time_axis, d.months).values, copies),
        summary=summary,
        members=members,
    )


def _selected(cfg: SimpleNamespace, field: xr.DataArray, model: RegimeModel | None):
    """The field selected by the config, or brought to a saved model (its points only).

    Returns
    -------
    field : xarray.DataArray
    kind : str
        Climatology kind.
    reference : xarray.DataArray or None
        The model's climatology coefficients, when the anomalies are taken from them.
    required : numpy.ndarray of bool or None
        Flat mask of the model's grid points.
    """
    d, a = cfg.data, cfg.anomalies
    if model is None:
        field = data.select(field, d.lat, d.lon, d.level, d.period)
        kind = data.time_step_kind(field["time"]) if a.climatology == "auto" else a.climatology
        return field, kind, None, None
    field = conform.to_model(field, model, d.period).where(model.dataset["mask"] == 1)
    kind, step = model.settings["climatology"], data.time_step_kind(field["time"])
    if kind in ("daily", "monthly") and step != kind:
        log.warning("the model removed a %s climatology but these data are %s", kind, step)
    reference = model.climatology() if cfg.assign.climatology == "model" else None
    return field, kind, reference, model.layout().keep


def _stack(layout: Layout, field: xr.DataArray) -> xr.DataArray:
    """``(sample, feature)``; an ensemble's members one after another along ``sample`` (lazy)."""
    if "member" not in field.dims:
        return layout.stack(field)
    return xr.concat([layout.stack(field.isel(member=i, drop=True)) for i in range(field.sizes["member"])], "sample")


def time_block(field: xr.DataArray) -> int:
    """Time steps per block of the field: :data:`TIME_BLOCK_BYTES` of float32."""
    return max(1, TIME_BLOCK_BYTES // (4 * (field.size // field.sizes["time"])))


def block_rows(samples: int, features: int) -> int:
    """Samples per analysis block: at most :data:`BLOCK_BYTES` of float32 and at least four blocks."""
    return max(1, min(BLOCK_BYTES // (4 * features), -(-samples // 4)))


def missing_census(field: xr.DataArray) -> tuple[xr.DataArray, xr.DataArray]:
    """Number of missing values at each grid point (over time and members) and on each day (lazy)."""
    missing = field.isnull()
    return missing.sum([d for d in ("member", "time") if d in field.dims]), missing.sum([d for d in field.dims if d != "time"])


def check_missing(field: xr.DataArray, census, drop_days: bool, required: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Grid points missing at every time are left out; other gaps are an error or drop their days.

    Parameters
    ----------
    census : (per_point, per_day)
        Computed :func:`missing_census` of ``field``.
    required : numpy.ndarray of bool, optional
        Flat mask of the points a saved model uses: they must all be present,
        and ``keep`` is this mask (``field`` is missing elsewhere).

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
    copies = field.sizes.get("member", 1)
    always = per_point.values == field.sizes["time"] * copies
    if always.all():
        raise UserError(f"variable '{field.name}' is missing at every selected grid point and time; check the variable, box and period")
    if required is not None and (always.ravel() & required).any():
        raise UserError(
            f"variable '{field.name}' has no values at {int((always.ravel() & required).sum())} grid point(s) the model uses; "
            "give data covering the model's grid points"
        )
    extra = per_day.values - always.sum() * copies
    bad = np.flatnonzero(extra > 0)
    if bad.size:
        if not drop_days:
            raise UserError(
                f"variable '{field.name}' has missing values on {bad.size} day(s), first on {str(field['time'].values[bad[0]])[:10]}, "
                "at points present on other days; set data.drop_incomplete_days = true to leave those days out"
            )
        log.warning("leaving out %d day(s) with missing values, first %s", bad.size, str(field["time"].values[bad[0]])[:10])
    if always.any() and required is None:
        log.info("%d grid point(s) missing at every time are left out", int(always.sum()))
    return np.flatnonzero(extra == 0), (~always.ravel() if required is None else required)


def principal_components(cfg: SimpleNamespace, prep: Prepared, rng: np.random.Generator) -> tuple[EOF, xr.DataArray]:
    """Fit the EOFs (seeded from ``rng``) and compute the PCs of the prepared field."""
    e = cfg.eof
    with stage("EOF analysis"):
        eof = EOF(e.modes, e.variance_fraction, e.solver, seed=int(rng.integers(2**31 - 1))).fit(prep.anomaly, prep.weights)
        pcs = eof.transform(prep.anomaly).compute()  # named point: (sample x mode) PCs
        log.info(
            "%s solver kept %d modes explaining %.1f %% of the variance",
            eof.solver_, eof.components_.sizes["mode"], 100 * float(eof.variance_fraction_.sum()),
        )
    return eof, pcs


def scan_k(cfg: SimpleNamespace, prep: Prepared, pcs: xr.DataArray, rng: np.random.Generator, ks: list[int] | None = None) -> xr.Dataset:
    """The number-of-regimes scan of :mod:`regimes.scan` with the settings of ``cfg.scan``.

    ``ks`` defaults to every k in ``scan.k_range``.
    """
    s = cfg.scan
    ks = ks or list(range(s.k_range[0], s.k_range[1] + 1))
    with stage(f"scan of k = {ks[0]}..{ks[-1]} ({s.restarts} restarts, {s.surrogates} surrogates)"):
        return scan.scan(
            pcs, prep.segment_start, prep.season_year, ks, rng,
            restarts=s.restarts, surrogates=s.surrogates, confidence=s.confidence, max_iterations=cfg.regimes.max_iterations,
        )


def with_k(cfg: SimpleNamespace, k: int) -> SimpleNamespace:
    """A copy of ``cfg`` with ``regimes.k`` set to ``k`` (the job as it ran, once "auto" is resolved)."""
    return SimpleNamespace(**{**vars(cfg), "regimes": SimpleNamespace(**{**vars(cfg.regimes), "k": k})})


def analyse(cfg: SimpleNamespace, prep: Prepared) -> dict:
    """EOFs, the choice of k when it is "auto", clustering and statistics of prepared data.

    ``found["cfg"]`` is ``cfg`` with ``regimes.k`` resolved; ``found["scan"]``
    the scan table that chose it (None for a fixed k).
    """
    rng = np.random.default_rng(cfg.regimes.seed)
    eof, pcs = principal_components(cfg, prep, rng)
    table = None
    if cfg.regimes.k == "auto":
        table = scan_k(cfg, prep, pcs, rng)
        if table.attrs["recommended_k"] == 0:
            raise UserError(f'regimes.k = "auto" found no k: {table.attrs["recommendation"]}; set regimes.k to a number')
        log.info("%s", table.attrs["recommendation"])
        cfg = with_k(cfg, int(table.attrs["recommended_k"]))
    r = cfg.regimes
    with stage(f"clustering ({r.method}, k = {r.k}, {r.restarts} restarts)"):
        clusterer = make_clusterer(r.method, r.k, r.restarts, r.max_iterations, rng).fit(pcs)
    labels, correlation = leave_unassigned(clusterer.labels_.values, pcs, clusterer.centroids_, r.unassigned_below)
    found = {"eof": eof, "pcs": pcs, "clusterer": clusterer, "cfg": cfg, "scan": table}
    return {**found, **describe(cfg, prep, pcs, labels, correlation)}


def describe(cfg: SimpleNamespace, prep: Prepared, pcs: xr.DataArray, labels: np.ndarray, correlation: np.ndarray | None) -> dict:
    """Composites and statistics of labelled samples (label 0, unassigned, is a state of the statistics only)."""
    states = results.label_states(cfg)
    regimes = np.arange(1, cfg.regimes.k + 1)
    with stage("composites and statistics"):
        sums = dask.compute(  # named point: per-regime sums, one pass
            stats.composite_sums(prep.anomaly, labels, regimes), stats.composite_sums(prep.raw, labels, regimes)
        )
        runs = stats.episodes(labels, prep.segment_start)
        months = pcs["sample"].dt.month.values
        summary = {
            "frequency": stats.frequency(labels, states),
            "monthly_frequency": stats.frequency_by(labels, months, states, "month"),
            "yearly_frequency": stats.frequency_by(labels, prep.season_year, states, "season_year"),
            "durations": stats.durations(runs, states, cfg.regimes.min_duration_days),
            "transitions": stats.transitions(labels, prep.segment_start, states),
            "episodes": runs,
        }
    return {"labels": labels, "correlation": correlation, "sums": sums, "stats": summary}


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
    attrs = output.provenance(command, config_text, prep.summary["files"])
    if found["scan"] is not None:
        attrs["k_selection"] = found["scan"].attrs["recommendation"]
    return finish(results.assemble(found["cfg"], prep, found, attrs), folder, overwrite, cfg.figures, started)


def finish(files: dict[str, xr.Dataset], folder: Path, overwrite: bool, style: SimpleNamespace, started: float) -> Path:
    """Write the result files together, then draw the figures and the report from them (``style.draw``)."""
    with stage(f"writing results to {folder}"):
        output.write_all(files, folder, overwrite)
        output.remove_drawn(folder)  # figures of an earlier job in this folder would not show these results
    if style.draw:
        draw(folder, style)
    log.info("finished in %.1f s; results in %s", time.perf_counter() - started, folder)
    return folder


def draw(folder: Path, style: SimpleNamespace) -> None:
    """The figures and the report of a finished folder; on failure, says that the results are complete and how to redraw."""
    from . import finished, report  # matplotlib and cartopy are imported only to draw

    try:
        with stage("figures and report"):
            report.draw_all(finished.open_folder(folder), style)
    except BaseException:
        log.error("the result files in %s are complete, the figures are not; draw them with: regimes plot %s", folder, folder)
        raise


def assign(
    cfg: SimpleNamespace,
    config_text: str | None,
    model: RegimeModel,
    model_path: str | Path,
    output_dir: str | None = None,
    overwrite: bool = False,
    command: str = "regimes assign",
) -> Path:
    """Classify the data of ``cfg`` with a saved model and write labels, composites and statistics.

    The same selection, weights and EOF projection as the fit; nearest
    centroid (k-means) or most probable component (mixture); label 0 below
    ``regimes.unassigned_below``. The output attributes record the model file
    and checksum and where the climatology came from; ``labels.nc`` also
    records the settings applied (attribute ``settings``), so that the
    figures, drawn as for a run when ``figures.draw`` is set, need no model file.

    Parameters
    ----------
    cfg : types.SimpleNamespace
        :func:`regimes.config.for_model` of the model's settings.
    model : regimes.model.RegimeModel
        The saved model, loaded from ``model_path`` (``model.nc`` of a run).

    Returns
    -------
    pathlib.Path
        The output folder.
    """
    started = time.perf_counter()
    folder = output.check_folder(output_dir or cfg.output.dir, overwrite, [*data.expand_paths(cfg.data.paths), str(Path(model_path).resolve())])
    with stage("reading the field and bringing it to the model"):
        prep = prepare(cfg, model)
    log.info(
        "%d days from %s to %s in %d runs of consecutive days, %d member(s)",
        prep.summary["days"], prep.summary["first_day"], prep.summary["last_day"], prep.summary["segments"], prep.summary["members"],
    )
    eof, clusterer = model.eof(prep.layout), model.clusterer()
    with stage("projection on the model's EOFs and classification"):
        pcs = eof.transform(prep.anomaly).compute()  # named point: (sample x mode) PCs
        labels, correlation = leave_unassigned(clusterer.predict(pcs).values, pcs, clusterer.centroids_, cfg.regimes.unassigned_below)
    found = {"eof": eof, "pcs": pcs, "clusterer": clusterer, **describe(cfg, prep, pcs, labels, correlation)}
    attrs = output.provenance(command, config_text, prep.summary["files"])
    attrs.update(
        model_file=str(Path(model_path).resolve()),
        model_checksum=model.dataset.attrs["model_checksum"],
        climatology_source=cfg.assign.climatology,
        climatology_comment=_climatology_comment(cfg.assign.climatology, prep.climatology_kind),
    )
    files = results.assemble(cfg, prep, found, attrs, output.ASSIGN_FILES)
    files["labels.nc"].attrs["settings"] = json.dumps(assigned_settings(cfg, model))
    return finish(files, folder, overwrite, cfg.figures, started)


def assigned_settings(cfg: SimpleNamespace, model: RegimeModel) -> dict:
    """The model's settings as this assignment applied them (its variable name and statistics settings)."""
    r = cfg.regimes
    return {**model.settings, "variable": cfg.data.variable, "min_duration_days": r.min_duration_days, "unassigned_below": r.unassigned_below}


def _climatology_comment(source: str, kind: str) -> str:
    if kind == "none":
        return "no climatology removed: the model was fitted on the field itself"
    if source == "model":
        return f"anomalies from the model's reference climatology ({kind})"
    return f"anomalies from a {kind} climatology fitted on these data"
