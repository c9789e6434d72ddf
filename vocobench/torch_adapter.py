"""PyTorch models as vocobench plug-ins.

* :class:`TorchDenoiser` wraps an ``nn.Module`` noise predictor, ``forward(x_t, features, t) -> ε̂``,
  into the Denoiser contract of :mod:`vocobench.contracts`. It can be driven by the built-in numpy
  samplers (``predict_noise``: one host↔device copy per step) or by its own loop, :meth:`sample`,
  which runs the same :class:`~vocobench.samplers.StepPlan` coefficients with the state on the
  device.
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

import hashlib
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

import numpy as np

from .errors import InputError
from .frontend import MelFrontEnd
from .params import is_integer
from .schedules import NoiseSchedule

if TYPE_CHECKING:  # pragma: no cover
    import torch

INSTALL_HINT = "PyTorch is needed for this vocoder: pip install torch (or pip install 'vocobench[torch]')"
DTYPES = ("float32", "float16", "bfloat16", "float64")
DEVICES = ("cpu", "cuda", "cuda:N", "mps", "auto")
NOISE_SOURCES = ("numpy", "torch")
LOOPS = ("torch", "numpy")
SEED_HIGH = 2 ** 63           # per-item torch seeds are rng.integers(SEED_HIGH)

Loader = Callable[[Path, Any], Any]     # loader(checkpoint_path, module_or_None) -> module | None


def _torch():
    """The torch module, or an InputError that says how to install it."""
    try:
        import torch
    except ImportError:
        raise InputError(INSTALL_HINT, field="vocoder.target") from None
    return torch


# -- option parsing --------------------------------------------------------------------------
def resolve_device(device: Any = "cpu") -> "torch.device":
    """``"cpu"``, ``"cuda"``, ``"cuda:N"``, ``"mps"``, ``"auto"`` or a ``torch.device``, checked."""
    torch = _torch()
    if device == "auto":
        device = "cuda" if torch.cuda.is_available() else \
            "mps" if torch.backends.mps.is_available() else "cpu"
    try:
        dev = torch.device(device)
    except (RuntimeError, TypeError, ValueError):
        raise InputError(f"device must be one of {', '.join(DEVICES)}", field="vocoder.options.device",
                         value=device) from None
    if dev.type == "cuda":
        if not torch.cuda.is_available():
            raise InputError(f"CUDA was asked for but torch.cuda.is_available() is False "
                             f"(torch {torch.__version__}, built for CUDA {torch.version.cuda})",
                             field="vocoder.options.device", value=str(device))
        if dev.index is not None and dev.index >= torch.cuda.device_count():
            raise InputError(f"only {torch.cuda.device_count()} CUDA device(s) visible",
                             field="vocoder.options.device", value=str(device))
    elif dev.type == "mps":
        if not torch.backends.mps.is_available():
            raise InputError("MPS was asked for but torch.backends.mps.is_available() is False",
                             field="vocoder.options.device", value=str(device))
    elif dev.type != "cpu":
        raise InputError(f"device must be one of {', '.join(DEVICES)}", field="vocoder.options.device",
                         value=str(device))
    return dev


def resolve_dtype(dtype: Any = "float32", field: str = "vocoder.options.dtype") -> "torch.dtype":
    """``"float32"``, ``"float16"``, ``"bfloat16"``, ``"float64"`` or the torch dtype itself."""
    torch = _torch()
    names = {name: getattr(torch, name) for name in DTYPES}
    if isinstance(dtype, torch.dtype) and dtype in names.values():
        return dtype
    if isinstance(dtype, str) and dtype in names:
        return names[dtype]
    raise InputError(f"dtype must be one of {', '.join(DTYPES)}", field=field, value=str(dtype))


def _dtype_name(dtype: "torch.dtype") -> str:
    return str(dtype).removeprefix("torch.")


def _choice(value: Any, valid: Sequence[str], field: str) -> str:
    if value not in valid:
        raise InputError(f"must be one of {', '.join(valid)}", field=field, value=value)
    return value


def build_module(model: Any = None, *, loader: Loader | str | None = None,
                 checkpoint: str | Path | None = None,
                 model_options: Mapping[str, Any] | None = None) -> "torch.nn.Module":
    """The user's module, from an instance, a factory, and/or a checkpoint.

    ``model`` is an ``nn.Module``, a factory called with ``model_options``, or a
    ``"package.module:object"`` / ``"file.py:object"`` string naming either. With ``checkpoint``,
    ``loader(path, module_or_None)`` — the user's own code — returns the loaded module or ``None``
    after loading into the given one in place; without a loader the checkpoint must be a state dict,
    read with ``torch.load(weights_only=True)`` (no pickled code is run).
    """
    torch = _torch()
    from .contracts import resolve

    if isinstance(model, str):
        model = resolve(model)
    if isinstance(loader, str):
        loader = resolve(loader)
    module = model
    if model is not None and not isinstance(model, torch.nn.Module):
        if not callable(model):
            raise InputError("model must be an nn.Module or a factory returning one",
                             field="vocoder.options.model", value=type(model).__name__)
        try:
            module = model(**dict(model_options or {}))
        except TypeError as e:
            raise InputError(f"model factory failed: {e}", field="vocoder.options.model_options",
                             value=sorted(model_options or {})) from None
    elif model_options:
        raise InputError("model_options need a factory, not a module instance",
                         field="vocoder.options.model_options", value=sorted(model_options))
    if checkpoint is not None:
        path = Path(checkpoint)
        if not path.is_file():
            raise InputError("checkpoint file not found", field="vocoder.options.checkpoint",
                             value=str(path))
        if loader is not None:
            try:
                out = loader(path, module)
            except Exception as e:  # the user's loader failed: report its cause
                raise InputError(f"loader failed: {type(e).__name__}: {e}",
                                 field="vocoder.options.loader", value=str(path)) from None
            module = out if out is not None else module
        elif module is None:
            raise InputError("a checkpoint without a model needs a loader",
                             field="vocoder.options.loader")
        else:
            state = torch.load(path, map_location="cpu", weights_only=True)
            try:
                module.load_state_dict(state)
            except Exception as e:
                raise InputError(f"checkpoint does not fit the module: {e}",
                                 field="vocoder.options.checkpoint", value=str(path)) from None
    elif loader is not None:
        raise InputError("a loader was given without a checkpoint", field="vocoder.options.checkpoint")
    if module is None:
        raise InputError("give a module, a factory, or a checkpoint with a loader",
                         field="vocoder.options.model")
    if not isinstance(module, torch.nn.Module):
        raise InputError("the model must be a torch.nn.Module", field="vocoder.options.model",
                         value=type(module).__name__)
    return module


def weights_fingerprint(module: "torch.nn.Module") -> str:
    """SHA-256 (first 12 hex digits) of the state dict's names, dtypes, shapes and bytes."""
    h = hashlib.sha256()
    for name, t in sorted(module.state_dict().items()):
        t = t.detach().cpu().contiguous().reshape(-1)
        h.update(f"{name}:{t.dtype}:{tuple(t.shape)};".encode())
        h.update(t.view(_torch().uint8).numpy().tobytes())
    return h.hexdigest()[:12]


# -- shared machinery ------------------------------------------------------------------------
class TorchModel:
    """Device, dtype, compilation, threads and timing hooks shared by both adapters.

    Parameters
    ----------
    model : nn.Module, factory, or "module:object" string
        See :func:`build_module`.
    device : str
        ``"cpu"``, ``"cuda"``, ``"cuda:N"``, ``"mps"`` or ``"auto"``.
    dtype : str
        ``"float32"`` (default), ``"float16"``, ``"bfloat16"`` or ``"float64"``: the module's
        floating parameters and the inputs it gets are cast to it.
    compile : bool
        Wrap the module with ``torch.compile(**compile_options)`` on the *first call*, not here, so
        the sweep's warm-up calls take the compilation. Pass ``compile_options={"dynamic": True}``
        to avoid one recompilation per input length.
    inference_mode : bool
        Run under ``torch.inference_mode()`` (default) or ``torch.no_grad()``.
    threads : int, optional
        ``torch.set_num_threads(threads)`` (process-wide), see :meth:`set_threads`.
    loader, checkpoint, model_options
        See :func:`build_module`.
    version : str, optional
        Recorded in the run manifest; default: the module's ``version`` attribute, else its class
        name and weights fingerprint.
    """

    def __init__(self, model: Any = None, *, device: Any = "cpu", dtype: Any = "float32",
                 compile: bool = False, compile_options: Mapping[str, Any] | None = None,
                 inference_mode: bool = True, threads: int | None = None,
                 loader: Loader | str | None = None, checkpoint: str | Path | None = None,
                 model_options: Mapping[str, Any] | None = None, version: str | None = None) -> None:
        self.device = resolve_device(device)
        self.dtype = resolve_dtype(dtype)
        self.compile = bool(compile)
        self.compile_options = dict(compile_options or {})
        self.inference_mode = bool(inference_mode)
        self.checkpoint = None if checkpoint is None else str(checkpoint)
        module = build_module(model, loader=loader, checkpoint=checkpoint,
                              model_options=model_options)
        module.eval()
        self.version = version or getattr(module, "version", None) or \
            f"{type(module).__qualname__}-{weights_fingerprint(module)}"
        self.module = module.to(device=self.device, dtype=self.dtype)
        self._compiled: Any = None
        self._threads: int | None = None
        if threads is not None:
            self.set_threads(threads)

    # -- calling the module -----------------------------------------------------------------
    def _forward(self) -> Callable[..., Any]:
        """The module, compiled on first use when ``compile`` is set."""
        if not self.compile:
            return self.module
        if self._compiled is None:
            self._compiled = _torch().compile(self.module, **self.compile_options)
        return self._compiled

    def _no_grad(self):
        torch = _torch()
        return torch.inference_mode() if self.inference_mode else torch.no_grad()

    def _tensor(self, a: Any, dtype: "torch.dtype") -> "torch.Tensor":
        torch = _torch()
        if isinstance(a, torch.Tensor):
            return a.to(device=self.device, dtype=dtype)
        a = np.asarray(a)
        if a.dtype == np.float64 and self.device.type == "mps":   # MPS has no float64
            a = a.astype(np.float32)
        return torch.as_tensor(a, device=self.device).to(dtype)

    # -- timing hooks ------------------------------------------------------------------------
    def synchronize(self) -> None:
        """Wait for queued device work: ``torch.cuda.synchronize`` / ``torch.mps.synchronize``."""
        torch = _torch()
        if self.device.type == "cuda":
            torch.cuda.synchronize(self.device)
        elif self.device.type == "mps":
            torch.mps.synchronize()

    def peak_memory_bytes(self) -> int | None:
        """Peak device memory allocated by torch since the last reset (CUDA); None elsewhere."""
        if self.device.type == "cuda":
            return int(_torch().cuda.max_memory_allocated(self.device))
        return None

    def reset_peak_memory(self) -> None:
        if self.device.type == "cuda":
            _torch().cuda.reset_peak_memory_stats(self.device)

    def set_threads(self, n: int) -> None:
        """``torch.set_num_threads(n)``: intra-op CPU threads, for the whole process."""
        if not is_integer(n) or n <= 0:
            raise InputError("threads must be a positive integer", field="vocoder.options.threads",
                             value=n)
        _torch().set_num_threads(int(n))
        self._threads = int(n)

    def describe(self) -> dict[str, Any]:
        torch = _torch()
        d: dict[str, Any] = {
            "framework": "torch", "torch": torch.__version__, "device": str(self.device),
            "dtype": _dtype_name(self.dtype), "compile": self.compile,
            "compile_options": dict(self.compile_options), "inference_mode": self.inference_mode,
            "threads": torch.get_num_threads(), "threads_requested": self._threads,
            "module": f"{type(self.module).__module__}.{type(self.module).__qualname__}",
            "parameters": int(sum(p.numel() for p in self.module.parameters())),
            "checkpoint": self.checkpoint, "version": self.version}
        if self.device.type == "cuda":
            d["device_name"] = torch.cuda.get_device_name(self.device)
            d["cuda"] = torch.version.cuda
        return d


def _module_attr(module: Any, given: Any, name: str) -> Any:
    value = given if given is not None else getattr(module, name, None)
    if value is None:
        raise InputError(f"'{name}' must be given, or be an attribute of the module",
                         field=f"vocoder.options.{name}", value=type(module).__name__)
    return value


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
    """

    def __init__(self, model: Any = None, *, sample_rate: int | None = None,
                 frontend: MelFrontEnd | Mapping[str, Any] | None = None,
                 training_schedule: Any = None, conditioning: str | None = None,
                 noise: str = "numpy", loop: str = "torch", t_dtype: str = "float32",
                 **options: Any) -> None:
        super().__init__(model, **options)
        m = self.module
        self.sample_rate = int(_module_attr(m, sample_rate, "sample_rate"))
        self.frontend = MelFrontEnd.coerce(_module_attr(m, frontend, "frontend"), "torch adapter", "vocoder.options.frontend")
        self.conditioning = _choice(conditioning or getattr(m, "conditioning", None),
                                    ("step", "level"), "vocoder.options.conditioning")
        from .contracts import as_training_schedule

        ts = training_schedule if training_schedule is not None else \
            getattr(m, "training_schedule", None)
        self.training_schedule = as_training_schedule(ts, "torch adapter")
        self.noise = _choice(noise, NOISE_SOURCES, "vocoder.options.noise")
        self.loop = _choice(loop, LOOPS, "vocoder.options.loop")
        self.t_dtype = self.dtype if t_dtype == "model" else \
            resolve_dtype(t_dtype, "vocoder.options.t_dtype")
        self._feats: tuple[np.ndarray, Any] | None = None

    def _call(self, x: "torch.Tensor", feats: "torch.Tensor", t: "torch.Tensor") -> "torch.Tensor":
        torch = _torch()
        eps = self._forward()(x, feats, t)
        if not isinstance(eps, torch.Tensor) or eps.shape != x.shape:
            got = tuple(eps.shape) if isinstance(eps, torch.Tensor) else type(eps).__name__
            raise ValueError(f"module returned {got}, expected a tensor shaped {tuple(x.shape)}")
        return eps

    def _features(self, features: Any) -> "torch.Tensor":
        """Features on the device in ``dtype``, reused while the caller passes equal arrays."""
        torch = _torch()
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
        return out.double().numpy() if self.dtype == _torch().float64 else out.float().numpy()

    def sample(self, plan: Any, features: np.ndarray, n_samples: int,
               rng: np.random.Generator) -> np.ndarray:
        """Run a :class:`~vocobench.samplers.StepPlan` with the state on the device.

        ``features`` is ``(B, n_mels, frames)``; returns ``(B, n_samples)`` (float32, float64 when
        dtype is). Same update as :func:`vocobench.samplers.run_plan`,
        ``x ← c_x·x − c_ε·ε̂ + σ·z``, with the state kept in float32 (float64 when dtype is) and
        cast to ``dtype`` for each call of the module.
        """
        if self.loop == "numpy":
            from .samplers import run_plan

            return run_plan(plan, self.predict_noise, features, n_samples, rng)
        torch = _torch()
        state = torch.promote_types(self.dtype, torch.float32)
        c_x = [float(v) for v in plan.c_x]
        c_eps = [float(v) for v in plan.c_eps]
        sigma = [float(v) for v in plan.sigma]
        with self._no_grad():
            feats = self._features(np.asarray(features))
            batch = feats.shape[0]
            draw = self._noise(rng, batch, int(n_samples), state)
            x = draw()
            for n in range(plan.nfe):
                t = torch.full((batch,), float(plan.cond[n]), dtype=self.t_dtype, device=self.device)
                eps = self._call(x.to(self.dtype), feats, t).to(state)
                x = torch.add(x * c_x[n], eps, alpha=-c_eps[n])    # not in place: ε̂ may alias x
                if sigma[n] > 0:
                    x = torch.add(x, draw(), alpha=sigma[n])
            out = x.to("cpu")
        return out.numpy()

    def _noise(self, rng: np.random.Generator, batch: int, n: int,
               dtype: "torch.dtype") -> Callable[[], "torch.Tensor"]:
        torch = _torch()
        dev = self.device
        if self.noise == "numpy":
            return lambda: torch.from_numpy(rng.standard_normal((batch, n))).to(dtype).to(dev)
        gens = [torch.Generator(device=dev).manual_seed(int(rng.integers(SEED_HIGH)))
                for _ in range(batch)]
        return lambda: torch.stack([torch.randn(n, generator=g, device=dev, dtype=dtype)
                                    for g in gens])

    def describe(self) -> dict[str, Any]:
        return {**super().describe(), "kind": "denoiser", "noise": self.noise, "loop": self.loop,
                "t_dtype": _dtype_name(self.t_dtype), "conditioning": self.conditioning}


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
        self.sample_rate = int(_module_attr(m, sample_rate, "sample_rate"))
        self.frontend = MelFrontEnd.coerce(_module_attr(m, frontend, "frontend"), "torch adapter", "vocoder.options.frontend")
        names = samplers if samplers is not None else getattr(m, "samplers", None)
        if names is not None:
            self.samplers = [str(s) for s in names]
        fn = nfe if nfe is not None else getattr(m, "nfe", None)
        if fn is not None:
            self.nfe = fn
        self._invoke = call

    def __call__(self, features: Any, schedule: NoiseSchedule, rng: np.random.Generator,
                 sampler: str | None = None, **options: Any) -> np.ndarray:
        torch = _torch()
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
