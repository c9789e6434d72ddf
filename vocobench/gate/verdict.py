"""Verdicts of the gate: the result types and the decision rule that sets them.

Decision rule
-------------
A *cell* is one compared configuration and one metric. Let ``d_u = candidate_u − baseline_u``
over the paired utterances (seeds averaged within an utterance first), ``s_u = d_u`` where higher
is better and ``s_u = −d_u`` where lower is better (so ``s > 0`` always means "candidate
better"; the *drop* is ``−mean(s)``), ``δ ≥ 0`` the allowed drop (:mod:`vocobench.gate.policy`;
a relative allowance is taken of the paired baseline mean), ``c`` the policy's confidence,
``α = 1 − c`` and ``m`` the number of gated cells. From one paired bootstrap draw of mean(s)
(:func:`vocobench.stats.paired_comparison`, BCa by default, Efron 1987):

* ``L``, ``U``: one-sided lower and upper bounds of mean(s), each at confidence ``c``;
* ``p``: the p-value of H₀ "drop ≤ δ" against "drop > δ", read from the same draw by inverting
  the upper bound (:func:`vocobench.inference.bootstrap_p`): ``p ≤ α`` when ``U < −δ``, up to the
  resampling's discreteness;
* ``p_holm``: ``p`` Holm-adjusted over the ``m`` gated cells (Holm 1979, "A simple sequentially
  rejective multiple test procedure", Scand. J. Statist.).

A gated cell with at least ``min_items`` paired utterances is

* **pass** if ``L > −δ``: the drop is below the allowance at confidence ``c``, a non-inferiority
  test at one-sided level ``α`` (ICH E9 1998, "Statistical Principles for Clinical Trials",
  §3.3.2; Wellek 2010, "Testing Statistical Hypotheses of Equivalence and Noninferiority",
  2nd ed.);
* **regression** if ``p_holm ≤ α``: the drop exceeds the allowance, with the family-wise error
  over the gated cells at most ``α``;
* **inconclusive** otherwise (the spread is too wide for either statement); a cell with fewer
  paired utterances (missing values) is inconclusive too.

Pass and regression exclude each other (``L ≤ U``). A configuration is a **regression** if any of
its cells is, if an item that was ``ok`` in the baseline failed in the candidate (new failures
are a regression by themselves, whatever the statistics), or if its latency is (stored-run
latency can only add a regression, never certify a pass: see :mod:`vocobench.gate.latency`);
otherwise **pass** if every cell passes, else **inconclusive**.

The comparison as a whole is

* **regression** (exit 1) if any gated configuration is. "Some cell is worse" is a union of
  hypotheses (union–intersection principle, Roy 1953), so its error needs the adjustment:
  Holm's step-down keeps the chance of any false regression at most ``α`` whatever the
  dependence between cells (up to the bootstrap's approximation);
* **pass** (exit 0) if every gated configuration passes. "Every cell is no worse" is an
  intersection–union test (Berger 1982, "Multiparameter hypothesis testing and acceptance
  sampling", Technometrics 24): each cell tested at ``α`` gives level ``α`` for the whole, no
  adjustment; so if any gated cell truly drops by ``δ`` or more, a pass has probability ≤ ``α``;
* **inconclusive** otherwise: exit 3, or 0 when the policy sets ``accept_inconclusive``, and the
  verdict then says in words that an unproven result was accepted.

Configurations outside the gated set (policy ``gated``) are compared the same way with
unadjusted p-values and reported as information; they never change the verdict.

Resolution and refusal
----------------------
Every cell states the smallest drop the test can show: ``δ + (z₁₋α/ₘ + z_power)·σ/√n``, the true
drop flagged with the policy's power at Holm's strictest step ``α/m`` (normal approximation;
Chow, Shao & Wang 2008, §3.1), ``σ`` the observed SD of ``s``. Before any statistics,
:func:`vocobench.gate.gating.check_size` refuses (exit 2) a comparison whose gated
configurations have fewer than ``min_items`` paired utterances, or so few that ``2⁻ⁿ`` — the
smallest p-value any exact paired test can give (:func:`vocobench.inference.min_exact_p`) —
exceeds ``α/m``: such a gate could never fail, so it must not be allowed to pass.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

from ..textfmt import signed_interval
from .latency import LatencyResult
from .policy import Policy

VERDICTS = ("regression", "inconclusive", "pass")
EXIT_CODES = {"pass": 0, "regression": 1, "inconclusive": 3}     # 2: unusable input (cli.py)


@dataclass
class MetricResult:
    """One metric of one configuration; ``diff*`` are raw (candidate − baseline, metric unit),
    ``diff_low``/``diff_high`` the one-sided bounds at the policy's confidence."""

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
    p: float                            # H₀ "drop ≤ allowed" (bootstrap, same draw as the bounds)
    p_holm: float = math.nan            # Holm over the gated cells; NaN for information cells
    sd: float = math.nan                # SD of the per-utterance differences
    detectable: float = math.nan        # smallest drop this test can show (module docstring)
    gated: bool = True
    improved: bool = False              # shown better by more than the allowance (information)
    verdict: str = "inconclusive"
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

    @property
    def drop_bound(self) -> float:
        """One-sided upper bound of the drop (``−L``)."""
        return -self.better_bounds[0]


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
    paired: int = 0                     # utterances with ok items on both sides
    gated: bool = True
    verdict: str = "inconclusive"
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
    gated_by: str = "all"                # why these configurations are gated (said in outputs)

    @property
    def gated(self) -> list[ConfigResult]:
        return [c for c in self.configs if c.gated]

    @property
    def information(self) -> list[ConfigResult]:
        return [c for c in self.configs if not c.gated]

    @property
    def verdict(self) -> str:
        """regression, pass or inconclusive, from the gated configurations (module docstring)."""
        gated = self.gated
        if any(c.verdict == "regression" for c in gated):
            return "regression"
        if gated and all(c.verdict == "pass" for c in gated):
            return "pass"
        return "inconclusive"

    @property
    def accepted(self) -> bool:
        """An inconclusive result that the policy accepts (``accept_inconclusive``)."""
        return self.verdict == "inconclusive" and bool(self.policy.accept_inconclusive)

    @property
    def exit_code(self) -> int:
        """0 pass (or an accepted inconclusive), 1 regression, 3 inconclusive."""
        return 0 if self.accepted else EXIT_CODES[self.verdict]

    def counts(self, gated: bool | None = True) -> dict[str, int]:
        """Configurations per verdict: gated ones (default), information ones, or all (None)."""
        cs = self.configs if gated is None else [c for c in self.configs if c.gated == gated]
        return {v: sum(c.verdict == v for c in cs) for v in VERDICTS}

    def by_verdict(self, verdict: str, gated: bool | None = True) -> list[ConfigResult]:
        return [c for c in self.configs if c.verdict == verdict and (gated is None or c.gated == gated)]

    def to_dict(self) -> dict[str, Any]:
        cfgs = []
        for c in self.configs:
            d = asdict(c)
            for m, md in zip(c.metrics, d["metrics"]):
                md["better"] = m.better
            cfgs.append(d)
        return {"format": "vocobench-compare/2", "verdict": self.verdict, "mode": self.mode,
                "exit_code": self.exit_code, "accepted_inconclusive": self.accepted,
                "baseline": self.baseline, "candidate": self.candidate, "gated_by": self.gated_by,
                "counts": self.counts(), "information_counts": self.counts(False),
                "policy": self.policy.describe(), "notes": self.notes,
                "forced": self.forced, "latency_note": self.latency_note, "seeds": self.seeds,
                "meta": self.meta, "configurations": cfgs}


def metric_verdict(r: MetricResult, pol: Policy) -> None:
    """Set ``r.verdict`` and ``r.reason`` by the cell rule of the module docstring (information
    cells use the unadjusted ``p``)."""
    low, high = r.better_bounds
    delta = r.allowed
    r.improved = math.isfinite(low) and low > delta
    p = r.p_holm if r.gated else r.p
    if r.n < pol.min_items:
        r.verdict = "inconclusive"
        r.reason = f"{r.column}: {r.n} paired utterances (minimum {pol.min_items})"
    elif math.isfinite(low) and low > -delta:
        r.verdict = "pass"
        r.reason = (f"{r.column}: drop at most {-low:.3g} < allowed {delta:.3g} "
                    f"({pol.confidence:g} one-sided)")
    elif math.isfinite(p) and p <= pol.alpha:
        r.verdict = "regression"
        r.reason = (f"{r.column}: worse by more than {delta:.3g} "
                    f"({'Holm-adjusted ' if r.gated else 'unadjusted '}p = {p:.2g})")
    else:
        r.verdict = "inconclusive"
        r.reason = (f"{r.column}: drop bound {-low:+.3g} not below allowed {delta:.3g}, "
                    f"nor a drop beyond it shown (p = {p:.2g})")


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
    open_cells = [m for m in res.metrics if m.verdict != "pass"]
    if open_cells:
        res.verdict = "inconclusive"
        res.reasons[:0] = [m.reason for m in open_cells]
    elif not res.metrics:                # A/B: latency is all there is
        ok = res.latency.verdict in ("pass", "improvement")
        res.verdict = "pass" if ok else "inconclusive"
        if not ok:
            res.reasons.insert(0, res.latency.reason or "nothing to compare")
    else:
        res.verdict = "pass"


def metric_brief(m: MetricResult) -> str:
    """``column Δ [L, U]``, e.g. ``stoi −0.021 [−0.030, −0.012]``."""
    return f"{m.column} {signed_interval(m.diff, m.diff_low, m.diff_high)}"
