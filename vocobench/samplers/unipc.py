"""UniPC (Zhao et al. 2023, "UniPC: a unified predictor-corrector framework for fast sampling of
diffusion models"), data prediction, B(h) = e^{−h} − 1 (their "bh2" variant).

Each step predicts with UniP-p (a multistep update like DPM-Solver++, with coefficients ρ from the
linear system R·ρ = b of their Thm. 3.1 and Alg. 1; ρ = 1/2 for p = 2), evaluates the network at
the predicted point — the evaluation the next step needs anyway — and corrects the same step with
UniC-p (ρ from the full system; ρ = 1/2 for p = 1), which raises the order by one at no extra
evaluation. The step into the last grid point is not corrected (its correction would not reach the
output, x̂_0 of that last evaluation). Re-planning happens at the start of a step, after that
level's evaluation, so a re-plan point at the last level is not used. The ρ/R/b construction follows the authors' reference
implementation (recalled from memory).
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np

UNIPC_ORDER = 2     # Zhao et al. 2023: UniPC-2 (UniP-2 + UniC-2) with bh2, their default for images


class UniPC:
    """UniPC-``order``: UniP-``order`` predictor and UniC corrector, one evaluation per step."""

    def __init__(self, order: int = UNIPC_ORDER) -> None:
        self.order = order

    @staticmethod
    def nfe(n: int) -> int:
        return n

    def run(self, w: Any, x: Any) -> Any:
        w.checkpoint(0, x)
        hist: list[tuple[float, Any]] = [(w.lam(0), w.model(x, 0).x0)]    # (λ, x̂_0)
        for i in range(w.n - 1):
            if i:
                w.checkpoint(i, x)
            l0, m0 = hist[-1]
            h = w.lam(i + 1) - l0
            prev = hist[:-1][::-1]                                           # newest first
            rks = [(l - l0) / h for l, _ in prev]
            d1s = [(1.0 / r) * (m - m0) for r, (_, m) in zip(rks, prev)]
            rho_p, rho_c, b_h = _coefficients(rks, h)
            a_t = w.alpha(i + 1)
            base = (w.sigma(i + 1) / w.sigma(i)) * x - (a_t * b_h) * m0      # B(h) = φ₁ here
            x_p = base
            for r, d in zip(rho_p, d1s):
                x_p = x_p - (a_t * b_h * r) * d
            m_t = w.model(x_p, i + 1).x0
            if i + 1 < w.n - 1:                                             # UniC
                x = base - (a_t * b_h * rho_c[-1]) * (m_t - m0)
                for r, d in zip(rho_c[:-1], d1s):
                    x = x - (a_t * b_h * r) * d
            else:
                x = x_p
            hist = (hist + [(w.lam(i + 1), m_t)])[-self.order:]
        return hist[-1][1]


def _coefficients(rks: list[float], h: float) -> tuple[list[float], list[float], float]:
    """ρ of the predictor and of the corrector, and B(h), for the points ``rks`` (plus r = 1)."""
    p = len(rks) + 1
    hh = -h
    h_phi_1 = math.expm1(hh)
    b_h = h_phi_1
    h_phi_k, fact = h_phi_1 / hh - 1.0, 1.0
    r_all = np.array(rks + [1.0])
    R, b = [], []
    for j in range(1, p + 1):
        R.append(r_all ** (j - 1))
        b.append(h_phi_k * fact / b_h)
        fact *= j + 1
        h_phi_k = h_phi_k / hh - 1.0 / fact
    R_, b_ = np.array(R), np.array(b)
    rho_p = [] if p == 1 else [0.5] if p == 2 else list(np.linalg.solve(R_[:-1, :-1], b_[:-1]))
    rho_c = [0.5] if p == 1 else list(np.linalg.solve(R_, b_))
    return [float(v) for v in rho_p], [float(v) for v in rho_c], b_h
