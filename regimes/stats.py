"""Regime statistics: frequencies, episodes, durations, transitions, composites.

Time order matters for episodes and transitions: a run of consecutive samples
(a *segment*) ends at a gap in the time axis or a season boundary, and no
episode or transition crosses it.
"""

from __future__ import annotations

import dask.array as dsa
import numpy as np
import xarray as xr


def frequency(labels: np.ndarray, states: np.ndarray) -> xr.DataArray:
    """Fraction of samples in each state (sums to 1 over states)."""
    labels = np.asarray(labels)
    counts = np.array([(labels == s).sum() for s in states], dtype=float)
    return xr.DataArray(counts / max(labels.size, 1), dims="regime", coords={"regime": states})


def frequency_by(labels: np.ndarray, groups: np.ndarray, states: np.ndarray, name: str) -> xr.DataArray:
    """Fraction of samples in each state within each group (e.g. month, season-year).

    Returns
    -------
    DataArray (name, regime); each row sums to 1.
    """
    labels, groups = np.asarray(labels), np.asarray(groups)
    keys = np.unique(groups)
    table = np.array([[np.mean(labels[groups == g] == s) for s in states] for g in keys])
    return xr.DataArray(table, dims=(name, "regime"), coords={name: keys, "regime": states})


def episodes(labels: np.ndarray, segment_start: np.ndarray) -> xr.Dataset:
    """Runs of one state within segments of consecutive samples.

    Parameters
    ----------
    labels : array (sample)
    segment_start : bool array (sample)
        True where a new segment begins (first sample, after a gap or season boundary).

    Returns
    -------
    xarray.Dataset
        Dim ``episode``: ``regime``, ``first`` (index of the first sample) and
        ``length`` (number of samples).
    """
    labels = np.asarray(labels)
    start = np.asarray(segment_start, dtype=bool).copy()
    if labels.size:
        start[0] = True
        start[1:] |= labels[1:] != labels[:-1]
    first = np.flatnonzero(start)
    length = np.diff(np.append(first, labels.size))
    return xr.Dataset(
        {"regime": ("episode", labels[first]), "first": ("episode", first), "length": ("episode", length)},
    )


def durations(runs: xr.Dataset, states: np.ndarray, min_length: int = 0) -> xr.Dataset:
    """Duration statistics per state, counting episodes of at least ``min_length`` samples.

    Returns
    -------
    xarray.Dataset
        ``episode_count``, ``mean_duration``, ``median_duration``,
        ``max_duration`` (regime) and ``duration_histogram`` (regime, duration)
        with durations 1..longest episode.
    """
    regime, length = runs["regime"].values, runs["length"].values
    counted = length >= max(min_length, 1)
    longest = int(length.max()) if length.size else 1
    bins = np.arange(1, longest + 1)
    stats = {"episode_count": [], "mean_duration": [], "median_duration": [], "max_duration": [], "duration_histogram": []}
    for s in states:
        lengths = length[(regime == s) & counted]
        stats["episode_count"].append(lengths.size)
        stats["mean_duration"].append(lengths.mean() if lengths.size else np.nan)
        stats["median_duration"].append(np.median(lengths) if lengths.size else np.nan)
        stats["max_duration"].append(lengths.max() if lengths.size else 0)
        stats["duration_histogram"].append(np.bincount(lengths, minlength=longest + 1)[1:])
    coords = {"regime": states, "duration": bins}
    return xr.Dataset(
        {
            "episode_count": ("regime", np.array(stats["episode_count"])),
            "mean_duration": ("regime", np.array(stats["mean_duration"], dtype=float)),
            "median_duration": ("regime", np.array(stats["median_duration"], dtype=float)),
            "max_duration": ("regime", np.array(stats["max_duration"])),
            "duration_histogram": (("regime", "duration"), np.array(stats["duration_histogram"])),
        },
        coords=coords,
    )


def _row_normalise(counts: np.ndarray) -> np.ndarray:
    totals = counts.sum(1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(totals > 0, counts / np.where(totals > 0, totals, 1), np.nan)


def transitions(labels: np.ndarray, segment_start: np.ndarray, states: np.ndarray) -> xr.Dataset:
    """Day-to-day transition counts and probabilities over consecutive samples only.

    ``P[i, j]`` = (number of steps from state i to state j) / (steps from i),
    the maximum-likelihood estimate of a first-order Markov chain (e.g.
    Wilks, Statistical Methods in the Atmospheric Sciences, Markov-chain
    chapter). Steps into a new segment are not counted. Also gives the
    episode-to-episode counts (the regime that follows when a regime ends).

    Returns
    -------
    xarray.Dataset
        ``transition_count``, ``transition_probability``,
        ``next_regime_count``, ``next_regime_probability``
        with dims ``(regime_from, regime_to)``.
    """
    labels = np.asarray(labels)
    index = {s: i for i, s in enumerate(states)}
    step = ~np.asarray(segment_start, dtype=bool)[1:]
    frm = np.array([index[v] for v in labels[:-1][step]], dtype=int)
    to = np.array([index[v] for v in labels[1:][step]], dtype=int)
    counts = np.zeros((len(states), len(states)), dtype=np.int64)
    np.add.at(counts, (frm, to), 1)
    following = counts.copy()
    np.fill_diagonal(following, 0)
    dims = ("regime_from", "regime_to")
    return xr.Dataset(
        {
            "transition_count": (dims, counts),
            "transition_probability": (dims, _row_normalise(counts.astype(float))),
            "next_regime_count": (dims, following),
            "next_regime_probability": (dims, _row_normalise(following.astype(float))),
        },
        coords={"regime_from": states, "regime_to": states},
    )


def composite_sums(field: xr.DataArray, labels: np.ndarray, states: np.ndarray) -> xr.Dataset:
    """Per-state count, sum and sum of squares of a (sample, feature) field (lazy).

    One streaming reduction: ``L^T X`` and ``L^T X^2`` with ``L`` the
    (sample x state) indicator matrix, accumulated in float64.
    """
    onehot = (np.asarray(labels)[:, None] == np.asarray(states)[None, :]).astype(np.float64)
    x = dsa.asarray(field.data)
    chunks = (x.chunks[0], (len(states),))
    ind = dsa.from_array(onehot, chunks=chunks)
    dims = ("regime", "feature")
    return xr.Dataset(
        {
            "count": ("regime", onehot.sum(0)),
            # einsum casts as it goes: float64 sums without float64 copies of the field
            "sum": (dims, dsa.einsum("ik,ij->kj", ind, x, dtype=np.float64)),
            "sum_of_squares": (dims, dsa.einsum("ik,ij,ij->kj", ind, x, x, dtype=np.float64)),
        },
        coords={"regime": states},
    )


def composites(sums: xr.Dataset) -> tuple[xr.DataArray, xr.DataArray]:
    """Mean and within-state standard deviation (ddof = 1) from :func:`composite_sums`."""
    n = sums["count"]
    mean = sums["sum"] / n.where(n > 0)
    var = (sums["sum_of_squares"] - n * mean**2) / (n - 1).where(n > 1)
    return mean, np.sqrt(var.clip(min=0))
