"""Frame powers measured once in pass 1 (planner.analysis.framepower.SignalKPower) for the scoring pass.

References: scipy.signal.sosfilt (the reference library) for the K-weighting of each
analysed signal, written here from its definition (stereo mid and side; ITU-R BS.775
Table 2 fold-down of 5.1), and the frame rule of the features module (frame j covers
samples floor(j h + 0.5) up to floor((j + 1) h + 0.5), the last one partial).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from planner.analysis.features import ProgrammeFeatures
from planner.analysis.framepower import SignalKPower
from planner.analysis.loudness import LoudnessMeter, k_weighting_sos
from planner.errors import InputError
from planner.io.audio import ProgrammeBlock
from planner.model import AudioInfo

RATE = 48000
N = 2 * RATE + 123  # the last 10 ms frame partial
G = 0.7071  # BS.775 Table 2, as written


def _info(layout: str, n_channels: int) -> AudioInfo:
    return AudioInfo(
        sample_rate_hz=RATE, n_channels=n_channels, n_frames=N, layout=layout, format="WAV", subtype="PCM_24", bit_depth=24
    )  # type: ignore[arg-type]


def _signals(x: np.ndarray, layout: str) -> list[np.ndarray]:
    x = x.astype(np.float64)
    if layout == "mono":
        return [x[:, 0]]
    if layout == "stereo":
        return [(x[:, 0] + x[:, 1]) / 2, (x[:, 0] - x[:, 1]) / 2]
    lo = x[:, 0] + G * x[:, 2] + G * x[:, 4]
    ro = x[:, 1] + G * x[:, 2] + G * x[:, 5]
    return [x[:, 0], x[:, 1], x[:, 2], x[:, 4], x[:, 5], (lo + ro) / 2, (lo - ro) / 2]


def _expected_frames(sig: np.ndarray) -> np.ndarray:
    k = signal.sosfilt(k_weighting_sos(RATE), sig) ** 2
    hop = RATE // 100
    n_whole = k.size // hop
    whole = k[: n_whole * hop].reshape(n_whole, hop).mean(axis=1)
    return np.concatenate([whole, [k[n_whole * hop :].mean()]])


LAYOUTS = {"mono": 1, "stereo": 2, "5.1": 6}


@pytest.mark.parametrize("layout", sorted(LAYOUTS), ids=sorted(LAYOUTS))
@pytest.mark.parametrize("block", [7001, 333], ids=["blocks-of-7001", "blocks-shorter-than-a-frame"])
def test_k_power_of_every_analysed_signal_from_the_meters_channels(rng: np.random.Generator, layout: str, block: int) -> None:
    x = (rng.standard_normal((N, LAYOUTS[layout])) * 0.1).astype(np.float32)
    levels = SignalKPower(_info(layout, LAYOUTS[layout]))
    meter = LoudnessMeter(RATE, layout, on_weighted=levels.feed)  # type: ignore[arg-type]
    for start in range(0, N, block):
        meter.feed(x[start : start + block])
    got = levels.result()
    expected = np.stack([_expected_frames(s) for s in _signals(x, layout)], axis=1)
    assert got.shape == expected.shape == (-(-N // 480), len(_signals(x, layout)))
    # float32 storage of the frame powers; the fold-down's 0.7071 rounded to float32
    np.testing.assert_allclose(got, expected, rtol=2e-6)


@pytest.mark.parametrize("layout", ["stereo", "5.1"])
def test_features_given_the_k_power_equal_those_computed_in_place(rng: np.random.Generator, layout: str) -> None:
    # Ground truth: the same features with the K-weighting done by ProgrammeFeatures itself.
    x = (rng.standard_normal((N, LAYOUTS[layout])) * 0.1).astype(np.float32)
    info = _info(layout, LAYOUTS[layout])
    levels = SignalKPower(info)
    meter = LoudnessMeter(RATE, layout, on_weighted=levels.feed)  # type: ignore[arg-type]
    meter.feed(x)
    given, alone = ProgrammeFeatures(info, "mix", k_power=levels.result()), ProgrammeFeatures(info, "mix")
    a, b = [], []
    for start in range(0, N, 30000):
        block = ProgrammeBlock(start, x[start : start + 30000], None, None)
        a.append(given.process(block))
        b.append(alone.process(block))
    a.append(given.flush())
    b.append(alone.flush())
    for name in b[0]:
        np.testing.assert_allclose(np.vstack([v[name] for v in a]), np.vstack([v[name] for v in b]), rtol=2e-6, atol=0)


def test_k_power_of_the_wrong_shape_is_refused() -> None:
    with pytest.raises(InputError, match=r"does not fit this programme \(stereo mix\); pass .* \(2 columns\)"):
        ProgrammeFeatures(_info("stereo", 2), "mix", k_power=np.zeros((10, 7), np.float32))
    with pytest.raises(InputError, match=r"does not fit this programme \(stereo stems\)"):
        ProgrammeFeatures(_info("stereo", 2), "stems", k_power=np.zeros((10, 4), np.float32))
