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
strictly below its lower bound, or below half the distance from its centre to
the nearest other centre, cannot change cluster (a point on a tie is always
re-examined, so ties go to the first centre, as in the plain algorithm).

The bounds are kept as offsets from running sums of the centres' moves, so a
point that keeps its centre is never rewritten. Each iteration tests every
point against its bounds in one read-only pass, then gathers the points the
bounds cannot settle (the candidates) and computes their distances to every
centre in one pass vectorised over candidates, a cache-sized block at a
time. Those distances are screened in float32 on data shifted to their mean
and scaled by a power of two, with a bound on the float32 error (derived in
:func:`_fit_one`): where the two nearest centres are further apart than
that, the nearest is the one float64 arithmetic finds; near ties are
computed again in float64. The bounds are widened by the float32 error and a
little more than their own rounding, so a point within rounding of a tie is
re-examined.

Every assignment is therefore the one float64 arithmetic makes for that
iteration's centres. The centres come from cluster sums updated point by
point, which can differ in the last bits from sums taken afresh (a point
within that rounding of a tie can then take another path than in a plain
implementation); a fit ends only after an iteration whose centres are means
summed afresh moves no point, so its result is a fixed point of Lloyd's
algorithm in float64. No fast-math reordering is used, and the same input
always gives the same result. The kernels are compiled by numba and release
the GIL, so fits run in parallel on threads.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(nogil=True, cache=True)
def _squared_distance(x, i, centres, j):
    """Squared Euclidean distance from point ``x[i]`` to ``centres[j]``, summed over coordinates in order."""
    s = 0.0
    for t in range(x.shape[1]):
        diff = x[i, t] - centres[j, t]
        s += diff * diff
    return s


@numba.njit(nogil=True, cache=True)
def _distance(x, i, centres, j):
    """Euclidean distance from point ``x[i]`` to ``centres[j]``."""
    return np.sqrt(_squared_distance(x, i, centres, j))


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


LARGEST = 1e150
"""Largest magnitude of a k-means coordinate: squared distances of points with up to 10**4
coordinates this large stay below float64's overflow (1.8e308)."""


def _finite(x: np.ndarray) -> np.ndarray:
    """``x`` as a C-ordered float64 array; a ValueError if it holds NaN, infinite or too large values (PCs never do)."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    if not np.isfinite(x).all():
        raise ValueError("k-means input holds NaN or infinite values")
    if x.size and np.abs(x).max() > LARGEST:
        raise ValueError(f"k-means input holds values above {LARGEST:g}: squared distances would overflow float64")
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
        If ``x`` holds NaN or infinite values, or values above :data:`LARGEST`.
    """
    x = _finite(x)
    first = rng.integers(x.shape[0], size=restarts)
    draws = rng.random((k - 1, restarts, 2 + int(np.log(k))))
    chosen = np.empty((restarts, k), dtype=np.intp)
    _seed_all(np.ascontiguousarray(x.T), first, draws, chosen)
    return x[chosen]


BLOCK = 128
"""Candidates per pass of the distance kernel: a block's float32 coordinates (d, BLOCK) and squared
distances (k, BLOCK) stay in the L1 cache (rows 4 KiB apart would collide in it)."""


def _single_precision(x: np.ndarray):
    """``x`` in float32 for the distance kernel: shifted to its mean and scaled by a power of two to norms <= 1.

    Returns ``(x32, origin, factor)`` with ``x32 = float32((x - origin) * factor)``.
    The power of two keeps the scaling exact and the squares far from float32's
    overflow and underflow, whatever the units of ``x``.
    """
    origin = x.mean(axis=0)
    shifted = x - origin
    radius = float(np.sqrt((shifted**2).sum(axis=1).max()))
    factor = 2.0 ** -np.ceil(np.log2(radius)) if radius > 0 else 1.0
    return np.ascontiguousarray(shifted * factor, dtype=np.float32), origin, factor


@numba.njit(nogil=True, cache=True)
def _to_single(centres, origin, factor, out):
    """``out`` = float32((centres - origin) * factor), the centres as the kernel sees the points; returns max squared norm."""
    largest = 0.0
    for j in range(centres.shape[0]):
        s = 0.0
        for t in range(centres.shape[1]):
            v = (centres[j, t] - origin[t]) * factor
            out[j, t] = v
            s += v * v
        largest = max(largest, s)
    return largest


@numba.njit(nogil=True, cache=True)
def _nearest_exact(x, i, centres):
    """Nearest centre of point ``x[i]`` (the first, on ties) and the squared distances to the nearest two, in float64."""
    index, best, second = 0, np.inf, np.inf
    for j in range(centres.shape[0]):
        s = _squared_distance(x, i, centres, j)
        index = j if s < best else index
        second = min(second, max(s, best))
        best = min(best, s)
    return index, best, second


@numba.njit(nogil=True, cache=True)
def _nearest_in_block(points, centres, tolerance, unscale, candidates, index, best, second, scratch):
    """Nearest centre (the first, on ties) of each point ``candidates[q]`` (at most BLOCK), and bounds on the distances.

    ``points`` and ``centres`` are pairs (float64 as given, float32 as
    :func:`_single_precision` makes them). Squared distances are screened in
    float32: its error is at most ``tolerance`` (in the scaled units), so a
    candidate whose two nearest float32 distances are more than twice that apart
    has the nearest centre float64 arithmetic would find; the others (near ties)
    are computed again in float64. So ``index[q]`` is float64's choice,
    ``best[q]`` an upper bound on the distance to that centre and ``second[q]`` a
    lower bound on the distance to every other centre (distances, not squared, in
    the units of the points). The candidates' float32 coordinates are gathered as
    the columns of a (d, BLOCK) array first, so that the inner loops run
    contiguously over candidates and vectorise.
    """
    x, x32 = points
    centres64, centres32 = centres
    gathered, d2, ranks, nearest, runner_up = scratch
    m, d, k = candidates.size, x.shape[1], centres64.shape[0]
    for q in range(m):
        i = candidates[q]
        for t in range(d):
            gathered[t, q] = x32[i, t]
    for j in range(k):
        for q in range(m):
            d2[j, q] = 0.0
        for t in range(d):
            c = centres32[j, t]
            for q in range(m):
                diff = gathered[t, q] - c
                d2[j, q] += diff * diff
    for q in range(m):
        ranks[0, q], nearest[0, q], runner_up[0, q] = 0, d2[0, q], np.inf
    for j in range(1, k):
        old, new = (j - 1) % 2, j % 2
        for q in range(m):  # from one row to the other, with selects: no branches, no (slow) masked stores
            s, near = d2[j, q], nearest[old, q]
            ranks[new, q] = j if s < near else ranks[old, q]
            runner_up[new, q] = min(runner_up[old, q], max(s, near))
            nearest[new, q] = min(near, s)
    last = (k - 1) % 2
    ties = 0
    for q in range(m):
        b, s = np.float64(nearest[last, q]), np.float64(runner_up[last, q])
        index[q] = ranks[last, q]
        best[q] = np.sqrt(b + tolerance) * unscale
        second[q] = np.sqrt(max(s - tolerance, 0.0)) * unscale
        ties += not s - b > 2.0 * tolerance  # "not >": a NaN (float32 overflow, centres absurdly far) is a tie too
    if ties:
        for q in range(m):
            if not np.float64(runner_up[last, q]) - np.float64(nearest[last, q]) > 2.0 * tolerance:
                j, b, s = _nearest_exact(x, candidates[q], centres64)
                index[q], best[q], second[q] = j, np.sqrt(b), np.sqrt(s)


@numba.njit(nogil=True, cache=True)
def _nearest_of_candidates(points, centres, tolerance, unscale, candidates, m, index, best, second, scratch):
    """:func:`_nearest_in_block` for ``candidates[:m]``, a block at a time; results in ``index``, ``best``, ``second`` [:m]."""
    for first in range(0, m, BLOCK):
        last = min(first + BLOCK, m)
        _nearest_in_block(points, centres, tolerance, unscale, candidates[first:last],
                          index[first:last], best[first:last], second[first:last], scratch)


@numba.njit(nogil=True, cache=True)
def _cluster_sums(x, labels, counts, sums):
    """Number of points ``counts`` (k) and coordinate sums ``sums`` (k, d) of each cluster, from scratch."""
    counts[:] = 0.0
    sums[:] = 0.0
    for i in range(x.shape[0]):
        a = np.uint64(labels[i])  # unsigned: no wrap-around of negative indices to compile in
        counts[a] += 1.0
        for t in range(x.shape[1]):
            sums[a, t] += x[i, t]


@numba.njit(nogil=True, cache=True)
def _assign_all(points, centres, tolerance, unscale, labels, bounds, counts, sums, work):
    """Every point to its nearest centre, fresh bounds and their drifts zero, cluster counts and sums from scratch."""
    x = points[0]
    upper, lower, drift, fall = bounds
    candidates, index, best, second, scratch = work
    n = x.shape[0]
    for i in range(n):
        candidates[i] = i
    _nearest_of_candidates(points, centres, tolerance, unscale, candidates, n, index, best, second, scratch)
    for i in range(n):
        labels[i], upper[i], lower[i] = index[i], best[i], second[i]
    drift[:] = 0.0
    fall[:] = 0.0
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
def _farthest_from_first(points, x):
    """Largest distance of a row of ``points`` from the first point ``x[0]``."""
    far = 0.0
    for i in range(points.shape[0]):
        far = max(far, _distance(points, i, x, 0))
    return far


@numba.njit(nogil=True, cache=True)
def _inertia(x, centres, labels):
    """Within-cluster sum of squared distances (units of ``x`` squared)."""
    total = 0.0
    for i in range(x.shape[0]):
        total += _squared_distance(x, i, centres, np.uint64(labels[i]))
    return total


@numba.njit(nogil=True, cache=True)
def _fit_one(points, origin, factor, centres, labels, max_iterations, spread):
    """Lloyd iterations with Hamerly's bounds, in place on ``centres`` (k, d) and ``labels`` (n); returns the inertia.

    ``points`` is the pair (x, x32) of :func:`_single_precision`, with its
    ``origin`` and ``factor``. A point's bounds are kept as offsets from running
    sums over the centres: the upper bound is ``upper[i] + drift[a]``, with
    ``drift[a]`` the distance centre a has moved in all, and the lower bound
    ``lower[i] - fall[a]``, with ``fall[a]`` the summed largest moves of the other
    centres. So the bounds of a point that keeps its centre are never rewritten,
    and the test of all points only reads.

    ``spread`` is the largest distance of a point from the first point. Centres
    are means of points or points, so they stay in the points' convex hull once
    they have moved, and no distance between a point and a centre exceeds ``scale``.
    """
    x = points[0]
    n, d = x.shape
    k = centres.shape[0]
    bounds = (np.empty(n), np.empty(n), np.empty(k), np.empty(k))
    upper, lower, drift, fall = bounds
    counts, sums = np.empty(k), np.empty((k, d))
    step, half = np.empty(k), np.empty(k)
    near, away = np.empty(k), np.empty(k)
    work = (np.empty(n, dtype=np.intp), np.empty(n, dtype=np.intp), np.empty(n), np.empty(n),
            (np.empty((d, BLOCK), dtype=np.float32), np.empty((k, BLOCK), dtype=np.float32),
             np.empty((2, BLOCK), dtype=np.intp), np.empty((2, BLOCK), dtype=np.float32), np.empty((2, BLOCK), dtype=np.float32)))
    candidates, index, best, second, scratch = work
    failed = np.empty(n, dtype=np.uint8)
    pair = (centres, np.empty((k, d), dtype=np.float32))
    # Error of a float32 squared distance against float64's, in the scaled units where no point or centre has
    # a norm above r (r = 1, or the initial centres' largest norm), with u = 2**-24: rounding the coordinates and
    # their difference errs by e_t <= 2u (|y_t| + |c_t|), so |e| <= 4ur; the squares then err by at most
    # 2|e||y - c| + |e|^2 <= 16.1ur^2 (|y - c| <= 2r), and rounding the d squares and their sum by d u 4r^2 more;
    # float64's own rounding is far below. In all, under (4d + 17) u r^2: the tolerance has some room. Only where
    # float64's squares are subnormal (data of size 1e-154 or less) does its absolute rounding, up to 2**-1074
    # per square and per sum, count: the second term (inf if factor**2 overflows: then every candidate goes
    # to float64).
    tolerance = ((4 * d + 20) * 2.0**-24 * max(1.0, _to_single(centres, origin, factor, pair[1]))
                 + 2 * d * 2.0**-1074 * factor * factor)
    unscale = 1.0 / factor
    scale = 2.0 * max(spread, _farthest_from_first(centres, x))
    _assign_all(points, pair, tolerance, unscale, labels, bounds, counts, sums, work)
    moves = 0  # since the bounds were last set afresh
    fresh = True  # the cluster sums were just taken afresh, not updated point by point
    for _ in range(max_iterations):
        refilled = _relocate_empty(x, centres, labels, counts)
        if refilled < 0:
            break
        if refilled:
            _to_single(centres, origin, factor, pair[1])
            _assign_all(points, pair, tolerance, unscale, labels, bounds, counts, sums, work)
            moves, fresh = 0, True
            continue
        _move_centres(centres, counts, sums, step, half)
        _to_single(centres, origin, factor, pair[1])
        moves += 1
        largest, runner_up, far = 0.0, 0.0, 0
        for j in range(k):
            if step[j] > largest:
                runner_up, largest, far = largest, step[j], j
            elif step[j] > runner_up:
                runner_up = step[j]
        for j in range(k):
            drift[j] += step[j]
            fall[j] += runner_up if j == far else largest
        # widen the bounds by more than the rounding of the running sums and offsets (about 1e-13 of
        # the data's spread), so that a point within rounding of a tie is re-examined too
        margin = (moves + d + 16) * np.finfo(np.float64).eps * (scale + drift.max() + fall.max())
        # point i (centre a) is a candidate when upper[i] + drift[a] + margin >= max(half[a], lower[i] - fall[a])
        for j in range(k):
            near[j] = half[j] - drift[j] - margin
            away[j] = fall[j] + drift[j] + margin
        for i in range(n):  # first the test, then the compaction: two short loops without unpredictable branches
            a = np.uint64(labels[i])  # unsigned: no wrap-around of negative indices to compile in
            failed[i] = upper[i] >= max(near[a], lower[i] - away[a])
        m = 0
        for i in range(n):
            candidates[m] = i  # kept only if the bounds failed
            m += failed[i]
        _nearest_of_candidates(points, pair, tolerance, unscale, candidates, m, index, best, second, scratch)
        changed = 0
        for q in range(m):
            i, j = candidates[q], np.uint64(index[q])
            a = np.uint64(labels[i])
            upper[i] = best[q] - drift[j]
            lower[i] = second[q] + fall[j]
            if j != a:
                labels[i] = j
                counts[a] -= 1.0
                counts[j] += 1.0
                for t in range(d):
                    sums[a, t] -= x[i, t]
                    sums[j, t] += x[i, t]
                changed += 1
        if changed == 0:
            if fresh:
                break  # the centres are the means of their points summed afresh, and no point moved: a fixed point
            _cluster_sums(x, labels, counts, sums)  # afresh, so that the next centres are exact means, checked once more
        fresh = changed == 0
    return _inertia(x, centres, labels)


@numba.njit(nogil=True, cache=True)
def _fit_all(points, origin, factor, centres, labels, inertia, max_iterations):
    spread = _farthest_from_first(points[0], points[0])
    for r in range(centres.shape[0]):
        inertia[r] = _fit_one(points, origin, factor, centres[r], labels[r], max_iterations, spread)


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
        If ``x`` holds NaN or infinite values, or values above :data:`LARGEST`.

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
    x32, origin, factor = _single_precision(x)
    _fit_all((x, x32), origin, factor, centres, labels, inertia, int(max_iterations))
    return centres, labels, inertia
