"""The demo scenario: "Night shift at the harbour café", an invented scene of about three minutes.

Four invented characters (Maren, who runs the café; Ansel, her young cook; Tobias, an old
fisherman; Odile, mate on the late ferry) close up for the night, find the harbour light
out, guide the ferry in with a torch in the rain, and feed its crew. The 47 lines of
``fixtures/demo/script.tsv`` are placed in order over five scenes with code-made
backgrounds, each line at a designed speech-to-background ratio (SNR as defined in
:mod:`planner.demo.synth`; the background gain is constant through each line and moves
only in the pauses):

1. closing time, lines 1-10: quiet room tone (pink noise), +30 dB: easy;
2. the jukebox, lines 11-21: a music bed swelling from +14 dB to 0 dB (lines 15-20 at
   0..+5 dB: the music only 0-5 dB below the speech, the masked scene), then pulled back;
3. on the quay, lines 22-32: rain, +12 dB easing to +6 dB in the downpour;
4. the ferry crew, lines 33-44: crowd babble, +4 to +8 dB;
5. lock-up, lines 45-47: room tone again, +30 dB.

The subtitle file is deliberately out of step: subtitles timed to a 24 fps version against
this 25 fps programme plus a constant offset, so ``t_audio = (24/25) * t_subs + 1.8 s``;
the cue of line 26 is missing; a cue sits over the music-only intro of scene 2; the cue of
line 38 (a rattled-off order) reads far too fast. ``truth.json`` records all of it.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from planner.demo.backgrounds import BackgroundKind
from planner.demo.lines import lines_at_rate, load_lines
from planner.demo.synth import (
    FAKE_CUE_TEXT,
    READING_EXTENSION_S,
    SynthProgramme,
    centre_dialogue,
    detection_signal,
    distort_cues,
    speech_mask,
    spread_background,
    truth_cues,
    write_programme,
)
from planner.io.files import atomic_write_text
from planner.model import Cue, Layout
from planner.progress import Progress, no_progress
from planner.units import seconds_to_samples

SAMPLE_RATE_HZ = 48000
LAYOUT: Layout = "stereo"
#: Seed of every random choice in the demo (pauses, backgrounds).
SEED = 1207
#: Subtitle-to-audio mapping of the delivered subtitle file: ``t_audio = RATE_RATIO * t_subs + OFFSET_S``.
#: 24/25: subtitles timed on the 24 fps version, programme at 25 fps (the trade's speed-up
#: ratio, CHECKS.md §5): about 8 s of drift over the demo, unmistakable, where 1001/1000 would give 0.2 s.
OFFSET_S = 1.8
RATE_RATIO = 24 / 25
RATE_NAME = "24/25"
#: Line whose cue is missing from the subtitle file.
MISSING_CUE_LINE = 26
#: Line spoken fast (280 words per minute) whose cue holds all its text: reads too fast.
TOO_FAST_LINE = 38
#: The cue over no speech: audio seconds after the end of line 10 (inside the music-only intro of scene 2).
NO_SPEECH_CUE_S = (1.6, 3.8)

LEAD_IN_S = 2.5
TAIL_S = 5.0
PAUSE_S = (0.35, 0.9)
#: Pause before each scene's first line; scene 2 has a long music-only intro.
SCENE_GAP_S = (0.0, 6.0, 3.0, 3.0, 3.0)
#: Background crossfade between scenes: starts this long after the last line, lasts XFADE_S.
XFADE_DELAY_S = 0.3
XFADE_S = 1.2

SPEAKERS = {
    "MAREN": "runs the café",
    "ANSEL": "her young cook",
    "TOBIAS": "an old fisherman",
    "ODILE": "mate on the late ferry",
}


@dataclass(frozen=True)
class DemoScene:
    """One scene: its background and the SNR (dB) designed for each of its lines, first to last."""

    name: str
    description: str
    background: BackgroundKind
    first_line: int
    snr_db: tuple[float, ...]

    @property
    def line_numbers(self) -> range:
        """Script numbers of the scene's lines."""
        return range(self.first_line, self.first_line + len(self.snr_db))


SCENES = (
    DemoScene("closing time", "quiet room tone", "pink", 1, (30.0,) * 10),
    DemoScene(
        "the jukebox",
        "music bed swelling under the lines; lines 15-20 only 0-5 dB above the music",
        "music",
        11,
        (14.0, 12.0, 10.0, 8.0, 5.0, 3.0, 1.0, 0.0, 0.0, 2.0, 8.0),
    ),
    DemoScene(
        "on the quay", "rain, heavier in the middle", "rain", 22, (12.0, 12.0, 10.0, 10.0, 9.0, 8.0, 6.0, 6.0, 6.0, 8.0, 10.0)
    ),
    DemoScene(
        "the ferry crew", "crowd babble in the café", "babble", 33, (8.0, 7.0, 6.0, 5.0, 4.0, 4.0, 4.0, 4.0, 5.0, 5.0, 6.0, 7.0)
    ),
    DemoScene("lock-up", "quiet room tone", "pink", 45, (30.0, 30.0, 30.0)),
)


@dataclass(frozen=True)
class DemoFiles:
    """Paths of the built demo: stereo 48 kHz 24-bit WAVs, the out-of-step subtitles, the truth."""

    mix: Path
    dialogue: Path
    background: Path
    subtitles: Path
    truth: Path


def build_demo(out_dir: Path, *, progress: Progress | None = None) -> DemoFiles:
    """Build the demo scenario into ``out_dir`` (created if missing); takes a few seconds.

    Writes ``mix.wav``, ``dialogue.wav``, ``background.wav`` (stereo, 48 kHz, 24-bit),
    ``subtitles.srt`` (out of step, see the module docstring) and ``truth.json`` (scene
    times, every line's speech span, SNR and true cue, the subtitle mapping and each planted
    defect). The same code gives byte-identical files.
    """
    report = progress or no_progress
    total = len(SCENES) + 2
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    script = load_lines()
    audio = lines_at_rate(SAMPLE_RATE_HZ)
    rate = SAMPLE_RATE_HZ
    rng = np.random.default_rng(SEED)

    # Placement: lead-in, then each line after a scene gap or a random pause.
    starts: dict[int, int] = {}
    pos = seconds_to_samples(LEAD_IN_S, rate)
    for k, scene in enumerate(SCENES):
        for j, number in enumerate(scene.line_numbers):
            if k > 0 or j > 0:
                pos += seconds_to_samples(SCENE_GAP_S[k] if j == 0 else rng.uniform(*PAUSE_S), rate)
            starts[number] = pos
            pos += audio[number - 1].size
    n = pos + seconds_to_samples(TAIL_S, rate)
    mono = np.zeros(n, dtype=np.float32)
    spans: dict[int, tuple[float, float]] = {}
    for number, p in starts.items():
        mono[p : p + audio[number - 1].size] = audio[number - 1]
        v0, v1 = script[number - 1].voiced_span_s
        spans[number] = (p / rate + v0, p / rate + v1)
    dialogue = centre_dialogue(mono, LAYOUT)
    d_det = detection_signal(dialogue, LAYOUT)
    report("demo", 1, total)

    background = np.zeros_like(dialogue)
    bounds = _scene_bounds(starts, spans, n)
    for k, scene in enumerate(SCENES):
        _add_scene_background(background, d_det, scene, k, bounds, starts, spans)
        report("demo", 2 + k, total)

    numbers = sorted(spans)
    prog = SynthProgramme(
        sample_rate_hz=rate,
        layout=LAYOUT,
        dialogue=dialogue,
        background=background,
        speech_truth=tuple(spans[i] for i in numbers),
        cues=truth_cues([spans[i] for i in numbers], [script[i - 1].text for i in numbers]),
        snr_db=_snr_db(d_det, detection_signal(background, LAYOUT), speech_mask(list(spans.values()), n, rate)),
        line_numbers=tuple(numbers),
        background_kind="mixed",
    )
    fake = (spans[10][1] + NO_SPEECH_CUE_S[0], spans[10][1] + NO_SPEECH_CUE_S[1])
    subs = distort_cues(prog.cues, offset_s=OFFSET_S, rate_ratio=RATE_RATIO, drop=(MISSING_CUE_LINE,), add_fake=(fake,))
    paths = write_programme(prog, out_dir, subtitles=subs)
    truth = _truth(prog, subs, fake, bounds)
    atomic_write_text(out_dir / "truth.json", json.dumps(truth, indent=2, sort_keys=True, ensure_ascii=False) + "\n")
    report("demo", total, total)
    return DemoFiles(
        mix=paths["mix"],
        dialogue=paths["dialogue"],
        background=paths["background"],
        subtitles=paths["subtitles"],
        truth=out_dir / "truth.json",
    )


def _scene_bounds(starts: dict[int, int], spans: dict[int, tuple[float, float]], n: int) -> list[tuple[int, int, int, int]]:
    """Per scene ``(region_start, region_end, fade_in_len, fade_out_len)`` in samples.

    A scene's background runs from the start of the crossfade into it to the end of the
    crossfade out of it; each crossfade begins XFADE_DELAY_S after the previous scene's last line.
    """
    rate = SAMPLE_RATE_HZ
    xf = seconds_to_samples(XFADE_S, rate)
    cuts = [seconds_to_samples(spans[s.line_numbers[-1]][1] + XFADE_DELAY_S, rate) for s in SCENES[:-1]]
    out = []
    for k in range(len(SCENES)):
        a = 0 if k == 0 else cuts[k - 1]
        b = n if k == len(SCENES) - 1 else cuts[k] + xf
        out.append((a, b, 0 if k == 0 else xf, 0 if k == len(SCENES) - 1 else xf))
    return out


def _add_scene_background(
    background: np.ndarray,
    d_det: np.ndarray,
    scene: DemoScene,
    k: int,
    bounds: list[tuple[int, int, int, int]],
    starts: dict[int, int],
    spans: dict[int, tuple[float, float]],
) -> None:
    """Add one scene's background, its gain set line by line to the designed SNR, crossfaded at the ends."""
    rate = SAMPLE_RATE_HZ
    a, b, fade_in, fade_out = bounds[k]
    raw = spread_background(scene.background, b - a, rate, LAYOUT, seed=SEED + k)
    b_det = detection_signal(raw, LAYOUT)
    knots_x, knots_db = [], []
    for number, snr_db in zip(scene.line_numbers, scene.snr_db):
        i0 = seconds_to_samples(spans[number][0], rate)
        i1 = seconds_to_samples(spans[number][1], rate)
        p_d = np.mean(d_det[i0:i1] ** 2)
        p_b = np.mean(b_det[i0 - a : i1 - a] ** 2)
        gain_db = 10.0 * math.log10(p_d / p_b) - snr_db
        # Constant over the whole placed line, so the ramps fall in the pauses only.
        line_end = starts[number] + lines_at_rate(rate)[number - 1].size
        knots_x += [starts[number] - a, line_end - a]
        knots_db += [gain_db, gain_db]
    env = 10.0 ** (np.interp(np.arange(b - a), knots_x, knots_db) / 20.0)
    # Equal-power crossfade (sin/cos quarter waves) so the total level holds through the change.
    if fade_in:
        env[:fade_in] *= np.sin(0.5 * np.pi * (np.arange(fade_in) + 0.5) / fade_in)
    if fade_out:
        env[-fade_out:] *= np.cos(0.5 * np.pi * (np.arange(fade_out) + 0.5) / fade_out)
    background[a:b] += (raw * env[:, None]).astype(np.float32)


def _snr_db(d_det: np.ndarray, b_det: np.ndarray, mask: np.ndarray) -> float:
    """SNR over the masked samples (definition in planner.demo.synth), dB."""
    return 10.0 * math.log10(np.mean(d_det[mask] ** 2) / np.mean(b_det[mask] ** 2))


def _r(t: float) -> float:
    """Round for the truth file: microseconds for times, plenty for dB."""
    return round(float(t), 6)


def _truth(
    prog: SynthProgramme, subs: tuple[Cue, ...], fake: tuple[float, float], bounds: list[tuple[int, int, int, int]]
) -> dict[str, object]:
    """The truth file's content: scenes, lines, the subtitle mapping and each planted defect."""
    rate = prog.sample_rate_hz
    d_det = detection_signal(prog.dialogue, prog.layout)
    b_det = detection_signal(prog.background, prog.layout)
    script = {line.number: line for line in load_lines()}
    by_text = {c.text.replace("\n", " "): c for c in subs}  # keyed by the unbroken text
    scene_of = {n: k for k, s in enumerate(SCENES) for n in s.line_numbers}
    snr = {
        number: round(_snr_db(d_det, b_det, speech_mask([span], prog.n_samples, rate)), 3) + 0.0  # + 0.0: no -0.0
        for number, span in zip(prog.line_numbers, prog.speech_truth)
    }
    lines = []
    for number, span, cue in zip(prog.line_numbers, prog.speech_truth, prog.cues):
        sub = by_text.get(cue.text.replace("\n", " "))
        lines.append(
            {
                "line": number,
                "speaker": script[number].speaker,
                "text": cue.text,
                "scene": scene_of[number] + 1,
                "speech_start_s": _r(span[0]),
                "speech_end_s": _r(span[1]),
                "true_cue_start_s": cue.start_s,
                "true_cue_end_s": cue.end_s,
                "snr_db": snr[number],
                "subtitle_cue": None if sub is None else sub.index,
                "subtitle_start_s": None if sub is None else sub.start_s,
                "subtitle_end_s": None if sub is None else sub.end_s,
            }
        )
    scenes = []
    for k, (scene, (a, b, fade_in, fade_out)) in enumerate(zip(SCENES, bounds)):
        snrs = [snr[n] for n in scene.line_numbers]
        scenes.append(
            {
                "scene": k + 1,
                "name": scene.name,
                "background": scene.background,
                "description": scene.description,
                "start_s": _r((a + fade_in / 2) / rate),
                "end_s": _r((b - fade_out / 2) / rate),
                "lines": [scene.line_numbers[0], scene.line_numbers[-1]],
                "snr_db_min": min(snrs),
                "snr_db_max": max(snrs),
            }
        )
    fake_cue = by_text[FAKE_CUE_TEXT]
    fast = by_text[script[TOO_FAST_LINE].text]
    fast_chars = len(fast.text.replace("\n", ""))
    others_cps = [len(c.text) / c.duration_s for c in subs if c is not fast and c is not fake_cue]
    return {
        "title": "Night shift at the harbour café (an invented scene)",
        "speakers": SPEAKERS,
        "sample_rate_hz": rate,
        "layout": prog.layout,
        "n_samples": prog.n_samples,
        "duration_s": _r(prog.duration_s),
        "files": {role: f"{role}.wav" for role in ("mix", "dialogue", "background")} | {"subtitles": "subtitles.srt"},
        "snr_definition": (
            "10*log10(mean power of the dialogue's (L+R)/2 over the line's speech samples / "
            "mean power of the background's (L+R)/2 over the same samples); "
            "speech samples from round(start_s*rate) to round(end_s*rate), half-open"
        ),
        "programme_snr_db": round(prog.snr_db, 3),
        "true_cue_rule": f"in at speech onset, out {READING_EXTENSION_S} s after speech end, to the millisecond",
        "scenes": scenes,
        "lines": lines,
        "distortions": {
            "mapping": {
                "audio_from_subtitles": "t_audio = rate_ratio * t_subs + offset_s",
                "subtitles_from_audio": "t_subs = (t_audio - offset_s) / rate_ratio",
                "offset_s": OFFSET_S,
                "rate_ratio": RATE_RATIO,
                "rate_name": RATE_NAME,
                "why": "subtitles timed on a 24 fps version, programme at 25 fps, plus a constant offset",
            },
            "missing_cue": {
                "line": MISSING_CUE_LINE,
                "speech_start_s": lines[MISSING_CUE_LINE - 1]["speech_start_s"],
                "speech_end_s": lines[MISSING_CUE_LINE - 1]["speech_end_s"],
            },
            "no_speech_cue": {
                "subtitle_cue": fake_cue.index,
                "text": fake_cue.text,
                "audio_start_s": _r(fake[0]),
                "audio_end_s": _r(fake[1]),
                "subtitle_start_s": fake_cue.start_s,
                "subtitle_end_s": fake_cue.end_s,
            },
            "too_fast_cue": {
                "line": TOO_FAST_LINE,
                "subtitle_cue": fast.index,
                "characters": fast_chars,
                "subtitle_duration_s": _r(fast.duration_s),
                "cps": round(fast_chars / fast.duration_s, 2),
                "max_cps_of_other_cues": round(max(others_cps), 2),
            },
        },
    }
