"""Spectral distances: log-spectral distance (``lsd``), multi-resolution STFT (``mrstft``) and
log-mel L1 (``logmel_l1``). All at the native rate; the reference spectra are computed once in
``prepare``."""
from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import MetricUnavailable
from ..params import Integer, Param, Real, Table
from .base import INF, RESOLUTIONS, Column, Metric
from .dsp import mel_filterbank, stft_power

# Log-spectral distance floor on |X|² (our choice): keeps log(0) out of silent bins.
LSD_POWER_FLOOR = 1e-10
# Yamamoto, Song & Kim 2020, "Parallel WaveGAN", ICASSP: (FFT, shift, window)
# = (1024, 120, 600), (2048, 240, 1200), (512, 50, 240), Hann window — from memory of the paper.
PWG_RESOLUTIONS = ((1024, 120, 600), (2048, 240, 1200), (512, 50, 240))
# Magnitude clamp of the Parallel WaveGAN reference implementation, sqrt(max(|X|², 1e-7))
# (from memory of the public code).
PWG_POWER_CLAMP = 1e-7
# Kong, Kim & Bae 2020, "HiFi-GAN", config V1 at 22.05 kHz: n_fft 1024, hop 256, win 1024,
# 80 mel bands, 0-8000 Hz, log(clamp(mel magnitude, 1e-5)) — from memory of the public config.
HIFIGAN_MEL = {"n_fft": 1024, "hop_length": 256, "win_length": 1024, "n_mels": 80,
               "fmin": 0.0, "fmax": 8000.0}
HIFIGAN_LOG_CLAMP = 1e-5


class LogSpectralDistance(Metric):
    """Log-spectral distance (Gray & Markel 1976, "Distance measures for speech processing",
    IEEE TASSP): per frame √(mean_k (10·log10(P_ref/P_est))²) in dB, then averaged over frames.
    Power spectra from a Hann STFT; floor ``LSD_POWER_FLOOR``."""

    name = "lsd"
    description = "log-spectral distance, dB (STFT power, mean over frames)"
    options_spec = Table("", [
        Param("n_fft", Integer(64, 16384), 2048, "FFT size"),
        Param("hop_length", Integer(1, 16384), 512, "frame shift in samples"),
    ], entry="option")

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("lsd", "dB", False, (0.0, INF), "log-spectral distance"),)

    def _log_power(self, x: np.ndarray) -> np.ndarray:
        p = stft_power(x, self.options["n_fft"], self.options["hop_length"])
        return 10.0 * np.log10(p + LSD_POWER_FLOOR)

    def _prepare(self, reference, sr):
        return self._log_power(reference)

    def _score(self, data, estimate, sr):
        d = data - self._log_power(estimate)
        return {"lsd": float(np.mean(np.sqrt(np.mean(d * d, axis=1))))}

    def _variant(self, sample_rate):
        return {"window": "hann", "center": "reflect", "power_floor": LSD_POWER_FLOOR,
                "formula": "mean_frames sqrt(mean_bins (10 log10 Pref/Pest)^2)"}


class MultiResolutionStft(Metric):
    """Multi-resolution STFT distance of Yamamoto et al. 2020 (Parallel WaveGAN, Sec. 2.3):
    spectral convergence ‖|S|−|Ŝ|‖_F / ‖|S|‖_F and mean |log|S| − log|Ŝ||, each averaged over
    the resolutions; ``mrstft`` is their sum (the auxiliary loss value)."""

    name = "mrstft"
    description = "multi-resolution STFT distance (Parallel WaveGAN): SC + log-magnitude"
    options_spec = Table("", [
        Param("resolutions", RESOLUTIONS, PWG_RESOLUTIONS,
              "[[n_fft, hop_length, win_length], ...] (Hann window)"),
    ], entry="option")

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("mrstft", "sc+ln", False, (0.0, INF),
                       "spectral convergence + log-magnitude"),
                Column("mrstft_sc", "ratio", False, (0.0, INF), "spectral convergence"),
                Column("mrstft_mag", "ln", False, (0.0, INF), "mean |log-magnitude difference|"))

    def _mags(self, x: np.ndarray) -> list[np.ndarray]:
        return [np.sqrt(np.maximum(stft_power(x, n, h, w), PWG_POWER_CLAMP))
                for n, h, w in self.options["resolutions"]]

    def _prepare(self, reference, sr):
        mags = self._mags(reference)
        return [(m, np.log(m), float(np.linalg.norm(m))) for m in mags]

    def _score(self, data, estimate, sr):
        sc, mag = [], []
        for (ref, log_ref, norm), est in zip(data, self._mags(estimate)):
            sc.append(np.linalg.norm(ref - est) / norm)
            mag.append(np.mean(np.abs(log_ref - np.log(est))))
        sc_m, mag_m = float(np.mean(sc)), float(np.mean(mag))
        return {"mrstft": sc_m + mag_m, "mrstft_sc": sc_m, "mrstft_mag": mag_m}

    def _variant(self, sample_rate):
        return {"window": "hann", "center": "reflect", "power_clamp": PWG_POWER_CLAMP,
                "source": "Yamamoto et al. 2020 (Parallel WaveGAN)"}


class LogMelL1(Metric):
    """Mean absolute difference of natural-log mel magnitude spectrograms, the validation "mel
    error" of Kong et al. 2020 (HiFi-GAN). Settings default to HiFi-GAN V1; ``fmax`` is capped at
    the Nyquist frequency."""

    name = "logmel_l1"
    description = "L1 distance of log-mel spectrograms (HiFi-GAN validation mel error)"
    libraries = ("librosa",)
    options_spec = Table("", [
        Param("n_fft", Integer(64, 16384), HIFIGAN_MEL["n_fft"], "FFT size"),
        Param("hop_length", Integer(1, 16384), HIFIGAN_MEL["hop_length"], "frame shift"),
        Param("win_length", Integer(16, 16384), HIFIGAN_MEL["win_length"], "window length"),
        Param("n_mels", Integer(8, 512), HIFIGAN_MEL["n_mels"], "mel bands"),
        Param("fmin", Real(low=0.0), HIFIGAN_MEL["fmin"], "lowest mel edge (Hz)"),
        Param("fmax", Real(low=100.0), HIFIGAN_MEL["fmax"],
              "highest mel edge (Hz), capped at sr/2"),
    ], entry="option", rules=[("win_length", "<=", "n_fft")])

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("logmel_l1", "ln", False, (0.0, INF), "mean |Δ log mel magnitude|"),)

    def _fmax(self, sr: int) -> float:
        return min(self.options["fmax"], sr / 2.0)

    def _log_mel(self, x: np.ndarray, sr: int) -> np.ndarray:
        o = self.options
        if o["fmin"] >= self._fmax(sr):
            raise MetricUnavailable(f"logmel_l1: fmin {o['fmin']} Hz is above sr/2")
        mag = np.sqrt(stft_power(x, o["n_fft"], o["hop_length"], o["win_length"]))
        fb = mel_filterbank(sr, o["n_fft"], o["n_mels"], o["fmin"], self._fmax(sr))
        return np.log(np.maximum(mag @ fb.T, HIFIGAN_LOG_CLAMP))

    def _prepare(self, reference, sr):
        return self._log_mel(reference, sr)

    def _score(self, data, estimate, sr):
        return {"logmel_l1": float(np.mean(np.abs(data - self._log_mel(estimate, sr))))}

    def _variant(self, sample_rate):
        out: dict[str, Any] = {"window": "hann", "center": "reflect", "mel": "librosa slaney",
                               "log_clamp": HIFIGAN_LOG_CLAMP, "magnitude": True}
        if sample_rate:
            out["fmax_used"] = self._fmax(sample_rate)
        return out
