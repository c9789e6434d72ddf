"""Length policy: how an output whose length differs from the reference is brought to equal length.

A vocoder's output length is ``n_frames · hop_length`` give or take a few samples of padding, so
small differences are normal (common practice, no source); large ones mean a broken output or a
wrong hop length, and fail the item.

* ``"trim"``: both signals are cut to the shorter length. The reference changes when the output
  is shorter (``info["reference_changed"]``); ``Metric.score`` handles that case by itself,
  re-preparing the reference cut to the output's length for that call.
* ``"pad"``: the output is zero-padded or cut to the reference length; the reference never
  changes, so prepared states stay valid.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ItemFailure
from ..params import Choice, Param, Real, Table, is_integer

LENGTH_MODES = ("trim", "pad")
# Our choice: a few samples of padding per frame edge are normal, two hops are not a broken output.
DEFAULT_TOLERANCE_HOPS = 2.0
# The [metrics] keys of the length policy (the run config reuses these declarations).
LENGTH_PARAMS = (
    Param("length_mode", Choice(LENGTH_MODES), LENGTH_MODES[0],
          "equal lengths by 'trim' (both cut to the shorter) or 'pad' (output padded or cut)"),
    Param("length_tolerance_hops", Real(low=0, keep_int=True), DEFAULT_TOLERANCE_HOPS,
          "largest output/reference length difference, in vocoder hops, before the item fails"),
)
_LENGTH = Table("metrics", LENGTH_PARAMS)


@dataclass(frozen=True)
class LengthPolicy:
    """Equalise reference/output lengths; fail beyond ``tolerance_hops`` vocoder hops."""

    mode: str = LENGTH_MODES[0]
    tolerance_hops: float = DEFAULT_TOLERANCE_HOPS

    def __post_init__(self) -> None:
        _LENGTH.check("length_mode", self.mode)
        _LENGTH.check("length_tolerance_hops", self.tolerance_hops)

    def tolerance_samples(self, hop_length: int) -> int:
        return int(math.floor(self.tolerance_hops * hop_length))

    def apply(self, reference: np.ndarray, estimate: np.ndarray,
              hop_length: int) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
        """Return (reference, estimate, info) of equal length.

        Raises ItemFailure when |len(estimate) − len(reference)| > tolerance_hops·hop_length.
        """
        if not is_integer(hop_length) or hop_length <= 0:
            raise ValueError(f"hop_length must be a positive integer, got {hop_length!r}")
        ref, est = np.asarray(reference), np.asarray(estimate)
        if ref.ndim != 1 or est.ndim != 1:
            raise ValueError("reference and estimate must be 1-D")
        diff = int(est.size - ref.size)
        tol = self.tolerance_samples(int(hop_length))
        if abs(diff) > tol:
            word = "longer" if diff > 0 else "shorter"
            raise ItemFailure(f"output is {abs(diff)} samples {word} than the reference; "
                              f"tolerance is {tol} samples ({self.tolerance_hops:g} hops of "
                              f"{hop_length})")
        info: dict[str, Any] = {"length_diff": diff, "reference_changed": False}
        if diff == 0:
            return ref, est, info
        if self.mode == "trim":
            n = min(ref.size, est.size)
            info["reference_changed"] = n != ref.size
            return ref[:n], est[:n], info
        if diff > 0:
            return ref, est[: ref.size], info
        return ref, np.concatenate([est, np.zeros(-diff, dtype=est.dtype)]), info

    def describe(self) -> dict[str, Any]:
        return {"mode": self.mode, "tolerance_hops": self.tolerance_hops,
                "rule": {"trim": "both cut to the shorter length",
                         "pad": "output zero-padded or cut to the reference length"}[self.mode]}
