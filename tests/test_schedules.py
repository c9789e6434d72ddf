"""Noise schedules against the papers' definitions, computed independently in plain Python floats."""
from __future__ import annotations

import math

import numpy as np
import pytest

from vocobench import schedules as S
from vocobench.errors import InputError


def _ddpm_betas_py(T: int = 1000, b0: float = 1e-4, b1: float = 0.02) -> list[float]:
    # Ho et al. 2020, Sec. 4: "β_1 = 10⁻⁴ to β_T = 0.02", linearly increasing over T = 1000 steps
    return [b0 + (b1 - b0) * (t - 1) / (T - 1) for t in range(1, T + 1)]


def test_ddpm_linear_alpha_bar_T_matches_product_definition():
    # Ho et al. 2020, Sec. 2: ᾱ_t := ∏_{s=1}^{t} (1 − β_s); evaluated with math.prod over Python floats
    sched = S.linear(1000)
    betas = _ddpm_betas_py()
    expected = math.prod(1.0 - b for b in betas)
    assert sched.alpha_bars[-1] == pytest.approx(expected, rel=1e-10)
    # the same product as exp Σ log1p(−β): a second independent evaluation
    assert sched.alpha_bars[-1] == pytest.approx(math.exp(math.fsum(math.log1p(-b) for b in betas)),
                                                 rel=1e-10)
    # ᾱ_T ≈ 4.0e-5 for this schedule (value from memory of the DDPM setting; order of magnitude only)
    assert 1e-5 < sched.alpha_bars[-1] < 1e-4
    # x_t = √ᾱ·x_0 + √(1−ᾱ)·ε (Ho et al. 2020, Eq. 4): noise level and σ are its two factors
    np.testing.assert_allclose(sched.noise_levels ** 2 + sched.sigmas ** 2, 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sched.betas, betas, rtol=0, atol=1e-15)


def test_cosine_schedule_matches_nichol_dhariwal_eq17():
    # Nichol & Dhariwal 2021, Eq. 17: ᾱ_t = f(t)/f(0), f(t) = cos²(((t/T + s)/(1 + s))·π/2), s = 0.008;
    # β_t = 1 − ᾱ_t/ᾱ_{t−1} clipped to be no larger than 0.999 (same paper, Sec. 3.2)
    T, s = 1000, 0.008

    def f(t: int) -> float:
        return math.cos((t / T + s) / (1 + s) * math.pi / 2) ** 2

    ab = [f(t) / f(0) for t in range(T + 1)]
    betas = [min(1 - ab[t] / ab[t - 1], 0.999) for t in range(1, T + 1)]
    sched = S.cosine(T)
    np.testing.assert_allclose(sched.betas, betas, rtol=1e-9, atol=1e-15)
    # away from the clipped end, ᾱ is the closed form itself
    np.testing.assert_allclose(sched.alpha_bars[:-1], ab[1:T], rtol=1e-9, atol=1e-15)
    assert sched.betas[-1] == pytest.approx(0.999)       # the clip is active at t = T


@pytest.mark.parametrize("stride", ["uniform", "quadratic"])
@pytest.mark.parametrize("n", [1, 6, 50])
def test_subsequence_alpha_bar_equals_training_alpha_bar(stride, n):
    # Song et al. 2021 (DDIM), Sec. 4.2: the generative process on a sub-sequence τ uses ᾱ_{τ_i}
    # of the training schedule itself; App. D.2 gives τ_i = ⌊c·i⌋ (uniform) or ⌊c·i²⌋ (quadratic)
    train = S.linear(1000)
    sub = S.subsequence(train, n, stride)
    assert len(sub) == n
    tau = sub.train_steps
    assert np.all(np.diff(tau) > 0) and tau[0] >= 0 and tau[-1] == 999   # ends at the noisiest step
    # (rtol: round-off of the β ↔ ᾱ round trip, common practice, no source)
    np.testing.assert_allclose(sub.alpha_bars, train.alpha_bars[tau], rtol=1e-10, atol=0)
    if stride == "uniform":
        # τ_i = ⌊i·T/n⌋ (1-based) — here 0-based indices
        np.testing.assert_array_equal(tau + 1, [math.floor(i * 1000 / n) for i in range(1, n + 1)])


def test_subsequence_refuses_more_steps_than_training():
    # Song et al. 2021: τ is a sub-sequence of [1, …, T], so it cannot be longer than T
    with pytest.raises(InputError) as e:
        S.subsequence(S.linear(10), 11)
    assert e.value.field == "steps"


@pytest.mark.parametrize("betas, why", [
    ([0.1, 0.0, 0.2], "β = 0"),          # Ho et al. 2020: β_t ∈ (0, 1) for a valid forward process
    ([0.1, -0.01], "β < 0"),
    ([0.1, 1.0], "β = 1"),
    ([0.5, 1.5], "β > 1"),
    ([0.1, float("nan")], "NaN"),
    ([0.1, float("inf")], "inf"),
    ([], "empty"),
])
def test_invalid_betas_are_rejected(betas, why):
    with pytest.raises(InputError) as e:
        S.NoiseSchedule(np.array(betas, dtype=float), "bad")
    assert e.value.field == "betas", why


def test_wrong_length_is_rejected():
    # an explicit schedule swept at N steps must hold N values (common practice, no source)
    with pytest.raises(InputError) as e:
        S.validate_betas(np.array([0.1, 0.2, 0.3]), length=4)
    assert e.value.field == "betas" and e.value.value == 3
    spec = S.make_spec({"name": "mine", "kind": "explicit", "betas": [0.1, 0.2, 0.3]})
    assert spec.fixed_length == 3
    with pytest.raises(InputError):
        spec.build(4)
    assert len(spec.build(3)) == 3


def test_make_spec_rejects_unknown_kind_and_lists_the_valid_ones():
    with pytest.raises(InputError) as e:
        S.make_spec({"kind": "cosin"})
    assert e.value.field == "sweep.schedule.kind"
    for k in S.KINDS:
        assert k in str(e.value)


def test_make_spec_rejects_bad_explicit_betas():
    with pytest.raises(InputError) as e:
        S.make_spec({"kind": "explicit", "betas": [0.1, 1.2]})
    # the config's field path, as for every other schedule key; β_t ∈ (0, 1) (Ho et al. 2020)
    assert e.value.field == "sweep.schedule.betas" and e.value.value == 1.2
    assert "(0, 1)" in str(e.value)
    with pytest.raises(InputError) as e:
        S.make_spec({"kind": "explicit", "betas": ["a", "b"]})
    assert e.value.field == "sweep.schedule.betas"


def test_steps_must_be_positive_integers():
    for bad in (0, -3, 2.5, True):
        with pytest.raises(InputError) as e:
            S.linear(bad)
        assert e.value.field == "steps"


# -- inference spacings mapped onto the training schedule --------------------------------------
def test_karras_spacing_matches_edm_eq5():
    # Karras et al. 2022, Eq. 5: σ_i = (σ_max^{1/ρ} + i/(N−1)·(σ_min^{1/ρ} − σ_max^{1/ρ}))^ρ,
    # i = 0..N−1 (noisiest first), ρ = 7 (their Table 1); σ = √((1−ᾱ)/ᾱ) for a VP process (Sec. 4)
    n, rho, lo, hi = 9, 7.0, 0.002, 80.0
    want = [(hi ** (1 / rho) + i / (n - 1) * (lo ** (1 / rho) - hi ** (1 / rho))) ** rho
            for i in range(n)]
    got = S.ScheduleSpec("k", "karras", {"sigma_min": lo, "sigma_max": hi}).build(n)
    ab = got.alpha_bars[::-1]                                     # noisiest first
    np.testing.assert_allclose(np.sqrt((1 - ab) / ab), want, rtol=1e-9)
    assert got.params["rho"] == rho == S.KARRAS_RHO


def test_karras_and_logsnr_default_to_the_training_range():
    train = S.linear(1000)
    ab = train.alpha_bars
    for kind in ("karras", "logsnr", "uniform-t"):
        sched = S.ScheduleSpec(kind, kind).build(12, train)
        # the ends are the training schedule's first and last noise levels
        np.testing.assert_allclose(sched.alpha_bars[[0, -1]], ab[[0, -1]], rtol=1e-10)
        assert np.all(np.diff(sched.alpha_bars) < 0)


def test_logsnr_spacing_is_uniform_in_lambda():
    # Lu et al. 2022, Sec. 3.1: λ_t = log(α_t/σ_t) = ½·log(ᾱ/(1−ᾱ)); the "logSNR" spacing steps
    # uniformly in it
    sched = S.logsnr(7, lambda_min=-4.0, lambda_max=5.0)
    lam = [0.5 * math.log(a / (1 - a)) for a in sched.alpha_bars]
    np.testing.assert_allclose(lam, np.linspace(5.0, -4.0, 7), atol=1e-9)


def test_uniform_t_lands_on_evenly_spaced_training_steps():
    # Lu et al. 2022, "time-uniform" steps; mapped back onto the training schedule by the
    # √ᾱ interpolation every schedule uses (Kong et al. 2021), they are evenly spaced steps
    from vocobench.samplers import fractional_steps

    train = S.linear(1000)
    steps, clamped = fractional_steps(train, S.uniform_t(10, train).alpha_bars)
    np.testing.assert_allclose(steps, np.linspace(0, 999, 10), atol=1e-6)
    assert clamped == 0


def test_spacings_need_a_training_schedule_or_a_range():
    with pytest.raises(InputError) as e:
        S.ScheduleSpec("u", "uniform-t").build(4)
    assert e.value.field == "kind" and "training schedule" in str(e.value)
    assert len(S.ScheduleSpec("l", "logsnr", {"lambda_min": -3, "lambda_max": 3}).build(4)) == 4
    with pytest.raises(InputError) as e:
        S.make_spec({"kind": "karras", "sigma_min": 10.0, "sigma_max": 1.0})
    assert e.value.field == "sweep.schedule.sigma_min"
