"""PESQ, wide-band (``pesq_wb``) and narrow-band (``pesq_nb``), via the ``pesq`` package.

ITU-T P.862 (2001) "Perceptual evaluation of speech quality"; wide-band extension ITU-T P.862.2
(2007); narrow-band MOS-LQO mapping ITU-T P.862.1 (2003). Signals are resampled to 16 kHz (WB) or
8 kHz (NB) with a high-quality resampler (libsoxr "VHQ" by default, recorded in ``variant()``).

Input below the PESQ rate (e.g. 8 kHz audio scored by ``pesq_wb``) is upsampled: the missing band
is scored as a band limitation, so such values are not comparable with full-rate ones; the metric
says so in ``variant()["caution"]`` (hence in the manifest) and warns once per process.

Caution: PESQ was designed and validated for telephone-band codecs, packet loss and network
degradations, not for neural vocoders; its scores on vocoded speech are a rough indicator, and the
MOS-LQO mappings saturate at 4.644 (WB) / 4.549 (NB) for an undistorted signal.
"""
from __future__ import annotations

import math
import warnings
from typing import Any, ClassVar

import numpy as np

from ..errors import MetricUnavailable
from ..params import Choice, Param, Table
from .base import Column, Metric
from .dsp import RESAMPLERS, resample

# ITU-T P.862: the raw PESQ score lies in [-0.5, 4.5] (from memory of the standard).
PESQ_RAW_RANGE = (-0.5, 4.5)
# MOS-LQO = a + b / (1 + exp(c·raw + d)).  P.862.2 (WB) and P.862.1 (NB) mapping functions.
P862_2_MAPPING = (0.999, 4.0, -1.3669, 3.8224)
P862_1_MAPPING = (0.999, 4.0, -1.4945, 4.6607)


def mos_lqo(raw: float, mapping: tuple[float, float, float, float]) -> float:
    """Map a raw P.862 score to MOS-LQO with the given (a, b, c, d)."""
    a, b, c, d = mapping
    return a + b / (1.0 + math.exp(c * raw + d))


class _Pesq(Metric):
    mode: ClassVar[str]
    rate: ClassVar[int]
    mapping: ClassVar[tuple[float, float, float, float]]
    standard: ClassVar[str]
    libraries = ("pesq", "soxr", "scipy")
    options_spec = Table("", [
        Param("resampler", Choice(RESAMPLERS), RESAMPLERS[0], "resampler to the PESQ rate"),
    ], entry="option")

    @property
    def sample_rate(self) -> int:
        return self.rate

    @property
    def columns(self) -> tuple[Column, ...]:
        lo, hi = (mos_lqo(r, self.mapping) for r in PESQ_RAW_RANGE)
        return (Column(self.name, "MOS-LQO", True, (round(lo, 3), round(hi, 3)),
                       f"PESQ {self.standard} MOS-LQO at {self.rate // 1000} kHz"),)

    def caution(self, sample_rate: int) -> str | None:
        if sample_rate >= self.rate:
            return None
        return (f"{self.name}: audio at {sample_rate} Hz is upsampled to {self.rate} Hz; nothing "
                f"above {sample_rate / 2:g} Hz, so {self.standard} scores it as band-limited "
                "speech (lower than the same speech at the full rate); compare only runs at the "
                "same rate")

    def _prepare(self, reference: np.ndarray, sr: int) -> np.ndarray:
        if not np.any(reference):
            raise MetricUnavailable("PESQ: reference is digitally silent")
        note = self.caution(sr)
        if note:
            warnings.warn(note, stacklevel=2)
        return resample(reference, sr, self.rate, self.options["resampler"])

    def _score(self, data: np.ndarray, estimate: np.ndarray, sr: int) -> dict[str, float]:
        import pesq

        if not np.any(estimate):
            raise MetricUnavailable("PESQ: estimate is digitally silent")
        est = resample(estimate, sr, self.rate, self.options["resampler"])
        n = min(data.size, est.size)        # resamplers may differ by a sample at the end
        try:
            value = pesq.pesq(self.rate, data[:n], est[:n], self.mode)
        except pesq.PesqError as exc:
            msg = exc.args[0].decode() if exc.args and isinstance(exc.args[0], bytes) else str(exc)
            raise MetricUnavailable(f"PESQ: {msg}") from None
        except ValueError as exc:          # the C code can yield NaN on degenerate input
            raise MetricUnavailable(f"PESQ failed on this input: {exc}") from None
        return {self.name: float(value)}

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        return {"standard": self.standard, "mode": self.mode, "rate": self.rate,
                "mapping_a_b_c_d": list(self.mapping),
                "resampler": {"soxr_vhq": "soxr.resample quality='VHQ'",
                              "resample_poly": "scipy.signal.resample_poly, kaiser beta=5"}
                [self.options["resampler"]]}


class PesqWideband(_Pesq):
    """PESQ wide-band, ITU-T P.862.2 (2007), 16 kHz."""

    name = "pesq_wb"
    description = "PESQ wide-band (ITU-T P.862.2), MOS-LQO at 16 kHz"
    mode, rate, mapping, standard = "wb", 16000, P862_2_MAPPING, "ITU-T P.862.2"


class PesqNarrowband(_Pesq):
    """PESQ narrow-band, ITU-T P.862 with the P.862.1 MOS-LQO mapping, 8 kHz."""

    name = "pesq_nb"
    description = "PESQ narrow-band (ITU-T P.862 + P.862.1 mapping), MOS-LQO at 8 kHz"
    mode, rate, mapping, standard = "nb", 8000, P862_1_MAPPING, "ITU-T P.862 + P.862.1"
