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
1979, "A simple sequentially rejective multiple test procedure", Scand. J. Statist.).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats as sst

from .errors import InputError
from .params import Choice, Integer, Param, Real, Table, with_defaults

CONFIG_KEYS = ("schedule", "sampler", "steps")
DEFAULT_CONFIDENCE = 0.95               # common practice, no source
# Efron & Tibshirani 1993, "An Introduction to the Bootstrap", Ch. 19 (from memory): about
# 1000-2000 resamples for interval endpoints.
DEFAULT_N_RESAMPLES = 2000
DEFAULT_SEED = 0                        # any fixed value; recorded in every report
DEFAULT_METHOD = "BCa"                  # Efron 1987
METHODS = ("BCa", "percentile", "basic")


@dataclass(frozen=True)
class Config:
    """One configuration of the sweep: ``(schedule, sampler, steps)``."""

    schedule: str
    sampler: str
    steps: int

    @property
    def label(self) -> str:
        return f"{self.schedule}/{self.sampler}/{self.steps}"

    def __str__(self) -> str:
        return self.label

    @classmethod
    def parse(cls, text: str, *, source: str | None = None, field: str = "reference") -> "Config":
        """Parse ``"schedule/sampler/steps"`` (the label form)."""
        parts = str(text).rsplit("/", 2)
        if len(parts) != 3 or not parts[0] or not parts[1]:
            raise InputError("expected a configuration as schedule/sampler/steps", source=source,
                             field=field, value=text)
        try:
            steps = int(parts[2])
        except ValueError:
            raise InputError("steps of a configuration must be an integer", source=source,
                             field=field, value=text) from None
        return cls(parts[0], parts[1], steps)


# Settings of every bootstrap interval, declared once; the [decide] options and the gate policy
# reuse these declarations.
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
    a = np.asarray(x, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size < 2:
        return [(np.nan, np.nan) for _ in alternatives]
    if np.ptp(a) == 0.0:
        c = float(a[0])
        return [{"less": (-np.inf, c), "greater": (c, np.inf)}.get(alt, (c, c)) for alt in alternatives]
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
    return out


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


# ---------------------------------------------------------------- run-level tables

def configurations(manifest: Mapping[str, Any], items: pd.DataFrame) -> list[Config]:
    """Configurations that have items, in grid order (then any extra ones in item order)."""
    seen: dict[Config, None] = {}
    for g in manifest.get("grid") or []:
        try:
            seen[Config(str(g["schedule"]), str(g["sampler"]), int(g["steps"]))] = None
        except (KeyError, TypeError, ValueError):
            raise InputError("grid entry lacks schedule/sampler/steps", source="manifest.json",
                             field="grid", value=g) from None
    present: dict[Config, None] = {}
    if len(items):
        for s, a, n in items[list(CONFIG_KEYS)].itertuples(index=False):
            present.setdefault(Config(str(s), str(a), int(n)), None)
    for c in present:
        seen.setdefault(c, None)
    return [c for c in seen if c in present]


def default_reference(configs: Sequence[Config]) -> Config:
    """The configuration with the most steps; ties go to the first in grid order."""
    if not configs:
        raise InputError("the run has no configurations with items", field="items.jsonl")
    best = max(c.steps for c in configs)
    return next(c for c in configs if c.steps == best)


def config_labels(items: pd.DataFrame) -> pd.Series:
    """``schedule/sampler/steps`` label of every row (the :attr:`Config.label` form)."""
    return (items["schedule"].astype(str) + "/" + items["sampler"].astype(str) + "/"
            + items["steps"].astype(int).astype(str))


def utterance_means(items: pd.DataFrame, column: str, configs: Sequence[Config],
                    key: str = "utt_id") -> pd.DataFrame:
    """Per-utterance mean of ``column`` over the ``ok`` seeds: rows utterances, columns labels.

    ``key`` is the column identifying an utterance (rows are indexed by it, in item order).
    """
    labels = [c.label for c in configs]
    utts = list(dict.fromkeys(items[key].astype(str)))
    if column not in items.columns:
        return pd.DataFrame(np.nan, index=pd.Index(utts, name=key), columns=labels)
    ok = items[ok_mask(items)]
    frame = pd.DataFrame({"config": config_labels(ok), key: ok[key].astype(str),
                          "v": pd.to_numeric(ok[column], errors="coerce")})
    table = frame.groupby([key, "config"], sort=False)["v"].mean().unstack("config")
    return table.reindex(index=pd.Index(utts, name=key), columns=labels)


def ok_mask(items: pd.DataFrame) -> pd.Series:
    """Rows with ``status == "ok"`` (every row when there is no ``status`` column)."""
    if "status" not in items.columns:
        return pd.Series(True, index=items.index)
    return items["status"].astype(str) == "ok"


def higher_is_better(columns: Mapping[str, Any], column: str) -> bool:
    spec = columns.get(column)
    if not isinstance(spec, Mapping) or not isinstance(spec.get("higher_is_better"), bool):
        raise InputError("metric column lacks a boolean higher_is_better", source="manifest.json",
                         field=f"columns.{column}.higher_is_better",
                         value=None if not isinstance(spec, Mapping) else spec.get("higher_is_better"))
    return bool(spec["higher_is_better"])


def failure_counts(items: pd.DataFrame, configs: Sequence[Config]) -> pd.DataFrame:
    """Items and failed items per configuration (index: labels)."""
    lab = config_labels(items)
    failed = ~ok_mask(items)
    out = pd.DataFrame({"items": lab.value_counts(), "failed": lab[failed].value_counts()})
    return out.reindex([c.label for c in configs]).fillna(0).astype(int)


def latency_summary(timing: pd.DataFrame, items: pd.DataFrame, configs: Sequence[Config],
                    nfe: Mapping[str, int]) -> pd.DataFrame:
    """Latency per configuration from the timing journal (repeat ≥ 0; repeat −1 reported apart).

    Columns: ``nfe, rtf_median, rtf_p90, ms_per_nfe, first_call_s, n_timed, latency_source``.
    ``rtf_p90`` is numpy's default (linear) 90th percentile. A configuration absent from the
    timing journal falls back to the sweep's own timings (``latency_source = "sweep"``), which
    are contended when the sweep ran with several workers.
    """
    rows = []
    tlab = config_labels(timing) if len(timing) and set(CONFIG_KEYS) <= set(timing.columns) else None
    ilab = config_labels(items)
    for c in configs:
        n = int(nfe.get(c.label, c.steps))
        row: dict[str, Any] = {"config": c.label, "nfe": n, "rtf_median": np.nan, "rtf_p90": np.nan,
                               "ms_per_nfe": np.nan, "first_call_s": np.nan, "n_timed": 0,
                               "latency_source": "none"}
        src = timing[tlab == c.label] if tlab is not None else timing.iloc[0:0]
        if len(src):
            rep = pd.to_numeric(src["repeat"], errors="coerce") if "repeat" in src.columns \
                else pd.Series(0, index=src.index)
            timed, first = src[rep >= 0], src[rep == -1]
            rtf = pd.to_numeric(timed.get("rtf"), errors="coerce").dropna().to_numpy()
            if rtf.size:
                row.update(rtf_median=float(np.median(rtf)), rtf_p90=float(np.percentile(rtf, 90)),
                           n_timed=int(rtf.size), latency_source="timing")
                row["ms_per_nfe"] = _ms_per_nfe(timed, n)
            secs = pd.to_numeric(first.get("seconds"), errors="coerce").dropna().to_numpy()
            if secs.size:
                row["first_call_s"] = float(np.median(secs))
        if row["latency_source"] == "none":
            sw = items[(ilab == c.label) & ok_mask(items)]
            rtf = pd.to_numeric(sw.get("rtf"), errors="coerce").dropna().to_numpy() if len(sw) else []
            if len(rtf):
                row.update(rtf_median=float(np.median(rtf)), rtf_p90=float(np.percentile(rtf, 90)),
                           n_timed=int(len(rtf)), latency_source="sweep")
                row["ms_per_nfe"] = _ms_per_nfe(sw, n)
        rows.append(row)
    return pd.DataFrame(rows).set_index("config")


def _ms_per_nfe(frame: pd.DataFrame, nfe: int) -> float:
    if "ms_per_nfe" in frame.columns:
        v = pd.to_numeric(frame["ms_per_nfe"], errors="coerce").dropna().to_numpy()
        if v.size:
            return float(np.median(v))
    s = pd.to_numeric(frame.get("seconds", frame.get("synth_s")), errors="coerce").dropna().to_numpy()
    return float(np.median(s) * 1e3 / max(nfe, 1)) if s.size else np.nan


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
    missing = [k for k in (*CONFIG_KEYS, "utt_id") if k not in items.columns]
    if missing:
        raise InputError("items lack required fields", source="items.jsonl", field=missing[0])
    all_cols = dict(manifest.get("columns") or {})
    # Default: the quality columns, i.e. those with a direction; a column whose higher_is_better
    # is not a boolean (e.g. a frame count) is informational and left out.
    names = [c for c in all_cols if isinstance((all_cols[c] or {}).get("higher_is_better"), bool)] \
        if columns is None else list(columns)
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
    nfe = _nfe_map(manifest, items)
    rows, per_utt = [], {}
    for col in names:
        hib = higher_is_better(all_cols, col)
        table = utterance_means(items, col, configs)
        per_utt[col] = table
        ref_vals = table[ref.label]
        block = []
        for c in configs:
            x = table[c.label].to_numpy(dtype=np.float64)
            xf = x[np.isfinite(x)]
            lo, hi = bootstrap_mean_interval(xf, settings)
            r: dict[str, Any] = {"config": c.label, "column": col, "n": int(xf.size),
                                 "mean": float(xf.mean()) if xf.size else np.nan,
                                 "median": float(np.median(xf)) if xf.size else np.nan,
                                 "ci_low": lo, "ci_high": hi, "diff": np.nan, "diff_low": np.nan,
                                 "diff_high": np.nan, "diff_bound": np.nan, "n_pairs": 0, "p": np.nan}
            if c != ref:
                d = (table[c.label] - ref_vals).to_numpy(dtype=np.float64)
                d = d[np.isfinite(d)]
                side = "greater" if hib else "less"
                (dlo, dhi), b = bootstrap_mean_intervals(d, settings, ("two-sided", side))
                r.update(diff=float(d.mean()) if d.size else np.nan, diff_low=dlo, diff_high=dhi,
                         diff_bound=b[0] if hib else b[1], n_pairs=int(d.size), p=wilcoxon_p(d))
            block.append(r)
        adj = holm([r["p"] for r in block])
        for r, a in zip(block, adj):
            r["p_holm"] = float(a)
        rows.extend(block)
    metrics = pd.DataFrame(rows, columns=["config", "column", "n", "mean", "median", "ci_low",
                                          "ci_high", "diff", "diff_low", "diff_high", "diff_bound",
                                          "n_pairs", "p", "p_holm"])
    timing = run.timing if run.timing is not None else pd.DataFrame()
    return RunStatistics(configs=configs, reference=ref, columns={c: dict(all_cols[c]) for c in names},
                         metrics=metrics, latency=latency_summary(timing, items, configs, nfe),
                         failures=failure_counts(items, configs), per_utterance=per_utt,
                         settings=settings)


def _nfe_map(manifest: Mapping[str, Any], items: pd.DataFrame) -> dict[str, int]:
    out: dict[str, int] = {}
    if "nfe" in items.columns:
        for lab, n in zip(config_labels(items), pd.to_numeric(items["nfe"], errors="coerce")):
            if np.isfinite(n):
                out.setdefault(lab, int(n))
    for g in manifest.get("grid") or []:
        if g.get("nfe") is not None:
            out[f"{g['schedule']}/{g['sampler']}/{int(g['steps'])}"] = int(g["nfe"])
    return out
