"""Invariants of the regime statistics on random label sequences (hypothesis property tests)."""

import datetime

import numpy as np
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from regimes import data, stats
from regimes.cluster import KMeansRegimes
from regimes.errors import UserError
from regimes.stacking import Layout

sequences = st.integers(1, 5).flatmap(
    lambda k: st.tuples(
        st.just(k),
        st.lists(st.integers(1, k), min_size=1, max_size=120),
        st.lists(st.booleans(), min_size=120, max_size=120),
    )
)


@settings(max_examples=200, deadline=None)
@given(sequences)
def test_statistics_invariants(case):
    k, labels, breaks = case
    labels = np.array(labels)
    starts = np.array(breaks[: labels.size])
    starts[0] = True
    states = np.arange(1, k + 1)

    assert np.isclose(float(stats.frequency(labels, states).sum()), 1.0)
    runs = stats.episodes(labels, starts)
    assert int(runs["length"].sum()) == labels.size
    # no episode crosses a segment start, and consecutive episodes in a segment differ
    first = runs["first"].values
    for f, n in zip(first, runs["length"].values):
        assert not starts[f + 1 : f + n].any()
        assert np.all(labels[f : f + n] == labels[f])

    tr = stats.transitions(labels, starts, states)
    counts = tr["transition_count"].values
    assert counts.sum() == labels.size - starts.sum()
    rows = tr["transition_probability"].sum("regime_to").values
    has_steps = counts.sum(1) > 0
    np.testing.assert_allclose(rows[has_steps], 1.0)
    assert np.isnan(tr["transition_probability"].values[~has_steps]).all()

    durations = stats.durations(runs, states)
    assert int((durations["duration_histogram"] * durations["duration"]).sum()) == labels.size
    assert int(durations["episode_count"].sum()) == runs.sizes["episode"]


def test_min_duration_leaves_short_episodes_out():
    labels = np.array([1, 1, 1, 2, 1, 1, 2, 2, 2, 2])
    runs = stats.episodes(labels, np.zeros(labels.size, dtype=bool))
    d = stats.durations(runs, np.array([1, 2]), min_length=3)
    assert d["episode_count"].values.tolist() == [1, 1]
    assert d["mean_duration"].values.tolist() == [3.0, 4.0]


CALENDARS = ["standard", "noleap", "360_day", "all_leap", "julian"]


@st.composite
def small_jobs(draw):
    """A random small daily field: calendar, start, length, missing days, season, grid size, land points, k."""
    n = draw(st.integers(2, 300))
    return {
        "calendar": draw(st.sampled_from(CALENDARS)),
        "start": f"{draw(st.integers(1900, 2100)):04d}-{draw(st.integers(1, 12)):02d}-{draw(st.integers(1, 28)):02d}",
        "n": n,
        "dropped": draw(st.sets(st.integers(1, n - 1), max_size=n // 3)),
        "months": draw(st.none() | st.lists(st.integers(1, 12), min_size=1, max_size=12, unique=True)),
        "grid": (draw(st.integers(1, 3)), draw(st.integers(1, 4))),
        "land": draw(st.integers(0, 2**12 - 1)),
        "k": draw(st.integers(1, 5)),
        "seed": draw(st.integers(0, 2**16)),
    }


@settings(max_examples=200, deadline=None)
@given(small_jobs())
def test_invariants_on_random_small_jobs(job):
    """The season, segment, stacking, clustering and statistics steps of the pipeline on random small cases.

    The same calls as regimes.pipeline.prepare and analyse make, checked
    against direct definitions: a day starts a new run exactly when the day
    before it (by cftime date arithmetic) is not selected; every selected day
    gets one label; frequencies sum to 1; each transition-matrix row sums to 1
    for the states that occur as the source of a step; episode lengths sum to
    the number of labelled days.
    """
    rng = np.random.default_rng(job["seed"])
    every_day = xr.DataArray(
        xr.date_range(job["start"], periods=job["n"], freq="D", calendar=job["calendar"], use_cftime=True), dims="time"
    )
    step = data.typical_step(every_day)  # the input's own step, one day
    kept = np.setdiff1d(np.arange(job["n"]), sorted(job["dropped"]))
    nlat, nlon = job["grid"]
    field = xr.DataArray(
        rng.normal(size=(kept.size, nlat, nlon)).astype(np.float32),
        dims=("time", "lat", "lon"),
        coords={"time": every_day.values[kept], "lat": np.arange(nlat) * 10.0, "lon": np.arange(nlon) * 10.0},
        name="v",
    )
    try:
        selected = data.select_months(field, job["months"])
    except UserError:
        assert not np.isin(field["time"].dt.month.values, job["months"]).any()
        return
    time = selected["time"]
    starts = data.segment_starts(time, step)
    season = data.season_year(time, job["months"]).values

    # a new run starts exactly where the previous selected day is not the day before (cftime arithmetic)
    expected = np.ones(time.size, dtype=bool)
    expected[1:] = np.diff(time.values) != datetime.timedelta(days=1)
    np.testing.assert_array_equal(starts, expected)

    land = np.array([(job["land"] >> i) & 1 for i in range(nlat * nlon)], dtype=bool)
    keep = ~land if land.sum() < land.size else np.ones_like(land)
    x = Layout(selected.isel(time=0, drop=True), keep).stack(selected).rename(feature="mode")
    k = job["k"]
    try:
        clusterer = KMeansRegimes(k, restarts=2, max_iterations=10, rng=rng).fit(x)
    except UserError:
        assert time.size < k
        return
    labels = clusterer.labels_.values
    states = np.arange(1, k + 1)

    # every selected day has exactly one label, one of 1..k
    assert labels.shape == (time.size,) and np.isin(labels, states).all()
    np.testing.assert_array_equal(clusterer.labels_["sample"].values, time.values)

    assert np.isclose(float(stats.frequency(labels, states).sum()), 1.0)
    for groups, name in ((time.dt.month.values, "month"), (season, "season_year")):
        np.testing.assert_allclose(stats.frequency_by(labels, groups, states, name).sum("regime").values, 1.0)

    runs = stats.episodes(labels, starts)
    assert int(runs["length"].sum()) == time.size
    first, length = runs["first"].values, runs["length"].values
    assert set(np.flatnonzero(starts)) <= set(first)  # every run of consecutive days starts an episode
    for f, m in zip(first, length):
        assert not starts[f + 1 : f + m].any() and np.all(labels[f : f + m] == labels[f])

    tr = stats.transitions(labels, starts, states)
    sources = {int(labels[i]) for i in range(time.size - 1) if not starts[i + 1]}
    rows = tr["transition_probability"].sum("regime_to", skipna=False).values
    for s in states:
        if s in sources:
            assert np.isclose(rows[s - 1], 1.0)
        else:
            assert np.isnan(tr["transition_probability"].values[s - 1]).all()
    assert int(tr["transition_count"].sum()) == time.size - int(starts.sum())

    d = stats.durations(runs, states)
    assert int((d["duration_histogram"] * d["duration"]).sum()) == time.size
