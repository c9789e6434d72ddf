"""Built-in samplers that turn a noise-predicting denoiser into a vocoder.

Every sampler here is the same loop, ``x ← c_x·x − c_ε·ε̂(x, c, t) + σ·z``, with per-step
coefficients from the inference schedule:

* DDPM ancestral sampling (Ho et al. 2020, Eq. 11, σ_t² = β̃_t), used with an inference schedule
  other than the training one as in few-step practice (Kong et al. 2021, DiffWave, Alg. 2).
* DDIM (Song et al. 2021, Eq. 12 and 16) with stochasticity η (η = 0: deterministic).

Each inference noise level is mapped to a fractional training step by linear interpolation on
√ᾱ of the training schedule (Kong et al. 2021, fast sampling), or passed as the continuous noise
level √ᾱ to denoisers conditioned on it (Chen et al. 2021, WaveGrad).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from .arrays import to_numpy
from .errors import InputError
from .params import Param, Real, Table
from .schedules import NoiseSchedule

DDIM_ETA = 0.0          # Song et al. 2021, Eq. 16: η = 0 is the deterministic DDIM sampler


@dataclass(frozen=True)
class StepPlan:
    """Per-step coefficients, ordered from the noisiest step (n = N) to the last (n = 1)."""

    c_x: np.ndarray
    c_eps: np.ndarray
    sigma: np.ndarray
    cond: np.ndarray        # fractional training step or noise level fed to the denoiser
    clamped: int            # inference levels outside the training range (clamped)

    @property
    def nfe(self) -> int:
        return len(self.c_x)


def fractional_steps(training: NoiseSchedule, alpha_bars: np.ndarray) -> tuple[np.ndarray, int]:
    """0-based fractional training step whose √ᾱ equals each given √ᾱ (linear interpolation)."""
    tr = np.sqrt(training.alpha_bars)[::-1]            # increasing
    idx = np.arange(len(training), dtype=np.float64)[::-1]
    q = np.sqrt(alpha_bars)
    clamped = int(np.sum((q < tr[0]) | (q > tr[-1])))
    return np.interp(q, tr, idx), clamped


def conditioning(schedule: NoiseSchedule, mode: str, training: NoiseSchedule | None) -> tuple[np.ndarray, int]:
    if mode == "level":
        return schedule.noise_levels.copy(), 0
    if mode != "step":
        raise InputError("denoiser conditioning must be 'step' or 'level'", field="conditioning",
                         value=mode)
    if schedule.train_steps is not None:
        return schedule.train_steps.astype(np.float64), 0
    if training is None:
        raise InputError("a step-conditioned denoiser must declare training_schedule",
                         field="training_schedule")
    return fractional_steps(training, schedule.alpha_bars)


def ddpm_plan(schedule: NoiseSchedule) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    b, a, ab = schedule.betas, schedule.alphas, schedule.alpha_bars
    ab_prev = np.concatenate([[1.0], ab[:-1]])
    c_x = 1 / np.sqrt(a)
    c_eps = b / (np.sqrt(a) * np.sqrt(1 - ab))
    sigma = np.sqrt((1 - ab_prev) / (1 - ab) * b)      # β̃_t; zero at t = 1
    return c_x, c_eps, sigma


def ddim_plan(schedule: NoiseSchedule, eta: float = DDIM_ETA) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    ab = schedule.alpha_bars
    ab_prev = np.concatenate([[1.0], ab[:-1]])
    sigma = eta * np.sqrt((1 - ab_prev) / (1 - ab)) * np.sqrt(1 - ab / ab_prev)
    c_x = np.sqrt(ab_prev / ab)
    c_eps = c_x * np.sqrt(1 - ab) - np.sqrt(np.maximum(1 - ab_prev - sigma ** 2, 0.0))
    return c_x, c_eps, sigma


PLANS: dict[str, Callable[..., tuple[np.ndarray, np.ndarray, np.ndarray]]] = {
    "ddpm": ddpm_plan, "ddim": ddim_plan,
}
# Options of each built-in sampler, from a config's [sampler_options.<name>] table.
SAMPLER_OPTIONS: dict[str, Table] = {
    "ddpm": Table("sampler_options.ddpm", [], entry="option",
                  doc="DDPM ancestral sampling (Ho et al. 2020)."),
    "ddim": Table("sampler_options.ddim", [
        Param("eta", Real(low=0, keep_int=True), DDIM_ETA,
              "stochasticity η (0: deterministic; 1: DDPM-like noise, Song et al. 2021 Eq. 16)"),
    ], entry="option", doc="DDIM (Song et al. 2021)."),
}


def available_samplers() -> list[str]:
    return sorted(PLANS)


def make_plan(sampler: str, schedule: NoiseSchedule, cond_mode: str,
              training: NoiseSchedule | None, options: Mapping[str, Any] | None = None) -> StepPlan:
    if sampler not in PLANS:
        raise InputError(f"unknown sampler; valid: {', '.join(available_samplers())}",
                         field="sweep.samplers", value=sampler)
    opts = SAMPLER_OPTIONS[sampler].parse(options or {})
    c_x, c_eps, sigma = PLANS[sampler](schedule, **opts)
    cond, clamped = conditioning(schedule, cond_mode, training)
    r = slice(None, None, -1)                           # run from step N down to 1
    return StepPlan(c_x[r], c_eps[r], sigma[r], cond[r], clamped)


def run_plan(plan: StepPlan, predict: Callable[[np.ndarray, np.ndarray, np.ndarray], Any],
             features: np.ndarray, n_samples: int, rng: np.random.Generator,
             dtype: type = np.float32) -> np.ndarray:
    """Sample a batch: ``features`` is ``(B, n_mels, frames)``; returns ``(B, n_samples)``.

    ``predict(x_t, features, t)`` returns ε̂ with the shape of ``x_t``. Noise is drawn from ``rng``
    in a fixed order (x_N, then each stochastic step), so one seed gives bit-identical output.
    """
    feats = np.asarray(features, dtype=dtype)
    batch = feats.shape[0]
    x = rng.standard_normal((batch, n_samples))
    for n in range(plan.nfe):
        t = np.full(batch, plan.cond[n], dtype=np.float64)
        eps = to_numpy(predict(x.astype(dtype), feats, t)).astype(np.float64)
        if eps.shape != x.shape:
            raise ValueError(f"predict_noise returned shape {eps.shape}, expected {x.shape}")
        x = plan.c_x[n] * x - plan.c_eps[n] * eps
        if plan.sigma[n] > 0:
            x = x + plan.sigma[n] * rng.standard_normal(x.shape)
    return x
