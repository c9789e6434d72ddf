"""The analytic MMSE demo denoiser of :mod:`vocobench.analytic`, written again in PyTorch.

Same model, separate code: a waveform whose orthonormal MDCT coefficients (sine window, 50 %
overlap, circular extension; Princen & Bradley 1986) are independent Gaussians with variances P
read off the log-mel spectrogram. For ``x_t = a·x_0 + b·ε`` (a = √ᾱ, b = √(1−ᾱ)) the exact MMSE
noise prediction is the Wiener-type gain ``ε̂ = b · Mᵀ diag(1 / (a²P + b²)) M x_t``.

Precision: the MDCT matrix is the module's one buffer, so casting the module to float16/bfloat16
runs the two transforms (the bulk of the work) in that format, as a real half-precision model
would. The prior, the noise-level table and the gain stay in float32 (or float64 when the input is
float64), outside the state dict: they involve ``1 − ᾱ`` near ᾱ = 1, which half precision cannot
represent (keeping such steps in float32 is common mixed-precision practice, no source). The
noise-level table is stored as ``1 − √ᾱ`` so that ``1 − ᾱ = d(2 − d)`` keeps full relative precision
even in float32.

torch is required: importing this module without it raises ImportError with the install command.
"""
from __future__ import annotations

import math

try:
    import torch
    from torch import Tensor, nn
except ImportError as e:  # pragma: no cover - exercised only without torch
    raise ImportError("vocobench.torch_analytic needs PyTorch: pip install torch "
                      "(or pip install 'vocobench[torch]')") from e

from .analytic import DEMO_FRONTEND, MIN_VARIANCE
from .frontend import MelFrontEnd
from .analytic import TRAIN_BETA_END, TRAIN_BETA_START
from .schedules import NoiseSchedule, linear

LOG_BASES = {"ln": math.e, "log10": 10.0, "log2": 2.0}


def mdct_matrix(n: int, dtype: torch.dtype = torch.float64) -> Tensor:
    """``(2n, n)`` MDCT analysis matrix, sine window, orthonormal for 50 % overlap.

    ``X[m] = √(2/n) Σ_k w[k] x[k] cos(π/n (k + ½ + n/2)(m + ½))``, ``w[k] = sin(π(k + ½)/(2n))``
    (Princen & Bradley 1986; the sine window meets their time-domain aliasing cancellation
    condition ``w[k]² + w[k+n]² = 1``).
    """
    k = torch.arange(2 * n, dtype=torch.float64)[:, None]
    m = torch.arange(n, dtype=torch.float64)[None, :]
    window = torch.sin(math.pi * (k + 0.5) / (2 * n))
    basis = math.sqrt(2.0 / n) * window * torch.cos(math.pi / n * (k + 0.5 + n / 2) * (m + 0.5))
    return basis.to(dtype)


def mdct(x: Tensor, basis: Tensor) -> Tensor:
    """Circular MDCT of ``(..., K·n)`` signals → ``(..., K, n)``; frame j spans blocks j, j+1."""
    n = basis.shape[1]
    blocks = x.unflatten(-1, (x.shape[-1] // n, n))
    frames = torch.cat([blocks, torch.roll(blocks, -1, dims=-2)], dim=-1)     # (..., K, 2n)
    return frames @ basis


def imdct(c: Tensor, basis: Tensor) -> Tensor:
    """Transpose (= inverse, M being orthogonal) of :func:`mdct`: ``(..., K, n)`` → ``(..., K·n)``."""
    n = basis.shape[1]
    frames = c @ basis.T                                                      # (..., K, 2n)
    head = frames[..., :n].flatten(-2)
    tail = frames[..., n:].flatten(-2)
    return head + torch.roll(tail, n, dims=-1)          # overlap-add, tail wraps around


class TorchAnalyticDenoiser(nn.Module):
    """Exact MMSE noise predictor under the mel-derived Gaussian MDCT prior, as an ``nn.Module``.

    ``forward(x_t (B, samples), features (B, n_mels, frames), t (B,)) -> ε̂ (B, samples)``.

    Parameters
    ----------
    frontend : dict or MelFrontEnd, optional
        Front-end it is conditioned on (default: :data:`vocobench.analytic.DEMO_FRONTEND`).
    conditioning : {"step", "level"}
        ``t`` is a fractional 0-based training step, or the noise level √ᾱ.
    training_steps : int
        T of its linear training schedule (Ho et al. 2020: 1e-4 to 0.02 over T = 1000).
    """

    version = "analytic-torch-1"

    def __init__(self, frontend: dict | MelFrontEnd | None = None, conditioning: str = "step",
                 training_steps: int = 1000) -> None:
        super().__init__()
        fe = MelFrontEnd.coerce(frontend, default=DEMO_FRONTEND)
        self.frontend = fe
        self.sample_rate = fe.sample_rate
        self.conditioning = conditioning
        scale = 1000 / training_steps
        self.training_schedule: NoiseSchedule = linear(
            training_steps, TRAIN_BETA_START * scale, min(TRAIN_BETA_END * scale, 0.999))
        n = fe.hop_length
        self.register_buffer("basis", mdct_matrix(n, torch.float32))
        self._host = self._constants(fe, n)             # float64, CPU; see module docstring
        levels = torch.as_tensor(self.training_schedule.noise_levels, dtype=torch.float64)
        self._host["one_minus_level"] = 1 - levels      # 1 − √ᾱ at training steps 0..T−1
        self._cache: dict[tuple[str, torch.dtype], dict[str, Tensor]] = {}
        self._prior_key: Tensor | None = None
        self._prior: Tensor | None = None

    @staticmethod
    def _constants(fe: MelFrontEnd, n: int) -> dict[str, Tensor]:
        mel = torch.as_tensor(fe.mel_basis(), dtype=torch.float64)          # (n_mels, n_fft/2+1)
        f_stft = torch.arange(mel.shape[1], dtype=torch.float64) * fe.sample_rate / fe.n_fft
        f_mdct = (torch.arange(n, dtype=torch.float64) + 0.5) * fe.sample_rate / (2 * n)
        lo = (torch.searchsorted(f_stft, f_mdct) - 1).clamp(0, len(f_stft) - 2)
        w = (f_mdct - f_stft[lo]) / (f_stft[lo + 1] - f_stft[lo])
        interp = torch.zeros(n, mel.shape[1], dtype=torch.float64)          # STFT bin → MDCT bin
        rows = torch.arange(n)
        interp[rows, lo] = 1 - w
        interp[rows, lo + 1] += w
        win = torch.hann_window(fe.win_length, periodic=True, dtype=torch.float64)
        cover = mel.sum(dim=0)
        covered = torch.nonzero(cover > 1e-3 * cover.max()).flatten()
        # bins outside [fmin, fmax] take the next covered bin's level (flat extension)
        pos = torch.searchsorted(covered, torch.arange(cover.numel())).clamp_max(covered.numel() - 1)
        return {"mel": mel, "band": mel.sum(dim=1).clamp_min(1e-12),
                "cover": cover.clamp_min(1e-12), "interp": interp,
                "win_power": (win ** 2).sum().reshape(()), "nearest": covered[pos]}

    def _consts(self, device: torch.device, dtype: torch.dtype) -> dict[str, Tensor]:
        key = (str(device), dtype)
        if key not in self._cache:
            self._cache[key] = {k: (v if k == "nearest" else v.to(dtype)).to(device)
                                for k, v in self._host.items()}
        return self._cache[key]

    # -- the model ----------------------------------------------------------------------------
    def prior_variance(self, features: Tensor) -> Tensor:
        """MDCT coefficient variances ``(..., frames, hop)`` from log-mel ``(..., n_mels, frames)``."""
        fe = self.frontend
        wd = _work_dtype(features.dtype)
        c = self._consts(features.device, wd)
        x = features.to(wd)
        if fe.normalize is not None:
            mean, std = fe.normalize
            x = x * std + mean
        mel = torch.exp(x * math.log(LOG_BASES[fe.log]))                    # undo the log
        if fe.floor_mode == "add":
            mel = (mel - fe.floor).clamp_min(0.0)
        density = mel / c["band"][:, None]                                  # per-bin |X|^p
        spec = torch.einsum("jf,...jt->...ft", c["mel"], density) / c["cover"][:, None]
        spec = spec[..., c["nearest"], :]
        power = spec ** (2.0 / fe.power) / c["win_power"]                  # white-noise variance
        p = (c["interp"] @ power).transpose(-1, -2)                          # (..., F, n)
        n_frames = p.shape[-2]
        frames = (torch.arange(n_frames, device=p.device) + 1).clamp_max(n_frames - 1)
        return p[..., frames, :].clamp_min(MIN_VARIANCE)   # MDCT frame k sits under mel frame k+1

    def _prior_cached(self, features: Tensor) -> Tensor:
        """Prior of the last features tensor seen: the samplers pass the same tensor object at
        every step (features are not modified in place between steps)."""
        if self._prior_key is not features:       # holding the tensor keeps its storage ours
            self._prior_key, self._prior = features, self.prior_variance(features)
        return self._prior

    def noise_variance(self, t: Tensor, dtype: torch.dtype) -> Tensor:
        """``1 − ᾱ`` for conditioning values ``t`` (fractional step, or √ᾱ), in ``dtype``."""
        if self.conditioning == "level":     # in t's own precision first: 1 − √ᾱ cancels
            level = t.to(torch.promote_types(t.dtype, dtype)).clamp(0.0, 1.0)
            return ((1 - level) * (1 + level)).to(dtype)
        t = t.to(dtype)
        d_table = self._consts(t.device, dtype)["one_minus_level"]
        T = d_table.shape[0]
        s = t.clamp(0.0, T - 1.0)                       # np.interp clamps outside the range too
        i0 = s.floor().long().clamp_max(T - 2) if T > 1 else s.floor().long()
        i1 = (i0 + 1).clamp_max(T - 1)
        w = s - i0.to(dtype)
        d = d_table[i0] * (1 - w) + d_table[i1] * w      # linear in √ᾱ, as vocobench.analytic
        return d * (2 - d)

    def forward(self, x_t: Tensor, features: Tensor, t: Tensor) -> Tensor:
        n = self.frontend.hop_length
        if x_t.shape[-1] % n:
            raise ValueError(f"signal length {x_t.shape[-1]} is not a multiple of the hop {n}")
        wd = _work_dtype(x_t.dtype)
        p = self._prior_cached(features)[..., : x_t.shape[-1] // n, :]
        b2 = self.noise_variance(t, wd)[:, None, None]
        gain = b2.sqrt() / ((1 - b2) * p + b2)
        basis = self.basis.to(x_t.dtype)
        coef = mdct(x_t, basis)
        return imdct((gain * coef.to(wd)).to(x_t.dtype), basis)


def _work_dtype(dtype: torch.dtype) -> torch.dtype:
    return torch.promote_types(dtype, torch.float32)


def make(frontend: dict | None = None, conditioning: str = "step",
         training_steps: int = 1000) -> TorchAnalyticDenoiser:
    """Factory, for ``TorchDenoiser(make)`` or a config target."""
    return TorchAnalyticDenoiser(frontend, conditioning, training_steps)


__all__ = ["TorchAnalyticDenoiser", "mdct_matrix", "mdct", "imdct", "make"]
