"""F0 and periodicity errors (``f0``): pitch RMSE in cents, gross and voicing errors, V/UV F1,
periodicity error.

Both signals are tracked on the same frame grid (``hop_ms``) by one tracker (option ``tracker``,
see :mod:`.pitch_tracking`): ``"pyin"`` (default; Mauch & Dixon 2014, HMM-smoothed), ``"praat"``
(Boersma 1993, needs the ``quality`` extra: ``praat-parselmouth``) or ``"yin"`` (median-smoothed,
fast). Tracks are clamped to ``[fmin, fmax]``. With ``both`` = frames voiced in both signals and
``gross`` = frames of ``both`` off by more than 20 %:

* ``f0_rmse_cents``: √mean((1200·log2(f̂/f))²) over ``both`` minus ``gross``, so that a few
  octave errors cannot dominate it (they are counted by ``f0_gpe`` instead);
* ``f0_bias_cents``: the mean of the same cents (diagnostic: a constant offset, e.g. a wrong
  sample rate, shows here with its sign);
* ``f0_gpe``: |gross| / |both| (gross pitch error, Rabiner et al. 1976, "A comparative
  performance study of several pitch detection algorithms", IEEE TASSP; 20 % as in Nakatani et
  al. 2008, Speech Communication);
* ``f0_vde``: fraction of all frames whose voicing decisions differ (Nakatani et al. 2008);
* ``f0_vuv_f1``: F1 of the estimate's voiced decisions against the reference's
  (2·TP / (2·TP + FP + FN));
* ``f0_periodicity_rmse``: RMSE between the per-frame periodicity of reference and estimate
  (:func:`.pitch_tracking.periodicity`) over frames within ``silence_db`` of the reference's
  loudest frame. Morrison et al. 2022 ("Chunked autoregressive GAN for conditional waveform
  synthesis", ICLR) report pitch RMSE, periodicity RMSE and V/UV F1 for vocoders; their
  periodicity comes from CREPE (from memory), ours from the autocorrelation of Boersma 1993,
  so values are not comparable with theirs;
* ``f0_frames``: |both| (diagnostic).

RMSE, bias and GPE are NaN when no frame is voiced in both (the others are still defined);
MetricUnavailable when the reference has no voiced frame at all.
"""
from __future__ import annotations

import importlib.util
import math
from typing import Any

import numpy as np

from ..errors import MetricUnavailable
from ..errors import InputError
from ..params import Choice, Param, Real, Table
from .base import INF, OPTIONS_FIELD, Column, Metric
from .dsp import ms_to_samples
from .pitch_tracking import (PERIODICITY_PERIODS, PRAAT_AC_SETTINGS, YIN_TROUGH_THRESHOLD,
                             centred_frames, loud_frames, n_frames, periodicity, track_praat,
                             track_pyin, track_yin, yin_frame_length)

CENTS_PER_OCTAVE = 1200.0       # cent: 1/1200 octave (Ellis 1885)
GPE_RATIO = 0.2                 # gross error: > 20 % off (Rabiner et al. 1976)
TRACKERS = ("pyin", "praat", "yin")
EXTRA_HINT = "pip install 'vocobench[quality]'"


class PitchError(Metric):
    """F0 RMSE (cents), bias, GPE, VDE, V/UV F1 and periodicity RMSE."""

    name = "f0"
    description = "F0 RMSE in cents (no gross errors), GPE, VDE, V/UV F1, periodicity error"
    options_spec = Table("", [
        Param("tracker", Choice(TRACKERS), "pyin", "F0 tracker: 'pyin' (smoothed), 'praat' (needs "
              "the quality extra) or 'yin' (fast, median-smoothed)"),
        Param("fmin", Real(20.0, 1000.0), 50.0, "lowest F0 searched (Hz)"),
        Param("fmax", Real(40.0, 4000.0), 600.0, "highest F0 searched (Hz)"),
        Param("hop_ms", Real(1.0, 50.0), 10.0, "frame shift (ms)"),
        # 0.7: our choice; at 0.5 the yin tracker let in edge frames that put its RMSE 6 cents
        # off a 50-cent shift of tests/data/speech_male.wav
        Param("voicing_threshold", Real(0.0, 1.0), 0.7, "yin only: min normalised "
              "autocorrelation at the F0 period for a voiced frame"),
        Param("silence_db", Real(high=0.0), -40.0, "pyin, yin: frames this far below the signal's "
              "loudest frame are unvoiced; all trackers: reference frames this far down are left "
              "out of the periodicity error"),
    ], entry="option", rules=[("fmin", "<", "fmax")])

    def __init__(self, options: Any = None, *, source: str | None = None) -> None:
        super().__init__(options, source=source)
        if self.options["tracker"] == "praat" and importlib.util.find_spec("parselmouth") is None:
            raise InputError(f"tracker 'praat' needs the praat-parselmouth package: {EXTRA_HINT}",
                             source=source, field=f"{OPTIONS_FIELD}.{self.name}.tracker",
                             value="praat")

    @property
    def libraries(self) -> tuple[str, ...]:          # versions recorded by Metric.variant()
        return ("praat-parselmouth",) if self.options["tracker"] == "praat" else ("librosa",)

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("f0_rmse_cents", "cents", False, (0.0, INF),
                       "F0 RMSE over frames voiced in both, gross errors left out (NaN if none)"),
                Column("f0_bias_cents", "cents", None, (-INF, INF),
                       "mean F0 deviation over the same frames (sign: estimate above reference)"),
                Column("f0_gpe", "fraction", False, (0.0, 1.0),
                       "gross pitch error rate (>20 % off) over frames voiced in both"),
                Column("f0_vde", "fraction", False, (0.0, 1.0), "voicing decision error rate"),
                Column("f0_vuv_f1", "fraction", True, (0.0, 1.0),
                       "F1 of voiced/unvoiced decisions, reference as truth"),
                Column("f0_periodicity_rmse", "periodicity", False, (0.0, 1.0),
                       "RMSE of per-frame periodicity over non-silent reference frames"),
                Column("f0_frames", "frames", None, (0.0, INF), "frames voiced in both"))

    def _hop(self, sr: int) -> int:
        if self.options["fmax"] > sr / 2:
            raise MetricUnavailable(f"f0: fmax {self.options['fmax']} Hz is above sr/2")
        return ms_to_samples(self.options["hop_ms"], sr)

    def track(self, x: np.ndarray, sr: int) -> tuple[np.ndarray, np.ndarray]:
        """(f0 in Hz, voiced flag) per frame of the shared grid, with the configured tracker."""
        o = self.options
        hop = self._hop(sr)
        if not np.any(x):
            count = n_frames(np.asarray(x).size, hop)
            return np.zeros(count), np.zeros(count, dtype=bool)
        if o["tracker"] == "pyin":
            return track_pyin(x, sr, o["fmin"], o["fmax"], hop, silence_db=o["silence_db"])
        if o["tracker"] == "praat":
            return track_praat(x, sr, o["fmin"], o["fmax"], hop)
        return track_yin(x, sr, o["fmin"], o["fmax"], hop,
                         voicing_threshold=o["voicing_threshold"], silence_db=o["silence_db"])

    def _analyse(self, x: np.ndarray, sr: int) -> dict[str, np.ndarray]:
        f0, voiced = self.track(x, sr)
        per = periodicity(x, sr, self.options["fmin"], self.options["fmax"], self._hop(sr))
        return {"f0": f0, "voiced": voiced, "periodicity": per}

    def _prepare(self, reference, sr):
        if not np.any(reference):
            raise MetricUnavailable("f0: reference is digitally silent")
        out = self._analyse(reference, sr)
        if not out["voiced"].any():
            raise MetricUnavailable("f0: no voiced frame in the reference")
        hop = self._hop(sr)
        frames = centred_frames(np.asarray(reference, dtype=np.float64), 2 * hop, hop)
        out["loud"] = loud_frames(frames, self.options["silence_db"])
        return out

    def _score(self, data, estimate, sr):
        est = self._analyse(estimate, sr)
        return pitch_scores(data, est)

    def _variant(self, sample_rate):
        o = self.options
        out: dict[str, Any] = {"gpe_ratio": GPE_RATIO, "clamp": "tracks clipped to [fmin, fmax]",
                               "rmse_frames": "voiced in both, gross errors excluded",
                               "periodicity": "Boersma 1993 normalised autocorrelation peak, "
                               f"Hann window of {PERIODICITY_PERIODS:g} periods of fmin"}
        if o["tracker"] == "pyin":
            out.update(tracker="librosa.pyin, published defaults, frame 2/fmin + 2 samples",
                       voicing="pyin voiced state + energy gate (silence_db)")
        elif o["tracker"] == "praat":
            out.update(tracker="Praat To Pitch (ac), log-linear onto the frame grid",
                       praat_settings=dict(PRAAT_AC_SETTINGS))
        else:
            out.update(tracker="librosa.yin", yin_trough_threshold=YIN_TROUGH_THRESHOLD,
                       voicing="energy gate + normalised autocorrelation at period")
        if sample_rate:
            out["hop_length"] = ms_to_samples(o["hop_ms"], sample_rate)
            out["yin_frame_length"] = yin_frame_length(sample_rate, o["fmin"])
        return out


def pitch_scores(ref: dict[str, np.ndarray], est: dict[str, np.ndarray]) -> dict[str, float]:
    """The column values from two analyses on the same frame grid (see module docstring)."""
    n = min(ref["f0"].size, est["f0"].size)
    v_ref, v_est = ref["voiced"][:n], est["voiced"][:n]
    tp = float(np.sum(v_ref & v_est))
    f1 = 2 * tp / (2 * tp + np.sum(v_est & ~v_ref) + np.sum(v_ref & ~v_est))
    loud = ref["loud"][:n]
    dp = ref["periodicity"][:n][loud] - est["periodicity"][:n][loud]
    out = {"f0_vde": float(np.mean(v_ref != v_est)), "f0_vuv_f1": float(f1),
           "f0_periodicity_rmse": float(np.sqrt(np.mean(dp ** 2))) if dp.size else math.nan,
           "f0_frames": tp, "f0_rmse_cents": math.nan, "f0_bias_cents": math.nan,
           "f0_gpe": math.nan}
    both = v_ref & v_est
    if both.any():
        ratio = est["f0"][:n][both] / ref["f0"][:n][both]
        gross = np.abs(ratio - 1.0) > GPE_RATIO
        out["f0_gpe"] = float(np.mean(gross))
        if not gross.all():
            cents = CENTS_PER_OCTAVE * np.log2(ratio[~gross])
            out["f0_rmse_cents"] = float(np.sqrt(np.mean(cents ** 2)))
            out["f0_bias_cents"] = float(np.mean(cents))
    return out
