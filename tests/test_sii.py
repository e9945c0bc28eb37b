"""ANSI S3.5-1997 SII against the standard's Table 3 and the `speech-intelligibility-index` package.

Reference values come from ../shared CHECKS section 2: Table 3 as transcribed in the
`speech-intelligibility-index` 1.0.2 package, the worked examples of its ``sii_test.py``
(values derived there from the original Matlab implementation), and values computed with
that package. The package is a test reference only; its band-importance look-up by name is
off by one, so importance values are always passed to it explicitly.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from speech_intelligibility_index import sii as ref

from planner.analysis.sii import (
    BAND_IMPORTANCE_AVERAGE,
    FREE_FIELD_TO_EARDRUM_DB,
    INTERNAL_NOISE_DB,
    SII_BANDS_HZ,
    STANDARD_SPEECH_SPECTRA,
    band_audibility,
    one_third_octave_bandwidths_hz,
    sii,
)
from planner.errors import InputError

NORMAL = STANDARD_SPEECH_SPECTRA["normal"]
SHOUT = STANDARD_SPEECH_SPECTRA["shout"]
AVERAGE = np.asarray(BAND_IMPORTANCE_AVERAGE)
BINAURAL_DB_HL = -1.7  # ANSI S3.5 clause 5.1.5, as applied by the package's input_5p1


# --- (a) Table 3 constants --------------------------------------------------------------


def test_band_centres_are_the_nominal_table_3_frequencies() -> None:
    # ANSI S3.5 Table 3 nominal mid-band frequencies; 3150 Hz (the package types 3159).
    assert SII_BANDS_HZ.tolist() == [
        160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000,
    ]  # fmt: skip


@pytest.mark.parametrize(
    ("ours", "theirs"),
    [
        (BAND_IMPORTANCE_AVERAGE, ref.band_importance(1)),  # Table 3 importance, package column 1
        (STANDARD_SPEECH_SPECTRA["normal"], ref.speech_spectrum("normal")),
        (STANDARD_SPEECH_SPECTRA["raised"], ref.speech_spectrum("raised")),
        (STANDARD_SPEECH_SPECTRA["loud"], ref.speech_spectrum("loud")),
        (STANDARD_SPEECH_SPECTRA["shout"], ref.speech_spectrum("shout")),
        (FREE_FIELD_TO_EARDRUM_DB, ref.ff2ed()[0]),
    ],
    ids=["importance", "normal", "raised", "loud", "shout", "ff2ed"],
)
def test_table_3_columns_match_the_package_transcription(ours: np.ndarray, theirs: np.ndarray) -> None:
    # Source: ANSI S3.5-1997 Table 3 via speech_intelligibility_index/sii.py (CHECKS 2.1).
    np.testing.assert_allclose(ours, theirs, atol=1e-12)


def test_table_3_spot_values_and_importance_sum() -> None:
    # Source: CHECKS 2.1 (Table 3): band 1 importance 0.0083, band 12 0.0898, internal noise
    # band 1 +0.6 dB and band 15 -25.9 dB, importance sums to 1.0000.
    assert BAND_IMPORTANCE_AVERAGE[0] == 0.0083 and BAND_IMPORTANCE_AVERAGE[11] == 0.0898
    assert INTERNAL_NOISE_DB[0] == 0.6 and INTERNAL_NOISE_DB[14] == -25.9
    assert BAND_IMPORTANCE_AVERAGE.sum() == pytest.approx(1.0, abs=1e-9)


@pytest.mark.parametrize(
    ("effort", "overall_db_spl"),
    [("normal", 62.35), ("raised", 68.34), ("loud", 74.85), ("shout", 82.30)],
    ids=["normal", "raised", "loud", "shout"],
)
def test_standard_spectra_overall_levels(effort: str, overall_db_spl: float) -> None:
    # Source: ANSI S3.5 Table 3 bottom row, overall levels (CHECKS 2.2): band spectrum level
    # x one-third-octave bandwidth, summed in power, within 0.1 dB.
    power = 10.0 ** (STANDARD_SPEECH_SPECTRA[effort] / 10.0) * one_third_octave_bandwidths_hz()
    assert 10.0 * np.log10(power.sum()) == pytest.approx(overall_db_spl, abs=0.1)


# --- (b) worked examples ----------------------------------------------------------------


CHAS_SPEECH = [90, 5] + [40] * 12 + [-10] * 4
CHAS_NOISE = [10, -10, -10, 75] + [-10] * 10 + [10] * 4
CHAS_THRESHOLD = [90] + [0] * 17


def test_chas_example_average_speech() -> None:
    # Source: sii_test.ChasTest.test_to (from an original C implementation): 0.445.
    assert sii(CHAS_SPEECH, CHAS_NOISE, CHAS_THRESHOLD) == pytest.approx(0.445, abs=1e-3)


def test_chas_example_custom_importance() -> None:
    # Source: sii_test.ChasTest.test_to_1: importance 0.1 in bands 10-16, 0.3 in band 17: 0.438.
    importance = [0.0] * 9 + [0.1] * 7 + [0.3, 0.0]
    assert sii(CHAS_SPEECH, CHAS_NOISE, CHAS_THRESHOLD, importance=importance) == pytest.approx(0.438, abs=1e-3)


# sii_test.ExampleTest.test_example_1 expected values (Matlab-derived), distances 0.5..20 m.
EXAMPLE_1_DISTANCES_M = np.arange(0.5, 20.1, 0.5)
EXAMPLE_1_NORMAL = [
    1.0000, 0.9969, 0.9947, 0.9920, 0.9885, 0.9856, 0.9831, 0.9810, 0.9791, 0.9775,
    0.9760, 0.9746, 0.9722, 0.9698, 0.9677, 0.9657, 0.9638, 0.9619, 0.9600, 0.9583,
    0.9567, 0.9551, 0.9532, 0.9508, 0.9477, 0.9434, 0.9380, 0.9322, 0.9266, 0.9203,
    0.9143, 0.9084, 0.9024, 0.8962, 0.8901, 0.8844, 0.8788, 0.8733, 0.8680, 0.8627,
]  # fmt: skip
EXAMPLE_1_SHOUT = [
    0.8809, 0.9177, 0.9386, 0.9522, 0.9623, 0.9705, 0.9768, 0.9819, 0.9865, 0.9899,
    0.9928, 0.9949, 0.9967, 0.9977, 0.9979, 0.9975, 0.9970, 0.9966, 0.9962, 0.9958,
    0.9954, 0.9950, 0.9947, 0.9943, 0.9940, 0.9937, 0.9934, 0.9931, 0.9929, 0.9926,
    0.9924, 0.9921, 0.9919, 0.9916, 0.9914, 0.9912, 0.9909, 0.9906, 0.9903, 0.9900,
]  # fmt: skip


@pytest.mark.parametrize(
    ("effort", "expected"), [("normal", EXAMPLE_1_NORMAL), ("shout", EXAMPLE_1_SHOUT)], ids=["normal", "shout"]
)
def test_example_1_quiet_free_field_versus_distance(effort: str, expected: list[float]) -> None:
    # Source: sii_test.ExampleTest.test_example_1: binaural, no noise; speech level at the
    # listener E = U - 20 log10(r / 1 m) (ANSI S3.5 Eq. 16), threshold -1.7 dB (clause 5.1.5).
    speech = STANDARD_SPEECH_SPECTRA[effort] - 20.0 * np.log10(EXAMPLE_1_DISTANCES_M)[:, None]
    got = sii(speech, None, np.full(18, BINAURAL_DB_HL))
    np.testing.assert_allclose(got, expected, atol=1e-4)


EXAMPLE_2_LEVELS_DB = np.arange(0.0, 80.1, 2.0)
EXAMPLE_2_OPEN = [
    0.9177, 0.9177, 0.9177, 0.9173, 0.9161, 0.9126, 0.9092, 0.9035, 0.8967, 0.8894,
    0.8795, 0.8672, 0.8508, 0.8306, 0.8070, 0.7790, 0.7482, 0.7073, 0.6565, 0.5960,
    0.5372, 0.4783, 0.4225, 0.3669, 0.3117, 0.2604, 0.2105, 0.1657, 0.1250, 0.0865,
    0.0534, 0.0245, 0.0062] + [0.0] * 8  # fmt: skip
EXAMPLE_2_PLUGS = [
    0.9400, 0.9400, 0.9400, 0.9400, 0.9400, 0.9400, 0.9400, 0.9400, 0.9400, 0.9384,
    0.9327, 0.9240, 0.9116, 0.8942, 0.8715, 0.8457, 0.8164, 0.7780, 0.7277, 0.6624,
    0.5988, 0.5352, 0.4738, 0.4138, 0.3542, 0.2973, 0.2432, 0.1943, 0.1498, 0.1082,
    0.0709, 0.0367, 0.0126] + [0.0] * 8  # fmt: skip
# Foam ear-plug attenuation used by the package's Example 2, dB (insertion gain = minus this).
EXAMPLE_2_PLUG_ATTENUATION_DB = np.array(
    [36.1, 37.0, 38.0, 37.7, 37.4, 37.2, 37.0, 36.9, 36.7, 36.4, 36.1, 35.8, 38.0, 40.3, 40.7, 41.0, 41.5, 42.5]
)


@pytest.mark.parametrize(
    ("insertion_gain_db", "expected"),
    [(np.zeros(18), EXAMPLE_2_OPEN), (-EXAMPLE_2_PLUG_ATTENUATION_DB, EXAMPLE_2_PLUGS)],
    ids=["open-ear", "ear-plugs"],
)
def test_example_2_shout_in_white_noise(insertion_gain_db: np.ndarray, expected: list[float]) -> None:
    # Source: sii_test.ExampleTest.test_example_2: shouted speech at 1 m, flat noise spectrum
    # level 0..80 dB; the insertion gain applies to speech and noise (Eq. 17-18). The example
    # asks for binaural listening but discards the -1.7 dB threshold it gets back, so its
    # expected values are for the default 0 dB HL threshold.
    speech = SHOUT + insertion_gain_db
    noise = EXAMPLE_2_LEVELS_DB[:, None] + insertion_gain_db
    got = sii(speech, noise)
    np.testing.assert_allclose(got, expected, atol=1e-4)


@pytest.mark.parametrize(
    ("snr_db", "expected"),
    [(-10, 0.1248), (-5, 0.2957), (0, 0.4663), (5, 0.6363), (10, 0.8052), (15, 0.9715), (20, 0.9958)],
    ids=lambda v: str(v),
)
def test_full_procedure_noise_shaped_like_speech(snr_db: float, expected: float) -> None:
    # Source: CHECKS 2.2 [calc, package]: normal speech, noise spectrum = speech spectrum - s.
    assert sii(NORMAL, NORMAL - snr_db) == pytest.approx(expected, abs=1e-4)


def test_level_distortion_example() -> None:
    # Source: CHECKS 2.2: normal speech + 20 dB, no noise: L = 1 - 10/160 = 0.9375 in every
    # band (ANSI S3.5 Eq. 11), all bands fully audible, so SII = 0.9375.
    assert sii(NORMAL + 20.0) == pytest.approx(0.9375, abs=1e-4)
    np.testing.assert_allclose(band_audibility(NORMAL + 20.0), 0.9375, atol=1e-12)


@pytest.mark.parametrize(
    ("effort", "expected"),
    [("normal", 0.9958), ("raised", 0.9983), ("loud", 0.9681), ("shout", 0.9177)],
    ids=["normal", "raised", "loud", "shout"],
)
def test_quiet_one_metre_monaural(effort: str, expected: float) -> None:
    # Source: CHECKS 2.2 [calc, package]: standard spectra at 1 m, default noise and threshold.
    assert sii(STANDARD_SPEECH_SPECTRA[effort]) == pytest.approx(expected, abs=1e-4)


@pytest.mark.parametrize(
    ("snr_db", "expected"),
    [(-20, 0.0), (-15, 0.0), (-5, 1 / 3), (0, 0.5), (5, 2 / 3), (15, 1.0), (25, 1.0)],
    ids=lambda v: str(v),
)
def test_flat_snr_relation_when_masking_is_neutralised(snr_db: float, expected: float) -> None:
    # Source: CHECKS 2.2 [calc] SII = clip((s + 15) / 30, 0, 1) (Eq. 12 with L = 1). The
    # disturbance is made the internal noise alone, set s dB below the speech through the
    # threshold T' = U - s - X; self-masking (U - 24 dB, spread upward) stays more than 15 dB
    # below U, so it never sets D, and the speech is at normal effort, so L = 1.
    got = sii(NORMAL, None, NORMAL - snr_db - INTERNAL_NOISE_DB)
    assert got == pytest.approx(expected, abs=1e-12)


# --- (c) property test against the package and vectorisation ----------------------------

levels = arrays(np.float64, 18, elements=st.floats(-20.0, 110.0, allow_nan=False))
thresholds = arrays(np.float64, 18, elements=st.floats(-10.0, 100.0, allow_nan=False))


@settings(max_examples=200, deadline=None)
@given(speech=levels, noise=levels, threshold=thresholds)
def test_random_spectra_agree_with_the_package(speech: np.ndarray, noise: np.ndarray, threshold: np.ndarray) -> None:
    # Source: speech_intelligibility_index.sii.sii (reference implementation), to 0.005.
    expected = ref.sii(speech, noise, threshold, band_importance_function=AVERAGE)
    assert sii(speech, noise, threshold) == pytest.approx(expected, abs=0.005)


def test_vectorised_over_leading_axes_equals_one_at_a_time(rng: np.random.Generator) -> None:
    # Relation: a (2, 3, 18) batch gives the package's value for each row.
    speech = rng.uniform(0.0, 90.0, (2, 3, 18))
    noise = rng.uniform(0.0, 90.0, (2, 3, 18))
    got = sii(speech, noise)
    assert got.shape == (2, 3)
    expected = [
        [ref.sii(speech[i, j], noise[i, j], band_importance_function=AVERAGE) for j in range(3)] for i in range(2)
    ]
    np.testing.assert_allclose(got, expected, atol=1e-12)


def test_silent_speech_band_is_inaudible_not_nan() -> None:
    # Ground truth: -inf dB speech (no energy) contributes nothing; zero-energy noise is no noise.
    assert sii(np.full(18, -np.inf)) == 0.0
    assert sii(NORMAL, np.full(18, -np.inf)) == pytest.approx(sii(NORMAL, np.full(18, -200.0)), abs=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"speech_db": np.zeros(17)}, r"speech_db has shape \(17,\)"),
        ({"speech_db": np.zeros(18), "noise_db": np.full(18, np.nan)}, "noise_db contains NaN"),
        ({"speech_db": np.zeros((2, 18)), "noise_db": np.zeros((3, 18))}, "do not broadcast"),
        ({"speech_db": np.zeros(18), "importance": np.ones((2, 18))}, r"importance has shape \(2, 18\)"),
    ],
    ids=["17-bands", "nan-noise", "no-broadcast", "2d-importance"],
)
def test_bad_inputs_raise(kwargs: dict[str, np.ndarray], match: str) -> None:
    with pytest.raises(InputError, match=match):
        sii(**kwargs)
