"""Minimum statistics noise tracking (Martin 2001): streaming contract and a known noise level.

The tracker runs frame by frame with state carried between calls; these tests check that
any split of the frames gives the same estimates, that the caller may change the returned
array, and that a stationary noise of known power is read back.
"""

from __future__ import annotations

import itertools

import numpy as np

from planner.analysis.minstats import MinimumStatistics


def _powers(rng: np.random.Generator, n_frames: int, mean: np.ndarray) -> np.ndarray:
    # periodogram-like powers: exponential (chi-square, 2 degrees of freedom) about a known mean
    return rng.exponential(1.0, (n_frames, mean.size)) * mean


def test_any_split_of_the_frames_gives_the_same_estimates(rng: np.random.Generator) -> None:
    # Relation: the streaming contract (state carried between calls), exactly.
    mean = 10.0 ** rng.uniform(-6, -2, 20)
    y = _powers(rng, 1500, mean)
    y[400:450] = 0.0  # digital silence on the way
    whole = MinimumStatistics(20).process(y)
    tracker = MinimumStatistics(20)
    cuts = [0, 1, 2, 19, 20, 21, 377, 800, 801, 1500]
    parts = [tracker.process(y[a:b]) for a, b in itertools.pairwise(cuts)]
    np.testing.assert_array_equal(np.concatenate(parts), whole)


def test_the_caller_may_change_the_returned_estimates(rng: np.random.Generator) -> None:
    # Relation: what process() returns is the caller's; overwriting it must not change what follows.
    y = _powers(rng, 600, np.full(18, 1e-4))
    reference = MinimumStatistics(18)
    expected = np.concatenate([reference.process(y[:300]), reference.process(y[300:])])
    tracker = MinimumStatistics(18)
    first = tracker.process(y[:300])
    second_start = first.copy()
    first[:] = -1.0
    np.testing.assert_array_equal(np.concatenate([second_start, tracker.process(y[300:])]), expected)


def test_a_stationary_noise_of_known_power_is_read_back(rng: np.random.Generator) -> None:
    # Ground truth: the test draws the powers about a known mean; the bias compensation of
    # Martin (2001, Eqs. 16-18 and 22) brings the minimum back to about that mean (here within 2 dB
    # on average over 20 s, after the first 2 s).
    mean = 10.0 ** rng.uniform(-7, -3, 18)
    tracked = MinimumStatistics(18).process(_powers(rng, 2200, mean))
    error_db = 10.0 * np.log10(tracked[200:].mean(axis=0) / mean)
    np.testing.assert_allclose(error_db, 0.0, atol=2.0)
