"""The floor every analysis is compared with: read a file in blocks, mix to mono, one STFT pass.

``python -m benchmarks.floor FILE`` decodes FILE to float32 in blocks (soundfile), sums
the channels column by column into one mono signal, and takes one short-time Fourier
transform of it (1024-sample Hann frames, 10 ms hop, as band analysis would), keeping only
the total power per frequency bin. No cueplan code runs, so the time is what any analysis
of the whole file must at least spend: decoding plus one pass of FFTs. Prints one JSON line.
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np
import soundfile as sf
from numpy.lib.stride_tricks import sliding_window_view
from scipy import fft

BLOCK_FRAMES = 1 << 16
FFT_SIZE = 1024


def floor_pass(path: str) -> dict[str, float]:
    """Decode, mix down and transform ``path``; returns its length and the checksum of the power."""
    t0 = time.perf_counter()
    window = np.hanning(FFT_SIZE).astype(np.float32)
    with sf.SoundFile(path) as fh:
        rate, n_ch = fh.samplerate, fh.channels
        hop = rate // 100
        carry = np.zeros(0, dtype=np.float32)
        power = np.zeros(FFT_SIZE // 2 + 1)
        n_frames = 0
        while True:
            block = fh.read(BLOCK_FRAMES, dtype="float32", always_2d=True)
            if block.shape[0] == 0:
                break
            n_frames += block.shape[0]
            mono = block[:, 0].copy()
            for c in range(1, n_ch):
                mono += block[:, c]
            x = np.concatenate((carry, mono)) if carry.size else mono
            if x.size >= FFT_SIZE:
                frames = sliding_window_view(x, FFT_SIZE)[::hop]
                spectrum = fft.rfft(frames * window, axis=1)
                power += (spectrum.real**2 + spectrum.imag**2).sum(axis=0)
                carry = x[frames.shape[0] * hop :]
            else:
                carry = x
    return {"seconds": time.perf_counter() - t0, "audio_s": n_frames / rate, "checksum": float(power.sum())}


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python -m benchmarks.floor FILE")
    print(json.dumps(floor_pass(sys.argv[1])))
