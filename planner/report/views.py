"""What each report view shows, as plain rows: selection, ranking and plain words, no drawing.

Every reader of a plan (the terminal report, the HTML report, ``--json``) takes its rows
from here, so they agree. Functions are pure: a :class:`~planner.model.Plan` in, frozen
rows of strings and numbers out (shared words and figures: :mod:`planner.report.figures`).

The episode verdict (the archive view's first line) follows docs/methods.md, "Episode
verdict": :func:`episode_verdict`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from planner.errors import SettingsError
from planner.model import Analysis, GainEvent, Plan, Scene
from planner.planning.gains import FLAGGED_VERDICTS, fmt_score
from planner.report.figures import (
    VERDICT_ORDER,
    Clock,
    Summary,
    VerifiedCue,
    clock_of,
    cue_span_words,
    cue_texts,
    move_words,
    one_line,
    score_kind,
    score_words,
    summary,
    worst_key,
)

View = Literal["editor", "mixer", "archive"]
ActionClass = Literal["ok", "targeted-gains", "remix-needed"]
VIEWS: tuple[View, ...] = ("editor", "mixer", "archive")

#: Share of the scored dialogue (speech seconds) at risk or masked from which cue-level
#: rides amount to a new balance: our choice (docs/methods.md, "Episode verdict").
REMIX_SHARE = 0.5

#: Plain words for each subtitle flag (planner/analysis/checks.py documents the thresholds).
FLAG_WORDS = {
    "no-speech": "no speech under the cue",
    "late-in": "comes in late",
    "early-out": "goes out early",
    "too-fast": "reads too fast",
    "too-short": "too short on screen",
    "too-long": "too long on screen",
    "gap": "too close to the next cue",
    "overlap": "overlaps another cue",
    "long-line": "line too long",
    "too-many-lines": "too many lines",
}
#: How much a flag matters to a viewer who reads rather than hears (our ranking): a cue
#: out of step with its speech, or over none, misleads; one that reads too fast is lost;
#: layout flags only slow reading down.
FLAG_WEIGHT = {"no-speech": 3, "late-in": 3, "early-out": 3, "too-fast": 2, "overlap": 2}


# --------------------------------------------------------------------------- episode verdict


@dataclass(frozen=True)
class EpisodeVerdict:
    """The archive's one-line answer: an action class, why (plain words), ``line`` = both, and the figures behind it."""

    action: ActionClass
    why: str
    line: str
    flagged_share: float
    masked_cues: int
    unfixable_cues: tuple[int, ...]
    moves: int
    confidence: float


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}{'' if n == 1 else 's'}"


def episode_verdict(plan: Plan) -> EpisodeVerdict:
    """Action class of a planned episode (docs/methods.md, "Episode verdict").

    ``remix-needed`` when a masked cue is not brought to the target by a planned move, or
    when at least :data:`REMIX_SHARE` of the scored speech time is at risk or masked, or
    when cues exist but none could be scored; ``targeted-gains`` when any cue is at risk or
    masked; ``ok`` otherwise. ``confidence`` is the lower of the alignment confidence and
    the speech-weighted mean score confidence.
    """
    a = plan.analysis
    scored = [s for s in a.scores if s.verdict != "no-score"]
    speech_s = sum(s.speech_s for s in scored)
    flagged = [s for s in scored if s.verdict in FLAGGED_VERDICTS]
    share = sum(s.speech_s for s in flagged) / speech_s if speech_s > 0 else 0.0
    fixed = {i for e in plan.events if e.reachable for i in e.cue_indices}
    unfixable = tuple(sorted(s.index for s in flagged if s.verdict == "masked" and s.index not in fixed))
    moves = sum(1 for e in plan.events if e.background_gain_db < 0 or e.dialogue_gain_db > 0)
    conf = min(a.alignment.confidence, sum(s.confidence * s.speech_s for s in scored) / speech_s) if speech_s > 0 else 0.0
    masked = sum(1 for s in flagged if s.verdict == "masked")
    share_words = f"{100 * share:.0f} % of the dialogue at risk or masked"
    action: ActionClass
    if a.scores and not scored:
        action, why = "remix-needed", "no cue could be scored: check the inputs and listen"
    elif unfixable:
        cues = cue_span_words(unfixable)
        action, why = "remix-needed", f"{_count(len(unfixable), 'masked line')} gain moves cannot fix (cue {cues}); {share_words}"
    elif share >= REMIX_SHARE:
        action, why = "remix-needed", f"{share_words}, too much for spot rides"
    elif flagged:
        action, why = "targeted-gains", f"{_count(moves, 'move')} for {_count(len(flagged), 'line')}; {share_words}"
    else:
        if scored:
            why = "every scored line is clear"
        else:
            why = "alignment only: masking not scored (run cueplan analyse)" if a.subtitles.cues else "no subtitle cues to score"
        action = "ok"
    return EpisodeVerdict(action=action, why=why, line=f"{action}: {why}", flagged_share=round(share, 4), masked_cues=masked,
                          unfixable_cues=unfixable, moves=moves, confidence=round(conf, 3))  # fmt: skip


# --------------------------------------------------------------------------- scenes and events


@dataclass(frozen=True)
class SceneRow:
    """One ranked scene: where, why, its worst line and the planned move, in words."""

    rank: int
    scene_id: str
    tc_in: str
    tc_out: str
    start_s: float
    end_s: float
    severity: float
    reason: str
    worst_cue: int | None
    worst_text: str
    worst_verdict: str
    worst_score: str
    move: str
    measured: str


@dataclass(frozen=True)
class EventRow:
    """One gain event for a mixer: timecodes, gains, ramps, the cues it covers, before and after."""

    event_id: str
    tc_in: str
    tc_out: str
    start_s: float
    end_s: float
    background_gain_db: float
    dialogue_gain_db: float
    ramp_in_ms: float
    ramp_out_ms: float
    cues: str
    before: str
    after: str
    change: str
    reachable: bool
    reason: str
    measured: str


def _measured(rows: dict[int, VerifiedCue], indices: Sequence[int], kind: str) -> str:
    """Measured-after figure of the worst verified cue among ``indices`` ("" when none was verified)."""
    found = [rows[i] for i in indices if i in rows and rows[i].measured_after is not None]
    if not found:
        return ""
    worst = min(found, key=lambda r: (r.measured_after, r.cue_index))
    reached = "" if worst.reached is None else (", target reached" if worst.reached else ", short of target")
    return f"measured {fmt_score(kind, float(worst.measured_after or 0.0))} on cue {worst.cue_index}{reached}"


def _change(kind: str, before: float, after: float) -> str:
    """Compact before>after without the unit: ``0.48>0.75`` (SII) or ``+2.0>+10.0`` (LU)."""
    f = "{:.2f}" if kind == "sii" else "{:+.1f}"
    return f"{f.format(before)}>{f.format(after)}"


def _event_row(e: GainEvent, clock: Clock, kind: str, verify: dict[int, VerifiedCue]) -> EventRow:
    return EventRow(event_id=e.event_id, tc_in=clock.tc(e.start_s), tc_out=clock.tc(e.end_s), start_s=e.start_s, end_s=e.end_s,
                    background_gain_db=e.background_gain_db, dialogue_gain_db=e.dialogue_gain_db, ramp_in_ms=e.ramp_in_ms,
                    ramp_out_ms=e.ramp_out_ms, cues=cue_span_words(e.cue_indices), before=fmt_score(kind, e.score_before),
                    after=fmt_score(kind, e.score_after),
                    change=_change(kind, e.score_before, e.score_after), reachable=e.reachable, reason=e.reason,
                    measured=_measured(verify, e.cue_indices, kind))  # fmt: skip


def problem_scenes(plan: Plan) -> list[Scene]:
    """Scenes with an at-risk or masked cue, or speech with no cue, by rank (worst first)."""
    gaps = plan.analysis.uncovered
    return [sc for sc in sorted(plan.scenes, key=lambda s: s.rank)
            if sc.masked_s > 0 or any(u.end_s > sc.start_s and u.start_s < sc.end_s for u in gaps)]  # fmt: skip


def scene_rows(plan: Plan, top: int, verify_rows: Sequence[VerifiedCue] | None = None) -> tuple[SceneRow, ...]:
    """The ``top`` worst scenes (by the plan's rank) that have a flagged cue or uncovered speech."""
    a, kind, clock = plan.analysis, score_kind(plan), clock_of(plan.analysis)
    scores, cues = {s.index: s for s in a.scores}, cue_texts(a)
    verify = {r.cue_index: r for r in verify_rows or ()}
    rows = []
    for sc in problem_scenes(plan)[: max(0, top)]:
        worst = scores.get(sc.worst_cue_index) if sc.worst_cue_index is not None else None
        mine = [e for e in plan.events if e.end_s > sc.start_s and e.start_s < sc.end_s]
        move = "none planned"
        if mine:
            e = min(mine, key=lambda e: (sc.worst_cue_index not in e.cue_indices, e.score_before, e.start_s))
            change = f"{fmt_score(kind, e.score_before)} -> {fmt_score(kind, e.score_after)}"
            move = f"{e.event_id} {move_words(e)} at {clock.tc(e.start_s)}, {change}"
            move += "" if e.reachable else " (short of target)"
            move += f"; {len(mine) - 1} more" if len(mine) > 1 else ""
        rows.append(SceneRow(rank=sc.rank, scene_id=sc.scene_id, tc_in=clock.tc(sc.start_s), tc_out=clock.tc(sc.end_s),
                             start_s=sc.start_s, end_s=sc.end_s, severity=sc.severity, reason=sc.reason,
                             worst_cue=sc.worst_cue_index, worst_text=one_line(cues.get(sc.worst_cue_index or -1, "")),
                             worst_verdict="" if worst is None else worst.verdict,
                             worst_score="" if worst is None else score_words(worst, kind), move=move,
                             measured=_measured(verify, sc.cue_indices, kind)))  # fmt: skip
    return tuple(rows)


def event_rows(plan: Plan, top: int, verify_rows: Sequence[VerifiedCue] | None = None) -> tuple[EventRow, ...]:
    """The ``top`` events most needed (largest shortfall of their worst cue), in time order."""
    kind, clock = score_kind(plan), clock_of(plan.analysis)
    verify = {r.cue_index: r for r in verify_rows or ()}
    needed = sorted(plan.events, key=lambda e: (e.score_before, e.start_s))[: max(0, top)]
    return tuple(_event_row(e, clock, kind, verify) for e in sorted(needed, key=lambda e: (e.start_s, e.event_id)))


# --------------------------------------------------------------------------- subtitle problems


@dataclass(frozen=True)
class SubtitleRow:
    """One subtitle problem, or one line viewers depend on reading: ``cue`` is None for speech with no cue."""

    cue: int | None
    tc_in: str
    tc_out: str
    start_s: float
    problem: str
    verdict: str
    score: str
    text: str


def subtitle_rows(analysis: Analysis, kind: str, top: int) -> tuple[SubtitleRow, ...]:
    """Subtitle problems and masked lines, most urgent first (docs/methods.md, "Reports").

    First the at-risk or masked cues that also have a subtitle flag (the viewer depends on a
    faulty subtitle): masked first, then by :data:`FLAG_WEIGHT`, then worst score; then
    speech with no cue and the other flagged cues, by weight then time; then the at-risk or
    masked cues with no flag, worst first.
    """
    clock, cues, scores = clock_of(analysis), cue_texts(analysis), {s.index: s for s in analysis.scores}
    keyed: list[tuple[tuple[float, ...], SubtitleRow]] = []
    for t in analysis.timings:
        s = scores.get(t.index)
        depends = s is not None and s.verdict in FLAGGED_VERDICTS
        if not t.flags and not depends:
            continue
        words = [FLAG_WORDS.get(f, f) + (f" ({t.cps:.0f} cps)" if f == "too-fast" else "") for f in t.flags]
        if not words:
            words.append("viewers depend on this subtitle")
        weight = max((FLAG_WEIGHT.get(f, 1) for f in t.flags), default=0)
        worst = worst_key(s, kind) if s is not None else (len(VERDICT_ORDER), np.inf, t.index)
        group = 0 if depends and t.flags else 2 if depends else 1
        key = (group, worst[0], -weight, worst[1]) if group != 1 else (group, -weight, t.aligned_start_s, 0.0)
        keyed.append(((*key, t.index), SubtitleRow(
            cue=t.index, tc_in=clock.tc(t.aligned_start_s), tc_out=clock.tc(t.aligned_end_s), start_s=t.aligned_start_s,
            problem="; ".join(words), verdict="" if s is None else s.verdict, score=score_words(s, kind),
            text=one_line(cues.get(t.index, "")))))  # fmt: skip
    for u in analysis.uncovered:
        row = SubtitleRow(cue=None, tc_in=clock.tc(u.start_s), tc_out=clock.tc(u.end_s), start_s=u.start_s,
                          problem=f"speech with no cue ({u.end_s - u.start_s:.1f} s)", verdict="", score="", text="")  # fmt: skip
        keyed.append(((1, -3, u.start_s, 0.0, -1), row))
    keyed.sort(key=lambda kr: kr[0])
    return tuple(r for _, r in keyed[: max(0, top)])


def count_subtitle_rows(analysis: Analysis) -> int:
    """How many rows :func:`subtitle_rows` has in all (for ``N more`` notes)."""
    scores = {s.index: s.verdict for s in analysis.scores}
    return len(analysis.uncovered) + sum(1 for t in analysis.timings if t.flags or scores.get(t.index) in FLAGGED_VERDICTS)


# --------------------------------------------------------------------------- strip


#: Strip symbols, worst first; each cell shows the worst thing in its time slice. ASCII so
#: the strip reads the same without colour: dense marks for the worse states.
STRIP_SYMBOLS = (("masked", "#"), ("at-risk", "o"), ("uncovered", "!"), ("no-score", "?"), ("clear", "."))
#: Moves lane: a planned move that reaches the target, and one that falls short (or no move).
MOVE_SYMBOL, SHORT_SYMBOL = "=", "*"
#: Words of each symbol, for the legend.
STRIP_LEGEND = (("#", "masked"), ("o", "at risk"), ("!", "no cue"), ("?", "no score"), (".", "clear"),
                ("=", "move"), ("*", "short"))  # fmt: skip
#: Scene ranks the strip names (one digit each).
_STRIP_RANKS = 9


@dataclass(frozen=True)
class Strip:
    """How the verdicts run through the programme: one character per time slice of ``slice_s``.

    ``score``: the worst state of each slice (:data:`STRIP_SYMBOLS`, space for no dialogue);
    ``moves``: :data:`MOVE_SYMBOL` / :data:`SHORT_SYMBOL` under planned events; ``scenes``:
    the rank (1-9) of the worst ranked scene in the slice.
    """

    slice_s: float
    score: str
    moves: str
    scenes: str
    tc_start: str
    tc_end: str


def _cells(start_s: float, end_s: float, slice_s: float, n: int) -> range:
    first = int(np.clip(np.floor(start_s / slice_s), 0, n - 1))
    last = int(np.clip(np.ceil(end_s / slice_s) - 1, first, n - 1))
    return range(first, last + 1)


def strip(plan: Plan, *, cells: int = 60) -> Strip:
    """The per-slice strip of a plan over ``cells`` equal slices of the programme."""
    a = plan.analysis
    duration_s = max(a.audio.duration_s, 1e-3)
    slice_s = duration_s / cells
    order = [name for name, _ in STRIP_SYMBOLS]
    state = [len(order)] * cells  # index into order; len(order) = no dialogue
    verdicts: dict[int, str] = {s.index: s.verdict for s in a.scores}
    spans: list[tuple[float, float, str]] = [
        (t.aligned_start_s, t.aligned_end_s, verdicts.get(t.index, "no-score")) for t in a.timings
    ]
    spans += [(u.start_s, u.end_s, "uncovered") for u in a.uncovered]
    for start_s, end_s, what in spans:
        for i in _cells(start_s, end_s, slice_s, cells):
            state[i] = min(state[i], order.index(what))
    moves = [" "] * cells
    for e in plan.events:
        moved = e.reachable and (e.background_gain_db < 0 or e.dialogue_gain_db > 0)
        for i in _cells(e.start_s, e.end_s, slice_s, cells):
            if moves[i] != SHORT_SYMBOL:
                moves[i] = MOVE_SYMBOL if moved else SHORT_SYMBOL
    ranks = [_STRIP_RANKS + 1] * cells
    for sc in problem_scenes(plan):
        for i in _cells(sc.start_s, sc.end_s, slice_s, cells):
            ranks[i] = min(ranks[i], sc.rank)
    symbols = dict(STRIP_SYMBOLS)
    clock = clock_of(a)
    return Strip(slice_s=round(slice_s, 6), score="".join(symbols[order[k]] if k < len(order) else " " for k in state),
                 moves="".join(moves), scenes="".join(str(r) if r <= _STRIP_RANKS else " " for r in ranks),
                 tc_start=clock.tc(0.0), tc_end=clock.tc(a.audio.duration_s))  # fmt: skip


# --------------------------------------------------------------------------- the report


#: Sections of each view, in display order: what each reader needs first comes first.
SECTIONS: dict[View, tuple[str, ...]] = {
    "editor": ("subtitles", "summary", "strip", "scenes"),
    "mixer": ("events", "summary", "strip", "scenes"),
    "archive": ("verdict", "summary", "strip", "scenes"),
}


@dataclass(frozen=True)
class Report:
    """Everything one view shows, in rows; ``sections`` gives the display order.

    ``score_unit`` is ``"SII"`` or ``"LU"`` (the plan's target kind); ``n_scenes`` /
    ``n_events`` / ``n_subtitle_rows`` count all rows, of which the ``top``
    are listed.
    """

    view: View
    sections: tuple[str, ...]
    score_unit: str
    verdict: EpisodeVerdict
    summary: Summary
    strip: Strip
    scenes: tuple[SceneRow, ...]
    events: tuple[EventRow, ...]
    subtitles: tuple[SubtitleRow, ...]
    n_scenes: int
    n_events: int
    n_subtitle_rows: int


def build_report(plan: Plan, *, view: View = "editor", top: int = 10, verify_rows: Sequence[VerifiedCue] | None = None) -> Report:
    """The rows of one view of a plan (``top`` rows per list; ``verify_rows`` add measured figures)."""
    if view not in SECTIONS:
        raise SettingsError(f"view={view!r} must be one of {', '.join(VIEWS)}; pass one of those")
    kind = score_kind(plan)
    return Report(
        view=view, sections=SECTIONS[view], score_unit="SII" if kind == "sii" else "LU", verdict=episode_verdict(plan),
        summary=summary(plan.analysis, plan), strip=strip(plan), scenes=scene_rows(plan, top, verify_rows), events=event_rows(plan, top, verify_rows),
        subtitles=subtitle_rows(plan.analysis, kind, top), n_scenes=len(problem_scenes(plan)), n_events=len(plan.events),
        n_subtitle_rows=count_subtitle_rows(plan.analysis),
    )  # fmt: skip


def _plain(value: Any) -> Any:
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    return value


def report_json(plan: Plan, view: View = "editor", top: int = 10, *, verify_rows: Sequence[VerifiedCue] | None = None) -> dict[str, Any]:
    """The report of one view as JSON-ready data (``cueplan report --json``); keys as the row fields."""
    return {"kind": "cueplan-report", **_plain(build_report(plan, view=view, top=top, verify_rows=verify_rows))}
