"""STOI (``stoi``) and extended STOI (``estoi``) via pystoi.

Taal, Hendriks, Heusdens & Jensen 2011, "An algorithm for intelligibility prediction of
time-frequency weighted noisy speech", IEEE TASLP; Jensen & Taal 2016, "An algorithm for
predicting the intelligibility of speech masked by modulated noise maskers", IEEE/ACM TASLP.

pystoi works at 10 kHz: ``prepare`` resamples the reference with pystoi's own resampler once, and
``score`` resamples the estimate the same way, so the result equals ``pystoi.stoi(ref, est, sr)``.
"""
from __future__ import annotations

import warnings
from typing import Any, ClassVar

import numpy as np

from ..errors import MetricUnavailable
from .base import Column, Metric

STOI_RATE = 10000          # Taal et al. 2011: signals are resampled to 10 kHz (pystoi FS)


class _Stoi(Metric):
    extended: ClassVar[bool]
    column_description: ClassVar[str]
    libraries = ("pystoi",)

    @property
    def sample_rate(self) -> int:
        return STOI_RATE

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column(self.name, "score", True, (-1.0, 1.0), self.column_description),)

    def _resampled(self, x: np.ndarray, sr: int) -> np.ndarray:
        from pystoi import utils

        return x if sr == STOI_RATE else utils.resample_oct(x, STOI_RATE, sr)

    def _prepare(self, reference: np.ndarray, sr: int) -> np.ndarray:
        import importlib

        stoi_module = importlib.import_module("pystoi.stoi")   # the module, not the function
        if not np.any(reference):
            raise MetricUnavailable(f"{self.name}: reference is digitally silent")
        ref = self._resampled(reference, sr)
        # pystoi needs N = 30 frames of N_FRAME = 256 samples with 50 % overlap at 10 kHz.
        need = (stoi_module.N - 1) * (stoi_module.N_FRAME // 2) + stoi_module.N_FRAME
        if ref.size < need:
            raise MetricUnavailable(f"{self.name}: signal shorter than {need / STOI_RATE:.2f} s")
        return ref

    def _score(self, data: np.ndarray, estimate: np.ndarray, sr: int) -> dict[str, float]:
        from pystoi import stoi

        est = self._resampled(estimate, sr)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            value = stoi(data, est, STOI_RATE, extended=self.extended)
        for w in caught:
            if "Not enough STFT frames" in str(w.message):
                raise MetricUnavailable(f"{self.name}: fewer than 30 non-silent frames "
                                        "(needs about 0.4 s of speech)")
        if not np.isfinite(value):
            raise MetricUnavailable(f"{self.name}: not defined for this input")
        return {self.name: float(value)}

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        return {"implementation": "pystoi.stoi", "extended": self.extended,
                "internal_rate": STOI_RATE, "resampler": "pystoi.utils.resample_oct"}


class Stoi(_Stoi):
    """Short-time objective intelligibility (Taal et al. 2011)."""

    name = "stoi"
    description = "STOI intelligibility (Taal et al. 2011), 0..1"
    extended = False
    column_description = "short-time objective intelligibility"


class ExtendedStoi(_Stoi):
    """Extended STOI (Jensen & Taal 2016)."""

    name = "estoi"
    description = "extended STOI (Jensen & Taal 2016), 0..1"
    extended = True
    column_description = "extended STOI"
