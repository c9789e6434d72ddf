"""Sanity figures of the output waveform (``signal``): catches broken outputs, not quality.

Peak, clipping fraction, DC offset and non-finite fraction use the estimate only; the level
difference compares RMS levels with the reference. Non-finite samples are counted and left out
of the other figures (this metric does not raise for NaN/inf outputs).
"""
from __future__ import annotations

import math

import numpy as np

from ..params import Param, Real, Table
from .base import INF, Column, Metric

# |x| at or above this fraction of full scale counts as clipped (our choice: float outputs that
# were hard-limited sit at exactly 1.0, 16-bit ones at 32767/32768 ≈ 0.99997).
CLIP_LEVEL = 0.999
RMS_FLOOR = 1e-10          # RMS of digital silence is floored here for the dB difference


class SignalChecks(Metric):
    """Peak, clipping, DC offset, non-finite samples and RMS level difference."""

    name = "signal"
    description = "output sanity: peak, clipped fraction, DC offset, NaN/inf, level vs reference"
    needs_finite_estimate = False
    options_spec = Table("", [
        Param("clip_level", Real(0.01, 10.0), CLIP_LEVEL, "|x| at or above this is clipped"),
    ], entry="option")

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("signal_peak", "FS", None, (0.0, INF), "max |x| (1 = full scale)"),
                Column("signal_clip", "fraction", False, (0.0, 1.0),
                       "fraction of samples at or above the clip level"),
                Column("signal_dc", "FS", None, (-INF, INF), "mean sample value"),
                Column("signal_nonfinite", "fraction", False, (0.0, 1.0),
                       "fraction of NaN/inf samples"),
                Column("signal_level_db", "dB", None, (-INF, INF),
                       "RMS level of the estimate minus that of the reference"))

    @staticmethod
    def _rms(x: np.ndarray) -> float:
        return math.sqrt(float(np.mean(np.square(x, dtype=np.float64)))) if x.size else 0.0

    def _prepare(self, reference, sr):
        return self._rms(reference)

    def _score(self, data, estimate, sr):
        finite = np.isfinite(estimate)
        x = estimate[finite].astype(np.float64)
        nan = math.nan
        peak = float(np.max(np.abs(x))) if x.size else nan
        return {"signal_peak": peak,
                "signal_clip": float(np.mean(np.abs(x) >= self.options["clip_level"]))
                if x.size else nan,
                "signal_dc": float(np.mean(x)) if x.size else nan,
                "signal_nonfinite": float(1.0 - np.mean(finite)),
                "signal_level_db": 20.0 * math.log10(max(self._rms(x), RMS_FLOOR) /
                                                     max(data, RMS_FLOOR)) if x.size else nan}

    def _variant(self, sample_rate):
        return {"rms_floor": RMS_FLOOR, "nonfinite": "excluded from peak/clip/dc/level"}
