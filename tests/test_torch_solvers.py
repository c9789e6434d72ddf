"""One implementation per sampler: the torch loop (TorchDenoiser.sample) and the numpy loop
(run_plan) give the same output for the same seed, to the precision of the dtype."""
from __future__ import annotations

import math

import numpy as np
import pytest

torch = pytest.importorskip("torch")

from vocobench.analytic import AnalyticDenoiser  # noqa: E402
from vocobench.check import probe_signal  # noqa: E402
from vocobench.samplers import SAMPLERS, NoiseLaw, make_plan, run_plan  # noqa: E402
from vocobench.schedules import logsnr  # noqa: E402
from vocobench.torch_adapter import TorchDenoiser  # noqa: E402
from vocobench.torch_analytic import TorchAnalyticDenoiser  # noqa: E402

SMALL_FE = {"sample_rate": 8000, "n_fft": 256, "win_length": 256, "hop_length": 32, "n_mels": 24,
            "fmin": 0.0, "fmax": 4000.0}
# IEEE 754 binary64 / binary32 unit roundoff 2^-53 / 2^-24
U64, U32 = 2.0 ** -53, 2.0 ** -24


@pytest.fixture(autouse=True, scope="module")
def one_thread():
    old = torch.get_num_threads()
    torch.set_num_threads(1)
    yield
    torch.set_num_threads(old)


@pytest.fixture(scope="module")
def feats():
    # float32 values: the torch adapter keeps features in float32, so both loops see the same ones
    return AnalyticDenoiser(SMALL_FE).frontend(probe_signal(8000, 0.4)).astype(np.float32)


def rel(a, b):
    return float(np.linalg.norm(np.asarray(a, np.float64) - b) / np.linalg.norm(b))


def _den(dtype: str, law: NoiseLaw = NoiseLaw()) -> TorchDenoiser:
    extra = {"noise_law": "gamma", "gamma_theta0": law.theta0} if law.gamma else {}
    return TorchDenoiser(TorchAnalyticDenoiser(SMALL_FE, conditioning="level"), dtype=dtype,
                         t_dtype="model" if dtype == "float64" else "float32", noise="numpy",
                         **extra)


def _law(sampler: str) -> NoiseLaw:
    return NoiseLaw("gamma", 0.001) if SAMPLERS[sampler].law == "gamma" else NoiseLaw()


@pytest.mark.parametrize("sampler", sorted(SAMPLERS))
def test_torch_loop_equals_numpy_loop_in_float64(feats, sampler):
    # the same model driven by both loops, same seed: only the order of float64 operations in the
    # two loops may differ (a few ulp per update); allow 100·u per evaluation
    den = _den("float64", _law(sampler))
    plan = make_plan(sampler, logsnr(6, lambda_min=-5.0, lambda_max=6.0), "level", None,
                     law=_law(sampler))
    n = den.frontend.expected_samples(feats.shape[-1])
    a = den.sample(plan, feats[None], n, np.random.default_rng(9))
    b = run_plan(plan, den.predict_noise, feats[None], n, np.random.default_rng(9), dtype=np.float64)
    assert a.dtype == np.float64
    assert rel(a, b) < 100 * U64 * plan.nfe, rel(a, b)


@pytest.mark.parametrize("sampler", sorted(SAMPLERS))
def test_torch_float32_state_close_to_numpy(feats, sampler):
    # float32 torch loop (state in float32) against the numpy loop (state in float64), same
    # float32 model input: they differ by the rounding of the state, about u₃₂ per update, carried
    # through the later steps and amplified by them: DDIM-type steps scale the state by up to
    # √(ᾱ_{t−1}/ᾱ_t) ≈ 9 here, x̂_0 = (x − σ·ε̂)/α divides by α ≥ e⁻⁵, and the 4-step
    # Adams–Bashforth weights of PLMS sum to 6.7 in absolute value. Allow 1000·u₃₂ per evaluation
    # (measured while writing this test: 5 to 220 u₃₂ per evaluation, PLMS the largest).
    den = _den("float32", _law(sampler))
    plan = make_plan(sampler, logsnr(6, lambda_min=-5.0, lambda_max=6.0), "level", None,
                     law=_law(sampler))
    n = den.frontend.expected_samples(feats.shape[-1])
    a = den.sample(plan, feats[None], n, np.random.default_rng(4))
    b = run_plan(plan, den.predict_noise, feats[None], n, np.random.default_rng(4))
    assert a.dtype == np.float32 and rel(a, b) < 1000 * U32 * plan.nfe, rel(a, b)


def test_adaptive_plan_on_the_torch_loop(feats):
    # a module with an estimator: the torch loop re-plans exactly as the numpy loop does
    class WithEstimator(TorchAnalyticDenoiser):
        def estimate_noise_level(self, x_t, features):
            return AnalyticDenoiser(SMALL_FE, conditioning="level").estimate_noise_level(
                x_t.double().cpu().numpy(), features.double().cpu().numpy())

    den = TorchDenoiser(WithEstimator(SMALL_FE, conditioning="level"), dtype="float64",
                        t_dtype="model")
    plan = make_plan("dpmpp-2m", logsnr(6, lambda_min=-5.0, lambda_max=6.0), "level", None,
                     {"replan_at": [0.5]})
    n = den.frontend.expected_samples(feats.shape[-1])
    ta, tb = [], []
    a = den.sample(plan, feats[None], n, np.random.default_rng(2), trace=ta)
    b = run_plan(plan, den.predict_noise, feats[None], n, np.random.default_rng(2),
                 estimate=den.estimate_noise_level, dtype=np.float64, trace=tb)
    assert len(ta) == len(tb) == 1 and ta[0]["replanned"][0]["step"] == 3
    np.testing.assert_allclose(ta[0]["alpha_bar"], tb[0]["alpha_bar"], rtol=1e-12)
    assert rel(a, b) < 100 * U64 * plan.nfe


def test_gamma_draws_with_torch_noise_are_seeded_per_item(feats):
    # noise="torch": per-item generators, so an item's output does not depend on its batch, and
    # the same seed gives the same audio (the adapter's documented contract)
    den = TorchDenoiser(TorchAnalyticDenoiser(SMALL_FE, conditioning="level"), noise="torch",
                        noise_law="gamma", gamma_theta0=0.001)
    plan = make_plan("gamma", logsnr(4, lambda_min=-5.0, lambda_max=6.0), "level", None,
                     law=NoiseLaw("gamma", 0.001))
    n = den.frontend.expected_samples(feats.shape[-1])
    a = den.sample(plan, feats[None], n, np.random.default_rng(8))
    np.testing.assert_array_equal(a, den.sample(plan, feats[None], n, np.random.default_rng(8)))
    pair = den.sample(plan, np.stack([feats, feats[:, ::-1].copy()]), n, np.random.default_rng(8))
    np.testing.assert_allclose(pair[0], a[0], rtol=0, atol=1e-6)
    assert rel(den.sample(plan, feats[None], n, np.random.default_rng(9)), a) > 0.1
