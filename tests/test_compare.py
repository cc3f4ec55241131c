"""regimes compare: matching two regime sets one to one (planted truth, definitions, scipy as the assignment solver)."""

from __future__ import annotations

import itertools
import logging

import numpy as np
import pytest
import xarray as xr

from regimes import cli, compare, config, pipeline, synthetic
from regimes.errors import UserError

LAT = np.arange(30.0, 71.0, 5.0)
LON = np.arange(-60.0, 21.0, 5.0)
JOB = """
[data]
paths = ["{path}"]
variable = "psl"
period = {period}
[eof]
modes = 5
[regimes]
k = 3
restarts = 10
[output]
dir = "{out}"
"""


@pytest.fixture(scope="module")
def halves(tmp_path_factory):
    """Eight years with three planted regimes, fitted separately on the first and the last four."""
    folder = tmp_path_factory.mktemp("compare")
    data, truth = synthetic.planted_regimes(years=8, lat=LAT, lon=LON, k=3, seed=11)
    synthetic.write_netcdf(data, folder / "field.nc")
    outs = []
    for name, period in (("first", '["1981-01-01", "1984-12-31"]'), ("second", '["1985-01-01", "1988-12-31"]')):
        path = folder / f"{name}.toml"
        path.write_text(JOB.format(path=folder / "field.nc", period=period, out=name))
        cfg, text = config.load(path)
        outs.append(pipeline.run(cfg, text))
    return truth, outs


def compare_cli(a, b, out, capsys):
    status = cli.main(["--quiet", "compare", str(a), str(b), "--output", str(out)])
    captured = capsys.readouterr()
    return status, captured.out, captured.err.splitlines()


def planted_of(truth, run):
    """Planted regime of each regime of a run (majority vote over its days)."""
    with xr.open_dataset(run / "labels.nc") as labels:
        t = truth["label"].sel(time=labels["time"]).values
        est = labels["label"].values
    return {r: int(np.bincount(t[est == r]).argmax()) for r in np.unique(est)}


def test_a_run_compared_with_itself(halves, tmp_path, capsys):
    _, (first, _) = halves
    status, out, err = compare_cli(first, first, tmp_path / "same", capsys)
    assert status == 0, err
    ds = xr.open_dataset(tmp_path / "same" / "comparison.nc")
    np.testing.assert_array_equal(ds["matched_regime_a"].values, ds["matched_regime_b"].values)
    np.testing.assert_allclose(ds["pattern_correlation"].values, 1.0, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(ds["pattern_rmse"].values, 0.0)
    np.testing.assert_array_equal(ds["frequency_difference"].values, 0.0)
    np.testing.assert_array_equal(ds["mean_duration_difference"].values, 0.0)
    assert len([line for line in out.splitlines() if line.strip().startswith(("1 ", "2 ", "3 "))]) == 3
    from PIL import Image

    with Image.open(tmp_path / "same" / "comparison.png") as picture:
        assert picture.format == "PNG" and picture.size[0] > 500


def test_a_failed_figure_write_leaves_no_table_either(halves, tmp_path, capsys, monkeypatch):
    # the table and the figure are renamed together: when writing one fails, neither is left
    _, (first, second) = halves
    real = type(tmp_path).write_bytes

    def full_disk(path, data):
        if path.name.startswith(".comparison.png"):
            raise OSError(28, "No space left on device")
        return real(path, data)

    monkeypatch.setattr(type(tmp_path), "write_bytes", full_disk)
    status, _, err = compare_cli(first, second, tmp_path / "out", capsys)
    assert status == 2 and err[-1].startswith("regimes: error: cannot write ") and "comparison.png': the disk is full" in err[-1]
    assert not (tmp_path / "out").exists()


def test_fits_on_the_two_halves_match_every_planted_regime(halves, tmp_path, capsys):
    truth, (first, second) = halves
    status, _, err = compare_cli(first, second, tmp_path / "halves", capsys)
    assert status == 0, err
    ds = xr.open_dataset(tmp_path / "halves" / "comparison.nc")
    assert np.all(ds["pattern_correlation"].values >= 0.9)  # the target (planted truth)
    in_first, in_second = planted_of(truth, first), planted_of(truth, second)
    pairs = [(in_first[int(a)], in_second[int(b)]) for a, b in zip(ds["matched_regime_a"].values, ds["matched_regime_b"].values)]
    assert all(p == q for p, q in pairs) and sorted(p for p, _ in pairs) == [1, 2, 3]


def test_a_model_compared_with_itself_and_with_its_run(halves, tmp_path, capsys):
    _, (first, _) = halves
    status, _, err = compare_cli(first / "model.nc", first / "model.nc", tmp_path / "model", capsys)
    assert status == 0, err
    ds = xr.open_dataset(tmp_path / "model" / "comparison.nc")
    np.testing.assert_allclose(ds["pattern_correlation"].values, 1.0, atol=1e-12)
    np.testing.assert_array_equal(ds["frequency_difference"].values, 0.0)
    status, _, err = compare_cli(first, first / "model.nc", tmp_path / "run_model", capsys)
    assert status == 0, err
    ds = xr.open_dataset(tmp_path / "run_model" / "comparison.nc")
    # the model's patterns are the composites seen through 5 EOFs: close, not equal
    assert np.all(ds["pattern_correlation"].values > 0.95)
    np.testing.assert_array_equal(ds["matched_regime_a"].values, ds["matched_regime_b"].values)
    np.testing.assert_allclose(ds["frequency_difference"].values, 0.0, atol=1e-12)


def regime_set(patterns, frequency=None, units="Pa", source="x"):
    k = patterns.sizes["regime"]
    return compare.RegimeSet(
        source=source, kind="run", patterns=patterns.assign_coords(regime=np.arange(1, k + 1)),
        frequency=np.full(k, 1.0 / k) if frequency is None else frequency, mean_duration=np.arange(1.0, k + 1), duration_units="days",
        names=[f"r{i}" for i in range(1, k + 1)], units=units, inputs=[],
    )


@pytest.fixture(scope="module")
def patterns():
    _, truth = synthetic.planted_regimes(years=1, lat=LAT, lon=LON, k=4, seed=2)
    return truth["pattern"].astype(np.float64)


def test_weighted_correlation_and_rmse_follow_their_definitions(patterns):
    a, b = patterns.isel(regime=[0]), patterns.isel(regime=[1])
    corr, rmse = compare.scores(a, b)
    w = np.cos(np.deg2rad(LAT))[:, None] * np.ones(LON.size)
    x, y = a.values[0], b.values[0]
    # uncentred area-weighted correlation and weighted RMSE, written out (definitions)
    assert corr[0, 0] == pytest.approx((w * x * y).sum() / np.sqrt((w * x * x).sum() * (w * y * y).sum()), rel=1e-12)
    assert rmse[0, 0] == pytest.approx(np.sqrt((w * (x - y) ** 2).sum() / w.sum()), rel=1e-12)
    # numpy's weighted moments agree: with zero-mean maps the uncentred correlation is Pearson's
    xc, yc = x - np.average(x, weights=w), y - np.average(y, weights=w)
    centred, _ = compare.scores(a.copy(data=xc[None]), b.copy(data=yc[None]))
    cov = np.cov(np.stack([xc.ravel(), yc.ravel()]), aweights=w.ravel())
    assert centred[0, 0] == pytest.approx(cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]), rel=1e-10)


def test_matching_is_the_best_one_to_one_assignment(patterns):
    rng = np.random.default_rng(0)
    a = regime_set(patterns.isel(regime=[0, 1, 2]))
    order = [3, 1, 0, 2]
    noisy = patterns.isel(regime=order) + rng.normal(0, 300.0, patterns.isel(regime=order).shape)
    b = regime_set(noisy, frequency=np.array([0.1, 0.2, 0.3, 0.4]))
    ds = compare.compare(a, b)
    corr = ds["correlation"].values
    # brute force over every one-to-one assignment of A's three regimes to B's four (definition of the optimum)
    best = max(itertools.permutations(range(4), 3), key=lambda cols: sum(corr[i, j] for i, j in enumerate(cols)))
    np.testing.assert_array_equal(ds["matched_regime_b"].values - 1, best)
    # planted: A's regime i is B's regime at the position of i in `order`
    np.testing.assert_array_equal(ds["matched_regime_b"].values, [order.index(i) + 1 for i in range(3)])
    np.testing.assert_allclose(ds["frequency_difference"].values, np.array([0.1, 0.2, 0.3, 0.4])[list(best)] - 1 / 3)
    assert "unmatched regimes of B: 1" in compare.table(ds)


def test_another_grid_and_units_are_brought_to_set_a(patterns, caplog):
    fine = patterns.interp(lat=np.arange(30.0, 70.1, 2.5), lon=np.arange(-60.0, 20.1, 2.5))  # xarray's bilinear interpolation
    a = regime_set(fine)
    with caplog.at_level(logging.WARNING, logger="regimes"):
        ds = compare.compare(a, regime_set(patterns / 100.0, units="hPa"))
    assert any("interpolating" in r.getMessage() for r in caplog.records)
    np.testing.assert_array_equal(ds["matched_regime_b"].values, [1, 2, 3, 4])
    # B put on A's 2.5-degree grid equals xarray's interpolation, in Pa: 1 hPa = 100 Pa (SI brochure)
    np.testing.assert_allclose(ds["pattern_b"].values, fine.values, rtol=1e-6, atol=1e-3)
    np.testing.assert_allclose(ds["pattern_correlation"].values, 1.0, atol=1e-9)
    with pytest.raises(UserError, match="cannot be converted"):
        compare.compare(a, regime_set(patterns, units="K"))
    with pytest.raises(UserError, match="latitudes"):
        compare.compare(a, regime_set(patterns.sel(lat=slice(40, 60))))


def test_not_a_regime_set_is_refused_in_one_line(halves, tmp_path, capsys):
    _, (first, _) = halves
    empty = tmp_path / "empty"
    empty.mkdir()
    status, _, err = compare_cli(first, empty, tmp_path / "out", capsys)
    assert status == 2 and len(err) == 1 and "composites.nc" in err[0], err
    broken = tmp_path / "model.nc"
    broken.write_bytes((first / "model.nc").read_bytes()[:2000])
    status, _, err = compare_cli(first, broken, tmp_path / "out", capsys)
    assert status == 2 and len(err) == 1 and "model.nc" in err[0], err
    assert not (tmp_path / "out").exists()
