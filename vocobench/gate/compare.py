"""Is the candidate worse than the baseline? Paired comparison of two stored runs.

Matching
--------
An item is identified by ``(utterance, schedule, sampler, steps, seed)``, the utterance by its id
*and* content hash (``utt_id`` + ``utt_sha``), so a re-recorded file under an old id never pairs.
When the two runs share seeds, only the shared seeds are used (same seed, same noise draw: the
comparison then has common random numbers); when they share none, each side's own seeds are used
and the report says so. As in :mod:`vocobench.stats`, the utterance is the unit: the seeds of an
utterance are averaged first (``ok`` items only), then ``d_u = candidate_u − baseline_u`` over the
utterances both runs have.

Verdict rule (per configuration and metric)
-------------------------------------------
Let ``s_u = d_u`` for a metric where higher is better and ``s_u = −d_u`` where lower is better
(so ``s > 0`` always means "better"), ``δ`` the allowed drop from the policy (in the metric's
unit; a relative allowance is taken of the baseline mean of the paired utterances), ``L`` and
``U`` the one-sided lower and upper bootstrap bounds of mean(s), each at the policy's confidence
``c`` (paired bootstrap over utterances, :func:`vocobench.stats.bootstrap_mean_interval`, BCa by
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

Comparability
-------------
Two runs are comparable only with the same test set (``dataset.fingerprint``), front-end,
metric variants (library versions alone are a caution, not a refusal), length policy and
configurations (grid). Otherwise :class:`~vocobench.errors.InputError` names every difference,
unless ``force``: then the common part is compared and the differences head the report.
``match`` pairs configurations explicitly (``{"uniform/ddim/50": "uniform/ddim/10"}``), e.g. to
compare a cheaper sampler setting against the current one; the grid check is then skipped.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from ..errors import InputError
from ..store import Run
from ..stats import (CONFIG_KEYS, Config, bootstrap_mean_intervals, config_labels, configurations, holm,
                     ok_mask, utterance_means, wilcoxon_p)
from .baseline import load_side
from .latency import LatencyResult, hardware_differences, stored_latency
from .policy import Policy, resolve_policy

VERDICTS = ("regression", "inconclusive", "improvement", "pass")
UKEY = "_ukey"
CFG = "_cfg"


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


# ---------------------------------------------------------------- comparability

def _variant_core(v: Any) -> Any:
    return {k: x for k, x in v.items() if k != "libraries"} if isinstance(v, Mapping) else v


def _dict_diff(a: Mapping[str, Any] | None, b: Mapping[str, Any] | None) -> list[str]:
    a, b = dict(a or {}), dict(b or {})
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


def comparability(base: Run, cand: Run, *, check_grid: bool = True,
                  configs: tuple[Sequence[Config], Sequence[Config]] | None = None
                  ) -> tuple[list[str], list[str]]:
    """``(problems, cautions)``: reasons the runs are not comparable, and softer differences.

    ``configs``: each side's :func:`~vocobench.stats.configurations`, if already computed.
    """
    mb, mc = base.manifest, cand.manifest
    problems, cautions = [], []
    db, dc = mb.get("dataset") or {}, mc.get("dataset") or {}
    if db.get("fingerprint") is None or db.get("fingerprint") != dc.get("fingerprint"):
        problems.append(f"different test sets (baseline fingerprint {db.get('fingerprint')} of "
                        f"{db.get('n_utterances', '?')} utterances, candidate {dc.get('fingerprint')} "
                        f"of {dc.get('n_utterances', '?')})")
    fe = _dict_diff(mb.get("frontend"), mc.get("frontend"))
    if fe:
        shown = ", ".join(f"{k} {(mb.get('frontend') or {}).get(k)!r} vs {(mc.get('frontend') or {}).get(k)!r}"
                          for k in fe[:4])
        problems.append(f"different front-ends ({shown})")
    metb, metc = mb.get("metrics") or {}, mc.get("metrics") or {}
    if set(metb) != set(metc):
        problems.append(f"different metric sets (baseline {sorted(metb)}, candidate {sorted(metc)})")
    changed = sorted(k for k in set(metb) & set(metc) if _variant_core(metb[k]) != _variant_core(metc[k]))
    if changed:
        detail = "; ".join(f"{k}: {', '.join(_dict_diff(_variant_core(metb[k]), _variant_core(metc[k])))}"
                           for k in changed)
        problems.append(f"different metric variants ({detail})")
    libs = sorted(k for k in set(metb) & set(metc) if k not in changed and metb[k] != metc[k])
    if libs:
        cautions.append("metric library versions differ for " + ", ".join(libs)
                        + " (same settings; scores may still shift slightly)")
    if (mb.get("length_policy") or None) != (mc.get("length_policy") or None):
        problems.append(f"different length policies ({mb.get('length_policy')} vs {mc.get('length_policy')})")
    if check_grid:
        cb, cc = configs or _side_configs(base, cand)
        gb, gc = [c.label for c in cb], [c.label for c in cc]
        only_b, only_c = [g for g in gb if g not in gc], [g for g in gc if g not in gb]
        if only_b or only_c:
            problems.append("different configurations (only in baseline: "
                            f"{', '.join(only_b) or 'none'}; only in candidate: {', '.join(only_c) or 'none'})")
    return problems, cautions


def _side_configs(base: Run, cand: Run) -> tuple[list[Config], list[Config]]:
    """Each side's configurations with items (none for a run without items)."""
    return tuple(configurations(r.manifest, r.items) if len(r.items) else [] for r in (base, cand))


# ---------------------------------------------------------------- preparation

def _prepared(run: Run) -> pd.DataFrame:
    items = run.items
    missing = [k for k in (*CONFIG_KEYS, "utt_id") if k not in items.columns]
    if missing:
        raise InputError("items lack required fields", source=str(run.path), field=missing[0])
    df = items.copy()
    sha = df["utt_sha"].astype(str) if "utt_sha" in df.columns else pd.Series("", index=df.index)
    df[UKEY] = df["utt_id"].astype(str) + "@" + sha.where(sha != "None", "")
    df[CFG] = config_labels(df)
    if "seed" not in df.columns:
        df["seed"] = 0
    df["seed"] = pd.to_numeric(df["seed"], errors="coerce").fillna(-1).astype(int)
    df["_ok"] = ok_mask(df)
    return df


def _directed_columns(base: Run, cand: Run) -> tuple[list[str], list[str]]:
    """Metric columns compared (in both, same direction, directed) and notes on the rest."""
    cb, cc = base.metric_columns, cand.metric_columns
    cols, notes = [], []
    for name, spec in cb.items():
        hib = spec.get("higher_is_better") if isinstance(spec, Mapping) else None
        if not isinstance(hib, bool):
            continue                                     # diagnostic column, no direction
        other = cc.get(name)
        if not isinstance(other, Mapping):
            notes.append(f"{name}: not in the candidate, not compared")
        elif other.get("higher_is_better") is not hib:
            notes.append(f"{name}: direction differs between the runs, not compared")
        elif name not in base.items.columns or name not in cand.items.columns:
            notes.append(f"{name}: no values stored, not compared")
        else:
            cols.append(name)
    return cols, notes


def _pairs(cb: Sequence[Config], cc: Sequence[Config],
           match: Mapping[str, str] | None) -> list[tuple[Config, Config]]:
    if match:
        out = []
        for b, c in match.items():
            bc = b if isinstance(b, Config) else Config.parse(b, source="--match-config")
            ccfg = c if isinstance(c, Config) else Config.parse(c, source="--match-config")
            if bc not in cb:
                raise InputError("configuration has no items in the baseline; valid: "
                                 + ", ".join(x.label for x in cb), field="--match-config", value=bc.label)
            if ccfg not in cc:
                raise InputError("configuration has no items in the candidate; valid: "
                                 + ", ".join(x.label for x in cc), field="--match-config", value=ccfg.label)
            out.append((bc, ccfg))
        return out
    common = [c for c in cb if c in set(cc)]
    return [(c, c) for c in common]


def parse_match(texts: Iterable[str]) -> dict[str, str]:
    """``BASE_LABEL=CAND_LABEL`` strings → mapping (labels are ``schedule/sampler/steps``)."""
    out: dict[str, str] = {}
    for t in texts:
        b, sep, c = str(t).partition("=")
        if not sep:
            raise InputError("expected BASE_CONFIG=CAND_CONFIG (schedule/sampler/steps each)",
                             field="--match-config", value=t)
        bl = Config.parse(b.strip(), source="--match-config").label
        if bl in out:
            raise InputError("baseline configuration matched twice", field="--match-config", value=bl)
        out[bl] = Config.parse(c.strip(), source="--match-config").label
    return out


# ---------------------------------------------------------------- the comparison

def compare_runs(baseline: "str | Path | Run", candidate: "str | Path | Run",
                 policy: "Policy | str | Path | Mapping[str, Any] | None" = None, *,
                 force: bool = False, match: Mapping[str, str] | None = None) -> Comparison:
    """Compare a candidate run with a baseline run (directories, baseline files or loaded runs).

    Parameters
    ----------
    baseline, candidate : run directory, frozen baseline file, or :class:`~vocobench.store.Run`.
    policy : :class:`Policy`, policy TOML path, mapping, or ``None`` for the default policy.
    force : compare the common part of runs that are not comparable (differences are reported).
    match : explicit ``{baseline label: candidate label}`` configuration pairs.

    Returns a :class:`Comparison`; see the module docstring for the verdict rule.
    Raises :class:`InputError` for unusable or (without ``force``) incomparable inputs.
    """
    pol = resolve_policy(policy)
    base, cand = load_side(baseline), load_side(candidate)
    for run, side in ((base, "baseline"), (cand, "candidate")):
        if run.items is None or not len(run.items):
            raise InputError(f"the {side} has no finished items", source=str(run.path))
    configs = _side_configs(base, cand)
    problems, cautions = comparability(base, cand, check_grid=not match, configs=configs)
    if problems and not force:
        raise InputError("not comparable: " + "; ".join(problems) + "; use --force to compare anyway")
    comp = Comparison(str(base.path), str(cand.path), [], pol, forced=list(problems),
                      notes=list(cautions), meta=_meta(base, cand))
    pairs = _pairs(*configs, match)
    if not pairs:
        raise InputError("the runs have no configuration in common")
    bi, ci = _prepared(base), _prepared(cand)
    seeds_b, seeds_c = sorted(set(bi["seed"])), sorted(set(ci["seed"]))
    common = sorted(set(seeds_b) & set(seeds_c))
    comp.seeds = {"baseline": seeds_b, "candidate": seeds_c, "used": common or "each run's own"}
    if common:
        if seeds_b != seeds_c:
            comp.notes.append(f"seeds differ (baseline {seeds_b}, candidate {seeds_c}); "
                              f"only the shared seeds {common} are compared")
        bi, ci = bi[bi["seed"].isin(common)], ci[ci["seed"].isin(common)]
    else:
        comp.notes.append(f"no seed in common (baseline {seeds_b}, candidate {seeds_c}); utterance "
                          "means over each run's own seeds are compared (different noise draws)")
    cols, col_notes = _directed_columns(base, cand)
    comp.notes.extend(col_notes)
    hw = hardware_differences(base.manifest, cand.manifest)
    if hw:
        comp.latency_note = "latency not comparable: " + "; ".join(hw)
    results = [_config_items(bi, ci, b, c, matched_seeds=bool(common)) for b, c in pairs]
    cfg_b, cfg_c = list(dict.fromkeys(b for b, _ in pairs)), list(dict.fromkeys(c for _, c in pairs))
    for col in cols:
        spec = base.metric_columns[col]
        mb = utterance_means(bi, col, cfg_b, key=UKEY)
        mc = utterance_means(ci, col, cfg_c, key=UKEY)
        rows = [_metric(mb[b.label], mc[c.label], col, spec, pol) for b, c in pairs]
        for r, adj in zip(rows, holm([r.p for r in rows])):
            r.p_holm = float(adj)
        for r, res in zip(rows, results):
            _metric_verdict(r, pol)
            res.metrics.append(r)
    for res, (b, c) in zip(results, pairs):
        res.latency = (LatencyResult("not comparable", reason="; ".join(hw)) if hw else
                       stored_latency(base.timing, cand.timing, b, c, pol))
        _config_verdict(res, pol)
    comp.configs = results
    return comp


def _meta(base: Run, cand: Run) -> dict[str, Any]:
    def side(r: Run) -> dict[str, Any]:
        v = r.manifest.get("vocoder") or {}
        return {"path": str(r.path), "target": v.get("target"), "version": v.get("version"),
                "created_utc": r.manifest.get("created_utc"),
                "n_utterances": (r.manifest.get("dataset") or {}).get("n_utterances")}
    return {"baseline": side(base), "candidate": side(cand)}


def _config_items(bi: pd.DataFrame, ci: pd.DataFrame, b: Config, c: Config,
                  matched_seeds: bool) -> ConfigResult:
    xb, xc = bi[bi[CFG] == b.label], ci[ci[CFG] == c.label]
    res = ConfigResult(b.label, c.label, items_baseline=len(xb), items_candidate=len(xc),
                       failed_baseline=int((~xb["_ok"]).sum()), failed_candidate=int((~xc["_ok"]).sum()))
    keys = [UKEY, "seed"] if matched_seeds else [UKEY]
    ok_b = xb.groupby(keys)["_ok"].all()
    ok_c = xc.groupby(keys)["_ok"].all()
    both = ok_b.to_frame("b").join(ok_c.to_frame("c"), how="left")
    res.missing = int(both["c"].isna().sum())
    both = both.dropna()
    res.new_failures = int((both["b"].astype(bool) & ~both["c"].astype(bool)).sum())
    return res


def _metric(xb: pd.Series, xc: pd.Series, col: str, spec: Mapping[str, Any], pol: Policy) -> MetricResult:
    """``xb``, ``xc``: per-utterance means of ``col`` (index: utterance key) of the two sides."""
    pair = pd.concat({"b": xb, "c": xc}, axis=1, join="inner")
    pair = pair[np.isfinite(pair.to_numpy(dtype=np.float64)).all(axis=1)]     # NaN/±inf: no pair
    d = (pair["c"] - pair["b"]).to_numpy(dtype=np.float64)
    n = int(d.size)
    bmean = float(pair["b"].mean()) if n else math.nan
    allowance = pol.allowance(col)
    lo, hi = one_sided_bounds(d, pol)
    return MetricResult(column=col, unit=str(spec.get("unit", "")),
                        higher_is_better=bool(spec["higher_is_better"]), n=n, baseline_mean=bmean,
                        candidate_mean=float(pair["c"].mean()) if n else math.nan,
                        diff=float(d.mean()) if n else math.nan, diff_low=float(lo), diff_high=float(hi),
                        allowed=allowance.margin(bmean), allowance=str(allowance),
                        p=float(wilcoxon_p(d)) if n else math.nan)


def one_sided_bounds(d: np.ndarray, pol: Policy) -> tuple[float, float]:
    """Lower and upper one-sided bootstrap bounds of mean(d), each at the policy's confidence
    (together the two-sided ``2·confidence − 1`` interval); NaN for fewer than two values."""
    if np.asarray(d).size < 2:
        return math.nan, math.nan
    (lo, _), (_, hi) = bootstrap_mean_intervals(d, pol.settings, ("greater", "less"))
    return float(lo), float(hi)


def _metric_verdict(r: MetricResult, pol: Policy) -> None:
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


def _config_verdict(res: ConfigResult, pol: Policy) -> None:
    reasons = []
    if res.new_failures:
        reasons.append(f"{res.new_failures} new failed item{'s' * (res.new_failures != 1)}")
    for m in res.metrics:
        if m.verdict == "regression":
            reasons.append(metric_brief(m))
    if res.latency.verdict == "regression":
        reasons.append(f"RTF ×{res.latency.ratio:.3g} [{res.latency.ratio_low:.3g}, {res.latency.ratio_high:.3g}]")
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
    return f"{m.column} {fmt_signed(m.diff)} [{fmt_signed(m.diff_low)}, {fmt_signed(m.diff_high)}]"


def fmt_signed(x: float, digits: int = 3) -> str:
    """``+0.012`` / ``−0.210`` (typographic minus), ``n/a`` for NaN."""
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:+.{digits}f}".replace("-", "−")
