"""Adaptive schedules (San-Roman et al. 2021) and the analytic denoiser's noise-level estimator."""
from __future__ import annotations

import math

import numpy as np
import pytest

from vocobench.analytic import AnalyticDenoiser, mdct
from vocobench.check import probe_signal
from vocobench.contracts import Plugin
from vocobench.errors import InputError
from vocobench.samplers import log_snr, make_plan, run_plan
from vocobench.schedules import subsequence

SMALL_FE = {"sample_rate": 8000, "n_fft": 256, "win_length": 256, "hop_length": 32, "n_mels": 24,
            "fmin": 0.0, "fmax": 4000.0}


@pytest.fixture(scope="module")
def setting():
    den = AnalyticDenoiser(SMALL_FE, conditioning="step")
    feats = den.frontend(probe_signal(8000, 0.5))
    return den, feats


def _loglik(den, feats, x, ab):
    # c_j ~ N(0, ᾱ·P_j + 1 − ᾱ) independently (the prior's Gaussian MDCT law, vocobench.analytic)
    n = den.frontend.hop_length
    p = den.prior_variance(feats)[: x.shape[-1] // n]
    v = ab * p + 1 - ab
    return -0.5 * float(np.sum(np.log(2 * np.pi * v) + mdct(x, n) ** 2 / v))


@pytest.mark.parametrize("ab", [0.05, 0.3, 0.7, 0.95, 0.999])
def test_estimator_is_the_maximum_likelihood_and_consistent(setting, ab):
    den, feats = setting
    rng = np.random.default_rng(int(ab * 1000))
    x0 = den.sample_prior(feats, rng)
    x = (math.sqrt(ab) * x0 + math.sqrt(1 - ab) * rng.standard_normal(x0.shape))[None]
    est = float(den.estimate_noise_level(x, feats[None])[0])
    # maximum likelihood (its definition): no nearby ᾱ, nor the true one, is more likely
    best = _loglik(den, feats, x[0], est)
    for other in (ab, est * (1 - 1e-6), min(est * (1 + 1e-6), 1.0)):
        assert best >= _loglik(den, feats, x[0], other) - 1e-6
    # Cramér–Rao: the ML estimate is within a few √(1/I) of the truth, I = ½·Σ_j (∂v_j/∂ᾱ / v_j)²
    n = den.frontend.hop_length
    p = den.prior_variance(feats)[: x.shape[-1] // n]
    fisher = 0.5 * np.sum(((p - 1) / (ab * p + 1 - ab)) ** 2)
    assert abs(est - ab) <= 5 / math.sqrt(fisher), (est, ab, 1 / math.sqrt(fisher))


def test_replanning_moves_the_rest_of_the_schedule(setting):
    den, feats = setting
    plugin = Plugin.wrap(den)
    sched = subsequence(den.training_schedule, 6)
    fn = plugin.synthesizer("ddim", {"replan_at": [0.5]})
    y = fn(feats, sched, np.random.default_rng(0))
    used = fn.last_schedule
    nominal = sched.alpha_bars[::-1]
    got = np.array(used["alpha_bar"])
    (event,) = used["replanned"]
    assert event["step"] == 3 and len(got) == 6
    np.testing.assert_allclose(got[:3], nominal[:3], rtol=1e-12)     # done before the re-plan
    assert got[3] == pytest.approx(event["estimate"], rel=1e-9)      # the estimate replaces level 3
    assert got[-1] == pytest.approx(nominal[-1], rel=1e-12)          # the last level is kept
    assert np.all(np.diff(log_snr(got)) > 0)
    # the remaining levels keep their relative log-SNR positions (the re-planning rule)
    lam, lam0 = log_snr(got[3:]), log_snr(nominal[3:])
    np.testing.assert_allclose((lam - lam[0]) / (lam[-1] - lam[0]),
                               (lam0 - lam0[0]) / (lam0[-1] - lam0[0]), atol=1e-9)
    # the estimate is of the state actually reached, not the nominal level: a 6-step DDIM state is
    # smoother than the marginal at that level, so it reads as less noisy
    assert event["estimate"] > nominal[3]
    plain = plugin.synthesizer("ddim")(feats, sched, np.random.default_rng(0))
    assert not np.allclose(y, plain)
    np.testing.assert_array_equal(y, fn(feats, sched, np.random.default_rng(0)))   # deterministic


@pytest.mark.parametrize("sampler", ["ddpm", "dpmpp-2m", "heun", "dpm-solver-3", "pndm", "unipc"])
def test_every_solver_accepts_replanning(setting, sampler):
    den, feats = setting
    sched = subsequence(den.training_schedule, 5)
    plan = make_plan(sampler, sched, "step", den.training_schedule, {"replan_at": [0.4, 0.6]})
    trace: list = []
    batch = np.stack([feats, feats])
    n = den.frontend.expected_samples(feats.shape[-1])
    out = run_plan(plan, den.predict_noise, batch, n, np.random.default_rng(1),
                   estimate=den.estimate_noise_level, trace=trace)
    assert out.shape == (2, n) and np.all(np.isfinite(out)) and len(trace) == 2
    assert [e["step"] for e in trace[0]["replanned"]] == [2, 3]
    # item by item: the batch's first item is the same run as that item alone
    one = run_plan(plan, den.predict_noise, batch[:1], n, np.random.default_rng(1),
                   estimate=den.estimate_noise_level)
    np.testing.assert_array_equal(out[:1], one)


def test_replanning_without_an_estimator_is_an_input_error(setting):
    den, feats = setting

    class NoEstimate:
        sample_rate, frontend, conditioning = den.sample_rate, den.frontend, "step"
        training_schedule = den.training_schedule
        predict_noise = den.predict_noise

    with pytest.raises(InputError) as e:
        Plugin.wrap(NoEstimate()).synthesizer("ddim", {"replan_at": [0.5]})
    assert e.value.field == "sampler_options.ddim.replan_at"
    with pytest.raises(InputError) as e:
        Plugin.wrap(den).synthesizer("ddim", {"replan_at": [1.5]})
    assert e.value.field == "sampler_options.ddim.replan_at"
