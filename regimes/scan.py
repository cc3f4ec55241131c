"""Choosing the number of regimes: classifiability, red-noise significance, stability.

For each k of a range, :func:`scan` clusters the PCs with many k-means++
restarts (the compiled k-means of :mod:`regimes.kmeans`) and reports

* the classifiability index of Michelangeli, Vautard & Legras (1995,
  J. Atmos. Sci. 52, 1237-1256) over pairs of restarts (:func:`classifiability`);
* its significance against red-noise surrogates: independent AR(1) series per
  PC with the PC's lag-1 autocorrelation and variance, generated segment by
  segment so that season boundaries are respected (:func:`ar1_surrogates`);
* the ratio of within-cluster to total variance, the silhouette
  (Rousseeuw 1987, J. Comput. Appl. Math. 20, 53-65), and the BIC and AIC of
  a Gaussian mixture;
* stability: the pattern correlation of centroids matched one to one by the
  Hungarian method (Kuhn 1955, Nav. Res. Logist. Q. 2, 83-97) between fits on
  two halves of the season-years, and between the full fit and fits on
  bootstrap resamples of season-years.

:func:`recommend` applies the rule stated in :data:`RULE`. Surrogates run in
parallel over a thread pool (the compiled Lloyd kernel and numpy's matrix
products release the GIL); each surrogate has its own generator spawned from
one :class:`numpy.random.SeedSequence`, so results do not depend on the
number of workers.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import xarray as xr
from scipy.optimize import linear_sum_assignment
from threadpoolctl import threadpool_limits

from .cluster import GaussianMixtureRegimes
from .errors import UserError
from .kmeans import kmeans_plus_plus, lloyd

STABLE = 0.9
"""Split-half stability at or above which a k counts as stable in the rule."""

RULE = (
    "the smallest k whose classifiability is significant against red noise at {level:g} % "
    "and whose split-half stability is >= {stable:g}; else the significant k of highest classifiability; "
    "else none (no k is distinguishable from red noise)"
)

TIE = 1e-4
"""Indices closer than this count as tied; an observed index tied with the surrogates' quantile is not
significant (at small k both are often 1 up to rounding)."""

SILHOUETTE_SAMPLES = 3000
"""Silhouettes are computed on a seeded subsample of this many samples at most."""


def parse_k_range(spec: str) -> list[int]:
    """``"2-8"`` -> [2, ..., 8]; ``"3"`` -> [3]; ``"2,4,6"`` -> [2, 4, 6].

    Raises
    ------
    UserError
        If the text is not such a range of integers >= 2.
    """
    text = str(spec).strip()
    try:
        if "-" in text:
            low, high = (int(p) for p in text.split("-"))
            ks = list(range(low, high + 1))
        else:
            ks = [int(p) for p in text.split(",")]
    except ValueError:
        raise UserError(f"--k '{spec}': expected a range like 2-8 or a list like 2,3,4 of integers") from None
    if not ks or min(ks) < 2 or len(set(ks)) != len(ks):
        raise UserError(f"--k '{spec}': expected distinct integers >= 2 with the first <= the last, e.g. 2-8")
    return sorted(ks)


# --------------------------------------------------------------------------
# classifiability
# --------------------------------------------------------------------------


def pattern_correlation(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Anomaly (uncentred) correlation between the rows of ``a`` (..., k, d) and of ``b`` (..., m, d).

    Returns an array (..., k, m). PCs are anomalies, so the anomaly correlation
    coefficient is the cosine of the angle between centroids in PC space.
    """
    an = a / np.maximum(np.linalg.norm(a, axis=-1, keepdims=True), 1e-300)
    bn = b / np.maximum(np.linalg.norm(b, axis=-1, keepdims=True), 1e-300)
    return np.einsum("...kd,...md->...km", an, bn)


def pair_similarity(centres: np.ndarray) -> np.ndarray:
    """A(P_m, P_n) for every ordered pair of restarts.

    A(P, Q) = min over clusters i of P of max over clusters j of Q of the
    anomaly correlation between centroids i and j (Michelangeli et al. 1995).

    Parameters
    ----------
    centres : array (r, k, d)

    Returns
    -------
    array (r, r); the diagonal is 1 up to rounding.
    """
    r, k, d = centres.shape
    unit = (centres / np.maximum(np.linalg.norm(centres, axis=-1, keepdims=True), 1e-300)).reshape(r * k, d)
    corr = (unit @ unit.T).reshape(r, k, r, k)  # [m, i, n, j]: centroid i of restart m against centroid j of restart n
    return corr.max(3).min(1)


def classifiability(centres: np.ndarray) -> float:
    """Classifiability index c = mean over ordered pairs m != n of restarts of A(P_m, P_n).

    Michelangeli, Vautard & Legras (1995), J. Atmos. Sci. 52, 1237-1256.
    c = 1 when every restart finds the same centroids.
    """
    r = centres.shape[0]
    if r < 2:
        raise ValueError("classifiability needs at least two restarts")
    a = pair_similarity(np.asarray(centres, dtype=np.float64))
    return float((a.sum() - np.trace(a)) / (r * (r - 1)))


def restart_fits(x: np.ndarray, k: int, restarts: int, rng: np.random.Generator, max_iterations: int = 300):
    """k-means from ``restarts`` k-means++ seedings (:mod:`regimes.kmeans`): centres (r, k, d), labels, inertia."""
    start = kmeans_plus_plus(x, k, restarts, rng)
    return lloyd(x, start, max_iterations)


# --------------------------------------------------------------------------
# red-noise surrogates
# --------------------------------------------------------------------------


def _segment_ids(segment_start: np.ndarray) -> np.ndarray:
    starts = np.asarray(segment_start, dtype=bool).copy()
    if starts.size:
        starts[0] = True
    return np.cumsum(starts) - 1


def ar1_parameters(x: np.ndarray, segment_start: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, variance and lag-1 autocorrelation of each column, lag pairs taken within segments only.

    Returns
    -------
    mean, variance, lag1 : arrays (d,); lag1 clipped to [-0.999, 0.999].
    """
    x = np.asarray(x, dtype=np.float64)
    mean = x.mean(0)
    variance = x.var(0)
    centred = x - mean
    inside = ~np.asarray(segment_start, dtype=bool)[1:]
    prev, curr = centred[:-1][inside], centred[1:][inside]
    denom = np.sqrt((prev**2).sum(0) * (curr**2).sum(0))
    lag1 = np.where(denom > 0, (prev * curr).sum(0) / np.where(denom > 0, denom, 1.0), 0.0)
    return mean, variance, np.clip(lag1, -0.999, 0.999)


def ar1_surrogates(
    mean: np.ndarray, variance: np.ndarray, lag1: np.ndarray, segment_start: np.ndarray, rng: np.random.Generator
) -> np.ndarray:
    """One red-noise surrogate (n, d): independent stationary AR(1) series per column.

    x[t] = mean + phi (x[t-1] - mean) + sqrt(1 - phi^2) sigma e[t], restarted from the
    stationary distribution N(mean, sigma^2) at each segment start, so that no
    memory crosses a season boundary or a gap.
    """
    seg = _segment_ids(segment_start)
    n, d = seg.size, mean.size
    first = np.searchsorted(seg, np.arange(seg[-1] + 1 if n else 0))
    position = np.arange(n) - first[seg]
    length = int(position.max()) + 1 if n else 0
    sigma = np.sqrt(variance)
    shocks = rng.standard_normal((first.size, length, d))
    grid = np.empty_like(shocks)
    grid[:, 0] = shocks[:, 0] * sigma
    scale = np.sqrt(1.0 - lag1**2) * sigma
    for t in range(1, length):
        grid[:, t] = lag1 * grid[:, t - 1] + scale * shocks[:, t]
    return grid[seg, position] + mean


# --------------------------------------------------------------------------
# stability
# --------------------------------------------------------------------------


def matched_correlation(a: np.ndarray, b: np.ndarray) -> float:
    """Mean anomaly correlation of the centroids of ``a`` (k, d) and ``b`` (k, d) matched one to one.

    The matching maximises the summed correlation (Hungarian method, Kuhn 1955;
    scipy.optimize.linear_sum_assignment).
    """
    corr = pattern_correlation(a, b)
    rows, cols = linear_sum_assignment(-corr)
    return float(corr[rows, cols].mean())


def _fit_centroids(x: np.ndarray, k: int, restarts: int, rng: np.random.Generator, max_iterations: int) -> np.ndarray:
    centres, _, inertia = restart_fits(x, k, restarts, rng, max_iterations)
    return centres[int(np.argmin(inertia))]


def split_half_stability(x, season_year, k, restarts, rng, max_iterations=300) -> float:
    """Matched centroid correlation between fits on the first and the second half of the season-years."""
    years = np.unique(season_year)
    if years.size < 2:
        return float("nan")
    half = np.isin(season_year, years[: years.size // 2])
    if half.sum() < k or (~half).sum() < k:
        return float("nan")
    a = _fit_centroids(x[half], k, restarts, rng, max_iterations)
    b = _fit_centroids(x[~half], k, restarts, rng, max_iterations)
    return matched_correlation(a, b)


def bootstrap_stability(x, season_year, k, reference, restarts, resamples, rng, max_iterations=300) -> float:
    """Mean over bootstrap resamples of season-years of the matched correlation with ``reference`` centroids."""
    years = np.unique(season_year)
    rows = [np.flatnonzero(season_year == y) for y in years]
    scores = []
    for _ in range(resamples):
        pick = rng.integers(years.size, size=years.size)
        sample = x[np.concatenate([rows[i] for i in pick])]
        if sample.shape[0] < k:
            continue
        scores.append(matched_correlation(_fit_centroids(sample, k, restarts, rng, max_iterations), reference))
    return float(np.mean(scores)) if scores else float("nan")


# --------------------------------------------------------------------------
# the scan
# --------------------------------------------------------------------------


def _surrogate_indices(params, segment_start, ks, restarts, max_iterations, seed: np.random.SeedSequence) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = ar1_surrogates(*params, segment_start, rng)
    return np.array([classifiability(restart_fits(x, k, restarts, rng, max_iterations)[0]) for k in ks])


def surrogate_classifiability(
    x, segment_start, ks, restarts, surrogates, rng, max_iterations=300, workers=None
) -> np.ndarray:
    """Classifiability of each of ``surrogates`` red-noise surrogates of ``x`` at each k: array (surrogate, k)."""
    params = ar1_parameters(x, segment_start)
    seeds = np.random.SeedSequence(int(rng.integers(2**63))).spawn(surrogates)
    workers = workers or os.cpu_count() or 1
    run = lambda s: _surrogate_indices(params, segment_start, ks, restarts, max_iterations, s)  # noqa: E731
    if workers == 1 or surrogates <= 1:
        out = [run(s) for s in seeds]
    else:
        # one BLAS thread per worker: the workers already fill the cores, and nested threads oversubscribe them
        with threadpool_limits(limits=1, user_api="blas"), ThreadPoolExecutor(max_workers=workers) as pool:
            out = list(pool.map(run, seeds))
    return np.array(out).reshape(surrogates, len(ks))


def recommend(ds: xr.Dataset, stable: float = STABLE) -> tuple[int, str]:
    """Apply :data:`RULE` to a scan table; returns (k or 0 when none, one line saying what was chosen and why)."""
    level = 100 * float(ds.attrs["confidence_level"])
    rule = RULE.format(level=level, stable=stable)
    ks = ds["k"].values
    significant = ds["significant"].values.astype(bool)
    stability = ds["split_half_stability"].values
    chosen = [k for k, s, h in zip(ks, significant, stability) if s and np.isfinite(h) and h >= stable]
    if chosen:
        k = int(chosen[0])
        why = f"significant at {level:g} % and split-half stability {float(ds['split_half_stability'].sel(k=k)):.2f}"
    elif significant.any():
        c = ds["classifiability"].values
        k = int(ks[significant][np.argmax(c[significant])])
        why = f"significant at {level:g} % with the highest classifiability ({float(ds['classifiability'].sel(k=k)):.3f}), no significant k is stable"
    else:
        return 0, f"recommendation: none (no k in {ks.min()}..{ks.max()} is significant against red noise at {level:g} %); rule: {rule}"
    return k, f"recommendation: k = {k} ({why}); rule: {rule}"


def scan(
    pcs: xr.DataArray,
    segment_start: np.ndarray,
    season_year: np.ndarray,
    ks,
    rng: np.random.Generator,
    restarts: int = 50,
    surrogates: int = 100,
    confidence: float = 0.90,
    bootstrap: int = 20,
    stability_restarts: int = 10,
    mixture_restarts: int = 3,
    mixtures: bool = True,
    max_iterations: int = 300,
    workers: int | None = None,
) -> xr.Dataset:
    """Scan the number of regimes k on PCs.

    Parameters
    ----------
    pcs : DataArray (sample, mode)
    segment_start : array (sample) of bool
        True where a run of consecutive days begins (season start or gap).
    season_year : array (sample) of int
    ks : iterable of int
        Values of k (each >= 2).
    rng : numpy.random.Generator
        The job's generator; every random draw comes from it or from
        generators spawned from one seed drawn from it.
    restarts : int
        k-means++ restarts per fit for the classifiability (>= 2).
    surrogates : int
        Number of red-noise surrogates (0 skips the significance test).
    confidence : float
        The regimes are significant at k when the observed classifiability
        exceeds this quantile of the surrogate indices.
    bootstrap : int
        Bootstrap resamples of season-years for the bootstrap stability.
    stability_restarts, mixture_restarts : int
        Restarts of each stability fit and of each Gaussian-mixture fit.
    mixtures : bool
        Fit Gaussian mixtures for BIC and AIC (NaN otherwise).
    workers : int, optional
        Threads for the surrogates (default: all cores).

    Returns
    -------
    xarray.Dataset with dim ``k`` (and ``surrogate``), the rule and the
    recommendation in its attributes.
    """
    ks = [int(k) for k in ks]
    x = np.asarray(pcs.transpose("sample", "mode").values, dtype=np.float64)
    segment_start = np.asarray(segment_start, dtype=bool)
    season_year = np.asarray(season_year)
    n = x.shape[0]
    if restarts < 2:
        raise UserError(f"restarts = {restarts}: the classifiability needs at least 2 restarts")
    if max(ks) > n:
        raise UserError(f"k = {max(ks)} is larger than the number of selected days ({n}); lower the --k range")
    if not 0 < confidence < 1:
        raise UserError(f"confidence = {confidence}: expected a fraction between 0 and 1")
    from sklearn.metrics import silhouette_score  # imported on use: it is slow to import and only the scan needs it

    total = float(((x - x.mean(0)) ** 2).sum())
    rows = {name: np.full(len(ks), np.nan) for name in (
        "classifiability", "within_total_variance_ratio", "silhouette", "bic", "aic", "split_half_stability", "bootstrap_stability")}
    for i, k in enumerate(ks):
        centres, labels, inertia = restart_fits(x, k, restarts, rng, max_iterations)
        best = int(np.argmin(inertia))
        rows["classifiability"][i] = classifiability(centres)
        rows["within_total_variance_ratio"][i] = float(inertia[best]) / total if total > 0 else np.nan
        subsample = min(n, SILHOUETTE_SAMPLES)
        seed = int(rng.integers(2**31 - 1))
        if np.unique(labels[best]).size > 1:
            rows["silhouette"][i] = silhouette_score(x, labels[best], sample_size=subsample, random_state=seed)
        if mixtures:
            gm = GaussianMixtureRegimes(k, restarts=mixture_restarts, max_iterations=max_iterations, rng=rng).fit(pcs)
            rows["bic"][i], rows["aic"][i] = gm.bic_, gm.aic_
        rows["split_half_stability"][i] = split_half_stability(x, season_year, k, stability_restarts, rng, max_iterations)
        rows["bootstrap_stability"][i] = bootstrap_stability(
            x, season_year, k, centres[best], stability_restarts, bootstrap, rng, max_iterations)
    if surrogates > 0:
        noise = surrogate_classifiability(x, segment_start, ks, restarts, surrogates, rng, max_iterations, workers)
    else:
        noise = np.full((0, len(ks)), np.nan)
    quantile = np.quantile(noise, confidence, axis=0) if surrogates > 0 else np.full(len(ks), np.nan)
    significant = (rows["classifiability"] > quantile + TIE) if surrogates > 0 else np.zeros(len(ks), bool)
    exceed = ((noise >= rows["classifiability"][None, :] - TIE).sum(0) + 1) / (surrogates + 1)

    coords = {"k": ("k", np.array(ks, dtype=np.int32))}
    ds = xr.Dataset(coords=coords)
    ds["k"].attrs = {"long_name": "number of regimes", "units": "1"}
    described = {
        "classifiability": ("classifiability index (Michelangeli, Vautard & Legras 1995): mean over ordered pairs of distinct restarts "
                            "of the minimum over clusters of the best anomaly correlation of centroids"),
        "within_total_variance_ratio": "within-cluster sum of squares of the best restart / total sum of squares, in PC space",
        "silhouette": f"mean silhouette of the best restart (Rousseeuw 1987), on a seeded subsample of at most {SILHOUETTE_SAMPLES} days",
        "bic": "Bayesian information criterion of a full-covariance Gaussian mixture (Schwarz 1978)",
        "aic": "Akaike information criterion of a full-covariance Gaussian mixture (Akaike 1974)",
        "split_half_stability": "mean anomaly correlation of Hungarian-matched centroids fitted on the first and second half of the season-years",
        "bootstrap_stability": f"mean over {bootstrap} bootstrap resamples of season-years of the matched centroid correlation with the full fit",
    }
    for name, text in described.items():
        ds[name] = ("k", rows[name], {"long_name": text, "units": "1"})
    ds["surrogate_classifiability"] = (("surrogate", "k"), noise, {
        "long_name": "classifiability of red-noise surrogates (independent AR(1) per PC, same lag-1 autocorrelation and variance, "
                     "restarted at each segment start)", "units": "1"})
    ds["surrogate_quantile"] = ("k", quantile, {"long_name": f"{confidence:g} quantile of the surrogate classifiability", "units": "1"})
    ds["p_value"] = ("k", exceed, {"long_name": "(1 + surrogates with classifiability >= observed) / (1 + surrogates)", "units": "1"})
    ds["significant"] = ("k", significant.astype(np.int8), {
        "long_name": f"classifiability above the {confidence:g} quantile of the surrogates",
        "flag_values": np.array([0, 1], dtype=np.int8), "flag_meanings": "not_significant significant"})
    ds.attrs.update(
        confidence_level=float(confidence), surrogates=int(surrogates), restarts=int(restarts), bootstrap_resamples=int(bootstrap),
        stability_restarts=int(stability_restarts), samples=int(n), modes=int(x.shape[1]),
    )
    k, line = recommend(ds)
    ds.attrs.update(recommended_k=int(k), recommendation=line, rule=RULE.format(level=100 * confidence, stable=STABLE))
    return ds


def table(ds: xr.Dataset) -> str:
    """The scan as a plain-text table, one row per k."""
    head = f"{'k':>3} {'classif':>8} {'q_noise':>8} {'p':>6} {'sig':>4} {'W/T':>6} {'silh':>6} {'split':>6} {'boot':>6} {'BIC':>12} {'AIC':>12}"
    lines = [head]
    for i, k in enumerate(ds["k"].values):
        v = {name: float(ds[name].values[i]) for name in (
            "classifiability", "surrogate_quantile", "p_value", "within_total_variance_ratio", "silhouette",
            "split_half_stability", "bootstrap_stability", "bic", "aic")}
        lines.append(
            f"{k:>3} {v['classifiability']:8.4f} {v['surrogate_quantile']:8.4f} {v['p_value']:6.3f} "
            f"{'yes' if ds['significant'].values[i] else 'no':>4} {v['within_total_variance_ratio']:6.3f} {v['silhouette']:6.3f} "
            f"{v['split_half_stability']:6.3f} {v['bootstrap_stability']:6.3f} {v['bic']:12.1f} {v['aic']:12.1f}"
        )
    return "\n".join(lines)
