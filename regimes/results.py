"""The result files of a run: names, variables and CF attributes.

Builds, from what the pipeline computed, the datasets written to the output
folder: ``labels.nc``, ``composites.nc``, ``statistics.nc``, ``eofs.nc`` and
the saved model ``model.nc`` (``regimes assign`` writes the first three).
Nothing here computes on the field. With an ensemble (``prep.members``) the
samples are the member-major (member, time) pairs, put back on
``(member, time)`` here.
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import xarray as xr

from . import data, stats
from .cluster import UNASSIGNED
from .model import RegimeModel
from .output import RUN_FILES, coordinate_attrs, flag_meanings


def regime_names(cfg: SimpleNamespace) -> list[str]:
    """Names from the config, else ``regime_1 .. regime_k``."""
    return cfg.regimes.names or [f"regime_{i}" for i in range(1, cfg.regimes.k + 1)]


def label_states(cfg) -> np.ndarray:
    """The states of the daily labels: 1..k, and 0 (unassigned) first when ``regimes.unassigned_below`` is set."""
    first = UNASSIGNED if cfg.regimes.unassigned_below is not None else 1
    return np.arange(first, cfg.regimes.k + 1)


def _state_names(cfg) -> list[str]:
    return (["unassigned"] if cfg.regimes.unassigned_below is not None else []) + regime_names(cfg)


def _n_time(prep) -> int:
    return prep.season_year.size // (prep.members.size if prep.members is not None else 1)


def _sample_dims(prep) -> tuple[tuple[str, ...], tuple[int, ...]]:
    """Dims and shape that the sample axis unfolds into: ``(time)`` or ``(member, time)``."""
    if prep.members is None:
        return ("time",), (prep.season_year.size,)
    return ("member", "time"), (prep.members.size, _n_time(prep))


def _time(prep, pcs: xr.DataArray) -> dict:
    return {"time": ("time", pcs["sample"].values[: _n_time(prep)], prep.template["time"].attrs)}


def _regime_coords(cfg) -> dict:
    return {"regime": np.arange(1, cfg.regimes.k + 1, dtype=np.int32), "regime_name": ("regime", regime_names(cfg))}


def _state_coords(cfg) -> dict:
    return {"regime": label_states(cfg).astype(np.int32), "regime_name": ("regime", _state_names(cfg))}


def _label_attrs(cfg, long_name: str) -> dict:
    return {"long_name": long_name, "flag_values": label_states(cfg).astype(np.int8), "flag_meanings": flag_meanings(_state_names(cfg))}


def _duration_unit(prep) -> str:
    """Unit of episode durations: one time step of the data, 'days' for daily data and 'months' for monthly data."""
    return "months" if data.time_step_kind(prep.template["time"]) == "monthly" else "days"


def labels_file(cfg, prep, found) -> xr.Dataset:
    clusterer, pcs, labels = found["clusterer"], found["pcs"], found["labels"]
    k = cfg.regimes.k
    units = prep.template.attrs.get("units", "1")
    dims, shape = _sample_dims(prep)
    n_time = _n_time(prep)
    coords = {**_time(prep, pcs), **_regime_coords(cfg), "mode": pcs["mode"].values.astype(np.int32)}
    if prep.members is not None:
        coords["member"] = prep.members
    ds = xr.Dataset(coords=coords)
    ds["label"] = (dims, labels.astype(np.int8).reshape(shape), _label_attrs(cfg, "regime of each time step"))
    if clusterer.method == "kmeans":
        ds["distance"] = (("regime", *dims), clusterer.distances(pcs).values.T.astype(np.float32).reshape(k, *shape), {
            "long_name": "Euclidean distance to the regime centroid in PC space", "units": units,
        })
    else:
        ds["probability"] = (("regime", *dims), clusterer.probabilities(pcs).values.T.astype(np.float32).reshape(k, *shape), {
            "long_name": "membership probability of each regime", "units": "1",
        })
    ds["pc"] = (("mode", *dims), pcs.values.T.astype(np.float32).reshape(-1, *shape), {
        "long_name": "principal component (weighted anomaly projected on the EOF)", "units": units,
    })
    if found["correlation"] is not None:
        ds["pattern_correlation"] = (dims, found["correlation"].astype(np.float32).reshape(shape), {
            "long_name": "uncentred pattern correlation with the nearest regime centroid in the area-weighted space of the retained EOFs",
            "units": "1",
            "comment": f"label {UNASSIGNED} (unassigned) where below regimes.unassigned_below = {cfg.regimes.unassigned_below:g}",
        })
    if prep.members is not None:
        per_day = labels.reshape(shape)
        ds["member_fraction"] = (("regime", "time"), np.stack([(per_day == r).mean(0) for r in range(1, k + 1)]), {
            "long_name": "fraction of ensemble members in each regime", "units": "1",
        })
        if cfg.regimes.unassigned_below is not None:
            ds["unassigned_member_fraction"] = ("time", (per_day == UNASSIGNED).mean(0), {
                "long_name": "fraction of ensemble members unassigned", "units": "1",
            })
    ds["season_year"] = ("time", prep.season_year[:n_time].astype(np.int32), {"long_name": "year in which the season of this time step starts", "units": "1"})
    ds["segment_start"] = ("time", prep.segment_start[:n_time].astype(np.int8), {
        "long_name": "first time step after a gap or a season boundary",
        "flag_values": np.array([0, 1], dtype=np.int8),
        "flag_meanings": "continues_previous starts_new_segment",
    })
    return ds


def _grid(prep, values: xr.DataArray) -> xr.DataArray:
    out = prep.layout.unstack(values)
    if "level" in prep.template.coords:
        out = out.assign_coords(level=prep.template["level"])
    return out


def composites_file(cfg, prep, found) -> xr.Dataset:
    (anomaly_sums, raw_sums) = found["sums"]
    anomaly_mean, anomaly_std = stats.composites(anomaly_sums)
    raw_mean, raw_std = stats.composites(raw_sums)
    t = prep.template
    units = t.attrs.get("units", "1")
    name = t.name
    times = found["pcs"]["sample"].values
    ds = xr.Dataset(coords=_regime_coords(cfg))
    ds["anomaly_composite"] = _grid(prep, anomaly_mean).assign_attrs(
        long_name=f"mean anomaly of {name} over the days of each regime", units=units, cell_methods="time: mean"
    )
    ds["anomaly_std"] = _grid(prep, anomaly_std).assign_attrs(
        long_name=f"standard deviation of the {name} anomaly within each regime", units=units, cell_methods="time: standard_deviation"
    )
    field_attrs = {"long_name": f"mean {name} over the days of each regime", "units": units, "cell_methods": "time: mean"}
    if "standard_name" in t.attrs:
        field_attrs["standard_name"] = t.attrs["standard_name"]
    ds["field_composite"] = _grid(prep, raw_mean).assign_attrs(field_attrs)
    ds = ds.assign_coords(time=((), times[0], {"comment": f"composites over the days of each regime from {str(times[0])[:10]} to {str(times[-1])[:10]}"}))
    ds["day_count"] = ("regime", anomaly_sums["count"].values.astype(np.int32), {"long_name": "number of days in each regime", "units": "1"})
    return ds.transpose("regime", ...)


def statistics_file(cfg, prep, found) -> xr.Dataset:
    s = found["stats"]
    times = found["pcs"]["sample"].values
    runs = s["episodes"]
    ds = xr.Dataset(coords=_state_coords(cfg))
    ds["frequency"] = s["frequency"].assign_attrs(long_name="fraction of time steps in each regime", units="1")
    ds["monthly_frequency"] = s["monthly_frequency"].assign_attrs(long_name="fraction of time steps in each regime by calendar month", units="1")
    ds["yearly_frequency"] = s["yearly_frequency"].assign_attrs(long_name="fraction of time steps in each regime by season-year", units="1")
    ds["month"].attrs = {"long_name": "calendar month", "units": "1"}
    ds["season_year"].attrs = {"long_name": "year in which the season starts", "units": "1"}
    d = s["durations"]
    unit = _duration_unit(prep)
    ds["episode_count"] = d["episode_count"].assign_attrs(long_name="number of episodes counted", units="1", min_duration_days=cfg.regimes.min_duration_days)
    for key, text in (("mean_duration", "mean"), ("median_duration", "median"), ("max_duration", "longest")):
        ds[key] = d[key].astype(np.float64).assign_attrs(long_name=f"{text} episode duration", units=unit)
    ds["duration_histogram"] = d["duration_histogram"].assign_attrs(long_name="number of episodes of each duration", units="1")
    ds = ds.assign_coords(duration=("duration", d["duration"].values, {"long_name": "episode duration", "units": unit}))
    tr = s["transitions"]
    for key in tr.data_vars:
        ds[key] = tr[key]
    step = {"days": "day", "months": "month"}[unit]
    ds["transition_count"].attrs = {"long_name": f"number of steps from regime_from to regime_to on consecutive {unit}", "units": "1"}
    ds["transition_probability"].attrs = {"long_name": f"probability of regime_to in the next {step} given regime_from", "units": "1"}
    ds["next_regime_count"].attrs = {"long_name": "number of episodes of regime_from followed directly by regime_to", "units": "1"}
    ds["next_regime_probability"].attrs = {"long_name": "probability that regime_to follows when an episode of regime_from ends", "units": "1"}
    for c in ("regime_from", "regime_to"):
        ds[c].attrs = {"long_name": c.replace("_", " "), "units": "1"}
    ds["episode_regime"] = ("episode", runs["regime"].values.astype(np.int8), _label_attrs(cfg, "regime of each episode"))
    first = runs["first"].values
    if prep.members is not None:
        ds["episode_member"] = ("episode", prep.members.values[first // _n_time(prep)], {**prep.members.attrs, "long_name": "ensemble member of the episode"})
    ds["episode_start"] = ("episode", times[first], {"long_name": "first day of the episode"})
    ds["episode_end"] = ("episode", times[first + runs["length"].values - 1], {"long_name": "last day of the episode"})
    ds["episode_length"] = ("episode", runs["length"].values.astype(np.int32), {"long_name": "episode duration", "units": unit})
    calendar = prep.template["time"].encoding.get("calendar")
    if calendar:
        for v in ("episode_start", "episode_end"):
            ds[v].encoding["calendar"] = calendar
    return ds


def eofs_file(cfg, prep, found) -> xr.Dataset:
    eof = found["eof"]
    units = prep.template.attrs.get("units", "1")
    ds = xr.Dataset(coords={"mode": eof.components_["mode"].values.astype(np.int32)})
    ds["eof"] = _grid(prep, eof.patterns()).assign_attrs(
        long_name="EOF pattern: anomaly for one standard deviation of the PC", units=units
    )
    ds["eigenvalue"] = eof.eigenvalues_.assign_attrs(long_name="variance of the PC", units=f"({units})2")
    ds["eigenvalue_error"] = eof.eigenvalue_error_.assign_attrs(
        long_name="sampling error of the eigenvalue, lambda sqrt(2/N) (North et al. 1982)", units=f"({units})2"
    )
    ds["variance_fraction"] = eof.variance_fraction_.assign_attrs(long_name="fraction of the total weighted variance", units="1")
    ds["weight"] = _grid(prep, prep.weights).assign_attrs(long_name=f"EOF weight ({cfg.eof.weighting})", units="1")
    ds.attrs["eof_solver"] = eof.solver_
    return ds.transpose("mode", ...)


def model_dataset(cfg, prep, found) -> xr.Dataset:
    eof, clusterer = found["eof"], found["clusterer"]
    layout = prep.layout
    mode = eof.components_["mode"].values.astype(np.int32)
    ds = xr.Dataset(coords={**_regime_coords(cfg), "mode": mode})
    ds["mask"] = layout.mask().assign_attrs(long_name="grid points used in the analysis", flag_values=np.array([0, 1], dtype=np.int8), flag_meanings="left_out used")
    ds["weight"] = _grid(prep, prep.weights).assign_attrs(long_name="EOF weight", units="1")
    ds["eof_mean"] = _grid(prep, eof.mean_).assign_attrs(long_name="mean anomaly of the fitted samples", units=prep.template.attrs.get("units", "1"))
    ds["eof"] = _grid(prep, eof.components_).assign_attrs(long_name="unit-norm EOF of the weighted field", units="1")
    ds["eigenvalue"] = eof.eigenvalues_.assign_attrs(long_name="variance of the PC")
    ds["centroid"] = clusterer.centroids_.assign_attrs(long_name="regime centroid in PC space")
    regimes = np.arange(1, cfg.regimes.k + 1)
    ds["frequency"] = ("regime", found["stats"]["frequency"].sel(regime=regimes).values, {"long_name": "fraction of the fitted time steps in each regime", "units": "1"})
    ds["mean_duration"] = ("regime", found["stats"]["durations"]["mean_duration"].sel(regime=regimes).values, {
        "long_name": "mean episode duration in the fitted data", "units": _duration_unit(prep),
    })
    if clusterer.method == "gaussian-mixture":
        ds["covariance"] = clusterer.covariances_.assign_attrs(long_name="regime covariance in PC space")
        ds["mixing_weight"] = clusterer.mixing_weights_.assign_attrs(long_name="mixture weight", units="1")
    if prep.climatology is not None:
        clim = prep.climatology.astype(np.float64)
        ds["climatology"] = clim.drop_vars("term").assign_attrs(
            long_name="climatology coefficients on the time basis", terms=" ".join(str(t) for t in clim["term"].values)
        )
    settings = {
        "variable": cfg.data.variable,
        "units": prep.template.attrs.get("units"),
        "lat": cfg.data.lat, "lon": cfg.data.lon, "level": cfg.data.level, "months": cfg.data.months,
        "climatology": prep.climatology_kind, "harmonics": cfg.anomalies.harmonics,
        "detrend": cfg.anomalies.detrend, "running_mean_days": cfg.anomalies.running_mean_days,
        "weighting": cfg.eof.weighting, "method": clusterer.method, "k": cfg.regimes.k,
        "names": regime_names(cfg),
        "min_duration_days": cfg.regimes.min_duration_days, "unassigned_below": cfg.regimes.unassigned_below,
        "level_units": prep.template["level"].attrs.get("units") if "level" in prep.template.coords else None,
    }
    ds.attrs["settings"] = json.dumps(settings)
    return ds


def scan_file(table: xr.Dataset, attrs: dict) -> xr.Dataset:
    """The number-of-regimes scan table (:func:`regimes.scan.scan`) with CF and provenance attributes."""
    ds = coordinate_attrs(table)
    ds.attrs.update(attrs)
    ds.attrs["title"] = "regimes: number-of-regimes scan"
    return ds


def assemble(cfg, prep, found, attrs: dict, names: tuple[str, ...] = RUN_FILES) -> dict[str, xr.Dataset]:
    """The result datasets ``names`` (of :data:`RUN_FILES`), keyed by file name, with CF and provenance attributes."""
    builders = {
        "labels.nc": labels_file,
        "composites.nc": composites_file,
        "statistics.nc": statistics_file,
        "eofs.nc": eofs_file,
    }
    files = {}
    for name in names:
        if name == "model.nc":
            model = RegimeModel(coordinate_attrs(model_dataset(cfg, prep, found)))
            files[name] = model.stamped({**attrs, "title": f"regimes: saved regime model of {cfg.data.variable}"})
            continue
        ds = coordinate_attrs(builders[name](cfg, prep, found))
        ds.attrs.update(attrs)
        ds.attrs["title"] = f"regimes: {name[:-3]} of {cfg.data.variable}"
        files[name] = ds
    if found.get("scan") is not None:
        files["scan.nc"] = scan_file(found["scan"], attrs)
    return files
