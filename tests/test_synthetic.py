"""Tests of the planted-truth field builder (all data are invented)."""

from __future__ import annotations

import functools

import cftime
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA
from sklearn.metrics import adjusted_rand_score

from regimes.synthetic import default_transition, planted_regimes, stationary_distribution, write_netcdf


@functools.lru_cache(maxsize=None)
def _default_field(seed: int = 0):
    """The default field for one seed, built once per test session."""
    return planted_regimes(seed=seed)


@pytest.fixture(scope="module")
def default_pair():
    return _default_field(0)


def _weighted_corr(a, b, lat):
    w = np.cos(np.deg2rad(lat))[:, None] * np.ones_like(a)
    w = w / w.sum()
    am, bm = a - (w * a).sum(), b - (w * b).sum()
    return (w * am * bm).sum() / np.sqrt((w * am**2).sum() * (w * bm**2).sum())


# --------------------------------------------------------------------------
# structure
# --------------------------------------------------------------------------


def test_shapes_dims_and_attrs(default_pair):
    data, truth = default_pair
    psl = data["psl"]
    assert psl.dims == ("time", "lat", "lon")
    assert psl.shape == (7305, 13, 25)  # 1981..2000 has 5 leap years
    assert psl.dtype == np.float32
    assert psl.attrs["units"] == "Pa"
    assert psl.attrs["standard_name"] == "air_pressure_at_mean_sea_level"
    assert psl.attrs["long_name"]
    assert data["lat"].attrs == {
        "units": "degrees_north",
        "standard_name": "latitude",
        "long_name": "latitude",
        "axis": "Y",
    }
    assert data["lon"].attrs["units"] == "degrees_east"
    assert data["lon"].attrs["standard_name"] == "longitude"
    assert data["lon"].attrs["axis"] == "X"
    assert data["time"].attrs["axis"] == "T"
    assert data["time"].attrs["standard_name"] == "time"
    assert np.issubdtype(data["time"].dtype, np.datetime64)
    assert str(data["time"].values[0])[:10] == "1981-01-01"
    assert str(data["time"].values[-1])[:10] == "2000-12-31"
    np.testing.assert_array_equal(np.diff(data["time"].values), np.timedelta64(1, "D"))
    np.testing.assert_array_equal(data["lat"], np.arange(20, 80.1, 5.0))
    np.testing.assert_array_equal(data["lon"], np.arange(-90, 30.1, 5.0))
    assert data.attrs["Conventions"] == "CF-1.8"
    # plausible pressures around the 101000 Pa background
    assert 95000 < float(psl.min()) and float(psl.max()) < 107000
    assert abs(float(psl.mean()) - 101000) < 300

    assert truth["label"].dims == ("time",)
    assert np.issubdtype(truth["label"].dtype, np.integer)
    assert truth["pattern"].dims == ("regime", "lat", "lon")
    assert truth["pattern"].attrs["units"] == "Pa"
    assert truth["transition"].dims == ("regime_from", "regime_to")
    assert truth["stationary"].dims == ("regime",)
    np.testing.assert_array_equal(truth["regime"], [1, 2, 3, 4])
    assert truth["time"].equals(data["time"])


def test_labels_are_one_to_k(default_pair):
    _, truth = default_pair
    assert set(np.unique(truth["label"].values)) == {1, 2, 3, 4}


def test_patterns_peak_and_distinct():
    for k, seed in [(4, 0), (4, 1), (4, 2), (4, 3), (6, 0)]:
        _, truth = planted_regimes(years=1, k=k, seed=seed, amplitude=1500.0)
        pattern = truth["pattern"].values
        lat = truth["lat"].values
        np.testing.assert_allclose(np.abs(pattern).max(axis=(1, 2)), 1500.0, rtol=1e-6)
        for i in range(k):
            for j in range(i):
                assert _weighted_corr(pattern[i], pattern[j], lat) < 0.5, (k, seed, i, j)


def test_default_transition_and_stationary():
    p = default_transition(4)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    assert np.all((np.diag(p) >= 0.8) & (np.diag(p) <= 0.9))
    off = p[~np.eye(4, dtype=bool)].reshape(4, 3)
    np.testing.assert_allclose(off, off[:, :1] * np.ones((1, 3)))  # spread evenly
    pi = stationary_distribution(p)
    np.testing.assert_allclose(pi @ p, pi, atol=1e-12)
    np.testing.assert_allclose(pi.sum(), 1.0)


def test_same_seed_same_field_other_seed_other_field():
    a, ta = planted_regimes(years=1, seed=5)
    b, tb = planted_regimes(years=1, seed=5)
    c, tc = planted_regimes(years=1, seed=6)
    np.testing.assert_array_equal(a["psl"].values, b["psl"].values)
    np.testing.assert_array_equal(ta["label"].values, tb["label"].values)
    assert not np.array_equal(a["psl"].values, c["psl"].values)
    assert not np.array_equal(ta["pattern"].values, tc["pattern"].values)


# --------------------------------------------------------------------------
# the Markov chain
# --------------------------------------------------------------------------


def _check_empirical_transition(labels, planted, k):
    """Empirical transition probabilities within 4 binomial standard errors.

    Given the number N_i of days in regime i (followed by another day), the
    count of i -> j transitions is binomial(N_i, p_ij), so the estimate
    n_ij / N_i has standard error sqrt(p_ij (1 - p_ij) / N_i). Each entry
    must lie within 4 of these (plus 1e-9 for entries with p = 0 or 1).
    """
    counts = np.zeros((k, k))
    np.add.at(counts, (labels[:-1] - 1, labels[1:] - 1), 1)
    rows = counts.sum(axis=1, keepdims=True)
    assert np.all(rows > 100)
    estimate = counts / rows
    stderr = np.sqrt(planted * (1 - planted) / rows)
    assert np.all(np.abs(estimate - planted) <= 4 * stderr + 1e-9), (estimate, planted)


def test_empirical_transition_default(default_pair):
    _, truth = default_pair
    _check_empirical_transition(truth["label"].values, truth["transition"].values, 4)
    np.testing.assert_allclose(truth["transition"].values, default_transition(4))


def test_empirical_transition_custom_matrix():
    planted = np.array([[0.7, 0.3, 0.0], [0.05, 0.85, 0.10], [0.2, 0.0, 0.8]])
    _, truth = planted_regimes(years=30, k=3, transition=planted, seed=3, lat=[40, 50], lon=[0, 10])
    _check_empirical_transition(truth["label"].values, planted, 3)
    np.testing.assert_allclose(truth["stationary"].values @ planted, truth["stationary"].values, atol=1e-12)


@pytest.mark.parametrize(
    "bad",
    [np.full((3, 3), 1 / 3), np.array([[0.5, 0.6, 0, 0]] * 4), -default_transition(4)],
)
def test_bad_transition_is_rejected(bad):
    with pytest.raises(ValueError):
        planted_regimes(years=1, k=4, transition=bad)


def test_bad_lag_is_rejected():
    with pytest.raises(ValueError):
        planted_regimes(years=1, noise_lag1=1.0)


# --------------------------------------------------------------------------
# calendars and the seasonal cycle
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "calendar, days, kind",
    [
        ("noleap", 3 * 365, cftime.DatetimeNoLeap),
        ("360_day", 3 * 360, cftime.Datetime360Day),
        ("all_leap", 3 * 366, cftime.DatetimeAllLeap),
        ("julian", 3 * 365 + 1, cftime.DatetimeJulian),  # 1984 is a leap year
        ("standard", 3 * 365 + 1, np.datetime64),
    ],
)
def test_calendars(calendar, days, kind):
    data, truth = planted_regimes(years=3, start="1982-01-01", calendar=calendar, lat=[45, 50, 55], lon=[0, 5])
    assert data.sizes["time"] == days
    assert isinstance(data["time"].values[0], kind)
    assert truth["label"].sizes["time"] == days
    doy = data["time"].dt.dayofyear
    assert int(doy.max()) == {"360_day": 360, "noleap": 365, "all_leap": 366}.get(calendar, 366)


def test_seasonal_cycle_is_one_removable_harmonic():
    data, _ = planted_regimes(years=4, calendar="noleap", amplitude=0.0, noise=0.0, seasonal=800.0)
    x = data["psl"].values.astype(float) - 101000.0
    assert np.abs(x).max() == pytest.approx(800.0, rel=0.01)
    frac = (data["time"].dt.dayofyear.values - 0.5) / 365.0
    design = np.column_stack([np.ones_like(frac), np.cos(2 * np.pi * frac), np.sin(2 * np.pi * frac)])
    coef, *_ = np.linalg.lstsq(design, x.reshape(len(frac), -1), rcond=None)
    residual = x.reshape(len(frac), -1) - design @ coef
    assert np.abs(residual).max() < 0.1  # Pa; float32 rounding only
    # the amplitude varies in space
    amp = np.hypot(coef[1], coef[2])
    assert amp.max() > 2 * amp.min()


# --------------------------------------------------------------------------
# the noise
# --------------------------------------------------------------------------


def test_noise_statistics():
    data, truth = planted_regimes(years=20, seasonal=0.0, seed=4)
    residual = data["psl"].values - 101000.0 - truth["pattern"].values[truth["label"].values - 1]
    assert residual.std() == pytest.approx(300.0, rel=0.05)
    point_std = residual.std(axis=0)
    assert point_std.min() > 0.85 * 300 and point_std.max() < 1.15 * 300
    lag1 = np.mean(
        [np.corrcoef(residual[:-1, i, j], residual[1:, i, j])[0, 1] for i in (0, 6, 12) for j in (0, 12, 24)]
    )
    assert lag1 == pytest.approx(0.6, abs=0.05)
    # spatially smooth: neighbours (5 degrees apart) strongly correlated, far points not
    assert np.corrcoef(residual[:, 6, 10], residual[:, 6, 11])[0, 1] > 0.85
    assert abs(np.corrcoef(residual[:, 0, 0], residual[:, 12, 24])[0, 1]) < 0.1


# --------------------------------------------------------------------------
# writing
# --------------------------------------------------------------------------


def test_packing_round_trip(tmp_path):
    data, truth = planted_regimes(years=2, seed=1)
    path = tmp_path / "packed.nc"
    write_netcdf(data, path, pack=True)
    with xr.open_dataset(path) as back:
        enc = back["psl"].encoding
        assert enc["dtype"] == np.int16
        assert enc["zlib"] is True
        scale = float(enc["scale_factor"])
        error = np.abs(back["psl"].values - data["psl"].values.astype(float))
        assert error.max() <= scale / 2 * (1 + 1e-9)
        assert back["psl"].attrs["units"] == "Pa"
        assert back.attrs["Conventions"] == "CF-1.8"
        np.testing.assert_array_equal(back["time"].values, data["time"].values)
    # the planted truth written unpacked comes back exactly
    truth_path = tmp_path / "truth.nc"
    write_netcdf(truth, truth_path)
    with xr.open_dataset(truth_path) as back:
        np.testing.assert_array_equal(back["label"].values, truth["label"].values)
        np.testing.assert_array_equal(back["pattern"].values, truth["pattern"].values)


def test_packing_keeps_missing_values_and_cftime(tmp_path):
    data, _ = planted_regimes(years=1, calendar="360_day", lat=[40, 45, 50], lon=[0, 5, 10])
    data["psl"][3, 1, 1] = np.nan
    path = tmp_path / "gaps.nc"
    write_netcdf(data, path, pack=True)
    with xr.open_dataset(path) as back:
        assert np.isnan(back["psl"].values[3, 1, 1])
        assert int(np.isnan(back["psl"].values).sum()) == 1
        assert back["time"].encoding["calendar"] == "360_day"
        assert back.sizes["time"] == 360


# --------------------------------------------------------------------------
# the planted regimes can be found again
# --------------------------------------------------------------------------


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_planted_regimes_are_recoverable(seed):
    data, truth = _default_field(seed)
    psl = data["psl"]
    doy = psl["time"].dt.dayofyear
    anomaly = (psl.groupby(doy) - psl.groupby(doy).mean("time")).values
    weight = np.sqrt(np.cos(np.deg2rad(data["lat"].values)))[:, None]
    x = (anomaly * weight).reshape(anomaly.shape[0], -1)
    scores = PCA(n_components=10).fit_transform(x)
    found = KMeans(n_clusters=4, n_init=10, random_state=0).fit_predict(scores)
    assert adjusted_rand_score(truth["label"].values, found) >= 0.95
    # ...and the field is not trivial: the noise (300 Pa) is well over half
    # the size of the regime signal (about 440..490 Pa for these seeds)
    signal = truth["pattern"].values[truth["label"].values - 1]
    signal_std = np.sqrt(np.var(signal, axis=0).mean())
    assert 300.0 / signal_std > 0.55


@settings(max_examples=10, deadline=None)
@given(
    k=st.integers(1, 5),
    years=st.integers(1, 2),
    seed=st.integers(0, 2**31 - 1),
    calendar=st.sampled_from(["standard", "noleap", "360_day"]),
)
def test_any_small_configuration_is_consistent(k, years, seed, calendar):
    data, truth = planted_regimes(years=years, k=k, seed=seed, calendar=calendar, lat=[30, 40, 50, 60], lon=[-20, -10, 0, 10, 20])
    labels = truth["label"].values
    assert labels.min() >= 1 and labels.max() <= k
    assert data["psl"].shape == (truth.sizes["time"], 4, 5)
    assert np.all(np.isfinite(data["psl"].values))
    np.testing.assert_allclose(truth["transition"].values.sum(axis=1), 1.0)
