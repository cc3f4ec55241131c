"""Weighted, centred EOF analysis (PCA) of a (sample x feature) field.

Two solvers:

* ``exact``: the small cross-product matrix (feature x feature covariance, or
  sample x sample Gram matrix, whichever is smaller) is accumulated in float64
  over chunks and fully eigen-decomposed (``numpy.linalg.eigh``).
* ``randomized``: randomized subspace iteration of Halko, Martinsson & Tropp
  (2011, SIAM Review 53, 217-288), streamed over the sample chunks of the
  stored field; memory is a few multiples of (sample x modes) and
  (modes x feature).

EOFs of the area-weighted field are the eigenvectors of its covariance
(Hannachi, Jolliffe & Stephenson 2007, Int. J. Climatol. 27, 1119-1152).
Sampling errors of the eigenvalues follow North, Bell, Cahalan & Moeng
(1982, Mon. Wea. Rev. 110, 699-706): ``delta lambda = lambda sqrt(2 / N)``.
"""

from __future__ import annotations

import dask
import dask.array as dsa
import numpy as np
import scipy.linalg
import xarray as xr

from .errors import UserError

EXACT_LIMIT = 3000
"""Largest min(samples, features) for which ``solver='auto'`` picks the exact solver."""

RANDOMIZED_OVERSAMPLING = 10
RANDOMIZED_POWER_ITERATIONS = 6


def _orient(vectors: np.ndarray) -> np.ndarray:
    """Flip each row so that its entry of largest magnitude is positive (a fixed sign convention)."""
    biggest = vectors[np.arange(vectors.shape[0]), np.argmax(np.abs(vectors), axis=1)]
    return vectors * np.where(biggest < 0, -1.0, 1.0)[:, None]


class EOF:
    """Weighted EOF analysis with a choice of exact or randomized solver.

    Parameters
    ----------
    modes : int
        Number of modes to keep (an upper bound when ``variance_fraction`` is set).
    variance_fraction : float, optional
        Keep the fewest modes whose variance fractions add up to at least this.
    solver : {'auto', 'exact', 'randomized'}
        ``auto`` is exact when min(samples, features) <= ``EXACT_LIMIT``.
    seed : int
        Seed of the randomized solver.

    Attributes
    ----------
    mean_ : DataArray (feature)
        Sample mean of the unweighted field (field units).
    weights_ : DataArray (feature)
        The weights used.
    components_ : DataArray (mode, feature)
        Unit-norm EOFs of the weighted field.
    eigenvalues_ : DataArray (mode)
        Variance of each PC (field units squared).
    variance_fraction_ : DataArray (mode)
        Fraction of the total weighted variance.
    eigenvalue_error_ : DataArray (mode)
        North et al. (1982) sampling error of each eigenvalue.
    solver_ : str
        The solver that ran.
    """

    def __init__(self, modes: int = 10, variance_fraction: float | None = None, solver: str = "auto", seed: int = 0):
        self.modes = modes
        self.variance_fraction = variance_fraction
        self.solver = solver
        self.seed = seed

    def fit(self, field: xr.DataArray, weights: xr.DataArray) -> "EOF":
        """Fit on ``field`` (dims ``sample``, ``feature``) with ``weights`` (``feature``)."""
        n, p = field.sizes["sample"], field.sizes["feature"]
        if n < 2:
            raise UserError(f"only {n} sample(s) selected; an EOF analysis needs at least 2; widen the period or season")
        self.weights_ = weights
        w = weights.values
        stored = dsa.asarray(field.data)
        # float64 sums of the stored values without float64 copies of them (einsum and sum cast as they go)
        column_sum, squares = dask.compute(stored.sum(axis=0, dtype=np.float64), dsa.einsum("ij,ij->j", stored, stored, dtype=np.float64))
        mean = column_sum / n
        total_variance = float((w**2 * (squares - n * mean**2)).sum() / (n - 1))
        if not total_variance > 0:
            raise UserError("the selected field does not vary in time (zero variance); check the variable, box and period")
        limit = min(n, p) if self.variance_fraction else min(self.modes, n, p)
        self.solver_ = self.solver if self.solver != "auto" else ("exact" if min(n, p) <= EXACT_LIMIT else "randomized")
        if self.solver_ == "exact":
            values, vectors = self._exact((stored.astype(np.float64) - mean[None, :]) * w[None, :], n, p, limit)
        else:
            values, vectors = self._randomized(stored, mean, w, min(limit, 200))
        keep = min(self.modes, values.size)
        fraction = values / total_variance
        if self.variance_fraction:
            reached = np.flatnonzero(np.cumsum(fraction) >= self.variance_fraction - 1e-12)
            if reached.size == 0:
                raise UserError(
                    f"eof.variance_fraction = {self.variance_fraction} is not reached by the {values.size} modes computed "
                    "(they explain {:.3f}); lower it or set eof.solver = 'exact'".format(fraction.sum())
                )
            keep = int(reached[0]) + 1
        mode = np.arange(1, keep + 1)
        feature = field["feature"]
        self.mean_ = xr.DataArray(mean, dims="feature", coords=feature.coords)
        self.components_ = xr.DataArray(_orient(vectors[:keep]), dims=("mode", "feature"), coords={"mode": mode, **feature.coords})
        self.eigenvalues_ = xr.DataArray(values[:keep], dims="mode", coords={"mode": mode})
        self.variance_fraction_ = xr.DataArray(fraction[:keep], dims="mode", coords={"mode": mode})
        self.eigenvalue_error_ = self.eigenvalues_ * np.sqrt(2.0 / n)
        self.total_variance_ = total_variance
        self.n_samples_ = n
        return self

    @staticmethod
    def _exact(centred: dsa.Array, n: int, p: int, limit: int) -> tuple[np.ndarray, np.ndarray]:
        """The leading ``limit`` eigenpairs of the smaller cross-product matrix (scipy.linalg.eigh)."""
        small = centred.T @ centred if p <= n else centred @ centred.T
        matrix = dask.compute(small)[0] / (n - 1)
        m = matrix.shape[0]
        values, vectors = scipy.linalg.eigh(matrix, subset_by_index=[m - limit, m - 1])
        values, vectors = np.clip(values[::-1], 0, None), vectors[:, ::-1]
        if p <= n:
            return values, vectors.T
        positive = values > values[0] * 1e-12
        values, u = values[positive], vectors[:, positive]
        vectors = dask.compute(centred.T @ u)[0] / np.sqrt(values * (n - 1))[None, :]
        return values, vectors.T

    def _randomized(self, x: dsa.Array, mean: np.ndarray, w: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Leading ``k`` eigenpairs by randomized subspace iteration on the weighted, centred field.

        Algorithms 4.4 (subspace iteration) and 5.1 (direct SVD) of Halko,
        Martinsson & Tropp (2011). The centring and weighting are folded into
        the products, ``Xc B = x (W B) - 1 (m^T W B)`` and
        ``Xc^T Q = W (x^T Q) - W m (1^T Q)``, so each pass streams the stored
        field ``x`` once and no centred copy of it is ever held. The
        iterations only shape the subspace and run in the field's precision;
        the final projection, which gives the singular values, runs in float64.
        """
        n, p = x.shape
        k = min(k, min(n, p) - 1) if min(n, p) > 1 else 1
        width = min(k + RANDOMIZED_OVERSAMPLING, n, p)
        rng = np.random.default_rng(self.seed)
        low = np.float32 if x.dtype == np.float32 else np.float64

        def times(b: np.ndarray) -> np.ndarray:  # Xc @ b, (n, width)
            wb = w[:, None] * b
            return dask.compute(x @ wb.astype(low))[0] - (mean @ wb)[None, :]

        def transposed_times(q: np.ndarray, dtype=low) -> np.ndarray:  # Xc^T @ q, (p, width)
            xq = dask.compute(x.T @ q.astype(dtype))[0].astype(np.float64)
            return w[:, None] * (xq - mean[:, None] * q.sum(axis=0)[None, :])

        q, _ = np.linalg.qr(times(rng.standard_normal((p, width))))
        for _ in range(RANDOMIZED_POWER_ITERATIONS):
            z, _ = np.linalg.qr(transposed_times(q))
            q, _ = np.linalg.qr(times(z))
        _, s, vt = np.linalg.svd(transposed_times(q, np.float64).T, full_matrices=False)  # B = Q^T Xc, (width, p)
        return s[:k] ** 2 / (n - 1), vt[:k]

    def transform(self, field: xr.DataArray) -> xr.DataArray:
        """Principal components of ``field`` (dims ``sample``, ``feature``), lazy.

        Returns
        -------
        DataArray (sample, mode)
            Projections of the weighted, centred field on the EOFs (units: field units).
        """
        # (x - m) W E^T = x (W E^T) - m W E^T: no centred copy of the field
        projector = self.weights_.values[:, None] * self.components_.values.T
        pcs = dsa.asarray(field.data) @ projector - self.mean_.values @ projector
        return xr.DataArray(pcs, dims=("sample", "mode"), coords={"sample": field["sample"], "mode": self.components_["mode"]})

    def patterns(self) -> xr.DataArray:
        """EOF patterns in physical units (field units per standard deviation of the PC).

        ``pattern = component / weight * sqrt(eigenvalue)``: the anomaly
        associated with a one-standard-deviation PC. Points of zero weight are NaN.
        """
        w = self.weights_.where(self.weights_ > 0)
        return self.components_ / w * np.sqrt(self.eigenvalues_)
