"""Built-in samplers that turn a denoiser (ε̂, x̂_0 or v̂ predictor) into a vocoder.

One module per family, each citing its paper: :mod:`.first_order` (DDPM, DDIM, the Gamma reverse
process), :mod:`.dpm` (DPM-Solver, DPM-Solver++), :mod:`.classic` (Heun/EDM, PNDM, PLMS),
:mod:`.unipc` (UniPC). A sampler
is a *solver* (``nfe(n)``, ``run(walk, x)``) plus its option table; :mod:`.loop` runs it on numpy
or torch arrays alike.

Every sampler walks the schedule's noise levels (its N steps' ᾱ, noisiest first) and ends with
the clean signal. Each level is given to the denoiser as a fractional training step, by linear
interpolation on √ᾱ of the training schedule (Kong et al. 2021, fast sampling), or as the
continuous noise level √ᾱ to denoisers conditioned on it (Chen et al. 2021, WaveGrad).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from ..errors import InputError
from ..params import ListOf, Param, Real, Table
from ..schedules import NoiseSchedule
from .classic import Heun, PseudoLinearMultistep
from .dpm import DPMSolver, DPMSolverPP
from .first_order import DDIM_ETA, LinearSolver, ddim_plan, ddpm_plan
from .levels import (PREDICTIONS, Pred, alpha_bar_of, check_prediction, cond_map, conditioning,
                     fractional_steps, log_snr)
from .loop import Env, StepPlan, execute, run_plan
from .noise import GAUSSIAN, LAWS, NoiseLaw, parse_law
from .unipc import UniPC


@dataclass(frozen=True)
class Sampler:
    """A registered sampler: its solver, its option table and the noise law it assumes."""

    solver: Any
    options: Table
    law: str = "gaussian"


REPLAN = Param("replan_at", ListOf(Real(0, 1, closed="neither", keep_int=True), nonempty=False,
                                   distinct=True), [],
               "re-plan the remaining steps from the denoiser's estimate_noise_level at these "
               "fractions of the steps (San-Roman et al. 2021); [] = off")


def _entry(name: str, solver: Any, doc: str, *params: Param, law: str = "gaussian") -> Sampler:
    return Sampler(solver, Table(f"sampler_options.{name}", [*params, REPLAN], entry="option",
                                 doc=doc), law)


SAMPLERS: dict[str, Sampler] = {
    "ddpm": _entry("ddpm", LinearSolver(ddpm_plan), "DDPM ancestral sampling (Ho et al. 2020)."),
    "ddim": _entry("ddim", LinearSolver(ddim_plan), "DDIM (Song et al. 2021).", Param(
        "eta", Real(low=0, keep_int=True), DDIM_ETA,
        "stochasticity η (0: deterministic; 1: DDPM-like noise, Song et al. 2021 Eq. 16)")),
    "dpm-solver-1": _entry("dpm-solver-1", DPMSolver(1),
                           "DPM-Solver-1 (Lu et al. 2022; equals DDIM); 1 evaluation per step."),
    "dpm-solver-2": _entry("dpm-solver-2", DPMSolver(2),
                           "DPM-Solver-2, single-step (Lu et al. 2022, Alg. 1); NFE 2N − 1."),
    "dpm-solver-3": _entry("dpm-solver-3", DPMSolver(3),
                           "DPM-Solver-3, single-step (Lu et al. 2022, Alg. 2); NFE 3N − 2."),
    "dpmpp-2m": _entry("dpmpp-2m", DPMSolverPP(2),
                       "DPM-Solver++(2M), multistep, data prediction (Lu et al. 2022b); NFE N."),
    "dpmpp-3m": _entry("dpmpp-3m", DPMSolverPP(3),
                       "DPM-Solver++(3M), multistep, data prediction (Lu et al. 2022b), "
                       "DPM-Solver-2 start; NFE N + 1."),
    "heun": _entry("heun", Heun(), "Heun's 2nd-order method, EDM form (Karras et al. 2022, Alg. 1); "
                   "NFE 2N − 1."),
    "pndm": _entry("pndm", PseudoLinearMultistep(prk=True),
                   "PNDM: 3 pseudo Runge–Kutta steps, then PLMS (Liu et al. 2022); "
                   "NFE N + 3·min(3, N − 1)."),
    "plms": _entry("plms", PseudoLinearMultistep(prk=False),
                   "PLMS with Adams–Bashforth warm-up (Liu et al. 2022); NFE N."),
    "unipc": _entry("unipc", UniPC(), "UniPC-2 (UniP-2 predictor, UniC corrector, B(h) = e^{−h} − 1; "
                    "Zhao et al. 2023); NFE N."),
    "gamma": _entry("gamma", LinearSolver(ddpm_plan),
                    "Gamma reverse process (Nachmani et al. 2021), for Gamma-noise denoisers.",
                    law="gamma"),
}
# Options of each built-in sampler, from a config's [sampler_options.<name>] table.
SAMPLER_OPTIONS: dict[str, Table] = {name: s.options for name, s in SAMPLERS.items()}


def available_samplers(law: NoiseLaw | None = None) -> list[str]:
    """Sampler names; with ``law``, those that assume it."""
    return sorted(n for n, s in SAMPLERS.items() if law is None or s.law == law.kind)


def _known(sampler: str) -> Sampler:
    if sampler not in SAMPLERS:
        raise InputError(f"unknown sampler; valid: {', '.join(available_samplers())}",
                         field="sweep.samplers", value=sampler)
    return SAMPLERS[sampler]


def check_law(sampler: str, law: NoiseLaw, source: str | None = None) -> None:
    """A sampler assumes one noise law; running it on a denoiser trained with another is an error."""
    want = _known(sampler).law
    if want != law.kind:
        fits = ", ".join(available_samplers(law)) or "none"
        raise InputError(f"sampler '{sampler}' assumes {want} noise but the denoiser declares "
                         f"noise_law = '{law.kind}' (Nachmani et al. 2021 Gamma diffusion needs its "
                         f"own reverse process); samplers for it: {fits}", source=source,
                         field="sweep.samplers", value=sampler)


def sampler_nfe(sampler: str, steps: int) -> int:
    """Network evaluations of ``sampler`` over a schedule of ``steps`` levels."""
    return int(_known(sampler).solver.nfe(int(steps)))


def steps_within(nfe_of: Callable[[int], int], budget: int) -> int:
    """The most steps ``n`` with ``nfe_of(n) <= budget`` (NFE grows with n), at least 1."""
    n = 1
    while nfe_of(n + 1) <= budget:
        n += 1
    return n


def steps_for_nfe(sampler: str, budget: int) -> int:
    """The most steps of ``sampler`` whose network evaluations do not exceed ``budget``."""
    return steps_within(lambda n: sampler_nfe(sampler, n), budget)


def make_plan(sampler: str, schedule: NoiseSchedule, cond_mode: str,
              training: NoiseSchedule | None, options: Mapping[str, Any] | None = None, *,
              prediction: str = "eps", law: NoiseLaw = GAUSSIAN) -> StepPlan:
    """The plan of ``sampler`` over ``schedule`` for a denoiser conditioned by ``cond_mode``
    (``training``: its training schedule), predicting ``prediction``, trained with ``law``."""
    spec = _known(sampler)
    check_law(sampler, law)
    check_prediction(prediction)
    opts = spec.options.parse(options or {})
    replan = tuple(float(f) for f in opts.pop("replan_at"))
    solver = spec.solver.with_options(**opts) if isinstance(spec.solver, LinearSolver) else spec.solver
    cond, clamped = conditioning(schedule, cond_mode, training)
    r = slice(None, None, -1)                           # run from step N down to 1
    if isinstance(solver, LinearSolver):
        c_x, c_eps, sigma = solver.coefficients(schedule)
    else:
        c_x = c_eps = sigma = np.zeros(len(schedule))
    return StepPlan(c_x[r], c_eps[r], sigma[r], cond[r], clamped, sampler,
                    schedule.alpha_bars[r].copy(), solver, prediction, law,
                    cond_map(cond_mode, training), replan)


__all__ = ["DDIM_ETA", "Env", "GAUSSIAN", "LAWS", "NoiseLaw", "PREDICTIONS", "Pred", "SAMPLERS",
           "SAMPLER_OPTIONS", "Sampler", "StepPlan", "alpha_bar_of", "available_samplers",
           "check_law", "check_prediction", "cond_map", "conditioning", "ddim_plan", "ddpm_plan",
           "execute", "fractional_steps", "log_snr", "make_plan", "parse_law", "run_plan",
           "sampler_nfe", "steps_for_nfe", "steps_within"]
