"""High-order samplers on Gaussian data, where the exact ODE solution is closed-form
(tests/gaussian_case.py): convergence, measured order against NFE, NFE accounting, and exact
conversion between the ε, x_0 and v parameterisations."""
from __future__ import annotations

import math

import numpy as np
import pytest

from gaussian_case import D, FirstDraw, denoise, flow, gaussian_denoiser, predictor
from vocobench.samplers import SAMPLERS, make_plan, run_plan, sampler_nfe, steps_for_nfe
from vocobench.schedules import karras, logsnr

ODE_SAMPLERS = ["ddim", "dpm-solver-1", "dpm-solver-2", "dpm-solver-3", "dpmpp-2m", "dpmpp-3m",
                "heun", "pndm", "plms", "unipc"]
# The theoretical global order of each solver: DDIM = DPM-Solver-1 is first order (Lu et al. 2022,
# Sec. 4.1), DPM-Solver-k is order k (Lu et al. 2022, Thm. 3.2), DPM-Solver++(2M) is second order
# (Lu et al. 2022b, Sec. 4.2), 3M third, Heun second (Karras et al. 2022, Sec. 3), UniPC-2 third
# (Zhao et al. 2023, Sec. 3.2: the UniC corrector raises UniP-p's order p by one).
ORDER = {"ddim": 1, "dpm-solver-1": 1, "dpm-solver-2": 2, "dpm-solver-3": 3, "dpmpp-2m": 2,
         "dpmpp-3m": 3, "heun": 2, "unipc": 3}
# Tolerance on the measured order: the least-squares slope of log error against log NFE over
# N = 64, 128, 256 grid points; terms of the next order still add a few hundredths to a few
# tenths there (measured while writing this test: largest deviation 0.09, for DPM-Solver-3).
ORDER_TOLERANCE = 0.25
SIGMA_RANGE = (math.exp(-3.0), math.exp(3.0))    # σ = √((1−ᾱ)/ᾱ) from e⁻³ to e³: λ ∈ [−3, 3]
BATCH = 16
X_N = np.random.default_rng(1).standard_normal((BATCH, D))


def _error(sampler: str, n: int, spacing=karras) -> tuple[int, float]:
    """Largest relative error over the batch against the exact ODE from ᾱ_N to ᾱ_1 followed by
    the exact E[x_0 | x] (the last step of every solver here denoises to the clean signal)."""
    sched = spacing(n, sigma_min=SIGMA_RANGE[0], sigma_max=SIGMA_RANGE[1]) if spacing is karras \
        else spacing(n, lambda_min=-3.0, lambda_max=3.0)
    plan = make_plan(sampler, sched, "level", None)
    out = run_plan(plan, gaussian_denoiser, np.zeros((BATCH, 1, 1)), D, FirstDraw(X_N),
                   dtype=np.float64)
    ab = sched.alpha_bars
    ref = denoise(flow(X_N, ab[-1], ab[0]), ab[0])
    return plan.nfe, float(np.max(np.linalg.norm(out - ref, axis=1) / np.linalg.norm(ref, axis=1)))


@pytest.mark.parametrize("sampler", sorted(ORDER))
def test_measured_order_against_nfe(sampler):
    nfe, err = np.array([_error(sampler, n) for n in (64, 128, 256)]).T
    slope = -np.polyfit(np.log(nfe), np.log(err), 1)[0]
    assert abs(slope - ORDER[sampler]) <= ORDER_TOLERANCE, (sampler, slope, err)


@pytest.mark.parametrize("sampler", ODE_SAMPLERS)
@pytest.mark.parametrize("spacing", [karras, logsnr], ids=["karras", "logsnr"])
def test_every_ode_sampler_converges_to_the_exact_solution(sampler, spacing):
    # consistency: the error falls at every doubling of the steps, at least as a first-order
    # method's would (8× fewer steps → 8× the error; allow 6×). PLMS/PNDM end with their own
    # multistep step to ᾱ = 1, which differs from E[x_0 | x] by O(h·σ_1), so they count as first
    # order against this reference.
    errs = [_error(sampler, n, spacing)[1] for n in (16, 32, 64, 128)]
    assert all(b < a for a, b in zip(errs, errs[1:])), errs
    assert errs[-1] < errs[0] / 6 and errs[-1] < 0.02, errs


def test_high_order_beats_first_order_at_equal_nfe():
    # the reason these solvers exist (Lu et al. 2022b, Sec. 6; Karras et al. 2022, Fig. 2): at
    # equal evaluations their error is below DDIM's. The multistep solvers and DPM-Solver-3 lead
    # by 3× from 16 evaluations; Heun and DPM-Solver-2 spend two evaluations per step and on
    # this problem need about 32 to lead (by 2×; measured while writing this test: 2.3× and 3.9×).
    for budget, factor, samplers in ((16, 3, ("dpmpp-2m", "dpmpp-3m", "dpm-solver-3", "unipc")),
                                     (32, 2, ("heun", "dpm-solver-2"))):
        ddim = _error("ddim", budget)[1]
        for sampler in samplers:
            n = steps_for_nfe(sampler, budget)
            nfe, err = _error(sampler, n)
            assert budget - 2 <= nfe <= budget and err < ddim / factor, (sampler, err, ddim)


def test_dpm_solver_1_is_ddim():
    # Lu et al. 2022, Sec. 4.1: DPM-Solver-1 is the DDIM update (Song et al. 2021, Eq. 12, σ = 0)
    sched = logsnr(12, lambda_min=-4.0, lambda_max=4.0)
    a, b = (run_plan(make_plan(s, sched, "level", None), gaussian_denoiser, np.zeros((4, 1, 1)), D,
                     FirstDraw(X_N[:4]), dtype=np.float64) for s in ("ddim", "dpm-solver-1"))
    np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-12)


class Counting:
    def __init__(self) -> None:
        self.calls = 0

    def __call__(self, x, f, t):
        self.calls += 1
        return gaussian_denoiser(x, f, t)


@pytest.mark.parametrize("sampler", sorted(SAMPLERS))
@pytest.mark.parametrize("n", [1, 2, 3, 7])
def test_nfe_is_the_number_of_network_calls(sampler, n):
    # Karras et al. 2022, Alg. 1: N Heun steps cost 2N − 1 evaluations (no correction on the last);
    # DPM-Solver-k costs k per step (Lu et al. 2022, Alg. 1–2); multistep methods one per step
    count = Counting()
    plan = make_plan(sampler, logsnr(n, lambda_min=-4.0, lambda_max=4.0), "level", None,
                     law=_law(sampler))
    run_plan(plan, count, np.zeros((2, 1, 1)), D, np.random.default_rng(0), dtype=np.float64)
    assert count.calls == plan.nfe == sampler_nfe(sampler, n)
    if sampler == "heun":
        assert plan.nfe == 2 * n - 1


def _law(sampler):
    from vocobench.samplers import NoiseLaw

    return NoiseLaw("gamma", 0.01) if SAMPLERS[sampler].law == "gamma" else NoiseLaw()


@pytest.mark.parametrize("sampler", sorted(s for s in SAMPLERS if SAMPLERS[s].law == "gaussian"))
@pytest.mark.parametrize("kind", ["x0", "v"])
def test_every_sampler_converts_predictions_exactly(sampler, kind):
    # a model predicting x_0 or v = √ᾱ·ε − √(1−ᾱ)·x_0 (Salimans & Ho 2022) of the same posterior
    # is the same model: every sampler must give the ε-model's output, up to rounding
    sched = logsnr(6, lambda_min=-4.0, lambda_max=4.0)
    out = {}
    for k in ("eps", kind):
        plan = make_plan(sampler, sched, "level", None, prediction=k)
        out[k] = run_plan(plan, predictor(k), np.zeros((BATCH, 1, 1)), D, np.random.default_rng(3),
                          dtype=np.float64)
    np.testing.assert_allclose(out[kind], out["eps"], rtol=1e-8, atol=1e-9)
