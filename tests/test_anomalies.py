"""Tests of regimes.anomalies against numpy / xarray / cftime references."""

from __future__ import annotations

import cftime
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from regimes import anomalies, synthetic


def noleap_field(years=3, seed=5):
    """Synthetic field on a noleap calendar, complete years, small grid."""
    ds, _ = synthetic.planted_regimes(
        years=years, calendar="noleap", lat=np.array([40.0, 55.0]), lon=np.array([-10.0, 0.0, 10.0]), k=2, seed=seed
    )
    return ds["psl"]


def fft_smoothed_doy_mean(field: xr.DataArray, harmonics: int) -> np.ndarray:
    """Reference: day-of-year mean, keeping its first ``harmonics`` harmonics via numpy FFT.

    This is the published definition of a smoothed daily climatology (common
    practice): rfft of the 365-day mean cycle, zero every harmonic above N, irfft.
    """
    doy = field["time"].dt.dayofyear.values
    values = field.values.astype("float64")
    mean_cycle = np.stack([values[doy == d].mean(axis=0) for d in range(1, 366)])  # (365, lat, lon)
    spectrum = np.fft.rfft(mean_cycle, axis=0)
    spectrum[harmonics + 1 :] = 0.0
    smooth = np.fft.irfft(spectrum, n=365, axis=0)
    return smooth[doy - 1]


@pytest.mark.parametrize("harmonics", [1, 3, 6])
def test_daily_climatology_equals_fft_truncated_doy_mean(harmonics):
    field = noleap_field()
    basis, coef = anomalies.climatology_coefficients(field, "daily", harmonics, None)
    clim = anomalies.evaluate(basis, coef, field).compute().values.astype("float64")
    ref = fft_smoothed_doy_mean(field, harmonics)
    # numpy.fft reference, 1e-5 relative (as stated in the task; common practice)
    np.testing.assert_allclose(clim, ref, rtol=1e-5)
    # and the seasonal part itself (without the ~1e5 Pa background) to 1e-3 of its range
    seasonal_ref = ref - ref.mean(axis=0)
    seasonal = clim - ref.mean(axis=0)
    assert np.max(np.abs(seasonal - seasonal_ref)) <= 1e-3 * np.ptp(seasonal_ref)


def test_daily_climatology_with_base_period_uses_only_that_period():
    field = noleap_field(years=4)
    base = ["1981-01-01", "1982-12-31"]
    basis, coef = anomalies.climatology_coefficients(field, "daily", 2, base)
    clim = anomalies.evaluate(basis, coef, field).compute().values
    first_two = field.isel(time=slice(0, 730))
    ref = fft_smoothed_doy_mean(first_two, 2)
    # the climatology of the base years, repeated over every year
    np.testing.assert_allclose(clim[:730], ref, rtol=1e-5)
    np.testing.assert_allclose(clim[730:1460], ref, rtol=1e-5)


def test_monthly_climatology_equals_calendar_month_mean():
    ds, _ = synthetic.planted_regimes(years=3, lat=np.array([40.0, 55.0]), lon=np.array([-10.0, 0.0]), k=2, seed=9)
    field = ds["psl"]
    basis, coef = anomalies.climatology_coefficients(field, "monthly", 3, None)
    clim = anomalies.evaluate(basis, coef, field).compute()
    # xarray groupby as the reference library
    monthly = field.astype("float64").groupby("time.month").mean("time")
    ref = monthly.sel(month=field["time"].dt.month).values
    np.testing.assert_allclose(clim.values, ref, rtol=1e-6)


def test_none_climatology():
    field = noleap_field(years=1)
    assert anomalies.climatology_coefficients(field, "none", 3, None) == (None, None)


def cftime_phase(dates, calendar):
    """Fraction of the calendar year elapsed at each date, by cftime date arithmetic."""
    phase = []
    for d in dates:
        start = cftime.datetime(d.year, 1, 1, calendar=calendar)
        end = cftime.datetime(d.year + 1, 1, 1, calendar=calendar)
        phase.append((d - start).total_seconds() / (end - start).total_seconds())
    return np.asarray(phase)


@pytest.mark.parametrize("calendar", ["360_day", "all_leap", "julian", "standard", "noleap"])
def test_pure_annual_cycle_removed_in_every_calendar(calendar):
    dates = xr.date_range("1999-01-01", "2003-01-01", freq="D", calendar=calendar, use_cftime=True, inclusive="left")
    phase = cftime_phase(dates, calendar)
    cycle = 5.0 + 3.0 * np.cos(2 * np.pi * phase) - 2.0 * np.sin(2 * np.pi * phase) + 1.0 * np.cos(4 * np.pi * phase)
    if calendar == "standard":
        time = pd.to_datetime([d.strftime("%Y-%m-%d") for d in dates])
    else:
        time = dates
    values = np.stack([cycle, 2 * cycle], axis=1)[:, :, None]
    field = xr.DataArray(values, dims=("time", "lat", "lon"), coords={"time": time, "lat": [40.0, 50.0], "lon": [0.0]})
    basis, coef = anomalies.climatology_coefficients(field, "daily", 3, None)
    anomaly = (field - anomalies.evaluate(basis, coef, field)).compute().values
    # amplitude ~ 6; float32 evaluation; the cycle is a sum of the first harmonics so it is removed exactly
    assert np.max(np.abs(anomaly)) < 1e-4 * np.max(np.abs(values))


def test_detrend_removes_planted_linear_trend():
    rng = np.random.default_rng(0)
    time = pd.date_range("1990-01-01", periods=900, freq="D")
    days = np.arange(900.0)
    slope_per_day = np.array([0.01, -0.03])
    y = 50.0 + days[:, None] * slope_per_day[None, :] + rng.normal(0, 1.0, (900, 2))
    field = xr.DataArray(y[:, :, None], dims=("time", "lat", "lon"), coords={"time": time, "lat": [40.0, 50.0], "lon": [0.0]})
    detrended, coef = anomalies.detrend(field)
    got = detrended.compute().values[:, :, 0]
    for j in range(2):
        # numpy.polyfit as the least-squares reference
        p = np.polyfit(days, y[:, j], 1)
        np.testing.assert_allclose(got[:, j], y[:, j] - np.polyval(p, days), atol=1e-3)
        # slope in field units per year of 365.25 days (the Julian year; common practice)
        np.testing.assert_allclose(float(coef.sel(term="trend").isel(lat=j, lon=0)), p[0] * 365.25, rtol=1e-6)


@pytest.mark.parametrize("width", [3, 5, 11])
def test_running_mean_equals_box_convolution(width):
    rng = np.random.default_rng(1)
    n = 60
    time = pd.date_range("1990-01-01", periods=n, freq="D")
    y = rng.normal(size=(n, 2, 1))
    field = xr.DataArray(y, dims=("time", "lat", "lon"), coords={"time": time, "lat": [40.0, 50.0], "lon": [0.0]})
    out = anomalies.running_mean(field, width)
    half = width // 2
    assert out.sizes["time"] == n - 2 * half
    np.testing.assert_array_equal(out["time"].values, time[half : n - half].values)
    box = np.ones(width) / width
    for j in range(2):
        # numpy.convolve 'valid' mode: only full windows, i.e. the record ends are dropped
        ref = np.convolve(y[:, j, 0], box, mode="valid")
        np.testing.assert_allclose(out.values[:, j, 0], ref, rtol=1e-10, atol=1e-12)


def test_running_mean_of_one_or_zero_is_identity():
    field = noleap_field(years=1)
    assert anomalies.running_mean(field, 1) is field
    assert anomalies.running_mean(field, 0) is field


def test_base_period_with_a_day_the_calendar_lacks_is_a_user_error():
    from regimes.errors import UserError

    # 30 February does not exist in the standard (Gregorian) calendar
    ds, _ = synthetic.planted_regimes(years=1, lat=np.array([40.0]), lon=np.array([0.0, 10.0]), k=2, seed=2)
    with pytest.raises(UserError) as err:
        anomalies.climatology_coefficients(ds["psl"], "daily", 2, ["1981-02-30", "1981-12-31"])
    assert "anomalies.base_period" in str(err.value)
