"""The whole job on planted-truth data (invented fields with known regimes)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from sklearn.metrics import adjusted_rand_score

from regimes import config, pipeline, synthetic
from regimes.model import RegimeModel

LAT = np.arange(25.0, 76.0, 5.0)
LON = np.arange(-80.0, 21.0, 5.0)


def write_config(folder, body: str):
    path = folder / "job.toml"
    path.write_text(body)
    return config.load(path)


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """Twelve years of daily fields with four planted regimes, written packed to NetCDF."""
    folder = tmp_path_factory.mktemp("planted")
    data, truth = synthetic.planted_regimes(years=12, lat=LAT, lon=LON, k=4, seed=3)
    synthetic.write_netcdf(data, folder / "field.nc", pack=True)
    return folder, truth


@pytest.fixture(scope="module")
def full_year_run(planted):
    folder, truth = planted
    cfg, text = write_config(
        folder,
        """
[data]
paths = ["field.nc"]
variable = "psl"
[eof]
modes = 8
[regimes]
k = 4
restarts = 20
seed = 7
[figures]
draw = false
[output]
dir = "out-year"
""",
    )
    out = pipeline.run(cfg, text)
    return out, truth


def test_labels_recover_the_planted_regimes(full_year_run):
    out, truth = full_year_run
    labels = xr.open_dataset(out / "labels.nc")
    ari = adjusted_rand_score(truth["label"].sel(time=labels["time"]).values, labels["label"].values)
    assert ari >= 0.95  # planted truth; ARI as defined by Hubert & Arabie (1985), via scikit-learn


def _matched(truth, labels):
    """Planted regime matching each estimated regime (majority vote)."""
    t = truth["label"].sel(time=labels["time"]).values
    est = labels["label"].values
    return {r: int(np.bincount(t[est == r]).argmax()) for r in np.unique(est)}


def test_transitions_and_durations_match_the_planted_markov_chain(full_year_run):
    out, truth = full_year_run
    labels = xr.open_dataset(out / "labels.nc")
    stats = xr.open_dataset(out / "statistics.nc")
    match = _matched(truth, labels)
    assert sorted(match.values()) == [1, 2, 3, 4]
    planted = truth["transition"].values
    estimated = stats["transition_probability"].values
    counts = stats["transition_count"].sum("regime_to").values
    for i, a in match.items():
        for j, b in match.items():
            p = planted[a - 1, b - 1]
            # sampling error of a binomial proportion; 4 standard errors plus a margin for misclassified days
            tolerance = 4 * np.sqrt(p * (1 - p) / counts[i - 1]) + 0.02
            assert abs(estimated[i - 1, j - 1] - p) <= tolerance
        # mean time per visit of a first-order Markov chain: 1 / (1 - p_ii) (textbook; Wilks, Markov-chain chapter)
        expected = 1.0 / (1.0 - planted[a - 1, a - 1])
        n_episodes = int(stats["episode_count"].sel(regime=i))
        # geometric durations have sd ~ mean; allow 4 standard errors of the mean plus 10 %
        tolerance = 4 * expected / np.sqrt(n_episodes) + 0.1 * expected
        assert abs(float(stats["mean_duration"].sel(regime=i)) - expected) <= tolerance


def test_statistics_are_consistent(full_year_run):
    out, _ = full_year_run
    labels = xr.open_dataset(out / "labels.nc")
    stats = xr.open_dataset(out / "statistics.nc")
    assert float(stats["frequency"].sum()) == pytest.approx(1.0)
    assert int(stats["episode_length"].sum()) == labels.sizes["time"]
    rows = stats["transition_probability"].sum("regime_to").values
    np.testing.assert_allclose(rows, 1.0)
    # regimes are numbered most frequent first
    assert np.all(np.diff(stats["frequency"].values) <= 0)


def test_composites_show_the_planted_patterns(full_year_run):
    out, truth = full_year_run
    labels = xr.open_dataset(out / "labels.nc")
    comp = xr.open_dataset(out / "composites.nc")
    # the climatology absorbs the frequency-weighted mean of the patterns, so the expected
    # anomaly composite of a regime is its pattern minus that mean (planted truth)
    mean_pattern = (truth["pattern"] * truth["stationary"]).sum("regime")
    for r, planted in _matched(truth, labels).items():
        a = comp["anomaly_composite"].sel(regime=r).values.ravel()
        b = (truth["pattern"].sel(regime=planted) - mean_pattern).values.ravel()
        assert np.corrcoef(a, b)[0, 1] > 0.95
    assert int(comp["day_count"].sum()) == labels.sizes["time"]


def test_model_file_holds_what_assignment_needs(full_year_run):
    out, _ = full_year_run
    model = RegimeModel.load(out / "model.nc")
    ds = model.dataset
    for name in ("mask", "weight", "eof", "eof_mean", "centroid", "climatology"):
        assert name in ds
    assert model.settings["k"] == 4


def test_winter_season_and_land_mask(planted, tmp_path):
    """A DJF season with a fixed block of missing points: the points come back missing in every map."""
    folder, truth = planted
    data = xr.open_dataset(folder / "field.nc").load()
    data["psl"][:, 2:4, 3:6] = np.nan
    synthetic.write_netcdf(data, tmp_path / "masked.nc", pack=False)
    cfg, text = write_config(
        tmp_path,
        """
[data]
paths = ["masked.nc"]
variable = "psl"
months = [12, 1, 2]
[regimes]
k = 4
restarts = 10
[figures]
draw = false
[output]
dir = "out"
""",
    )
    out = pipeline.run(cfg, text)
    comp = xr.open_dataset(out / "composites.nc")
    eofs = xr.open_dataset(out / "eofs.nc")
    labels = xr.open_dataset(out / "labels.nc")
    assert comp["anomaly_composite"].isel(lat=slice(2, 4), lon=slice(3, 6)).isnull().all()
    assert eofs["eof"].isel(lat=slice(2, 4), lon=slice(3, 6)).isnull().all()
    assert int(comp["anomaly_composite"].isel(regime=0).isnull().sum()) == 6
    assert set(np.unique(labels["time"].dt.month.values)) == {12, 1, 2}
    # each winter labelled by the year it starts in: January 1990 belongs to winter 1989
    jan = labels["season_year"].where(labels["time"].dt.month == 1, drop=True)
    dec = labels["season_year"].where(labels["time"].dt.month == 12, drop=True)
    assert np.all(jan.values == labels["time"].where(labels["time"].dt.month == 1, drop=True).dt.year.values - 1)
    assert np.all(dec.values == labels["time"].where(labels["time"].dt.month == 12, drop=True).dt.year.values)
    # no transition is counted across the gap between two winters
    stats = xr.open_dataset(out / "statistics.nc")
    starts = int(labels["segment_start"].sum())
    assert int(stats["transition_count"].sum()) == labels.sizes["time"] - starts


OUTPUT_FILES = ("labels.nc", "composites.nc", "statistics.nc", "eofs.nc", "model.nc")


def same_attrs(a: dict, b: dict) -> bool:
    return a.keys() == b.keys() and all(np.array_equal(a[k], b[k]) for k in a)


def assert_identical_outputs(a, b, config_differs_in=None):
    """Every variable of every output file identical, value for value, with the same attributes.

    Only the global ``history`` attribute (it holds the time of the run) may
    differ, and in the ``config`` attribute the line ``config_differs_in``.
    """
    for name in OUTPUT_FILES:
        with xr.open_dataset(a / name, decode_times=False) as x, xr.open_dataset(b / name, decode_times=False) as y:
            assert set(x.variables) == set(y.variables), name
            for v in x.variables:
                assert x[v].dims == y[v].dims and same_attrs(x[v].attrs, y[v].attrs), f"{name}: {v}"
                np.testing.assert_array_equal(x[v].values, y[v].values, err_msg=f"{name}: {v}")
            keys = (set(x.attrs) | set(y.attrs)) - {"history", "config"}
            assert same_attrs({k: x.attrs.get(k) for k in keys}, {k: y.attrs.get(k) for k in keys}), name

            def kept(text):
                return [line for line in text.splitlines() if not (config_differs_in and line.startswith(config_differs_in))]

            assert kept(x.attrs["config"]) == kept(y.attrs["config"]), name


@pytest.mark.parametrize("method", ["kmeans", "gaussian-mixture"])
def test_same_seed_same_results_whatever_the_chunking(planted, tmp_path, method):
    """Two runs, and runs with other data.chunk_days, give identical labels and identical data in every file."""
    folder, _ = planted
    outputs = []
    for i, chunk in enumerate((90, 90, 1000)):
        cfg, text = write_config(
            tmp_path,
            f"""
[data]
paths = ["{folder / 'field.nc'}"]
variable = "psl"
months = [1, 2, 3]
chunk_days = {chunk}
[eof]
modes = 6
[regimes]
method = "{method}"
k = 3
restarts = 3
[figures]
draw = false
[output]
dir = "unused"
""",
        )
        outputs.append(pipeline.run(cfg, text, output_dir=str(tmp_path / f"run{i}")))
    assert_identical_outputs(outputs[0], outputs[1])
    for other in outputs[2:]:
        assert_identical_outputs(outputs[0], other, config_differs_in="chunk_days")


SMALL_JOB = """
[data]
paths = ["{name}.nc"]
variable = "psl"
[eof]
modes = 3
[regimes]
k = 2
restarts = 5
[figures]
draw = false
[output]
dir = "out-{name}"
"""
"""A small job on the file NAME.nc, writing into out-NAME."""


def write_monthly_means(data: xr.Dataset, path) -> xr.Dataset:
    """Monthly means of a daily field, with its attributes, written to ``path``."""
    monthly = data.resample(time="MS").mean()
    monthly.attrs = data.attrs
    monthly["psl"].attrs = data["psl"].attrs
    synthetic.write_netcdf(monthly, path)
    return monthly


def test_monthly_data_get_a_calendar_month_climatology(tmp_path):
    """With climatology = auto, monthly means are removed from monthly data (xarray groupby as the reference)."""
    data, _ = synthetic.planted_regimes(years=30, lat=LAT[::2], lon=LON[::2], k=2, seed=5)
    monthly = write_monthly_means(data, tmp_path / "monthly.nc")
    out = pipeline.run(*write_config(tmp_path, SMALL_JOB.format(name="monthly")))
    model = RegimeModel.load(out / "model.nc")
    assert model.settings["climatology"] == "monthly"
    # each regime's anomaly composite equals the mean, over its months, of the field minus its
    # calendar-month mean (xarray groupby is the reference)
    comp = xr.open_dataset(out / "composites.nc")
    labels = xr.open_dataset(out / "labels.nc")
    reference = (monthly["psl"].groupby("time.month") - monthly["psl"].groupby("time.month").mean()).drop_vars("month")
    for r in (1, 2):
        days = labels["time"].where(labels["label"] == r, drop=True)
        expected = reference.sel(time=days).mean("time")
        np.testing.assert_allclose(comp["anomaly_composite"].sel(regime=r).values, expected.values, atol=0.05)


def test_monthly_data_give_durations_in_months(tmp_path, caplog):
    # durations count time steps, so monthly data give them in months: in the files, the figure, the report table,
    # and a comparison with a daily set leaves the difference of durations missing
    from regimes import compare, figures, finished, report

    data, _ = synthetic.planted_regimes(years=20, lat=LAT[::2], lon=LON[::2], k=3, seed=5)
    write_monthly_means(data, tmp_path / "monthly.nc")
    synthetic.write_netcdf(data.sel(time=slice("1981", "1984")), tmp_path / "daily.nc")
    out = pipeline.run(*write_config(tmp_path, SMALL_JOB.format(name="monthly")))
    daily = pipeline.run(*write_config(tmp_path, SMALL_JOB.format(name="daily")))
    with xr.open_dataset(out / "statistics.nc") as st, xr.open_dataset(out / "model.nc") as model:
        assert st["mean_duration"].attrs["units"] == "months" and st["duration"].attrs["units"] == "months"
        assert model["mean_duration"].attrs["units"] == "months"
        assert st["transition_probability"].attrs["long_name"] == "probability of regime_to in the next month given regime_from"
    with xr.open_dataset(daily / "statistics.nc") as st:
        assert st["mean_duration"].attrs["units"] == "days"
    found = finished.open_folder(out)
    fig = figures.durations(found, config.validate_section("figures", {}))
    assert {ax.get_xlabel() for ax in fig.axes if ax.get_visible() and ax.get_xlabel()} == {"episode duration (months)"}
    assert "<th>mean mo</th>" in report.regime_table(found) and "<th>months</th>" in report.regime_table(found)
    both = compare.compare(compare.read(daily), compare.read(out))
    assert both["mean_duration_b"].attrs["units"] == "months" and both["mean_duration_a"].attrs["units"] == "days"
    assert np.isnan(both["mean_duration_difference"].values).all()
    assert any("set A counts durations in days and set B in months" in r.getMessage() for r in caplog.records)
