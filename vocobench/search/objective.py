"""What a search maximises: one metric, a primary metric under margins, or a Pareto set.

Scores are utterance means: the metric averaged over seeds per utterance, then over utterances
(the same per-utterance means the paired comparison of ``report`` uses). A score is signed so
that higher is better; an infeasible or unscorable candidate scores −∞.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd


def utterance_means(records: Iterable[Mapping[str, Any]], column: str) -> pd.Series:
    """Per-utterance mean of ``column`` over seeds (failed items and NaN left out)."""
    vals: dict[str, list[float]] = {}
    for r in records:
        v = (r.get("metrics") or {}).get(column) if r.get("status") == "ok" else None
        vals.setdefault(r["utt_id"], [])
        if v is not None and math.isfinite(float(v)):
            vals[r["utt_id"]].append(float(v))
    return pd.Series({u: (float(np.mean(v)) if v else np.nan) for u, v in vals.items()}, dtype=float)


@dataclass
class Objective:
    """``kind``: ``single`` | ``constrained`` | ``pareto``; ``higher`` maps column → direction."""

    kind: str
    primary: str
    metrics: list[str]
    higher: Mapping[str, bool]
    margins: Mapping[str, float] = field(default_factory=dict)
    reference: dict[str, float] | None = None       # reference means on the search split

    @property
    def columns(self) -> list[str]:
        return list(dict.fromkeys([self.primary, *self.metrics, *self.margins]))

    def signed(self, column: str, mean: float) -> float:
        return mean if self.higher[column] else -mean

    def feasible(self, means: Mapping[str, float]) -> bool:
        """Within every margin of the reference (always true unless ``constrained``)."""
        if self.kind != "constrained":
            return True
        ref = self.reference or {}
        for col, margin in self.margins.items():
            if not math.isfinite(means.get(col, math.nan)) or not math.isfinite(ref.get(col, math.nan)):
                return False
            if self.signed(col, means[col] - ref[col]) < -margin:
                return False
        return True

    def value(self, means: Mapping[str, float]) -> float:
        v = means.get(self.primary, math.nan)
        if not math.isfinite(v) or not self.feasible(means):
            return -math.inf
        return self.signed(self.primary, v)


def pareto_front(points: Sequence[Mapping[str, float]], obj: Objective) -> list[int]:
    """Indices of the points no other point dominates over ``obj.metrics`` (directions applied;
    a point with a non-finite coordinate is never on the front). Common practice, no source."""
    cols = obj.metrics
    arr = np.array([[obj.signed(c, p.get(c, math.nan)) for c in cols] for p in points], dtype=float)
    ok = np.isfinite(arr).all(axis=1) if len(points) else np.zeros(0, bool)
    front = []
    for i in range(len(points)):
        if not ok[i]:
            continue
        dominated = ok & (arr >= arr[i]).all(axis=1) & (arr > arr[i]).any(axis=1)
        if not dominated.any():
            front.append(i)
    return front
