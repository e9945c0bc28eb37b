"""Render a plan into audio and verify the result.

- :mod:`~planner.render.envelope`: :class:`GainEnvelope`, the per-sample gain automation of
  one target (background or dialogue) with raised-cosine ramps, evaluated block by block.
- :mod:`~planner.render.separate`: :class:`MixReducer`, mix-only background reduction (a
  streaming time-frequency gain driven by the channel structure and speech activity).
- :mod:`~planner.render.limiter`: :class:`TruePeakLimiter`, 4x oversampled look-ahead limiter.
- :mod:`~planner.render.renderer`: :func:`render` (stems or mix, loudness normalisation in
  two passes, limiter, atomic outputs) returning a :class:`RenderReport`.
- :mod:`~planner.render.verify`: :func:`verify` re-scores the planned cues on the render
  (:class:`VerifyReport`), :func:`write_verify_csv` writes ``verify.csv``.
"""

from planner.render.envelope import GainEnvelope
from planner.render.limiter import TruePeakLimiter
from planner.render.renderer import RenderReport, plan_sha256, render
from planner.render.separate import MixReducer
from planner.render.verify import VerifyReport, VerifyRow, verify, write_verify_csv

__all__ = [
    "GainEnvelope",
    "MixReducer",
    "RenderReport",
    "TruePeakLimiter",
    "VerifyReport",
    "VerifyRow",
    "plan_sha256",
    "render",
    "verify",
    "write_verify_csv",
]
