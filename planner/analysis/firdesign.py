"""Three textbook filter and window designs, written out rather than imported.

scipy.signal has them (``windows.hann``, ``kaiserord``, ``firwin``) but costs every analysis
and render about 0.6 s to import (with scipy.stats); the band analysis and the true-peak
limiter use these instead, and tests/test_bands.py checks them against scipy.signal.
"""

from __future__ import annotations

import numpy as np

from planner._typing import FloatArray


def periodic_hann(n: int) -> FloatArray:
    """Periodic Hann window of ``n`` samples, ``0.5 - 0.5 cos(2 pi k / n)`` (``scipy.signal.windows.hann(n, sym=False)``)."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def kaiser_order(stop_db: float, width: float) -> tuple[int, float]:
    """Taps and Kaiser beta of a low-pass FIR with ``stop_db`` attenuation and a transition
    ``width`` (a fraction of Nyquist), by Kaiser's formulas (Oppenheim and Schafer, Discrete-Time
    Signal Processing, 3rd ed., Eqs. 7.62-7.63; ``scipy.signal.kaiserord``)."""
    if stop_db > 50.0:
        beta = 0.1102 * (stop_db - 8.7)
    elif stop_db > 21.0:
        beta = 0.5842 * (stop_db - 21.0) ** 0.4 + 0.07886 * (stop_db - 21.0)
    else:
        beta = 0.0
    return int(np.ceil((stop_db - 7.95) / 2.285 / (np.pi * width) + 1)), beta


def kaiser_lowpass(n_taps: int, cutoff_hz: float, beta: float, sample_rate_hz: float) -> FloatArray:
    """Windowed-sinc low-pass FIR, unity gain at DC (``scipy.signal.firwin`` with a Kaiser window)."""
    m = np.arange(n_taps) - 0.5 * (n_taps - 1)
    cutoff = cutoff_hz / (0.5 * sample_rate_hz)
    taps = cutoff * np.sinc(cutoff * m) * np.kaiser(n_taps, beta)
    return taps / taps.sum()  # type: ignore[no-any-return]
