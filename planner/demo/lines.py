"""The demo's spoken lines: the fixture FLAC files of ``fixtures/demo/`` and their script.

The lines were synthesized once with espeak-ng (see ``fixtures/demo/README.md``); here they
are only read, resampled and levelled for placing in a programme.
"""

from __future__ import annotations

import csv
import functools
from dataclasses import dataclass
from math import gcd
from pathlib import Path

import numpy as np
import soundfile as sf
from scipy.signal import resample_poly

from planner._typing import AudioArray
from planner.errors import InputError

#: Folder of the committed speech fixtures (``script.tsv``, ``line_NN.flac``).
FIXTURE_DIR = Path(__file__).resolve().parents[2] / "fixtures" / "demo"
#: espeak-ng's native output rate, the rate of every fixture file.
LINE_SAMPLE_RATE_HZ = 22050
#: Magnitude above which a fixture sample counts as voiced, dBFS. Same rule as the trimming
#: in ``fixtures/demo/make_lines.py``, so a line's voiced span is its file minus the 20 ms pads.
VOICED_THRESHOLD_DBFS = -50.0
#: RMS level (over the whole line) every line is set to when placed in a programme, dBFS.
#: Chosen near broadcast dialogue level (-23 LUFS targets, common practice) with headroom
#: for backgrounds louder than the speech.
LINE_LEVEL_DBFS = -26.0


@dataclass(frozen=True, eq=False)
class Line:
    """One spoken line of the demo script.

    ``audio`` is float32 mono of shape ``(n,)`` at ``sample_rate_hz`` (22050 Hz), as stored
    in the fixture (espeak-ng's level, silence trimmed).
    """

    number: int
    speaker: str
    text: str
    audio: AudioArray
    sample_rate_hz: int = LINE_SAMPLE_RATE_HZ

    @property
    def duration_s(self) -> float:
        """Length of the stored audio, seconds."""
        return self.audio.shape[0] / self.sample_rate_hz

    @property
    def voiced_span_s(self) -> tuple[float, float]:
        """``(start_s, end_s)`` of the voiced part within the stored audio, seconds.

        From the first sample above :data:`VOICED_THRESHOLD_DBFS` to just after the last one.
        """
        loud = np.flatnonzero(np.abs(self.audio) > 10.0 ** (VOICED_THRESHOLD_DBFS / 20.0))
        return float(loud[0] / self.sample_rate_hz), float((loud[-1] + 1) / self.sample_rate_hz)


@functools.cache
def load_lines() -> tuple[Line, ...]:
    """All lines of ``fixtures/demo/script.tsv`` with their audio, in script order (cached).

    Raises
    ------
    InputError
        If the script or a line's FLAC file is missing.
    """
    script = FIXTURE_DIR / "script.tsv"
    regenerate = "regenerate the fixtures with: python fixtures/demo/make_lines.py"
    if not script.is_file():
        raise InputError(f"the demo script is missing; {regenerate}", path=script)
    with open(script, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t"))
    lines = []
    for row in rows:
        number = int(row["line"])
        path = FIXTURE_DIR / f"line_{number:02d}.flac"
        if not path.is_file():
            raise InputError(f"the audio of demo line {number} is missing; {regenerate}", path=path)
        audio, rate = sf.read(path, dtype="float32")
        if rate != LINE_SAMPLE_RATE_HZ or audio.ndim != 1:
            raise InputError(f"expected mono {LINE_SAMPLE_RATE_HZ} Hz audio, found {rate} Hz; {regenerate}", path=path)
        audio.setflags(write=False)
        lines.append(Line(number=number, speaker=row["speaker"], text=row["text"], audio=audio))
    return tuple(lines)


@functools.lru_cache(maxsize=4)
def lines_at_rate(sample_rate_hz: int) -> tuple[AudioArray, ...]:
    """Every line resampled to ``sample_rate_hz`` and set to :data:`LINE_LEVEL_DBFS` RMS (cached, read-only).

    Resampling is polyphase (``scipy.signal.resample_poly``, its default Kaiser window),
    which keeps the timing: sample ``k`` of the result sits at ``k / sample_rate_hz`` s.
    """
    g = gcd(int(sample_rate_hz), LINE_SAMPLE_RATE_HZ)
    up, down = int(sample_rate_hz) // g, LINE_SAMPLE_RATE_HZ // g
    target_rms = 10.0 ** (LINE_LEVEL_DBFS / 20.0)
    out = []
    for line in load_lines():
        x = resample_poly(line.audio.astype(np.float64), up, down) if up != down else line.audio.astype(np.float64)
        y = (x * (target_rms / np.sqrt(np.mean(x * x)))).astype(np.float32)
        y.setflags(write=False)
        out.append(y)
    return tuple(out)
