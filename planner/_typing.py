"""Array aliases used in signatures across the package."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

#: Audio samples, float32, shape ``(n_samples, n_channels)`` (always 2-D) or ``(n_samples,)`` for one signal.
AudioArray = npt.NDArray[np.float32]
#: Any float array (band powers, tracks), float32 or float64.
FloatArray = npt.NDArray[np.floating]
#: Boolean per-frame masks.
BoolArray = npt.NDArray[np.bool_]
