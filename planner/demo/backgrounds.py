"""Seeded backgrounds for synthesized programmes: pink noise, a music bed, crowd babble, rain.

Every generator is pure numpy/scipy, deterministic for a given ``seed`` and rate, and
returns float32 mono scaled to :data:`BACKGROUND_LEVEL_DBFS` RMS, so callers set the level
they need with one gain.
"""

from __future__ import annotations

from typing import Literal, get_args

import numpy as np
from scipy import fft
from scipy.signal import butter, lfilter, sosfilt

from planner._typing import AudioArray
from planner.demo.lines import lines_at_rate
from planner.errors import InputError

BackgroundKind = Literal["pink", "music", "babble", "rain", "none"]
BACKGROUND_KINDS: tuple[str, ...] = get_args(BackgroundKind)
#: RMS of every generated background over its whole length, dBFS.
BACKGROUND_LEVEL_DBFS = -26.0

# Pink noise: 1/f power spectrum, flattened below this frequency so the level stays finite.
_PINK_FLOOR_HZ = 20.0

# Music bed: 80 beats per minute, four beats per chord, a four-chord loop in A minor
# (Am F C G), notes as MIDI numbers (69 = A4 = 440 Hz, equal temperament).
_BEAT_S = 0.75
_BEATS_PER_CHORD = 4
_CHORDS_MIDI = ((57, 60, 64), (53, 57, 60), (60, 64, 67), (55, 59, 62))
_N_HARMONICS = 6
_PLUCK_DECAY_S = 0.35
_BASS_DECAY_S = 0.6

# Babble: this many talkers at once, each speaking fixture lines back to back.
_BABBLE_TALKERS = 8
_BABBLE_LOWPASS_HZ = 5000.0

# Rain: band-limited hiss plus droplets (impulses through decaying two-pole resonators).
_RAIN_BAND_HZ = (300.0, 9000.0)
_DROPS_PER_S = 60.0
_DROP_DECAY_S = 0.01
_DROP_FREQS_HZ = (1700.0, 2600.0, 3900.0, 5200.0)


def make_background(
    kind: BackgroundKind, n_samples: int, sample_rate_hz: int, *, seed: int
) -> AudioArray:
    """One channel of background sound.

    Parameters
    ----------
    kind : {"pink", "music", "babble", "rain", "none"}
        ``pink``: Gaussian noise with a 1/f power spectrum (flat below 20 Hz).
        ``music``: a tonal bed of harmonic tones: an Am-F-C-G loop at 80 bpm with a sustained
        chord pad, plucked chords on every beat and bass on beats 1 and 3; the seed only
        picks partial phases, so two seeds give the same music, decorrelated.
        ``babble``: eight talkers speaking the demo's fixture lines at random offsets and
        levels (+-4 dB), low-passed at 5 kHz; a detector sees it as speech.
        ``rain``: 300-9000 Hz noise with random droplets (about 60 per second).
        ``none``: silence.
    n_samples : int
        Length in samples.
    sample_rate_hz : int
        Sample rate (at least 16000 Hz, so every generator's bands fit).
    seed : int
        Seed of the random generator; equal seeds give identical arrays.

    Returns
    -------
    ndarray
        float32, shape ``(n_samples,)``, RMS :data:`BACKGROUND_LEVEL_DBFS` (zeros for ``none``).

    Raises
    ------
    InputError
        For an unknown ``kind``, a negative length or a rate below 16000 Hz.
    """
    if kind not in BACKGROUND_KINDS:
        raise InputError(f"kind={kind!r} must be one of {', '.join(BACKGROUND_KINDS)}; pass one of those")
    if n_samples < 0:
        raise InputError(f"n_samples={n_samples} must not be negative; pass a length in samples")
    if sample_rate_hz < 16000:
        raise InputError(f"sample_rate_hz={sample_rate_hz} must be at least 16000; pass a higher rate")
    if kind == "none" or n_samples == 0:
        return np.zeros(n_samples, dtype=np.float32)
    rng = np.random.default_rng(seed)
    make = {"pink": _pink, "music": _music, "babble": _babble, "rain": _rain}[kind]
    x = make(n_samples, sample_rate_hz, rng).astype(np.float64)
    rms = np.sqrt(np.mean(x * x))
    return (x * (10.0 ** (BACKGROUND_LEVEL_DBFS / 20.0) / rms)).astype(np.float32)


def _pink(n: int, rate: int, rng: np.random.Generator) -> np.ndarray:
    """White noise shaped in the frequency domain to power ~ 1/f (amplitude ~ f^-1/2)."""
    n_fft = fft.next_fast_len(n, real=True)
    spec = fft.rfft(rng.standard_normal(n_fft, dtype=np.float32))
    f_hz = fft.rfftfreq(n_fft, 1.0 / rate).astype(np.float32)
    shape = 1.0 / np.sqrt(np.maximum(f_hz, np.float32(_PINK_FLOOR_HZ)))
    shape[0] = 0.0  # no DC
    return fft.irfft(spec * shape, n_fft)[:n]


def _tone(freq_hz: float, env: np.ndarray, rate: int, phases: np.ndarray) -> np.ndarray:
    """Harmonic tone (partials k*f at amplitude k^-1.2, below 0.45*rate) under an envelope.

    Partial k is the imaginary part of ``e^{i phi_k} z^k`` with ``z = e^{i 2 pi f t}``: one
    complex exponential per tone, the harmonics by repeated multiplication (cheaper than a sine each).
    """
    z = np.exp(2j * np.pi * freq_hz * (np.arange(env.size) / rate))
    zk = np.ones_like(z)
    acc = np.zeros_like(z)
    for k in range(1, _N_HARMONICS + 1):
        zk *= z
        if k * freq_hz < 0.45 * rate:
            acc += (k**-1.2 * np.exp(1j * phases[k - 1])) * zk
    return acc.imag * env


def _add_circular(buf: np.ndarray, start: int, x: np.ndarray) -> None:
    """Add ``x`` into ``buf`` from ``start`` on, wrapping round the end (``x`` shorter than ``buf``)."""
    idx = (start + np.arange(x.size)) % buf.size
    buf[idx] += x


def _music(n: int, rate: int, rng: np.random.Generator) -> np.ndarray:
    """The chord loop rendered once (circularly, so it repeats without a seam), then tiled."""
    beat = int(round(_BEAT_S * rate))
    chord_len = beat * _BEATS_PER_CHORD
    loop = np.zeros(chord_len * len(_CHORDS_MIDI))
    # Pad: each chord held under a raised-cosine window 1.5 chords long, so neighbours overlap.
    pad_env = np.sin(np.linspace(0.0, np.pi, int(1.5 * chord_len))) ** 2
    t_pluck = np.arange(int(2.0 * rate)) / rate
    pluck_env = np.minimum(t_pluck / 0.01, 1.0) * np.exp(-t_pluck / _PLUCK_DECAY_S)
    t_bass = np.arange(int(2.5 * rate)) / rate
    bass_env = np.minimum(t_bass / 0.02, 1.0) * np.exp(-t_bass / _BASS_DECAY_S)
    for c, chord in enumerate(_CHORDS_MIDI):
        start = c * chord_len
        for midi in chord:
            f_hz = 440.0 * 2.0 ** ((midi - 69) / 12.0)
            pad = _tone(f_hz, pad_env, rate, rng.uniform(0, 2 * np.pi, _N_HARMONICS))
            _add_circular(loop, start - chord_len // 4, 0.5 * pad)
            pluck = _tone(2.0 * f_hz, pluck_env, rate, rng.uniform(0, 2 * np.pi, _N_HARMONICS))
            for b in range(_BEATS_PER_CHORD):
                _add_circular(loop, start + b * beat, 0.35 * pluck)
        bass = _tone(440.0 * 2.0 ** ((chord[0] - 12 - 69) / 12.0), bass_env, rate, rng.uniform(0, 2 * np.pi, _N_HARMONICS))
        for b in (0, 2):
            _add_circular(loop, start + b * beat, bass)
    return np.resize(loop, n)


def _babble(n: int, rate: int, rng: np.random.Generator) -> np.ndarray:
    """Eight independent talkers, each a chain of random fixture lines with short random pauses."""
    lines = lines_at_rate(rate)
    out = np.zeros(n, dtype=np.float32)
    for _ in range(_BABBLE_TALKERS):
        pos = -int(rng.integers(0, lines[0].size))  # start each talker mid-line
        while pos < n:
            x = lines[int(rng.integers(len(lines)))]
            gain = np.float32(10.0 ** (rng.uniform(-4.0, 4.0) / 20.0))
            a, b = max(pos, 0), min(pos + x.size, n)
            if b > a:
                out[a:b] += gain * x[a - pos : b - pos]
            pos += x.size + int(rng.uniform(0.05, 0.6) * rate)
    sos = butter(4, _BABBLE_LOWPASS_HZ, btype="low", fs=rate, output="sos")
    return sosfilt(sos, out)


def _rain(n: int, rate: int, rng: np.random.Generator) -> np.ndarray:
    """Band-limited hiss plus droplet pings at Poisson times through two-pole resonators."""
    hi = min(_RAIN_BAND_HZ[1], 0.45 * rate)
    sos = butter(2, (_RAIN_BAND_HZ[0], hi), btype="band", fs=rate, output="sos")
    hiss = sosfilt(sos, rng.standard_normal(n))
    hiss /= np.sqrt(np.mean(hiss * hiss))
    drops = np.zeros(n)
    r = np.exp(-1.0 / (_DROP_DECAY_S * rate))  # pole radius giving the droplet's decay time
    for f_hz in _DROP_FREQS_HZ:
        impulses = np.zeros(n)
        k = rng.poisson(_DROPS_PER_S / len(_DROP_FREQS_HZ) * n / rate)
        impulses[rng.integers(0, n, size=k)] = rng.uniform(0.2, 1.0, size=k)
        w = 2.0 * np.pi * f_hz / rate
        drops += lfilter([1.0 - r], [1.0, -2.0 * r * np.cos(w), r * r], impulses)
    drops /= max(np.sqrt(np.mean(drops * drops)), 1e-12)
    return hiss + 0.5 * drops
