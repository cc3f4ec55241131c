"""Climatology and anomalies: seasonal cycle, linear trend, running mean.

A climatology here is a small regression: ``clim(time, point) = B(time) @ C``,
where ``B`` is a basis of a few time functions (annual harmonics, or one
indicator per calendar month) and ``C`` the coefficients of each grid point.
Fitting ``C`` is one streaming reduction (``B^T X``) over the field, and
subtracting it is lazy, so a field larger than memory is never loaded.
"""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import xarray as xr

from .data import day_numbers, select_period
from .errors import UserError

_LEAP_CALENDARS = {"standard", "gregorian", "proleptic_gregorian", "julian", "mixed"}


def _calendar(time: xr.DataArray) -> str:
    if np.issubdtype(time.dtype, np.datetime64):
        return "standard"
    return str(time.values.flat[0].calendar)


def _year_lengths(time: xr.DataArray) -> np.ndarray:
    """Days in the calendar year of each time step, in the time axis' calendar."""
    cal = _calendar(time)
    year = time.dt.year.values
    if cal in ("noleap", "365_day"):
        return np.full(year.shape, 365.0)
    if cal in ("all_leap", "366_day"):
        return np.full(year.shape, 366.0)
    if cal == "360_day":
        return np.full(year.shape, 360.0)
    leap = (year % 4 == 0) if cal == "julian" else ((year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0)))
    return np.where(leap, 366.0, 365.0)


def harmonic_basis(time: xr.DataArray, harmonics: int) -> xr.DataArray:
    """Mean plus ``harmonics`` annual harmonics at each time step.

    The phase of a day is ``(day_of_year - 1) / days_in_year`` in the time
    axis' own calendar (noleap, 360_day, ...), so the seasonal cycle is
    periodic whatever the calendar.

    Returns
    -------
    xarray.DataArray
        Dims ``(time, term)``; ``term`` runs ``mean, cos1, sin1, cos2, ...``.
    """
    phase = 2 * np.pi * (time.dt.dayofyear.values - 1) / _year_lengths(time)
    columns = [np.ones_like(phase)]
    names = ["mean"]
    for h in range(1, harmonics + 1):
        columns += [np.cos(h * phase), np.sin(h * phase)]
        names += [f"cos{h}", f"sin{h}"]
    return xr.DataArray(np.stack(columns, axis=1), dims=("time", "term"), coords={"time": time, "term": names})


def month_basis(time: xr.DataArray) -> xr.DataArray:
    """One indicator column per calendar month (``term`` = 1..12)."""
    month = time.dt.month.values
    basis = (month[:, None] == np.arange(1, 13)[None, :]).astype(float)
    return xr.DataArray(basis, dims=("time", "term"), coords={"time": time, "term": np.arange(1, 13)})


def trend_basis(time: xr.DataArray) -> xr.DataArray:
    """Constant and linear time (in years since the first step) columns."""
    years = day_numbers(time) / 365.25
    return xr.DataArray(
        np.stack([np.ones_like(years), years - years.mean()], axis=1),
        dims=("time", "term"),
        coords={"time": time, "term": ["mean", "trend"]},
    )


def basis_for(kind: str, time: xr.DataArray, harmonics: int) -> xr.DataArray:
    """The basis of a climatology of the given kind ('daily' or 'monthly')."""
    return harmonic_basis(time, harmonics) if kind == "daily" else month_basis(time)


def fit(field: xr.DataArray, basis: xr.DataArray) -> xr.DataArray:
    """Least-squares coefficients of ``field`` on ``basis`` along time (lazy).

    Solves the normal equations ``(B^T B) C = B^T X`` for every grid point;
    ``B^T X`` is accumulated in float64 chunk by chunk.

    Returns
    -------
    xarray.DataArray
        Coefficients, dims ``term`` plus the non-time dims of ``field``.
    """
    b = basis.sel(time=field["time"])
    present = (b != 0).any("time")
    b = b.isel(term=np.flatnonzero(present.values))
    gram = b.values.T @ b.values
    if np.linalg.matrix_rank(gram) < gram.shape[0]:
        raise UserError("the climatology cannot be fitted: the base period is too short for the harmonics asked; shorten anomalies.harmonics or lengthen the period")
    rhs = xr.dot(b.chunk({"time": field.chunksizes.get("time", -1)}) if field.chunks else b, field.astype("float64"), dim="time")
    inverse = xr.DataArray(np.linalg.inv(gram), dims=("term", "term_"), coords={"term": b["term"].values, "term_": b["term"].values})
    return xr.dot(inverse, rhs.rename(term="term_"), dim="term_")


def evaluate(basis: xr.DataArray, coefficients: xr.DataArray, like: xr.DataArray) -> xr.DataArray:
    """``basis @ coefficients`` at the time steps of ``like``, chunked along time as ``like`` (lazy)."""
    b = basis.sel(time=like["time"]).sel(term=coefficients["term"]).values
    c = coefficients.transpose("term", ...)
    chunks = (like.chunksizes["time"] if like.chunks else -1, -1)
    values = dsa.from_array(b, chunks=chunks) @ c.values.reshape(c.shape[0], -1)
    values = values.reshape((b.shape[0], *c.shape[1:])).astype(np.float32)
    return xr.DataArray(values, dims=("time", *c.dims[1:]), coords={"time": like["time"], **{d: c[d] for d in c.dims[1:] if d in c.coords}})


def climatology_coefficients(
    field: xr.DataArray, kind: str, harmonics: int, base_period: list[str] | None
) -> tuple[xr.DataArray, xr.DataArray] | tuple[None, None]:
    """Fit the seasonal cycle of ``field`` over the base period (lazy).

    Parameters
    ----------
    field : xarray.DataArray
        Field over the whole annual cycle (before a season is cut).
    kind : {'daily', 'monthly', 'none'}
        Daily: mean plus the first ``harmonics`` annual harmonics, the
        least-squares equivalent of smoothing the day-of-year mean by keeping
        its first harmonics (common practice; e.g. Hannachi et al. 2007,
        Int. J. Climatol. 27). Monthly: the calendar-month mean.
    harmonics : int
        Number of annual harmonics kept for a daily climatology.
    base_period : [str, str] or None
        First and last day of the climatology period (default: all of ``field``).

    Returns
    -------
    basis, coefficients : xarray.DataArray
        Basis over all times of ``field`` and coefficients per grid point, or
        ``(None, None)`` when ``kind == 'none'``.
    """
    if kind == "none":
        return None, None
    basis = basis_for(kind, field["time"], harmonics)
    base = field if base_period is None else select_period(field, base_period, "anomalies.base_period")
    return basis, fit(base, basis)


def running_mean(field: xr.DataArray, days: int) -> xr.DataArray:
    """Centred running mean over ``days`` time steps (odd); record ends are dropped.

    Steps whose window reaches past either end of the record are removed, so
    every value is a full-window mean (lazy).
    """
    if days <= 1:
        return field
    half = days // 2
    if field.sizes["time"] <= 2 * half:
        raise UserError(f"anomalies.running_mean_days = {days} is longer than the record; shorten it")
    smooth = field.rolling(time=days, center=True, min_periods=days).mean()
    return smooth.isel(time=slice(half, field.sizes["time"] - half))


def detrend(field: xr.DataArray) -> tuple[xr.DataArray, xr.DataArray]:
    """Remove a least-squares linear trend at each point (lazy).

    Returns
    -------
    detrended : xarray.DataArray
    coefficients : xarray.DataArray
        ``term`` = ``mean``, ``trend`` (field units, and field units per year).
    """
    basis = trend_basis(field["time"])
    coefficients = fit(field, basis)
    return field - evaluate(basis, coefficients, field), coefficients
