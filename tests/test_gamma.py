"""Gamma-noise diffusion (Nachmani et al. 2021) against the Gamma distribution's own facts.

Gamma facts used (any probability text): Γ(k, θ) has cumulants κ_n = k·θⁿ·(n−1)!; c·Γ(k, θ) is
Γ(k, cθ); cumulants of independent sums add.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from gaussian_case import D
from vocobench.analytic import AnalyticDenoiser
from vocobench.contracts import Plugin
from vocobench.errors import InputError
from vocobench.samplers import NoiseLaw, make_plan, parse_law, run_plan
from vocobench.samplers.noise import forward, forward_step
from vocobench.schedules import linear, subsequence

LAW = NoiseLaw("gamma", 0.6)        # θ_0 large enough that the noise is clearly skewed
BETAS = np.linspace(0.05, 0.3, 10)  # a short forward process: step shapes k_t from 0.15 to 6


def _alpha_bars() -> np.ndarray:
    return np.cumprod(1 - BETAS)


def test_composed_cumulants_equal_the_closed_form():
    # Each step adds c_s·(g_s − k_s·θ_s) to x_T with c_s = √(ᾱ_T/ᾱ_s); its cumulants of order n ≥ 2
    # are k_s·(c_s·θ_s)ⁿ·(n−1)!. Their sum must equal Γ(k̄_T, θ_T)'s: k̄_T·θ_Tⁿ·(n−1)!.
    ab = _alpha_bars()
    for n in (2, 3, 4, 5):
        composed = math.fsum(LAW.step_shape(b, a) * (math.sqrt(ab[-1] / a) * LAW.scale(a)) ** n
                             for b, a in zip(BETAS, ab)) * math.factorial(n - 1)
        closed = LAW.total_shape(ab[-1]) * LAW.scale(ab[-1]) ** n * math.factorial(n - 1)
        assert composed == pytest.approx(closed, rel=1e-12), n
    # and the variance is 1 − ᾱ_T, as for Gaussian diffusion (Nachmani et al. 2021, Sec. 3)
    assert LAW.total_shape(ab[-1]) * LAW.scale(ab[-1]) ** 2 == pytest.approx(1 - ab[-1], rel=1e-12)


def test_forward_steps_and_closed_form_agree_in_distribution():
    # Monte Carlo: the first four cumulants (unbiased k-statistics) of x_T drawn step by step and
    # drawn in one go, each against the closed form's, within 5 standard errors estimated from
    # 40 independent batches (a false alarm needs a > 5σ deviation in one of 8 checks).
    ab = _alpha_bars()
    x0, batches, size = 0.7, 40, 5000
    rng = np.random.default_rng(5)
    k, theta = LAW.total_shape(ab[-1]), LAW.scale(ab[-1])
    want = [math.sqrt(ab[-1]) * x0, k * theta ** 2, 2 * k * theta ** 3, 6 * k * theta ** 4]
    for how in ("steps", "closed"):
        est = np.empty((batches, 4))
        for b in range(batches):
            if how == "steps":
                x = np.full(size, x0)
                for beta, a in zip(BETAS, ab):
                    x = forward_step(x, beta, a, LAW, rng)
            else:
                x = forward(np.full(size, x0), ab[-1], LAW, rng)
            est[b] = [np.mean(x)] + [stats.kstat(x, n) for n in (2, 3, 4)]
        mean, se = est.mean(0), est.std(0, ddof=1) / math.sqrt(batches)
        assert np.all(np.abs(mean - want) <= 5 * se), (how, mean, want, se)
    assert want[2] / want[1] ** 1.5 > 0.3      # the law is really skewed here, not near-Gaussian


def _oracle(x0: np.ndarray):
    """The true noise of x_t = √ᾱ·x_0 + √(1−ᾱ)·ε for a known x_0 (t is √ᾱ)."""
    def predict(x_t, features, t):
        ab = float(t[0]) ** 2
        return (np.asarray(x_t, np.float64) - math.sqrt(ab) * x0) / math.sqrt(1 - ab)
    return predict


class Recording:
    """A generator that records the shapes of its Gamma draws."""

    def __init__(self, seed: int) -> None:
        self.rng, self.shapes = np.random.default_rng(seed), []

    def standard_normal(self, shape):
        raise AssertionError("a Gamma sampler drew Gaussian noise")

    def gamma(self, k, scale, shape):
        self.shapes.append(k)
        return self.rng.gamma(k, scale, shape)


@pytest.mark.parametrize("n", [1, 6, 50])
def test_reverse_with_oracle_noise_recovers_x0(n):
    # With the true noise, x̂_0 = (x_t − √(1−ᾱ)·ε)/√ᾱ = x_0 at every step, so the reverse process
    # must end at x_0 exactly (to rounding), whatever Gamma noise it added on the way.
    x0 = np.random.default_rng(2).uniform(-0.5, 0.5, (3, D))
    sched = subsequence(linear(1000), n)
    plan = make_plan("gamma", sched, "level", None, law=NoiseLaw("gamma", 0.001))
    rng = Recording(4)
    out = run_plan(plan, _oracle(x0), np.zeros((3, 1, 1)), D, rng, dtype=np.float64)
    np.testing.assert_allclose(out, x0, rtol=0, atol=1e-9)
    # it drew x_N and each stochastic step's noise from Γ(k̄_t) with k̄ = (1−ᾱ)/(ᾱ·θ_0²)
    ab = sched.alpha_bars[::-1]
    kbar = (1 - ab) / (ab * 0.001 ** 2)
    want = [kbar[0]] + [kbar[i] for i in range(n) if plan.sigma[i] > 0]
    np.testing.assert_allclose(rng.shapes, want, rtol=1e-12)


class GammaDemo(AnalyticDenoiser):
    noise_law = "gamma"
    gamma_theta0 = 0.001


def test_mixing_noise_laws_is_an_input_error():
    sched = linear(4)
    with pytest.raises(InputError) as e:
        make_plan("ddim", sched, "level", None, law=LAW)
    assert e.value.field == "sweep.samplers" and "gamma" in str(e.value)
    with pytest.raises(InputError) as e:
        make_plan("gamma", sched, "level", None)                 # Gaussian denoiser
    assert "gaussian" in str(e.value) and "gamma" in str(e.value)
    gamma = Plugin.wrap(GammaDemo())
    assert gamma.samplers() == ["gamma"] and "gamma" not in Plugin.wrap(AnalyticDenoiser()).samplers()
    assert gamma.describe()["noise_law"] == {"kind": "gamma", "theta0": 0.001}
    with pytest.raises(InputError) as e:
        gamma.synthesizer("dpmpp-2m")
    assert "noise_law" in str(e.value) and "dpmpp-2m" in str(e.value)
    with pytest.raises(InputError):
        Plugin.wrap(AnalyticDenoiser()).synthesizer("gamma")


@pytest.mark.parametrize("kind, theta0, field", [("laplace", None, "noise_law"),
                                                 ("gamma", None, "gamma_theta0"),
                                                 ("gamma", -1.0, "gamma_theta0"),
                                                 ("gaussian", 0.1, "gamma_theta0")])
def test_bad_noise_law_declarations(kind, theta0, field):
    with pytest.raises(InputError) as e:
        parse_law(kind, theta0, "model.py")
    assert e.value.field == field


def test_gamma_sampler_runs_on_the_demo_denoiser():
    plugin = Plugin.wrap(GammaDemo())
    fe = plugin.frontend
    feats = fe(np.random.default_rng(0).standard_normal(fe.sample_rate // 4).astype(np.float32) * 0.1)
    fn = plugin.synthesizer("gamma")
    sched = subsequence(plugin.training_schedule, 8)
    a, b = fn(feats, sched, np.random.default_rng(1)), fn(feats, sched, np.random.default_rng(1))
    np.testing.assert_array_equal(a, b)
    assert a.shape == (fe.expected_samples(feats.shape[-1]),) and np.all(np.isfinite(a))
