"""Checks of regimes against references outside the project.

Each assertion names its source beside it: reference libraries (numpy,
scikit-learn), published formulas and constants, open data shipped in a
package (Fisher's iris in scikit-learn) and the open CF compliance checker.
Values recalled rather than re-read are marked "from memory".
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from regimes import stats
from regimes.cluster import GaussianMixtureRegimes, KMeansRegimes
from regimes.eof import EOF
from regimes.synthetic import planted_regimes, write_netcdf
from regimes.weights import EARTH_RADIUS_M, area_weights, cell_area

# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------


def _noise_field(n: int, p: int, seed: int) -> tuple[xr.DataArray, xr.DataArray]:
    """Random field (sample x feature) with unequal variances and a non-zero mean, and random weights."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, p)) * rng.uniform(0.5, 2.0, p) + rng.normal(0.0, 5.0, p)
    w = rng.uniform(0.2, 1.0, p)
    return xr.DataArray(x, dims=("sample", "feature")), xr.DataArray(w, dims="feature")


def _decaying_field(n: int, p: int, seed: int, ratio: float = 0.8) -> tuple[xr.DataArray, xr.DataArray]:
    """Field with singular values 10 * ratio**i (a decaying spectrum), a mean, and random weights."""
    rng = np.random.default_rng(seed)
    r = min(n, p)
    u, _ = np.linalg.qr(rng.standard_normal((n, r)))
    v, _ = np.linalg.qr(rng.standard_normal((p, r)))
    x = (u * (10.0 * ratio ** np.arange(r))) @ v.T + rng.normal(0.0, 3.0, p)
    w = rng.uniform(0.2, 1.0, p)
    return xr.DataArray(x, dims=("sample", "feature")), xr.DataArray(w, dims="feature")


def _weighted_centred(field: xr.DataArray, weights: xr.DataArray) -> np.ndarray:
    x = field.values
    return (x - x.mean(axis=0)) * weights.values[None, :]


def _align_signs(rows: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Flip each row of ``rows`` to agree in sign with the same row of ``reference``."""
    sign = np.sign((rows * reference).sum(axis=1))
    return rows * sign[:, None]


# --------------------------------------------------------------------------
# 1. EOF analysis against numpy SVD and scikit-learn PCA
# --------------------------------------------------------------------------

EOF_SHAPES = [(200, 50), (40, 120)]  # covariance path (p <= n) and Gram path (p > n)


@pytest.mark.parametrize("n,p", EOF_SHAPES, ids=["covariance", "gram"])
def test_eof_matches_numpy_svd(n, p):
    field, weights = _noise_field(n, p, seed=n + p)
    eof = EOF(modes=5, solver="exact").fit(field, weights)
    xc = _weighted_centred(field, weights)
    _, s, vt = np.linalg.svd(xc, full_matrices=False)

    # numpy.linalg.svd: PCA eigenvalues are s**2 / (n - 1), EOFs the right singular vectors
    np.testing.assert_allclose(eof.eigenvalues_.values, s[:5] ** 2 / (n - 1), rtol=1e-6)
    comps = eof.components_.values
    assert comps.shape == (5, p)
    np.testing.assert_allclose(_align_signs(comps, vt[:5]), vt[:5], atol=1e-6)  # numpy.linalg.svd, up to sign
    # numpy.linalg.svd: fraction of total weighted variance is s_i**2 / sum(s**2)
    np.testing.assert_allclose(eof.variance_fraction_.values, s[:5] ** 2 / np.sum(s**2), rtol=1e-6)
    # North, Bell, Cahalan & Moeng (1982, Mon. Wea. Rev. 110, 699-706): delta lambda = lambda sqrt(2 / N)
    np.testing.assert_allclose(eof.eigenvalue_error_.values, s[:5] ** 2 / (n - 1) * np.sqrt(2.0 / n), rtol=1e-6)


@pytest.mark.parametrize("n,p", EOF_SHAPES, ids=["covariance", "gram"])
def test_eof_matches_sklearn_pca(n, p):
    from sklearn.decomposition import PCA

    field, weights = _noise_field(n, p, seed=7 * n + p)
    eof = EOF(modes=5, solver="exact").fit(field, weights)
    xc = _weighted_centred(field, weights)
    pca = PCA(n_components=5, svd_solver="full").fit(xc)

    # scikit-learn PCA: explained_variance_ (ddof = 1) and explained_variance_ratio_
    np.testing.assert_allclose(eof.eigenvalues_.values, pca.explained_variance_, rtol=1e-6)
    np.testing.assert_allclose(eof.variance_fraction_.values, pca.explained_variance_ratio_, rtol=1e-6)
    # scikit-learn PCA components_, up to sign
    np.testing.assert_allclose(_align_signs(eof.components_.values, pca.components_), pca.components_, atol=1e-6)
    # scikit-learn PCA.transform: the PCs of the weighted, centred field, up to sign per mode
    pcs = eof.transform(field).transpose("sample", "mode").values
    reference = pca.transform(xc)
    aligned = _align_signs(pcs.T, reference.T).T
    np.testing.assert_allclose(aligned, reference, atol=1e-6 * np.abs(reference).max())


def test_eof_randomized_agrees_with_exact():
    field, weights = _decaying_field(300, 80, seed=11, ratio=0.8)
    exact = EOF(modes=5, solver="exact").fit(field, weights)
    randomized = EOF(modes=5, solver="randomized", seed=0).fit(field, weights)

    # Halko, Martinsson & Tropp (2011, SIAM Review 53): with power iterations the randomized
    # SVD reproduces the leading singular triplets of a matrix with a decaying spectrum
    np.testing.assert_allclose(randomized.eigenvalues_.values, exact.eigenvalues_.values, rtol=1e-4)
    np.testing.assert_allclose(randomized.variance_fraction_.values, exact.variance_fraction_.values, rtol=1e-4)
    comps = _align_signs(randomized.components_.values, exact.components_.values)
    np.testing.assert_allclose(comps, exact.components_.values, atol=1e-4)
    # and both agree with numpy.linalg.svd
    _, s, _ = np.linalg.svd(_weighted_centred(field, weights), full_matrices=False)
    np.testing.assert_allclose(randomized.eigenvalues_.values, s[:5] ** 2 / 299, rtol=1e-4)


# --------------------------------------------------------------------------
# 2. Geometry of cell areas and weights
# --------------------------------------------------------------------------


def _one_degree_bounds():
    lat_edges = np.arange(-90.0, 90.5, 1.0)
    lon_edges = np.arange(0.0, 360.5, 1.0)
    lat_b = np.stack([lat_edges[:-1], lat_edges[1:]], axis=1)
    lon_b = np.stack([lon_edges[:-1], lon_edges[1:]], axis=1)
    return lat_b, lon_b


def test_global_cell_areas_sum_to_sphere_area():
    lat_b, lon_b = _one_degree_bounds()
    area = cell_area(lat_b, lon_b)
    assert area.shape == (180, 360)
    # IUGG mean radius R1 = 6371.0088 km (Moritz 2000, J. Geodesy 74, Geodetic Reference System 1980)
    assert EARTH_RADIUS_M == pytest.approx(6371008.8, rel=1e-12)
    # sphere area 4 pi R^2 (exact geometry)
    assert area.sum() == pytest.approx(4 * np.pi * 6371008.8**2, rel=1e-10)
    # Earth's surface area about 5.1007e14 m^2 (widely tabulated, from memory)
    assert area.sum() == pytest.approx(5.1007e14, rel=1e-4)


def test_tropical_band_holds_half_the_sphere():
    lat_b, lon_b = _one_degree_bounds()
    area = cell_area(lat_b, lon_b)
    band = (lat_b[:, 0] >= -30.0) & (lat_b[:, 1] <= 30.0)
    assert band.sum() == 60
    # exact geometry: area between latitudes a, b is 2 pi R^2 (sin b - sin a); sin 30 deg = 1/2
    assert area[band].sum() / area.sum() == pytest.approx(0.5, rel=1e-12)


def test_cell_area_of_one_cell_matches_formula():
    # exact geometry: A = R^2 dlon (sin lat2 - sin lat1); a 10 x 10 degree cell at 40..50 N
    r = EARTH_RADIUS_M
    expected = r**2 * np.deg2rad(10.0) * (np.sin(np.deg2rad(50.0)) - np.sin(np.deg2rad(40.0)))
    got = cell_area(np.array([[40.0, 50.0]]), np.array([[-5.0, 5.0]]))
    assert got.shape == (1, 1)
    assert got[0, 0] == pytest.approx(expected, rel=1e-12)


def _grid_field(lat, lon):
    return xr.DataArray(
        np.zeros((3, lat.size, lon.size)),
        dims=("time", "lat", "lon"),
        coords={"lat": lat, "lon": lon},
    )


def test_coslat_weights_are_sqrt_cos_lat():
    lat = np.arange(-85.0, 86.0, 5.0)
    lon = np.arange(0.0, 360.0, 10.0)
    w = area_weights(_grid_field(lat, lon), "coslat").transpose("lat", "lon")
    assert w.shape == (lat.size, lon.size)
    # sqrt(cos lat) weighting (common practice; Hannachi, Jolliffe & Stephenson 2007, Int. J. Climatol. 27)
    expected = np.broadcast_to(np.sqrt(np.cos(np.deg2rad(lat)))[:, None], w.shape)
    np.testing.assert_allclose(w.values, expected, rtol=1e-12)


def test_cell_area_weights_follow_band_areas():
    lat = np.arange(-80.0, 81.0, 10.0)
    lon = np.arange(0.0, 360.0, 20.0)
    w = area_weights(_grid_field(lat, lon), "cell-area").transpose("lat", "lon").values
    # exact geometry: on a regular grid the cell area is proportional to sin(lat + d/2) - sin(lat - d/2)
    band = np.sin(np.deg2rad(lat + 5.0)) - np.sin(np.deg2rad(lat - 5.0))
    np.testing.assert_allclose(w**2, np.broadcast_to((band / band.max())[:, None], w.shape), rtol=1e-12)


# --------------------------------------------------------------------------
# 3. Clustering on Fisher's iris (scikit-learn's copy of Fisher 1936)
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def iris():
    from sklearn.datasets import load_iris

    x, species = load_iris(return_X_y=True)
    pcs = xr.DataArray(
        x,
        dims=("sample", "mode"),
        coords={"sample": np.arange(x.shape[0]), "mode": np.arange(1, x.shape[1] + 1)},
    )
    return pcs, species


def test_kmeans_on_iris(iris):
    from sklearn.cluster import KMeans
    from sklearn.metrics import adjusted_rand_score

    pcs, species = iris
    model = KMeansRegimes(k=3, restarts=20, rng=np.random.default_rng(0)).fit(pcs)
    labels = model.labels_.values
    assert set(np.unique(labels)) == {1, 2, 3}
    # k-means (k = 3) on the four iris measurements: ARI about 0.73 vs species (widely reported, from memory)
    assert adjusted_rand_score(species, labels) == pytest.approx(0.73, abs=0.02)
    reference = KMeans(n_clusters=3, n_init=20, random_state=0).fit(pcs.values)
    # scikit-learn KMeans(n_init=20): our best restart is at least as good
    assert model.inertia_ <= reference.inertia_ * (1 + 1e-6)
    # the inertia reported is the within-cluster sum of squares of the labels returned (definition)
    x = pcs.values
    wcss = sum(((x[labels == j] - x[labels == j].mean(0)) ** 2).sum() for j in (1, 2, 3))
    assert model.inertia_ == pytest.approx(wcss, rel=1e-9)


def test_gaussian_mixture_on_iris(iris):
    from sklearn.metrics import adjusted_rand_score

    pcs, species = iris
    model = GaussianMixtureRegimes(k=3, restarts=10, rng=np.random.default_rng(0)).fit(pcs)
    labels = model.labels_.values
    assert set(np.unique(labels)) == {1, 2, 3}
    # full-covariance Gaussian mixture (k = 3) on iris: ARI about 0.90 vs species (widely reported, from memory)
    assert adjusted_rand_score(species, labels) == pytest.approx(0.90, abs=0.05)


# --------------------------------------------------------------------------
# 4. Markov-chain statistics (Wilks, Statistical Methods in the Atmospheric
#    Sciences, Markov-chain chapter)
# --------------------------------------------------------------------------

# State 1 never goes to state 3 (P[0, 2] = 0); every segment starts in state 3,
# so a step counted across a segment boundary would show up as 1 -> 3.
MARKOV_P = np.array(
    [
        [0.90, 0.10, 0.00],
        [0.05, 0.85, 0.10],
        [0.10, 0.05, 0.85],
    ]
)
MARKOV_STATES = np.array([1, 2, 3])


@pytest.fixture(scope="module")
def markov_chain():
    rng = np.random.default_rng(2024)
    cumulative = np.cumsum(MARKOV_P, axis=1)
    lengths = rng.integers(250, 450, size=200)
    labels, starts = [], []
    for length in lengths:
        draws = rng.random(length)
        seg = np.empty(length, dtype=np.int64)
        seg[0] = 2  # index of state 3
        for t in range(1, length):
            seg[t] = min(int(np.searchsorted(cumulative[seg[t - 1]], draws[t], side="right")), 2)
        first = np.zeros(length, dtype=bool)
        first[0] = True
        labels.append(seg + 1)
        starts.append(first)
    labels = np.concatenate(labels)
    starts = np.concatenate(starts)
    # segments ending in state 1 exist, so a boundary step 1 -> 3 would be seen if counted
    ends_in_one = np.flatnonzero(starts)[1:] - 1
    assert (labels[ends_in_one] == 1).sum() > 10
    return labels, starts


def test_transition_probabilities_match_known_matrix(markov_chain):
    labels, starts = markov_chain
    result = stats.transitions(labels, starts, MARKOV_STATES)
    counts = result["transition_count"].values
    prob = result["transition_probability"].values
    from_counts = counts.sum(axis=1, keepdims=True)
    # maximum-likelihood estimate of a first-order Markov chain: counts / row totals (Wilks, Markov-chain chapter)
    np.testing.assert_allclose(prob, counts / from_counts, rtol=1e-12)
    # binomial standard error sqrt(P (1 - P) / N_i) of each estimated P_ij (textbook)
    se = np.sqrt(MARKOV_P * (1 - MARKOV_P) / from_counts)
    assert np.all(np.abs(prob - MARKOV_P) <= 4 * se), (prob, MARKOV_P, se)
    # P[0, 2] = 0: no 1 -> 3 step occurs within a segment, so the count must be exactly 0
    assert counts[0, 2] == 0


def test_steps_across_segment_boundaries_are_not_counted(markov_chain):
    labels, starts = markov_chain
    counts = stats.transitions(labels, starts, MARKOV_STATES)["transition_count"].values
    # reference: count consecutive pairs segment by segment with numpy
    expected = np.zeros((3, 3), dtype=np.int64)
    bounds = np.append(np.flatnonzero(starts), labels.size)
    for a, b in zip(bounds[:-1], bounds[1:]):
        seg = labels[a:b] - 1
        np.add.at(expected, (seg[:-1], seg[1:]), 1)
    np.testing.assert_array_equal(counts, expected)
    # number of consecutive pairs within segments = samples - segments
    assert counts.sum() == labels.size - starts.sum()


def test_small_segmented_example_by_hand():
    # two segments [1 1 2] and [2 1]: pairs within segments are 1->1, 1->2, 2->1; the 2->2 across the break is not
    labels = np.array([1, 1, 2, 2, 1])
    starts = np.array([True, False, False, True, False])
    counts = stats.transitions(labels, starts, MARKOV_STATES)["transition_count"].values
    expected = np.zeros((3, 3), dtype=int)
    expected[0, 0] = expected[0, 1] = expected[1, 0] = 1
    np.testing.assert_array_equal(counts, expected)
    runs = stats.episodes(labels, starts)
    # episodes are runs within segments: [1 1], [2], [2], [1] (the two 2s are split by the break)
    np.testing.assert_array_equal(runs["regime"].values, [1, 2, 2, 1])
    np.testing.assert_array_equal(runs["length"].values, [2, 1, 1, 1])


def test_mean_durations_match_geometric_law(markov_chain):
    labels, starts = markov_chain
    runs = stats.episodes(labels, starts)
    assert runs["length"].values.sum() == labels.size
    # no episode crosses a segment start
    seg_id = np.cumsum(starts)
    first = runs["first"].values
    last = first + runs["length"].values - 1
    assert np.all(seg_id[first] == seg_id[last])
    result = stats.durations(runs, MARKOV_STATES)
    mean = result["mean_duration"].values
    count = result["episode_count"].values
    stay = np.diag(MARKOV_P)
    # episode lengths of a Markov chain are geometric: mean 1 / (1 - P_ii), variance P_ii / (1 - P_ii)^2 (Wilks)
    expected = 1.0 / (1.0 - stay)
    se = np.sqrt(stay) / (1.0 - stay) / np.sqrt(count)
    # tolerance: 4 standard errors of the mean plus 3 % for the episodes cut short at segment ends
    # (one per segment out of several thousand episodes)
    assert np.all(np.abs(mean - expected) <= 4 * se + 0.03 * expected), (mean, expected, se)


# --------------------------------------------------------------------------
# 5. CF-1.8 compliance of every output file (IOOS compliance-checker)
# --------------------------------------------------------------------------

EXPECTED_OUTPUTS = {"labels.nc", "composites.nc", "statistics.nc", "eofs.nc", "model.nc"}

CONFIG_TEMPLATE = """\
[data]
paths = ["{data}"]
variable = "psl"
months = [12, 1, 2]

[anomalies]
climatology = "daily"
harmonics = 3

[eof]
weighting = "coslat"
modes = 4

[regimes]
method = "{method}"
k = 3
restarts = 10
seed = 1
names = ["first", "second", "third"]

[figures]
draw = false

[output]
dir = "unused"
"""


def _cf_check(path: Path, report_dir: Path) -> tuple[dict, str]:
    """Run the CF 1.8 checker of the compliance-checker package on one file; return (json scores, text report)."""
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite.load_all_available_checkers()
    base = report_dir / f"{path.parent.name}-{path.stem}"
    ComplianceChecker.run_checker(
        str(path),
        ["cf:1.8"],
        0,
        "normal",
        output_filename=str(base),
        output_format=["text", "json"],
    )
    scores = json.loads(base.with_suffix(".json").read_text())["cf:1.8"]
    return scores, base.with_suffix(".txt").read_text()


@pytest.fixture(scope="module")
def synthetic_input(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("cf_input")
    data, _ = planted_regimes(
        years=6, lat=np.arange(30.0, 70.1, 10.0), lon=np.arange(-60.0, 20.1, 10.0), k=3, seed=5
    )
    path = folder / "planted.nc"
    write_netcdf(data, path, pack=True)
    return path


@pytest.fixture(scope="module", params=["kmeans", "gaussian-mixture"])
def cli_outputs(request, synthetic_input, tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp(f"cf_{request.param}")
    cfg = folder / "job.toml"
    cfg.write_text(CONFIG_TEMPLATE.format(data=synthetic_input.as_posix(), method=request.param), encoding="utf-8")
    out = folder / "out"
    proc = subprocess.run(
        [sys.executable, "-m", "regimes", "run", str(cfg), "--output", str(out)],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    return out


def test_outputs_pass_cf_checker(cli_outputs, tmp_path):
    files = sorted(cli_outputs.glob("*.nc"))
    assert EXPECTED_OUTPUTS <= {f.name for f in files}
    failures = {}
    for path in files:
        scores, text = _cf_check(path, tmp_path)
        # IOOS compliance-checker, CF 1.8 suite: no high-priority failures, no "Errors" section in the report
        if scores["high_count"] != 0 or "Errors" in text:
            failures[path.name] = text
    assert not failures, "\n".join(f"== {name}\n{text}" for name, text in failures.items())


def test_cf_checker_flags_a_broken_file(tmp_path):
    # negative control: the checker, run the same way, reports errors for a file that breaks CF
    ds = xr.Dataset(
        {"psl": ("time", np.arange(4.0), {"units": "not_a_unit", "standard_name": "no_such_standard_name"})},
        coords={"time": ("time", np.arange(4.0), {"units": "days since 2000-01-01", "standard_name": "time"})},
        attrs={"Conventions": "CF-1.8"},
    )
    path = tmp_path / "broken.nc"
    ds.to_netcdf(path)
    scores, text = _cf_check(path, tmp_path)
    # IOOS compliance-checker: invalid units and standard_name are high-priority failures
    assert scores["high_count"] > 0
    assert "Errors" in text


def test_synthetic_input_passes_cf_checker(synthetic_input, tmp_path):
    # the synthetic writer declares Conventions = "CF-1.8"; the IOOS compliance-checker should agree
    scores, text = _cf_check(synthetic_input, tmp_path)
    assert scores["high_count"] == 0, text


# --------------------------------------------------------------------------
# 6. CF-1.8 compliance of what 'regimes assign' (an ensemble, with the
#    unassigned class) and 'regimes compare' write
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def assign_and_compare_outputs(synthetic_input, tmp_path_factory) -> list[Path]:
    from regimes import cli, config, pipeline

    folder = tmp_path_factory.mktemp("cf_assign")
    job = folder / "job.toml"
    text = CONFIG_TEMPLATE.format(data=synthetic_input.as_posix(), method="kmeans").replace("names = [", "unassigned_below = 0.5\nnames = [")
    job.write_text(text, encoding="utf-8")
    cfg, text = config.load(job)
    run = pipeline.run(cfg, text, output_dir=str(folder / "run"))
    with xr.open_dataset(synthetic_input) as ds:
        data = ds.load()
    members = xr.concat([data["psl"] + 50.0 * i for i in range(3)], "member").assign_attrs(data["psl"].attrs)
    members = members.assign_coords(member=("member", np.arange(1, 4, dtype=np.int32), {"standard_name": "realization", "long_name": "ensemble member"}))
    write_netcdf(xr.Dataset({"psl": members.transpose("member", "time", "lat", "lon")}, attrs=data.attrs), folder / "ensemble.nc")
    assert cli.main(["--quiet", "assign", str(run / "model.nc"), str(folder / "ensemble.nc"), "--output", str(folder / "assigned")]) == 0
    assert cli.main(["--quiet", "compare", str(run), str(folder / "assigned"), "--output", str(folder / "compared")]) == 0
    return [folder / "assigned" / name for name in ("labels.nc", "composites.nc", "statistics.nc")] + [folder / "compared" / "comparison.nc"]


def test_assign_and_compare_outputs_pass_cf_checker(assign_and_compare_outputs, tmp_path):
    failures = {}
    for path in assign_and_compare_outputs:
        scores, text = _cf_check(path, tmp_path)
        # IOOS compliance-checker, CF 1.8 suite: no high-priority failures, no "Errors" section in the report
        if scores["high_count"] != 0 or "Errors" in text:
            failures[path.name] = text
    assert not failures, "\n".join(f"== {name}\n{text}" for name, text in failures.items())
    with xr.open_dataset(assign_and_compare_outputs[0]) as labels:
        # CF 1.8 section 3.5: flag_values and flag_meanings of equal length; 0 means unassigned
        assert len(labels["label"].attrs["flag_values"]) == len(labels["label"].attrs["flag_meanings"].split())
        assert labels["label"].attrs["flag_values"][0] == 0 and labels["label"].attrs["flag_meanings"].split()[0] == "unassigned"
