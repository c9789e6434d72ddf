"""The shared part of the PyTorch plug-ins: device and dtype resolution, building the module
(object, factory or checkpoint), weights fingerprint, and :class:`TorchModel` (inference mode,
lazy ``torch.compile``, synchronisation, peak memory, threads, description).

torch is imported only when one of these objects is built: importing this module does not need it.
"""
from __future__ import annotations

import hashlib
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

import numpy as np

from .errors import InputError
from .params import is_integer

if TYPE_CHECKING:  # pragma: no cover
    import torch

INSTALL_HINT = "PyTorch is needed for this vocoder: pip install torch (or pip install 'vocobench[torch]')"
DTYPES = ("float32", "float16", "bfloat16", "float64")
DEVICES = ("cpu", "cuda", "cuda:N", "mps", "auto")
NOISE_SOURCES = ("numpy", "torch")
LOOPS = ("torch", "numpy")
SEED_HIGH = 2 ** 63           # per-item torch seeds are rng.integers(SEED_HIGH)

Loader = Callable[[Path, Any], Any]     # loader(checkpoint_path, module_or_None) -> module | None


def import_torch():
    """The torch module, or an InputError that says how to install it."""
    try:
        import torch
    except ImportError:
        raise InputError(INSTALL_HINT, field="vocoder.target") from None
    return torch


# -- option parsing --------------------------------------------------------------------------
def resolve_device(device: Any = "cpu") -> "torch.device":
    """``"cpu"``, ``"cuda"``, ``"cuda:N"``, ``"mps"``, ``"auto"`` or a ``torch.device``, checked."""
    torch = import_torch()
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
    torch = import_torch()
    names = {name: getattr(torch, name) for name in DTYPES}
    if isinstance(dtype, torch.dtype) and dtype in names.values():
        return dtype
    if isinstance(dtype, str) and dtype in names:
        return names[dtype]
    raise InputError(f"dtype must be one of {', '.join(DTYPES)}", field=field, value=str(dtype))


def dtype_name(dtype: "torch.dtype") -> str:
    return str(dtype).removeprefix("torch.")


def pick_choice(value: Any, valid: Sequence[str], field: str) -> str:
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
    torch = import_torch()
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
        h.update(t.view(import_torch().uint8).numpy().tobytes())
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
            self._compiled = import_torch().compile(self.module, **self.compile_options)
        return self._compiled

    def _no_grad(self):
        torch = import_torch()
        return torch.inference_mode() if self.inference_mode else torch.no_grad()

    def _tensor(self, a: Any, dtype: "torch.dtype") -> "torch.Tensor":
        torch = import_torch()
        if isinstance(a, torch.Tensor):
            return a.to(device=self.device, dtype=dtype)
        a = np.asarray(a)
        if a.dtype == np.float64 and self.device.type == "mps":   # MPS has no float64
            a = a.astype(np.float32)
        return torch.as_tensor(a, device=self.device).to(dtype)

    # -- timing hooks ------------------------------------------------------------------------
    def synchronize(self) -> None:
        """Wait for queued device work: ``torch.cuda.synchronize`` / ``torch.mps.synchronize``."""
        torch = import_torch()
        if self.device.type == "cuda":
            torch.cuda.synchronize(self.device)
        elif self.device.type == "mps":
            torch.mps.synchronize()

    def peak_memory_bytes(self) -> int | None:
        """Peak device memory allocated by torch since the last reset (CUDA); None elsewhere."""
        if self.device.type == "cuda":
            return int(import_torch().cuda.max_memory_allocated(self.device))
        return None

    def reset_peak_memory(self) -> None:
        if self.device.type == "cuda":
            import_torch().cuda.reset_peak_memory_stats(self.device)

    def set_threads(self, n: int) -> None:
        """``torch.set_num_threads(n)``: intra-op CPU threads, for the whole process."""
        if not is_integer(n) or n <= 0:
            raise InputError("threads must be a positive integer", field="vocoder.options.threads",
                             value=n)
        import_torch().set_num_threads(int(n))
        self._threads = int(n)

    def describe(self) -> dict[str, Any]:
        torch = import_torch()
        d: dict[str, Any] = {
            "framework": "torch", "torch": torch.__version__, "device": str(self.device),
            "dtype": dtype_name(self.dtype), "compile": self.compile,
            "compile_options": dict(self.compile_options), "inference_mode": self.inference_mode,
            "threads": torch.get_num_threads(), "threads_requested": self._threads,
            "module": f"{type(self.module).__module__}.{type(self.module).__qualname__}",
            "parameters": int(sum(p.numel() for p in self.module.parameters())),
            "checkpoint": self.checkpoint, "version": self.version}
        if self.device.type == "cuda":
            d["device_name"] = torch.cuda.get_device_name(self.device)
            d["cuda"] = torch.version.cuda
        return d


def module_attr(module: Any, given: Any, name: str) -> Any:
    value = given if given is not None else getattr(module, name, None)
    if value is None:
        raise InputError(f"'{name}' must be given, or be an attribute of the module",
                         field=f"vocoder.options.{name}", value=type(module).__name__)
    return value
