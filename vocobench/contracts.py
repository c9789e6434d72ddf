"""The two plug-in contracts, loading users' objects by ``package.module:object``, and the adapter
that turns a denoiser plus a built-in sampler into a vocoder.

**Vocoder** (end to end): attributes ``sample_rate`` (int) and ``frontend`` (a
:class:`~vocobench.frontend.MelFrontEnd` or a dict of its fields); called as
``vocoder(features, schedule, rng)`` with log-mel ``features`` ``(n_mels, frames)``, a
:class:`~vocobench.schedules.NoiseSchedule` and a ``numpy.random.Generator``, it returns a 1-D
waveform of about ``frames * hop_length`` samples. Optional: ``samplers`` (names it implements; it is
then also passed ``sampler=NAME``), ``version`` (str), ``nfe(schedule, sampler)``, ``synchronize()``,
``accepts_batch = True`` (it is then also called with ``features`` ``(B, n_mels, frames)`` and a
list of B generators, one per item, and returns ``(B, samples)``; an item's output must not depend
on the rest of its batch).

**Denoiser** (noise predictor): ``sample_rate``, ``frontend``, ``training_schedule`` (a
NoiseSchedule or a β list), ``conditioning`` (``"step"``: fractional 0-based training step, or
``"level"``: continuous noise level √ᾱ) and ``predict_noise(x_t, features, t)`` with ``x_t``
``(B, samples)``, ``features`` ``(B, n_mels, frames)`` and ``t`` ``(B,)``, returning ε̂ shaped like
``x_t``. Optional: ``version``, ``synchronize()``, and ``sample(plan, features, n_samples, rng)``
to run a :class:`~vocobench.samplers.StepPlan` itself (e.g. on a GPU, see ``torch_adapter``;
it runs any plan with :func:`vocobench.samplers.execute`, and takes ``trace=`` for adaptive plans).

Optional denoiser declarations (defaults keep the plain ε-predicting Gaussian model):
``prediction`` — what ``predict_noise`` returns: ``"eps"`` (ε̂, default), ``"x0"`` (x̂_0) or ``"v"``
(v̂ = √ᾱ·ε − √(1−ᾱ)·x_0, Salimans & Ho 2022); every built-in sampler converts exactly.
``noise_law`` — ``"gaussian"`` (default) or ``"gamma"`` with ``gamma_theta0`` (θ_0 of Nachmani et
al. 2021): a Gamma-trained model runs only with the ``gamma`` sampler, and the reverse is an error.
``estimate_noise_level(x_t, features)`` — ᾱ̂ per batch item, ``(B,)``; enables the samplers'
``replan_at`` option (adaptive schedules, San-Roman et al. 2021).

Outputs may be any array-like, torch tensors included (converted without importing torch).
"""
from __future__ import annotations

import inspect
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Protocol, Sequence, runtime_checkable

import numpy as np

from .arrays import to_numpy
from .errors import InputError
from .targets import resolve  # noqa: F401  (re-exported: plug-ins and metrics share it)
from .frontend import MelFrontEnd
from .params import is_integer
from .samplers import (GAUSSIAN, NoiseLaw, available_samplers, check_law, check_prediction,
                       make_plan, parse_law, run_plan, sampler_nfe)
from .schedules import NoiseSchedule


@runtime_checkable
class Vocoder(Protocol):
    sample_rate: int
    frontend: Any

    def __call__(self, features: np.ndarray, schedule: NoiseSchedule,
                 rng: np.random.Generator) -> Any: ...


@runtime_checkable
class Denoiser(Protocol):
    sample_rate: int
    frontend: Any
    training_schedule: Any
    conditioning: str

    def predict_noise(self, x_t: np.ndarray, features: np.ndarray, t: np.ndarray) -> Any: ...


# -- loading -------------------------------------------------------------------------------
def instantiate(obj: Any, options: Mapping[str, Any], target: str = "") -> Any:
    """Class or factory → instance, with ``options`` as keyword arguments; instances pass through."""
    is_instance = not inspect.isclass(obj) and (hasattr(obj, "predict_noise") or
                                                hasattr(obj, "sample_rate"))
    if is_instance:
        if options:
            raise InputError("options were given but the target is already an instance",
                             field="vocoder.options", value=sorted(options))
        return obj
    if not callable(obj):
        raise InputError("target is neither a class, a factory nor a vocoder/denoiser instance",
                         field="vocoder.target", value=target)
    try:
        inspect.signature(obj).bind(**options)
    except TypeError as e:
        raise InputError(f"options do not fit {target}: {e}", field="vocoder.options",
                         value=sorted(options)) from None
    except ValueError:
        pass
    try:
        return obj(**options)
    except InputError:
        raise
    except Exception as e:          # the user's constructor failed: report its cause on one line
        raise InputError(f"constructing the target raised {type(e).__name__}: {e}",
                         field="vocoder.options" if options else "vocoder.target",
                         value=sorted(options) if options else target) from None


# -- the adapter the sweep drives ----------------------------------------------------------
def as_training_schedule(ts: Any, source: str = "training_schedule") -> NoiseSchedule | None:
    """A declared training schedule: a NoiseSchedule, a β array-like (torch too) or None."""
    if ts is None or isinstance(ts, NoiseSchedule):
        return ts
    try:
        return NoiseSchedule(np.asarray(to_numpy(ts), dtype=np.float64), "training")
    except InputError as e:
        raise InputError(f"invalid training_schedule: {e}", source=source,
                         field="training_schedule") from None


@dataclass
class Plugin:
    """A user's vocoder or denoiser, described and ready to synthesise."""

    obj: Any
    kind: str                       # "vocoder" | "denoiser"
    target: str = ""
    options: dict[str, Any] = field(default_factory=dict)
    sample_rate: int = 0
    frontend: MelFrontEnd | None = None
    training_schedule: NoiseSchedule | None = None
    conditioning: str | None = None
    version: str | None = None
    prediction: str = "eps"                 # what predict_noise returns: eps | x0 | v
    noise_law: NoiseLaw = GAUSSIAN          # forward-process noise the denoiser was trained with

    @classmethod
    def wrap(cls, obj: Any, target: str = "", options: Mapping[str, Any] | None = None) -> "Plugin":
        source = target or type(obj).__name__
        if hasattr(obj, "predict_noise"):
            kind = "denoiser"
        elif callable(obj):
            kind = "vocoder"
        else:
            raise InputError("object has neither predict_noise() nor __call__()", source=source,
                             field="vocoder.target", value=type(obj).__name__)
        sr = getattr(obj, "sample_rate", None)
        if not is_integer(sr) or sr <= 0:
            raise InputError("must declare sample_rate as a positive integer", source=source,
                             field="sample_rate", value=sr)
        fe = MelFrontEnd.coerce(getattr(obj, "frontend", None), source)
        p = cls(obj, kind, target, dict(options or {}), int(sr), fe,
                version=getattr(obj, "version", None))
        if kind == "denoiser":
            p.training_schedule = as_training_schedule(getattr(obj, "training_schedule", None), source)
            p.conditioning = getattr(obj, "conditioning", None)
            if p.conditioning not in ("step", "level"):
                raise InputError("conditioning must be 'step' or 'level'", source=source,
                                 field="conditioning", value=p.conditioning)
            if p.conditioning == "step" and p.training_schedule is None:
                raise InputError("a step-conditioned denoiser must declare training_schedule",
                                 source=source, field="training_schedule")
            p.prediction = check_prediction(getattr(obj, "prediction", "eps"), source)
            p.noise_law = parse_law(getattr(obj, "noise_law", None),
                                    getattr(obj, "gamma_theta0", None), source)
        return p

    def samplers(self) -> list[str]:
        if self.kind == "denoiser":
            return available_samplers(self.noise_law)
        return list(getattr(self.obj, "samplers", None) or ["native"])

    def describe(self) -> dict[str, Any]:
        return {"target": self.target, "options": self.options, "kind": self.kind,
                "version": self.version, "sample_rate": self.sample_rate,
                "frontend": self.frontend.to_dict() if self.frontend else None,
                "conditioning": self.conditioning,
                "training_schedule": (self.training_schedule.describe()
                                      if self.training_schedule is not None else None),
                # declared only when not the default, so cache keys of earlier runs stay valid
                **({"prediction": self.prediction} if self.prediction != "eps" else {}),
                **({"noise_law": self.noise_law.describe()} if self.noise_law.gamma else {})}

    def nfe(self, schedule: NoiseSchedule, sampler: str) -> int:
        if self.kind == "denoiser":
            return sampler_nfe(sampler, len(schedule))
        fn = getattr(self.obj, "nfe", None)
        return int(fn(schedule, sampler)) if fn else len(schedule)

    def synthesizer(self, sampler: str, options: Mapping[str, Any] | None = None
                    ) -> Callable[[np.ndarray, NoiseSchedule, np.random.Generator], Any]:
        """A function ``(features, schedule, rng) -> waveform`` for one sampler."""
        if self.kind == "vocoder":
            if sampler not in self.samplers():
                raise InputError(f"this vocoder implements samplers {self.samplers()}",
                                 field="sweep.samplers", value=sampler)
            if getattr(self.obj, "samplers", None):
                return lambda f, s, r: self.obj(f, s, r, sampler=sampler, **dict(options or {}))
            return self.obj
        den, fe = self.obj, self.frontend
        opts = dict(options or {})
        check_law(sampler, self.noise_law, self.target or None)
        kw = {"prediction": self.prediction, "law": self.noise_law}
        probe = make_plan(sampler, _probe_schedule(), "level", None, opts, **kw)  # validate options
        estimate = getattr(den, "estimate_noise_level", None)
        if probe.adaptive and not callable(estimate):
            raise InputError("replan_at needs a denoiser with estimate_noise_level(x_t, features)",
                             source=self.target or None,
                             field=f"sampler_options.{sampler}.replan_at", value=opts.get("replan_at"))
        own_loop = _drives_plans(den)

        def synth(features: np.ndarray, schedule: NoiseSchedule, rng: np.random.Generator):
            plan = make_plan(sampler, schedule, self.conditioning or "step",
                             self.training_schedule, opts, **kw)
            feats = np.asarray(features)[None]
            n = fe.expected_samples(feats.shape[-1])  # type: ignore[union-attr]
            trace: list | None = [] if plan.adaptive else None
            extra = {"trace": trace} if plan.adaptive else {}
            if own_loop:
                y = den.sample(plan, feats, n, rng, **extra)[0]
            else:
                y = run_plan(plan, den.predict_noise, feats, n, rng, estimate=estimate, **extra)[0]
            synth.last_schedule = trace[0] if trace else None    # type: ignore[attr-defined]
            return y

        synth.last_schedule = None                                 # type: ignore[attr-defined]
        return synth

    def batch_synthesizer(self, sampler: str, options: Mapping[str, Any] | None = None
                          ) -> Callable[[np.ndarray, NoiseSchedule, list], list] | None:
        """``(features, schedule, rngs) -> [waveform, ...]``: one call for ``len(rngs)`` items of
        the same features, each item's noise from its own generator; ``None`` when the plug-in
        cannot (an end-to-end vocoder that does not declare ``accepts_batch = True``) or the
        sampler re-plans per item (``replan_at``)."""
        opts = dict(options or {})
        if self.kind == "vocoder":
            if getattr(self.obj, "accepts_batch", False) is not True:
                return None
            self.synthesizer(sampler, opts)                          # checks the sampler name
            extra = {"sampler": sampler, **opts} if getattr(self.obj, "samplers", None) else {}

            def voc(features: np.ndarray, schedule: NoiseSchedule, rngs: list) -> list:
                batch = np.repeat(np.asarray(features)[None], len(rngs), axis=0)
                return list(self.obj(batch, schedule, list(rngs), **extra))
            return voc
        kw = {"prediction": self.prediction, "law": self.noise_law}
        if make_plan(sampler, _probe_schedule(), "level", None, opts, **kw).adaptive:
            return None
        self.synthesizer(sampler, opts)                              # same checks as one item
        den, fe, own_loop = self.obj, self.frontend, _drives_plans(self.obj)

        def many(features: np.ndarray, schedule: NoiseSchedule, rngs: list) -> list:
            plan = make_plan(sampler, schedule, self.conditioning or "step", self.training_schedule,
                             opts, **kw)
            batch = np.repeat(np.asarray(features)[None], len(rngs), axis=0)
            n = fe.expected_samples(batch.shape[-1])  # type: ignore[union-attr]
            gens = list(rngs)
            y = den.sample(plan, batch, n, gens) if own_loop else \
                run_plan(plan, den.predict_noise, batch, n, gens)
            return list(y)
        return many

    def synchronize(self) -> None:
        fn = getattr(self.obj, "synchronize", None)
        if callable(fn):
            fn()


def _drives_plans(den: Any) -> bool:
    """Whether a denoiser runs sampler plans itself: ``sample(plan, features, n_samples, rng)``."""
    fn = getattr(den, "sample", None)
    if not callable(fn):
        return False
    try:
        return list(inspect.signature(fn).parameters)[:4] == ["plan", "features", "n_samples", "rng"]
    except (TypeError, ValueError):
        return False


def _probe_schedule() -> NoiseSchedule:
    return NoiseSchedule(np.array([0.1, 0.2]), "probe")


def load_plugin(target: str, options: Mapping[str, Any] | None = None,
                search_path: Sequence[str | Path] = ()) -> Plugin:
    """Resolve, instantiate and wrap a user's object named ``package.module:object``."""
    obj = instantiate(resolve(target, search_path), dict(options or {}), target)
    return Plugin.wrap(obj, target, options)
