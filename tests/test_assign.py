"""regimes assign: classifying other data with a saved model (planted-truth data and outside references)."""

from __future__ import annotations

import logging

import numpy as np
import pytest
import xarray as xr

from regimes import cli, config, output, pipeline, results, synthetic
from regimes.model import RegimeModel

LAT = np.arange(30.0, 61.0, 1.0)  # a 1-degree grid
LON = np.arange(-40.0, 11.0, 1.0)
COARSE_LAT = np.arange(30.0, 60.1, 2.5)
COARSE_LON = np.arange(-40.0, 10.1, 2.5)
JOB = """
[data]
paths = ["{path}"]
variable = "psl"
months = [12, 1, 2]
[eof]
modes = 4
[regimes]
k = 3
restarts = 5
seed = 3
{extra}
[output]
dir = "{out}"
"""


def run_job(folder, path, out, extra=""):
    cfg_path = folder / f"{out}.toml"
    cfg_path.write_text(JOB.format(path=path, out=out, extra=extra))
    cfg, text = config.load(cfg_path)
    return pipeline.run(cfg, text)


def assign_cli(*args, capsys=None):
    """``regimes assign`` through the command line's entry point; returns (exit status, stderr lines)."""
    status = cli.main(["--quiet", "assign", *map(str, args)])
    err = capsys.readouterr().err.splitlines() if capsys is not None else []
    return status, err


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """Four years of daily fields with three planted regimes on a 1-degree grid, and a 1-degree run (DJF) on them."""
    folder = tmp_path_factory.mktemp("assign")
    data, truth = synthetic.planted_regimes(years=4, lat=LAT, lon=LON, k=3, seed=4)
    synthetic.write_netcdf(data, folder / "fine.nc")
    out = run_job(folder, folder / "fine.nc", "fit")
    return folder, data, truth, out


def labels_of(folder):
    with xr.open_dataset(folder / "labels.nc") as ds:
        return ds.load()


def matched_truth(truth, labels):
    """Planted regime of each estimated regime (majority vote)."""
    t = truth["label"].sel(time=labels["time"]).values
    return {r: int(np.bincount(t[labels["label"].values == r]).argmax()) for r in np.unique(labels["label"].values)}


def test_assigning_the_fitting_data_reproduces_the_run(planted, tmp_path, capsys):
    folder, _, _, fit = planted
    status, err = assign_cli(fit / "model.nc", folder / "fine.nc", "--output", tmp_path / "again", capsys=capsys)
    assert status == 0, err
    run, again = labels_of(fit), labels_of(tmp_path / "again")
    np.testing.assert_array_equal(again["label"].values, run["label"].values)
    np.testing.assert_array_equal(again["pc"].values, run["pc"].values)
    for name in ("composites.nc", "statistics.nc"):
        with xr.open_dataset(fit / name) as a, xr.open_dataset(tmp_path / "again" / name) as b:
            for var in a.data_vars:
                np.testing.assert_array_equal(a[var].values, b[var].values, err_msg=f"{name}:{var}")
    assert {p.name for p in (tmp_path / "again").glob("*.nc")} == set(output.ASSIGN_FILES)  # figures and report beside them
    assert again.attrs["climatology_source"] == "model"
    assert again.attrs["model_checksum"] == RegimeModel.load(fit / "model.nc").dataset.attrs["model_checksum"]


@pytest.mark.parametrize("method", ["kmeans", "gaussian-mixture"])
def test_model_saved_and_reloaded_classifies_identically(planted, tmp_path, method):
    folder, _, _, _ = planted
    path = tmp_path / "job.toml"
    job = JOB.format(path=folder / "fine.nc", out="unused", extra=f'method = "{method}"').replace("[eof]", 'period = ["1981-01-01", "1982-12-31"]\n[eof]')
    path.write_text(job.replace("restarts = 5", "restarts = 2") if method == "gaussian-mixture" else job)
    cfg, _ = config.load(path)
    prep = pipeline.prepare(cfg)
    found = pipeline.analyse(cfg, prep)
    files = results.assemble(cfg, prep, found, {"Conventions": "CF-1.8"}, ("model.nc",))
    from regimes import output

    output.write(files["model.nc"], tmp_path / "model.nc")
    model = RegimeModel.load(tmp_path / "model.nc")
    pcs = model.eof(model.layout()).transform(prep.anomaly).compute()
    np.testing.assert_array_equal(pcs.values, found["pcs"].values)
    reloaded = model.clusterer()
    np.testing.assert_array_equal(reloaded.predict(pcs).values, found["clusterer"].labels_.values)
    if method == "kmeans":
        np.testing.assert_array_equal(reloaded.distances(pcs).values, found["clusterer"].distances(found["pcs"]).values)
    else:
        np.testing.assert_array_equal(reloaded.probabilities(pcs).values, found["clusterer"].probabilities(found["pcs"]).values)


def test_data_on_a_coarser_grid_are_interpolated(planted, tmp_path, capsys, caplog):
    folder, data, _, fit = planted
    # the reference interpolation to 2.5 degrees is xarray's own (linear in latitude and longitude)
    coarse = data.interp(lat=COARSE_LAT, lon=COARSE_LON)
    coarse["psl"].attrs = data["psl"].attrs
    synthetic.write_netcdf(coarse, tmp_path / "coarse.nc")
    with caplog.at_level(logging.WARNING, logger="regimes"):
        status, err = assign_cli(fit / "model.nc", tmp_path / "coarse.nc", "--output", tmp_path / "out", capsys=capsys)
    assert status == 0, err
    warning = " ".join(r.getMessage() for r in caplog.records if "interpolating" in r.getMessage())
    assert "13 x 21 points, 2.5 x 2.5 degrees" in warning and "31 x 51 points, 1 x 1 degrees" in warning
    same = np.mean(labels_of(tmp_path / "out")["label"].values == labels_of(fit)["label"].values)
    assert same >= 0.95  # the target (planted truth)


def test_an_ensemble_gives_member_fractions_that_peak_on_the_planted_regime(planted, tmp_path, capsys):
    folder, data, truth, fit = planted
    winter = data.sel(time=slice("1982-12-01", "1983-02-28"))
    members = []
    for i in range(5):
        # independent red noise of 900 Pa for each member (the planted field with no regimes and no annual cycle),
        # enough to put about one member-day in nine into another regime
        noise, _ = synthetic.planted_regimes(years=1, start="1982-12-01", lat=LAT, lon=LON, k=1, amplitude=0.0, seasonal=0.0, noise=900.0, seed=50 + i)
        noise = noise["psl"].sel(time=winter["time"]) - synthetic.BACKGROUND_PA
        members.append(winter["psl"] + noise.values)
    ensemble = xr.concat(members, "r").assign_coords(r=("r", np.arange(1, 6, dtype=np.int32), {"standard_name": "realization", "units": "1"}))
    synthetic.write_netcdf(xr.Dataset({"psl": ensemble.transpose("r", "time", "lat", "lon")}, attrs=data.attrs), tmp_path / "ensemble.nc")
    status, err = assign_cli(fit / "model.nc", tmp_path / "ensemble.nc", "--output", tmp_path / "out", capsys=capsys)
    assert status == 0, err
    labels = labels_of(tmp_path / "out")
    assert labels["label"].dims == ("member", "time") and labels.sizes["member"] == 5
    fraction = labels["member_fraction"]
    np.testing.assert_allclose(fraction.sum("regime").values, 1.0)
    # the member fraction of a regime is the share of members labelled with it (definition)
    np.testing.assert_allclose(fraction.sel(regime=2).values, (labels["label"] == 2).mean("member").values)
    to_planted = matched_truth(truth, labels_of(fit))
    planted_regime = truth["label"].sel(time=labels["time"]).values
    peak = np.array([to_planted[r] for r in fraction.argmax("regime").values + 1])
    single = np.vectorize(to_planted.get)(labels["label"].values) == planted_regime[None, :]
    assert single.mean() < 0.97  # the noise does move members out of the planted regime
    assert np.mean(peak == planted_regime) >= 0.95  # planted truth
    assert np.mean(peak == planted_regime) > single.mean()  # the members' consensus beats a single member
    stats = xr.open_dataset(tmp_path / "out" / "statistics.nc")
    # no transition is counted across members or winters: steps = member-days - segments of every member
    assert int(stats["transition_count"].sum()) == labels["label"].size - 5 * int(labels["segment_start"].sum())
    assert set(np.unique(stats["episode_member"].values)) == {1, 2, 3, 4, 5}


def test_units_are_converted_hpa_to_pa(planted, tmp_path, capsys):
    folder, data, _, fit = planted
    hpa = data.copy()
    hpa["psl"] = data["psl"] / 100.0
    hpa["psl"].attrs = {**data["psl"].attrs, "units": "hPa"}
    synthetic.write_netcdf(hpa, tmp_path / "hpa.nc")
    status, err = assign_cli(fit / "model.nc", tmp_path / "hpa.nc", "--output", tmp_path / "out", capsys=capsys)
    assert status == 0, err
    # 1 hPa = 100 Pa (SI brochure); float32 rounding of the division may move a day sitting on a boundary, nothing more
    assert np.mean(labels_of(tmp_path / "out")["label"].values == labels_of(fit)["label"].values) >= 0.995


def test_own_climatology_is_recorded(planted, tmp_path, capsys):
    folder, data, _, fit = planted
    shifted = data.copy()
    shifted["psl"] = data["psl"] + 500.0  # a uniformly biased model: its own climatology removes the bias
    synthetic.write_netcdf(shifted, tmp_path / "biased.nc")
    status, err = assign_cli(fit / "model.nc", tmp_path / "biased.nc", "--own-climatology", "--output", tmp_path / "own", capsys=capsys)
    assert status == 0, err
    own = labels_of(tmp_path / "own")
    assert own.attrs["climatology_source"] == "own" and "fitted on these data" in own.attrs["climatology_comment"]
    # the least-squares climatology of (field + 500) is the climatology of the field + 500, so the anomalies and labels are unchanged
    assert np.mean(own["label"].values == labels_of(fit)["label"].values) >= 0.995


def bad_file(kind, data, path):
    ds = data.isel(time=slice(0, 400))
    if kind == "kelvin":
        ds = ds.copy()
        ds["psl"].attrs = {**ds["psl"].attrs, "units": "K", "standard_name": "air_temperature"}
    elif kind == "small region":
        ds = ds.sel(lat=slice(40, 60))
    elif kind == "levels":
        ds = xr.concat([ds["psl"], ds["psl"]], "plev").assign_coords(
            plev=("plev", [850.0, 500.0], {"units": "hPa", "positive": "down", "standard_name": "air_pressure"})
        ).to_dataset().transpose("time", "plev", "lat", "lon")
    elif kind == "curvilinear":
        lon2, lat2 = np.meshgrid(ds["lon"].values, ds["lat"].values)
        ds = xr.Dataset(
            {"psl": (("time", "y", "x"), ds["psl"].values, ds["psl"].attrs)},
            coords={
                "time": ds["time"],
                "latitude": (("y", "x"), lat2, {"standard_name": "latitude", "units": "degrees_north"}),
                "longitude": (("y", "x"), lon2, {"standard_name": "longitude", "units": "degrees_east"}),
            },
        )
    synthetic.write_netcdf(ds, path)
    return path


@pytest.mark.parametrize(
    "kind, words",
    [("kelvin", ["'K'", "'Pa'", "cannot be converted"]), ("small region", ["latitudes", "40", "30"]), ("levels", ["vertical"]), ("curvilinear", ["latitude-longitude"])],
)
def test_mismatched_data_are_refused_in_one_line(planted, tmp_path, capsys, kind, words):
    folder, data, _, fit = planted
    path = bad_file(kind, data, tmp_path / f"{kind.replace(' ', '_')}.nc")
    status, err = assign_cli(fit / "model.nc", path, "--output", tmp_path / "out", capsys=capsys)
    assert status == 2 and len(err) == 1 and err[0].startswith("regimes: error:"), err
    for word in words:
        assert word in err[0], err[0]
    assert not (tmp_path / "out").exists()


def damaged_model(kind, source, path):
    content = bytearray(source.read_bytes())
    if kind == "truncated":
        content = content[: len(content) // 2]
    elif kind == "corrupt":
        middle = len(content) // 2
        content[middle : middle + 64] = bytes(64)
    path.write_bytes(bytes(content))
    if kind == "edited":
        with xr.open_dataset(source) as ds:
            ds = ds.load()
        ds["centroid"] = ds["centroid"] * 1.01  # the stored checksum no longer fits the arrays
        ds.to_netcdf(path)
    return path


@pytest.mark.parametrize("kind", ["truncated", "corrupt", "edited"])
def test_damaged_model_file_is_refused_in_one_line(planted, tmp_path, capsys, kind):
    folder, _, _, fit = planted
    model = damaged_model(kind, fit / "model.nc", tmp_path / "model.nc")
    status, err = assign_cli(model, folder / "fine.nc", "--output", tmp_path / "out", capsys=capsys)
    assert status == 2 and len(err) == 1 and err[0].startswith("regimes: error:"), err
    assert "model.nc" in err[0]
    assert not (tmp_path / "out").exists()


def test_damaged_model_file_through_the_console_entry_point(planted, tmp_path):
    import subprocess
    import sys

    folder, _, _, fit = planted
    model = damaged_model("truncated", fit / "model.nc", tmp_path / "model.nc")
    done = subprocess.run([sys.executable, "-m", "regimes", "assign", str(model), str(folder / "fine.nc")], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2 and len(done.stderr.splitlines()) == 1 and done.stderr.startswith("regimes: error:"), done.stderr


def test_a_config_that_contradicts_the_model_is_refused(planted, tmp_path, capsys):
    folder, _, _, fit = planted
    path = tmp_path / "assign.toml"
    path.write_text('[data]\nlat = [35.0, 55.0]\n[eof]\nmodes = 9\n')  # eof.modes only shapes a fit and is ignored
    status, err = assign_cli(fit / "model.nc", folder / "fine.nc", "--config", path, "--output", tmp_path / "out", capsys=capsys)
    assert status == 2 and len(err) == 1 and "data.lat" in err[0], err
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------
# the 'unassigned' class, in run and in assign
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def with_unassigned(planted):
    folder, _, _, _ = planted
    return run_job(folder, folder / "fine.nc", "partial", extra="unassigned_below = 0.6")


def test_unassigned_days_are_those_below_the_threshold(planted, with_unassigned):
    _, _, _, fit = planted
    labels, plain = labels_of(with_unassigned), labels_of(fit)
    label = labels["label"].values
    assert 0 < np.mean(label == 0) < 0.5
    # where assigned, the regime is the one of the run without a threshold (same fit, same seed)
    np.testing.assert_array_equal(label[label > 0], plain["label"].values[label > 0])
    # reference: numpy correlation of the two maps on the grid, in the area-weighted space of the retained EOFs
    model = xr.open_dataset(with_unassigned / "model.nc")
    eof = model["eof"].fillna(0).values.reshape(model.sizes["mode"], -1)
    day_maps = labels["pc"].values.T @ eof
    centroid_maps = model["centroid"].values @ eof
    nearest = plain["label"].values - 1
    mine = centroid_maps[nearest]
    r = (day_maps * mine).sum(1) / np.sqrt((day_maps**2).sum(1) * (mine**2).sum(1))  # uncentred correlation (definition)
    np.testing.assert_allclose(labels["pattern_correlation"].values, r, atol=1e-5)
    np.testing.assert_array_equal(label == 0, r < 0.6)
    assert list(labels["label"].attrs["flag_values"]) == [0, 1, 2, 3]
    assert labels["label"].attrs["flag_meanings"].split()[0] == "unassigned"


def test_unassigned_is_a_state_of_its_own_in_the_statistics(with_unassigned):
    labels = labels_of(with_unassigned)
    stats = xr.open_dataset(with_unassigned / "statistics.nc")
    label = labels["label"].values
    assert list(stats["regime"].values) == [0, 1, 2, 3] and str(stats["regime_name"].sel(regime=0).item()) == "unassigned"
    assert float(stats["frequency"].sel(regime=0)) == pytest.approx(np.mean(label == 0))
    assert float(stats["frequency"].sum()) == pytest.approx(1.0)
    # reference: consecutive pairs within segments counted with numpy
    expected = np.zeros((4, 4), dtype=int)
    start = labels["segment_start"].values.astype(bool)
    step = ~start[1:]
    np.add.at(expected, (label[:-1][step], label[1:][step]), 1)
    np.testing.assert_array_equal(stats["transition_count"].values, expected)
    comp = xr.open_dataset(with_unassigned / "composites.nc")
    assert list(comp["regime"].values) == [1, 2, 3]
    assert int(comp["day_count"].sum()) == int((label > 0).sum())


def test_without_threshold_there_is_no_unassigned_state(planted):
    _, _, _, fit = planted
    labels = labels_of(fit)
    assert list(labels["label"].attrs["flag_values"]) == [1, 2, 3] and "pattern_correlation" not in labels
    assert list(xr.open_dataset(fit / "statistics.nc")["regime"].values) == [1, 2, 3]


def test_assign_takes_the_threshold_from_the_model(planted, with_unassigned, tmp_path, capsys):
    folder, _, _, _ = planted
    status, err = assign_cli(with_unassigned / "model.nc", folder / "fine.nc", "--output", tmp_path / "out", capsys=capsys)
    assert status == 0, err
    np.testing.assert_array_equal(labels_of(tmp_path / "out")["label"].values, labels_of(with_unassigned)["label"].values)
    path = tmp_path / "looser.toml"
    path.write_text("[regimes]\nunassigned_below = 0.2\n")
    status, err = assign_cli(with_unassigned / "model.nc", folder / "fine.nc", "--config", path, "--output", tmp_path / "looser", capsys=capsys)
    assert status == 0, err
    assert np.sum(labels_of(tmp_path / "looser")["label"].values == 0) < np.sum(labels_of(with_unassigned)["label"].values == 0)


def test_the_run_folder_is_not_overwritten_by_an_assignment(planted, capsys):
    folder, _, _, fit = planted
    before = {p.name: p.read_bytes() for p in fit.iterdir()}
    status, err = assign_cli(fit / "model.nc", folder / "fine.nc", "--output", fit, "--overwrite", capsys=capsys)
    assert status == 2 and len(err) == 1 and "model.nc" in err[0], err
    assert {p.name: p.read_bytes() for p in fit.iterdir()} == before
