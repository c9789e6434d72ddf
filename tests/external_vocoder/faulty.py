"""Vocoders and denoisers that each break one rule of the plug-in contract (for ``vocobench check``).

All run at 16 kHz with a small front-end; ``CorrectVocoder`` breaks nothing.
"""
from __future__ import annotations

import numpy as np

FRONTEND_16K = {"sample_rate": 16000, "n_fft": 512, "win_length": 512, "hop_length": 128,
                "n_mels": 40, "fmin": 0.0, "fmax": 8000.0}
HOP = 128


class CorrectVocoder:
    sample_rate = 16000
    frontend = FRONTEND_16K

    def __call__(self, features, schedule, rng):
        return (0.1 * rng.standard_normal(np.shape(features)[-1] * HOP)).astype(np.float32)


class WrongLengthVocoder(CorrectVocoder):
    """Returns half the expected number of samples."""

    def __call__(self, features, schedule, rng):
        y = super().__call__(features, schedule, rng)
        return y[: y.size // 2]


class EmptyVocoder(CorrectVocoder):
    """Returns no samples at all."""

    def __call__(self, features, schedule, rng):
        return np.zeros(0, dtype=np.float32)


class NaNVocoder(CorrectVocoder):
    """Every 50th sample is NaN."""

    def __call__(self, features, schedule, rng):
        y = super().__call__(features, schedule, rng)
        y[::50] = np.nan
        return y


class OwnSeedVocoder(CorrectVocoder):
    """Ignores the generator it is given and seeds its own."""

    def __call__(self, features, schedule, rng):
        return super().__call__(features, schedule, np.random.default_rng(1234))


class GlobalRandomVocoder(CorrectVocoder):
    """Draws from numpy's global random state, so a fixed seed does not fix the output."""

    def __call__(self, features, schedule, rng):
        return (0.1 * np.random.standard_normal(np.shape(features)[-1] * HOP)).astype(np.float32)


class RateMismatchVocoder(CorrectVocoder):
    """Declares 22.05 kHz but its front-end runs at 16 kHz."""

    sample_rate = 22050


class TwoDimensionalVocoder(CorrectVocoder):
    """Returns a (2, samples) array instead of a 1-D waveform."""

    def __call__(self, features, schedule, rng):
        y = super().__call__(features, schedule, rng)
        return np.stack([y, y])


class BatchMixingDenoiser:
    """Normalises by the whole batch's energy, so one item's ε̂ depends on the others."""

    sample_rate = 16000
    frontend = FRONTEND_16K
    conditioning = "level"
    training_schedule = None

    def predict_noise(self, x_t, features, t):
        x = np.asarray(x_t, dtype=np.float64)
        return (x / np.sqrt(np.mean(x ** 2))).astype(np.float32) * 0.5


class WrongShapeDenoiser(BatchMixingDenoiser):
    """Returns ε̂ with one sample fewer than x_t."""

    def predict_noise(self, x_t, features, t):
        return np.asarray(x_t)[:, :-1] * 0.5
