"""Clustering in PC space: one small interface, k-means and Gaussian mixtures.

Both classes take their parameters in ``__init__``, learn in ``fit`` (which
returns self) and classify new PCs with ``predict``. Labels are 1..k,
numbered most frequent first (ties broken by the centroid coordinates), so the
same data and seed always give the same numbering. Label 0
(:data:`UNASSIGNED`) marks a day too unlike its nearest regime, when a
threshold is set (:func:`leave_unassigned`).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .errors import UserError
from .kmeans import kmeans_plus_plus, lloyd

UNASSIGNED = 0
"""Label of a day left out of every regime (pattern correlation below the threshold)."""


def _as_matrix(pcs: xr.DataArray) -> np.ndarray:
    return np.asarray(pcs.transpose("sample", "mode").values, dtype=np.float64)


def _check_enough(x: np.ndarray, k: int) -> None:
    """Refuse a k above the number of selected days, or of distinct days (PC vectors)."""
    n = x.shape[0]
    if n < k:
        raise UserError(f"regimes.k = {k} is larger than the number of selected days ({n}); lower k or select more days")
    distinct = np.unique(x, axis=0).shape[0]
    if distinct < k:
        raise UserError(f"regimes.k = {k} is larger than the number of distinct days ({distinct} of {n} differ in their PCs); lower k")


def _frequency_order(labels: np.ndarray, centres: np.ndarray) -> np.ndarray:
    """Permutation putting clusters most frequent first; ties by centroid coordinates."""
    k = centres.shape[0]
    counts = np.bincount(labels, minlength=k)
    keys = [tuple(-c for c in centres[j]) for j in range(k)]
    return np.array(sorted(range(k), key=lambda j: (-counts[j], keys[j])))


def squared_distances(x: np.ndarray, centres: np.ndarray) -> np.ndarray:
    """Squared Euclidean distances (n, k) from the rows of ``x`` (n, d) to ``centres`` (k, d), clipped at 0."""
    d2 = (x**2).sum(1)[:, None] - 2 * x @ centres.T + (centres**2).sum(1)[None, :]
    return np.maximum(d2, 0.0)


class KMeansRegimes:
    """k-means regimes in PC space with many seeded restarts.

    Restarts are seeded by greedy k-means++ and iterated by Lloyd's algorithm
    to convergence, both compiled (:mod:`regimes.kmeans`); the restart with the
    smallest within-cluster sum of squares is kept. Regime analysis with
    k-means on leading PCs: Michelangeli, Vautard & Legras (1995), J. Atmos.
    Sci. 52, 1237-1256.

    Parameters
    ----------
    k : int
        Number of regimes.
    restarts : int
        Number of k-means++ restarts.
    max_iterations : int
        Lloyd iterations per restart at most.
    rng : numpy.random.Generator
        The job's random generator.

    Attributes
    ----------
    centroids_ : DataArray (regime, mode)
        Regime centroids in PC space (regime = 1..k, most frequent first).
    labels_ : DataArray (sample)
        Regime of each fitted sample.
    inertia_ : float
        Within-cluster sum of squared distances of the kept restart.
    """

    method = "kmeans"

    def __init__(self, k: int = 4, restarts: int = 100, max_iterations: int = 300, rng: np.random.Generator | None = None):
        self.k = k
        self.restarts = restarts
        self.max_iterations = max_iterations
        self.rng = rng if rng is not None else np.random.default_rng(0)

    def fit(self, pcs: xr.DataArray) -> "KMeansRegimes":
        """Fit on PCs with dims ``(sample, mode)``."""
        x = _as_matrix(pcs)
        _check_enough(x, self.k)
        start = kmeans_plus_plus(x, self.k, self.restarts, self.rng)
        centres, labels, inertia = lloyd(x, start, self.max_iterations)
        best = int(np.argmin(inertia))
        order = _frequency_order(labels[best], centres[best])
        self.centroids_ = xr.DataArray(
            centres[best][order], dims=("regime", "mode"), coords={"regime": np.arange(1, self.k + 1), "mode": pcs["mode"].values}
        )
        self.inertia_ = float(inertia[best])
        self.labels_ = self.predict(pcs)
        return self

    def distances(self, pcs: xr.DataArray) -> xr.DataArray:
        """Euclidean distance of each sample to each centroid, dims ``(sample, regime)``."""
        d2 = squared_distances(_as_matrix(pcs), self.centroids_.values)
        return xr.DataArray(np.sqrt(d2), dims=("sample", "regime"), coords={"sample": pcs["sample"], "regime": self.centroids_["regime"]})

    def predict(self, pcs: xr.DataArray) -> xr.DataArray:
        """Nearest-centroid regime (1..k) of each sample."""
        d = self.distances(pcs)
        return (d.argmin("regime") + 1).astype("int8").rename("label")


class GaussianMixtureRegimes:
    """Gaussian-mixture regimes in PC space (full covariances, seeded restarts).

    Fitted by expectation-maximisation (scikit-learn ``GaussianMixture``);
    the restart of highest likelihood is kept. Mixture-model regimes: Smyth,
    Ide & Ghil (1999), J. Atmos. Sci. 56, 3704-3723. BIC = -2 ln L + p ln N
    (Schwarz 1978, Ann. Stat. 6, 461-464).

    Attributes
    ----------
    centroids_ : DataArray (regime, mode)
        Component means (regime = 1..k, most frequent first).
    covariances_ : DataArray (regime, mode, mode_)
    mixing_weights_ : DataArray (regime)
    labels_ : DataArray (sample)
        Most probable regime of each fitted sample.
    bic_, aic_ : float
        Information criteria of the fit.
    """

    method = "gaussian-mixture"

    def __init__(self, k: int = 4, restarts: int = 10, max_iterations: int = 300, rng: np.random.Generator | None = None):
        self.k = k
        self.restarts = restarts
        self.max_iterations = max_iterations
        self.rng = rng if rng is not None else np.random.default_rng(0)

    def fit(self, pcs: xr.DataArray) -> "GaussianMixtureRegimes":
        """Fit on PCs with dims ``(sample, mode)``."""
        from sklearn.mixture import GaussianMixture  # imported here: it costs every k-means job ~0.5 s of start-up

        x = _as_matrix(pcs)
        _check_enough(x, self.k)
        gm = GaussianMixture(
            n_components=self.k,
            covariance_type="full",
            n_init=self.restarts,
            max_iter=self.max_iterations,
            random_state=int(self.rng.integers(2**31 - 1)),
        ).fit(x)
        order = _frequency_order(gm.predict(x), gm.means_)
        regime = np.arange(1, self.k + 1)
        mode = pcs["mode"].values
        self.centroids_ = xr.DataArray(gm.means_[order], dims=("regime", "mode"), coords={"regime": regime, "mode": mode})
        self.covariances_ = xr.DataArray(
            gm.covariances_[order], dims=("regime", "mode", "mode_"), coords={"regime": regime, "mode": mode, "mode_": mode}
        )
        self.mixing_weights_ = xr.DataArray(gm.weights_[order], dims="regime", coords={"regime": regime})
        self.bic_ = float(gm.bic(x))
        self.aic_ = float(gm.aic(x))
        self.labels_ = self.predict(pcs)
        return self

    def probabilities(self, pcs: xr.DataArray) -> xr.DataArray:
        """Membership probability of each sample in each regime, dims ``(sample, regime)``.

        Posterior ``w_j N(x; mu_j, S_j) / sum_i w_i N(x; mu_i, S_i)``, computed in log space.
        """
        from scipy.special import logsumexp
        from scipy.stats import multivariate_normal

        x = _as_matrix(pcs)
        log_density = np.stack(
            [
                np.log(w) + multivariate_normal(mean=m, cov=c).logpdf(x)
                for w, m, c in zip(self.mixing_weights_.values, self.centroids_.values, self.covariances_.values)
            ],
            axis=-1,
        ).reshape(x.shape[0], self.k)
        p = np.exp(log_density - logsumexp(log_density, axis=1, keepdims=True))
        return xr.DataArray(p, dims=("sample", "regime"), coords={"sample": pcs["sample"], "regime": self.centroids_["regime"]})

    def predict(self, pcs: xr.DataArray) -> xr.DataArray:
        """Most probable regime (1..k) of each sample."""
        return (self.probabilities(pcs).argmax("regime") + 1).astype("int8").rename("label")


def make_clusterer(method: str, k: int, restarts: int, max_iterations: int, rng: np.random.Generator):
    """The clustering object for a config's ``regimes.method``."""
    kinds = {"kmeans": KMeansRegimes, "gaussian-mixture": GaussianMixtureRegimes}
    return kinds[method](k=k, restarts=restarts, max_iterations=max_iterations, rng=rng)


def pattern_correlation(pcs: xr.DataArray, centroids: xr.DataArray) -> xr.DataArray:
    """Uncentred pattern correlation of each sample with each regime centroid, dims ``(sample, regime)``.

    ``r = (x . c) / (|x| |c|)`` with ``x`` the sample's PC vector and ``c``
    the centroid. The EOFs are orthonormal, so this is also the uncentred
    correlation of the two maps in the area-weighted anomaly space (anomaly
    minus the fitted EOF mean, times the EOF weights) truncated to the
    retained EOFs: an anomaly correlation in the sense of Michelangeli,
    Vautard & Legras (1995), J. Atmos. Sci. 52, 1237-1256.
    """
    x = _as_matrix(pcs)
    c = np.asarray(centroids.transpose("regime", "mode").values, dtype=np.float64)
    norms = np.linalg.norm(x, axis=1)[:, None] * np.linalg.norm(c, axis=1)[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(norms > 0, (x @ c.T) / np.where(norms > 0, norms, 1.0), 0.0)
    return xr.DataArray(r, dims=("sample", "regime"), coords={"sample": pcs["sample"], "regime": centroids["regime"]})


def leave_unassigned(labels: np.ndarray, pcs: xr.DataArray, centroids: xr.DataArray, threshold: float | None) -> tuple[np.ndarray, np.ndarray | None]:
    """Label 0 (:data:`UNASSIGNED`) for samples whose pattern correlation with their own regime is below ``threshold``.

    Parameters
    ----------
    labels : array (sample)
        Regimes 1..k: the nearest centroid (k-means) or the most probable
        component, whose mean is its centroid (mixture).
    pcs : DataArray (sample, mode)
    centroids : DataArray (regime, mode)
    threshold : float or None
        None leaves every label as it is.

    Returns
    -------
    labels : numpy.ndarray of int8
    correlation : numpy.ndarray (sample) or None
        The pattern correlation (:func:`pattern_correlation`) of each sample
        with the regime of its label before thresholding; None without a threshold.
    """
    labels = np.asarray(labels).astype(np.int8)
    if threshold is None:
        return labels, None
    r = pattern_correlation(pcs, centroids).values
    own = r[np.arange(labels.size), labels.astype(np.intp) - 1]
    return np.where(own < threshold, np.int8(UNASSIGNED), labels).astype(np.int8), own
