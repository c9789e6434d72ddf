"""Two 24 kHz models a user might write against vocobench's plug-in contract (numpy + librosa only).

Front-end: 24 kHz, n_fft 1200 (50 ms), hop 300 (12.5 ms), 100 HTK mel bands without area
normalisation, magnitude spectrogram, log10 — a common 24 kHz vocoder set-up (common practice,
no source).
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

SAMPLE_RATE = 24000
N_FFT = 1200
HOP = 300
FRONTEND = {"sample_rate": SAMPLE_RATE, "n_fft": N_FFT, "win_length": N_FFT, "hop_length": HOP,
            "n_mels": 100, "fmin": 0.0, "fmax": 12000.0, "mel_scale": "htk", "mel_norm": None,
            "power": 1.0, "log": "log10", "floor": 1e-5, "floor_mode": "clamp", "center": True,
            "normalize": None}


@lru_cache(maxsize=1)
def _mel_basis() -> np.ndarray:
    import librosa

    return librosa.filters.mel(sr=SAMPLE_RATE, n_fft=N_FFT, n_mels=FRONTEND["n_mels"],
                               fmin=FRONTEND["fmin"], fmax=FRONTEND["fmax"], htk=True, norm=None)


def target_magnitude(features: np.ndarray) -> np.ndarray:
    """STFT magnitude ``(..., n_fft/2+1, frames)`` spread back from log10-mel ``(..., n_mels, frames)``.

    Each band's magnitude is shared evenly over the bins its triangle covers (a smooth
    pseudo-inverse of the mel filterbank).
    """
    m = _mel_basis()
    density = np.power(10.0, np.asarray(features, dtype=np.float64)) / m.sum(axis=1)[:, None]
    spread = np.einsum("jf,...jt->...ft", m, density)
    return spread / np.maximum(m.sum(axis=0), 1e-12)[:, None]


class ShapedNoiseVocoder:
    """End-to-end vocoder with its own loop: noise → repeated magnitude projections.

    Each step takes the STFT of the current signal, keeps its phase and imposes the target
    magnitude (one Griffin–Lim iteration; Griffin & Lim 1984), so more steps give a more consistent
    spectrogram. Sampler ``gl-noise`` re-injects noise after each step with the remaining noise
    level √(1−ᾱ) of the schedule; ``gl`` does not.
    """

    sample_rate = SAMPLE_RATE
    frontend = FRONTEND
    samplers = ("gl", "gl-noise")
    version = "shaped-noise-1"

    def __call__(self, features: np.ndarray, schedule, rng: np.random.Generator,
                 sampler: str = "gl-noise") -> np.ndarray:
        import librosa

        feats = np.asarray(features)
        frames = feats.shape[-1]
        length = frames * HOP
        mag = target_magnitude(feats)
        ab = np.asarray(schedule.alpha_bars, dtype=np.float64)
        ab_prev = np.concatenate([[1.0], ab[:-1]])
        x = rng.standard_normal(length)
        for n in range(len(ab) - 1, -1, -1):
            spec = librosa.stft(x, n_fft=N_FFT, hop_length=HOP, window="hann", center=True)[:, :frames]
            spec = mag * np.exp(1j * np.angle(spec))
            x = librosa.istft(spec, hop_length=HOP, n_fft=N_FFT, window="hann", center=True,
                              length=length)
            if sampler == "gl-noise" and n > 0:
                x = x + np.sqrt(1 - ab_prev[n]) * np.std(x) * rng.standard_normal(length)
        return x.astype(np.float32)


class FrameGainDenoiser:
    """Noise predictor: exact MMSE ε̂ under a white Gaussian prior per frame (a Wiener gain).

    With x_t = √ᾱ·x_0 + √(1−ᾱ)·ε and x_0 ~ N(0, v) per sample, E[ε | x_t] = √(1−ᾱ)·x_t / (ᾱv + 1−ᾱ);
    v per frame comes from the mel energy by Parseval's relation for the Hann window.
    """

    sample_rate = SAMPLE_RATE
    frontend = FRONTEND
    conditioning = "level"
    training_schedule = [float(b) for b in np.linspace(1e-4, 0.05, 50)]   # a plain β list
    version = "frame-gain-1"

    def __init__(self) -> None:
        self._win_power = float(np.sum(np.hanning(N_FFT + 1)[:-1] ** 2))

    def frame_variance(self, features: np.ndarray) -> np.ndarray:
        mag = target_magnitude(features)                       # (..., bins, frames)
        return np.mean(mag ** 2, axis=-2) / self._win_power      # E|X_f|² = v·Σw²

    def predict_noise(self, x_t: np.ndarray, features: np.ndarray, t: np.ndarray) -> np.ndarray:
        x = np.asarray(x_t, dtype=np.float64)
        v = np.repeat(self.frame_variance(features), HOP, axis=-1)[..., : x.shape[-1]]
        ab = np.asarray(t, dtype=np.float64)[:, None] ** 2
        return (np.sqrt(1 - ab) * x / (ab * v + 1 - ab)).astype(np.float32)
