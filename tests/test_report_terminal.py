"""The report views and the terminal report, against constructed plans (tests/report_plans.py).

Outside references: the construction itself (which cues are masked, flagged, uncovered, at
which times), the PyPI ``timecode`` package for every timecode label, and the rule of
docs/methods.md "Episode verdict" applied to hand-made events.
"""

from __future__ import annotations

import dataclasses
import io
import json
import re
from pathlib import Path

import pytest
from report_plans import (
    CLEAR,
    MARKUP_TEXT,
    MASKED,
    UNCOVERED,
    event,
    plan_with_events,
    ref_tc,
    report_analysis,
    report_plan,
)
from rich.console import Console

from planner.errors import SettingsError
from planner.report.terminal import print_alignment_summary, print_render, print_report, print_run_summary
from planner.render.verify import VerifyRow
from planner.report.views import VIEWS, build_report, episode_verdict, report_json

_BOX = re.compile("[\u2500-\u259f\u2026]")  # box drawing, block elements, the ellipsis


def _record(plan: object, view: str, *, plain: bool = False, width: int = 80, **kw: object) -> str:
    console = Console(width=width, record=True, no_color=plain, file=io.StringIO())
    print_report(console, plan, view=view, plain=plain, **kw)  # type: ignore[arg-type]
    return console.export_text()


@pytest.fixture(scope="module")
def plan():  # type: ignore[no-untyped-def]
    return report_plan()


@pytest.mark.parametrize("plain", [False, True], ids=["rich", "plain"])
@pytest.mark.parametrize("view", VIEWS)
def test_every_view_fits_80_columns(plan, view: str, plain: bool) -> None:  # type: ignore[no-untyped-def]
    text = _record(plan, view, plain=plain)
    lines = text.splitlines()
    assert len(lines) > 20
    assert max(len(line) for line in lines) <= 80


def test_editor_view_opens_with_subtitle_problems_in_urgency_order(plan) -> None:  # type: ignore[no-untyped-def]
    # Constructed: cue 3 is masked and flagged late-in (viewer depends on a faulty subtitle);
    # then the uncovered speech at 50 s (weight 3) and cue 7 too-fast (weight 2); then the
    # masked cues 4 and 5 (equal SII, index order) and the at-risk cue 6.
    rows = build_report(plan, view="editor").subtitles
    assert [r.cue for r in rows] == [3, None, 7, 4, 5, 6]
    assert [r.tc_in for r in rows[:3]] == [ref_tc(20.0), ref_tc(UNCOVERED[0]), ref_tc(54.0)]
    text = _record(plan, "editor")
    first = text.splitlines()
    assert first[0].startswith("subtitle problems")
    body = [line for line in first[1:8] if re.match(r"\s*\d\d:\d\d:\d\d:\d\d", line)]
    assert body[0].split()[:2] == [ref_tc(20.0), "3"]


def test_mixer_view_opens_with_events_and_timecodes(plan) -> None:  # type: ignore[no-untyped-def]
    text = _record(plan, "mixer")
    lines = text.splitlines()
    assert lines[0].startswith("gain moves")
    rows = [line.split() for line in lines[1:8] if line.strip().startswith("E0")]
    events = sorted(plan.events, key=lambda e: e.start_s)
    assert [r[:3] for r in rows] == [[e.event_id, ref_tc(e.start_s), ref_tc(e.end_s)] for e in events]
    # The cut is drawn as the plan's gain, one decimal.
    assert [r[3] for r in rows] == [f"{e.background_gain_db:+.1f}" for e in events]


def test_archive_view_opens_with_the_episode_verdict(plan) -> None:  # type: ignore[no-untyped-def]
    # Constructed: the masked cues 3-5 need more than the 12 dB cut limit (-6 dB SNR; the
    # reference SII at +6 dB is 0.67 < 0.75), so gain cannot fix them: remix-needed.
    first = _record(plan, "archive").splitlines()[0]
    assert first.startswith("remix-needed: 3 masked lines")
    assert episode_verdict(plan).unfixable_cues == MASKED


def test_views_differ(plan) -> None:  # type: ignore[no-untyped-def]
    firsts = {view: _record(plan, view).splitlines()[0].split()[0] for view in VIEWS}
    assert firsts == {"editor": "subtitle", "mixer": "gain", "archive": "remix-needed:"}


@pytest.mark.parametrize("view", VIEWS)
def test_plain_mode_has_no_escape_codes_or_box_characters(plan, view: str) -> None:  # type: ignore[no-untyped-def]
    out = io.StringIO()
    print_report(Console(file=out, force_terminal=True, width=80, no_color=True), plan, view=view, plain=True)
    assert "\x1b[" not in out.getvalue()
    assert not _BOX.search(out.getvalue())
    fancy = io.StringIO()  # the same console without plain mode does style (the check can fail)
    print_report(Console(file=fancy, force_terminal=True, width=80), plan, view=view)
    assert "\x1b[" in fancy.getvalue()


def test_cue_text_is_shown_verbatim_not_as_markup(plan) -> None:  # type: ignore[no-untyped-def]
    text = _record(plan, "editor", width=200)
    assert MARKUP_TEXT in text


def test_strip_follows_the_construction(plan) -> None:  # type: ignore[no-untyped-def]
    # 60 s in 60 cells of 1 s: clear cues 2-4, 5-7, 54-56 s; masked 20-27 s; at-risk
    # 40-42 s; speech without a cue 50-52 s; the planned cut over the masked cues cannot
    # reach the target (*), the one over cue 6 can (=); scene ranks 1 (masked), 2, 3.
    score = [" "] * 60
    for a, b, ch in ((2, 4, "."), (5, 7, "."), (54, 56, "."), (20, 27, "#"), (40, 42, "o"), (50, 52, "!")):
        score[a:b] = ch * (b - a)
    st = build_report(plan).strip
    assert st.slice_s == 1.0
    assert st.score == "".join(score)
    assert st.moves.strip() == "*" * 7 + " " * 13 + "=" * 2
    assert st.scenes.strip()[:7] == "1" * 7
    assert (st.tc_start, st.tc_end) == (ref_tc(0.0), ref_tc(60.0))


@pytest.mark.parametrize(
    ("fps", "drop_frame", "start"),
    [("25", False, "10:00:00:00"), ("29.97", True, "01:00:00;00")],
    ids=["25-start-10h", "29.97-df-start-1h"],
)
def test_scene_timecodes_use_rate_and_programme_start(fps: str, drop_frame: bool, start: str) -> None:
    plan = report_plan(fps=fps, drop_frame=drop_frame, programme_start=start)
    rows = build_report(plan, view="archive").scenes
    worst = min(plan.scenes, key=lambda s: s.rank)
    assert (rows[0].tc_in, rows[0].tc_out) == (ref_tc(worst.start_s, fps, start), ref_tc(worst.end_s, fps, start))
    assert rows[0].worst_cue == MASKED[0]


def test_json_round_trips_and_matches_the_rows(plan) -> None:  # type: ignore[no-untyped-def]
    for view in VIEWS:
        data = report_json(plan, view, 5)
        assert json.loads(json.dumps(data)) == data
        assert data["view"] == view and data["kind"] == "cueplan-report"
    data = report_json(plan, "mixer", 5)
    assert data["sections"][0] == "events"
    assert [e["tc_in"] for e in data["events"]] == [ref_tc(e.start_s) for e in sorted(plan.events, key=lambda e: e.start_s)]
    assert data["summary"]["verdicts"] == {"masked": len(MASKED), "at-risk": 1, "clear": len(CLEAR)}
    assert data["summary"]["flags"] == {"late-in": 1, "too-fast": 1}


def test_coverage_counts_the_uncovered_speech(plan) -> None:  # type: ignore[no-untyped-def]
    # Constructed speech: each scored cue's span less 0.2 s at each end (1.6 s x 7) plus the
    # 2 s with no cue.
    covered = 7 * 1.6
    assert build_report(plan).summary.coverage == pytest.approx(covered / (covered + 2.0), abs=1e-3)


def test_a_bad_view_is_refused(plan) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(SettingsError, match="view='director' must be one of editor, mixer, archive"):
        build_report(plan, view="director")  # type: ignore[arg-type]


def test_verify_rows_show_the_measured_score(plan) -> None:  # type: ignore[no-untyped-def]
    # A verify row as planner.render.verify writes it; the measured figure is constructed.
    rows = [VerifyRow(cue_index=6, event_id="E002", score_kind="sii", target=0.75, score_before=0.67, predicted_after=0.75,
                      measured_after=0.77, reached=True, planned_reachable=True, method="stems", confidence=1.0)]  # fmt: skip
    report = build_report(plan, view="mixer", verify_rows=rows)
    (e6,) = [r for r in report.events if r.cues == "6"]
    assert e6.measured == "measured SII 0.77 on cue 6, target reached"
    assert "measured SII 0.77" in _record(plan, "archive", verify_rows=rows)


# ----------------------------------------------------------------------------- episode verdict
_CLEAR_ALL = {i: "clear" for i in range(1, 8)}


@pytest.mark.parametrize(
    ("verdicts", "events", "action"),
    [
        (_CLEAR_ALL, [], "ok"),
        ({**_CLEAR_ALL, 6: "at-risk"}, [((6,), -2.4, True)], "targeted-gains"),
        ({**_CLEAR_ALL, 3: "masked", 4: "masked", 5: "masked"}, [((3, 4, 5), -12.0, True)], "targeted-gains"),
        ({**_CLEAR_ALL, 3: "masked", 4: "masked", 5: "masked"}, [((3, 4, 5), -12.0, False)], "remix-needed"),
        ({**_CLEAR_ALL, 3: "masked"}, [((4,), -3.0, True)], "remix-needed"),
        ({**_CLEAR_ALL, 1: "at-risk", 2: "at-risk", 3: "at-risk", 6: "at-risk"}, [((1, 2, 3, 6), -3.0, True)], "remix-needed"),
    ],
    ids=["all-clear", "one-at-risk", "masked-fixed", "masked-unfixable", "masked-no-event", "most-at-risk"],
)
def test_episode_verdict_rule(verdicts: dict[int, str], events: list, action: str) -> None:
    # docs/methods.md "Episode verdict", on hand-set verdicts and hand-made events. Every
    # cue has 1.6 s of speech: 3 of 7 flagged is 43 % (< 50 %), 4 of 7 is 57 % (>= 50 %).
    a = report_analysis()
    scores = tuple(dataclasses.replace(s, verdict=verdicts[s.index]) for s in a.scores)
    a = dataclasses.replace(a, scores=scores)
    plan = plan_with_events(a, [event(c, 20.0 + k, 21.0 + k, cut_db=g, reachable=r) for k, (c, g, r) in enumerate(events)])
    v = episode_verdict(plan)
    assert v.action == action
    assert v.line.startswith(f"{action}: ")
    flagged = sum(1 for x in verdicts.values() if x in ("masked", "at-risk"))
    assert v.flagged_share == pytest.approx(flagged / 7, abs=1e-4)


def test_no_scored_cue_is_not_ok() -> None:
    a = report_analysis()
    scores = tuple(dataclasses.replace(s, verdict="no-score", sii=None) for s in a.scores)
    v = episode_verdict(plan_with_events(dataclasses.replace(a, scores=scores), []))
    assert (v.action, v.confidence) == ("remix-needed", 0.0)


# ----------------------------------------------------------------------------- run and alignment
def test_run_summary_counts_lists_worst_and_files(plan) -> None:  # type: ignore[no-untyped-def]
    console = Console(width=80, record=True, file=io.StringIO())
    written = {"plan": Path("out/plan.json"), "report": Path("out/report.html")}
    print_run_summary(console, plan, written)
    text = console.export_text()
    assert max(len(line) for line in text.splitlines()) <= 80
    assert text.splitlines()[0].startswith("7 cues: 3 masked, 1 at-risk, 0 no-score, 3 clear")
    worst = [line.split()[0] for line in text.splitlines() if re.match(r"\s+\d+\s+\d\d:", line)]
    assert worst == ["3", "4", "5", "6"]  # masked first (equal SII: index order), then the at-risk cue
    assert "plan.json" in text and "report.html" in text


def test_alignment_summary_shows_mapping_and_worst_timed() -> None:
    a = report_analysis()
    # Constructed: cue 5 starts 900 ms after its speech; every other cue 200 ms before.
    timings = tuple(dataclasses.replace(t, onset_error_ms=900.0) if t.index == 5 else t for t in a.timings)
    a = dataclasses.replace(a, timings=timings)
    console = Console(width=80, record=True, file=io.StringIO())
    print_alignment_summary(console, a, top=3)
    text = console.export_text()
    assert max(len(line) for line in text.splitlines()) <= 80
    assert "subtitles at programme speed, shifted +0.00 s" in text
    rows = [line.split() for line in text.splitlines() if re.match(r"\s+\d+\s+\d\d:", line)]
    assert rows[0][:3] == ["5", ref_tc(25.0), "+900"]


def test_render_and_verify_summaries(plan) -> None:  # type: ignore[no-untyped-def]
    from planner.render.renderer import RenderReport
    from planner.render.verify import VerifyReport

    # Constructed records: a render that met EBU R 128 and a verify where one of two cues fell short.
    render = RenderReport(output_path="out/clear.wav", kind="stems", plan_sha256="0" * 64, standard="EBU R 128 (-23 LUFS, -1 dBTP)",
                          target_lufs=-23.0, tolerance_lu=0.2, ceiling_dbtp=-1.0, loudness_before_lufs=-21.8,
                          loudness_processed_lufs=-22.4, loudness_after_lufs=-23.0, true_peak_before_dbtp=-3.2,
                          true_peak_after_dbtp=-4.0, gain_applied_db=-0.6, limiter_max_reduction_db=0.0, limiter_active_s=0.0,
                          within_tolerance=True, true_peak_ok=True, n_events=2, duration_s=60.0)  # fmt: skip
    rows = tuple(VerifyRow(cue_index=i, event_id=e, score_kind="sii", target=0.75, score_before=b, predicted_after=0.76,
                           measured_after=m, reached=m >= 0.75, planned_reachable=True, method="stems", confidence=1.0)
                 for i, e, b, m in ((5, "E001", 0.26, 0.62), (6, "E002", 0.67, 0.77)))  # fmt: skip
    verify = VerifyReport(method="stems", rows=rows, n_cues=2, n_cues_reached=1, n_cues_unscored=0, n_events=2,
                          n_events_reachable=2, n_events_reached=1, n_reachable_events_reached=1)  # fmt: skip
    console = Console(width=80, record=True, file=io.StringIO())
    print_render(console, render, verify, plain=True)
    text = console.export_text()
    assert max(len(line) for line in text.splitlines()) <= 80
    assert "-21.8 LUFS in, -23.0 LUFS out (within tolerance)" in text
    assert "listen to it before delivery" in text
    assert "1 of 2 planned cues reached the target" in text
    short = [line.replace("|", " ").split() for line in text.splitlines() if "E00" in line]
    assert short == [["5", "E001", "0.26", "0.76", "0.62", "0.75"]]  # only cue 5 fell short
