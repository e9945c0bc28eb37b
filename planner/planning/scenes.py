"""Scenes: stretches of programme ranked by how badly their dialogue is masked, and the plan.

Cues (by aligned time) and runs of speech that no cue covers are grouped into scenes. A new
scene starts after a gap longer than ``PlanSettings.scene_gap_s``, or where the background
changes character: it appears or goes away (speech more than :data:`QUIET_BACKGROUND_LU`
over it counts as out of the way), its level jumps by :data:`LEVEL_JUMP_DB`, or its
spectral balance (the mean levels of low, mid and high bands relative to each other) moves
by :data:`SHAPE_CHANGE_DB` RMS from the scene's running mean. Each scene's severity is the speech time of its at-risk and
masked cues weighted by how far each falls short of the target, in seconds; scenes rank by
severity, then by uncovered speech, then by time (docs/methods.md, "Scenes").
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from planner.analysis.sii import N_BANDS
from planner.model import SCHEMA_VERSION, Analysis, CueScore, GainEvent, Plan, Scene
from planner.planning.gains import FLAGGED_VERDICTS, fmt_score, plan_events, target_of
from planner.settings import PlanSettings

#: Speech this far over the background means the background is out of the way, LU
#: (Torcoli et al., JAES 67(12), 2019: at least 15 LU of speech over ambience).
QUIET_BACKGROUND_LU = 15.0
#: Background level change that starts a new scene, dB (our choice: a change a mixer would
#: ride, well above the cue-to-cue spread of a steady bed).
LEVEL_JUMP_DB = 10.0
#: Background spectral-balance change that starts a new scene, dB RMS over the three
#: regions of :data:`SHAPE_REGIONS` (our choice: on the demo backgrounds one music bed
#: varies by up to 6.7 dB from cue to cue, music differs from babble, rain and pink noise
#: by 14 dB or more, babble from rain by 12 dB, while pink noise against rain or babble,
#: 6-7 dB, counts as the same kind of steady noise).
SHAPE_CHANGE_DB = 10.0
#: Regions of the background's spectral balance: 160-500 Hz, 630-2000 Hz, 2.5-8 kHz (six
#: SII bands each).
SHAPE_REGIONS = 3
#: Shortfall in LU that counts as fully masked when the target is a loudness difference
#: (our choice: 20 LU, the span from speech 10 LU over to 10 LU under the background).
LU_DEPTH_SPAN = 20.0


@dataclass(frozen=True)
class _Item:
    start_s: float
    end_s: float
    score: CueScore | None  # None for uncovered speech
    index: int | None
    uncovered_s: float = 0.0


def _background(score: CueScore | None) -> tuple[float, np.ndarray] | None:
    """(level dB, shape dB) of a cue's background, or None when it is out of the way or unknown."""
    if score is None or score.sbld_lu is None or score.background_db is None:
        return None
    if score.sbld_lu >= QUIET_BACKGROUND_LU:
        return None
    spectrum = np.asarray(score.background_spectrum_db, dtype=np.float64)
    if spectrum.size != N_BANDS or not np.isfinite(spectrum).all():
        return float(score.background_db), np.zeros(0)
    # Spectral balance: mean level of each region (S3.5 bands 1-6, 7-12, 13-18) re their mean.
    regions = spectrum.reshape(SHAPE_REGIONS, -1).mean(axis=1)
    return float(score.background_db), regions - regions.mean()


def _changes(reference: list[tuple[float, np.ndarray]], current: tuple[float, np.ndarray]) -> bool:
    level = float(np.mean([r[0] for r in reference]))
    if abs(current[0] - level) >= LEVEL_JUMP_DB:
        return True
    shapes = [r[1] for r in reference if r[1].size]
    if current[1].size and shapes:
        mean_shape = np.mean(shapes, axis=0)
        return float(np.sqrt(np.mean((current[1] - mean_shape) ** 2))) >= SHAPE_CHANGE_DB
    return False


def _group(items: Sequence[_Item], settings: PlanSettings) -> list[list[_Item]]:
    groups: list[list[_Item]] = []
    end_s = -np.inf
    reference: list[tuple[float, np.ndarray]] = []
    state: bool | None = None  # background present in the current scene (None: not known yet)
    for item in items:
        bg = _background(item.score)
        present = None if item.score is None or item.score.sbld_lu is None else bg is not None
        split = not groups or item.start_s - end_s > settings.scene_gap_s
        if not split and present is not None and state is not None:
            split = present != state or (bg is not None and bool(reference) and _changes(reference, bg))
        if split:
            groups.append([])
            reference, state, end_s = [], None, -np.inf
        groups[-1].append(item)
        end_s = max(end_s, item.end_s)
        if present is not None:
            state = present
        if bg is not None:
            reference.append(bg)
    return groups


def _depth(score: CueScore, settings: PlanSettings) -> float:
    """How far a flagged cue falls short of the target, 0..1."""
    target = target_of(settings)
    if settings.target_kind == "sii":
        if score.sii is None:
            return 1.0 if score.verdict == "masked" else 0.5
        return float(np.clip((target - score.sii) / max(target, 1e-9), 0.0, 1.0))
    if score.sbld_lu is None:
        return 1.0 if score.verdict == "masked" else 0.5
    return float(np.clip((target - score.sbld_lu) / LU_DEPTH_SPAN, 0.0, 1.0))


def find_scenes(analysis: Analysis, events: Sequence[GainEvent], settings: PlanSettings) -> tuple[Scene, ...]:
    """Group cues into scenes and rank them, worst first.

    Parameters
    ----------
    analysis : Analysis
        Cue timings, scores and uncovered speech.
    events : sequence of GainEvent
        The planned events (named in each scene's reason).
    settings : PlanSettings
        ``scene_gap_s`` and the target that defines a cue's shortfall.

    Returns
    -------
    tuple of Scene
        Sorted by ``rank`` (1 = worst); ``scene_id`` numbers scenes in time order;
        ``severity`` is seconds of speech weighted by shortfall, ``masked_s`` the speech
        seconds of at-risk and masked cues.
    """
    scores = {s.index: s for s in analysis.scores}
    items = [_Item(t.aligned_start_s, t.aligned_end_s, scores.get(t.index), t.index) for t in analysis.timings]
    items += [_Item(u.start_s, u.end_s, None, None, u.end_s - u.start_s) for u in analysis.uncovered]
    items.sort(key=lambda i: (i.start_s, i.end_s, -1 if i.index is None else i.index))
    scenes = []
    for number, group in enumerate(_group(items, settings), start=1):
        scenes.append(_scene(number, group, events, settings))
    order = sorted(scenes, key=lambda s: (-s[0].severity, -s[1], s[0].start_s))
    return tuple(_with_rank(scene, rank) for rank, (scene, _) in enumerate(order, start=1))


def _with_rank(scene: Scene, rank: int) -> Scene:
    return Scene(**{**scene.__dict__, "rank": rank})


def _scene(number: int, group: list[_Item], events: Sequence[GainEvent], settings: PlanSettings) -> tuple[Scene, float]:
    start_s, end_s = min(i.start_s for i in group), max(i.end_s for i in group)
    cues = [i for i in group if i.index is not None]
    flagged = [i.score for i in cues if i.score is not None and i.score.verdict in FLAGGED_VERDICTS]
    depth = {s.index: _depth(s, settings) for s in flagged}
    severity = float(sum(s.speech_s * depth[s.index] for s in flagged))
    masked_s = float(sum(s.speech_s for s in flagged))
    uncovered_s = float(sum(i.uncovered_s for i in group))
    worst = min(flagged, key=lambda s: (-depth[s.index], s.index)) if flagged else None
    mine = [e for e in events if e.end_s > start_s and e.start_s < end_s]
    reason = _reason(flagged, masked_s, uncovered_s, worst, mine, settings)
    scene = Scene(
        scene_id=f"S{number:03d}",
        start_s=start_s,
        end_s=end_s,
        cue_indices=tuple(sorted(i.index for i in cues if i.index is not None)),
        rank=0,
        severity=round(severity, 6),
        masked_s=round(masked_s, 6),
        worst_cue_index=None if worst is None else worst.index,
        reason=reason,
    )
    return scene, uncovered_s


def _reason(
    flagged: list[CueScore],
    masked_s: float,
    uncovered_s: float,
    worst: CueScore | None,
    events: Sequence[GainEvent],
    settings: PlanSettings,
) -> str:
    """The scene's one line in plain words."""
    parts = []
    if worst is not None:
        diffs = [(s.sbld_lu, s.speech_s) for s in flagged if s.sbld_lu is not None]
        if diffs and sum(w for _, w in diffs) > 0:
            mean_lu = sum(d * w for d, w in diffs) / sum(w for _, w in diffs)
            if mean_lu < 0:
                parts.append(f"background {-mean_lu:.0f} LU over speech for {masked_s:.0f} s")
            else:
                parts.append(f"speech only {mean_lu:.0f} LU over the background for {masked_s:.0f} s")
        else:
            parts.append(f"{masked_s:.0f} s of masked speech")
        value = worst.sii if settings.target_kind == "sii" else worst.sbld_lu
        if value is not None:
            parts[-1] += f" (worst cue {worst.index}, {fmt_score(settings.target_kind, value)})"
    if uncovered_s >= 0.5:
        parts.append(f"no cue for {uncovered_s:.0f} s of speech")
    moves = [e for e in events if e.background_gain_db < 0 or e.dialogue_gain_db > 0]
    if moves:
        cut = min(e.background_gain_db for e in moves)
        lift = max(e.dialogue_gain_db for e in moves)
        sizes = [f"background down to {cut:g} dB" if cut < 0 else "", f"dialogue up to +{lift:g} dB" if lift > 0 else ""]
        plural = "s" if len(moves) > 1 else ""
        parts.append(f"{len(moves)} move{plural} planned ({', '.join(p for p in sizes if p)})")
    if not all(e.reachable for e in events):
        parts.append("not fully fixable by gain" if moves else "not fixable by gain")
    return "; ".join(parts) if parts else "clear: no masked cue"


def make_plan(analysis: Analysis, settings: PlanSettings) -> Plan:
    """Plan an analysis: events (by ``start_s``) and scenes (by ``rank``) with the settings used."""
    events = tuple(sorted(plan_events(analysis, settings), key=lambda e: (e.start_s, e.event_id)))
    scenes = find_scenes(analysis, events, settings)
    return Plan(schema=SCHEMA_VERSION, settings=settings.to_dict(), analysis=analysis, events=events, scenes=scenes)
