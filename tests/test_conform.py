"""Units, ensemble members and regridding of other data (units by their definitions, interpolation by its definition)."""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr

from regimes import conform, units
from regimes.errors import UserError


def test_conversions_follow_the_definitions_of_the_units():
    # hecto = 10^2 and T/K = t/degC + 273.15 (SI brochure, 9th edition); 1 kn = 1852 m per hour (definition)
    assert units.conversion("hPa", "Pa", "x") == (100.0, 0.0)
    assert units.conversion("mbar", "Pa", "x") == (100.0, 0.0)
    assert units.conversion("degC", "K", "x") == (1.0, 273.15)
    factor, offset = units.conversion("kn", "m s-1", "x")
    assert factor == pytest.approx(1852.0 / 3600.0, rel=1e-15) and offset == 0.0
    # Fahrenheit scale: water freezes at 32 degF and boils at 212 degF, 0 and 100 degC (definition)
    factor, offset = units.conversion("degF", "degC", "x")
    assert 32 * factor + offset == pytest.approx(0.0, abs=1e-12)
    assert 212 * factor + offset == pytest.approx(100.0, rel=1e-12)
    # one quantity in two spellings needs no conversion
    assert units.conversion("m**2 s**-2", "m2 s-2", "x") is None
    assert units.conversion("Pa", "pa", "x") is None


def test_other_quantities_and_unknown_units_are_refused():
    with pytest.raises(UserError, match=r"'K' \(temperature\) but the model has 'Pa' \(pressure\); these cannot be converted"):
        units.conversion("K", "Pa", "variable 'psl'")
    with pytest.raises(UserError, match="furlong"):
        units.conversion("furlong", "m", "variable 'x'")


def test_a_member_dimension_is_found_by_cf_attributes_or_name():
    base = np.zeros((2, 3, 2, 2))
    cf = xr.DataArray(base, dims=("r", "time", "lat", "lon"), coords={"r": ("r", [1, 2], {"standard_name": "realization"})}, name="psl")
    assert conform.find_member(cf) == "r"
    assert conform.find_member(cf.rename(r="member").drop_vars("member")) == "member"
    with pytest.raises(UserError, match="'bin'"):
        conform.find_member(cf.rename(r="bin").drop_vars("bin"))


def field_on(lat, lon, values):
    return xr.DataArray(dsa.from_array(values, chunks=(2, -1, -1)), dims=("time", "lat", "lon"), coords={"time": [0, 1], "lat": lat, "lon": lon}, name="f")


def test_bilinear_interpolation_reproduces_a_bilinear_field_across_longitude_conventions():
    # a source on 0..360 longitudes crossing the prime meridian, a target in -180..180
    lat = np.arange(20.0, 61.0, 5.0)
    lon = np.concatenate([np.arange(280.0, 360.0, 5.0), np.arange(0.0, 31.0, 5.0)])
    east = np.where(lon >= 180, lon - 360, lon)

    def bilinear(la, lo):
        return 3.0 * la[:, None] + 2.0 * lo[None, :] + 0.01 * la[:, None] * lo[None, :]

    values = np.stack([bilinear(lat, east), 2 * bilinear(lat, east)])
    target_lat, target_lon = np.arange(21.25, 58.0, 2.5), np.arange(-73.75, 26.0, 2.5)
    out = conform.regrid(field_on(lat, lon, values), target_lat, target_lon, "test data")
    assert isinstance(out.data, dsa.Array)  # stays lazy
    # linear interpolation in each direction reproduces any function bilinear in lat and lon (definition)
    np.testing.assert_allclose(out.isel(time=0).values, bilinear(target_lat, target_lon), rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(out.isel(time=1).values, 2 * bilinear(target_lat, target_lon), rtol=1e-12, atol=1e-9)
    np.testing.assert_array_equal(out["lon"].values, target_lon)


def test_a_global_source_is_periodic_and_grid_points_are_taken_as_they_are():
    lat = np.arange(-10.0, 11.0, 2.5)
    lon = np.arange(0.0, 360.0, 2.5)
    values = np.stack([np.cos(np.deg2rad(lon))[None, :] * np.ones((lat.size, 1))] * 2)
    target = np.arange(0.0, 360.0, 1.25)
    out = conform.regrid(field_on(lat, lon, values), lat, target, "global data")
    # 358.75 lies halfway between 357.5 and 360 = 0: the mean of the two (linear interpolation)
    assert float(out.isel(time=0, lat=0).sel(lon=358.75)) == pytest.approx((np.cos(np.deg2rad(357.5)) + 1.0) / 2, rel=1e-12)
    same = conform.regrid(field_on(lat, lon, values), lat, np.arange(-40.0, 10.1, 2.5), "global data")
    np.testing.assert_array_equal(same.isel(time=0, lat=0).values, np.cos(np.deg2rad(np.arange(-40.0, 10.1, 2.5) % 360)).astype(values.dtype))


def test_a_region_outside_the_data_is_refused():
    lat, lon = np.arange(30.0, 51.0, 5.0), np.arange(0.0, 21.0, 5.0)
    field = field_on(lat, lon, np.zeros((2, lat.size, lon.size)))
    with pytest.raises(UserError, match="latitudes 30 to 50 but the model's grid spans 25 to 50"):
        conform.regrid(field, np.arange(25.0, 51.0, 5.0), lon, "the data")
    with pytest.raises(UserError, match="longitudes"):
        conform.regrid(field, lat, np.arange(-5.0, 21.0, 5.0), "the data")
