"""F0 error (``f0``): RMSE in cents, gross pitch error and voicing decision error.

F0 is tracked with YIN (de Cheveigné & Kawahara 2002, "YIN, a fundamental frequency estimator
for speech and music", JASA), ``librosa.yin``; pYIN is ~50x slower and was not used. YIN gives no
voicing decision, so a frame counts as voiced when (a) its energy is within ``silence_db`` of the
signal's own loudest frame and (b) the normalised autocorrelation of the frame at the YIN period
is at least ``voicing_threshold`` (a periodicity test; the threshold is our choice).

* ``f0_rmse_cents``: √mean((1200·log2(f̂/f))²) over frames voiced in both signals.
* ``f0_gpe``: fraction of those frames with |f̂/f − 1| > 20 % (gross pitch error, Rabiner et al.
  1976, "A comparative performance study of several pitch detection algorithms", IEEE TASSP;
  definition as in Nakatani et al. 2008, Speech Communication).
* ``f0_vde``: fraction of all frames whose voicing decisions differ (Nakatani et al. 2008).

``f0_rmse_cents`` and ``f0_gpe`` are NaN when no frame is voiced in both signals (``f0_vde`` is
still defined); MetricUnavailable only when the reference has no voiced frame at all.
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..errors import MetricUnavailable
from ..params import Param, Real, Table
from .base import INF, Column, Metric
from .dsp import frame_energy_db, frame_signal, ms_to_samples

CENTS_PER_OCTAVE = 1200.0
GPE_RATIO = 0.2                 # gross error: > 20 % off (Rabiner et al. 1976)
# Absolute-threshold step of de Cheveigné & Kawahara 2002 (the librosa default value).
YIN_TROUGH_THRESHOLD = 0.1


class PitchError(Metric):
    """F0 RMSE (cents), GPE and VDE between YIN tracks of reference and estimate."""

    name = "f0"
    description = "F0 RMSE in cents (frames voiced in both), GPE and voicing decision error"
    libraries = ("librosa",)
    options_spec = Table("", [
        Param("fmin", Real(20.0, 1000.0), 50.0, "lowest F0 searched (Hz)"),
        Param("fmax", Real(40.0, 4000.0), 600.0, "highest F0 searched (Hz)"),
        Param("hop_ms", Real(1.0, 50.0), 10.0, "frame shift (ms)"),
        Param("voicing_threshold", Real(0.0, 1.0), 0.5,
              "min normalised autocorrelation at the F0 period for a voiced frame"),
        Param("silence_db", Real(high=0.0), -40.0,
              "frames this far below the signal's loudest frame are unvoiced"),
    ], entry="option", rules=[("fmin", "<", "fmax")])

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("f0_rmse_cents", "cents", False, (0.0, INF),
                       "F0 RMSE over frames voiced in both (NaN if none)"),
                Column("f0_gpe", "fraction", False, (0.0, 1.0),
                       "gross pitch error rate (>20 % off) over frames voiced in both"),
                Column("f0_vde", "fraction", False, (0.0, 1.0), "voicing decision error rate"),
                Column("f0_frames", "frames", None, (0.0, INF), "frames voiced in both"))

    def _sizes(self, sr: int) -> tuple[int, int]:
        if self.options["fmax"] > sr / 2:
            raise MetricUnavailable(f"f0: fmax {self.options['fmax']} Hz is above sr/2")
        # Two periods of the lowest F0 fit in a frame (YIN needs the lag range plus a window).
        frame = 1 << int(math.ceil(math.log2(2 * math.ceil(sr / self.options["fmin"]) + 2)))
        return frame, ms_to_samples(self.options["hop_ms"], sr)

    def track(self, x: np.ndarray, sr: int) -> tuple[np.ndarray, np.ndarray]:
        """(f0 in Hz, voiced flag) per frame (centred frames, zero padding as librosa.yin)."""
        import librosa

        frame, hop = self._sizes(sr)
        x = np.asarray(x, dtype=np.float64)
        f0 = librosa.yin(x, fmin=self.options["fmin"], fmax=self.options["fmax"], sr=sr,
                         frame_length=frame, hop_length=hop, center=True,
                         trough_threshold=YIN_TROUGH_THRESHOLD)
        frames = frame_signal(np.pad(x, frame // 2), frame, hop)[: f0.size]
        energy = frame_energy_db(frames)
        loud = energy >= energy.max() + self.options["silence_db"]
        periodic = _lag_correlation(frames, np.rint(sr / f0).astype(int)) >= \
            self.options["voicing_threshold"]
        return f0, loud & periodic & np.isfinite(f0)

    def _prepare(self, reference, sr):
        if not np.any(reference):
            raise MetricUnavailable("f0: reference is digitally silent")
        f0, voiced = self.track(reference, sr)
        if not voiced.any():
            raise MetricUnavailable("f0: no voiced frame in the reference")
        return f0, voiced

    def _score(self, data, estimate, sr):
        f0_ref, v_ref = data
        if np.any(estimate):
            f0_est, v_est = self.track(estimate, sr)
        else:
            f0_est, v_est = np.zeros_like(f0_ref), np.zeros_like(v_ref)
        both = v_ref & v_est
        vde = float(np.mean(v_ref != v_est))
        if not both.any():
            return {"f0_rmse_cents": math.nan, "f0_gpe": math.nan, "f0_vde": vde,
                    "f0_frames": 0.0}
        ratio = f0_est[both] / f0_ref[both]
        cents = CENTS_PER_OCTAVE * np.log2(ratio)
        return {"f0_rmse_cents": float(np.sqrt(np.mean(cents ** 2))),
                "f0_gpe": float(np.mean(np.abs(ratio - 1.0) > GPE_RATIO)),
                "f0_vde": vde, "f0_frames": float(both.sum())}

    def _variant(self, sample_rate):
        out: dict[str, Any] = {"tracker": "librosa.yin", "yin_trough_threshold":
                               YIN_TROUGH_THRESHOLD, "gpe_ratio": GPE_RATIO,
                               "voicing": "energy gate + normalised autocorrelation at period"}
        if sample_rate:
            out["frame_length"], out["hop_length"] = self._sizes(sample_rate)
        return out


def _lag_correlation(frames: np.ndarray, lags: np.ndarray) -> np.ndarray:
    """Normalised correlation of frame[n] with frame[n + lag] for a per-frame integer lag."""
    n_frames, length = frames.shape
    lags = np.clip(lags, 1, length - 1)
    n = np.arange(length)
    valid = n[None, :] < (length - lags)[:, None]
    shifted = np.take_along_axis(frames, np.minimum(n[None, :] + lags[:, None], length - 1), 1)
    a = np.where(valid, frames, 0.0)
    b = np.where(valid, shifted, 0.0)
    num = np.einsum("fl,fl->f", a, b)
    den = np.sqrt(np.einsum("fl,fl->f", a, a) * np.einsum("fl,fl->f", b, b))
    return np.divide(num, den, out=np.zeros(n_frames), where=den > 0)
