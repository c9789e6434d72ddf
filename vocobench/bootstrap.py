"""Settings of every bootstrap interval, declared once (no numerical import: parsing a config or
printing help must not load scipy). :mod:`vocobench.stats` computes with them; the ``[decide]``
options and the gate policy reuse the declarations."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .params import Choice, Integer, Param, Real, Table, with_defaults

DEFAULT_CONFIDENCE = 0.95               # common practice, no source
# Efron & Tibshirani 1993, "An Introduction to the Bootstrap", Ch. 19 (from memory): about
# 1000-2000 resamples for interval endpoints.
DEFAULT_N_RESAMPLES = 2000
DEFAULT_SEED = 0                        # any fixed value; recorded in every report
DEFAULT_METHOD = "BCa"                  # Efron 1987
METHODS = ("BCa", "percentile", "basic")


BOOTSTRAP = Table("bootstrap", [
    Param("confidence", Real(0.5, 1, closed="left", keep_int=True), DEFAULT_CONFIDENCE,
          "confidence level of intervals and one-sided bounds"),
    Param("n_resamples", Integer(low=100), DEFAULT_N_RESAMPLES, "bootstrap resamples"),
    Param("seed", Integer(low=0), DEFAULT_SEED, "bootstrap seed (recorded)"),
    Param("method", Choice(METHODS), DEFAULT_METHOD, "bootstrap interval: " + ", ".join(METHODS)),
], doc="Bootstrap settings (Efron 1979; BCa: Efron 1987).")


@dataclass(frozen=True)
@with_defaults(BOOTSTRAP)
class BootstrapSettings:
    """Settings of every bootstrap interval in a report (recorded in the report)."""

    confidence: float
    n_resamples: int
    seed: int
    method: str

    def __post_init__(self) -> None:
        BOOTSTRAP.apply(self)

    def describe(self) -> dict[str, Any]:
        return {"confidence": self.confidence, "n_resamples": self.n_resamples, "seed": self.seed,
                "method": self.method, "unit": "utterance (seeds averaged within an utterance)"}
