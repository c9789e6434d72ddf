"""Built-in samplers against the papers, and against Gaussian data where the exact denoiser is known.

For x_0 ~ N(0, Σ) and x_t = √ᾱ·x_0 + √(1−ᾱ)·ε, (x_t, ε) are jointly Gaussian with
Cov(x_t) = ᾱΣ + (1−ᾱ)I and Cov(ε, x_t) = √(1−ᾱ)·I, so the MMSE noise prediction is
E[ε | x_t] = √(1−ᾱ)·(ᾱΣ + (1−ᾱ)I)⁻¹·x_t (conditional mean of a Gaussian; any multivariate
statistics text). A sampler driven by it must reproduce Σ when run with many steps.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from vocobench.analytic import AnalyticDenoiser, imdct, mdct, mdct_basis
from vocobench.check import probe_signal
from vocobench.errors import InputError
from vocobench.samplers import ddim_plan, ddpm_plan, fractional_steps, make_plan, run_plan
from vocobench.schedules import geometric, linear, subsequence

D = 8
_rng = np.random.default_rng(20240601)
_U, _ = np.linalg.qr(_rng.standard_normal((D, D)))
LAMBDAS = np.geomspace(0.05, 4.0, D)          # eigenvalues spread over two decades
SIGMA = _U @ np.diag(LAMBDAS) @ _U.T


def _eps_matrix(ab: float) -> np.ndarray:
    # E[ε | x_t] = √(1−ᾱ)(ᾱΣ + (1−ᾱ)I)⁻¹ x_t (Gaussian conditional mean, see module docstring)
    return math.sqrt(1 - ab) * np.linalg.inv(ab * SIGMA + (1 - ab) * np.eye(D))


def gaussian_denoiser(x_t: np.ndarray, features: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Exact ε̂ for N(0, Σ) data; ``t`` is the noise level √ᾱ (conditioning "level", batch-aware)."""
    assert np.all(t == t[0])
    return (_eps_matrix(float(t[0]) ** 2) @ np.asarray(x_t, dtype=np.float64).T).T


def _exact_output_covariance(plan) -> np.ndarray:
    """Output covariance of the (linear) sampler started from x_N ~ N(0, I): C ← A C Aᵀ + σ²I."""
    C = np.eye(D)
    for n in range(plan.nfe):
        A = plan.c_x[n] * np.eye(D) - plan.c_eps[n] * _eps_matrix(plan.cond[n] ** 2)
        C = A @ C @ A.T + plan.sigma[n] ** 2 * np.eye(D)
    return C


SAMPLERS = [("ddpm", {}), ("ddim", {"eta": 1.0}), ("ddim", {"eta": 0.0})]
SAMPLER_IDS = ["ddpm", "ddim-eta1", "ddim-eta0"]
SCALE = np.sqrt(np.outer(np.diag(SIGMA), np.diag(SIGMA)))      # √(Σ_ii Σ_jj), entrywise
BIAS_ALLOWANCE = 0.02          # relative to √(Σ_ii Σ_jj); asserted in the test just below


# -- coefficients against the papers ---------------------------------------------------------
def test_ddpm_plan_matches_ho_eq11():
    # Ho et al. 2020, Eq. 11: x_{t−1} = (x_t − β_t/√(1−ᾱ_t)·ε̂)/√α_t + σ_t z, with σ_t² = β̃_t =
    # (1−ᾱ_{t−1})/(1−ᾱ_t)·β_t (Eq. 7; the choice the paper's Sec. 3.2 discusses)
    sched = subsequence(linear(1000), 20)
    c_x, c_eps, sigma = ddpm_plan(sched)
    ab_prev = 1.0
    for t, b in enumerate(sched.betas):
        ab = ab_prev * (1 - b)
        assert c_x[t] == pytest.approx(1 / math.sqrt(1 - b), rel=1e-12)
        assert c_eps[t] == pytest.approx(b / math.sqrt(1 - ab) / math.sqrt(1 - b), rel=1e-10)
        assert sigma[t] == pytest.approx(math.sqrt((1 - ab_prev) / (1 - ab) * b), rel=1e-10, abs=1e-15)
        ab_prev = ab
    assert sigma[0] == 0.0          # β̃_1 = 0: the last step adds no noise


def test_ddim_eta1_is_ddpm_and_eta0_adds_no_noise():
    # Song et al. 2021, Sec. 4.1 / Eq. 16: σ_t(η) = η·√((1−ᾱ_{t−1})/(1−ᾱ_t))·√(1−ᾱ_t/ᾱ_{t−1});
    # η = 1 makes the generative process a DDPM, η = 0 makes it deterministic (DDIM)
    sched = subsequence(linear(1000), 25, "quadratic")
    for got, want in zip(ddim_plan(sched, eta=1.0), ddpm_plan(sched)):
        np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-14)
    c_x, c_eps, sigma = ddim_plan(sched, eta=0.0)
    assert np.all(sigma == 0)
    # Song et al. 2021, Eq. 12 with σ = 0: x_{t−1} = √ᾱ_{t−1}·x̂_0 + √(1−ᾱ_{t−1})·ε̂,
    # x̂_0 = (x_t − √(1−ᾱ_t)·ε̂)/√ᾱ_t
    ab = sched.alpha_bars
    ab_prev = np.concatenate([[1.0], ab[:-1]])
    np.testing.assert_allclose(c_x, np.sqrt(ab_prev / ab), rtol=1e-12)
    np.testing.assert_allclose(c_eps, np.sqrt(ab_prev / ab) * np.sqrt(1 - ab) - np.sqrt(1 - ab_prev),
                               rtol=1e-9, atol=1e-15)


class _SharedFirstDraw:
    """A generator stand-in: the first draw (x_N) is fixed, later draws differ per instance."""

    def __init__(self, first: np.ndarray, seed: int) -> None:
        self.first, self.calls, self.rng = first, 0, np.random.default_rng(seed)

    def standard_normal(self, shape):
        self.calls += 1
        return self.first.copy() if self.calls == 1 else self.rng.standard_normal(shape)


def test_ddim_eta0_is_deterministic_given_x_N():
    # Song et al. 2021, Eq. 12 with σ_t = 0: the map x_N → x_0 is deterministic
    sched = subsequence(linear(1000), 10)
    x_N = np.random.default_rng(7).standard_normal((4, D))
    feats = np.zeros((4, 1, 1))
    outs = {}
    for name, opts in (("ddim", {"eta": 0.0}), ("ddpm", {})):
        plan = make_plan(name, sched, "level", None, opts)
        r1, r2 = _SharedFirstDraw(x_N, 1), _SharedFirstDraw(x_N, 2)
        outs[name] = (run_plan(plan, gaussian_denoiser, feats, D, r1, dtype=np.float64),
                      run_plan(plan, gaussian_denoiser, feats, D, r2, dtype=np.float64), r1.calls)
    a, b, calls = outs["ddim"]
    np.testing.assert_array_equal(a, b)
    assert calls == 1                                  # only x_N was drawn
    a, b, calls = outs["ddpm"]                         # control: DDPM's later draws do matter
    assert calls == 1 + 9 and not np.allclose(a, b)


def test_same_seed_same_output():
    # run_plan draws noise in a fixed order from the generator it is given (its documented contract)
    plan = make_plan("ddpm", subsequence(linear(1000), 8), "level", None)
    feats = np.zeros((3, 1, 1))
    a = run_plan(plan, gaussian_denoiser, feats, D, np.random.default_rng(5))
    b = run_plan(plan, gaussian_denoiser, feats, D, np.random.default_rng(5))
    c = run_plan(plan, gaussian_denoiser, feats, D, np.random.default_rng(6))
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)


# -- Gaussian data with known covariance -----------------------------------------------------
@pytest.mark.parametrize("sampler, opts", SAMPLERS, ids=SAMPLER_IDS)
def test_discretisation_bias_is_small_and_shrinks_with_steps(sampler, opts):
    # The sampler is linear in x here, so its output covariance is computed exactly (no sampling).
    # DDPM and DDIM are consistent discretisations of the reverse process (Ho et al. 2020;
    # Song et al. 2021): the bias must vanish as N grows — roughly as 1/N (first order).
    train = linear(1000)
    bias = {}
    for n in (250, 1000):
        sched = train if n == 1000 else subsequence(train, n)
        C = _exact_output_covariance(make_plan(sampler, sched, "level", None, opts))
        bias[n] = np.max(np.abs(C - SIGMA) / SCALE)
    assert bias[1000] < BIAS_ALLOWANCE
    assert bias[1000] < 0.4 * bias[250]      # 4× the steps: at least 2.5× less bias


@pytest.mark.parametrize("sampler, opts", SAMPLERS, ids=SAMPLER_IDS)
def test_many_step_sampling_reproduces_gaussian_covariance(sampler, opts):
    n = 5000
    plan = make_plan(sampler, linear(1000), "level", None, opts)     # the DDPM T = 1000 schedule
    x = run_plan(plan, gaussian_denoiser, np.zeros((n, 1, 1)), D, np.random.default_rng(11),
                 dtype=np.float64)
    C_hat = x.T @ x / n                                # zero mean is known
    # Wishart: Var(Ĉ_ij) = (Σ_ii Σ_jj + Σ_ij²)/n for a known-mean covariance estimate of n draws
    se = np.sqrt((np.outer(np.diag(SIGMA), np.diag(SIGMA)) + SIGMA ** 2) / n)
    # 5 SE over 36 distinct entries: a false alarm needs a > 5σ deviation (p ≈ 2e-5 in total);
    # plus the discretisation bias bounded above
    tol = 5 * se + BIAS_ALLOWANCE * SCALE
    assert np.all(np.abs(C_hat - SIGMA) <= tol), np.max(np.abs(C_hat - SIGMA) / tol)
    # and the eigen-directions keep their variances (λ spans 0.05 … 4)
    lam_hat = np.diag(_U.T @ C_hat @ _U)
    np.testing.assert_allclose(lam_hat, LAMBDAS, rtol=5 * math.sqrt(2 / n) + BIAS_ALLOWANCE * 2)


def test_fractional_steps_interpolate_on_noise_level():
    # Kong et al. 2021 (DiffWave), fast sampling: an inference noise level is aligned to a training
    # step by linear interpolation of √ᾱ between the two neighbouring training steps (from memory)
    train = linear(50, 1e-4, 0.05)
    ab = train.alpha_bars
    k = np.arange(len(train))
    steps, clamped = fractional_steps(train, ab)
    np.testing.assert_allclose(steps, k, atol=1e-9)
    assert clamped == 0
    mid = ((np.sqrt(ab[:-1]) + np.sqrt(ab[1:])) / 2) ** 2   # halfway in √ᾱ
    steps, _ = fractional_steps(train, mid)
    np.testing.assert_allclose(steps, k[:-1] + 0.5, atol=1e-9)
    _, clamped = fractional_steps(train, np.array([ab[-1] / 10, 1 - 1e-9]))   # outside both ends
    assert clamped == 2


def test_bad_sampler_name_and_option():
    sched = linear(4)
    with pytest.raises(InputError) as e:
        make_plan("dpm-solver", sched, "level", None)
    assert e.value.field == "sweep.samplers" and "ddim" in str(e.value)
    with pytest.raises(InputError) as e:
        make_plan("ddpm", sched, "level", None, {"eta": 0.5})
    assert e.value.field == "sampler_options.ddpm.eta"
    with pytest.raises(InputError) as e:
        make_plan("ddim", sched, "step", None)           # step conditioning needs a training schedule
    assert e.value.field == "training_schedule"


# -- the analytic MMSE denoiser ----------------------------------------------------------------
def test_mdct_is_orthogonal():
    # Princen & Bradley 1986: with a window satisfying w²(k) + w²(k+N) = 1 (the sine window does)
    # and 50 % overlap, the lapped transform is orthogonal — time-domain aliasing cancels
    n, blocks = 4, 3
    basis = mdct_basis(n)
    w = np.sin(np.pi * (np.arange(2 * n) + 0.5) / (2 * n))
    np.testing.assert_allclose(w[:n] ** 2 + w[n:] ** 2, 1.0, atol=1e-15)
    M = mdct(np.eye(n * blocks), n).reshape(n * blocks, n * blocks).T   # column j = MDCT of e_j
    np.testing.assert_allclose(M.T @ M, np.eye(n * blocks), atol=1e-12)
    np.testing.assert_allclose(M @ M.T, np.eye(n * blocks), atol=1e-12)
    x = np.random.default_rng(0).standard_normal((2, n * blocks))
    np.testing.assert_allclose(imdct(mdct(x, n), n), x, atol=1e-12)
    assert basis.shape == (2 * n, n)


SMALL_FE = {"sample_rate": 8000, "n_fft": 256, "win_length": 256, "hop_length": 32, "n_mels": 24,
            "fmin": 0.0, "fmax": 4000.0}


@pytest.mark.parametrize("sampler, opts", [("ddpm", {}), ("ddim", {"eta": 0.0})], ids=["ddpm", "ddim-eta0"])
def test_analytic_denoiser_many_steps_reproduce_its_prior(sampler, opts):
    # The analytic denoiser is the exact MMSE ε̂ for its Gaussian MDCT prior (vocobench.analytic), so
    # a many-step sampler must reproduce the prior's variance; sample_prior draws from it exactly.
    den = AnalyticDenoiser(SMALL_FE, conditioning="level")
    fe = den.frontend
    feats = fe(probe_signal(fe.sample_rate, 0.3))
    P = den.prior_variance(feats)                              # (frames, hop)
    B, n = 64, fe.hop_length
    # geometric β (1e-8 … 0.5, equal log-SNR-like spacing) resolves both loud and quiet coefficients;
    # the sampler returns the posterior mean at the last step, which shrinks variances P ≲ β_1
    sched = geometric(400, 1e-8, 0.5)
    plan = make_plan(sampler, sched, "level", None, opts)
    x = run_plan(plan, den.predict_noise, np.repeat(feats[None], B, 0),
                 fe.expected_samples(feats.shape[-1]), np.random.default_rng(3), dtype=np.float64)
    prior = np.stack([den.sample_prior(feats, np.random.default_rng(1000 + i)) for i in range(B)])
    c_s, c_p = mdct(x, n), mdct(prior, n)                      # (B, frames, hop)
    # Bias allowance: exact variance propagation of this diagonal linear sampler (computed while
    # writing this test; measured, not from a source) gives ≤ 2.5 % shrinkage for P ≥ 1e-5 at N = 400.
    bias, p_min = 0.03, 1e-5
    for band in range(4):
        sl = slice(8 * band, 8 * band + 8)
        mask = P[:, sl] >= p_min
        if mask.sum() < 20:
            continue
        Pm = P[:, sl][mask]
        v_s = np.mean(c_s[:, :, sl][:, mask] ** 2)
        v_p = np.mean(c_p[:, :, sl][:, mask] ** 2)
        # c ~ N(0, P) ⇒ Var(c²) = 2P²: relative SE of the band mean over B draws
        se = math.sqrt(2 * np.sum(Pm ** 2) / B) / Pm.size / Pm.mean()
        assert abs(v_p / Pm.mean() - 1) <= 5 * se, (band, v_p / Pm.mean())          # prior draws
        assert abs(v_s / v_p - 1) <= bias + 5 * math.sqrt(2) * se, (band, v_s / v_p)  # sampler
