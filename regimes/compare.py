"""Comparing two regime sets: match them one to one and report how they differ.

A regime set is a finished run or assignment (its output folder: the anomaly
composites of ``composites.nc``, frequencies and mean durations of
``statistics.nc``) or a saved model file (patterns rebuilt from its
centroids and EOFs; the frequencies and mean durations it stores of its
fitting data). The regimes of set A and set B are matched one to one by the
Hungarian method (Kuhn 1955, Naval Res. Logist. Q. 2, 83-97;
``scipy.optimize.linear_sum_assignment``), maximising the summed pattern
correlation of the matched pairs.

Pattern correlation and RMSE are area-weighted (weight cos latitude, exact
geometry of a regular grid) over the grid points present in both maps. The
correlation is uncentred: the maps are anomalies, so their spatial mean is
part of the pattern (the anomaly correlation; common practice). Set B is put
on set A's grid first (bilinear, :func:`regimes.conform.regrid`) and into
A's units (factor only: these are anomalies).
"""

from __future__ import annotations

import io
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr
from scipy.optimize import linear_sum_assignment

from . import units
from .conform import regrid
from .errors import UserError
from .finished import read_result
from .model import RegimeModel

log = logging.getLogger("regimes")

@dataclass
class RegimeSet:
    """One side of a comparison."""

    source: str
    kind: str  # "run" (an output folder) or "model" (a model file)
    patterns: xr.DataArray  # (regime, *grid), anomaly
    frequency: np.ndarray  # (regime)
    mean_duration: np.ndarray  # (regime), in duration_units
    duration_units: str  # one time step of the data: 'days' or 'months'
    names: list[str]
    units: str | None
    inputs: list[str]


def model_patterns(model: RegimeModel) -> xr.DataArray:
    """Regime patterns of a saved model in field units: ``eof_mean + sum_m centroid_m * eof_m / weight``.

    The EOFs are unit-norm patterns of the weighted field, so dividing by the
    weight puts a centroid back on the grid as an anomaly; points of zero or
    missing weight are missing.
    """
    ds = model.dataset
    weight = ds["weight"].where(ds["weight"] > 0)
    anomaly = xr.dot(ds["centroid"], ds["eof"], dim="mode") / weight + ds["eof_mean"]
    return anomaly.transpose("regime", *ds["mask"].dims).assign_attrs(units=ds["eof_mean"].attrs.get("units"))


def read(path: str | Path) -> RegimeSet:
    """A regime set from an output folder or a model file."""
    path = Path(path).resolve()
    if path.is_dir():
        missing = [name for name in ("composites.nc", "statistics.nc") if not (path / name).is_file()]
        if missing:
            raise UserError(f"folder '{path}' has no {' or '.join(missing)}; give an output folder of 'regimes run' or 'regimes assign', or a model.nc")
        comp, stat = read_result(path / "composites.nc"), read_result(path / "statistics.nc")
        patterns = comp["anomaly_composite"]
        regimes = patterns["regime"].values
        return RegimeSet(
            source=str(path), kind="run", patterns=patterns.drop_vars([c for c in patterns.coords if c in ("time", "regime_name")]),
            frequency=stat["frequency"].sel(regime=regimes).values, mean_duration=stat["mean_duration"].sel(regime=regimes).values,
            duration_units=stat["mean_duration"].attrs.get("units", "days"),
            names=[str(n) for n in comp["regime_name"].values], units=patterns.attrs.get("units"),
            inputs=[str(path / "composites.nc"), str(path / "statistics.nc")],
        )
    if not path.is_file():
        raise UserError(f"'{path}' not found; give an output folder of 'regimes run' or 'regimes assign', or a model.nc")
    model = RegimeModel.load(path)
    ds = model.dataset
    k = ds.sizes["regime"]
    nan = np.full(k, np.nan)
    patterns = model_patterns(model)
    return RegimeSet(
        source=str(path), kind="model", patterns=patterns.drop_vars("regime_name", errors="ignore"),
        frequency=ds["frequency"].values if "frequency" in ds else nan,
        mean_duration=ds["mean_duration"].values if "mean_duration" in ds else nan,
        duration_units=ds["mean_duration"].attrs.get("units", "days") if "mean_duration" in ds else "days",
        names=[str(n) for n in ds["regime_name"].values], units=patterns.attrs.get("units"), inputs=[str(path)],
    )


def _on_grid_of(a: RegimeSet, b: RegimeSet) -> xr.DataArray:
    """B's patterns on A's grid and in A's units."""
    pa, pb = a.patterns, b.patterns
    other_a = [d for d in pa.dims if d not in ("regime", "lat", "lon")]
    other_b = [d for d in pb.dims if d not in ("regime", "lat", "lon")]
    if other_a != other_b or any(pa.sizes[d] != pb.sizes[d] or not np.allclose(pa[d], pb[d]) for d in other_a):
        raise UserError(f"regime sets A ({a.source}) and B ({b.source}) are on different vertical grids; compare sets on the same levels")
    change = units.conversion(b.units, a.units, f"regime set B ({b.source})", against=f"regime set A ({a.source})") if a.units and b.units else None
    if change is not None:
        pb = pb * change[0]  # anomalies: the scale factor only, no offset
    same = pa.sizes["lat"] == pb.sizes["lat"] and pa.sizes["lon"] == pb.sizes["lon"] and np.allclose(pa["lat"], pb["lat"]) and np.allclose(pa["lon"], pb["lon"])
    if not same:
        pb = regrid(pb, pa["lat"].values, pa["lon"].values, f"regime set B ({b.source})", onto=f"the grid of regime set A ({a.source})")
    return pb.assign_coords(lat=pa["lat"], lon=pa["lon"]).transpose(*pa.dims)


def scores(pa: xr.DataArray, pb: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Area-weighted uncentred pattern correlation and RMSE of every pair of patterns.

    Returns
    -------
    correlation, rmse : numpy.ndarray (regime of A, regime of B)
        ``r = sum w a b / sqrt(sum w a^2 sum w b^2)`` and
        ``sqrt(sum w (a - b)^2 / sum w)`` over the points present in both
        maps, ``w = cos(latitude)``.
    """
    weight = np.cos(np.deg2rad(pa["lat"])).clip(min=0) * xr.ones_like(pa.isel(regime=0, drop=True))
    a = pa.transpose("regime", ...).values.reshape(pa.sizes["regime"], -1)
    b = pb.transpose("regime", ...).values.reshape(pb.sizes["regime"], -1)
    w = weight.transpose(*pa.dims[1:]).values.ravel()
    corr = np.full((a.shape[0], b.shape[0]), np.nan)
    rmse = np.full_like(corr, np.nan)
    for i in range(a.shape[0]):
        for j in range(b.shape[0]):
            ok = np.isfinite(a[i]) & np.isfinite(b[j]) & (w > 0)
            x, y, v = a[i, ok], b[j, ok], w[ok]
            if v.size == 0:
                continue
            denominator = np.sqrt((v * x * x).sum() * (v * y * y).sum())
            corr[i, j] = (v * x * y).sum() / denominator if denominator > 0 else np.nan
            rmse[i, j] = np.sqrt((v * (x - y) ** 2).sum() / v.sum())
    return corr, rmse


def compare(a: RegimeSet, b: RegimeSet) -> xr.Dataset:
    """Match the regimes of A and B one to one and describe each matched pair.

    Returns
    -------
    xarray.Dataset
        ``correlation`` and ``rmse`` (regime_a, regime_b); per matched
        ``pair``: ``matched_regime_a``, ``matched_regime_b``,
        ``pattern_correlation``, ``pattern_rmse``, ``frequency_a``,
        ``frequency_b``, ``frequency_difference`` (B - A),
        ``mean_duration_a``, ``mean_duration_b``,
        ``mean_duration_difference`` (B - A); the patterns ``pattern_a``,
        ``pattern_b`` on A's grid.
    """
    pa = a.patterns
    pb = _on_grid_of(a, b)
    corr, rmse = scores(pa, pb)
    if not np.isfinite(corr).any():
        raise UserError(f"regime sets A ({a.source}) and B ({b.source}) share no grid point with values; compare sets of one region")
    rows, cols = linear_sum_assignment(np.nan_to_num(corr, nan=-2.0), maximize=True)
    ra, rb = pa["regime"].values, pb["regime"].values
    unit = a.units or "1"
    same_step = a.duration_units == b.duration_units
    if not same_step:
        log.warning("set A counts durations in %s and set B in %s; their difference is left missing", a.duration_units, b.duration_units)
    duration_difference = b.mean_duration[cols] - a.mean_duration[rows] if same_step else np.full(rows.size, np.nan)
    ds = xr.Dataset(coords={
        "pair": ("pair", np.arange(1, rows.size + 1, dtype=np.int32), {"long_name": "matched pair of regimes", "units": "1"}),
        "regime_a": ("regime_a", ra.astype(np.int32), {"long_name": "regime number in set A", "units": "1"}),
        "regime_name_a": ("regime_a", a.names),
        "regime_b": ("regime_b", rb.astype(np.int32), {"long_name": "regime number in set B", "units": "1"}),
        "regime_name_b": ("regime_b", b.names),
    })
    ds["correlation"] = (("regime_a", "regime_b"), corr, {"long_name": "area-weighted uncentred pattern correlation of the anomaly patterns", "units": "1"})
    ds["rmse"] = (("regime_a", "regime_b"), rmse, {"long_name": "area-weighted root-mean-square difference of the anomaly patterns", "units": unit})
    pair = {
        "matched_regime_a": (ra[rows].astype(np.int32), "regime of set A in the pair", "1"),
        "matched_regime_b": (rb[cols].astype(np.int32), "regime of set B in the pair", "1"),
        "pattern_correlation": (corr[rows, cols], "area-weighted uncentred pattern correlation of the pair", "1"),
        "pattern_rmse": (rmse[rows, cols], "area-weighted root-mean-square difference of the pair's patterns", unit),
        "frequency_a": (a.frequency[rows], "fraction of time steps in the regime, set A", "1"),
        "frequency_b": (b.frequency[cols], "fraction of time steps in the regime, set B", "1"),
        "frequency_difference": (b.frequency[cols] - a.frequency[rows], "frequency of B minus frequency of A", "1"),
        "mean_duration_a": (a.mean_duration[rows], "mean episode duration, set A", a.duration_units),
        "mean_duration_b": (b.mean_duration[cols], "mean episode duration, set B", b.duration_units),
        "mean_duration_difference": (duration_difference, "mean duration of B minus mean duration of A (missing when A and B have other time steps)",
                                     a.duration_units),
    }
    for name, (values, long_name, u) in pair.items():
        ds[name] = ("pair", values, {"long_name": long_name, "units": u})
    ds["pattern_a"] = pa.rename(regime="regime_a").drop_vars("regime_a").drop_encoding().assign_attrs(long_name="anomaly pattern of each regime, set A", units=unit)
    ds["pattern_b"] = pb.rename(regime="regime_b").drop_vars("regime_b").drop_encoding().assign_attrs(
        long_name="anomaly pattern of each regime, set B, on the grid of A", units=unit
    )
    ds.attrs.update(
        source_a=f"{a.kind}: {a.source}", source_b=f"{b.kind}: {b.source}",
        comment="regimes matched one to one by the Hungarian method (Kuhn 1955) maximising the summed pattern correlation; differences are B minus A",
    )
    return ds


def table(ds: xr.Dataset) -> str:
    """The matched pairs as a plain-text table."""
    unit = ds["pattern_rmse"].attrs.get("units", "")
    lines = [
        f"A = {ds.attrs['source_a']}",
        f"B = {ds.attrs['source_b']}",
        f"{'pair':>4}  {'regime A':<22}{'regime B':<22}{'correlation':>11}  {'RMSE (' + unit + ')':>12}  {'frequency B-A':>13}  {'mean duration B-A (' + ds['mean_duration_difference'].attrs['units'] + ')':>24}",
    ]
    for p in range(ds.sizes["pair"]):
        row = ds.isel(pair=p)
        ia, ib = int(row["matched_regime_a"]), int(row["matched_regime_b"])
        name_a = f"{ia} {ds['regime_name_a'].sel(regime_a=ia).item()}"
        name_b = f"{ib} {ds['regime_name_b'].sel(regime_b=ib).item()}"
        lines.append(
            f"{p + 1:>4}  {name_a:<22}{name_b:<22}{float(row['pattern_correlation']):>11.3f}  {float(row['pattern_rmse']):>12.4g}  "
            f"{float(row['frequency_difference']):>+13.3f}  {float(row['mean_duration_difference']):>+24.2f}"
        )
    for side in ("a", "b"):
        left = sorted(set(ds[f"regime_{side}"].values.tolist()) - set(ds[f"matched_regime_{side}"].values.tolist()))
        if left:
            lines.append(f"unmatched regimes of {side.upper()}: {', '.join(map(str, left))}")
    return "\n".join(lines)


def figure(ds: xr.Dataset) -> bytes:
    """PNG of the matched pairs side by side: pattern of A, pattern of B, B minus A; one row per pair.

    Plain matplotlib (object interface, no global state); maps on the
    latitude-longitude grid, aspect 1 / cos(mean latitude).
    """
    from matplotlib.figure import Figure

    pa, pb = ds["pattern_a"], ds["pattern_b"]
    for extra in [d for d in pa.dims if d not in ("regime_a", "lat", "lon")]:
        pa, pb = pa.isel({extra: 0}), pb.isel({extra: 0})
    n = ds.sizes["pair"]
    height = 2.4 * n + 1.6
    fig = Figure(figsize=(11, height))
    axes = fig.subplots(n, 3, squeeze=False, sharex=True, sharey=True)
    fig.subplots_adjust(left=0.07, right=0.98, top=1 - 0.75 / height, bottom=1.2 / height, wspace=0.15, hspace=0.3)
    a_maps = [pa.sel(regime_a=int(ds["matched_regime_a"][p])) for p in range(n)]
    b_maps = [pb.sel(regime_b=int(ds["matched_regime_b"][p])) for p in range(n)]
    scale = float(np.nanmax(np.abs([*(m.values for m in a_maps), *(m.values for m in b_maps)]))) or 1.0
    lat, lon = pa["lat"].values, pa["lon"].values
    aspect = 1.0 / max(np.cos(np.deg2rad(np.mean(lat))), 0.2)
    unit = pa.attrs.get("units", "")
    mesh = None
    for p in range(n):
        ia, ib = int(ds["matched_regime_a"][p]), int(ds["matched_regime_b"][p])
        panels = (
            (a_maps[p], f"A: {ia} {ds['regime_name_a'].sel(regime_a=ia).item()}"),
            (b_maps[p], f"B: {ib} {ds['regime_name_b'].sel(regime_b=ib).item()}"),
            (b_maps[p] - a_maps[p], f"B - A   r = {float(ds['pattern_correlation'][p]):.2f}"),
        )
        for ax, (values, title) in zip(axes[p], panels):
            mesh = ax.pcolormesh(lon, lat, values.transpose("lat", "lon").values, cmap="RdBu_r", vmin=-scale, vmax=scale, shading="nearest")
            ax.set_title(title, fontsize=9)
            ax.set_aspect(aspect)
            ax.tick_params(labelsize=7)
        axes[p, 0].set_ylabel("latitude (degrees north)", fontsize=8)
    for ax in axes[-1]:
        ax.set_xlabel("longitude (degrees east)", fontsize=8)
    fig.suptitle(f"A = {ds.attrs['source_a']}\nB = {ds.attrs['source_b']}", fontsize=9)
    bar = fig.add_axes([0.3, 0.55 / height, 0.4, 0.12 / height])
    fig.colorbar(mesh, cax=bar, orientation="horizontal", label=f"anomaly ({unit})")
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=100)
    return buffer.getvalue()

