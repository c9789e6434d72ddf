"""DPM-Solver (Lu et al. 2022, "DPM-Solver: a fast ODE solver for diffusion probabilistic model
sampling in around 10 steps") and DPM-Solver++ (Lu et al. 2022b, "DPM-Solver++: fast solver for
guided sampling of diffusion probabilistic models").

Both integrate the probability-flow ODE exactly in its linear part, in the half log-SNR
λ = log(α/σ), and approximate the network term by a Taylor expansion in λ:

* DPM-Solver-k (single-step, noise prediction): each step from s to t (h = λ_t − λ_s) evaluates
  at s and at k − 1 intermediate points s_j with λ_{s_j} = λ_s + r_j·h (Alg. 1: r_1 = 1/2;
  Alg. 2: r_1 = 1/3, r_2 = 2/3). DPM-Solver-1 is DDIM (Lu et al. 2022, Sec. 4.1).
* DPM-Solver++(2M), (3M) (multistep, data prediction x̂_0): one evaluation per step, earlier
  x̂_0 reused (2M: Alg. 2 of Lu et al. 2022b; 3M: the third-order multistep update of the
  authors' reference implementation, recalled from memory). 2M starts with a first-order step.
  3M starts with one DPM-Solver++(2S) step (Lu et al. 2022b, Alg. 1; one extra evaluation)
  and one 2M step: a multistep
  method of order p needs starting values with local error O(h^p) (Hairer, Nørsett & Wanner,
  "Solving ODEs I", Sec. III.2); a first-order start, as in the reference implementation, would
  cap its global order at 2 (measured in tests/test_solvers.py). In the 3M update the term
  α_t·φ₃·D₂ needs D₂ ≈ h²·x̂_0'' (Taylor expansion of x̂_0 in λ, derived here): the divided
  differences give D₂ = 2·(D1₀ − D1₁)/(r₀ + r₁); with the factor 1 recalled from the reference
  implementation the measured order was 2, with 2 it is 3.

The last step, from the least noisy grid point to the clean signal (λ = ∞), is first order for
every solver here: x̂_0 of the last evaluation (the denoise-to-zero step, as DDIM's last step).
"""
from __future__ import annotations

import math
from typing import Any

from .levels import alpha_bar_of

# Intermediate points (fractions of the step in λ) of the single-step solvers (Lu et al. 2022,
# Alg. 1 and 2).
DPM2_R = 0.5
DPM3_R = (1.0 / 3.0, 2.0 / 3.0)


class DPMSolver:
    """DPM-Solver-``order``, single-step, order 1..3 (Lu et al. 2022, Eq. 3.7 and Alg. 1–2)."""

    def __init__(self, order: int) -> None:
        self.order = order

    def nfe(self, n: int) -> int:
        return self.order * (n - 1) + 1

    def run(self, w: Any, x: Any) -> Any:
        for i in range(w.n - 1):
            w.checkpoint(i, x)
            x = self.step(w, x, i, w.model(x, i))
        w.checkpoint(w.n - 1, x)
        return w.model(x, w.n - 1).x0

    def step(self, w: Any, x: Any, i: int, p: Any) -> Any:
        """Grid point ``i`` → ``i + 1``, given the evaluation ``p`` at ``i``."""
        ls = w.lam(i)
        h = w.lam(i + 1) - ls
        a_s, a_t, s_t = w.alpha(i), w.alpha(i + 1), w.sigma(i + 1)
        e_s = p.eps
        base = (a_t / a_s) * x - (s_t * math.expm1(h)) * e_s         # DPM-Solver-1 (= DDIM)
        if self.order == 1:
            return base

        def inner(r: float) -> tuple[float, Any]:
            ab = float(alpha_bar_of(ls + r * h))
            a, s = math.sqrt(ab), math.sqrt(1.0 - ab)
            return ab, (a / a_s) * x - (s * math.expm1(r * h)) * e_s

        if self.order == 2:
            ab1, u = inner(DPM2_R)
            d = w.model_at(u, ab1).eps - e_s
            return base - (s_t / (2 * DPM2_R) * math.expm1(h)) * d
        r1, r2 = DPM3_R
        ab1, u1 = inner(r1)
        d1 = w.model_at(u1, ab1).eps - e_s
        ab2, u2 = inner(r2)
        s2 = math.sqrt(1.0 - ab2)
        u2 = u2 - (s2 * r2 / r1 * (math.expm1(r2 * h) / (r2 * h) - 1.0)) * d1
        d2 = w.model_at(u2, ab2).eps - e_s
        return base - (s_t / r2 * (math.expm1(h) / h - 1.0)) * d2


class DPMSolverPP:
    """DPM-Solver++(``order``M), multistep with data prediction, order 2 or 3 (Lu et al. 2022b)."""

    def __init__(self, order: int) -> None:
        self.order = order

    def nfe(self, n: int) -> int:
        return n + 1 if self.order == 3 and n > 1 else n

    def run(self, w: Any, x: Any) -> Any:
        hist: list[tuple[float, Any]] = []           # (λ, x̂_0) of earlier evaluations
        for i in range(w.n - 1):
            w.checkpoint(i, x)
            ls = w.lam(i)
            p = w.model(x, i)
            hist = (hist + [(ls, p.x0)])[-self.order:]
            if self.order == 3 and i == 0:
                x = self.single_2s(w, x, i, hist[-1][1])
                continue
            h = w.lam(i + 1) - ls
            a_t = w.alpha(i + 1)
            phi1 = math.expm1(-h)
            m0 = hist[-1][1]
            x = (w.sigma(i + 1) / w.sigma(i)) * x - (a_t * phi1) * m0
            if len(hist) == 2:                          # 2M: D = (1 + 1/2r)·m0 − (1/2r)·m1
                (l1, m1), r0 = hist[0], (ls - hist[0][0]) / h
                x = x - (0.5 * a_t * phi1 / r0) * (m0 - m1)
            elif len(hist) == 3:
                (l2, m2), (l1, m1) = hist[0], hist[1]
                r0, r1 = (ls - l1) / h, (l1 - l2) / h
                d1_0, d1_1 = (1.0 / r0) * (m0 - m1), (1.0 / r1) * (m1 - m2)
                d1 = d1_0 + (r0 / (r0 + r1)) * (d1_0 - d1_1)
                d2 = (2.0 / (r0 + r1)) * (d1_0 - d1_1)        # ≈ h²·x̂_0'' (docstring)
                phi2 = phi1 / h + 1.0
                phi3 = phi2 / h - 0.5
                x = x + (a_t * phi2) * d1 - (a_t * phi3) * d2
        w.checkpoint(w.n - 1, x)
        return w.model(x, w.n - 1).x0

    @staticmethod
    def single_2s(w: Any, x: Any, i: int, m0: Any) -> Any:
        """DPM-Solver++(2S) step from grid point ``i`` (x̂_0 there: ``m0``) to ``i + 1``, with the
        intermediate point at the λ-midpoint (Lu et al. 2022b, Alg. 1, r = 1/2: D = x̂_0(u, s_1))."""
        ls = w.lam(i)
        h = w.lam(i + 1) - ls
        ab1 = float(alpha_bar_of(ls + DPM2_R * h))
        s_s = w.sigma(i)
        u = (math.sqrt(1.0 - ab1) / s_s) * x - (math.sqrt(ab1) * math.expm1(-DPM2_R * h)) * m0
        d = w.model_at(u, ab1).x0
        return (w.sigma(i + 1) / s_s) * x - (w.alpha(i + 1) * math.expm1(-h)) * d
