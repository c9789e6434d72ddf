"""A DiffWave-architecture noise predictor, written from the paper, behind vocobench's torch adapter.

Kong, Ping, Huang, Zhao & Catanzaro 2021, "DiffWave: A Versatile Diffusion Model for Audio
Synthesis" (ICLR), section 3 and figure 2: a stack of residual layers with bidirectional dilated
convolutions, a gated tanh·sigmoid unit, a diffusion-step embedding added to every layer, a
mel-spectrogram conditioner upsampled to the sample rate by transposed 2-D convolutions, and skip
connections summed into a two-layer output head. The weights are random (seeded): the network
costs what a trained DiffWave costs, but its audio is noise. It is the realistic cost model of the
benchmarks (``bench/bench_neural.py``, ``bench/gpu_check.py``), not a vocoder to listen to.

Nothing is downloaded. :func:`make` is the config's ``[vocoder].target``; :func:`save_random_weights`
and :func:`make` with ``checkpoint=`` show how a state dict is loaded (see README.md).
"""
from __future__ import annotations

import math
from pathlib import Path

import torch
from torch import Tensor, nn
from torch.nn import functional as F

from vocobench.frontend import MelFrontEnd
from vocobench.schedules import linear
from vocobench.torch_adapter import TorchDenoiser

# DiffWave_BASE of Kong et al. 2021, section 5 (vocoder task): C = 64 residual channels,
# L = 30 layers, dilation cycle [1, 2, ..., 512] (10 layers), T = 50 diffusion steps with β linear
# from 1e-4 to 0.05; 2.64 M parameters (their table 1).
RESIDUAL_CHANNELS = 64
LAYERS = 30
DILATION_CYCLE = 10
TRAIN_STEPS = 50
BETA_START, BETA_END = 1e-4, 0.05
# Diffusion-step embedding, section 3 / appendix: 128-dimensional sinusoidal code
# [sin(10^(0·4/63) t), ..., sin(10^(63·4/63) t), cos(...)], then two fully connected layers of
# 512 units with Swish; each residual layer adds its own projection of it.
EMBED_DIM, EMBED_HIDDEN = 128, 512
EMBED_EXPONENT = 4.0
# Conditioner upsampler: two 2-D transposed convolutions, each stretching time 16× (16 · 16 = 256 =
# hop), kernel 3 × 32, followed by leaky ReLU with slope 0.4 (values from memory of the paper's
# released configuration).
UPSAMPLE_STRIDE, UPSAMPLE_KERNEL, LEAKY_SLOPE = 16, 32, 0.4
KERNEL = 3                     # bidirectional dilated convolution, kernel size 3 (section 3)
# Front-end of the LJ Speech model: 22.05 kHz, 80 mel bands, hop 256, FFT and window 1024
# (section 5, "we use 80-band mel spectrogram ... FFT size 1024, hop size 256, window size 1024").
FRONTEND = MelFrontEnd(sample_rate=22050, n_fft=1024, win_length=1024, hop_length=256, n_mels=80,
                       fmin=0.0, fmax=8000.0)
SEED = 2021                    # the random weights' seed


def step_embedding(t: Tensor, dim: int = EMBED_DIM) -> Tensor:
    """Sinusoidal code of (possibly fractional) steps ``t (B,)`` → ``(B, dim)`` (section 3)."""
    half = dim // 2
    freqs = 10.0 ** (torch.arange(half, device=t.device, dtype=torch.float32)
                     * EMBED_EXPONENT / (half - 1))
    arg = t.float()[:, None] * freqs[None, :]
    return torch.cat([torch.sin(arg), torch.cos(arg)], dim=1)


class ResidualLayer(nn.Module):
    """One residual layer (figure 2): dilated conv + step and conditioner terms, gate, 1×1 out."""

    def __init__(self, channels: int, n_mels: int, dilation: int) -> None:
        super().__init__()
        self.dilated = nn.Conv1d(channels, 2 * channels, KERNEL, padding=dilation, dilation=dilation)
        self.step = nn.Linear(EMBED_HIDDEN, channels)
        self.cond = nn.Conv1d(n_mels, 2 * channels, 1)
        self.out = nn.Conv1d(channels, 2 * channels, 1)

    def forward(self, x: Tensor, cond: Tensor, emb: Tensor) -> tuple[Tensor, Tensor]:
        step = torch.cat([self.step(e[None]) for e in emb])     # item by item, see DiffWave
        y = self.dilated(x + step[:, :, None]) + self.cond(cond)
        gate, filt = y.chunk(2, dim=1)
        y = self.out(torch.sigmoid(gate) * torch.tanh(filt))
        residual, skip = y.chunk(2, dim=1)
        return (x + residual) / math.sqrt(2.0), skip


class DiffWave(nn.Module):
    """``forward(x_t (B, S), mel (B, n_mels, F), t (B,)) -> ε̂ (B, S)``, S = F · hop.

    ``t`` is the 0-based training step (fractional steps interpolate the sinusoidal code, as the
    paper's fast sampling does). Attributes read by :class:`~vocobench.torch_adapter.TorchDenoiser`:
    ``sample_rate``, ``frontend``, ``training_schedule``, ``conditioning``.
    """

    def __init__(self, residual_channels: int = RESIDUAL_CHANNELS, layers: int = LAYERS,
                 dilation_cycle: int = DILATION_CYCLE, seed: int | None = SEED) -> None:
        super().__init__()
        if seed is not None:
            torch.manual_seed(seed)       # reproducible random weights (the fork keeps it local)
        fe = FRONTEND
        self.frontend, self.sample_rate, self.conditioning = fe, fe.sample_rate, "step"
        self.training_schedule = linear(TRAIN_STEPS, BETA_START, BETA_END)
        c = residual_channels
        self.input = nn.Conv1d(1, c, 1)
        self.embed = nn.Sequential(nn.Linear(EMBED_DIM, EMBED_HIDDEN), nn.SiLU(),
                                   nn.Linear(EMBED_HIDDEN, EMBED_HIDDEN), nn.SiLU())
        pad = (UPSAMPLE_KERNEL - UPSAMPLE_STRIDE) // 2
        self.upsample = nn.ModuleList(
            nn.ConvTranspose2d(1, 1, (3, UPSAMPLE_KERNEL), stride=(1, UPSAMPLE_STRIDE), padding=(1, pad))
            for _ in range(2))
        self.layers = nn.ModuleList(ResidualLayer(c, fe.n_mels, 2 ** (i % dilation_cycle))
                                    for i in range(layers))
        self.skip = nn.Conv1d(c, c, 1)
        self.head = nn.Conv1d(c, 1, 1)

    def upsample_mel(self, mel: Tensor) -> Tensor:
        """``(1, n_mels, F)`` → ``(1, n_mels, F · 256)`` (two 16× transposed convolutions)."""
        y = mel[:, None]
        for up in self.upsample:
            y = F.leaky_relu(up(y), LEAKY_SLOPE)
        return y[:, 0]

    def forward(self, x_t: Tensor, mel: Tensor, t: Tensor) -> Tensor:
        # Batch invariance: an item's ε̂ must not depend on the rest of its batch, so that batched
        # synthesis gives the same audio as one item at a time. Matrix products and transposed
        # convolutions pick their kernels by batch size on CPU (their last bits then differ), so
        # the cheap per-call parts (step code, conditioner) run item by item and the input 1×1
        # convolution from one channel is written as a broadcast product.
        x = F.relu(x_t[:, None] * self.input.weight[None, :, 0, 0, None]
                   + self.input.bias[None, :, None])
        cond = torch.cat([self.upsample_mel(m[None]) for m in mel])[..., : x_t.shape[-1]]
        code = step_embedding(t).to(x.dtype)
        emb = torch.cat([self.embed(c[None]) for c in code])
        skips = torch.zeros_like(x)
        for layer in self.layers:
            x, s = layer(x, cond, emb)
            skips = skips + s
        y = F.relu(self.skip(skips / math.sqrt(len(self.layers))))
        return self.head(y)[:, 0]


def build(residual_channels: int = RESIDUAL_CHANNELS, layers: int = LAYERS,
          dilation_cycle: int = DILATION_CYCLE) -> DiffWave:
    """Factory for ``TorchDenoiser(model=build, model_options=...)``: random weights, fixed seed."""
    with torch.random.fork_rng(devices=[]):
        return DiffWave(residual_channels, layers, dilation_cycle)


def save_random_weights(path: str | Path, **model_options: int) -> Path:
    """Write the random network's state dict, as a trained checkpoint would be shipped."""
    path = Path(path)
    torch.save(build(**model_options).state_dict(), path)
    return path


def make(device: str = "cpu", dtype: str = "float32", threads: int | None = None,
         noise: str = "torch", compile: bool = False, checkpoint: str | None = None,
         residual_channels: int = RESIDUAL_CHANNELS, layers: int = LAYERS,
         dilation_cycle: int = DILATION_CYCLE) -> TorchDenoiser:
    """The config's ``[vocoder].target``; ``options`` arrive here as keyword arguments.

    With ``checkpoint`` the state dict is read with ``torch.load(weights_only=True)`` into a freshly
    built module (no pickled code runs); :class:`TorchDenoiser` then calls ``eval()`` and moves the
    module to ``device`` and ``dtype``.
    """
    return TorchDenoiser(build, checkpoint=checkpoint, device=device, dtype=dtype, threads=threads,
                         noise=noise, compile=compile,
                         model_options={"residual_channels": residual_channels, "layers": layers,
                                        "dilation_cycle": dilation_cycle})
