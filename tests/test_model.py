"""Records round-trip exactly through JSON, and loading is strict about fields and types."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.errors import PlanFileError
from planner.model import (
    Alignment,
    Cue,
    CueScore,
    CueTiming,
    GainEvent,
    MappingSegment,
    Scene,
    SpeechActivity,
    UncoveredSpeech,
)

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)
maybe = st.none() | finite
text = st.text(max_size=40)
small_int = st.integers(min_value=0, max_value=10_000)

cues = st.builds(Cue, index=small_int, cue_id=text, start_s=finite, end_s=finite, text=text, settings=text)
timings = st.builds(
    CueTiming,
    index=small_int,
    aligned_start_s=finite,
    aligned_end_s=finite,
    onset_error_ms=maybe,
    offset_error_ms=maybe,
    speech_s=finite,
    cps=finite,
    flags=st.lists(text, max_size=3).map(tuple),
)
scores = st.builds(
    CueScore,
    index=small_int,
    method=st.sampled_from(["stems", "mix", "none"]),
    speech_s=finite,
    speech_db=maybe,
    background_db=maybe,
    sbld_lu=maybe,
    sii=maybe,
    sii_short=maybe,
    stoi=maybe,
    confidence=finite,
    verdict=st.sampled_from(["clear", "at-risk", "masked", "no-score"]),
    reason=text,
    speech_spectrum_db=st.lists(finite, max_size=18).map(tuple),
    background_spectrum_db=st.lists(finite, max_size=18).map(tuple),
    sii_by_profile=st.dictionaries(text, finite, max_size=3),
)
events = st.builds(
    GainEvent,
    event_id=text,
    start_s=finite,
    end_s=finite,
    ramp_in_ms=finite,
    ramp_out_ms=finite,
    background_gain_db=finite,
    dialogue_gain_db=finite,
    cue_indices=st.lists(small_int, max_size=4).map(tuple),
    reason=text,
    target_kind=st.sampled_from(["sii", "lu"]),
    target=finite,
    score_before=finite,
    score_after=finite,
    reachable=st.booleans(),
)
scenes = st.builds(
    Scene,
    scene_id=text,
    start_s=finite,
    end_s=finite,
    cue_indices=st.lists(small_int, max_size=4).map(tuple),
    rank=small_int,
    severity=finite,
    masked_s=finite,
    worst_cue_index=st.none() | small_int,
    reason=text,
)
alignments = st.builds(
    Alignment,
    segments=st.lists(
        st.builds(MappingSegment, subs_start_s=finite, subs_end_s=finite, rate_ratio=finite, offset_s=finite),
        min_size=1,
        max_size=3,
    ).map(tuple),
    confidence=finite,
    rate_name=text,
    breaks_s=st.lists(finite, max_size=3).map(tuple),
    notes=st.lists(text, max_size=2).map(tuple),
)
uncovered = st.builds(UncoveredSpeech, start_s=finite, end_s=finite, confidence=finite)


@settings(max_examples=150, deadline=None)
@given(record=st.one_of(cues, timings, scores, events, scenes, alignments, uncovered))
def test_records_round_trip_exactly_through_json(record: object) -> None:
    # Ground truth: the record itself; JSON floats are Python's shortest round-trip repr.
    text_form = json.dumps(record.to_dict(), sort_keys=True, allow_nan=False)  # type: ignore[attr-defined]
    back = type(record).from_dict(json.loads(text_form))  # type: ignore[attr-defined]
    assert back == record
    assert json.dumps(back.to_dict(), sort_keys=True) == text_form


def test_unknown_field_is_named() -> None:
    data = Cue(index=1, cue_id="1", start_s=0.0, end_s=1.0, text="Hello").to_dict()
    data["colour"] = "red"
    with pytest.raises(PlanFileError, match=r"Cue\.colour: unknown field 'colour'"):
        Cue.from_dict(data)


@pytest.mark.parametrize(
    ("field", "value", "needle"),
    [("start_s", "soon", "expected a number"), ("index", 1.5, "expected a whole number"), ("text", 3, "expected text")],
    ids=["number", "integer", "text"],
)
def test_wrong_types_are_named(field: str, value: object, needle: str) -> None:
    data = Cue(index=1, cue_id="1", start_s=0.0, end_s=1.0, text="Hello").to_dict()
    data[field] = value
    with pytest.raises(PlanFileError, match=needle):
        Cue.from_dict(data)


def test_bad_literal_lists_the_choices() -> None:
    data = Scene(
        scene_id="S001", start_s=0.0, end_s=1.0, cue_indices=(1,), rank=1, severity=0.5, masked_s=1.0,
        worst_cue_index=1, reason="",
    ).to_dict()  # fmt: skip
    event = {**GainEvent(
        event_id="E001", start_s=1.0, end_s=2.0, ramp_in_ms=100.0, ramp_out_ms=100.0, background_gain_db=-6.0,
        dialogue_gain_db=0.0, cue_indices=(1,), reason="", target_kind="sii", target=0.75, score_before=0.5,
        score_after=0.75, reachable=True,
    ).to_dict(), "target_kind": "loudness"}  # fmt: skip
    assert Scene.from_dict(data).rank == 1
    with pytest.raises(PlanFileError, match="'sii', 'lu'"):
        GainEvent.from_dict(event)


def test_speech_activity_keeps_segments_and_quantised_probability(rng: np.random.Generator) -> None:
    # Ground truth: a constructed track; the probability is stored in steps of 1/255.
    prob = rng.random(500).astype(np.float32)
    mask = prob > 0.5
    act = SpeechActivity(frame_s=0.01, probability=prob, is_speech=mask, backend="fast", source="mono")
    back = SpeechActivity.from_dict(json.loads(json.dumps(act.to_dict())))
    assert np.array_equal(back.is_speech, mask)
    assert np.max(np.abs(back.probability - prob)) <= 0.5 / 255 + 1e-7
    assert back.segments() == act.segments()
    assert back.level_db is None  # no level track given, none stored


def test_speech_activity_keeps_the_level_track_to_half_a_decibel(rng: np.random.Generator) -> None:
    # Ground truth: a constructed level track from -140 to +3 dB; stored in 0.5 dB steps
    # from -127.5 to 0 dB (planner.model.SpeechActivity), so values outside are clipped.
    level = rng.uniform(-140.0, 3.0, 400).astype(np.float32)
    mask = np.zeros(400, dtype=bool)
    act = SpeechActivity(frame_s=0.01, probability=mask.astype(np.float32), is_speech=mask, backend="fast",
                         source="mono", level_db=level)  # fmt: skip
    back = SpeechActivity.from_dict(json.loads(json.dumps(act.to_dict())))
    assert back.level_db is not None
    assert np.max(np.abs(back.level_db - np.clip(level, -127.5, 0.0))) <= 0.25 + 1e-5


def test_speech_activity_refuses_a_track_of_the_wrong_length() -> None:
    mask = np.zeros(10, dtype=bool)
    data = SpeechActivity(frame_s=0.01, probability=mask.astype(np.float32), is_speech=mask, backend="fast",
                          source="mono", level_db=np.zeros(10, np.float32)).to_dict()  # fmt: skip
    data["n_frames"] = 12
    with pytest.raises(PlanFileError, match="probability_u8 holds 10 frames"):
        SpeechActivity.from_dict(data)
