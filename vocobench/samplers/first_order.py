"""First-order samplers written as per-step coefficients, ``x ← c_x·x − c_ε·ε̂ + σ·z``:

* DDPM ancestral sampling (Ho et al. 2020, Eq. 11, σ_t² = β̃_t), used with an inference schedule
  other than the training one as in few-step practice (Kong et al. 2021, DiffWave, Alg. 2).
* DDIM (Song et al. 2021, Eq. 12 and 16) with stochasticity η (η = 0: deterministic).
* The Gamma reverse process (Nachmani et al. 2021): DDPM's coefficients, with the Gaussian z
  replaced by standardised Gamma noise (see :mod:`.noise`).
"""
from __future__ import annotations

from typing import Any, Callable

import numpy as np

from ..schedules import NoiseSchedule

DDIM_ETA = 0.0          # Song et al. 2021, Eq. 16: η = 0 is the deterministic DDIM sampler


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


class LinearSolver:
    """Runs per-step coefficients ``(c_x, c_ε, σ)`` given by ``plan(schedule, **options)``; one
    network evaluation per step."""

    def __init__(self, plan: Callable[..., tuple[np.ndarray, np.ndarray, np.ndarray]],
                 **options: Any) -> None:
        self.plan, self.options = plan, options

    def with_options(self, **options: Any) -> "LinearSolver":
        return LinearSolver(self.plan, **options)

    def coefficients(self, schedule: NoiseSchedule) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self.plan(schedule, **self.options)

    @staticmethod
    def nfe(n: int) -> int:
        return n

    @staticmethod
    def run(w: Any, x: Any) -> Any:
        for i in range(w.n):
            w.checkpoint(i, x)
            c_x, c_eps, sigma = (float(c[i]) for c in w.coef)
            eps = w.model(x, i).eps
            x = c_x * x - c_eps * eps
            if sigma > 0:
                x = x + sigma * w.noise(i)
        return x
