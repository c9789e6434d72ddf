"""Worked example: a torch noise predictor behind vocobench's torch adapter.

The module is :class:`vocobench.torch_analytic.TorchAnalyticDenoiser` (the analytic demo denoiser in
torch); swap in your own ``nn.Module`` with ``forward(x_t, features, t) -> eps`` and the same
attributes, or pass ``sample_rate=``, ``frontend=``, ``training_schedule=`` and ``conditioning=``
to :class:`~vocobench.torch_adapter.TorchDenoiser`.
"""
from __future__ import annotations

from vocobench.torch_adapter import TorchDenoiser
from vocobench.torch_analytic import TorchAnalyticDenoiser


def make(device: str = "cpu", dtype: str = "float32", compile: bool = False,
         noise: str = "numpy", threads: int | None = None,
         conditioning: str = "step") -> TorchDenoiser:
    """The config's ``[vocoder].target``; ``options`` arrive here as keyword arguments."""
    return TorchDenoiser(TorchAnalyticDenoiser, model_options={"conditioning": conditioning},
                         device=device, dtype=dtype, compile=compile, noise=noise,
                         threads=threads)
