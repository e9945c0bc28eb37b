"""Scene grouping, ranking and the plan record, against hand-built analyses.

Ground truth is constructed by the tests (tests/plan_factory.py): gaps, background levels
and shapes, per-band SNRs (whose reference SII comes from ``speech-intelligibility-index``),
and runs of uncovered speech of known length.
"""

from __future__ import annotations

import numpy as np
import pytest
from plan_factory import CueSpec, make_analysis

from planner.model import SCHEMA_VERSION
from planner.planning.gains import plan_events
from planner.planning.scenes import LEVEL_JUMP_DB, SHAPE_CHANGE_DB, find_scenes, make_plan
from planner.settings import PlanSettings


def _scenes(specs: list[CueSpec], **kw: object) -> tuple:
    analysis = make_analysis(specs, **kw)  # type: ignore[arg-type]
    settings = PlanSettings()
    return find_scenes(analysis, plan_events(analysis, settings), settings)


def _by_time(scenes: tuple) -> list:
    return sorted(scenes, key=lambda s: s.start_s)


def test_a_gap_longer_than_the_scene_gap_starts_a_new_scene() -> None:
    # Constructed: cues 2 s apart form one scene; a 10 s gap (> 4 s default) splits.
    specs = [CueSpec(0.5, 2.5, snr_db=5.0), CueSpec(4.5, 6.5, snr_db=5.0), CueSpec(16.5, 18.5, snr_db=5.0)]
    scenes = _by_time(_scenes(specs))
    assert [s.cue_indices for s in scenes] == [(1, 2), (3,)]
    assert [s.scene_id for s in scenes] == ["S001", "S002"]


@pytest.mark.parametrize(
    ("second", "split"),
    [
        (CueSpec(3.0, 5.0, snr_db=5.0 - LEVEL_JUMP_DB - 2.0), True),  # background 12 dB louder
        (CueSpec(3.0, 5.0, snr_db=5.0 - 3.0), False),  # 3 dB louder: same bed
        (CueSpec(3.0, 5.0, snr_db=5.0, background_shape_db=np.linspace(-20.0, 20.0, 18)), True),
        (CueSpec(3.0, 5.0, snr_db=5.0, background_shape_db=np.linspace(-3.0, 3.0, 18)), False),
        (CueSpec(3.0, 5.0, snr_db=30.0), True),  # background goes out of the way
    ],
    ids=["level-jump", "level-steady", "shape-change", "shape-steady", "background-gone"],
)
def test_a_change_in_the_background_starts_a_new_scene(second: CueSpec, split: bool) -> None:
    # Constructed: two cues 1 s apart; the second's background differs in level or shape.
    # A tilt of +-20 dB across the bands moves the low / mid / high region means (6 bands
    # each) by 11.5 dB RMS (> 10 dB); a tilt of +-3 dB by 1.7 dB RMS.
    def balance_rms(tilt: np.ndarray) -> float:
        regions = np.array([part.mean() for part in np.array_split(tilt, 3)])
        return float(np.sqrt(np.mean((regions - regions.mean()) ** 2)))

    assert balance_rms(np.linspace(-20.0, 20.0, 18)) > SHAPE_CHANGE_DB > balance_rms(np.linspace(-3.0, 3.0, 18))
    scenes = _scenes([CueSpec(0.0, 2.0, snr_db=5.0), second])
    assert len(scenes) == (2 if split else 1)


def test_scenes_rank_worst_first_and_say_why() -> None:
    # Constructed: scene A clear (+20 dB SNR); scene B three masked cues with the background
    # 4 LU over speech, 1.6 s of speech each (cue 2.0 s, speech 0.2 s inside each end); scene C
    # at-risk at +4 dB.
    specs = [
        CueSpec(0.0, 2.0, snr_db=20.0),
        CueSpec(20.0, 22.0, snr_db=-4.0),
        CueSpec(22.5, 24.5, snr_db=-4.0),
        CueSpec(25.0, 27.0, snr_db=-4.0),
        CueSpec(40.0, 42.0, snr_db=4.0),
    ]
    analysis = make_analysis(specs)
    plan = make_plan(analysis, PlanSettings())
    ranked = plan.scenes
    assert [s.rank for s in ranked] == [1, 2, 3]
    assert ranked[0].cue_indices == (2, 3, 4)
    assert ranked[0].masked_s == pytest.approx(4.8)
    assert ranked[0].reason.startswith("background 4 LU over speech for 5 s")
    assert ranked[1].cue_indices == (5,)
    assert ranked[2].cue_indices == (1,) and ranked[2].severity == 0.0
    assert ranked[2].reason == "clear: no masked cue" and ranked[2].worst_cue_index is None
    # Severity = speech seconds x shortfall from the target, (0.75 - SII) / 0.75 per cue.
    sii_b = analysis.scores[1].sii
    assert ranked[0].severity == pytest.approx(3 * 1.6 * (0.75 - sii_b) / 0.75, abs=1e-6)
    # The clear scene has no event inside it.
    clear = ranked[2]
    assert not [e for e in plan.events if e.start_s < clear.end_s and e.end_s > clear.start_s]


def test_uncovered_speech_is_named_in_the_reason() -> None:
    # Constructed: 6 s of speech without a cue, 2 s after a clear cue.
    scenes = _scenes([CueSpec(0.0, 2.0, snr_db=20.0)], uncovered=[(4.0, 10.0)])
    (scene,) = scenes
    assert scene.reason == "no cue for 6 s of speech"
    assert (scene.start_s, scene.end_s) == (0.0, 10.0)


def test_uncovered_speech_ranks_above_clear_scenes() -> None:
    # Constructed: a clear scene and, 20 s later, a scene of uncovered speech only.
    scenes = _scenes([CueSpec(0.0, 2.0, snr_db=20.0)], uncovered=[(22.0, 30.0)])
    assert [s.reason for s in scenes] == ["no cue for 8 s of speech", "clear: no masked cue"]


def test_make_plan_records_schema_settings_and_order() -> None:
    # Constructed: flagged cues at known times; the plan keeps events by start and scenes by rank.
    specs = [CueSpec(30.0, 32.0, snr_db=0.0), CueSpec(1.0, 3.0, snr_db=-6.0), CueSpec(60.0, 62.0, snr_db=2.0)]
    settings = PlanSettings(strength=0.75)
    plan = make_plan(make_analysis(specs), settings)
    assert plan.schema == SCHEMA_VERSION and plan.settings == settings.to_dict()
    starts = [e.start_s for e in plan.events]
    assert starts == sorted(starts) and len(starts) == 3
    assert [s.rank for s in plan.scenes] == list(range(1, len(plan.scenes) + 1))
    severities = [s.severity for s in plan.scenes]
    assert severities == sorted(severities, reverse=True)


def test_scene_reason_names_unfixable_masking() -> None:
    # Constructed: -12 dB SNR needs more than the 12 dB maximum cut (reference SII brute force
    # in test_gains), so the scene says gain alone cannot fix it.
    (scene,) = _scenes([CueSpec(5.0, 8.0, snr_db=-12.0)])
    assert "background 12 LU over speech" in scene.reason
    assert "1 move planned (background down to -12 dB)" in scene.reason
    assert scene.reason.endswith("not fully fixable by gain")
