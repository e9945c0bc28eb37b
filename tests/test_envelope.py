"""Gain envelope: exact unity outside events, the raised-cosine shape, no step, no click.

The reference curve is computed here, sample by sample with ``math.cos``, from the
GainEvent contract (planner/model.py: full gain over [start_s, end_s], ramp in over
[start_s - ramp_in, start_s], ramp out over [end_s, end_s + ramp_out]) and the documented
shape (raised cosine in dB); the code under test never supplies the expected values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from render_fixtures import event

from planner.errors import PlanFileError
from planner.render.envelope import GainEnvelope

FS = 48000


def reference_db(t_s: float, start_s: float, end_s: float, ramp_in_s: float, ramp_out_s: float, gain_db: float) -> float:
    """Gain in dB at one instant: raised cosine (1 - cos(pi x)) / 2 across each ramp, 1 in between."""
    if start_s - ramp_in_s < t_s < start_s:
        return gain_db * 0.5 * (1.0 - math.cos(math.pi * (t_s - (start_s - ramp_in_s)) / ramp_in_s))
    if start_s <= t_s <= end_s:
        return gain_db
    if end_s < t_s < end_s + ramp_out_s:
        return gain_db * 0.5 * (1.0 + math.cos(math.pi * (t_s - end_s) / ramp_out_s))
    return 0.0


@pytest.mark.parametrize("target", ["background", "dialogue"], ids=["cut", "lift"])
def test_matches_reference_curve_and_is_unity_outside(target: str) -> None:
    gain_db = -9.0 if target == "background" else 4.0
    ev = event(1, 1.0, 1.5, cut_db=gain_db if target == "background" else 0.0,
               lift_db=gain_db if target == "dialogue" else 0.0, ramp_in_ms=200.0, ramp_out_ms=300.0)  # fmt: skip
    env = GainEnvelope([ev], FS, target)  # type: ignore[arg-type]
    n = int(2.2 * FS)
    got = env.block(0, n)
    assert got.dtype == np.float32
    expected_db = np.array([reference_db(i / FS, 1.0, 1.5, 0.2, 0.3, gain_db) for i in range(n)])
    # float32 resolution of the linear gain: 1e-6 relative is about 1e-5 dB.
    np.testing.assert_allclose(got, 10.0 ** (expected_db / 20.0), rtol=2e-7, atol=0.0)
    outside = expected_db == 0.0
    assert outside.sum() > FS  # both sides of the event are covered
    assert np.all(got[outside] == np.float32(1.0))  # exactly unity, so samples pass bit for bit
    assert got[int(1.2 * FS)] == np.float32(10.0 ** (gain_db / 20.0))  # full gain inside [start, end]


@pytest.mark.parametrize("ramp_ms", [1.0, 40.0, 400.0], ids=["1ms", "40ms", "400ms"])
def test_no_step_larger_than_the_ramp_allows(ramp_ms: float) -> None:
    gain_db = -12.0
    env = GainEnvelope([event(1, 0.5, 0.8, cut_db=gain_db, ramp_in_ms=ramp_ms, ramp_out_ms=ramp_ms)], FS, "background")
    g = env.block(0, int(1.5 * FS)).astype(np.float64)
    # Calculus: d/dx (1 - cos(pi x)) / 2 <= pi / 2, and one sample is 1 / ramp_samples of x,
    # so the dB curve moves at most |gain_db| pi / (2 ramp_samples) per sample; the linear
    # gain 10^(db/20) <= 1 moves at most ln(10)/20 times that.
    bound_db = abs(gain_db) * math.pi / (2.0 * ramp_ms * 1e-3 * FS)
    steps_db = np.abs(np.diff(20.0 * np.log10(g)))
    assert steps_db.max() <= bound_db * (1.0 + 1e-3) + 1e-5  # + float32 rounding of g
    assert np.abs(np.diff(g)).max() <= math.log(10.0) / 20.0 * bound_db * (1.0 + 1e-3) + 2e-7
    assert steps_db.max() >= 0.9 * bound_db  # the bound is tight: the ramp really is that steep


def test_sine_under_event_shows_nothing_outside_the_ramp_spectrum() -> None:
    """No click: out-of-band energy of sine x gain is that of the ideal raised-cosine product.

    The ideal is built here in float64 from the reference curve. The check is sensitive: a
    hard switch (the same cut applied as a step) puts about -30 dB of the energy out of band.
    """
    f0_hz, n = 1000.0, 4 * FS  # 4000 whole cycles, so the periodic FFT sees no edge
    ramp_s = 0.4
    env = GainEnvelope([event(1, 1.5, 2.5, cut_db=-12.0, ramp_in_ms=400.0, ramp_out_ms=600.0)], FS, "background")
    t = np.arange(n) / FS
    x = np.sin(2.0 * np.pi * f0_hz * t)
    y = (x.astype(np.float32) * env.block(0, n)).astype(np.float64)
    ideal_db = np.array([reference_db(v, 1.5, 2.5, 0.4, 0.6, -12.0) for v in t])
    ideal = x * 10.0 ** (ideal_db / 20.0)
    step = x * np.where((t >= 1.3) & (t <= 2.8), 10.0 ** (-12.0 / 20.0), 1.0)
    f = np.fft.rfftfreq(n, 1.0 / FS)
    band = np.abs(f - f0_hz) > 10.0 / ramp_s  # beyond f0 +- 10 / ramp: 25 Hz

    def out_of_band(sig: np.ndarray) -> float:
        p = np.abs(np.fft.rfft(sig)) ** 2
        return float(p[band].sum() / p.sum())

    # float32 rounding of the product adds white noise near -140 dB re the signal.
    assert out_of_band(y) <= out_of_band(ideal) + 1e-12
    assert out_of_band(y) < 1e-8  # -80 dB
    assert out_of_band(step) > 1e-4  # the measurement does see a click (-40 dB and above)
    assert np.max(np.abs(y - ideal)) < 1e-6  # and the output is the ideal product


@settings(max_examples=30, deadline=None)
@given(cuts=st.lists(st.integers(min_value=1, max_value=95_999), max_size=8))
def test_block_by_block_equals_one_call(cuts: list[int]) -> None:
    env = GainEnvelope(
        [event(1, 0.3, 0.7, cut_db=-6.0, ramp_in_ms=100.0, ramp_out_ms=250.0), event(2, 1.2, 1.6, cut_db=-3.0)],
        FS,
        "background",
    )
    n = 96_000
    whole = env.block(0, n)
    edges = [0, *sorted(set(cuts)), n]
    pieces = np.concatenate([env.block(a, b - a) for a, b in zip(edges[:-1], edges[1:])])
    assert np.array_equal(whole, pieces)


def test_overlapping_events_take_the_deepest_cut_and_stay_continuous() -> None:
    a = event(1, 1.0, 1.4, cut_db=-6.0, ramp_in_ms=200.0, ramp_out_ms=400.0)
    b = event(2, 1.6, 2.0, cut_db=-10.0, ramp_in_ms=400.0, ramp_out_ms=200.0)
    env = GainEnvelope([a, b], FS, "background")
    n = int(2.5 * FS)
    db = 20.0 * np.log10(env.block(0, n).astype(np.float64))
    ref = np.array([min(reference_db(i / FS, 1.0, 1.4, 0.2, 0.4, -6.0), reference_db(i / FS, 1.6, 2.0, 0.4, 0.2, -10.0))
                    for i in range(n)])  # fmt: skip
    np.testing.assert_allclose(db, ref, atol=1e-5)
    bound = 10.0 * math.pi / (2.0 * 0.2 * FS)  # steepest ramp of either event
    assert np.abs(np.diff(db)).max() <= bound * 1.001 + 1e-5


def test_no_events_is_exact_unity() -> None:
    env = GainEnvelope([], FS, "dialogue")
    assert env.spans() == ()
    assert np.all(env.block(12345, 1000) == np.float32(1.0))


def test_spans_cover_every_sample_that_moves() -> None:
    env = GainEnvelope([event(1, 1.0, 1.2, cut_db=-4.0, ramp_in_ms=100.0, ramp_out_ms=100.0)], FS, "background")
    ((first, stop),) = env.spans()
    g = env.block(0, 2 * FS)
    moved = np.flatnonzero(g != np.float32(1.0))
    assert first <= moved[0] and moved[-1] < stop
    # the span hugs the event: 0.9 s to 1.3 s, give or take two samples
    assert abs(first - 0.9 * FS) <= 2 and abs(stop - 1.3 * FS) <= 2


@pytest.mark.parametrize(
    ("kwargs", "target", "match"),
    [
        ({"cut_db": 3.0}, "background", r"background_gain_db=3\.0 must be <= 0"),
        ({"lift_db": -2.0}, "dialogue", r"dialogue_gain_db=-2\.0 must be >= 0"),
        ({"cut_db": -3.0, "ramp_in_ms": 0.0}, "background", r"a ramp may be 0 only at the programme's start or end"),
    ],
    ids=["positive-cut", "negative-lift", "zero-ramp-inside"],
)
def test_invalid_events_are_refused(kwargs: dict[str, float], target: str, match: str) -> None:
    with pytest.raises(PlanFileError, match=match):
        GainEnvelope([event(1, 1.0, 2.0, **kwargs)], FS, target)  # type: ignore[arg-type]


def test_zero_ramps_are_allowed_at_the_programme_edges() -> None:
    ev = event(1, 0.0, 3.0, cut_db=-6.0, ramp_in_ms=0.0, ramp_out_ms=0.0)
    env = GainEnvelope([ev], FS, "background", duration_s=3.0)
    g = env.block(0, 3 * FS)
    assert np.all(g == np.float32(10.0 ** (-6.0 / 20.0)))  # constant from the first sample to the last


def test_touches_exactly_the_blocks_that_move() -> None:
    # ground truth: the reference curve is non-zero only in (start - ramp_in, end + ramp_out)
    env = GainEnvelope([event(1, 1.0, 1.2, cut_db=-4.0, ramp_in_ms=100.0, ramp_out_ms=100.0)], FS, "background")
    block = 4800  # 0.1 s
    for start in range(0, 3 * FS, block):
        moves = any(reference_db((start + i) / FS, 1.0, 1.2, 0.1, 0.1, -4.0) != 0.0 for i in range(block))
        if moves:
            assert env.touches(start, block), start
        if not env.touches(start, block):
            assert np.all(env.block(start, block) == np.float32(1.0)), start
