"""Tests of the number-of-regimes scan (regimes/scan.py) and of ``regimes scan``."""

from __future__ import annotations

import itertools
import subprocess
import sys

import numpy as np
import pytest
import xarray as xr

from regimes import config, pipeline, scan, synthetic
from regimes.eof import EOF

LAT = np.arange(30.0, 71.0, 10.0)
LON = np.arange(-40.0, 21.0, 10.0)
PLANTED_K = 3


# --------------------------------------------------------------------------
# the classifiability index against a direct computation
# --------------------------------------------------------------------------


def slow_classifiability(centres):
    """Michelangeli, Vautard & Legras (1995, J. Atmos. Sci. 52), written with plain loops (definition from memory):
    A(P, Q) = min_i max_j ACC(P_i, Q_j); c = 1 / (N (N - 1)) * sum over m != n of A(P_m, P_n);
    ACC = uncentred (anomaly) correlation sum(a b) / sqrt(sum(a a) sum(b b))."""
    r, k, d = centres.shape

    def acc(a, b):
        ab = aa = bb = 0.0
        for t in range(d):
            ab += a[t] * b[t]
            aa += a[t] * a[t]
            bb += b[t] * b[t]
        return ab / (aa * bb) ** 0.5

    total = 0.0
    for m in range(r):
        for n in range(r):
            if m == n:
                continue
            worst = None
            for i in range(k):
                best = max(acc(centres[m, i], centres[n, j]) for j in range(k))
                worst = best if worst is None else min(worst, best)
            total += worst
    return total / (r * (r - 1))


def test_classifiability_equals_direct_loops():
    rng = np.random.default_rng(11)
    centres = rng.normal(size=(6, 4, 5))
    assert scan.classifiability(centres) == pytest.approx(slow_classifiability(centres), rel=1e-12, abs=1e-12)
    # same partition found by every restart, clusters in another order: A = 1 for every pair, so c = 1 (from the definition)
    same = np.stack([centres[0][rng.permutation(4)] for _ in range(5)])
    assert scan.classifiability(same) == pytest.approx(1.0, abs=1e-12)
    assert scan.classifiability(centres) < 0.99


def test_matched_correlation_is_the_best_permutation():
    # Hungarian method (Kuhn 1955, via scipy.optimize.linear_sum_assignment) = brute force over all matchings
    rng = np.random.default_rng(5)
    a, b = rng.normal(size=(5, 6)), rng.normal(size=(5, 6))
    corr = scan.pattern_correlation(a, b)
    brute = max(np.mean([corr[i, p[i]] for i in range(5)]) for p in itertools.permutations(range(5)))
    assert scan.matched_correlation(a, b) == pytest.approx(brute, rel=1e-12)
    assert scan.matched_correlation(a, a[[3, 1, 4, 0, 2]]) == pytest.approx(1.0, abs=1e-12)


def test_ar1_surrogate_keeps_lag1_variance_and_season_breaks():
    rng = np.random.default_rng(2)
    seasons, days = 400, 90
    start = np.zeros(seasons * days, bool)
    start[::days] = True
    mean, var, phi = np.array([0.0, 1.0]), np.array([4.0, 0.25]), np.array([0.7, -0.3])
    x = scan.ar1_surrogates(mean, var, phi, start, rng)
    got_mean, got_var, got_phi = scan.ar1_parameters(x, start)
    # AR(1) x_t = phi x_{t-1} + e_t has lag-1 autocorrelation phi (textbook; common practice); n = 36000
    # gives a standard error near sqrt((1 - phi^2) / n) < 0.006, so 0.03 is a 5-sigma bound.
    np.testing.assert_allclose(got_phi, phi, atol=0.03)
    np.testing.assert_allclose(got_var, var, rtol=0.06)
    np.testing.assert_allclose(got_mean, mean, atol=0.1)
    # no memory across season boundaries: last day of a season vs first day of the next is uncorrelated
    last, first = x[days - 1 :: days][:-1, 0], x[days::days][:, 0]
    assert abs(np.corrcoef(last, first)[0, 1]) < 0.2  # 4 sigma for 399 pairs (sigma ~ 1/sqrt(n))


def test_parse_k_range():
    assert scan.parse_k_range("2-8") == [2, 3, 4, 5, 6, 7, 8]
    assert scan.parse_k_range("4,2") == [2, 4]
    for bad in ("", "1-4", "5-3", "a-b", "2-", "2,2"):
        with pytest.raises(scan.UserError):
            scan.parse_k_range(bad)


# --------------------------------------------------------------------------
# planted regimes and red noise
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """Planted field (8 years, 5 x 7 grid, k = 3, noise 200 Pa) on disk, and its PCs from the pipeline's own stages."""
    folder = tmp_path_factory.mktemp("planted")
    ds, truth = synthetic.planted_regimes(years=8, lat=LAT, lon=LON, k=PLANTED_K, noise=200.0, seed=1)
    path = folder / "psl.nc"
    synthetic.write_netcdf(ds, path)
    raw = {"data": {"paths": [str(path)], "variable": "psl", "months": [12, 1, 2]}, "eof": {"modes": 4}, "regimes": {"seed": 3}}
    cfg = config.validate(raw, folder)
    prep = pipeline.prepare(cfg)
    rng = np.random.default_rng(cfg.regimes.seed)
    eof = EOF(cfg.eof.modes, None, "exact", seed=int(rng.integers(2**31 - 1))).fit(prep.anomaly, prep.weights)
    pcs = eof.transform(prep.anomaly).compute()
    return {"path": path, "pcs": pcs, "prep": prep}


def test_planted_k_is_recommended_and_significant(planted):
    prep = planted["prep"]
    kw = dict(restarts=10, surrogates=19, bootstrap=4, stability_restarts=5, mixture_restarts=1)
    out = scan.scan(planted["pcs"], prep.segment_start, prep.season_year, [2, 3, 4, 5], np.random.default_rng(7), **kw)
    assert out.attrs["recommended_k"] == PLANTED_K, scan.table(out)
    assert "rule:" in out.attrs["recommendation"] and "90 %" in out.attrs["recommendation"]
    assert bool(out["significant"].sel(k=PLANTED_K)), scan.table(out)
    # planted patterns are reproducible: k-means finds the same 3 centroids each restart
    assert float(out["classifiability"].sel(k=PLANTED_K)) > 0.99
    assert float(out["split_half_stability"].sel(k=PLANTED_K)) > 0.95
    # W/T decreases with k (more clusters never fit worse, for the best of many restarts; common practice)
    assert np.all(np.diff(out["within_total_variance_ratio"].values) < 0)
    # BIC is lowest at the planted k: the field is mixture-like in PC space (planted truth)
    assert int(out["k"].values[np.argmin(out["bic"].values)]) == PLANTED_K
    # reproducible from the seed, and independent of the number of threads
    again = scan.scan(planted["pcs"], prep.segment_start, prep.season_year, [2, 3, 4, 5], np.random.default_rng(7), workers=1, **kw)
    xr.testing.assert_identical(out, again)


def red_noise_pcs(seed, seasons=8, days=90, modes=4):
    """PCs that are pure AR(1) red noise (no regimes): lag-1 0.7, variances decreasing like leading EOFs."""
    start = np.zeros(seasons * days, bool)
    start[::days] = True
    rng = np.random.default_rng(1000 + seed)
    x = scan.ar1_surrogates(np.zeros(modes), 1.0 / np.arange(1, modes + 1), np.full(modes, 0.7), start, rng)
    pcs = xr.DataArray(x, dims=("sample", "mode"), coords={"mode": np.arange(1, modes + 1)})
    return pcs, start, np.repeat(np.arange(seasons), days)


def test_red_noise_is_mostly_not_significant():
    # Under the null hypothesis the observed index and the 29 surrogate indices are (nearly) exchangeable,
    # so P(observed > 0.9 quantile) is about 0.1 per seed (permutation-test argument; common practice).
    # Bound: at most 6 of 20 seeds significant; for Binomial(20, 0.1), P(X >= 7) ~ 0.002 (computed from the
    # binomial distribution). Observed: 5 of 20 seeds at k = 4 (seeds 2, 3, 7, 9, 19) with the compiled k-means run to
    # full convergence (over seeds 20..99: 4 of 80, so the 5 are chance); 3 of 20 with the earlier numpy k-means.
    hits = []
    for seed in range(20):
        pcs, start, years = red_noise_pcs(seed)
        out = scan.scan(pcs, start, years, [4], np.random.default_rng(seed), restarts=8, surrogates=29,
                        bootstrap=0, stability_restarts=2, mixtures=False)
        hits.append(bool(out["significant"].sel(k=4)))
    assert sum(hits) <= 6, f"{sum(hits)} of 20 red-noise seeds called significant"


# --------------------------------------------------------------------------
# command line
# --------------------------------------------------------------------------


def regimes_cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "regimes", *map(str, args)], cwd=cwd, capture_output=True, text=True, timeout=300)


def test_cli_scan_end_to_end_and_bad_k(planted, tmp_path):
    job = tmp_path / "job.toml"
    job.write_text(
        f'[data]\npaths = ["{planted["path"]}"]\nvariable = "psl"\nmonths = [12, 1, 2]\n'
        '[eof]\nmodes = 4\n[regimes]\nseed = 3\n[output]\ndir = "out"\n'
    )
    result = regimes_cli("--quiet", "scan", job, "--k", "2-4", "--surrogates", "9", "--restarts", "6", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    assert "recommendation: k = 3" in result.stdout, result.stdout
    path = tmp_path / "out" / "scan" / "scan.nc"
    with xr.open_dataset(path) as ds:
        assert ds.attrs["Conventions"] == "CF-1.8"
        assert list(ds["k"].values) == [2, 3, 4]
        assert ds.attrs["recommended_k"] == 3
        assert ds["surrogate_classifiability"].shape == (9, 3)
        assert "config" in ds.attrs and "history" in ds.attrs

    refused = regimes_cli("--quiet", "scan", job, "--k", "2-4", "--surrogates", "2", "--restarts", "3", cwd=tmp_path)
    assert refused.returncode == 2 and "overwrite" in refused.stderr

    for spec in ("8-2", "two", "1-3"):
        bad = regimes_cli("--quiet", "scan", job, "--k", spec, "--output", tmp_path / "other", cwd=tmp_path)
        assert bad.returncode == 2, bad.stderr
        lines = bad.stderr.splitlines()
        assert len(lines) == 1 and lines[0].startswith("regimes: error:") and "--k" in lines[0], bad.stderr
    assert not (tmp_path / "other").exists()


def test_run_with_k_auto_applies_the_scan_rule_and_records_it(planted, tmp_path):
    raw = {
        "data": {"paths": [str(planted["path"])], "variable": "psl", "months": [12, 1, 2]},
        "eof": {"modes": 4},
        "regimes": {"k": "auto", "seed": 3, "restarts": 10},
        "scan": {"k_range": [2, 4], "surrogates": 9, "restarts": 6},
        "output": {"dir": str(tmp_path / "auto")},
    }
    out = pipeline.run(config.validate(raw, tmp_path), "# the config text")
    with xr.open_dataset(out / "scan.nc") as table, xr.open_dataset(out / "labels.nc") as labels:
        # the planted number of regimes (planted truth), chosen by the same rule as 'regimes scan'
        assert table.attrs["recommended_k"] == PLANTED_K
        assert list(labels["label"].attrs["flag_values"]) == list(range(1, PLANTED_K + 1))
        assert labels.attrs["k_selection"] == table.attrs["recommendation"]
        assert "rule:" in labels.attrs["k_selection"]
    with xr.open_dataset(out / "composites.nc") as comp:
        assert comp.sizes["regime"] == PLANTED_K


def test_k_auto_with_no_significant_k_is_refused_and_writes_nothing(tmp_path, monkeypatch):
    pcs, start, years = red_noise_pcs(0)
    table = scan.scan(pcs, start, years, [4], np.random.default_rng(0), restarts=4, surrogates=0, bootstrap=0,
                      stability_restarts=2, mixtures=False)
    assert table.attrs["recommended_k"] == 0  # with no surrogates nothing can be significant
    monkeypatch.setattr(pipeline, "scan_k", lambda *args, **kw: table)
    ds, _ = synthetic.planted_regimes(years=2, lat=LAT, lon=LON, k=2, seed=2)
    synthetic.write_netcdf(ds, tmp_path / "psl.nc")
    raw = {"data": {"paths": [str(tmp_path / "psl.nc")], "variable": "psl"}, "regimes": {"k": "auto"},
           "output": {"dir": str(tmp_path / "out")}}
    with pytest.raises(scan.UserError, match='regimes.k = "auto" found no k'):
        pipeline.run(config.validate(raw, tmp_path), None)
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())
