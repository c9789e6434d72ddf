"""Gaussian data with a known covariance, where everything a sampler approximates is closed-form.

For x_0 ~ N(0, Σ) and x_t = √ᾱ·x_0 + √(1−ᾱ)·ε, (x_0, ε, x_t) are jointly Gaussian with
Cov(x_t) = C(ᾱ) = ᾱΣ + (1−ᾱ)I, Cov(ε, x_t) = √(1−ᾱ)·I and Cov(x_0, x_t) = √ᾱ·Σ, so the conditional
means (any multivariate statistics text) are

    E[ε | x_t] = √(1−ᾱ)·C⁻¹x_t,    E[x_0 | x_t] = √ᾱ·Σ·C⁻¹x_t.

The probability-flow ODE (Song et al. 2021, "Score-based generative modeling through SDEs",
Eq. 13) is linear here and carries N(0, C(ᾱ)) to N(0, C(ᾱ')): in Σ's eigenbasis each coordinate
is scaled by the ratio of the two standard deviations, √((ᾱ's + 1 − ᾱ')/(ᾱs + 1 − ᾱ)).
"""
from __future__ import annotations

import math

import numpy as np

D = 8
_rng = np.random.default_rng(20240601)
U, _ = np.linalg.qr(_rng.standard_normal((D, D)))
LAMBDAS = np.geomspace(0.05, 4.0, D)          # eigenvalues spread over two decades
SIGMA = U @ np.diag(LAMBDAS) @ U.T


def _cov_inv(ab: float) -> np.ndarray:
    return np.linalg.inv(ab * SIGMA + (1 - ab) * np.eye(D))


def eps_matrix(ab: float) -> np.ndarray:
    return math.sqrt(1 - ab) * _cov_inv(ab)


def x0_matrix(ab: float) -> np.ndarray:
    return math.sqrt(ab) * SIGMA @ _cov_inv(ab)


def predictor(kind: str = "eps"):
    """Exact predictor of ε, x_0 or v = √ᾱ·ε − √(1−ᾱ)·x_0 (Salimans & Ho 2022) for N(0, Σ) data;
    ``t`` is the noise level √ᾱ (conditioning "level")."""

    def predict(x_t: np.ndarray, features: np.ndarray, t: np.ndarray) -> np.ndarray:
        assert np.all(t == t[0])
        ab = float(t[0]) ** 2
        x = np.asarray(x_t, dtype=np.float64).T
        if kind == "eps":
            m = eps_matrix(ab)
        elif kind == "x0":
            m = x0_matrix(ab)
        else:
            m = math.sqrt(ab) * eps_matrix(ab) - math.sqrt(1 - ab) * x0_matrix(ab)
        return (m @ x).T

    return predict


gaussian_denoiser = predictor("eps")


def flow(x: np.ndarray, ab_from: float, ab_to: float) -> np.ndarray:
    """Exact probability-flow ODE map from level ᾱ to level ᾱ' (module docstring)."""
    scale = np.sqrt((ab_to * LAMBDAS + 1 - ab_to) / (ab_from * LAMBDAS + 1 - ab_from))
    return ((x @ U) * scale) @ U.T


def denoise(x: np.ndarray, ab: float) -> np.ndarray:
    """E[x_0 | x_t] (module docstring)."""
    return (x0_matrix(ab) @ x.T).T


class FirstDraw:
    """A generator stand-in whose first ``standard_normal`` draw (x_N) is fixed."""

    def __init__(self, first: np.ndarray, seed: int = 0) -> None:
        self.first, self.calls, self.rng = first, 0, np.random.default_rng(seed)

    def standard_normal(self, shape):
        self.calls += 1
        return self.first.copy() if self.calls == 1 else self.rng.standard_normal(shape)

    def gamma(self, k, scale, shape):
        return self.rng.gamma(k, scale, shape)
