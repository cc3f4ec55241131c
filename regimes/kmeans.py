"""Compiled k-means: k-means++ seeding, and Lloyd iterations with Hamerly's distance bounds.

Seeding is the greedy k-means++ of Arthur & Vassilvitskii (2007, Proc.
ACM-SIAM Symp. Discrete Algorithms, 1027-1035): each new centre is the best
of a few candidate points drawn with probability proportional to the squared
distance to the nearest centre already chosen.

Lloyd's algorithm (Lloyd 1982, IEEE Trans. Inf. Theory 28, 129-137)
alternates between assigning every point to its nearest centre and moving
every centre to the mean of its points, until no assignment changes. Hamerly
(2010, "Making k-means even faster", Proc. SIAM Int. Conf. Data Mining,
130-140) gives the same iterates while skipping most distance computations:
each point keeps an upper bound on the distance to its own centre and a lower
bound on the distance to every other centre; a point whose upper bound is
strictly below both its lower bound and half the distance from its centre to
the nearest other centre cannot change cluster (a point on a tie is always
re-examined, so ties go to the first centre, as in the plain algorithm).

Each iteration first sorts out, point by point, which points the bounds
cannot settle (the candidates); their distances to every centre are then
computed in one pass vectorised over candidates. The kernels are compiled by
numba and release the GIL, so fits run in parallel on threads. Distances are
float64 (float32 would save about a tenth of the time, and the bounds would
have to be widened for its rounding) and no fast-math reordering is used, so
the iterates are Lloyd's (up to rounding, on ties closer than the last bits
of a distance) and the same input always gives the same result.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(nogil=True, cache=True)
def _distance(x, i, centres, j):
    """Euclidean distance from point ``x[i]`` to ``centres[j]``."""
    s = 0.0
    for t in range(x.shape[1]):
        diff = x[i, t] - centres[j, t]
        s += diff * diff
    return np.sqrt(s)


@numba.njit(nogil=True, cache=True)
def _to_point(columns, p, out):
    """``out[i]`` = squared distance from point i to point p; ``columns`` is the data transposed (d, n)."""
    out[:] = 0.0
    for t in range(columns.shape[0]):
        c = columns[t, p]
        for i in range(columns.shape[1]):
            diff = columns[t, i] - c
            out[i] += diff * diff


@numba.njit(nogil=True, cache=True)
def _seed_one(columns, first, draws, chosen, closest, cumulative, trial):
    """Greedy k-means++ for one restart: ``chosen`` (k) indices of the points picked as centres.

    ``draws`` (k - 1, trials) are uniform numbers in [0, 1); candidate s for centre j is the
    first point whose cumulative squared distance reaches ``draws[j - 1, s]`` times the total.
    """
    n = columns.shape[1]
    chosen[0] = first
    _to_point(columns, first, closest)
    for j in range(1, chosen.size):
        total = 0.0
        for i in range(n):
            total += closest[i]
            cumulative[i] = total
        best_sum, best = np.inf, -1
        for s in range(draws.shape[1]):
            candidate = min(np.searchsorted(cumulative, draws[j - 1, s] * total), n - 1)
            _to_point(columns, candidate, trial[s])
            reduced = 0.0
            for i in range(n):
                trial[s, i] = min(trial[s, i], closest[i])
                reduced += trial[s, i]
            if best < 0 or reduced < best_sum:
                best_sum, best, chosen[j] = reduced, s, candidate
        closest[:] = trial[best]


@numba.njit(nogil=True, cache=True)
def _seed_all(columns, first, draws, chosen):
    n = columns.shape[1]
    closest, cumulative = np.empty(n), np.empty(n)
    trial = np.empty((draws.shape[2], n))
    for r in range(first.size):
        _seed_one(columns, first[r], draws[:, r], chosen[r], closest, cumulative, trial)


def _finite(x: np.ndarray) -> np.ndarray:
    """``x`` as a C-ordered float64 array; a ValueError if it holds NaN or infinite values (PCs never do)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    if not np.isfinite(x).all():
        raise ValueError("k-means input holds NaN or infinite values")
    return x


def kmeans_plus_plus(x: np.ndarray, k: int, restarts: int, rng: np.random.Generator) -> np.ndarray:
    """Greedy k-means++ seeding (Arthur & Vassilvitskii 2007) of many restarts.

    The first centre of each restart is a point drawn uniformly. Each next
    centre is the best of ``2 + floor(ln k)`` candidates drawn with probability
    proportional to the squared distance to the nearest chosen centre: the one
    that most lowers the summed squared distances (the greedy variant, as in
    scikit-learn), which avoids most poor local minima.

    Parameters
    ----------
    x : array (n, d)
        The points (PCs: samples by modes), finite.
    k : int
        Number of centres (>= 1).
    restarts : int
        Number of independent seedings.
    rng : numpy.random.Generator
        All draws come from it, so the same generator state gives the same
        seeds. The draws of all restarts are taken at once, so the seeds of
        one restart depend on how many restarts there are.

    Returns
    -------
    centres : array (restarts, k, d)
        Initial centres, picked among the rows of ``x``.

    Raises
    ------
    ValueError
        If ``x`` holds NaN or infinite values.
    """
    x = _finite(x)
    first = rng.integers(x.shape[0], size=restarts)
    draws = rng.random((k - 1, restarts, 2 + int(np.log(k))))
    chosen = np.empty((restarts, k), dtype=np.intp)
    _seed_all(np.ascontiguousarray(x.T), first, draws, chosen)
    return x[chosen]


@numba.njit(nogil=True, cache=True)
def _candidate_distances(rows, candidates, m, centres, gathered, d2):
    """``d2[j, q]`` = squared distance from centre j to point ``candidates[q]``, for q < m.

    The candidates' rows of the data (n, d) are gathered as the columns of
    ``gathered`` (d, n) first, so that the inner loop runs contiguously over candidates.
    """
    d, k = rows.shape[1], centres.shape[0]
    for q in range(m):
        i = candidates[q]
        for t in range(d):
            gathered[t, q] = rows[i, t]
    for j in range(k):
        for q in range(m):
            d2[j, q] = 0.0
        for t in range(d):
            c = centres[j, t]
            for q in range(m):
                diff = gathered[t, q] - c
                d2[j, q] += diff * diff


@numba.njit(nogil=True, cache=True)
def _two_nearest(d2, m, index, best, second):
    """For each candidate q < m: nearest centre (the first, on ties) and the squared distances to the nearest two."""
    for q in range(m):
        index[q], best[q], second[q] = 0, d2[0, q], np.inf
    for j in range(1, d2.shape[0]):
        for q in range(m):  # selects, not branches: they vectorise and never mispredict
            s, b = d2[j, q], best[q]
            index[q] = j if s < b else index[q]
            second[q] = min(second[q], max(s, b))
            best[q] = min(b, s)


@numba.njit(nogil=True, cache=True)
def _nearest_of_candidates(rows, centres, candidates, m, scratch):
    """Nearest centre and the two smallest squared distances of ``candidates[:m]``, into ``scratch``."""
    gathered, d2, index, best, second = scratch
    _candidate_distances(rows, candidates, m, centres, gathered, d2)
    _two_nearest(d2, m, index, best, second)


@numba.njit(nogil=True, cache=True)
def _cluster_sums(x, labels, counts, sums):
    """Number of points ``counts`` (k) and coordinate sums ``sums`` (k, d) of each cluster, from scratch."""
    counts[:] = 0.0
    sums[:] = 0.0
    for i in range(x.shape[0]):
        counts[labels[i]] += 1.0
        for t in range(x.shape[1]):
            sums[labels[i], t] += x[i, t]


@numba.njit(nogil=True, cache=True)
def _assign_all(x, centres, labels, upper, lower, counts, sums, candidates, scratch):
    """Every point to its nearest centre, both bounds exact, cluster counts and sums from scratch."""
    n = x.shape[0]
    for i in range(n):
        candidates[i] = i
    _nearest_of_candidates(x, centres, candidates, n, scratch)
    index, best, second = scratch[2], scratch[3], scratch[4]
    for i in range(n):
        labels[i] = index[i]
        upper[i] = np.sqrt(best[i])
        lower[i] = np.sqrt(second[i])
    _cluster_sums(x, labels, counts, sums)


@numba.njit(nogil=True, cache=True)
def _relocate_empty(x, centres, labels, counts):
    """Move each empty cluster's centre onto the point farthest from its own centre.

    Returns 1 if a cluster was refilled, 0 if none was empty, and -1 if one is
    empty and cannot be refilled: every point lies on its centre, or is the
    only point of its cluster (fewer distinct points than clusters).
    """
    moved = 0
    for j in range(centres.shape[0]):
        if counts[j] > 0:
            continue
        far, distance = 0, 0.0
        for i in range(x.shape[0]):
            if counts[labels[i]] <= 1.0:  # keep every other cluster non-empty
                continue
            s = _distance(x, i, centres, labels[i])
            if s > distance:
                far, distance = i, s
        if distance == 0.0:
            return -1
        counts[labels[far]] -= 1.0
        labels[far] = j
        counts[j] = 1.0
        centres[j] = x[far]
        moved = 1
    return moved


@numba.njit(nogil=True, cache=True)
def _exact_means(x, labels, centres, counts, sums):
    """Centres to the means of their points, summed afresh (the running sums gather rounding over the iterations)."""
    _cluster_sums(x, labels, counts, sums)
    for j in range(centres.shape[0]):
        if counts[j] > 0:
            for t in range(x.shape[1]):
                centres[j, t] = sums[j, t] / counts[j]


@numba.njit(nogil=True, cache=True)
def _move_centres(centres, counts, sums, step, half):
    """Centres to the means of their points; ``step[j]`` how far centre j moved, ``half[j]`` half the distance to its nearest other centre."""
    k, d = centres.shape
    for j in range(k):
        s = 0.0
        for t in range(d):
            new = sums[j, t] / counts[j]
            diff = new - centres[j, t]
            s += diff * diff
            centres[j, t] = new
        step[j] = np.sqrt(s)
    for j in range(k):
        nearest = np.inf
        for m in range(k):
            if m != j:
                s = 0.0
                for t in range(d):
                    diff = centres[j, t] - centres[m, t]
                    s += diff * diff
                nearest = min(nearest, s)
        half[j] = 0.5 * np.sqrt(nearest)


@numba.njit(nogil=True, cache=True)
def _fit_one(x, centres, labels, max_iterations):
    """Lloyd iterations with Hamerly's bounds, in place on ``centres`` (k, d) and ``labels`` (n); returns the inertia."""
    n, d = x.shape
    k = centres.shape[0]
    upper, lower = np.empty(n), np.empty(n)
    counts, sums = np.empty(k), np.empty((k, d))
    step, half = np.empty(k), np.empty(k)
    candidates = np.empty(n, dtype=np.intp)
    scratch = (np.empty((d, n)), np.empty((k, n)), np.empty(n, dtype=np.intp), np.empty(n), np.empty(n))
    index, best, second = scratch[2], scratch[3], scratch[4]
    _assign_all(x, centres, labels, upper, lower, counts, sums, candidates, scratch)
    for _ in range(max_iterations):
        refilled = _relocate_empty(x, centres, labels, counts)
        if refilled < 0:
            break
        if refilled:
            _assign_all(x, centres, labels, upper, lower, counts, sums, candidates, scratch)
            continue
        _move_centres(centres, counts, sums, step, half)
        largest, runner_up, far = 0.0, 0.0, 0
        for j in range(k):
            if step[j] > largest:
                runner_up, largest, far = largest, step[j], j
            elif step[j] > runner_up:
                runner_up = step[j]
        # the bounds follow the centres; a point they cannot settle is a candidate
        m = 0
        for i in range(n):
            a = labels[i]
            upper[i] += step[a]
            lower[i] -= runner_up if a == far else largest
            candidates[m] = i  # kept only if the bounds fail: a compaction without branches
            m += upper[i] >= max(half[a], lower[i])
        _nearest_of_candidates(x, centres, candidates, m, scratch)
        changed = 0
        for q in range(m):
            i = candidates[q]
            j, a = index[q], labels[i]
            upper[i] = np.sqrt(best[q])
            lower[i] = np.sqrt(second[q])
            if j != a:
                labels[i] = j
                counts[a] -= 1.0
                counts[j] += 1.0
                for t in range(d):
                    sums[a, t] -= x[i, t]
                    sums[j, t] += x[i, t]
                changed += 1
        if changed == 0:
            _exact_means(x, labels, centres, counts, sums)
            break
    inertia = 0.0
    for i in range(n):
        s = _distance(x, i, centres, labels[i])
        inertia += s * s
    return inertia


@numba.njit(nogil=True, cache=True)
def _fit_all(x, centres, labels, inertia, max_iterations):
    for r in range(centres.shape[0]):
        inertia[r] = _fit_one(x, centres[r], labels[r], max_iterations)


def lloyd(x: np.ndarray, centres: np.ndarray, max_iterations: int = 300):
    """Lloyd's k-means from each of several sets of initial centres, until no assignment changes.

    Parameters
    ----------
    x : array (n, d)
        The points (PCs: samples by modes), finite.
    centres : array (r, k, d)
        Initial centres of each of r restarts.
    max_iterations : int
        Iterations per restart at most, after the first assignment; refilling
        an empty cluster counts as one.

    Returns
    -------
    centres : array (r, k, d)
        Final centres: the means of their points when the restart converged.
    labels : array (r, n) of intp
        Nearest final centre of each point (0..k-1).
    inertia : array (r,)
        Within-cluster sum of squared distances of each restart.

    Raises
    ------
    ValueError
        If ``x`` holds NaN or infinite values.

    Notes
    -----
    An empty cluster's centre is moved onto the point farthest from its own
    centre (common practice; scikit-learn does the same). With fewer distinct
    points than clusters a cluster stays empty and the restart stops there;
    :class:`regimes.cluster.KMeansRegimes` refuses such data beforehand.
    """
    x = _finite(x)
    centres = np.array(centres, dtype=np.float64, order="C")
    labels = np.empty((centres.shape[0], x.shape[0]), dtype=np.intp)
    inertia = np.empty(centres.shape[0])
    _fit_all(x, centres, labels, inertia, int(max_iterations))
    return centres, labels, inertia
