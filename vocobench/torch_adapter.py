"""PyTorch models as vocobench plug-ins.

* :class:`TorchDenoiser` wraps an ``nn.Module`` noise predictor, ``forward(x_t, features, t) -> ε̂``,
  into the Denoiser contract of :mod:`vocobench.contracts`. It can be driven by the built-in numpy
  samplers (``predict_noise``: one host↔device copy per step) or by its own loop, :meth:`sample`,
  which runs the same sampler implementation (:func:`vocobench.samplers.execute`) with the state
  on the device.
* :class:`TorchVocoder` wraps an ``nn.Module`` that runs its own sampling loop into the Vocoder
  contract.

Both take: the module (or a factory returning it, or a checkpoint read by the user's loader),
``device`` (``cpu``, ``cuda[:N]``, ``mps`` or ``auto``), ``dtype`` (``float32``, ``float16``,
``bfloat16``, ``float64``), ``inference_mode``, ``compile`` (``torch.compile``, applied lazily on
the first call so that the timing phase's warm-up calls absorb it), and ``threads``. For timing
they offer ``synchronize()``, ``peak_memory_bytes()``, ``reset_peak_memory()``, ``set_threads(n)``
and ``describe()``.

torch is imported only when one of these objects is built: importing this module does not need it.
"""
from __future__ import annotations

from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

import numpy as np

from .frontend import MelFrontEnd
from .schedules import NoiseSchedule
from .torch_model import (LOOPS, NOISE_SOURCES, SEED_HIGH, TorchModel, dtype_name, import_torch,
                          module_attr, pick_choice, resolve_dtype)

if TYPE_CHECKING:  # pragma: no cover
    import torch


# -- denoiser --------------------------------------------------------------------------------
class TorchDenoiser(TorchModel):
    """A torch noise predictor ``forward(x_t (B, S), features (B, n_mels, F), t (B,)) -> ε̂ (B, S)``
    as a vocobench Denoiser.

    ``sample_rate``, ``frontend``, ``training_schedule`` and ``conditioning`` default to the module's
    attributes of those names. Other parameters as :class:`TorchModel`, plus:

    Parameters
    ----------
    noise : {"numpy", "torch"}
        Source of the Gaussian draws in :meth:`sample`. ``"numpy"``: the run's numpy Generator in
        :func:`vocobench.samplers.run_plan`'s order (x_N, then each stochastic step), so the audio
        matches the numpy path to rounding. ``"torch"``: one ``torch.Generator`` per batch item on
        the device, seeded with ``rng.integers(2**63)``; same seed and device → same audio, and an
        item's audio does not depend on the rest of its batch.
    loop : {"torch", "numpy"}
        :meth:`sample` runs on the device (``"torch"``), or hands over to ``run_plan``.
    t_dtype : str
        dtype of the conditioning ``t`` given to the module, ``"float32"`` by default whatever
        ``dtype`` is (float16 cannot tell training steps apart above 2048 and steps by 0.5 above
        512); ``"model"`` means ``dtype``.
    prediction, noise_law, gamma_theta0 : optional
        The denoiser contract's declarations (ε/x_0/v output; Gaussian or Gamma noise), default:
        the module's attributes of those names, else ``"eps"`` and ``"gaussian"``. A module with
        ``estimate_noise_level(x_t, features)`` makes it available here too.
    """

    def __init__(self, model: Any = None, *, sample_rate: int | None = None,
                 frontend: MelFrontEnd | Mapping[str, Any] | None = None,
                 training_schedule: Any = None, conditioning: str | None = None,
                 noise: str = "numpy", loop: str = "torch", t_dtype: str = "float32",
                 prediction: str | None = None, noise_law: str | None = None,
                 gamma_theta0: float | None = None, **options: Any) -> None:
        super().__init__(model, **options)
        m = self.module
        self.sample_rate = int(module_attr(m, sample_rate, "sample_rate"))
        self.frontend = MelFrontEnd.coerce(module_attr(m, frontend, "frontend"), "torch adapter", "vocoder.options.frontend")
        self.conditioning = pick_choice(conditioning or getattr(m, "conditioning", None),
                                    ("step", "level"), "vocoder.options.conditioning")
        from .contracts import as_training_schedule

        ts = training_schedule if training_schedule is not None else \
            getattr(m, "training_schedule", None)
        self.training_schedule = as_training_schedule(ts, "torch adapter")
        self.noise = pick_choice(noise, NOISE_SOURCES, "vocoder.options.noise")
        self.loop = pick_choice(loop, LOOPS, "vocoder.options.loop")
        self.t_dtype = self.dtype if t_dtype == "model" else \
            resolve_dtype(t_dtype, "vocoder.options.t_dtype")
        self._feats: tuple[np.ndarray, Any] | None = None
        # the denoiser contract's optional declarations, given here or read off the module
        self.prediction = prediction or getattr(m, "prediction", "eps")
        self.noise_law = noise_law or getattr(m, "noise_law", "gaussian")
        self.gamma_theta0 = gamma_theta0 if gamma_theta0 is not None else \
            getattr(m, "gamma_theta0", None)
        if callable(getattr(m, "estimate_noise_level", None)):
            self.estimate_noise_level = self._estimate

    def _call(self, x: "torch.Tensor", feats: "torch.Tensor", t: "torch.Tensor") -> "torch.Tensor":
        torch = import_torch()
        eps = self._forward()(x, feats, t)
        if not isinstance(eps, torch.Tensor) or eps.shape != x.shape:
            got = tuple(eps.shape) if isinstance(eps, torch.Tensor) else type(eps).__name__
            raise ValueError(f"module returned {got}, expected a tensor shaped {tuple(x.shape)}")
        return eps

    def _features(self, features: Any) -> "torch.Tensor":
        """Features on the device in ``dtype``, reused while the caller passes equal arrays."""
        torch = import_torch()
        if isinstance(features, torch.Tensor):
            return features.to(device=self.device, dtype=self.dtype)
        f = np.asarray(features)
        if self._feats is not None and self._feats[0].shape == f.shape \
                and np.array_equal(self._feats[0], f):
            return self._feats[1]
        own = np.array(f, dtype=np.float32)     # private copy: the cache key and the tensor's data
        self._feats = (own, self._tensor(own, self.dtype))
        return self._feats[1]

    def predict_noise(self, x_t: Any, features: Any, t: Any) -> np.ndarray:
        """ε̂ for numpy (or torch) inputs, as a float32 numpy array (float64 when dtype is)."""
        with self._no_grad():
            eps = self._call(self._tensor(x_t, self.dtype), self._features(features),
                             self._tensor(t, self.t_dtype))
            out = eps.detach().to("cpu")
        return out.double().numpy() if self.dtype == import_torch().float64 else out.float().numpy()

    def sample(self, plan: Any, features: np.ndarray, n_samples: int,
               rng: Any, trace: list | None = None) -> np.ndarray:
        """Run a plan (:meth:`_sample`); with one Generator per item, a device out-of-memory error
        halves the batch, says so, and retries: each half gives the audio its items get alone."""
        from .samplers.noise import item_generators

        gens = item_generators(rng, len(features)) if isinstance(rng, (list, tuple)) else None
        saved = [g.bit_generator.state for g in gens] if gens else None
        try:
            return self._sample(plan, features, n_samples, rng, trace)
        except import_torch().OutOfMemoryError:
            batch = len(features)
            if batch < 2 or not gens:
                raise
        import warnings

        for g, state in zip(gens, saved):      # the failed try drew from them: start again
            g.bit_generator.state = state
        torch = import_torch()
        if self.device.type == "cuda":
            torch.cuda.empty_cache()
        half = batch // 2
        warnings.warn(f"out of device memory at batch {batch}: halving to {half} and "
                      f"{batch - half}, then retrying")
        return np.concatenate([self.sample(plan, features[:half], n_samples, rng[:half], trace),
                               self.sample(plan, features[half:], n_samples, rng[half:], trace)])

    def _sample(self, plan: Any, features: np.ndarray, n_samples: int,
                rng: Any, trace: list | None = None) -> np.ndarray:
        """Run a :class:`~vocobench.samplers.StepPlan` with the state on the device.

        ``features`` is ``(B, n_mels, frames)``; returns ``(B, n_samples)`` (float32, float64 when
        dtype is). The sampler's update is the one :func:`vocobench.samplers.run_plan` runs
        (:func:`vocobench.samplers.execute`, one implementation for both), with the state kept in
        float32 (float64 when dtype is) and cast to ``dtype`` for each call of the module.
        Adaptive plans run item by item and append the schedule used to ``trace``. ``rng`` is the
        run's Generator, or one Generator per item: then an item's audio is the audio it gets alone
        (for a module whose output for one item does not depend on the others).
        """
        from .samplers import Env, execute, run_plan
        from .samplers.noise import rng_of_item

        estimate = getattr(self, "estimate_noise_level", None)
        if self.loop == "numpy":
            return run_plan(plan, self.predict_noise, features, n_samples, rng, estimate=estimate,
                            trace=trace)
        torch = import_torch()
        state = torch.promote_types(self.dtype, torch.float32)
        feats_all = np.asarray(features)
        if plan.adaptive and feats_all.shape[0] > 1:
            return np.concatenate([self.sample(plan, feats_all[b:b + 1], n_samples,
                                               rng_of_item(rng, b), trace)
                                   for b in range(feats_all.shape[0])])
        with self._no_grad():
            feats = self._features(feats_all)
            batch = feats.shape[0]
            normal, gamma = self._noise(rng, batch, int(n_samples), state)

            def call(x: "torch.Tensor", c: float) -> "torch.Tensor":
                t = torch.full((batch,), c, dtype=self.t_dtype, device=self.device)
                return self._call(x.to(self.dtype), feats, t).to(state)

            est = None if estimate is None else (lambda x: estimate(x, feats_all))
            out = execute(plan, Env(call, normal, gamma, est, trace)).to("cpu")
        return out.numpy()

    def _noise(self, rng: np.random.Generator, batch: int, n: int, dtype: "torch.dtype"
               ) -> tuple[Callable[[], "torch.Tensor"], Callable[[float], "torch.Tensor"]]:
        """Standard normal and standardised Gamma draws shaped ``(batch, n)`` on the device. Gamma
        draws come from numpy (torch's Gamma sampler takes no generator), standardised in float64:
        the run's Generator (or one per item), or with ``noise="torch"`` one numpy Generator per
        item seeded like that item's torch Generator, itself seeded from the item's own Generator
        when there is one per item."""
        from .samplers.noise import gamma_draws, item_generators, normal_draws, standardised

        torch = import_torch()
        dev = self.device

        def put(a: np.ndarray) -> "torch.Tensor":
            return torch.from_numpy(a).to(dtype).to(dev)

        if self.noise == "numpy":
            return (lambda: put(normal_draws(rng, (batch, n))),
                    lambda k: put(gamma_draws(rng, k, (batch, n))))
        own = item_generators(rng, batch)
        seeds = [int(g.integers(SEED_HIGH)) for g in own] if own is not None else \
            [int(rng.integers(SEED_HIGH)) for _ in range(batch)]
        gens = [torch.Generator(device=dev).manual_seed(s) for s in seeds]
        host = [np.random.default_rng(s) for s in seeds]
        return (lambda: torch.stack([torch.randn(n, generator=g, device=dev, dtype=dtype)
                                     for g in gens]),
                lambda k: put(standardised(np.stack([h.gamma(k, 1.0, n) for h in host]), k)))

    def _estimate(self, x_t: Any, features: Any) -> np.ndarray:
        """ᾱ̂ per item from the module's ``estimate_noise_level`` (offered as
        ``estimate_noise_level`` when the module has one)."""
        with self._no_grad():
            out = self.module.estimate_noise_level(self._tensor(x_t, self.dtype), self._features(features))
        return np.asarray(out.detach().to("cpu").double().numpy() if hasattr(out, "detach") else out,
                          dtype=np.float64)

    def describe(self) -> dict[str, Any]:
        return {**super().describe(), "kind": "denoiser", "noise": self.noise, "loop": self.loop,
                "t_dtype": dtype_name(self.t_dtype), "conditioning": self.conditioning}


# -- end-to-end vocoder ----------------------------------------------------------------------
class TorchVocoder(TorchModel):
    """A torch module with its own sampling loop as a vocobench Vocoder.

    Called as ``vocoder(features (n_mels, F), schedule, rng[, sampler=NAME])``; by default it calls
    ``module(features (1, n_mels, F), betas (N,), generator=g[, sampler=NAME], **options)`` and
    expects ``(1, samples)`` or ``(samples,)`` back. ``features`` are in ``dtype``; ``betas`` in
    float32 (float64 when dtype is); ``g`` is a ``torch.Generator`` on the device seeded with
    ``rng.integers(2**63)``. Give ``call(module, features, betas, generator, sampler, **options)``
    for any other signature.

    Parameters
    ----------
    samplers : list of str, optional
        Sampler names the module implements (default: its ``samplers`` attribute, if any).
    nfe : callable, optional
        ``nfe(schedule, sampler) -> int`` when it is not ``len(schedule)`` (default: the module's
        ``nfe`` attribute, if any).
    """

    def __init__(self, model: Any = None, *, sample_rate: int | None = None,
                 frontend: MelFrontEnd | Mapping[str, Any] | None = None,
                 samplers: Sequence[str] | None = None,
                 nfe: Callable[[NoiseSchedule, str], int] | None = None,
                 call: Callable[..., Any] | None = None, **options: Any) -> None:
        super().__init__(model, **options)
        m = self.module
        self.sample_rate = int(module_attr(m, sample_rate, "sample_rate"))
        self.frontend = MelFrontEnd.coerce(module_attr(m, frontend, "frontend"), "torch adapter", "vocoder.options.frontend")
        names = samplers if samplers is not None else getattr(m, "samplers", None)
        if names is not None:
            self.samplers = [str(s) for s in names]
        fn = nfe if nfe is not None else getattr(m, "nfe", None)
        if fn is not None:
            self.nfe = fn
        self._invoke = call

    def __call__(self, features: Any, schedule: NoiseSchedule, rng: np.random.Generator,
                 sampler: str | None = None, **options: Any) -> np.ndarray:
        torch = import_torch()
        state = torch.promote_types(self.dtype, torch.float32)
        gen = torch.Generator(device=self.device).manual_seed(int(rng.integers(SEED_HIGH)))
        with self._no_grad():
            feats = self._tensor(np.asarray(features, dtype=np.float32)[None], self.dtype)
            betas = self._tensor(np.asarray(schedule.betas), state)
            if self._invoke is not None:
                y = self._invoke(self._forward(), feats, betas, gen, sampler, **options)
            else:
                kw = {"sampler": sampler} if sampler is not None else {}
                y = self._forward()(feats, betas, generator=gen, **kw, **options)
            if not isinstance(y, torch.Tensor):
                raise ValueError(f"module returned {type(y).__name__}, expected a tensor")
            y = y.detach().to("cpu", state)
        if y.ndim == 2 and y.shape[0] == 1:
            y = y[0]
        if y.ndim != 1:
            raise ValueError(f"module returned shape {tuple(y.shape)}, expected (1, samples)")
        return y.numpy()

    def describe(self) -> dict[str, Any]:
        return {**super().describe(), "kind": "vocoder",
                "samplers": list(getattr(self, "samplers", []) or ["native"])}
