"""Invariants of the regime statistics on random label sequences (hypothesis property tests)."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from regimes import stats

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
