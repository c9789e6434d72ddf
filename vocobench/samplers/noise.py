"""Noise laws of the forward process: Gaussian (Ho et al. 2020) or Gamma (Nachmani et al. 2021).

Gamma diffusion ("Denoising Diffusion Gamma Models", Nachmani, San-Roman & Wolf 2021, Sec. 3;
recalled from memory, not re-checked against the paper): step t adds centred Gamma noise,

    x_t = √(1−β_t)·x_{t−1} + (g_t − k_t·θ_t),   g_t ~ Γ(k_t, θ_t),  θ_t = √ᾱ_t·θ_0,  k_t = β_t/(ᾱ_t·θ_0²),

so each step's noise has variance k_t·θ_t² = β_t, as in the Gaussian case. Scaled Gammas with a
common scale add up (√(ᾱ_t/ᾱ_s)·θ_s = θ_t), which gives the closed form

    x_t = √ᾱ_t·x_0 + (ḡ_t − k̄_t·θ_t),   ḡ_t ~ Γ(k̄_t, θ_t),  k̄_t = Σ_{s≤t} k_s = (1−ᾱ_t)/(ᾱ_t·θ_0²)

(the sum telescopes: β_s/ᾱ_s = 1/ᾱ_s − 1/ᾱ_{s−1}). The network predicts the standardised noise
ε = (ḡ_t − k̄_t·θ_t)/√(1−ᾱ_t) (zero mean, unit variance) exactly as a Gaussian model predicts ε.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..params import is_number

LAWS = ("gaussian", "gamma")


@dataclass(frozen=True)
class NoiseLaw:
    """``gaussian``, or ``gamma`` with its scale parameter θ_0 (Nachmani et al. 2021)."""

    kind: str = "gaussian"
    theta0: float | None = None

    @property
    def gamma(self) -> bool:
        return self.kind == "gamma"

    def describe(self) -> dict[str, Any]:
        return {"kind": self.kind, **({"theta0": self.theta0} if self.gamma else {})}

    def total_shape(self, alpha_bar: float) -> float:
        """k̄ = (1−ᾱ)/(ᾱ·θ_0²): shape of the Gamma noise accumulated up to level ᾱ."""
        return (1.0 - alpha_bar) / (alpha_bar * self.theta0 ** 2)   # type: ignore[operator]

    def step_shape(self, beta: float, alpha_bar: float) -> float:
        """k_t = β_t/(ᾱ_t·θ_0²): shape of one forward step's noise."""
        return beta / (alpha_bar * self.theta0 ** 2)                # type: ignore[operator]

    def scale(self, alpha_bar: float) -> float:
        """θ_t = √ᾱ_t·θ_0."""
        return math.sqrt(alpha_bar) * self.theta0                   # type: ignore[operator]


GAUSSIAN = NoiseLaw()


def parse_law(kind: Any = "gaussian", theta0: Any = None, source: str | None = None) -> NoiseLaw:
    """A denoiser's declared ``noise_law`` (and ``gamma_theta0`` for Gamma noise), checked."""
    kind = "gaussian" if kind is None else kind
    if kind not in LAWS:
        raise InputError(f"noise_law must be one of {', '.join(LAWS)}", source=source,
                         field="noise_law", value=kind)
    if kind == "gaussian":
        if theta0 is not None:
            raise InputError("gamma_theta0 is given but noise_law is 'gaussian'", source=source,
                             field="gamma_theta0", value=theta0)
        return GAUSSIAN
    if not is_number(theta0) or not (0 < theta0 < math.inf):
        raise InputError("a Gamma-noise denoiser must declare gamma_theta0, a positive number "
                         "(θ_0 of Nachmani et al. 2021)", source=source, field="gamma_theta0",
                         value=theta0)
    return NoiseLaw("gamma", float(theta0))


def standardised(g: Any, shape: float) -> Any:
    """(g − k)/√k for g ~ Γ(k, 1): zero mean, unit variance."""
    return (g - shape) / math.sqrt(shape)


# -- the forward process (reference for tests and for training code) ------------------------
def forward_step(x_prev: np.ndarray, beta: float, alpha_bar: float, law: NoiseLaw,
                 rng: np.random.Generator) -> np.ndarray:
    """One forward step x_{t−1} → x_t with ``ᾱ_t = alpha_bar`` (module docstring)."""
    k, theta = law.step_shape(beta, alpha_bar), law.scale(alpha_bar)
    return math.sqrt(1.0 - beta) * x_prev + (rng.gamma(k, theta, np.shape(x_prev)) - k * theta)


def forward(x0: np.ndarray, alpha_bar: float, law: NoiseLaw, rng: np.random.Generator) -> np.ndarray:
    """x_0 → x_t in one draw (the closed form of the module docstring)."""
    k, theta = law.total_shape(alpha_bar), law.scale(alpha_bar)
    return math.sqrt(alpha_bar) * x0 + (rng.gamma(k, theta, np.shape(x0)) - k * theta)


# -- one generator per batch item ----------------------------------------------------------------
def item_generators(rng: Any, batch: int) -> list[np.random.Generator] | None:
    """``rng`` as one Generator per batch item (a list or tuple of ``batch`` Generators), or
    ``None`` when it is one Generator (or Generator-like object) for the whole batch. With one Generator per item, an item's draws are
    those it gets alone (``standard_normal((1, n))`` fills the same stream as ``standard_normal(n)``),
    so batched synthesis gives bit-identical audio whatever the batch size."""
    if not isinstance(rng, (list, tuple)):
        return None
    gens = list(rng)
    if len(gens) != batch or not all(isinstance(g, np.random.Generator) for g in gens):
        raise ValueError(f"need one numpy Generator per batch item ({batch}), got {len(gens)}")
    return gens


def normal_draws(rng: Any, shape: tuple[int, int]) -> np.ndarray:
    """Standard normal ``(batch, n)``: from one Generator, or row b from the b-th item's own."""
    gens = item_generators(rng, shape[0])
    if gens is None:
        return rng.standard_normal(shape)
    return np.stack([g.standard_normal(shape[1]) for g in gens])


def gamma_draws(rng: Any, k: float, shape: tuple[int, int]) -> np.ndarray:
    """Standardised Gamma(k) ``(batch, n)``, drawn like :func:`normal_draws`."""
    gens = item_generators(rng, shape[0])
    if gens is None:
        return standardised(rng.gamma(k, 1.0, shape), k)
    return standardised(np.stack([g.gamma(k, 1.0, shape[1]) for g in gens]), k)


def rng_of_item(rng: Any, b: int) -> Any:
    """Item ``b``'s generator when there is one per item, else the shared one."""
    return rng[b] if isinstance(rng, (list, tuple)) else rng
