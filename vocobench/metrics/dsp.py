"""Small signal helpers shared by the metrics: framing, frame energy, STFT, resampling."""
from __future__ import annotations

import functools
import math
from math import gcd

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import MetricUnavailable

RESAMPLERS = ("soxr_vhq", "resample_poly")
ENERGY_FLOOR = 1e-20          # keeps log10(0) out of frame energies


def nearest_pow2(n: float) -> int:
    """Power of two nearest to ``n`` on a log scale (e.g. 551 -> 512, 1102 -> 1024)."""
    return int(2 ** round(math.log2(max(n, 1.0))))


def ms_to_samples(ms: float, sr: int) -> int:
    return max(1, int(round(ms * sr / 1000.0)))


def frame_signal(x: np.ndarray, frame_length: int, hop_length: int) -> np.ndarray:
    """Frames starting at 0, hop, 2·hop, … that fit entirely in ``x`` (no padding): (F, L) view."""
    if x.size < frame_length:
        raise MetricUnavailable(f"signal is shorter ({x.size} samples) than one analysis "
                                f"frame ({frame_length})")
    return sliding_window_view(x, frame_length)[::hop_length]


def frame_energy_db(frames: np.ndarray) -> np.ndarray:
    """10·log10 of the sum of squares of each (unwindowed) frame."""
    f = np.asarray(frames, dtype=np.float64)
    return 10.0 * np.log10(np.einsum("fl,fl->f", f, f) + ENERGY_FLOOR)


@functools.lru_cache(maxsize=32)
def mel_filterbank(sr: int, n_fft: int, n_mels: int, fmin: float = 0.0,
                   fmax: float | None = None) -> np.ndarray:
    """``librosa.filters.mel`` (Slaney mel, Slaney area norm, float32; computed by
    :func:`vocobench.metrics.melbank.mel` without importing librosa), built once per argument
    set; (n_mels, n_fft//2 + 1), read-only."""
    from .melbank import mel

    fb = mel(sr, n_fft, n_mels, fmin, fmax)
    fb.setflags(write=False)
    return fb


def stft_power(x: np.ndarray, n_fft: int, hop_length: int, win_length: int | None = None,
               window: str = "hann") -> np.ndarray:
    """|STFT|² as (frames, n_fft//2 + 1), centred frames with reflect padding (as torch.stft /
    librosa's center=True); the window is zero-padded to ``n_fft`` symmetrically."""
    from scipy.signal import get_window

    win_length = win_length or n_fft
    pad = n_fft // 2
    x = np.asarray(x, dtype=np.float64)
    if x.size <= pad:
        raise MetricUnavailable(f"signal is too short ({x.size} samples) for an STFT of {n_fft}")
    xp = np.pad(x, pad, mode="reflect")
    w = get_window(window, win_length, fftbins=True)
    left = (n_fft - win_length) // 2
    w = np.pad(w, (left, n_fft - win_length - left))
    frames = sliding_window_view(xp, n_fft)[::hop_length]
    spec = np.fft.rfft(frames * w, axis=-1)
    return spec.real ** 2 + spec.imag ** 2


def resample(x: np.ndarray, sr_in: int, sr_out: int, method: str = "soxr_vhq") -> np.ndarray:
    """Resample with libsoxr's very-high-quality preset or scipy's polyphase filter (Kaiser β=5,
    scipy's default). Returns float64."""
    x = np.asarray(x, dtype=np.float64)
    if sr_in == sr_out:
        return x
    if method == "soxr_vhq":
        import soxr

        return soxr.resample(x, sr_in, sr_out, quality="VHQ")
    if method == "resample_poly":
        from scipy.signal import resample_poly

        g = gcd(int(sr_in), int(sr_out))
        return resample_poly(x, sr_out // g, sr_in // g)
    raise ValueError(f"unknown resampler {method!r}")
