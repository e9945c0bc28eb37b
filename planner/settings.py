"""Frozen settings of each stage, validated once at the API boundary.

Each settings object records itself into ``plan.json`` through ``to_dict`` so that a plan
says exactly how it was made. Defaults carry their source in the comment beside them.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any, Literal, TypeVar

from planner.errors import SettingsError

VadBackend = Literal["neural", "fast"]
Move = Literal["background", "dialogue", "both"]
TargetKind = Literal["sii", "lu"]

#: Frame rates the tool accepts, by the name users type (SMPTE ST 12-1 rates).
FRAME_RATES = ("23.976", "24", "25", "29.97", "30", "50", "59.94")

#: Named steps of ``strength`` (see docs/methods.md, "Strength").
STRENGTH_STEPS = {"gentle": 0.25, "moderate": 0.5, "strong": 0.75, "full": 1.0}

S = TypeVar("S", bound="_Settings")


class _Settings:
    def to_dict(self) -> dict[str, Any]:
        """Plain dict of the settings (tuples as lists)."""
        out = {}
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            v = getattr(self, f.name)
            out[f.name] = list(v) if isinstance(v, tuple) else v
        return out

    @classmethod
    def from_dict(cls: type[S], data: dict[str, Any]) -> S:
        """Settings from a dict written by :meth:`to_dict` (unknown keys rejected)."""
        names = {f.name for f in dataclasses.fields(cls)}  # type: ignore[arg-type]
        unknown = sorted(set(data) - names)
        if unknown:
            raise SettingsError(f"unknown setting {unknown[0]!r}; known settings are {', '.join(sorted(names))}")
        conv = {k: tuple(v) if isinstance(v, list) else v for k, v in data.items()}
        return cls(**conv)


def _check_choice(name: str, value: object, choices: tuple[object, ...]) -> None:
    if value not in choices:
        listed = ", ".join(str(c) for c in choices)
        raise SettingsError(f"{name}={value!r} must be one of {listed}; pass one of those")


def check_range(name: str, value: float, lo: float, hi: float) -> None:
    """Refuse ``value`` outside ``[lo, hi]`` with the project's message (what is wrong; what to do)."""
    if not (lo <= value <= hi):
        raise SettingsError(f"{name}={value!r} must be between {lo} and {hi}; pass a value in that range")


@dataclass(frozen=True)
class AnalysisSettings(_Settings):
    """How speech is found, cues aligned and scored.

    ``listening_level_db_spl``: the sound pressure level at which a programme measuring
    -23 LUFS is reproduced at the viewer (so SPL = LUFS + 85 at the default); common
    practice for living-room television listening (about 60-65 dB SPL for dialogue), not
    a standard value. ``hearing`` names a profile (``normal``, ``age-60``, ``age-70``,
    ``age-80``) or ``audiogram``, in which case ``audiogram_hz`` / ``audiogram_db_hl``
    carry the thresholds read from the user's file.
    """

    vad: VadBackend = "neural"
    vad_aggressiveness: int = 2
    fps: str = "25"
    drop_frame: bool = False
    programme_start: str = "00:00:00:00"
    hearing: str = "normal"
    audiogram_hz: tuple[float, ...] = ()
    audiogram_db_hl: tuple[float, ...] = ()
    listening_level_db_spl: float = 62.0
    snap_tolerance_s: float = 0.5
    max_offset_s: float = 90.0
    profile: str = "default"

    def __post_init__(self) -> None:
        _check_choice("vad", self.vad, ("neural", "fast"))
        _check_choice("vad_aggressiveness", self.vad_aggressiveness, (0, 1, 2, 3))
        _check_choice("fps", self.fps, FRAME_RATES)
        if self.drop_frame and self.fps not in ("29.97", "59.94"):
            raise SettingsError(f"drop_frame=True needs fps 29.97 or 59.94, not fps={self.fps}; pass --ndf or a DF rate")
        from planner.analysis.hearing import PROFILE_NAMES

        _check_choice("hearing", self.hearing, (*PROFILE_NAMES, "audiogram"))
        if self.hearing == "audiogram" and not self.audiogram_hz:
            raise SettingsError("hearing='audiogram' needs the audiogram's points; pass --audiogram FILE")
        check_range("listening_level_db_spl", self.listening_level_db_spl, 30.0, 100.0)
        check_range("snap_tolerance_s", self.snap_tolerance_s, 0.0, 5.0)
        check_range("max_offset_s", self.max_offset_s, 0.0, 600.0)
        if len(self.audiogram_hz) != len(self.audiogram_db_hl):
            raise SettingsError("audiogram_hz and audiogram_db_hl must have the same length")


@dataclass(frozen=True)
class PlanSettings(_Settings):
    """How gain moves are chosen. Defaults and their sources are in docs/methods.md.

    ``target_sii`` 0.75: the SII often quoted as "good communication" (from memory,
    usually attributed to ANSI S3.5-1997 informative text). ``target_lu`` 10: speech over
    music by at least 10 LU (Torcoli et al., JAES 67(12), 2019). ``min_move_db`` 3: the
    just-noticeable change in speech-to-noise ratio (McShefferty, Whitmer and Akeroyd,
    Trends in Hearing 19, 2015). ``max_cut_db`` 12, ``max_lift_db`` 6, hold and ramps:
    common practice for dialogue rides, no standard.
    """

    target_kind: TargetKind = "sii"
    target_sii: float = 0.75
    target_lu: float = 10.0
    strength: float = 1.0
    move: Move = "background"
    max_cut_db: float = 12.0
    max_lift_db: float = 6.0
    max_mix_cut_db: float = 10.0
    min_move_db: float = 3.0
    hold_s: float = 1.5
    ramp_in_ms: float = 400.0
    ramp_out_ms: float = 600.0
    scene_gap_s: float = 4.0
    true_peak_ceiling_dbtp: float = -1.0

    def __post_init__(self) -> None:
        _check_choice("target_kind", self.target_kind, ("sii", "lu"))
        _check_choice("move", self.move, ("background", "dialogue", "both"))
        check_range("target_sii", self.target_sii, 0.0, 1.0)
        check_range("target_lu", self.target_lu, -20.0, 40.0)
        check_range("strength", self.strength, 0.0, 1.0)
        check_range("max_cut_db", self.max_cut_db, 0.0, 40.0)
        check_range("max_lift_db", self.max_lift_db, 0.0, 20.0)
        check_range("max_mix_cut_db", self.max_mix_cut_db, 0.0, 30.0)
        check_range("min_move_db", self.min_move_db, 0.0, 12.0)
        check_range("hold_s", self.hold_s, 0.0, 30.0)
        check_range("ramp_in_ms", self.ramp_in_ms, 1.0, 5000.0)
        check_range("ramp_out_ms", self.ramp_out_ms, 1.0, 5000.0)
        check_range("scene_gap_s", self.scene_gap_s, 0.0, 120.0)


#: Loudness presets by standard name: (integrated target LUFS, max true peak dBTP, tolerance LU, label).
LOUDNESS_PRESETS: dict[str, tuple[float, float, float, str]] = {
    # EBU R 128: -23.0 LUFS, -1 dBTP for linear PCM production (EBU Tech 3343 §3.1, §11.2.3).
    "ebu-r128": (-23.0, -1.0, 0.2, "EBU R 128 (-23 LUFS, -1 dBTP)"),
    # ATSC A/85: -24 LKFS, -2 dBTP (ATSC A/85:2013 as summarised publicly).
    "atsc-a85": (-24.0, -2.0, 2.0, "ATSC A/85 (-24 LKFS, -2 dBTP)"),
}


@dataclass(frozen=True)
class RenderSettings(_Settings):
    """How a plan becomes audio: loudness target and true-peak ceiling.

    ``loudness`` is a preset name from :data:`LOUDNESS_PRESETS`, ``"off"``, or a target
    in LUFS written as a number string (e.g. ``"-24"``); ``true_peak_dbtp`` overrides the
    preset's ceiling when not ``None``.
    """

    loudness: str = "ebu-r128"
    true_peak_dbtp: float | None = None

    def __post_init__(self) -> None:
        if self.loudness not in LOUDNESS_PRESETS and self.loudness != "off":
            try:
                value = float(self.loudness)
            except ValueError:
                raise SettingsError(
                    f"loudness={self.loudness!r} must be a preset ({', '.join(LOUDNESS_PRESETS)}), "
                    "'off', or a target in LUFS such as -24; pass one of those"
                ) from None
            check_range("loudness", value, -60.0, 0.0)
        if self.true_peak_dbtp is not None:
            check_range("true_peak_dbtp", self.true_peak_dbtp, -20.0, 0.0)

    def target(self) -> tuple[float, float, float, str] | None:
        """(target LUFS, ceiling dBTP, tolerance LU, label), or None when normalisation is off."""
        if self.loudness == "off":
            return None
        if self.loudness in LOUDNESS_PRESETS:
            lufs, tp, tol, label = LOUDNESS_PRESETS[self.loudness]
        else:
            lufs, tp, tol, label = float(self.loudness), -1.0, 0.1, f"{float(self.loudness):g} LUFS"
        if self.true_peak_dbtp is not None:
            tp = self.true_peak_dbtp
            label = f"{label}, ceiling {tp:g} dBTP"
        return lufs, tp, tol, label
