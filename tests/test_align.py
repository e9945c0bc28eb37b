"""Alignment, snapping and the per-cue checks against constructed truth.

Most cases build a speech track directly (probability 1 over known speech spans, a little
seeded noise elsewhere) and cues from those spans moved by a known mapping
``t_audio = ratio * t_subs + offset`` (as planner.demo.synth.distort_cues defines it), so
the answer is known exactly. Trade ratios are exact fractions from SMPTE ST 12-1 rates
(23.976 = 24000/1001; CHECKS.md section 5). A few cases run the real detector on the
synthesized demo programmes (espeak-ng lines over a background at a known level).
"""

from __future__ import annotations

import dataclasses
from fractions import Fraction

import numpy as np
import pytest

from planner.analysis.align import RATE_CANDIDATES, align, time_cues
from planner.analysis.checks import HouseStyle
from planner.analysis.onsets import onset_strength
from planner.analysis.confidence import LowConfidenceSpan, span_note
from planner.analysis.vad import detect_speech
from planner.demo.synth import distort_cues, synth_programme
from planner.errors import InputError
from planner.model import Alignment, Cue, MappingSegment, SpeechActivity

STYLE = HouseStyle()
IDENTITY = Alignment(segments=(MappingSegment(0.0, 1e6, 1.0, 0.0),), confidence=1.0, rate_name="1")


def speech_spans(rng: np.random.Generator, n: int, start_s: float = 1.0) -> list[tuple[float, float]]:
    """Lines of 1.2-4 s separated by 0.5-3 s pauses (seeded)."""
    spans, t = [], start_s
    for _ in range(n):
        d = float(rng.uniform(1.2, 4.0))
        spans.append((round(t, 2), round(t + d, 2)))
        t += d + float(rng.uniform(0.5, 3.0))
    return spans


def activity(spans: list[tuple[float, float]], duration_s: float, rng: np.random.Generator | None = None,
             notes: tuple[str, ...] = (), level: float = 1.0) -> SpeechActivity:
    n = int(round(duration_s * 100))
    mask = np.zeros(n, dtype=bool)
    for a, b in spans:
        mask[int(round(a * 100)) : int(round(b * 100))] = True
    p = np.where(mask, level, 0.02).astype(np.float32)
    if rng is not None:
        p = np.clip(p + rng.normal(0, 0.05, n), 0, 1).astype(np.float32)
    return SpeechActivity(frame_s=0.01, probability=p, is_speech=mask, backend="test", source="constructed", notes=notes)


def true_cues(spans: list[tuple[float, float]], texts: list[str] | None = None) -> tuple[Cue, ...]:
    """In at speech onset, out 0.3 s after its end (as planner.demo.synth.truth_cues)."""
    out = []
    for i, (a, b) in enumerate(spans):
        nxt = spans[i + 1][0] - 0.08 if i + 1 < len(spans) else b + 0.3
        out.append(Cue(i + 1, str(i + 1), a, round(min(b + 0.3, max(nxt, b)), 3), texts[i] if texts else "Fine, see you then."))
    return tuple(out)


# --- global fit ----------------------------------------------------------------------------

CASES = [
    (0.0, "1", 20),
    (-60.0, "1", 20),
    (12.345, "1", 20),
    (-23.4, "25/24", 24),
    (41.0, "24/25", 24),
    (-7.7, "25/23.976", 24),
    (5.5, "23.976/25", 24),
]


@pytest.mark.parametrize("offset_s, rate_name, n", CASES, ids=[f"{o:+g}s-{r}" for o, r, _ in CASES])
def test_offset_and_ratio_are_recovered(offset_s: float, rate_name: str, n: int, rng: np.random.Generator) -> None:
    ratio = dict(RATE_CANDIDATES)[rate_name]
    spans = speech_spans(rng, n, start_s=max(offset_s, 0.0) + 1.0)
    duration = spans[-1][1] + 2.0
    subs = distort_cues(true_cues(spans), offset_s=offset_s, rate_ratio=float(ratio))
    al = align(subs, activity(spans, duration, rng), duration_s=duration)
    assert al.rate_name == rate_name
    assert len(al.segments) == 1 and not al.breaks_s
    # Issue 3 target: offset within 20 ms (known by construction).
    mid = 0.5 * (subs[0].start_s + subs[-1].start_s)
    assert al.map_s(mid) == pytest.approx(float(ratio) * mid + offset_s, abs=0.02)
    assert al.segments[0].rate_ratio == pytest.approx(float(ratio), rel=1e-12)
    assert al.confidence > 0.5


def test_ratios_are_the_exact_trade_fractions() -> None:
    # SMPTE ST 12-1: 23.976 fps is exactly 24000/1001 (CHECKS.md §5).
    table = dict(RATE_CANDIDATES)
    assert table["24/23.976"] == Fraction(1001, 1000)
    assert table["25/23.976"] == Fraction(25025, 24000)
    assert table["25/24"] * table["24/25"] == 1
    assert table["23.976/24"] * table["24/23.976"] == 1


def test_1001_drift_is_told_apart_over_a_long_programme(rng: np.random.Generator) -> None:
    # 1001/1000 drifts 1 ms per second: over ~15 minutes the mappings part by ~0.9 s.
    spans = speech_spans(rng, 250)
    duration = spans[-1][1] + 2.0
    subs = distort_cues(true_cues(spans), offset_s=-4.0, rate_ratio=1.001)
    al = align(subs, activity(spans, duration, rng), duration_s=duration)
    assert al.rate_name == "24/23.976"
    assert al.map_s(subs[-1].start_s) == pytest.approx(spans[-1][0], abs=0.02)



def staircase_activity(spans: list[tuple[float, float]], duration_s: float, rng: np.random.Generator) -> SpeechActivity:
    """Like :func:`activity`, but each line's probability climbs 0.2, 0.35, 0.45 over 32 ms
    steps before it reaches 1 (a line emerging from noise): the steepest rise is 96 ms
    after the true onset, the foot of the climb on it."""
    act = activity(spans, duration_s, rng)
    p = act.probability.copy()
    for a, _ in spans:
        k = int(round(a * 100))
        for j, level in enumerate((0.2, 0.35, 0.45)):
            p[k + round(3.2 * j) : k + round(3.2 * (j + 1))] = level
    return SpeechActivity(frame_s=0.01, probability=p, is_speech=act.is_speech, backend="test", source="constructed")


def test_gradual_onsets_are_fitted_at_their_foot(rng: np.random.Generator) -> None:
    # Constructed truth: cues in at each climb's foot, then moved by a known offset.
    spans = speech_spans(rng, 20)
    duration = spans[-1][1] + 2.0
    subs = distort_cues(true_cues(spans), offset_s=-7.3)
    al = align(subs, staircase_activity(spans, duration, rng), duration_s=duration)
    assert al.rate_name == "1"
    # Loose margin (the benchmark holds the 20 ms target): on this steep staircase the fit
    # lands about 30 ms after the foot; fitting on the steepest rise would land 96 ms late.
    assert al.map_s(subs[10].start_s) == pytest.approx(spans[10][0], abs=0.05)


def test_onset_strength_peaks_on_a_clean_step() -> None:
    # A step from 0 to 1 at a known frame: the strength is largest there (constructed).
    p = np.zeros(300, dtype=np.float32)
    p[137:250] = 1.0
    act = SpeechActivity(frame_s=0.01, probability=p, is_speech=p > 0.5, backend="test", source="constructed")
    assert int(np.argmax(onset_strength(act))) == 137


@pytest.mark.parametrize("rate_name", ["1", "24/23.976", "23.976/24"])
def test_close_ratios_are_told_apart_on_a_two_minute_programme(rate_name: str, rng: np.random.Generator) -> None:
    # 1 and 1001/1000 part by only ~0.13 s end to end over these ~2 minutes (30 lines of
    # 1.2-4 s with 0.5-3 s pauses); the coarse fit cannot tell them apart, the fine fit must.
    spans = speech_spans(rng, 30, start_s=40.0)
    duration = spans[-1][1] + 2.0
    ratio = float(dict(RATE_CANDIDATES)[rate_name])
    subs = distort_cues(true_cues(spans), offset_s=31.0, rate_ratio=ratio)
    al = align(subs, staircase_activity(spans, duration, rng), duration_s=duration)
    assert al.rate_name == rate_name
    mid = 0.5 * (subs[0].start_s + subs[-1].start_s)
    assert al.map_s(mid) == pytest.approx(ratio * mid + 31.0, abs=0.05)  # loose, as above

def test_unrelated_subtitles_get_low_confidence(rng: np.random.Generator) -> None:
    # Subtitles of another programme: cue times drawn independently of the speech.
    spans = speech_spans(rng, 25)
    other = speech_spans(np.random.default_rng(99), 25)
    duration = spans[-1][1] + 2.0
    al = align(true_cues(other), activity(spans, duration, rng), duration_s=duration)
    assert al.confidence < 0.3
    assert any("low alignment confidence" in n for n in al.notes)


# --- edits ---------------------------------------------------------------------------------


@pytest.mark.parametrize("edit_s", [30.0, -20.0], ids=["insert-30s", "cut-20s"])
def test_an_edit_is_found_and_both_sides_aligned(edit_s: float, rng: np.random.Generator) -> None:
    first = speech_spans(rng, 12)
    gap_end = first[-1][1] + 1.5
    insert = max(edit_s, 0.0)
    second = [(round(a + gap_end + insert, 2), round(b + gap_end + insert, 2)) for a, b in speech_spans(rng, 12, 0.8)]
    spans = first + second
    duration = spans[-1][1] + 2.0
    edit_at = round(gap_end, 2)
    subs = distort_cues(true_cues(spans), offset_s=-3.0, edit_at_s=edit_at, edit_len_s=edit_s)
    al = align(subs, activity(spans, duration, rng), duration_s=duration)
    assert len(al.segments) == 2
    # Issue 3 targets: the break within 1 s, cues after it within 50 ms.
    assert al.breaks_s == pytest.approx((edit_at,), abs=1.0)
    for cue, (onset, _) in zip(subs, spans):
        assert al.map_s(cue.start_s) == pytest.approx(onset, abs=0.05)


# --- bad input -----------------------------------------------------------------------------


def test_subtitles_far_outside_the_audio_keep_their_times(rng: np.random.Generator) -> None:
    # Subtitles timed from 10:00:00:00 (36000 s) against a one-minute file.
    spans = speech_spans(rng, 10)
    subs = distort_cues(true_cues(spans), offset_s=-36000.0)
    al = align(subs, activity(spans, 60.0), duration_s=60.0)
    assert al.confidence == 0.0
    assert al.segments[0].offset_s == 0.0 and al.segments[0].rate_ratio == 1.0
    assert "do not overlap the audio" in al.notes[0]


def test_audio_without_speech_keeps_the_times(rng: np.random.Generator) -> None:
    subs = true_cues(speech_spans(rng, 10))
    al = align(subs, activity([], 60.0, rng), duration_s=60.0)
    assert al.confidence == 0.0 and "no speech detected" in al.notes[0]


@pytest.mark.parametrize("n", [0, 1], ids=["none", "one"])
def test_too_few_cues_keep_their_times(n: int, rng: np.random.Generator) -> None:
    spans = speech_spans(rng, 10)
    al = align(true_cues(spans)[:n], activity(spans, 60.0), duration_s=60.0)
    assert al.confidence == 0.0 and al.rate_name == "1"
    assert f"only {n} cue(s)" in al.notes[0]


def test_cues_past_the_end_of_the_audio_are_warned_about(rng: np.random.Generator) -> None:
    spans = speech_spans(rng, 20)
    duration = spans[15][1] + 1.0  # the audio stops after line 16 of 20
    subs = distort_cues(true_cues(spans), offset_s=-2.0)
    al = align(subs, activity(spans[:16], duration, rng), duration_s=duration)
    assert al.map_s(subs[5].start_s) == pytest.approx(spans[5][0], abs=0.02)
    assert al.confidence <= 0.5
    assert any("4 cue(s) fall outside the audio" in n for n in al.notes)


@pytest.mark.parametrize("duration", [0.0, -1.0, float("nan")], ids=["zero", "negative", "nan"])
def test_bad_duration_is_refused(duration: float) -> None:
    with pytest.raises(InputError, match="duration_s=.* must be a positive number"):
        align((), activity([], 1.0), duration_s=duration)


# --- snapping ------------------------------------------------------------------------------


def test_snapping_moves_cue_edges_onto_speech(rng: np.random.Generator) -> None:
    spans = speech_spans(rng, 8)
    act = activity(spans, spans[-1][1] + 2.0)
    cues = tuple(Cue(i + 1, "", round(a + 0.2, 3), round(b + 0.3, 3), "Fine, see you then.") for i, (a, b) in enumerate(spans))
    timings, uncovered = time_cues(cues, IDENTITY, act, STYLE, snap_tolerance_s=0.5)
    assert not uncovered
    for t, (a, b) in zip(timings, spans):
        assert t.aligned_start_s == pytest.approx(a, abs=1e-6)
        assert t.aligned_end_s == pytest.approx(b, abs=1e-6)
        # Sign: cue time minus speech time, so +200 ms means the cue came in late.
        assert t.onset_error_ms == pytest.approx(200.0, abs=0.5)
        assert t.offset_error_ms == pytest.approx(300.0, abs=0.5)
        assert t.speech_s == pytest.approx(b - a, abs=0.011)
        assert t.flags == ()


@pytest.mark.parametrize("fps, gap_s", [("25", 0.080), ("23.976", 2 * 1001 / 24000)], ids=["25", "23.976"])
def test_snapping_never_overlaps_and_keeps_the_minimum_gap(fps: str, gap_s: float) -> None:
    # Two lines 40 ms apart (less than 2 frames): snapping both cues onto them would leave
    # them 40 ms apart; the earlier out-point yields to keep the 2-frame gap (CHECKS §6, CP).
    spans = [(1.0, 3.0), (3.04, 5.0)]
    act = activity(spans, 7.0)
    cues = (Cue(1, "", 1.1, 3.3, "One."), Cue(2, "", 3.4, 5.2, "Two."))
    timings, _ = time_cues(cues, IDENTITY, act, STYLE, fps=fps)
    first, second = timings
    assert second.aligned_start_s == pytest.approx(3.04, abs=1e-6)
    assert second.aligned_start_s - first.aligned_end_s == pytest.approx(gap_s, abs=1.5e-3)
    assert "gap" not in first.flags and "overlap" not in first.flags


def test_no_snap_beyond_the_tolerance() -> None:
    act = activity([(1.0, 3.0)], 5.0)
    timings, _ = time_cues((Cue(1, "", 1.8, 3.2, "Late."),), IDENTITY, act, STYLE, snap_tolerance_s=0.5)
    assert timings[0].aligned_start_s == 1.8
    assert timings[0].onset_error_ms == pytest.approx(800.0)


# --- flags ---------------------------------------------------------------------------------


def flags_for(cues: tuple[Cue, ...], spans: list[tuple[float, float]], duration: float = 40.0) -> dict[int, tuple[str, ...]]:
    timings, _ = time_cues(cues, IDENTITY, activity(spans, duration), STYLE, snap_tolerance_s=0.0)
    return {t.index: t.flags for t in timings}


def test_every_flag_on_a_constructed_cue() -> None:
    # Thresholds of the default house style (planner/profiles/default.toml, CHECKS.md §6):
    # 17 cps, 0.833-7 s, 2 frames gap, 42 chars/line, 2 lines, 1.5 s sync bounds.
    fast = "x" * 40  # 40 characters in 2 s = 20 cps
    cues = (
        Cue(1, "", 1.0, 3.0, fast),
        Cue(2, "", 4.0, 4.5, "Hi."),  # 0.5 s
        Cue(3, "", 5.0, 13.0, "A long hold."),  # 8 s
        Cue(4, "", 14.0, 16.0, "y" * 43),  # one 43-character line (21.5 cps too)
        Cue(5, "", 17.0, 19.5, "One.\nTwo.\nThree."),
        Cue(6, "", 20.0, 21.96, "Close."),  # 40 ms before the next cue
        Cue(7, "", 22.0, 24.0, "Next."),
        Cue(8, "", 23.5, 25.0, "Overlapping."),
        Cue(9, "", 28.0, 29.5, "Nobody speaks."),  # over silence
        Cue(10, "", 32.0, 34.0, "Late in."),  # speech started at 30.0
        Cue(11, "", 35.0, 36.0, "Early out."),  # speech goes on to 38.0
    )
    spans = [(1, 3), (4, 4.5), (5, 13), (14, 16), (17, 19.5), (20, 21.96), (22, 25), (30, 34), (35, 38)]
    got = flags_for(cues, [(float(a), float(b)) for a, b in spans])
    assert got[1] == ("too-fast",)
    assert got[2] == ("too-short",)
    assert got[3] == ("too-long",)
    assert got[4] == ("long-line", "too-fast")
    assert got[5] == ("too-many-lines",)
    assert got[6] == ("gap",)
    assert got[7] == ("overlap",)
    assert got[8] == ("overlap",)
    assert got[9] == ("no-speech",)
    assert got[10] == ("late-in",)
    assert got[11] == ("early-out",)


# --- uncovered speech ----------------------------------------------------------------------


def test_uncovered_speech_of_a_second_or_more_is_reported() -> None:
    # Issue 3: speech of at least 1 s with no cue over it.
    spans = [(1.0, 3.0), (5.0, 7.5), (9.0, 9.8)]
    cues = (Cue(1, "", 1.0, 3.3, "Covered."),)
    _, uncovered = time_cues(cues, IDENTITY, activity(spans, 12.0), STYLE)
    assert [(u.start_s, u.end_s) for u in uncovered] == [(5.0, 7.5)]  # 0.8 s run not reported
    assert uncovered[0].confidence == pytest.approx(1.0)


def test_crowd_evidence_lowers_speech_without_cues_in_a_steady_region() -> None:
    # A crowd region noted by the detector; a speech-like run there at probability 0.8 and
    # no cue within 5 s: with the crowd rules it no longer counts as dialogue.
    note = span_note(LowConfidenceSpan(0.0, 30.0, "steady"))
    act = activity([(12.0, 15.0)], 30.0, notes=(note,), level=0.8)
    cues = (Cue(1, "", 25.0, 26.0, "Far away."),)
    _, plain = time_cues(cues, IDENTITY, act, STYLE, use_crowd_evidence=False)
    _, crowd = time_cues(cues, IDENTITY, act, STYLE)
    assert [(u.start_s, u.end_s) for u in plain] == [(12.0, 15.0)]
    assert crowd == ()
    # Confident speech (probability 1) in the same region near a cue (within 5 s) stays,
    # with confidence cut by 40 % (planner.analysis.checks CROWD_CUT_NEAR); far from any
    # cue the 70 % cut leaves 0.3, under the 0.5 needed to be reported.
    loud = activity([(12.0, 15.0)], 30.0, notes=(note,), level=1.0)
    near = (Cue(1, "", 18.0, 19.0, "Near."),)
    _, kept = time_cues(near, IDENTITY, loud, STYLE)
    assert len(kept) == 1 and kept[0].confidence == pytest.approx(0.6, abs=0.02)
    _, far = time_cues(cues, IDENTITY, loud, STYLE)
    assert far == ()


def _with_level(act: SpeechActivity, levels_db: list[tuple[float, float, float]]) -> SpeechActivity:
    """``act`` with a level track: -60 dB everywhere, ``level_db`` over each ``(start_s, end_s, level_db)``."""
    level = np.full(act.n_frames, -60.0, dtype=np.float32)
    for a, b, db in levels_db:
        level[int(round(a * 100)) : int(round(b * 100))] = db
    return dataclasses.replace(act, level_db=level)


@pytest.mark.parametrize(
    ("below_db", "kept"),
    # Ground truth constructed here against the documented ramp (planner.analysis.checks
    # LEVEL_KEEP_DB = 4, LEVEL_DROP_DB = 8): full confidence 2 dB under the cued speech,
    # 0.75 at 5 dB under; at 7 dB under 0.25, under MIN_REPORT_CONFIDENCE, so not reported.
    [(2.0, 1.0), (5.0, 0.75), (7.0, None)],
)
def test_uncovered_speech_well_below_the_dialogue_level_loses_confidence(below_db: float, kept: float | None) -> None:
    spans = [(1.0, 3.5), (5.0, 7.0), (10.0, 12.0)]
    cues = (Cue(1, "", 1.0, 3.8, "Covered."), Cue(2, "", 10.0, 12.3, "Covered too."))
    act = _with_level(activity(spans, 14.0), [(1.0, 3.5, -20.0), (10.0, 12.0, -20.0), (5.0, 7.0, -20.0 - below_db)])
    _, uncovered = time_cues(cues, IDENTITY, act, STYLE)
    _, plain = time_cues(cues, IDENTITY, act, STYLE, use_crowd_evidence=False)
    assert [(u.start_s, u.end_s) for u in plain] == [(5.0, 7.0)] and plain[0].confidence == pytest.approx(1.0)
    if kept is None:
        assert uncovered == ()
    else:
        assert [(u.start_s, u.end_s) for u in uncovered] == [(5.0, 7.0)]
        assert uncovered[0].confidence == pytest.approx(kept, abs=0.01)


def test_level_evidence_needs_enough_cued_speech() -> None:
    # Only 1 s of speech under cues (< LEVEL_MIN_REFERENCE_S = 2 s): no reference level, no cut.
    act = _with_level(activity([(1.0, 2.0), (5.0, 7.0)], 10.0), [(1.0, 2.0, -20.0), (5.0, 7.0, -40.0)])
    _, uncovered = time_cues((Cue(1, "", 1.0, 2.3, "Short."),), IDENTITY, act, STYLE)
    assert len(uncovered) == 1 and uncovered[0].confidence == pytest.approx(1.0)


# --- the real detector on a synthesized programme -----------------------------------------


def test_synthesized_programme_end_to_end() -> None:
    # planner.demo.synth: 10 espeak-ng lines over the music bed at +10 dB with known truth;
    # two cues dropped, two fake cues over silence, offset -7.3 s at 25/24.
    prog = synth_programme(background="music", snr_db=10.0, n_lines=10, seed=5, sample_rate_hz=16000,
                           layout="mono", gap_s=(0.8, 4.0))
    truth = prog.speech_truth
    gaps = [(truth[i][1] + 0.6, truth[i + 1][0] - 0.4) for i in range(len(truth) - 1)]
    fakes = [(a, a + 1.0) for a, b in gaps if b - a >= 1.0][:2]
    assert len(fakes) == 2
    subs = distort_cues(prog.cues, offset_s=-7.3, rate_ratio=25 / 24, drop=(3, 7), add_fake=fakes)
    act = detect_speech(np.ascontiguousarray(prog.mix[:, 0]), 16000, backend="neural")
    al = align(subs, act, duration_s=prog.duration_s)
    assert al.rate_name == "25/24"
    assert al.segments[0].offset_s == pytest.approx(-7.3, abs=0.02)
    timings, uncovered = time_cues(subs, al, act, STYLE)
    by_text = {c.text: c for c in prog.cues}
    errors = [abs(t.aligned_start_s - by_text[c.text].start_s) for c, t in zip(subs, timings) if c.text in by_text]
    assert float(np.median(errors)) < 0.06  # issue 3: median onset error after snapping < 60 ms
    fake_idx = {c.index for c in subs if c.text not in by_text}
    assert {t.index for t in timings if "no-speech" in t.flags} == fake_idx
    found = [(u.start_s, u.end_s) for u in uncovered]
    assert len(found) == 2
    for (a, b), i in zip(found, (3, 7)):
        s, e = truth[i - 1]
        assert min(b, e) - max(a, s) > 0.9 * (e - s)


def test_speech_judged_background_is_named_in_a_warning_not_listed() -> None:
    # Ground truth constructed here: an uncovered 2 s run 7 dB under the cued speech (the
    # level ramp leaves it confidence 0.25, under MIN_REPORT_CONFIDENCE), as in the test
    # above; the whole analysis lists no missing cue but one warning names the stretch.
    from planner import pipeline
    from planner.model import AudioInfo, LoudnessSummary
    from planner.settings import AnalysisSettings

    spans = [(1.0, 3.5), (5.0, 7.0), (10.0, 12.0)]
    cues = (Cue(1, "", 1.0, 3.8, "Covered."), Cue(2, "", 10.0, 12.3, "Covered too."))
    act = _with_level(activity(spans, 14.0), [(1.0, 3.5, -20.0), (10.0, 12.0, -20.0), (5.0, 7.0, -27.0)])
    info = AudioInfo(48000, 2, 14 * 48000, "stereo", "WAV", "PCM_24", None)
    _, _, reported, background_like = pipeline.align_cues(cues, act, info, AnalysisSettings(vad="fast"), STYLE)
    assert reported == ()
    assert [(u.start_s, u.end_s) for u in background_like] == [(5.0, 7.0)]
    loudness = LoudnessSummary(-23.0, 5.0, -3.0, -3.0, -20.0, -21.0, -22.0)
    warnings = pipeline.programme_warnings(loudness, act, IDENTITY, background_like)
    assert any(w.startswith("1 stretch(es) of speech with no cue (2 s in all, from 5.0 s)") for w in warnings)
    assert not any("stretch(es)" in w for w in pipeline.programme_warnings(loudness, act, IDENTITY))


@pytest.mark.parametrize(("n_x", "n_c"), [(1000, 10), (5003, 777), (64, 64), (12345, 1), (7, 3)], ids=str)
def test_correlation_equals_scipy_signal_correlate(n_x: int, n_c: int) -> None:
    # Reference: scipy.signal.correlate(mode="valid", method="fft"), which the alignment used
    # before it took the same steps through scipy.fft (bit for bit).
    from scipy.signal import correlate

    from planner.analysis.edits import _correlate_valid

    rng = np.random.default_rng(n_x + n_c)
    x, c = rng.standard_normal(n_x), rng.standard_normal(n_c)
    np.testing.assert_array_equal(_correlate_valid(x, c), correlate(x, c, mode="valid", method="fft"))
