"""Cue-level gain moves that bring at-risk and masked cues to a target, merged into events.

For every cue whose verdict is ``at-risk`` or ``masked`` the planner looks for the smallest
move (background cut, dialogue lift, or both, by ``PlanSettings.move``) that brings the
cue's score to the target, predicting the result by re-scoring the cue's own band spectra
(ANSI S3.5 SII of speech + lift over background - cut) or its loudness difference (LU).
The search runs in 0.1 dB steps (a 1 dB grid, then bisection inside the first step that
reaches the target), vectorised over cues; it does not rely on the SII rising with a
dialogue lift, which the level-distortion factor (S3.5 Eq. 11) can make fall.

Rules (docs/methods.md, "Gain planning" and "Strength"):

- Limits per cue: ``strength * max_cut_db`` of cut, ``strength * max_lift_db`` of lift and
  never more lift than the programme's true-peak headroom; from a mix (no stems) the whole
  speech-to-background change is limited to ``strength * max_mix_cut_db``.
- A move below ``min_move_db`` (the just-noticeable SNR change) is proposed only when it is
  the move that takes the cue to the target; a smaller partial move is dropped.
- A cue whose SII stays short of the target even with no background at all is limited by
  its level against the hearing threshold, not by masking: no move, only a reason.
- Cues closer than ``hold_s`` (or than the two ramps need) share one event at the gain its
  most demanding cue needs; ramps sit outside the speech and never overlap.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from planner._typing import FloatArray
from planner.analysis.scoring import analysis_thresholds as _profile_thresholds
from planner.analysis.sii import N_BANDS, sii
from planner.model import Analysis, CueScore, GainEvent, SpeechActivity
from planner.settings import AnalysisSettings, PlanSettings
from planner.units import seconds_to_frames

#: Verdicts that ask for a move.
FLAGGED_VERDICTS = ("at-risk", "masked")

#: Proposed gains are whole tenths of a dB (common practice: fader and automation readouts).
STEP_DB = 0.1
_COARSE = 10  # tenths per step of the coarse search grid (1 dB)

#: SII the background must cost before a cut is considered (our choice: about 1 % of words
#: on the CST transfer function near SII 0.45-0.5, Sherbecoe & Studebaker, Ear Hear 2003).
BACKGROUND_LIMIT_SII = 0.01

_TOL = 1e-9


@dataclass(frozen=True)
class CueMove:
    """What one flagged cue needs on its own.

    ``move_tenths`` is the speech-to-background change in tenths of a dB (split into lift
    and cut by the move kind); ``before`` / ``after`` are scores in the target's unit;
    ``note`` says why the cue falls short (empty when it reaches the target).
    """

    index: int
    method: str
    onset_s: float
    offset_s: float
    before: float
    move_tenths: int
    after: float
    reachable: bool
    note: str


@dataclass(frozen=True)
class _Caps:
    """Per-cue limits, tenths of a dB: cut, lift, and their allowed total."""

    cut: np.ndarray
    lift: np.ndarray
    total: np.ndarray

    def take(self, rows: np.ndarray) -> _Caps:
        return _Caps(self.cut[rows], self.lift[rows], self.total[rows])


def _tenths(db: float) -> int:
    """Whole tenths of a dB not above ``db`` (rounding never exceeds a limit)."""
    return max(0, math.floor(db / STEP_DB + 1e-6))


def headroom_db(analysis: Analysis, settings: PlanSettings) -> float:
    """True-peak headroom for a dialogue lift, dB (ceiling minus programme true peak, >= 0)."""
    return max(0.0, settings.true_peak_ceiling_dbtp - analysis.loudness.true_peak_dbtp)


def limits(settings: PlanSettings, methods: Sequence[str], lift_room_db: float, strength: float) -> _Caps:
    """Per-cue limits in tenths of a dB at one strength (module docstring)."""
    cut, lift, total = [], [], []
    for method in methods:
        mix = method == "mix"
        c = _tenths(strength * (min(settings.max_cut_db, settings.max_mix_cut_db) if mix else settings.max_cut_db))
        lift_db = min(strength * settings.max_lift_db, lift_room_db)
        li = _tenths(min(lift_db, strength * settings.max_mix_cut_db) if mix else lift_db)
        t = {"background": c, "dialogue": li, "both": c + li}[settings.move]
        total.append(min(t, _tenths(strength * settings.max_mix_cut_db)) if mix else t)
        cut.append(c)
        lift.append(li)
    return _Caps(*(np.array(v, dtype=np.int64) for v in (cut, lift, total)))


def split(move: np.ndarray, caps: _Caps, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """(lift, cut) in tenths for speech-to-background changes ``move`` (tenths, shape (n, g)).

    ``both`` gives half the move to the dialogue (rounded down) and the rest to the
    background; when one part reaches its limit the other takes the remainder.
    """
    zero = np.zeros_like(move)
    if kind == "background":
        return zero, move
    if kind == "dialogue":
        return move, zero
    lift0 = np.minimum(move // 2, caps.lift[:, None])
    cut = np.minimum(move - lift0, caps.cut[:, None])
    return move - cut, cut


#: Cues scored together by :class:`Scorer` (bounds its working memory).
_SCORER_ROWS = 128


class Scorer:
    """Predicted score of cues after a lift and a cut: ANSI S3.5 SII, or loudness difference in LU."""

    def __init__(self, kind: str, scores: Sequence[CueScore], thresholds_db_hl: FloatArray) -> None:
        self.kind = kind
        nan = (np.nan,) * N_BANDS
        self.sbld = np.array([np.nan if s.sbld_lu is None else s.sbld_lu for s in scores], dtype=np.float64)
        self.e = np.array([s.speech_spectrum_db if len(s.speech_spectrum_db) == N_BANDS else nan for s in scores])
        self.n = np.array([s.background_spectrum_db if len(s.background_spectrum_db) == N_BANDS else nan for s in scores])
        self.e = self.e.reshape(len(scores), N_BANDS)
        self.n = self.n.reshape(len(scores), N_BANDS)
        self.t = np.asarray(thresholds_db_hl, dtype=np.float64)

    def usable(self) -> np.ndarray:
        """Cues that can be re-scored (spectra for SII, a loudness difference for LU)."""
        if self.kind == "lu":
            return ~np.isnan(self.sbld)
        return ~(np.isnan(self.e).any(axis=1) | np.isnan(self.n).any(axis=1))

    def __call__(self, rows: np.ndarray, lift: np.ndarray, cut: np.ndarray) -> np.ndarray:
        """Scores of cues ``rows`` (n,) for lifts and cuts in tenths of shape (n, g).

        SII in slices of :data:`_SCORER_ROWS` cues, so that the working arrays (a few per
        cue, step and band) do not grow with the number of cues.
        """
        lift_db, cut_db = lift * STEP_DB, cut * STEP_DB
        if self.kind == "lu":
            return self.sbld[rows, None] + lift_db + cut_db  # both gains add to the difference
        out = np.empty(lift.shape)
        for lo in range(0, len(rows), _SCORER_ROWS):
            part = slice(lo, lo + _SCORER_ROWS)
            e = self.e[rows[part], None, :] + lift_db[part, :, None]
            n = self.n[rows[part], None, :] - cut_db[part, :, None]
            out[part] = np.asarray(sii(e, n, self.t)).reshape(e.shape[:2])
        return out

    def quiet(self, rows: np.ndarray) -> np.ndarray:
        """SII of cues ``rows`` with no background at all (S3.5 clause 4.2 default noise)."""
        return np.asarray(sii(self.e[rows], None, self.t)).reshape(-1)


def speech_span(activity: SpeechActivity, start_s: float, end_s: float) -> tuple[float, float]:
    """First speech onset and last speech offset inside ``[start_s, end_s)``, seconds.

    Falls back to the span itself when no speech frame lies inside it.
    """
    lo = max(0, seconds_to_frames(start_s, activity.frame_s))
    hi = min(activity.n_frames, seconds_to_frames(end_s, activity.frame_s))
    idx = np.flatnonzero(activity.is_speech[lo:hi])
    if idx.size == 0:
        return start_s, end_s
    return round((lo + int(idx[0])) * activity.frame_s, 6), round((lo + int(idx[-1]) + 1) * activity.frame_s, 6)


def target_of(settings: PlanSettings) -> float:
    """The target score in the unit of ``settings.target_kind``."""
    return settings.target_sii if settings.target_kind == "sii" else settings.target_lu


def fmt_score(kind: str, value: float) -> str:
    """A score in plain words: ``SII 0.52`` or ``+6.0 LU``."""
    return f"SII {value:.2f}" if kind == "sii" else f"{value:+.1f} LU"


def analysis_thresholds(analysis_settings: dict[str, Any]) -> FloatArray:
    """Hearing thresholds (dB HL on the 18 SII bands) of the profile the analysis scored for."""
    name, table = _profile_thresholds(AnalysisSettings.from_dict(analysis_settings))
    return np.asarray(table[name], dtype=np.float64)


def solve_cues(analysis: Analysis, settings: PlanSettings, thresholds_db_hl: FloatArray) -> tuple[CueMove, ...]:
    """The move each flagged cue needs on its own, in score order (module docstring).

    Cues already at the target under these settings, and cues with no score at all, are
    left out.
    """
    kind, target = settings.target_kind, target_of(settings)
    timings = {t.index: t for t in analysis.timings}
    flagged = [s for s in analysis.scores if s.verdict in FLAGGED_VERDICTS and s.index in timings]
    if not flagged:
        return ()
    scorer = Scorer(kind, flagged, thresholds_db_hl)
    n = len(flagged)
    rows, usable = np.arange(n), scorer.usable()
    work = rows[usable]
    # Scores as stored, replaced by the re-scored value wherever the cue can be re-scored.
    before = np.array([np.nan if (v := (s.sii if kind == "sii" else s.sbld_lu)) is None else v for s in flagged])
    zeros = np.zeros((work.size, 1), dtype=np.int64)
    if work.size:
        before[work] = scorer(work, zeros, zeros)[:, 0]
    room = headroom_db(analysis, settings)
    methods = [s.method for s in flagged]
    caps = limits(settings, methods, room, settings.strength)

    # Coarse grid 0, 1, 2 ... dB up to each cue's limit, plus the limit itself.
    grid = np.arange(0, int(caps.total.max()) + 1, _COARSE, dtype=np.int64)
    moves = np.concatenate([np.minimum(grid[None, :], caps.total[:, None]), caps.total[:, None]], axis=1)
    values = np.full(moves.shape, -np.inf)
    if work.size:
        values[work] = scorer(work, *split(moves[work], caps.take(work), settings.move))
    hit = values >= target - _TOL
    found = np.asarray(hit.any(axis=1))
    first = np.argmax(hit, axis=1)
    hi = np.where(found, moves[rows, first], 0)
    lo = np.where(found & (first > 0), moves[rows, np.maximum(first - 1, 0)], 0)
    while (active := found & (hi - lo > 1)).any():  # bisection in tenths: lo misses, hi reaches
        a = rows[active]
        mid = (lo[a] + hi[a]) // 2
        ok = scorer(a, *split(mid[:, None], caps.take(a), settings.move))[:, 0] >= target - _TOL
        hi[a], lo[a] = np.where(ok, mid, hi[a]), np.where(ok, lo[a], mid)
    after_hit = np.full(n, np.nan)
    if found.any():
        f = rows[found]
        after_hit[f] = scorer(f, *split(hi[f][:, None], caps.take(f), settings.move))[:, 0]
    quiet = np.full(n, np.inf)
    if kind == "sii" and work.size:
        quiet[work] = scorer.quiet(work)
    why = _shortfall_reasons(settings, scorer, methods, room, usable, target)
    min_move = _tenths(settings.min_move_db)

    out = []
    for r, score in enumerate(flagged):
        b = float(before[r])
        if math.isnan(b) or b >= target - _TOL:
            continue  # nothing known to act on, or already at the target
        m, after, note = 0, b, ""
        if not usable[r]:
            what = "band spectra" if kind == "sii" else "loudness difference"
            note = f"has no {what} in the analysis to predict a move from: re-run the analysis"
        elif kind == "sii" and quiet[r] < target and quiet[r] - b < BACKGROUND_LIMIT_SII:
            note = (
                f"is limited by the speech level against the hearing threshold, not by the background "
                f"({fmt_score(kind, float(quiet[r]))} with no background at all): a background cut would not "
                "help, and an overall level change is not a masking fix"
            )
        elif found[r]:
            m, after = int(hi[r]), float(after_hit[r])
        else:
            best = int(np.argmax(values[r]))  # first maximum: the smallest move giving the best score
            m, after, reason = int(moves[r, best]), float(values[r, best]), why[r]
            if m < min_move:
                reason = (
                    f"the largest move allowed here ({m * STEP_DB:.1f} dB) is below the {settings.min_move_db:g} dB "
                    f"just-noticeable change, so none is proposed; {reason}"
                )
                m, after = 0, b
            note = f"reaches at best {fmt_score(kind, after)} (target {fmt_score(kind, target)}): {reason}"
        timing = timings[score.index]
        onset, offset = speech_span(analysis.activity, timing.aligned_start_s, timing.aligned_end_s)
        out.append(CueMove(score.index, score.method, onset, offset, b, m, after, reachable=not note, note=note))
    return tuple(out)


def _shortfall_reasons(
    settings: PlanSettings,
    scorer: Scorer,
    methods: Sequence[str],
    room_db: float,
    usable: np.ndarray,
    target: float,
) -> list[str]:
    """Which limit keeps each cue from the target, in plain words (checked by relaxing each)."""
    rows = np.flatnonzero(usable)
    relaxed = {
        "strength": limits(settings, methods, room_db, 1.0),
        "stems": limits(settings, ["stems"] * len(methods), room_db, 1.0),
        "headroom": limits(settings, ["stems"] * len(methods), settings.max_lift_db, 1.0),
    }
    reach: dict[str, np.ndarray] = {}
    for name, caps in relaxed.items():
        reach[name] = np.zeros(len(methods), dtype=bool)
        if rows.size:
            sub = caps.take(rows)
            reach[name][rows] = scorer(rows, *split(sub.total[:, None], sub, settings.move))[:, 0] >= target - _TOL
    limit_db = {"background": settings.max_cut_db, "dialogue": settings.max_lift_db}.get(
        settings.move, settings.max_cut_db + settings.max_lift_db
    )
    out = []
    for r, method in enumerate(methods):
        if reach["strength"][r] and settings.strength < 1.0:
            out.append(f"strength {settings.strength:g} limits the move; full strength would reach the target")
        elif reach["stems"][r] and method == "mix":
            out.append(f"a mix allows {settings.max_mix_cut_db:g} dB of separation: needs stems or a remix")
        elif reach["headroom"][r] and settings.move != "background":
            out.append(f"only {room_db:.1f} dB of true-peak headroom for a dialogue lift: needs a remix")
        else:
            out.append(f"more than the {limit_db:g} dB limit would be needed: needs a remix")
    return out


def merge_cues(cues: Sequence[CueMove], settings: PlanSettings) -> list[list[CueMove]]:
    """Runs of cues (in onset order) whose speech gaps are shorter than the hold time or the ramps.

    A gap that cannot fit a full ramp out and a full ramp in is held instead of shortening
    the ramps: a dip shorter than its ramps is heard as pumping.
    """
    join_s = max(settings.hold_s, (settings.ramp_in_ms + settings.ramp_out_ms) / 1000.0)
    groups: list[list[CueMove]] = []
    end_s = -math.inf
    for cue in sorted(cues, key=lambda c: (c.onset_s, c.index)):
        if groups and cue.onset_s - end_s < join_s:
            groups[-1].append(cue)
            end_s = max(end_s, cue.offset_s)
        else:
            groups.append([cue])
            end_s = cue.offset_s
    return groups


def plan_events(analysis: Analysis, settings: PlanSettings) -> tuple[GainEvent, ...]:
    """Gain events for the at-risk and masked cues of an analysis, sorted by ``start_s``.

    Parameters
    ----------
    analysis : Analysis
        Scores with band spectra (SII target) or loudness differences (LU target).
    settings : PlanSettings
        Target, move kind, limits, strength, hold time and ramps.

    Returns
    -------
    tuple of GainEvent
        One event per run of flagged cues closer than the hold time: gains in dB, ramps in
        ms, scores in the target's unit for the event's worst cue (lowest score after).
    """
    kind, target = settings.target_kind, target_of(settings)
    thresholds = analysis_thresholds(analysis.settings)
    groups = merge_cues(solve_cues(analysis, settings, thresholds), settings)
    if not groups:
        return ()
    # Every cue of an event gets the event's move; re-score them all in one call.
    members = [c for g in groups for c in g]
    by_index = {s.index: s for s in analysis.scores}
    scorer = Scorer(kind, [by_index[c.index] for c in members], thresholds)
    caps = limits(settings, [c.method for c in members], headroom_db(analysis, settings), settings.strength)
    event_move = np.array([[max(c.move_tenths for c in g)] for g in groups for _ in g], dtype=np.int64)
    lift, cut = split(event_move, caps, settings.move)
    rows = np.flatnonzero(scorer.usable())
    after = np.array([c.before for c in members])
    if rows.size:
        after[rows] = scorer(rows, lift[rows], cut[rows])[:, 0]
    duration_s = analysis.audio.duration_s
    events, pos = [], 0
    for number, group in enumerate(groups, start=1):
        span = range(pos, pos + len(group))
        pos += len(group)
        worst = min(span, key=lambda r: (after[r], members[r].before, members[r].index))
        start_s, end_s = group[0].onset_s, max(c.offset_s for c in group)
        li, cu = int(lift[worst, 0]), int(cut[worst, 0])
        events.append(
            GainEvent(
                event_id=f"E{number:03d}",
                start_s=start_s,
                end_s=end_s,
                ramp_in_ms=_ms_down(min(settings.ramp_in_ms, 1000.0 * start_s)),
                ramp_out_ms=_ms_down(max(0.0, min(settings.ramp_out_ms, 1000.0 * (duration_s - end_s)))),
                background_gain_db=round(-cu * STEP_DB, 1) + 0.0,  # + 0.0 turns -0.0 into 0.0
                dialogue_gain_db=round(li * STEP_DB, 1),
                cue_indices=tuple(sorted(c.index for c in group)),
                reason=_reason(kind, target, group, after[span.start : span.stop], worst - span.start, li, cu),
                target_kind=kind,
                target=target,
                score_before=float(members[worst].before),
                score_after=float(after[worst]),
                reachable=bool(np.all(after[span.start : span.stop] >= target - _TOL)),
            )
        )
    return tuple(events)


def _ms_down(ms: float) -> float:
    """A ramp in whole microseconds, rounded down so a shortened ramp still fits its room."""
    return math.floor(ms * 1000.0 + 1e-6) / 1000.0


def _reason(kind: str, target: float, group: list[CueMove], after: np.ndarray, worst: int, lift: int, cut: int) -> str:
    """One line: what the move does for the worst cue, then why any cue falls short."""
    parts = [f"background -{cut * STEP_DB:.1f} dB" if cut else "", f"dialogue +{lift * STEP_DB:.1f} dB" if lift else ""]
    what = " and ".join(p for p in parts if p)
    who = f"cue {group[0].index}" if len(group) == 1 else f"{len(group)} cues, worst cue {group[worst].index}"
    before, now = fmt_score(kind, group[worst].before), fmt_score(kind, float(after[worst]))
    line = f"{what}: {who} from {before} to {now}" if what else f"no move: {who} at {before}"
    short = [f"cue {c.index} {c.note}" for r, c in enumerate(group) if after[r] < target - _TOL and c.note]
    return "; ".join([line, *short])
