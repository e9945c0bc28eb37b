"""The statements of docs/methods.md that no other test file checks, one test each.

Above all the fact of the trade (common practice) that turning the whole programme up does not
make dialogue clearer: raising the input by 6 dB leaves every cue's speech-to-background
loudness difference as it was (to 0.05 LU), changes its SII only through the terms of ANSI
S3.5-1997 that depend on absolute level, and leaves the planner's moves as they were; the
planner never answers masking with an overall level change. The programmes are synthesized
(planner.demo.synth: real speech fixtures over backgrounds at known SNR), analysed through
planner.pipeline.analyse, and the louder copy re-scored with the same speech track and cue
spans, as a render is verified (planner/render/verify.py).

Expected values come from outside the code under test: gains and levels the tests apply,
pyloudnorm (BS.1770 with the standard's filter), the reference package
``speech-intelligibility-index`` 1.0.2, and a slow transcription of the ANSI S3.5 clause 4
formulas written here (checked against that package first). The map from each statement of
docs/methods.md to its test is in the module's final comment block.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence

import numpy as np
import pyloudnorm
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from plan_factory import NORMAL_SPEECH_DB, CueSpec, brute_force_cut_db, make_analysis, reference_sii
from speech_intelligibility_index import sii as ref

from planner import folder, pipeline
from planner.analysis.bands import LOW_RATE_HZ, BandAnalyzer
from planner.analysis.masking import score_cues
from planner.analysis.sii import SII_BANDS_HZ, one_third_octave_bandwidths_hz, sii
from planner.demo.synth import synth_programme, write_programme
from planner.io.audio import ProgrammeBlock, iter_programme, open_programme
from planner.model import Analysis, AudioInfo, CueScore, CueTiming, SpeechActivity
from planner.planning.gains import plan_events
from planner.planning.scenes import find_scenes
from planner.settings import STRENGTH_STEPS, AnalysisSettings, PlanSettings

FS = 48000
SIX_DB = 10.0 ** (6.0 / 20.0)

# --------------------------------------------------------------------------- an ANSI S3.5 oracle

#: Nominal band centres, Hz (ANSI S3.5 Table 3; the reference package has 3159 for 3150).
F_HZ = [160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000]
#: Internal noise X, dB SPL/Hz (ANSI S3.5 Table 3, as transcribed in CHECKS.md section 2.1).
X_DB = [0.6, -1.7, -3.9, -6.1, -8.2, -9.7, -10.8, -11.9, -12.5, -13.5, -15.4, -17.7, -21.2, -24.2, -25.9, -23.6, -15.8, -7.1]
U_DB = [float(v) for v in ref.speech_spectrum("normal")]  # Table 3 normal effort, via the package
IMPORTANCE = [float(v) for v in ref.band_importance(1)]  # average speech (index 1: the package's look-up is off by one)
#: The three terms of clause 4 that depend on absolute level rather than on speech re noise.
LEVEL_TERMS = ("spread", "threshold", "distortion")


def oracle_sii(
    speech_db: Sequence[float] | np.ndarray,
    noise_db: Sequence[float] | np.ndarray,
    threshold_db_hl: Sequence[float] | np.ndarray,
    *,
    raise_db: float = 0.0,
    held: Sequence[str] = (),
) -> float:
    """ANSI S3.5 clause 4, band by band, of speech and noise both raised by ``raise_db``.

    Each term named in ``held`` is evaluated at the levels before the raise (formulas of
    CHECKS.md section 2.2): ``spread`` the slope of upward spread of masking (Eq. 7,
    C = -80 + 0.6 (B + 10 log F - 6.353)), ``threshold`` the disturbance floor X + T' (Eq. 10,
    moved up with the levels), ``distortion`` the level-distortion factor (Eq. 11,
    L = 1 - (E' - U - 10) / 160). Every other step sees only differences of levels.
    """
    e = [v + raise_db for v in speech_db]
    n = [v + raise_db for v in noise_db]
    b = [max(ei - 24.0, ni) for ei, ni in zip(e, n)]  # Eq. 5: self-speech masking V = E' - 24
    b_slope = [bi - raise_db for bi in b] if "spread" in held else b
    c = [-80.0 + 0.6 * (bi + 10.0 * math.log10(f) - 6.353) for bi, f in zip(b_slope, F_HZ)]  # Eq. 7
    total = 0.0
    for i in range(18):
        if i == 0:
            z = b[0]
        else:  # Eq. 9
            spread = sum(10.0 ** ((b[k] + 3.32 * c[k] * math.log10(0.89 * F_HZ[i] / F_HZ[k])) / 10.0) for k in range(i))
            z = 10.0 * math.log10(10.0 ** (n[i] / 10.0) + spread)
        floor = X_DB[i] + threshold_db_hl[i] + (raise_db if "threshold" in held else 0.0)
        d = max(z, floor)  # Eq. 10
        e_level = speech_db[i] if "distortion" in held else e[i]
        level = min(1.0, 1.0 - (e_level - U_DB[i] - 10.0) / 160.0)  # Eq. 11
        k_i = min(1.0, max(0.0, (e[i] - d + 15.0) / 30.0))  # Eq. 12
        total += IMPORTANCE[i] * level * k_i  # Eq. 13-14
    return total


def test_oracle_is_the_reference_package(rng: np.random.Generator) -> None:
    # Reference: speech-intelligibility-index 1.0.2 on random spectra and thresholds.
    for _ in range(20):
        e = NORMAL_SPEECH_DB + rng.uniform(-20.0, 25.0, 18)
        n = e - rng.uniform(-10.0, 20.0, 18)
        t = rng.uniform(0.0, 60.0, 18)
        expected = float(ref.sii(e, n, t, band_importance_function=np.asarray(IMPORTANCE)))
        assert oracle_sii(e, n, t) == pytest.approx(expected, abs=1e-9)


# --------------------------------------------------------------------------- the programme, turned up


@dataclasses.dataclass(frozen=True)
class Turned:
    """A programme analysed as it is, and its cues re-scored with the audio 6 dB louder."""

    analysis: Analysis
    louder: tuple[CueScore, ...]


PROGRAMMES = [("babble", 3.0, "stems"), ("babble", 3.0, "mix"), ("music", 2.0, "stems"), ("music", 2.0, "mix")]
PROGRAMME_IDS = [f"{bg}-{kind}" for bg, _, kind in PROGRAMMES]


@pytest.fixture(scope="module")
def turned_up(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Turned]:
    """Four lines over babble (+3 dB) and over music (+2 dB), 8 dB below the synthesizer's level
    so that the louder copy does not clip, as stems and as a mix; the louder copy is the same
    arrays times 10**(6/20) (ground truth: the gain the test applies)."""
    out: dict[str, Turned] = {}
    settings_ = AnalysisSettings(vad="fast")
    for background, snr_db in sorted({(bg, snr) for bg, snr, _ in PROGRAMMES}):
        prog = synth_programme(background=background, snr_db=snr_db, n_lines=4, seed=3)  # type: ignore[arg-type]
        quiet = np.float32(10.0 ** (-8.0 / 20.0))
        prog = dataclasses.replace(prog, dialogue=prog.dialogue * quiet, background=prog.background * quiet)
        loud = dataclasses.replace(prog, dialogue=prog.dialogue * np.float32(SIX_DB), background=prog.background * np.float32(SIX_DB))
        files = write_programme(prog, tmp_path_factory.mktemp(f"{background}-as-is"))
        loud_files = write_programme(loud, tmp_path_factory.mktemp(f"{background}-louder"))
        for kind in ("stems", "mix"):
            roles = {"mix": files["mix"]} if kind == "mix" else {"dialogue": files["dialogue"], "background": files["background"]}
            inputs = folder.Inputs(subtitles=files["subtitles"], **roles)
            analysis = pipeline.analyse(inputs, files["subtitles"].parent, settings_)
            loud_roles = {role: loud_files[role] for role in roles}
            programme = open_programme(**loud_roles)
            louder = score_cues(
                iter_programme(programme), info=programme.info, kind=programme.kind, timings=analysis.timings,
                activity=analysis.activity, settings=settings_,
            )  # fmt: skip
            out[f"{background}-{kind}"] = Turned(analysis, louder)
    return out


def _pairs(turned: Turned) -> list[tuple[CueScore, CueScore]]:
    pairs = [(a, b) for a, b in zip(turned.analysis.scores, turned.louder, strict=True) if a.sii is not None]
    assert len(pairs) >= 3  # the test must see scored cues
    return pairs


@pytest.mark.parametrize("case", PROGRAMME_IDS)
def test_six_db_louder_leaves_every_loudness_difference_unchanged(turned_up: dict[str, Turned], case: str) -> None:
    # Ground truth: both stems (or the mix) times 10**(6/20); common practice: louder is not clearer.
    # From stems the levels are measured, so to 0.05 LU; from the mix they are estimates whose
    # discrete steps (the tracker's minimum search, the Huber weights) can be tipped by the
    # rounding of the scaled 24-bit samples: 0.15 LU (measured up to 0.072 on one machine).
    tolerance_lu = 0.05 if case.endswith("stems") else 0.15
    for before, after in _pairs(turned_up[case]):
        assert before.sbld_lu is not None and before.speech_db is not None
        assert after.sbld_lu == pytest.approx(before.sbld_lu, abs=tolerance_lu)
        assert after.speech_db == pytest.approx(before.speech_db + 6.0, abs=tolerance_lu)


@pytest.mark.parametrize("case", PROGRAMME_IDS)
def test_six_db_louder_changes_the_sii_only_through_its_level_terms(turned_up: dict[str, Turned], case: str) -> None:
    # Reference: the ANSI S3.5 formulas (oracle above) on each cue's stored spectra, normal
    # hearing (0 dB HL, audiometric zero).
    zero = [0.0] * 18
    for before, after in _pairs(turned_up[case]):
        e, n = before.speech_spectrum_db, before.background_spectrum_db
        # The re-scored cue is the SII of its own spectra, 6 dB up: nothing else moved. Stems
        # exactly; the mix estimates to within 0.01 (measured up to 0.004): their discrete
        # steps (the minimum search and noise-slope steps of the tracker, the Huber weights)
        # can be tipped by the rounding of the scaled samples.
        predicted = float(sii(np.add(e, 6.0), np.add(n, 6.0)))
        assert after.sii == pytest.approx(predicted, abs=1e-6 if before.method == "stems" else 0.01)
        assert predicted == pytest.approx(oracle_sii(e, n, zero, raise_db=6.0), abs=1e-9)
        # Hold the terms that depend on absolute level at their old values: the SII is unchanged.
        assert oracle_sii(e, n, zero, raise_db=6.0, held=LEVEL_TERMS) == pytest.approx(before.sii, abs=1e-9)
        # And the change is small: under the 0.01 (about 1 % of words) that the planner asks a
        # background to cost before it cuts it (docs/methods.md, "Level, not masking").
        assert before.sii is not None and abs(predicted - before.sii) < 0.01


def test_louder_maskers_spread_further_so_the_level_terms_are_three() -> None:
    # Reference: oracle on normal speech in speech-shaped noise at 0 dB SNR. With the hearing
    # threshold and the level distortion held, +6 dB still lowers the SII: the slope of upward
    # spread of masking (Eq. 7) flattens as the masker gets louder. Holding it as well removes
    # the change entirely (the same relation as in the test above).
    e = list(NORMAL_SPEECH_DB)
    zero = [0.0] * 18
    base = oracle_sii(e, e, zero)
    assert oracle_sii(e, e, zero, raise_db=6.0, held=("threshold", "distortion")) < base - 1e-3
    assert oracle_sii(e, e, zero, raise_db=6.0, held=LEVEL_TERMS) == pytest.approx(base, abs=1e-12)


@pytest.mark.parametrize("case", PROGRAMME_IDS)
def test_six_db_louder_needs_the_same_background_cut(turned_up: dict[str, Turned], case: str) -> None:
    # Ground truth: the same programme, planned before and after the gain the test applied.
    turned = turned_up[case]
    before = plan_events(turned.analysis, PlanSettings())
    after = plan_events(dataclasses.replace(turned.analysis, scores=turned.louder), PlanSettings())
    assert before and [e.cue_indices for e in after] == [e.cue_indices for e in before]
    for a, b in zip(before, after, strict=True):
        # One 0.1 dB planner step at most from stems (their SII moves by millionths). From the
        # mix the SII may move by up to 0.01 (test above), which the planner answers with the
        # cut that SII change is worth at this event's slope (SII gained per dB of cut), on top
        # of a step either way. And no lift: the louder programme is not offered its own
        # loudness back as a fix.
        tolerance_db = 0.1
        if turned.analysis.scores[0].method == "mix":
            slope = (a.score_after - a.score_before) / abs(a.background_gain_db)
            tolerance_db = 0.2 + abs(b.score_before - a.score_before) / slope
        assert b.background_gain_db == pytest.approx(a.background_gain_db, abs=tolerance_db + 1e-9)
        assert a.dialogue_gain_db == b.dialogue_gain_db == 0.0


@pytest.mark.parametrize("shift_db", [0.0, 5.0, 10.0], ids=["normal", "+5dB", "+10dB"])
def test_turning_up_loud_dialogue_never_needs_less_cut(shift_db: float) -> None:
    # Reference: brute force over 0.1 dB cuts with the reference package (plan_factory). At
    # and above normal effort every level term of the SII works against a louder programme
    # (wider spread of masking, level distortion above U + 10 dB), so the cut can only grow.
    for snr_db in (-4.0, -1.0, 2.0, 5.0):
        cuts = []
        for extra_db in (0.0, 6.0):
            spec = CueSpec(10.0, 13.0, snr_db=snr_db, speech_shift_db=shift_db + extra_db)
            (event,) = plan_events(make_analysis([spec]), PlanSettings(max_cut_db=20.0))
            assert -event.background_gain_db == pytest.approx(brute_force_cut_db(spec, 0.75), abs=1e-9)
            cuts.append(-event.background_gain_db)
        assert cuts[1] >= cuts[0]


@settings(max_examples=40, deadline=None)
@given(
    layout=st.lists(st.tuples(st.floats(0.3, 5.0), st.floats(0.8, 4.0), st.floats(-12.0, 12.0), st.floats(-45.0, 15.0)),
                    min_size=1, max_size=8),
    move=st.sampled_from(["background", "dialogue", "both"]),
    strength=st.floats(0.0, 1.0),
    target_kind=st.sampled_from(["sii", "lu"]),
    true_peak_dbtp=st.floats(-20.0, 0.0),
)  # fmt: skip
def test_no_event_moves_dialogue_and_background_together(
    layout: list[tuple[float, float, float, float]], move: str, strength: float, target_kind: str, true_peak_dbtp: float
) -> None:
    # Constructed analyses of every kind (SNR, speech level, strength, headroom, move kind).
    # An equal change of both stems is an overall level change: never a planned move. Every
    # move widens the speech-to-background difference; an event without one moves nothing.
    specs, t = [], 0.5
    for gap, length, snr, shift in layout:
        specs.append(CueSpec(t + gap, t + gap + length, snr_db=snr, speech_shift_db=shift))
        t += gap + length
    analysis = make_analysis(specs, duration_s=t + 1.0, true_peak_dbtp=true_peak_dbtp)
    plan_settings = PlanSettings(move=move, strength=strength, target_kind=target_kind)  # type: ignore[arg-type]
    for e in plan_events(analysis, plan_settings):
        assert e.background_gain_db <= 0.0 <= e.dialogue_gain_db
        moved = e.dialogue_gain_db - e.background_gain_db
        assert moved > 0.0 or (e.dialogue_gain_db == 0.0 and e.background_gain_db == 0.0)


@pytest.mark.parametrize("move", ["background", "dialogue", "both"])
def test_a_cue_limited_by_its_level_is_not_offered_a_level_change(move: str) -> None:
    # Reference: for speech 40 dB below normal effort at 10 dB SNR the reference SII would
    # rise if the whole programme were 10 dB louder (the hearing-threshold term), and the
    # background costs nothing. The planner proposes no move of any kind and says why.
    spec = CueSpec(10.0, 13.0, snr_db=10.0, speech_shift_db=-40.0)
    e = NORMAL_SPEECH_DB - 40.0
    assert reference_sii(e + 10.0, e) > reference_sii(e, e - 10.0) + 0.05
    (event,) = plan_events(make_analysis([spec]), PlanSettings(move=move))  # type: ignore[arg-type]
    assert (event.background_gain_db, event.dialogue_gain_db, event.reachable) == (0.0, 0.0, False)
    assert "an overall level change is not a masking fix" in event.reason


# --------------------------------------------------------------------------- scoring details


def _activity(n_frames: int) -> SpeechActivity:
    mask = np.ones(n_frames, dtype=bool)
    return SpeechActivity(0.01, mask.astype(np.float32), mask, backend="test", source="test")


def _score(dialogue: np.ndarray, background: np.ndarray, start_s: float, end_s: float, *, layout: str,
           kind: str = "stems", listening_level_db_spl: float = 62.0) -> CueScore:  # fmt: skip
    n = dialogue.shape[0]
    info = AudioInfo(FS, dialogue.shape[1], n, layout, "WAV", "FLOAT", None)  # type: ignore[arg-type]
    d, b = dialogue.astype(np.float32), background.astype(np.float32)
    block = ProgrammeBlock(0, d + b, d if kind == "stems" else None, b if kind == "stems" else None)
    (score,) = score_cues(
        [block], info=info, kind=kind, timings=[CueTiming(1, start_s, end_s, 0.0, 0.0, end_s - start_s, 10.0)],  # type: ignore[arg-type]
        activity=_activity(-(-n // 480)), settings=AnalysisSettings(listening_level_db_spl=listening_level_db_spl),
    )  # fmt: skip
    return score


def _voice(n: int) -> np.ndarray:
    """A 220 Hz tone with a 3 Hz syllable-like envelope, peak 0.1."""
    t = np.arange(n) / FS
    return np.sin(2 * np.pi * 220 * t) * (0.5 * (1 - np.cos(2 * np.pi * 3 * t))) ** 2 * 0.1


@pytest.mark.parametrize("listening_level", [62.0, 70.0], ids=["62dB", "70dB"])
def test_a_997_hz_tone_of_l_lufs_is_heard_at_l_plus_the_offset(listening_level: float, rng: np.random.Generator) -> None:
    # Reference: pyloudnorm (BS.1770 filter, "DeMan") gives the tone's loudness L; at 997 Hz
    # the K-weighting and the -0.691 cancel, so the 1 kHz band holds L + listening level + 23
    # dB SPL (docs/methods.md, "Listening level").
    n = 3 * FS
    tone = 0.1 * np.sin(2 * np.pi * 997 * np.arange(n) / FS)
    lufs = pyloudnorm.Meter(FS, filter_class="DeMan").integrated_loudness(tone[:, None])
    score = _score(tone[:, None], 1e-3 * rng.standard_normal((n, 1)), 0.5, 2.5, layout="mono", listening_level_db_spl=listening_level)
    band = int(np.flatnonzero(SII_BANDS_HZ == 1000)[0])
    heard_db = score.speech_spectrum_db[band] + 10 * math.log10(one_third_octave_bandwidths_hz()[band])
    assert heard_db == pytest.approx(lufs + listening_level + 23.0, abs=0.05)
    assert score.speech_db == pytest.approx(lufs, abs=0.01)


def test_a_silent_background_is_stored_at_the_spectrum_floor() -> None:
    # Ground truth: digital silence as background; spectra below -60 dB SPL/Hz are stored as -60.
    n = 3 * FS
    score = _score(_voice(n)[:, None], np.zeros((n, 1)), 0.5, 2.5, layout="mono")
    assert score.background_spectrum_db == (-60.0,) * 18
    assert score.background_db is None and score.sbld_lu is None
    assert "the background is silent under this cue" in score.reason


def test_stereo_listener_power_is_the_sum_of_the_two_loudspeakers(rng: np.random.Generator) -> None:
    # Ground truth: noise x in L alone, in R alone, and x / sqrt(2) in both (the same signal):
    # L^2 + R^2 is the same power each time (an incoherent sum at the listener; a sum of the
    # signals, (L + R)^2, would read the last case 3 dB louder).
    n = 3 * FS
    speech = np.stack([_voice(n), _voice(n)], axis=1)
    x = 0.01 * rng.standard_normal(n)
    cases = [np.stack([x, 0 * x], 1), np.stack([0 * x, x], 1), np.stack([x, x], 1) / math.sqrt(2.0)]
    scores = [_score(speech, bg, 0.5, 2.5, layout="stereo") for bg in cases]
    for other in scores[1:]:
        assert other.background_db == pytest.approx(scores[0].background_db, abs=1e-4)
        np.testing.assert_allclose(other.background_spectrum_db, scores[0].background_spectrum_db, atol=1e-4)


@pytest.mark.parametrize(
    ("run", "value", "flagged"),
    [(2, 1.0, False), (3, 1.0, True), (3, 0.9995, True), (3, 0.998, False)],
    ids=["two-at-full-scale", "three-at-full-scale", "three-at-0.9995", "three-at-0.998"],
)
def test_clipping_is_three_consecutive_samples_at_0_999(run: int, value: float, flagged: bool, rng: np.random.Generator) -> None:
    # Constructed: a run of samples at a set value inside the cue (docs/methods.md: three or
    # more consecutive samples at |x| >= 0.999).
    n = 3 * FS
    speech = 0.5 * np.stack([_voice(n), _voice(n)], axis=1)
    bg = 0.01 * rng.standard_normal((n, 2))
    bg[FS : FS + run, 0] = value
    assert ("clipped audio" in _score(speech, bg, 0.5, 2.5, layout="stereo").reason) is flagged


def test_mix_scores_have_no_stoi_and_a_mono_mix_has_no_short_time_sii(rng: np.random.Generator) -> None:
    # Ground truth: STOI needs the clean dialogue; a mono mix has no speech-free channel to
    # follow the background frame by frame, so its short-time SII is its SII.
    n = 3 * FS
    mono = _score(_voice(n)[:, None], 0.01 * rng.standard_normal((n, 1)), 0.5, 2.5, layout="mono", kind="mix")
    assert mono.stoi is None and "no STOI: it needs the clean dialogue (stems)" in mono.reason
    assert mono.sii_short == pytest.approx(mono.sii, abs=1e-12) and "mono mix" in mono.reason
    stereo = _score(np.stack([_voice(n)] * 2, 1), 0.01 * rng.standard_normal((n, 2)), 0.5, 2.5, layout="stereo", kind="mix")
    assert stereo.stoi is None and stereo.sii is not None


def test_stoi_is_not_computed_for_a_cue_longer_than_30_s(rng: np.random.Generator) -> None:
    # Constructed: a 31 s cue of stems (docs/methods.md: samples are held per cue up to 30 s).
    n = 32 * FS
    speech = np.stack([_voice(n)] * 2, axis=1)
    score = _score(speech, 0.01 * rng.standard_normal((n, 2)), 0.5, 31.5, layout="stereo")
    assert score.stoi is None and "no STOI: the span must be" in score.reason and score.sii is not None


# --------------------------------------------------------------------------- band analysis


def test_decimation_rejects_what_would_alias_into_the_low_bands_by_75_db() -> None:
    # Ground truth: a tone 300 Hz from a multiple of the low-band rate (48 kHz / floor(48 kHz /
    # LOW_RATE_HZ)) would fold onto 300 Hz, inside the 315 Hz band; the decimation filter
    # (Kaiser FIR designed for 80 dB, "75-80 dB measured") must keep it 75 dB down there.
    low_rate = FS / (FS // LOW_RATE_HZ)
    band = int(np.flatnonzero(SII_BANDS_HZ == 315)[0])
    t = np.arange(2 * FS) / FS
    for k in (1, 2):
        for f_hz in (k * low_rate - 300.0, k * low_rate + 300.0):
            x = (0.5 * np.sin(2 * np.pi * f_hz * t)).astype(np.float32)
            analyzer = BandAnalyzer(FS)
            power = np.concatenate([analyzer.process(x), analyzer.flush()])[20:-20, band].mean()
            assert 10 * math.log10(power / 0.125) < -75.0, f_hz


@pytest.mark.parametrize("fs", [48000, 44100], ids=["48k", "44k1"])
def test_low_band_tones_read_within_0_1_db(fs: int) -> None:
    # Ground truth: a sine of amplitude A has mean square A**2 / 2; the 80 ms window keeps a tone
    # at each band centre below 630 Hz within 0.1 dB (docs/methods.md, "Band analysis").
    t = np.arange(fs) / fs
    for band in np.flatnonzero(SII_BANDS_HZ < 630):
        x = (0.3 * np.sin(2 * np.pi * SII_BANDS_HZ[band] * t + 0.7)).astype(np.float32)
        analyzer = BandAnalyzer(fs)
        power = np.concatenate([analyzer.process(x), analyzer.flush()])[15:-15, band]
        np.testing.assert_allclose(10 * np.log10(power), 10 * math.log10(0.3**2 / 2), atol=0.1)


def test_bands_at_and_above_nyquist(rng: np.random.Generator) -> None:
    # Ground truth: white noise of variance s2 has one-sided density 2 s2 / fs. At 12 kHz the
    # 8 kHz band (7127-8980 Hz) lies wholly above the 6 kHz Nyquist frequency and reads zero;
    # the 6.3 kHz band (5612-7071 Hz) keeps its part below 6 kHz (within 0.5 dB: 10 s of noise).
    fs, s2 = 12000, 0.01
    x = (math.sqrt(s2) * rng.standard_normal(10 * fs)).astype(np.float32)
    analyzer = BandAnalyzer(fs)
    power = np.concatenate([analyzer.process(x), analyzer.flush()])[10:-10].mean(axis=0)
    assert power[-1] == 0.0
    below_hz = fs / 2 - 6300 * 2 ** (-1 / 6)
    assert 10 * math.log10(power[-2] / (2 * s2 / fs * below_hz)) == pytest.approx(0.0, abs=0.5)


# --------------------------------------------------------------------------- planning details


def test_ramps_are_shortened_only_at_the_programme_edges() -> None:
    # Constructed: speech from 0.25 s, one cue mid-programme, speech ending 0.35 s before the
    # end; ramps default 400 / 600 ms (docs/methods.md, "Events, not cue-by-cue pumping").
    specs = [CueSpec(0.05, 2.0, snr_db=0.0), CueSpec(20.0, 23.0, snr_db=0.0), CueSpec(40.0, 42.55, snr_db=0.0)]
    analysis = make_analysis(specs, duration_s=42.7)
    first, middle, last = plan_events(analysis, PlanSettings())
    assert first.start_s == pytest.approx(0.25) and first.ramp_in_ms == pytest.approx(250.0)
    assert first.ramp_out_ms == 600.0 and middle.ramp_in_ms == 400.0 and middle.ramp_out_ms == 600.0
    assert last.ramp_in_ms == 400.0
    assert last.ramp_out_ms == pytest.approx(1000.0 * (42.7 - last.end_s), abs=1e-3) and last.ramp_out_ms < 600.0


@pytest.mark.parametrize(
    ("target_lu", "max_lift_db", "lift", "cut"),
    [(10.1, 6.0, 3.0, -3.1), (14.0, 3.0, 3.0, -7.0)],
    ids=["half-rounded-down", "lift-at-its-limit"],
)
def test_both_gives_half_as_lift_and_the_rest_as_cut(target_lu: float, max_lift_db: float, lift: float, cut: float) -> None:
    # Constructed: speech 4 LU over the background; the target needs 6.1 dB (61 tenths: 30 as
    # lift, rounded down, 31 as cut) or 10 dB with the lift limited to 3 dB (the cut takes 7).
    spec = CueSpec(10.0, 13.0, snr_db=4.0)
    (event,) = plan_events(make_analysis([spec]), PlanSettings(target_kind="lu", target_lu=target_lu, move="both", max_lift_db=max_lift_db))
    assert (event.dialogue_gain_db, event.background_gain_db) == (lift, cut)
    assert event.reachable and event.score_after == pytest.approx(target_lu, abs=1e-9)


def test_an_event_reports_its_worst_cue() -> None:
    # Reference: SII from the reference package. Two cues 0.5 s apart share an event; the one
    # at -3 dB SNR needs the larger cut; at that cut it is still the lower score, so the
    # event's before/after scores are that cue's.
    worse, better = CueSpec(10.0, 13.0, snr_db=-3.0), CueSpec(13.5, 16.5, snr_db=1.0)
    (event,) = plan_events(make_analysis([worse, better]), PlanSettings())
    e = NORMAL_SPEECH_DB
    assert event.cue_indices == (1, 2)
    assert event.score_before == pytest.approx(reference_sii(e, e + 3.0), abs=1e-9)
    assert event.score_after == pytest.approx(reference_sii(e, e + 3.0 + event.background_gain_db), abs=1e-9)
    assert event.score_after < reference_sii(e, e - 1.0 + event.background_gain_db)


def test_gentle_never_moves_a_stem_by_more_than_3_db() -> None:
    # Source: docs/methods.md, "Strength": named steps, and at most strength x each limit
    # (0.25 x 12 dB cut, 0.25 x 6 dB lift).
    assert STRENGTH_STEPS == {"gentle": 0.25, "moderate": 0.5, "strong": 0.75, "full": 1.0}
    specs = [CueSpec(5.0 * k, 5.0 * k + 3.0, snr_db=snr) for k, snr in enumerate([-10.0, -6.0, -2.0, 0.0, 2.0], start=1)]
    analysis = make_analysis(specs)
    for move in ("background", "dialogue", "both"):
        events = plan_events(analysis, PlanSettings(move=move, strength=STRENGTH_STEPS["gentle"]))  # type: ignore[arg-type]
        assert events
        for e in events:
            assert -3.0 - 1e-9 <= e.background_gain_db and e.dialogue_gain_db <= 1.5 + 1e-9


def test_lu_target_severity_is_the_shortfall_over_20_lu() -> None:
    # Constructed: speech 4 LU over the background, target 10 LU: shortfall 6 / 20 = 0.3 of
    # each speech second (docs/methods.md, "Scenes"); 2.6 s of speech (3 s cue, 0.2 s pads).
    settings_ = PlanSettings(target_kind="lu", target_lu=10.0)
    analysis = make_analysis([CueSpec(10.0, 13.0, snr_db=4.0)])
    (scene,) = find_scenes(analysis, plan_events(analysis, settings_), settings_)
    assert scene.severity == pytest.approx(2.6 * 0.3, abs=1e-6)


def test_scenes_rank_by_severity_then_uncovered_speech_then_time() -> None:
    # Constructed: four clear scenes (severity 0) with 3 s, 6 s, 0 s and 0 s of speech no cue covers.
    specs = [CueSpec(0.0, 2.0, snr_db=20.0), CueSpec(30.0, 32.0, snr_db=20.0),
             CueSpec(60.0, 62.0, snr_db=20.0), CueSpec(90.0, 92.0, snr_db=20.0)]  # fmt: skip
    analysis = make_analysis(specs, uncovered=[(2.5, 5.5), (32.5, 38.5)])
    scenes = find_scenes(analysis, (), PlanSettings())
    assert [s.cue_indices for s in scenes] == [(2,), (1,), (3,), (4,)]
    assert [s.rank for s in scenes] == [1, 2, 3, 4]


# --------------------------------------------------------------------------- reports

#: The eight colours of Okabe and Ito, "Color Universal Design" (2008), hex RGB (from memory:
#: black, orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple).
OKABE_ITO = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}


def test_report_colours_are_okabe_ito_hues_or_neutral_greys() -> None:
    # Source: docs/methods.md, "Reports"; every colour of the palette module is one of the
    # eight, or a grey (R = G = B), which carries no hue to confuse.
    from planner.report import palette

    colours = [v for v in vars(palette).values() if isinstance(v, str) and v.startswith("#")]
    for group in (palette.VERDICT_COLOURS, palette.ACTION_COLOURS):
        colours += list(group.values())
    colours += list(palette.SCENE_COLOURS)
    assert len(colours) >= 10
    for colour in colours:
        rgb = colour.upper()
        assert rgb in OKABE_ITO or rgb[1:3] == rgb[3:5] == rgb[5:7], colour


# --------------------------------------------------------------------------- claims and tests
#
# docs/methods.md statement -> test (this file unless named).
#
# SII: clause 4 steps (Eq. 5, 7, 9, 10, 11, 12-14) -> test_sii.py (package examples, random
#   spectra) and test_oracle_is_the_reference_package; defaults N' = -50, T' = 0 and the
#   -inf band -> test_sii.py; vectorised -> test_sii.py.
# Band analysis: edges, mean square, bandwidth, frames, split invariance, 22.05 kHz hop, click
#   frame, Butterworth agreement -> test_bands.py; 80 ms window within 0.1 dB ->
#   test_low_band_tones_read_within_0_1_db; decimation 75-80 dB -> test_decimation_rejects...;
#   Nyquist -> test_bands_at_and_above_nyquist; speed -> benchmarks/bench_bands.py.
# Hearing profiles: ISO 7029 presets, interpolation, end values held, audiogram files ->
#   test_hearing.py.
# Gain planning: smallest 0.1 dB step, grid and bisection, limits, strength, just-noticeable
#   rule, level-limited cues, LU targets, move kinds, merging, events inside the programme ->
#   test_gains.py; "both" halves and remainder -> test_both_gives_half...; worst cue ->
#   test_an_event_reports_its_worst_cue; ramps shortened only at the edges ->
#   test_ramps_are_shortened_only_at_the_programme_edges; "an overall level change is never
#   proposed" -> test_no_event_moves_dialogue_and_background_together,
#   test_a_cue_limited_by_its_level_is_not_offered_a_level_change,
#   test_six_db_louder_needs_the_same_background_cut, test_turning_up_loud_dialogue_never_needs_less_cut.
# Strength: steps and "gentle never more than 3 dB" -> test_gentle_never_moves...; the table of
#   fixed/flagged cues -> benchmarks/bench_plan.py.
# Scenes: gap and background-change splits, severity for SII targets, reasons -> test_scenes.py;
#   LU severity -> test_lu_target_severity...; rank order -> test_scenes_rank_by...; the demo
#   figures (6.7 dB, 14 dB, scene ranks) -> benchmarks/bench_plan.py.
# Listening level: offset = level + 23, 997 Hz tone at L + offset -> test_a_997_hz_tone...;
#   +6 dB raises every level 6 dB -> test_masking.py and test_six_db_louder_leaves...;
#   -60 dB SPL/Hz floor -> test_a_silent_background_is_stored_at_the_spectrum_floor.
# Loudspeaker sum: 5.1 weights and fold-down -> test_masking.py; stereo L^2 + R^2 ->
#   test_stereo_listener_power_is_the_sum_of_the_two_loudspeakers.
# Per-cue scores: levels, SII, profiles, STOI = pystoi, short cues, no-score, silence, block
#   size -> test_masking.py; clipping threshold -> test_clipping_is_three...; STOI for a mix and
#   over 30 s, mono short-time SII -> test_mix_scores_have_no_stoi..., test_stoi_is_not_computed...
# Mix-only estimates: WADA table and self-check, tracker, evidence, confidence, mix vs stems ->
#   test_estimate.py.
# Verdict: the rule and the 15 LU option -> test_masking.py.
# Episode verdict: the action classes and their figures -> test_report_terminal.py
#   (test_episode_verdict_rule, test_no_scored_cue_is_not_ok).
# Reports: views, strip, timecodes, JSON -> test_report_terminal.py; the page, clips (mono,
#   16 kHz, BS.775 fold-down) -> test_report_html.py; Okabe-Ito colours ->
#   test_report_colours_are_okabe_ito_hues_or_neutral_greys.
# Turning the programme up (common practice) -> test_six_db_louder_leaves_every_loudness_difference_unchanged,
#   test_six_db_louder_changes_the_sii_only_through_its_level_terms,
#   test_louder_maskers_spread_further_so_the_level_terms_are_three,
#   test_six_db_louder_needs_the_same_background_cut, test_turning_up_loud_dialogue_never_needs_less_cut,
#   test_no_event_moves_dialogue_and_background_together,
#   test_a_cue_limited_by_its_level_is_not_offered_a_level_change.
