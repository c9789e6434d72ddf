"""Noise levels: ᾱ ↔ log-SNR, the denoiser's conditioning values, and the exact conversions
between the three things a denoiser may predict.

Conventions (Ho et al. 2020): ``x_t = α·x_0 + σ·ε`` with ``α = √ᾱ``, ``σ = √(1−ᾱ)``. The half
log-SNR ``λ = log(α/σ)`` is the time variable of DPM-Solver (Lu et al. 2022, Sec. 3.1).
"""
from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from ..errors import InputError
from ..schedules import NoiseSchedule

# What a denoiser's network output means: ε (Ho et al. 2020), x_0, or v = α·ε − σ·x_0 (Salimans &
# Ho 2022, "Progressive distillation", Sec. 4 and App. D).
PREDICTIONS = ("eps", "x0", "v")
COND_MODES = ("step", "level")
# A level counts as outside the training range only beyond this relative margin: the β ↔ ᾱ round
# trip of a schedule built from ᾱ (e.g. karras, logsnr) moves its ends by a few ulp.
RANGE_RTOL = 1e-12


def log_snr(alpha_bar: Any) -> Any:
    """λ = ½·log(ᾱ/(1−ᾱ)) (Lu et al. 2022, Sec. 3.1); ±inf at ᾱ = 1 and 0."""
    ab = np.asarray(alpha_bar, dtype=np.float64)
    with np.errstate(divide="ignore"):
        return 0.5 * (np.log(ab) - np.log1p(-ab))


def alpha_bar_of(lam: Any) -> Any:
    """Inverse of :func:`log_snr`: ᾱ = 1/(1 + e^{−2λ})."""
    return 0.5 * (1.0 + np.tanh(np.asarray(lam, dtype=np.float64)))


def fractional_steps(training: NoiseSchedule, alpha_bars: np.ndarray) -> tuple[np.ndarray, int]:
    """0-based fractional training step whose √ᾱ equals each given √ᾱ (linear interpolation)."""
    tr = np.sqrt(training.alpha_bars)[::-1]            # increasing
    idx = np.arange(len(training), dtype=np.float64)[::-1]
    q = np.sqrt(alpha_bars)
    clamped = int(np.sum((q < tr[0] * (1 - RANGE_RTOL)) | (q > tr[-1] * (1 + RANGE_RTOL))))
    return np.interp(q, tr, idx), clamped


def check_mode(mode: str) -> None:
    if mode not in COND_MODES:
        raise InputError("denoiser conditioning must be 'step' or 'level'", field="conditioning",
                         value=mode)


def cond_map(mode: str, training: NoiseSchedule | None) -> Callable[[np.ndarray], np.ndarray]:
    """ᾱ → conditioning value: √ᾱ (``level``) or the fractional training step (``step``)."""
    check_mode(mode)
    if mode == "level":
        return lambda ab: np.sqrt(np.asarray(ab, dtype=np.float64))
    if training is None:
        raise InputError("a step-conditioned denoiser must declare training_schedule",
                         field="training_schedule")
    return lambda ab: fractional_steps(training, np.asarray(ab, dtype=np.float64))[0]


def conditioning(schedule: NoiseSchedule, mode: str, training: NoiseSchedule | None) -> tuple[np.ndarray, int]:
    """Conditioning values at a schedule's own steps (training-step indices when it has them)."""
    check_mode(mode)
    if mode == "level":
        return schedule.noise_levels.copy(), 0
    if schedule.train_steps is not None:
        return schedule.train_steps.astype(np.float64), 0
    if training is None:
        raise InputError("a step-conditioned denoiser must declare training_schedule",
                         field="training_schedule")
    return fractional_steps(training, schedule.alpha_bars)


def check_prediction(kind: Any, source: str | None = None) -> str:
    if kind not in PREDICTIONS:
        raise InputError(f"prediction must be one of {', '.join(PREDICTIONS)}", source=source,
                         field="prediction", value=kind)
    return kind


class Pred:
    """One network output read as ε̂ or x̂_0, converted exactly from what the network predicts.

    With ``x = α·x_0 + σ·ε`` and ``v = α·ε − σ·x_0`` (Salimans & Ho 2022), α² + σ² = 1 gives
    ``ε = σ·x + α·v`` and ``x_0 = α·x − σ·v``; from x̂_0, ``ε = (x − α·x̂_0)/σ``; from ε̂,
    ``x_0 = (x − σ·ε̂)/α``. The declared quantity itself is returned untouched.
    """

    __slots__ = ("raw", "x", "a", "s", "kind", "_eps", "_x0")

    def __init__(self, raw: Any, x: Any, alpha_bar: float, kind: str) -> None:
        self.raw, self.x, self.kind = raw, x, kind
        self.a, self.s = math.sqrt(alpha_bar), math.sqrt(1.0 - alpha_bar)
        self._eps = raw if kind == "eps" else None
        self._x0 = raw if kind == "x0" else None

    @property
    def eps(self) -> Any:
        if self._eps is None:
            self._eps = ((self.x - self.a * self.raw) / self.s if self.kind == "x0"
                         else self.s * self.x + self.a * self.raw)
        return self._eps

    @property
    def x0(self) -> Any:
        if self._x0 is None:
            self._x0 = ((self.x - self.s * self.raw) / self.a if self.kind == "eps"
                        else self.a * self.x - self.s * self.raw)
        return self._x0
