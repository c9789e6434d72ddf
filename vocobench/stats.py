"""Statistics of a stored run: per-configuration summaries, paired comparisons, Pareto front.

The unit of analysis is the utterance: the seeds of one utterance are averaged first, so every
utterance counts once whatever the number of seeds. Items with ``status == "failed"`` are left out
of every mean and counted per configuration; a metric value that is missing (NaN) on an ``ok``
item is left out of that metric only.

Intervals are bootstrap intervals (Efron 1979, "Bootstrap methods: another look at the
jackknife", Ann. Statist.) computed by :func:`scipy.stats.bootstrap`, BCa by default (Efron 1987,
"Better bootstrap confidence intervals", JASA). Every call draws from a fresh generator seeded
with the recorded seed, so a report is reproducible and does not depend on the order of calls.

Paired comparisons against a reference configuration use the per-utterance differences
``d_u = x_u(config) − x_u(reference)``: a bootstrap interval of mean(d) (resampling utterances,
i.e. the paired bootstrap) and the Wilcoxon signed-rank test (Wilcoxon 1945, "Individual
comparisons by ranking methods", Biometrics Bull.) via :func:`scipy.stats.wilcoxon`. p-values are
corrected across the configurations compared, per metric, with Holm's step-down method (Holm
1979, "A simple sequentially rejective multiple test procedure", Scand. J. Statist.). That chain
is :func:`paired_comparison` and :func:`holm_family`, used by the report and the gate alike.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats as sst

from .errors import InputError
# CONFIG_KEYS, config_labels and ok_mask are re-exported (imported from here before keys.py)
from .keys import CONFIG_KEYS, ConfigKey, directed_columns, direction  # noqa: F401
from .keys import labels as config_labels  # noqa: F401
from .runtables import (configurations, default_reference, failure_counts, latency_summary,
                        nfe_map, ok_mask, require_item_fields, utterance_means)  # noqa: F401

Config = ConfigKey                      # the name used before keys.py
# Bootstrap settings live in the light ``bootstrap`` module (no scipy), re-exported here.
from .bootstrap import (BOOTSTRAP, DEFAULT_CONFIDENCE, DEFAULT_METHOD,  # noqa: E402,F401
                        DEFAULT_N_RESAMPLES, DEFAULT_SEED, METHODS, BootstrapSettings)


# ---------------------------------------------------------------- elementary procedures

def bootstrap_mean_interval(x: Sequence[float], settings: BootstrapSettings = BootstrapSettings(),
                            alternative: str = "two-sided") -> tuple[float, float]:
    """Bootstrap interval of the mean of ``x`` (NaNs dropped) by :func:`scipy.stats.bootstrap`.

    ``alternative`` as in scipy: ``"two-sided"`` gives ``(low, high)`` at ``settings.confidence``;
    ``"less"`` gives ``(-inf, upper bound)``, ``"greater"`` gives ``(lower bound, inf)``, the
    one-sided bounds at that confidence. Fewer than two values give NaN bounds; a constant
    sample gives the constant (scipy's BCa is undefined there). If BCa is degenerate (NaN), the
    percentile interval is used instead.
    """
    return bootstrap_mean_intervals(x, settings, (alternative,))[0]


def bootstrap_mean_intervals(x: Sequence[float], settings: BootstrapSettings,
                             alternatives: Sequence[str]) -> list[tuple[float, float]]:
    """:func:`bootstrap_mean_interval` for several ``alternatives`` from one bootstrap draw.

    The resamples are drawn once (seeded by ``settings.seed``) and every further interval is
    computed from that distribution (``scipy.stats.bootstrap(..., n_resamples=0,
    bootstrap_result=...)``), so each result equals a separate call with the same seed.
    """
    return bootstrap_mean_draw(x, settings, alternatives)[0]


def bootstrap_mean_draw(x: Sequence[float], settings: BootstrapSettings, alternatives: Sequence[str]
                        ) -> tuple[list[tuple[float, float]], np.ndarray]:
    """:func:`bootstrap_mean_intervals` and the bootstrap distribution of the mean they come
    from (empty for fewer than two values or a constant sample)."""
    a = np.asarray(x, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size < 2:
        return [(np.nan, np.nan) for _ in alternatives], np.empty(0)
    if np.ptp(a) == 0.0:
        c = float(a[0])
        return ([{"less": (-np.inf, c), "greater": (c, np.inf)}.get(alt, (c, c))
                 for alt in alternatives], np.empty(0))
    res = None
    out = []
    for alternative in alternatives:
        for attempt in (settings.method, "percentile"):
            n = int(settings.n_resamples) if res is None else 0       # draw only the first time
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", sst.DegenerateDataWarning)
                warnings.simplefilter("ignore", RuntimeWarning)
                res = sst.bootstrap((a,), np.mean, n_resamples=n,
                                    confidence_level=float(settings.confidence), method=attempt,
                                    alternative=alternative, bootstrap_result=res,
                                    rng=np.random.default_rng(settings.seed))
            lo, hi = float(res.confidence_interval.low), float(res.confidence_interval.high)
            if not (np.isnan(lo) or np.isnan(hi)):
                break
        out.append((lo, hi))
    return out, np.asarray(res.bootstrap_distribution, dtype=np.float64)


def wilcoxon_p(d: Sequence[float]) -> float:
    """Two-sided Wilcoxon signed-rank p-value of paired differences by :func:`scipy.stats.wilcoxon`.

    scipy's defaults (zero differences dropped, exact or normal approximation chosen by scipy)
    are kept. All-zero differences give 1.0 (nothing to rank, no evidence of a difference); no
    finite difference gives NaN.
    """
    a = np.asarray(d, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size == 0:
        return np.nan
    if np.all(a == 0.0):
        return 1.0
    return float(sst.wilcoxon(a).pvalue)


def holm(pvalues: Sequence[float]) -> np.ndarray:
    """Holm 1979 step-down adjusted p-values (family = the finite entries; NaN stays NaN).

    With the m finite p-values sorted ascending, p_(1) ≤ … ≤ p_(m), the adjusted value is
    ``p̃_(i) = max_{j ≤ i} min(1, (m − j + 1)·p_(j))``; rejecting where ``p̃ ≤ α`` is Holm's
    sequentially rejective procedure at family-wise level α.
    """
    p = np.asarray(pvalues, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    q = p[ok]
    m = q.size
    if m:
        order = np.argsort(q, kind="stable")
        adj = np.minimum(1.0, np.maximum.accumulate((m - np.arange(m)) * q[order]))
        res = np.empty(m)
        res[order] = adj
        out[ok] = res
    return out


def within_margin(bound: float, margin: float, higher_is_better: bool) -> bool:
    """Non-inferiority by the confidence-interval rule (e.g. Wellek 2010): the one-sided bound of
    the difference on the worse side lies inside the margin — above ``−margin`` where higher is
    better, below ``+margin`` where lower is better. A NaN bound never passes."""
    return math.isfinite(bound) and (bound > -margin if higher_is_better else bound < margin)


def pareto_mask(cost: Sequence[float], quality: Sequence[float], higher_is_better: bool) -> np.ndarray:
    """Membership of the Pareto front over (cost, quality); lower cost is better.

    A point is on the front if no other point is at least as good on both coordinates and
    strictly better on one (common practice, no source). Points with a NaN coordinate are
    neither on the front nor able to dominate.
    """
    c = np.asarray(cost, dtype=np.float64)
    q = np.asarray(quality, dtype=np.float64)
    q = -q if higher_is_better else q          # minimise both
    valid = np.isfinite(c) & np.isfinite(q)
    mask = np.zeros(c.shape, dtype=bool)
    for i in np.flatnonzero(valid):
        dom = valid & (c <= c[i]) & (q <= q[i]) & ((c < c[i]) | (q < q[i]))
        mask[i] = not dom.any()
    return mask


# ---------------------------------------------------------------- paired comparison

@dataclass(frozen=True)
class PairedResult:
    """A candidate against a base over the ``n`` utterances both have (``d = cand − base``).

    ``diff_low, diff_high``: two-sided bootstrap interval of mean(d) at the settings' confidence;
    ``bound_lower, bound_upper``: the one-sided bounds, each at that confidence (together a
    ``2·confidence − 1`` interval); ``p``: two-sided Wilcoxon p-value of d; ``p_holm``: ``p``
    Holm-adjusted over a family (:func:`holm_family`), NaN until then. ``d`` (the paired
    differences) and ``boot`` (the bootstrap distribution of mean(d) behind every bound) are
    kept for tests read from the same draw (:func:`vocobench.inference.bootstrap_p`).
    """

    n: int
    base_mean: float
    cand_mean: float
    diff: float
    diff_low: float
    diff_high: float
    bound_lower: float
    bound_upper: float
    p: float
    higher_is_better: bool
    p_holm: float = np.nan
    d: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False, compare=False)
    boot: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False, compare=False)

    @property
    def sd(self) -> float:
        """Standard deviation of the paired differences (ddof 1; NaN for fewer than two)."""
        return float(np.std(self.d, ddof=1)) if self.d.size >= 2 else np.nan

    @property
    def worse_bound(self) -> float:
        """The one-sided bound on the worse side: lower where higher is better, else upper."""
        return self.bound_lower if self.higher_is_better else self.bound_upper


def paired_comparison(base: pd.Series | Sequence[float], cand: pd.Series | Sequence[float],
                      settings: BootstrapSettings = BootstrapSettings(),
                      higher_is_better: bool = True) -> PairedResult:
    """Paired comparison of per-utterance means (see the module docstring).

    ``base`` and ``cand`` are paired by index when both are :class:`pandas.Series` (utterances
    in ``base``'s order), else by position; a pair with a missing or non-finite side is left out.
    All intervals come from one bootstrap draw (:func:`bootstrap_mean_intervals`).
    """
    if not (isinstance(base, pd.Series) and isinstance(cand, pd.Series)):
        base = pd.Series(np.asarray(base, dtype=np.float64))
        cand = pd.Series(np.asarray(cand, dtype=np.float64))
        if len(base) != len(cand):
            raise ValueError(f"paired samples differ in length ({len(base)} vs {len(cand)})")
    pair = pd.concat({"b": base, "c": cand}, axis=1, join="inner")
    pair = pair[np.isfinite(pair.to_numpy(dtype=np.float64)).all(axis=1)]
    d = (pair["c"] - pair["b"]).to_numpy(dtype=np.float64)
    n = int(d.size)
    ((lo, hi), (low, _), (_, high)), boot = bootstrap_mean_draw(d, settings,
                                                               ("two-sided", "greater", "less"))
    nan = np.nan
    return PairedResult(n=n, base_mean=float(pair["b"].mean()) if n else nan,
                        cand_mean=float(pair["c"].mean()) if n else nan,
                        diff=float(d.mean()) if n else nan, diff_low=float(lo), diff_high=float(hi),
                        bound_lower=float(low), bound_upper=float(high), p=float(wilcoxon_p(d)),
                        higher_is_better=bool(higher_is_better), d=d, boot=boot)


def holm_family(results: Sequence[PairedResult]) -> list[PairedResult]:
    """``results`` with ``p_holm`` set: :func:`holm` over the family of their p-values."""
    return [replace(r, p_holm=float(a)) for r, a in zip(results, holm([r.p for r in results]))]


# ---------------------------------------------------------------- run-level tables

def higher_is_better(columns: Mapping[str, Any], column: str) -> bool:
    """Direction of a metric column of a manifest; raises :class:`InputError` when it has none."""
    spec = columns.get(column)
    hib = direction(spec)
    if hib is None:
        raise InputError("metric column lacks a boolean higher_is_better", source="manifest.json",
                         field=f"columns.{column}.higher_is_better",
                         value=spec.get("higher_is_better") if isinstance(spec, Mapping) else None)
    return hib


_NO_PAIR = {"diff": np.nan, "diff_low": np.nan, "diff_high": np.nan, "diff_bound": np.nan,
            "n_pairs": 0, "p": np.nan, "p_holm": np.nan}       # the reference's own row


@dataclass
class RunStatistics:
    """Everything the report needs, computed once from a stored run."""

    configs: list[Config]
    reference: Config
    columns: dict[str, dict[str, Any]]          # the metric columns analysed (manifest specs)
    metrics: pd.DataFrame                       # long table, one row per (config, column)
    latency: pd.DataFrame                       # index: config label
    failures: pd.DataFrame                      # index: config label; items, failed
    per_utterance: dict[str, pd.DataFrame]      # column → utterance × config means
    settings: BootstrapSettings = field(default_factory=BootstrapSettings)

    def row(self, config: Config | str, column: str) -> pd.Series:
        label = config if isinstance(config, str) else config.label
        m = self.metrics
        return m[(m["config"] == label) & (m["column"] == column)].iloc[0]


def summarise(run: Any, *, reference: Config | None = None, columns: Iterable[str] | None = None,
              settings: BootstrapSettings = BootstrapSettings(), reference_source: str | None = None,
              reference_field: str = "reference") -> RunStatistics:
    """Compute per-configuration statistics of a loaded run (see module docstring).

    Parameters
    ----------
    run : a :class:`vocobench.store.Run` (``manifest``, ``items``, ``timing``).
    reference : configuration compared against; default :func:`default_reference`.
    columns : metric columns to analyse; default every column of ``manifest["columns"]`` that has
        a boolean ``higher_is_better`` (others, such as counts, are informational).
    settings : bootstrap settings (recorded in the result).
    reference_source, reference_field : where ``reference`` came from, named in the error raised
        when the run has no items of that configuration.

    The long ``metrics`` table has, per (config, column): ``n`` (utterances with a value),
    ``mean``, ``median``, ``ci_low``, ``ci_high`` (bootstrap of the utterance means), and against
    the reference over the ``n_pairs`` utterances both have: ``diff`` (mean of d), ``diff_low``,
    ``diff_high`` (two-sided), ``diff_bound`` (one-sided bound on the *worse* side: the lower
    bound where higher is better, the upper bound where lower is better), ``p`` (Wilcoxon) and
    ``p_holm``. The reference's own comparison fields are NaN.
    """
    items, manifest = run.items, run.manifest
    if items is None or not len(items):
        raise InputError("the run has no finished items", source=str(getattr(run, "path", "")),
                         field="items.jsonl")
    require_item_fields(items, "items.jsonl")
    all_cols = dict(manifest.get("columns") or {})
    names = directed_columns(all_cols) if columns is None else list(columns)
    for col in names:
        if col not in all_cols:
            raise InputError(f"unknown metric column; the run has: {', '.join(all_cols) or 'none'}",
                             field="metrics", value=col)
        higher_is_better(all_cols, col)
    configs = configurations(manifest, items)
    ref = reference or default_reference(configs)
    if ref not in configs:
        raise InputError("reference configuration has no items in this run; valid: "
                         + ", ".join(c.label for c in configs), source=reference_source,
                         field=reference_field, value=ref.label)
    others = [c for c in configs if c != ref]
    rows, per_utt = [], {}
    for col in names:
        hib = higher_is_better(all_cols, col)
        table = utterance_means(items, col, configs)
        per_utt[col] = table
        paired = holm_family([paired_comparison(table[ref.label], table[c.label], settings, hib)
                              for c in others])
        vs_ref = {c: r for c, r in zip(others, paired)}
        for c in configs:
            x = table[c.label].to_numpy(dtype=np.float64)
            xf = x[np.isfinite(x)]
            lo, hi = bootstrap_mean_interval(xf, settings)
            r: dict[str, Any] = {"config": c.label, "column": col, "n": int(xf.size),
                                 "mean": float(xf.mean()) if xf.size else np.nan,
                                 "median": float(np.median(xf)) if xf.size else np.nan,
                                 "ci_low": lo, "ci_high": hi}
            pr = vs_ref.get(c)
            r.update(_NO_PAIR if pr is None else
                     {"diff": pr.diff, "diff_low": pr.diff_low, "diff_high": pr.diff_high,
                      "diff_bound": pr.worse_bound, "n_pairs": pr.n, "p": pr.p, "p_holm": pr.p_holm})
            rows.append(r)
    metrics = pd.DataFrame(rows, columns=["config", "column", "n", "mean", "median", "ci_low",
                                          "ci_high", "diff", "diff_low", "diff_high", "diff_bound",
                                          "n_pairs", "p", "p_holm"])
    timing = run.timing if run.timing is not None else pd.DataFrame()
    return RunStatistics(configs=configs, reference=ref, columns={c: dict(all_cols[c]) for c in names},
                         metrics=metrics, latency=latency_summary(timing, items, configs,
                                                                  nfe_map(manifest, items)),
                         failures=failure_counts(items, configs), per_utterance=per_utt,
                         settings=settings)
