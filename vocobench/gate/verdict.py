"""Verdicts of the gate: the result types and the rules that set them.

Verdict rule (per configuration and metric)
-------------------------------------------
Let ``s_u = d_u`` for a metric where higher is better and ``s_u = −d_u`` where lower is better
(so ``s > 0`` always means "better"), ``δ`` the allowed drop from the policy (in the metric's
unit; a relative allowance is taken of the baseline mean of the paired utterances), ``L`` and
``U`` the one-sided lower and upper bootstrap bounds of mean(s), each at the policy's confidence
``c`` (paired bootstrap over utterances, :func:`vocobench.stats.paired_comparison`, BCa by
default, Efron 1987; the same one-sided convention as ``diff_bound`` in
:func:`vocobench.stats.summarise`), and *Holm p* the two-sided Wilcoxon signed-rank p-value of
``d`` (Wilcoxon 1945), Holm-adjusted across the compared configurations of that metric (Holm
1979), ``α = 1 − c``:

* **inconclusive** if fewer than ``min_items`` utterances are paired;
* **regression** if ``U < −δ`` and Holm p ``≤ α``: with confidence ``c`` the mean dropped by more
  than allowed, and the drop survives the multiple-comparison correction over the grid;
* **inconclusive** as well if ``U < −δ`` but Holm p ``> α`` (the bound shows a drop the rank test,
  after the correction, does not confirm — typical of very few utterances);
* **improvement** if ``L > δ`` and Holm p ``≤ α``;
* **pass** otherwise (no evidence of a drop beyond the allowance).

A true drop of exactly ``δ`` is thus called a regression with probability about ``1 − c``, a
true drop of zero far less often. ``[L, U]`` is reported as the interval (two-sided level
``2c − 1``, e.g. 90 % for c = 0.95).

A configuration is a **regression** if any metric is, or if any item that was ``ok`` in the
baseline failed in the candidate ("new failures", a regression by themselves), or if its latency
is (see :mod:`vocobench.gate.latency`). Otherwise it is **inconclusive** if any metric is,
**improvement** if any metric or its latency improved, else **pass**. The comparison as a whole
is a regression if any configuration is (exit code 1).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

from ..textfmt import signed_interval
from .latency import LatencyResult
from .policy import Policy

VERDICTS = ("regression", "inconclusive", "improvement", "pass")


@dataclass
class MetricResult:
    """One metric of one configuration; ``diff*`` are raw (candidate − baseline, metric unit)."""

    column: str
    unit: str
    higher_is_better: bool
    n: int
    baseline_mean: float
    candidate_mean: float
    diff: float
    diff_low: float
    diff_high: float
    allowed: float
    allowance: str
    p: float
    p_holm: float = math.nan
    verdict: str = "pass"
    reason: str = ""

    @property
    def better(self) -> float:
        """Direction-aware mean difference (positive = candidate better)."""
        return self.diff if self.higher_is_better else -self.diff

    @property
    def better_bounds(self) -> tuple[float, float]:
        if self.higher_is_better:
            return self.diff_low, self.diff_high
        return -self.diff_high, -self.diff_low


@dataclass
class ConfigResult:
    label: str                          # baseline configuration
    candidate_label: str
    metrics: list[MetricResult] = field(default_factory=list)
    latency: LatencyResult = field(default_factory=lambda: LatencyResult("not measured"))
    items_baseline: int = 0
    items_candidate: int = 0
    failed_baseline: int = 0
    failed_candidate: int = 0
    new_failures: int = 0
    missing: int = 0                    # baseline items with no candidate counterpart
    verdict: str = "pass"
    reasons: list[str] = field(default_factory=list)

    @property
    def name(self) -> str:
        return self.label if self.label == self.candidate_label else \
            f"{self.label} → {self.candidate_label}"


@dataclass
class Comparison:
    """Result of :func:`compare_runs` (or of an A/B latency run)."""

    baseline: str
    candidate: str
    configs: list[ConfigResult]
    policy: Policy
    mode: str = "runs"                   # "runs" | "ab"
    notes: list[str] = field(default_factory=list)
    forced: list[str] = field(default_factory=list)
    latency_note: str = ""
    seeds: dict[str, Any] = field(default_factory=dict)
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def verdict(self) -> str:
        return "regression" if any(c.verdict == "regression" for c in self.configs) else "pass"

    @property
    def exit_code(self) -> int:
        return 1 if self.verdict == "regression" else 0

    def counts(self) -> dict[str, int]:
        return {v: sum(c.verdict == v for c in self.configs) for v in VERDICTS}

    def by_verdict(self, verdict: str) -> list[ConfigResult]:
        return [c for c in self.configs if c.verdict == verdict]

    def to_dict(self) -> dict[str, Any]:
        cfgs = []
        for c in self.configs:
            d = asdict(c)
            for m, md in zip(c.metrics, d["metrics"]):
                md["better"] = m.better
            cfgs.append(d)
        return {"format": "vocobench-compare/1", "verdict": self.verdict, "mode": self.mode,
                "exit_code": self.exit_code, "baseline": self.baseline, "candidate": self.candidate,
                "counts": self.counts(), "policy": self.policy.describe(), "notes": self.notes,
                "forced": self.forced, "latency_note": self.latency_note, "seeds": self.seeds,
                "meta": self.meta, "configurations": cfgs}


def metric_verdict(r: MetricResult, pol: Policy) -> None:
    """Set ``r.verdict`` and ``r.reason`` by the metric rule of the module docstring."""
    if r.n < pol.min_items:
        r.verdict = "inconclusive"
        r.reason = f"{r.column}: {r.n} paired utterances (minimum {pol.min_items})"
        return
    low, high = r.better_bounds
    delta = r.allowed
    significant = math.isfinite(r.p_holm) and r.p_holm <= pol.alpha
    if high < -delta and significant:
        r.verdict = "regression"
        r.reason = f"worse by more than {delta:.3g} with {pol.confidence:g} confidence"
    elif high < -delta:
        r.verdict = "inconclusive"
        r.reason = (f"{r.column}: interval below −{delta:.3g} but the Holm-adjusted Wilcoxon "
                    f"p = {r.p_holm:.3g} > {pol.alpha:.3g}")
    elif low > delta and significant:
        r.verdict = "improvement"
        r.reason = f"better by more than {delta:.3g} with {pol.confidence:g} confidence"
    else:
        r.verdict = "pass"


def config_verdict(res: ConfigResult, pol: Policy) -> None:
    """Set ``res.verdict`` and ``res.reasons`` from its metrics, items and latency (module doc)."""
    reasons = []
    if res.new_failures:
        reasons.append(f"{res.new_failures} new failed item{'s' * (res.new_failures != 1)}")
    for m in res.metrics:
        if m.verdict == "regression":
            reasons.append(metric_brief(m))
    if res.latency.verdict == "regression":
        lat = res.latency
        reasons.append(f"RTF ×{lat.ratio:.3g} [{lat.ratio_low:.3g}, {lat.ratio_high:.3g}]")
    if res.missing:
        res.reasons.append(f"{res.missing} baseline item{'s' * (res.missing != 1)} missing in the candidate")
    if reasons:
        res.verdict = "regression"
        res.reasons = reasons + res.reasons
        return
    inconclusive = [m for m in res.metrics if m.verdict == "inconclusive"]
    if inconclusive:
        res.verdict = "inconclusive"
        res.reasons.insert(0, inconclusive[0].reason)
    elif not res.metrics and res.latency.verdict not in ("pass", "improvement"):
        res.verdict = "inconclusive"
        res.reasons.insert(0, res.latency.reason or "nothing to compare")
    elif any(m.verdict == "improvement" for m in res.metrics) or res.latency.verdict == "improvement":
        res.verdict = "improvement"
    else:
        res.verdict = "pass"


def metric_brief(m: MetricResult) -> str:
    """``column Δ [L, U]``, e.g. ``stoi −0.021 [−0.030, −0.012]``."""
    return f"{m.column} {signed_interval(m.diff, m.diff_low, m.diff_high)}"
