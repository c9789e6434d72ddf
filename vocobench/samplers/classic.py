"""Heun's second-order method in the EDM formulation (Karras et al. 2022, "Elucidating the design
space of diffusion-based generative models", Alg. 1 with S_churn = 0) and the pseudo numerical
methods PNDM/PLMS (Liu et al. 2022, "Pseudo numerical methods for diffusion models on manifolds").

Heun: with x̃ = x/α and σ̃ = σ/α (Karras et al. 2022, Sec. 4: the VP process rescaled to their
σ(t) = t form) the probability-flow ODE is dx̃/dσ̃ = ε̂(x, σ̃). Each step is an Euler step and,
unless it lands on σ̃ = 0, a trapezoidal correction with a second evaluation: 2 evaluations per
step, 1 on the last. Their time discretisation (Eq. 5, ρ = 7) is the ``karras`` schedule kind.

PNDM/PLMS: the "transfer part" φ(x, ε, s → t) is the DDIM step written as in Liu et al. 2022
(Sec. 3.3), and the "gradient part" ε' combines noise predictions: PLMS by the 4-step
Adams–Bashforth weights (55, −59, 37, −9)/24 on the last four ε̂, PNDM (their F-PNDM) starting with
three pseudo Runge–Kutta steps (ε' = (e₁ + 2e₂ + 2e₃ + e₄)/6, 4 evaluations each, half step at the
midpoint). The half step is taken at the log-SNR midpoint (our choice: the paper halves its discrete
time step). PLMS warms up with the 1-, 2- and 3-step Adams–Bashforth weights instead.
"""
from __future__ import annotations

import math
from typing import Any

from .levels import alpha_bar_of

# Adams–Bashforth weights, newest first (any numerical-analysis text, e.g. Hairer, Nørsett &
# Wanner, "Solving ODEs I", Sec. III.1); the 4-step ones are Liu et al. 2022's PLMS.
ADAMS_BASHFORTH = {1: (1.0,), 2: (3 / 2, -1 / 2), 3: (23 / 12, -16 / 12, 5 / 12),
                   4: (55 / 24, -59 / 24, 37 / 24, -9 / 24)}
PRK_STEPS = 3           # Liu et al. 2022: F-PNDM starts with three pseudo Runge–Kutta steps
PRK_WEIGHTS = (1 / 6, 2 / 6, 2 / 6, 1 / 6)


class Heun:
    """Heun's method in x̃ = x/α, σ̃ = σ/α (Karras et al. 2022, Alg. 1)."""

    @staticmethod
    def nfe(n: int) -> int:
        return 2 * n - 1

    @staticmethod
    def run(w: Any, x: Any) -> Any:
        for i in range(w.n):
            w.checkpoint(i, x)
            p = w.model(x, i)
            if i == w.n - 1:
                return p.x0                                  # Euler step to σ̃ = 0
            a_s, a_t = w.alpha(i), w.alpha(i + 1)
            dt = w.sigma(i + 1) / a_t - w.sigma(i) / a_s      # σ̃_{i+1} − σ̃_i
            x_s = (1.0 / a_s) * x
            d = p.eps
            d2 = w.model(a_t * (x_s + dt * d), i + 1).eps
            x = a_t * (x_s + (0.5 * dt) * (d + d2))
        return x


def transfer(x: Any, eps: Any, ab_s: float, ab_t: float) -> Any:
    """φ: the DDIM step from ᾱ_s to ᾱ_t (Liu et al. 2022, Sec. 3.3, their form)."""
    c = (ab_t - ab_s) / (math.sqrt(ab_s) * (math.sqrt((1 - ab_t) * ab_s) + math.sqrt((1 - ab_s) * ab_t)))
    return math.sqrt(ab_t / ab_s) * x - c * eps


class PseudoLinearMultistep:
    """PLMS; with ``prk`` the first steps are pseudo Runge–Kutta (PNDM)."""

    def __init__(self, prk: bool) -> None:
        self.prk = prk

    def nfe(self, n: int) -> int:
        return n + 3 * min(PRK_STEPS, n - 1) if self.prk else n

    def run(self, w: Any, x: Any) -> Any:
        hist: list[Any] = []                                  # ε̂ at earlier grid points
        for i in range(w.n):
            w.checkpoint(i, x)
            ab_s, ab_t = w.level(i), w.level(i + 1)
            e1 = w.model(x, i).eps
            if self.prk and i < min(PRK_STEPS, w.n - 1):
                ab_m = float(alpha_bar_of(0.5 * (w.lam(i) + w.lam(i + 1))))
                e2 = w.model_at(transfer(x, e1, ab_s, ab_m), ab_m).eps
                e3 = w.model_at(transfer(x, e2, ab_s, ab_m), ab_m).eps
                e4 = w.model(transfer(x, e3, ab_s, ab_t), i + 1).eps
                es = (e1, e2, e3, e4)
                weights = PRK_WEIGHTS
            else:
                es = (e1, *hist[::-1])
                weights = ADAMS_BASHFORTH[min(len(es), 4)]
            e = weights[0] * es[0]
            for c, ek in zip(weights[1:], es[1:]):
                e = e + c * ek
            hist = (hist + [e1])[-3:]
            x = transfer(x, e, ab_s, ab_t)
        return x
