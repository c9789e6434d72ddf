"""An analytic mel-conditioned denoiser: the demo and reference model, not a product voice.

Prior: a waveform whose orthonormal MDCT coefficients (sine window, 50 % overlap, circular
extension; Princen & Bradley 1986) are independent zero-mean Gaussians, with variances P read off
the mel-spectrogram (a Gaussian "noise-excited" speech model). Diffusion ``x_t = a·x_0 + b·ε`` with
``a = √ᾱ``, ``b = √(1−ᾱ)`` then has the exact minimum-mean-square-error noise prediction

    ε̂ = E[ε | x_t] = b · Mᵀ diag(1 / (a²P + b²)) M x_t,

a Wiener-type gain in the MDCT domain (M orthogonal, so this is exact, not an approximation).
Run through the built-in samplers it is a true diffusion model under its own prior, in about a
millisecond per step. It sounds like whispered speech (no pitch, no phase from the data): use it to
exercise the harness, never as a quality reference for a real vocoder.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from .frontend import MelFrontEnd
from .schedules import linear

DEMO_FRONTEND = MelFrontEnd(sample_rate=22050, n_fft=1024, win_length=1024, hop_length=256,
                            n_mels=80, fmin=0.0, fmax=8000.0)
# Training schedule of the demo model: linear β over T = 1000 (Ho et al. 2020) ending at 0.02, but
# starting at 1e-6 as WaveGrad does (Chen et al. 2021; value from memory) rather than 1e-4: the last
# DDPM step returns E[x_0 | x_1], which shrinks components whose variance is not ≫ β_1, and speech
# has many quiet MDCT coefficients.
TRAIN_BETA_START = 1e-6
TRAIN_BETA_END = 0.02
MIN_VARIANCE = 1e-10          # −100 dB re full scale: floor of the prior's coefficient variance
# Noise-level estimation: the log-likelihood is searched on a grid of half log-SNR values λ, then
# refined by bounded Brent minimisation between the grid neighbours of the best point (our choice:
# the grid spans ᾱ from 2e-9 to 1 − 2e-9, far beyond any training schedule's range).
ESTIMATE_LAMBDA_RANGE = (-10.0, 10.0)
ESTIMATE_GRID = 81
ESTIMATE_XTOL = 1e-9          # in λ


@lru_cache(maxsize=8)
def mdct_basis(n: int) -> np.ndarray:
    """``(2n, n)`` MDCT analysis matrix with the sine window (orthonormal with 50 % overlap)."""
    k = np.arange(2 * n)[:, None]
    m = np.arange(n)[None, :]
    window = np.sin(np.pi * (k + 0.5) / (2 * n))
    return np.sqrt(2.0 / n) * window * np.cos(np.pi / n * (k + 0.5 + n / 2) * (m + 0.5))


def mdct(x: np.ndarray, n: int) -> np.ndarray:
    """Circular MDCT of ``(..., K·n)`` signals → ``(..., K, n)`` coefficients."""
    k = x.shape[-1] // n
    blocks = x.reshape(x.shape[:-1] + (k, n))           # frame j = blocks j and j+1 (circular)
    basis = mdct_basis(n)
    return blocks @ basis[:n] + np.roll(blocks, -1, axis=-2) @ basis[n:]


def imdct(c: np.ndarray, n: int) -> np.ndarray:
    """Inverse (transpose) of :func:`mdct`: ``(..., K, n)`` → ``(..., K·n)``."""
    k = c.shape[-2]
    frames = c @ mdct_basis(n).T                         # (..., K, 2n)
    head = frames[..., :n].reshape(c.shape[:-2] + (k * n,))
    tail = frames[..., n:].reshape(c.shape[:-2] + (k * n,))
    return head + np.roll(tail, n, axis=-1)


class AnalyticDenoiser:
    """Exact MMSE noise predictor under the mel-derived Gaussian MDCT prior (see module doc).

    Parameters
    ----------
    frontend : dict or MelFrontEnd, optional
        The front-end it is conditioned on (default: 22.05 kHz, 80 mels, hop 256).
    conditioning : {"step", "level"}
        Whether ``t`` is a fractional 0-based training step or the noise level √ᾱ.
    training_steps : int
        Length T of its linear training schedule (1e-6 to 0.02 over T = 1000, scaled by 1000/T).
    """

    version = "analytic-1"

    def __init__(self, frontend: dict | MelFrontEnd | None = None, conditioning: str = "step",
                 training_steps: int = 1000) -> None:
        fe = MelFrontEnd.coerce(frontend, default=DEMO_FRONTEND)
        self.frontend = fe
        self.sample_rate = fe.sample_rate
        self.conditioning = conditioning
        scale = 1000 / training_steps
        self.training_schedule = linear(training_steps, TRAIN_BETA_START * scale,
                                        min(TRAIN_BETA_END * scale, 0.999))
        self._basis = fe.mel_basis()
        self._win_power = float(np.sum(np.hanning(fe.win_length + 1)[:-1] ** 2))
        self._cache: tuple[np.ndarray, np.ndarray] | None = None  # (features, prior) last seen
        self._levels = self.training_schedule.noise_levels        # √ᾱ at training steps

    def prior_variance(self, features: np.ndarray) -> np.ndarray:
        """MDCT coefficient variances ``(..., frames, hop)`` from log-mel ``(..., n_mels, frames)``."""
        fe, m = self.frontend, self._basis
        mel = fe.to_linear_mel(features)                                    # (..., n_mels, F)
        density = mel / np.maximum(m.sum(axis=1), 1e-12)[:, None]          # per-bin |X|^p
        cover = m.sum(axis=0)                                               # (n_fft/2+1,)
        covered = np.flatnonzero(cover > 1e-3 * cover.max())
        spec = np.einsum("jf,...jt->...ft", m, density)[..., covered, :] / cover[covered, None]
        # bins outside [fmin, fmax] take the nearest covered bin's level (flat extension), so
        # the prior still fills the band the mel-spectrogram does not describe
        nearest = covered[np.clip(np.searchsorted(covered, np.arange(cover.size)), 0, covered.size - 1)]
        spec = spec[..., np.searchsorted(covered, nearest), :]
        power = spec ** (2.0 / fe.power) / self._win_power                  # white-noise variance
        f_stft = np.arange(m.shape[1]) * fe.sample_rate / fe.n_fft
        n = fe.hop_length
        f_mdct = (np.arange(n) + 0.5) * fe.sample_rate / (2 * n)
        lo = np.searchsorted(f_stft, f_mdct) - 1
        lo = np.clip(lo, 0, len(f_stft) - 2)
        w = (f_mdct - f_stft[lo]) / (f_stft[lo + 1] - f_stft[lo])
        p = power[..., lo, :] * (1 - w)[:, None] + power[..., lo + 1, :] * w[:, None]
        p = np.swapaxes(p, -1, -2)                                          # (..., F, n)
        frames = np.minimum(np.arange(p.shape[-2]) + 1, p.shape[-2] - 1)   # MDCT frame k ~ mel k+1
        return np.maximum(p[..., frames, :], MIN_VARIANCE)

    def _prior_cached(self, features: np.ndarray) -> np.ndarray:
        """Prior of the last features seen: a sampler passes the same features at every step."""
        if self._cache is None or self._cache[0].shape != features.shape \
                or not np.array_equal(self._cache[0], features):
            self._cache = (features.copy(), self.prior_variance(features))
        return self._cache[1]

    def alpha_bar(self, t: np.ndarray) -> np.ndarray:
        t = np.asarray(t, dtype=np.float64)
        if self.conditioning == "level":
            return np.clip(t, 0.0, 1.0) ** 2
        return np.interp(t, np.arange(self._levels.size), self._levels) ** 2

    def predict_noise(self, x_t: np.ndarray, features: np.ndarray, t: np.ndarray) -> np.ndarray:
        x = np.asarray(x_t, dtype=np.float64)
        n = self.frontend.hop_length
        if x.shape[-1] % n:
            raise ValueError(f"signal length {x.shape[-1]} is not a multiple of the hop {n}")
        p = self._prior_cached(np.asarray(features))[..., : x.shape[-1] // n, :]
        ab = self.alpha_bar(t)[:, None, None]
        gain = np.sqrt(1 - ab) / (ab * p + (1 - ab))
        return imdct(gain * mdct(x, n), n).astype(np.float32)

    def estimate_noise_level(self, x_t: np.ndarray, features: np.ndarray) -> np.ndarray:
        """Maximum-likelihood ᾱ of each ``x_t`` (B, samples) under the prior (San-Roman et al.
        2021 estimate the noise level with a network; this model knows its law exactly).

        The MDCT coefficients of ``x_t = √ᾱ·x_0 + √(1−ᾱ)·ε`` are independent N(0, v_j) with
        v_j = ᾱ·P_j + 1 − ᾱ, so the log-likelihood is −½·Σ_j (log v_j + c_j²/v_j); it is maximised
        over λ = ½·log(ᾱ/(1−ᾱ)) (grid search, then Brent on the bracketing interval).
        """
        from scipy.optimize import minimize_scalar

        x = np.asarray(x_t, dtype=np.float64)
        n = self.frontend.hop_length
        p = self._prior_cached(np.asarray(features))[..., : x.shape[-1] // n, :]
        c2 = mdct(x, n) ** 2
        p = np.broadcast_to(p, c2.shape).reshape(c2.shape[0], -1)
        c2 = c2.reshape(c2.shape[0], -1)
        grid = np.linspace(*ESTIMATE_LAMBDA_RANGE, ESTIMATE_GRID)
        out = np.empty(x.shape[0])
        for b in range(x.shape[0]):
            def nll(lam: float) -> float:
                ab = 0.5 * (1.0 + np.tanh(lam))
                v = ab * p[b] + (1.0 - ab)
                return 0.5 * float(np.sum(np.log(v) + c2[b] / v))

            k = int(np.argmin([nll(g) for g in grid]))
            lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, grid.size - 1)]
            lam = minimize_scalar(nll, bounds=(lo, hi), method="bounded",
                                  options={"xatol": ESTIMATE_XTOL}).x
            out[b] = 0.5 * (1.0 + np.tanh(lam))
        return out

    def sample_prior(self, features: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Exact draw from the prior (for tests): ``Mᵀ(√P·w)``."""
        p = self.prior_variance(np.asarray(features))
        return imdct(np.sqrt(p) * rng.standard_normal(p.shape), self.frontend.hop_length)
