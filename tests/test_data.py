"""Tests of regimes.data: coordinate detection, selection, seasons, segments, reading."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from regimes import data, synthetic
from regimes.errors import UserError


def field(lat, lon, days=10, start="1990-01-01", level=None):
    """A (time, lat, lon[, level]) field whose value encodes its coordinates.

    value = 1000 * lat_index + lon_original + 0.001 * day (+ 0.1 * level index),
    so that any selection can be checked against its coordinates.
    """
    lat = np.asarray(lat, dtype=float)
    lon = np.asarray(lon, dtype=float)
    time = pd.date_range(start, periods=days, freq="D")
    values = (
        1000.0 * lat[None, :, None]
        + lon[None, None, :]
        + 0.001 * np.arange(days)[:, None, None]
    )
    da = xr.DataArray(
        values.astype("float64"),
        dims=("time", "lat", "lon"),
        coords={
            "time": time,
            "lat": ("lat", lat, {"units": "degrees_north"}),
            "lon": ("lon", lon, {"units": "degrees_east"}),
        },
        name="v",
    )
    return da


def expected_lon_values(da):
    """Recover the original longitude of each column from the encoded values."""
    v = da.isel(time=0).values  # (lat, lon)
    lat = da["lat"].values
    return v[0] - 1000.0 * lat[0]


# --------------------------------------------------------------------------
# coordinate detection
# --------------------------------------------------------------------------


def odd_named_dataset():
    t = pd.date_range("2000-01-01", periods=6, freq="D")
    y = np.array([60.0, 50.0, 40.0])
    x = np.array([0.0, 10.0, 20.0, 30.0])
    plev = np.array([1000.0, 850.0, 500.0, 250.0])
    values = (
        plev[None, :, None, None]
        + 0.01 * y[None, None, :, None]
        + 0.0001 * x[None, None, None, :]
        + 0 * np.arange(6)[:, None, None, None]
    )
    values = values + np.arange(6)[:, None, None, None] * 1e-6
    return xr.Dataset(
        {"zg": (("t", "plev", "y", "x"), values, {"units": "m"})},
        coords={
            "t": ("t", t, {"standard_name": "time"}),
            "plev": ("plev", plev, {"units": "hPa"}),
            "y": ("y", y, {"standard_name": "latitude", "units": "degrees_north"}),
            "x": ("x", x, {"axis": "X", "units": "degrees"}),
        },
    )


def test_coordinates_found_by_attributes_under_odd_names(tmp_path):
    path = tmp_path / "odd.nc"
    odd_named_dataset().to_netcdf(path)
    ds = data.open_inputs([str(path)])
    roles = data.find_coordinates(ds["zg"])
    assert roles == {"time": "t", "lat": "y", "lon": "x", "vertical": "plev"}
    std = data.standardise(ds["zg"], ds, chunk_days=3)
    assert set(std.dims) == {"time", "lat", "lon", "level"}
    np.testing.assert_array_equal(std["level"].values, [1000, 850, 500, 250])


def test_axis_attributes_alone_identify_coordinates():
    da = xr.DataArray(
        np.zeros((3, 2, 2, 1)),
        dims=("a", "b", "c", "d"),
        coords={
            "a": ("a", pd.date_range("2000-01-01", periods=3)),
            "b": ("b", [10.0, 20.0], {"axis": "Y", "units": "degree"}),
            "c": ("c", [0.0, 5.0], {"axis": "X", "units": "degrees"}),
            "d": ("d", [3.0], {"axis": "Z", "units": "m"}),
        },
        name="q",
    )
    assert data.find_coordinates(da) == {"time": "a", "lat": "b", "lon": "c", "vertical": "d"}


def test_missing_latitude_is_a_user_error():
    da = xr.DataArray(
        np.zeros((3, 2)),
        dims=("time", "x"),
        coords={"time": pd.date_range("2000-01-01", periods=3), "x": ("x", [0.0, 1.0], {"units": "degrees_east"})},
        name="q",
    )
    with pytest.raises(UserError) as err:
        data.find_coordinates(da)
    assert "lat" in str(err.value)


# --------------------------------------------------------------------------
# longitude boxes
# --------------------------------------------------------------------------

LON_360 = np.arange(0.0, 360.0, 10.0)
LON_180 = np.arange(-180.0, 180.0, 10.0)


@pytest.mark.parametrize(
    "grid, box, originals",
    [
        # box crossing 0
        (LON_360, [-20, 20], [340, 350, 0, 10, 20]),
        (LON_180, [-20, 20], [-20, -10, 0, 10, 20]),
        (LON_360, [340, 20], [340, 350, 0, 10, 20]),
        # box crossing 180
        (LON_180, [160, -160], [160, 170, -180, -170, -160]),
        (LON_180, [160, 200], [160, 170, -180, -170, -160]),
        (LON_360, [160, -160], [160, 170, 180, 190, 200]),
        (LON_360, [160, 200], [160, 170, 180, 190, 200]),
        # ordinary boxes in the other convention
        (LON_360, [-90, -60], [270, 280, 290, 300]),
        (LON_180, [270, 300], [-90, -80, -70, -60]),
    ],
)
def test_longitude_box(grid, box, originals):
    da = field([40.0, 50.0], grid)
    out = data.select(da, lon=box)
    lon = out["lon"].values
    # the data columns are those of the asked longitudes, in eastward order
    np.testing.assert_allclose(expected_lon_values(out), originals)
    # coordinates are continuous and increase eastward by the grid step
    np.testing.assert_allclose(np.diff(lon), 10.0)
    # each coordinate is the original longitude modulo 360 (same meridian)
    np.testing.assert_allclose(np.mod(lon, 360.0), np.mod(originals, 360.0))


def test_longitude_box_selecting_nothing():
    da = field([40.0], np.arange(0.0, 50.0, 10.0))
    with pytest.raises(UserError) as err:
        data.select(da, lon=[100, 120])
    assert "data.lon" in str(err.value)


def test_non_monotonic_longitudes_are_sorted_and_data_follow():
    grid = np.array([30.0, 0.0, 20.0, 350.0, 10.0, 340.0])
    da = field([40.0, 50.0], grid)
    out = data.select(da)
    np.testing.assert_allclose(out["lon"].values, np.sort(grid))
    np.testing.assert_allclose(expected_lon_values(out), np.sort(grid))
    boxed = data.select(da, lon=[-20, 20])
    np.testing.assert_allclose(boxed["lon"].values, [-20, -10, 0, 10, 20])
    np.testing.assert_allclose(expected_lon_values(boxed), [340, 350, 0, 10, 20])


# --------------------------------------------------------------------------
# latitude boxes
# --------------------------------------------------------------------------


@pytest.mark.parametrize("box", [[30, 60], [60, 30]])
def test_descending_latitude_box_either_order(box):
    lat = np.arange(80.0, 19.0, -10.0)  # 80, 70, ..., 20 as stored in many reanalyses
    da = field(lat, [0.0, 10.0])
    out = data.select(da, lat=box)
    np.testing.assert_allclose(out["lat"].values, [30, 40, 50, 60])
    # the data rows follow their latitude
    np.testing.assert_allclose(out.isel(time=0, lon=0).values, 1000.0 * np.array([30, 40, 50, 60]))


def test_latitude_box_selecting_nothing():
    da = field([40.0, 50.0], [0.0])
    with pytest.raises(UserError) as err:
        data.select(da, lat=[0, 10])
    assert "data.lat" in str(err.value)


# --------------------------------------------------------------------------
# levels and periods
# --------------------------------------------------------------------------


def test_level_selection_in_hpa(tmp_path):
    path = tmp_path / "odd.nc"
    odd_named_dataset().to_netcdf(path)
    ds = data.open_inputs([str(path)])
    std = data.standardise(ds["zg"], ds, 10)
    out = data.select(std, level=500)
    assert "level" not in out.dims
    # values were built as plev + small terms
    np.testing.assert_allclose(out.values, 500.0, atol=1.0)


def test_missing_level_lists_levels(tmp_path):
    path = tmp_path / "odd.nc"
    odd_named_dataset().to_netcdf(path)
    ds = data.open_inputs([str(path)])
    std = data.standardise(ds["zg"], ds, 10)
    with pytest.raises(UserError) as err:
        data.select(std, level=700)
    message = str(err.value)
    assert "700" in message
    for level in ("1000", "850", "500", "250"):
        assert level in message


def test_level_without_vertical_axis():
    da = field([40.0], [0.0])
    with pytest.raises(UserError) as err:
        data.select(da, level=500)
    assert "data.level" in str(err.value)


def test_period_selection():
    da = field([40.0], [0.0], days=60)
    out = data.select(da, period=["1990-01-10", "1990-02-05"])
    assert out.sizes["time"] == 27  # 22 days of January + 5 of February
    assert str(out["time"].values[0])[:10] == "1990-01-10"
    assert str(out["time"].values[-1])[:10] == "1990-02-05"


def test_period_with_a_day_the_calendar_lacks_is_a_user_error():
    # 30 February does not exist in the standard (Gregorian) calendar
    da = field([40.0], [0.0], days=90)
    with pytest.raises(UserError) as err:
        data.select(da, period=["1990-02-30", "1990-03-10"])
    assert "data.period" in str(err.value)


def test_period_in_360_day_calendar():
    # 30 February exists in the 360_day calendar (CF conventions 1.8 sec. 4.4.1)
    time = xr.date_range("1990-01-01", periods=90, freq="D", calendar="360_day", use_cftime=True)
    da = xr.DataArray(np.zeros((90, 1, 1)), dims=("time", "lat", "lon"), coords={"time": time, "lat": [40.0], "lon": [0.0]}, name="v")
    out = data.select(da, period=["1990-02-30", "1990-03-10"])
    assert out.sizes["time"] == 11  # 30 Feb + 1..10 Mar


def test_period_outside_data():
    da = field([40.0], [0.0], days=60)
    with pytest.raises(UserError) as err:
        data.select(da, period=["2000-01-01", "2000-12-31"])
    assert "data.period" in str(err.value)


# --------------------------------------------------------------------------
# seasons and segments
# --------------------------------------------------------------------------


def times(*dates):
    return xr.DataArray(pd.to_datetime(list(dates)), dims="time", name="time")


def test_season_year_djf():
    t = times("1990-11-30", "1990-12-01", "1990-12-31", "1991-01-15", "1991-02-28", "1991-12-01")
    got = data.season_year(t, [12, 1, 2]).values
    # DJF 1990/91 is labelled 1990 (the year in which the season starts; common practice)
    np.testing.assert_array_equal(got[1:], [1990, 1990, 1990, 1990, 1991])


def test_season_year_ndjfm():
    t = times("1990-11-01", "1990-12-15", "1991-01-01", "1991-03-31", "1991-11-01")
    np.testing.assert_array_equal(data.season_year(t, [11, 12, 1, 2, 3]).values, [1990, 1990, 1990, 1990, 1991])


def test_season_year_jja_and_whole_year():
    t = times("1990-06-01", "1990-08-31", "1991-07-01")
    np.testing.assert_array_equal(data.season_year(t, [6, 7, 8]).values, [1990, 1990, 1991])
    t = times("1990-01-01", "1990-12-31", "1991-01-01")
    np.testing.assert_array_equal(data.season_year(t, None).values, [1990, 1990, 1991])


def test_season_year_order_of_months_irrelevant():
    t = times("1990-12-01", "1991-01-15", "1991-02-28")
    np.testing.assert_array_equal(data.season_year(t, [1, 2, 12]).values, [1990, 1990, 1990])


def test_segment_starts_at_season_boundaries_and_gaps():
    days = pd.date_range("1990-12-01", "1992-02-29", freq="D")
    djf = days[days.month.isin([12, 1, 2])]
    t = xr.DataArray(djf, dims="time")
    starts = data.segment_starts(t)
    expected = np.zeros(djf.size, dtype=bool)
    expected[0] = True
    expected[list(djf).index(pd.Timestamp("1991-12-01"))] = True
    np.testing.assert_array_equal(starts, expected)

    # a gap of 3 missing days inside a season
    gappy = djf.delete([10, 11, 12])
    starts = data.segment_starts(xr.DataArray(gappy, dims="time"))
    assert starts[0] and starts[10]
    assert starts.sum() == 3


def test_segment_starts_rejects_duplicate_and_unsorted_times():
    with pytest.raises(UserError):
        data.segment_starts(times("1990-01-01", "1990-01-02", "1990-01-02", "1990-01-03"))
    with pytest.raises(UserError):
        data.segment_starts(times("1990-01-01", "1990-01-03", "1990-01-02"))


def test_segment_starts_on_cftime_calendar():
    t = xr.DataArray(xr.date_range("2001-01-01", periods=400, freq="D", calendar="360_day", use_cftime=True), dims="time")
    starts = data.segment_starts(t)
    assert starts[0] and starts.sum() == 1


# --------------------------------------------------------------------------
# reading files
# --------------------------------------------------------------------------


def small_planted(years=1, **kw):
    ds, _ = synthetic.planted_regimes(years=years, lat=np.arange(40.0, 61.0, 10.0), lon=np.arange(-20.0, 21.0, 10.0), k=2, seed=3, **kw)
    return ds


def test_packed_int16_with_fill_value_decodes(tmp_path):
    ds = small_planted()
    values = ds["psl"].values.astype("float64")
    values[5, 1, 2] = np.nan
    ds["psl"].values[:] = values
    path = tmp_path / "packed.nc"
    synthetic.write_netcdf(ds, path, pack=True)
    import netCDF4

    with netCDF4.Dataset(path) as nc:
        var = nc.variables["psl"]
        assert var.dtype == np.int16
        scale = float(var.scale_factor)
        assert "_FillValue" in var.ncattrs()
    opened = data.open_inputs([str(path)])
    std = data.standardise(data.pick_variable(opened, "psl"), opened, 100)
    got = std.values
    assert np.isnan(got[5, 1, 2])
    assert np.isnan(got).sum() == 1
    ok = np.isfinite(values)
    # quantisation error of CF packing is at most scale_factor / 2 (CF conventions 1.8 sec. 8.1)
    # (plus float32 rounding of the decoded value, half an ulp: IEEE 754)
    half_ulp = np.abs(values[ok]).max() * 2.0**-24
    assert np.max(np.abs(got[ok] - values[ok])) <= scale / 2 * (1 + 1e-9) + half_ulp


def test_several_files_by_glob_are_combined_along_time(tmp_path):
    ds = small_planted(years=2)
    folder = tmp_path / "parts"
    folder.mkdir()
    for year in (1981, 1982):
        part = ds.sel(time=str(year))
        part["time"].encoding = {}
        synthetic.write_netcdf(part, folder / f"psl_{year}.nc")
    opened = data.open_inputs([str(folder / "psl_*.nc")])
    assert len(opened.attrs["input_files"]) == 2
    assert opened.sizes["time"] == ds.sizes["time"]
    np.testing.assert_array_equal(opened["time"].values, ds["time"].values)
    np.testing.assert_allclose(opened["psl"].values, ds["psl"].values)


def test_missing_file(tmp_path):
    with pytest.raises(UserError) as err:
        data.open_inputs([str(tmp_path / "absent.nc")])
    assert "absent.nc" in str(err.value)


def test_glob_matching_nothing(tmp_path):
    with pytest.raises(UserError) as err:
        data.open_inputs([str(tmp_path / "none_*.nc")])
    assert "none_*.nc" in str(err.value)


def test_text_file_named_nc(tmp_path):
    path = tmp_path / "fake.nc"
    path.write_text("this is not a NetCDF file\n")
    with pytest.raises(UserError) as err:
        data.open_inputs([str(path)])
    assert "fake.nc" in str(err.value)
    assert "\n" not in str(err.value)


def test_missing_variable_lists_variables(tmp_path):
    ds = small_planted()
    ds["tas"] = ds["psl"] * 0 + 280.0
    path = tmp_path / "two.nc"
    synthetic.write_netcdf(ds, path)
    opened = data.open_inputs([str(path)])
    with pytest.raises(UserError) as err:
        data.pick_variable(opened, "zg")
    message = str(err.value)
    assert "'zg'" in message
    assert "psl" in message and "tas" in message


def test_select_months_none_selected():
    da = field([40.0], [0.0], days=40)  # January and part of February
    with pytest.raises(UserError) as err:
        data.select_months(da, [6, 7, 8])
    assert "data.months" in str(err.value)
    kept = data.select_months(da, [2])
    assert set(kept["time"].dt.month.values) == {2}


@pytest.mark.parametrize("record_dimension", [False, True], ids=["fixed", "record"])
@pytest.mark.parametrize("dtype", ["int16", "float32"])
def test_complete_classic_files_are_read_and_truncated_ones_refused(tmp_path, record_dimension, dtype):
    """The truncation check of classic (NetCDF-3) files passes complete files and refuses cut ones.

    Odd grid sizes exercise the 4-byte padding of classic-format variables
    (NetCDF classic format specification, Unidata), and int16 with a single
    record variable the unpadded record case.
    """
    ds = small_planted().isel(lat=slice(0, 3), lon=slice(0, 5), time=slice(0, 31))
    path = tmp_path / "classic.nc"
    encoding = {"psl": {"dtype": dtype, "scale_factor": 0.5, "add_offset": 100000.0, "_FillValue": -32767} if dtype == "int16" else {"dtype": dtype}}
    ds.to_netcdf(path, format="NETCDF3_64BIT", unlimited_dims=["time"] if record_dimension else None, encoding=encoding)
    opened = data.open_inputs([str(path)])
    np.testing.assert_allclose(opened["psl"].values, ds["psl"].values, atol=0.25)  # packing error <= scale_factor / 2
    whole = path.read_bytes()
    path.write_bytes(whole[:-8])
    with pytest.raises(UserError, match="is truncated or damaged"):
        data.open_inputs([str(path)])
