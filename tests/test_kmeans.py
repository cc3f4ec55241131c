"""Tests of the compiled k-means (regimes/kmeans.py) and of the k-means regimes built on it (regimes/cluster.py)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.cluster import KMeans
from sklearn.datasets import make_blobs
from sklearn.metrics import adjusted_rand_score

from regimes.cluster import KMeansRegimes
from regimes.errors import UserError
from regimes.kmeans import kmeans_plus_plus, lloyd


def textbook_lloyd(x, centres, max_iterations=300):
    """Lloyd's algorithm as defined (Lloyd 1982, IEEE Trans. Inf. Theory 28, 129-137), without any bounds:
    every point to its nearest centre (the first, on ties), every centre to the mean of its points, until no
    point changes centre. Returns None if a cluster empties (the definition says nothing about that case)."""
    centres = centres.copy()
    labels = ((x[:, None, :] - centres[None]) ** 2).sum(2).argmin(1)
    for _ in range(max_iterations):
        if np.bincount(labels, minlength=centres.shape[0]).min() == 0:
            return None
        centres = np.stack([x[labels == j].mean(0) for j in range(centres.shape[0])])
        new = ((x[:, None, :] - centres[None]) ** 2).sum(2).argmin(1)
        if (new == labels).all():
            break
        labels = new
    return centres, labels


def red_noise(n, d, phi, seed):
    """AR(1) series per column, x[t] = phi x[t-1] + sqrt(1 - phi^2) e[t]: data with no clusters, where k-means converges slowly."""
    rng = np.random.default_rng(seed)
    x = np.empty((n, d))
    x[0] = rng.standard_normal(d)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + np.sqrt(1 - phi**2) * rng.standard_normal(d)
    return x * np.linspace(3.0, 1.0, d)


def as_pcs(x):
    return xr.DataArray(x, dims=("sample", "mode"), coords={"mode": np.arange(1, x.shape[1] + 1)})


@pytest.mark.parametrize("k", [2, 4, 7])
def test_same_iterates_as_the_textbook_algorithm_on_red_noise(k):
    x = red_noise(1500, 6, 0.8, seed=k)
    start = kmeans_plus_plus(x, k, 4, np.random.default_rng(k))
    centres, labels, inertia = lloyd(x, start)
    for r in range(4):
        want_centres, want_labels = textbook_lloyd(x, start[r])
        np.testing.assert_array_equal(labels[r], want_labels)
        np.testing.assert_allclose(centres[r], want_centres, rtol=0, atol=1e-10)
        assert inertia[r] == pytest.approx(((x - want_centres[want_labels]) ** 2).sum(), rel=1e-12)


def test_ties_go_to_the_first_centre_as_in_the_textbook_algorithm():
    # a point exactly as far from two centres is re-examined and goes to the first, as argmin does
    x = np.array([[-5.0], [-3.0], [-2.0], [2.0], [0.0], [4.0], [-1.0], [5.0], [-6.0]])
    start = np.array([[[-3.0], [-2.0]]])
    centres, labels, inertia = lloyd(x, start)
    want_centres, want_labels = textbook_lloyd(x, start[0])
    np.testing.assert_array_equal(labels[0], want_labels)
    assert inertia[0] == pytest.approx(((x - want_centres[want_labels]) ** 2).sum(), rel=1e-12)


def test_same_iterates_as_the_textbook_algorithm_on_small_integer_data():
    # small integer data are full of exact ties between distances
    rng = np.random.default_rng(2026)
    compared = 0
    for _ in range(400):
        n, d, k = int(rng.integers(6, 30)), int(rng.integers(1, 3)), int(rng.integers(2, 4))
        x = rng.integers(-6, 7, size=(n, d)).astype(float)
        if np.unique(x, axis=0).shape[0] < k:
            continue
        start = kmeans_plus_plus(x, k, 1, rng)
        want = textbook_lloyd(x, start[0])
        if want is None:
            continue
        centres, labels, _ = lloyd(x, start)
        np.testing.assert_array_equal(labels[0], want[1])
        np.testing.assert_allclose(centres[0], want[0], rtol=0, atol=1e-12)
        compared += 1
    assert compared >= 300


def test_near_ties_in_float32_are_settled_in_float64():
    # 1e-9 is below float32's resolution at the centres' distance (its unit in the last place at 1 is 2**-23,
    # 1.2e-7; IEEE 754 binary32), so in float32 the two middle points are equally far from both centres;
    # float64 sees which is nearer
    x = np.array([[-5.0], [5.0], [1e-9], [-1e-9]])
    start = np.array([[[-1.0], [1.0]]])
    _, labels, _ = lloyd(x, start, max_iterations=0)  # the first assignment only
    np.testing.assert_array_equal(labels[0], [0, 1, 1, 0])


@pytest.mark.parametrize("scale, offset", [(1.0, 1e6), (1e-20, 0.0), (1e25, -3e25), (3.0, 0.0)])
def test_same_iterates_as_the_textbook_algorithm_at_any_scale_and_offset(scale, offset):
    # the float32 screening shifts and scales the data itself; the iterates stay those of float64 arithmetic
    x = red_noise(800, 5, 0.8, seed=11) * scale + offset
    start = kmeans_plus_plus(x, 5, 3, np.random.default_rng(11))
    _, labels, _ = lloyd(x, start)
    for r in range(3):
        np.testing.assert_array_equal(labels[r], textbook_lloyd(x, start[r])[1])


def test_subnormal_squares_decide_as_float64_does():
    # at 1e-160 the squared distances are subnormal (below 2.2e-308, IEEE 754 binary64): float64 sees the third point equally far (1e-320) from both
    # centres and gives it the first, though it is nearer the second; the kernel follows float64
    x = np.array([[-1.0], [1.0], [1e-5]]) * 1e-160
    _, labels, _ = lloyd(x, np.array([[[-1.0], [1.0]]]) * 1e-160, max_iterations=0)
    np.testing.assert_array_equal(labels[0], [0, 1, 0])


def test_values_whose_squares_overflow_are_a_programming_error():
    # (1e155)**2 is beyond float64's largest value, 1.8e308 (IEEE 754 binary64)
    with pytest.raises(ValueError, match="above 1e.150"):
        lloyd(np.array([[0.0], [1e155]]), np.array([[[0.0], [1.0]]]))


def test_a_converged_fit_is_a_fixed_point_to_the_last_bit():
    # a large mean and a small spread make the point-by-point cluster sums round differently from sums taken
    # afresh; a fit still ends at a fixed point of Lloyd's iteration (its definition, Lloyd 1982): every centre
    # the mean of its points (summed in order), every point at its nearest centre (squares summed in order), exactly
    x = red_noise(3000, 6, 0.9, seed=24) * 2e-5 + 1e6
    centres, labels, _ = lloyd(x, kmeans_plus_plus(x, 3, 10, np.random.default_rng(24)))
    for r in range(10):
        d2 = np.zeros((x.shape[0], 3))
        for t in range(x.shape[1]):
            d2 += (x[:, t:t + 1] - centres[r][None, :, t]) ** 2
        np.testing.assert_array_equal(d2.argmin(1), labels[r])
        sums, counts = np.zeros((3, x.shape[1])), np.zeros(3)
        for i in range(x.shape[0]):
            sums[labels[r][i]] += x[i]
            counts[labels[r][i]] += 1
        np.testing.assert_array_equal(centres[r], sums / counts[:, None])


def slow_greedy_seeding(x, k, restarts, rng):
    """Greedy k-means++ (Arthur & Vassilvitskii 2007; the greedy variant with 2 + floor(ln k) candidates, as
    scikit-learn documents it), written plainly with the same draws: the first centre uniform, each next one the
    candidate, drawn by squared distance to the nearest chosen centre, that leaves the smallest sum of those distances."""
    n = x.shape[0]
    first = rng.integers(n, size=restarts)
    draws = rng.random((k - 1, restarts, 2 + int(np.log(k))))
    picked = []
    for r in range(restarts):
        chosen = [int(first[r])]
        closest = ((x - x[chosen[0]]) ** 2).sum(1)
        for j in range(1, k):
            cumulative = np.cumsum(closest)
            best = None
            for u in draws[j - 1, r]:
                c = min(int(np.searchsorted(cumulative, u * cumulative[-1])), n - 1)
                reduced = np.minimum(closest, ((x - x[c]) ** 2).sum(1))
                if best is None or reduced.sum() < best[0]:
                    best = (reduced.sum(), c, reduced)
            chosen.append(best[1])
            closest = best[2]
        picked.append(chosen)
    return x[np.array(picked)]


@pytest.mark.parametrize("k", [2, 5, 9])
def test_seeding_equals_the_plain_greedy_kmeans_plus_plus(k):
    x = red_noise(700, 4, 0.5, seed=k)
    np.testing.assert_array_equal(
        kmeans_plus_plus(x, k, 6, np.random.default_rng(k)), slow_greedy_seeding(x, k, 6, np.random.default_rng(k))
    )


def test_seeding_puts_one_centre_in_each_of_far_apart_clusters():
    # k-means++ draws by squared distance, so with five tight, far-apart clusters every restart starts with one
    # centre in each (uniform seeding would manage that in only 5!/5^5, about 4 %, of the restarts)
    x, truth = make_blobs(n_samples=1000, centers=5 * np.eye(5) * 100, cluster_std=1.0, random_state=1)
    starts = kmeans_plus_plus(x, 5, 50, np.random.default_rng(1))
    for start in starts:
        hit = truth[((x[:, None, :] - start[None]) ** 2).sum(2).argmin(0)]
        assert sorted(hit) == [0, 1, 2, 3, 4]


def test_same_result_as_scikit_learn_from_the_same_start():
    # scikit-learn's KMeans (reference library), Lloyd's algorithm from given centres, run to full convergence
    x = red_noise(2000, 8, 0.9, seed=3)
    start = kmeans_plus_plus(x, 5, 3, np.random.default_rng(3))
    centres, labels, inertia = lloyd(x, start)
    for r in range(3):
        reference = KMeans(n_clusters=5, init=start[r], n_init=1, algorithm="lloyd", tol=0.0, max_iter=300).fit(x)
        np.testing.assert_array_equal(labels[r], reference.labels_)
        np.testing.assert_allclose(centres[r], reference.cluster_centers_, rtol=0, atol=1e-8)
        assert inertia[r] == pytest.approx(reference.inertia_, rel=1e-9)


def test_well_separated_clusters_match_scikit_learn():
    # issue criterion: best within-cluster sum of squares <= scikit-learn KMeans' (1e-6 relative), labels ARI >= 0.999
    x, truth = make_blobs(n_samples=3000, centers=5, n_features=10, cluster_std=1.0, random_state=7)
    ours = KMeansRegimes(k=5, restarts=20, rng=np.random.default_rng(7)).fit(as_pcs(x))
    reference = KMeans(n_clusters=5, n_init=20, random_state=7).fit(x)
    assert ours.inertia_ <= reference.inertia_ * (1 + 1e-6)
    assert adjusted_rand_score(reference.labels_, ours.labels_.values) >= 0.999
    assert adjusted_rand_score(truth, ours.labels_.values) >= 0.999


def test_same_seed_same_result_other_seed_other_starts():
    x = red_noise(1200, 5, 0.7, seed=9)
    a = KMeansRegimes(k=4, restarts=10, rng=np.random.default_rng(42)).fit(as_pcs(x))
    b = KMeansRegimes(k=4, restarts=10, rng=np.random.default_rng(42)).fit(as_pcs(x))
    np.testing.assert_array_equal(a.centroids_.values, b.centroids_.values)
    np.testing.assert_array_equal(a.labels_.values, b.labels_.values)
    assert a.inertia_ == b.inertia_
    one = kmeans_plus_plus(x, 4, 10, np.random.default_rng(42))
    other = kmeans_plus_plus(x, 4, 10, np.random.default_rng(43))
    assert not np.array_equal(one, other)


def test_an_empty_cluster_is_moved_onto_the_farthest_point():
    x = np.concatenate([np.random.default_rng(0).normal(size=(200, 2)), [[8.0, 8.0]]])
    start = np.array([[[0.0, 0.0], [0.5, 0.0], [100.0, 100.0]]])  # the third centre is nearest to no point
    moved, _, _ = lloyd(x, start, max_iterations=1)  # the one iteration refills the empty cluster
    np.testing.assert_array_equal(moved[0][2], [8.0, 8.0])  # (8, 8) is the point farthest from its centre
    centres, labels, inertia = lloyd(x, start)
    assert np.bincount(labels[0], minlength=3).min() >= 1
    np.testing.assert_array_equal(labels[0], textbook_lloyd(x, centres[0])[1])  # a fixed point of Lloyd's iteration


def test_fewer_distinct_points_than_clusters_stop_at_once_and_are_refused_as_regimes():
    x = np.repeat([[0.0, 0.0], [1.0, 1.0]], 50, axis=0)
    start = np.array([[[0.0, 0.0], [1.0, 1.0], [0.0, 0.0], [1.0, 1.0]]])
    centres, labels, _ = lloyd(x, start, max_iterations=10**7)  # returns at once instead of relocating for ever
    np.testing.assert_array_equal(np.unique(labels[0]), [0, 1])
    with pytest.raises(UserError, match=r"regimes\.k = 4 is larger than the number of distinct days \(2 of 100"):
        KMeansRegimes(k=4, restarts=3).fit(as_pcs(x))


def test_non_finite_input_is_a_programming_error():
    x = red_noise(50, 2, 0.5, seed=0)
    x[3, 1] = np.nan
    with pytest.raises(ValueError, match="NaN or infinite"):
        kmeans_plus_plus(x, 3, 2, np.random.default_rng(0))
    with pytest.raises(ValueError, match="NaN or infinite"):
        lloyd(x, x[None, :3])


@settings(max_examples=60, deadline=None, derandomize=True)
@given(
    n=st.integers(10, 120),
    d=st.integers(1, 6),
    k=st.integers(2, 6),
    seed=st.integers(0, 2**31 - 1),
    duplicates=st.booleans(),
)
def test_converged_fits_are_fixed_points(n, d, k, seed, duplicates):
    # at convergence every point is at its nearest centre and every centre is the mean of its points (definition)
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, d))
    if duplicates:
        x = np.round(x, 0)  # many equal points and ties
    k = min(k, np.unique(x, axis=0).shape[0])
    if k < 2:
        return
    start = kmeans_plus_plus(x, k, 3, rng)
    centres, labels, inertia = lloyd(x, start, max_iterations=1000)
    for r in range(3):
        d2 = ((x[:, None, :] - centres[r][None]) ** 2).sum(2)
        assert (d2[np.arange(n), labels[r]] <= d2.min(1) + 1e-9).all()
        counts = np.bincount(labels[r], minlength=k)
        assert counts.min() >= 1
        means = np.stack([x[labels[r] == j].mean(0) for j in range(k)])
        np.testing.assert_allclose(centres[r], means, atol=1e-9)
        assert inertia[r] == pytest.approx(d2[np.arange(n), labels[r]].sum(), rel=1e-9, abs=1e-9)
