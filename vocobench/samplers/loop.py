"""The sampling loop every sampler shares, on numpy and on torch alike.

A :class:`StepPlan` holds a sampler's update rule (its *solver*) and the grid of noise levels it
walks, noisiest first. :func:`execute` runs it against an :class:`Env`, which is all that differs
between array libraries: how the denoiser is called, and how noise is drawn. Solvers touch the
state only with ``+``, ``−`` and products with Python floats (operators of the array API
standard), so the one implementation of each sampler runs on numpy (:func:`run_plan`) and on the
device (``TorchDenoiser.sample``).

Adaptive schedules (San-Roman et al. 2021, "Noise estimation for generative diffusion models"):
at the chosen points the denoiser's ``estimate_noise_level`` gives ᾱ̂ of the current state; the
current level becomes ᾱ̂ and the remaining levels are re-spaced in log-SNR between it and the
schedule's last level, keeping their relative positions (our re-planning rule; the paper re-fits
its schedule from the estimate).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from ..arrays import to_numpy
from ..errors import InputError
from ..schedules import NoiseSchedule
from .levels import Pred, alpha_bar_of, log_snr
from .noise import GAUSSIAN, NoiseLaw, gamma_draws, normal_draws, rng_of_item

# Smallest log-SNR gap kept between levels when a re-plan moves them (our choice: keeps every step
# of positive length so that step-size ratios stay finite).
MIN_LOG_SNR_GAP = 1e-3


@dataclass(frozen=True)
class StepPlan:
    """A sampler run: per-step coefficients (first-order samplers only), conditioning values and
    ᾱ of the grid, all ordered from the noisiest step to the last; the solver; the denoiser's
    prediction kind and noise law; and the re-planning points (fractions of the steps)."""

    c_x: np.ndarray
    c_eps: np.ndarray
    sigma: np.ndarray
    cond: np.ndarray                # fractional training step or noise level fed to the denoiser
    clamped: int                    # inference levels outside the training range (clamped)
    sampler: str = "ddpm"
    alpha_bars: np.ndarray = field(default_factory=lambda: np.zeros(0))
    solver: Any = None
    prediction: str = "eps"
    law: NoiseLaw = GAUSSIAN
    cond_of: Callable[[np.ndarray], np.ndarray] | None = None    # ᾱ → conditioning value
    replan_at: tuple[float, ...] = ()

    @property
    def nfe(self) -> int:
        return self.solver.nfe(len(self.cond))

    @property
    def adaptive(self) -> bool:
        return bool(self.replan_at)

    def replan_steps(self) -> set[int]:
        """Grid points (0 = noisiest) before whose evaluation the schedule is re-planned."""
        n = len(self.cond)
        return {min(max(int(round(f * n)), 1), n - 1) for f in self.replan_at} if n > 1 else set()


@dataclass
class Env:
    """What a loop supplies: the denoiser call, noise draws and (for adaptive plans) the estimator.

    ``call(x, c)``: the network output for state ``x`` at conditioning value ``c``, in the state's
    dtype; ``normal()``: a standard normal draw shaped like the state; ``gamma(k)``: a standardised
    Gamma draw (g − k)/√k, g ~ Γ(k, 1), shaped like the state (standardise in float64 before any
    cast: k reaches 1e10); ``estimate(x)``: ᾱ̂ per batch item; ``trace``: gets the levels used.
    """

    call: Callable[[Any, float], Any]
    normal: Callable[[], Any]
    gamma: Callable[[float], Any] | None = None
    estimate: Callable[[Any], Any] | None = None
    trace: list | None = None


class Walk:
    """One run's view of a plan: the level grid (which re-planning may change), model calls and
    noise, for the solvers. Grid point ``i`` is 0..n−1 (noisiest first); ``i = n`` is clean."""

    def __init__(self, plan: StepPlan, env: Env) -> None:
        self.plan, self.env = plan, env
        self.ab = np.array(plan.alpha_bars, dtype=np.float64)
        self.cond = np.array(plan.cond, dtype=np.float64)
        self.coef = (plan.c_x, plan.c_eps, plan.sigma)
        self.replans = plan.replan_steps()
        self.events: list[dict[str, Any]] = []
        self.evaluations = 0

    @property
    def n(self) -> int:
        return len(self.ab)

    def level(self, i: int) -> float:
        return 1.0 if i >= self.n else float(self.ab[i])

    def alpha(self, i: int) -> float:
        return math.sqrt(self.level(i))

    def sigma(self, i: int) -> float:
        return math.sqrt(1.0 - self.level(i))

    def lam(self, i: int) -> float:
        return math.inf if i >= self.n else float(log_snr(self.ab[i]))

    def model(self, x: Any, i: int) -> Pred:
        """The denoiser at grid point ``i``."""
        return self._pred(x, float(self.ab[i]), float(self.cond[i]))

    def model_at(self, x: Any, alpha_bar: float) -> Pred:
        """The denoiser at a level off the grid (intermediate points of single-step solvers)."""
        return self._pred(x, alpha_bar, float(self.plan.cond_of(np.array([alpha_bar]))[0]))

    def _pred(self, x: Any, alpha_bar: float, c: float) -> Pred:
        self.evaluations += 1
        return Pred(self.env.call(x, c), x, alpha_bar, self.plan.prediction)

    def initial(self) -> Any:
        """x_N: N(0, I), or centred Γ(k̄_N, θ_N) noise for Gamma diffusion (Nachmani et al. 2021)."""
        if not self.plan.law.gamma:
            return self.env.normal()
        return math.sqrt(1.0 - self.level(0)) * self.env.gamma(self.plan.law.total_shape(self.level(0)))

    def noise(self, i: int) -> Any:
        """Unit-variance noise of the step leaving grid point ``i``: Gaussian, or the standardised
        Γ(k̄_t) of level t (Nachmani et al. 2021, sampling algorithm; from memory)."""
        if not self.plan.law.gamma:
            return self.env.normal()
        return self.env.gamma(self.plan.law.total_shape(self.level(i)))

    def checkpoint(self, i: int, x: Any) -> None:
        """Called by a solver before it evaluates grid point ``i``: re-plans when due."""
        if i not in self.replans:
            return
        est = float(np.asarray(to_numpy(self.env.estimate(x)), dtype=np.float64).reshape(-1)[0])
        self.ab = replanned(self.ab, i, est)
        self.cond[i:] = self.plan.cond_of(self.ab[i:])
        coefficients = getattr(self.plan.solver, "coefficients", None)
        if coefficients is not None:
            sched = schedule_of(self.ab)
            self.coef = tuple(c[::-1] for c in coefficients(sched))
        self.events.append({"step": i, "estimate": est})

    def record(self) -> dict[str, Any]:
        return {"alpha_bar": [float(v) for v in self.ab], "replanned": self.events}


def replanned(ab: np.ndarray, i: int, estimate: float) -> np.ndarray:
    """The grid with level ``i`` moved to ``estimate`` and levels after it re-spaced (module doc)."""
    lam = log_snr(ab)
    n, last = len(ab), lam[-1]
    lo = lam[i - 1] + MIN_LOG_SNR_GAP
    hi = last - MIN_LOG_SNR_GAP * (n - 1 - i) if i < n - 1 else math.inf
    lam_hat = min(max(float(log_snr(min(max(estimate, 0.0), 1.0))), lo), hi)
    new = lam.copy()
    if i < n - 1:
        new[i:] = lam_hat + (lam[i:] - lam[i]) * (last - lam_hat) / (last - lam[i])
    else:
        new[i] = lam_hat
    return alpha_bar_of(new)


def schedule_of(ab_run: np.ndarray) -> NoiseSchedule:
    """The NoiseSchedule whose ᾱ are the given levels (given noisiest first)."""
    ab = np.asarray(ab_run, dtype=np.float64)[::-1]
    return NoiseSchedule(1.0 - ab / np.concatenate([[1.0], ab[:-1]]), "replanned")


def execute(plan: StepPlan, env: Env) -> Any:
    """Run ``plan``: draw x_N, let the solver walk the grid, return the sample."""
    if plan.adaptive and env.estimate is None:
        raise InputError("sampler option replan_at needs a denoiser with estimate_noise_level",
                         field=f"sampler_options.{plan.sampler}.replan_at", value=list(plan.replan_at))
    walk = Walk(plan, env)
    x = plan.solver.run(walk, walk.initial())
    if env.trace is not None:
        env.trace.append(walk.record())
    return x


def run_plan(plan: StepPlan, predict: Callable[[np.ndarray, np.ndarray, np.ndarray], Any],
             features: np.ndarray, n_samples: int, rng: Any,
             dtype: type = np.float32, estimate: Callable[[np.ndarray, np.ndarray], Any] | None = None,
             trace: list | None = None) -> np.ndarray:
    """Sample a batch: ``features`` is ``(B, n_mels, frames)``; returns ``(B, n_samples)``.

    ``predict(x_t, features, t)`` returns the network output (ε̂, x̂_0 or v̂ as the plan says) with
    the shape of ``x_t``. Noise is drawn from ``rng`` in a fixed order (x_N, then each stochastic
    step), so one seed gives bit-identical output; ``rng`` may also be one Generator per batch item
    (:func:`~vocobench.samplers.noise.item_generators`), making each item's output independent of
    its batch. The state is float64; the denoiser sees
    ``dtype``. Adaptive plans run item by item (each item gets its own schedule, appended to
    ``trace``), with ``estimate(x_t, features)`` giving ᾱ̂.
    """
    feats = np.asarray(features, dtype=dtype)
    batch = feats.shape[0]
    if plan.adaptive and batch > 1:
        return np.concatenate([run_plan(plan, predict, feats[b:b + 1], n_samples,
                                        rng_of_item(rng, b), dtype, estimate, trace) for b in range(batch)])
    shape = (batch, n_samples)

    def call(x: np.ndarray, c: float) -> np.ndarray:
        t = np.full(batch, c, dtype=np.float64)
        out = to_numpy(predict(x.astype(dtype), feats, t)).astype(np.float64)
        if out.shape != x.shape:
            raise ValueError(f"predict_noise returned shape {out.shape}, expected {x.shape}")
        return out

    est = None if estimate is None else (lambda x: estimate(x.astype(dtype), feats))
    return execute(plan, Env(call, lambda: normal_draws(rng, shape),
                             lambda k: gamma_draws(rng, k, shape), est, trace))
