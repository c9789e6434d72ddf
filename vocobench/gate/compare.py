"""Is the candidate worse than the baseline? Paired comparison of two stored runs.

:func:`compare_runs` checks that the runs are comparable and pairs their items
(:mod:`vocobench.gate.match`), chooses the gated configurations and refuses a test set too small
for a verdict (:mod:`vocobench.gate.gating`), compares every metric of every configuration pair
by :func:`vocobench.stats.paired_comparison`, reads each cell's p-value of "drop beyond the
allowance" from the same bootstrap draw (:func:`vocobench.inference.bootstrap_p`), adjusts the
gated cells' p-values together by Holm's method (:func:`vocobench.stats.holm`), and applies the
decision rule of :mod:`vocobench.gate.verdict`; latency verdicts come from
:mod:`vocobench.gate.latency`.
"""
from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from ..errors import InputError
from ..inference import bootstrap_p, detectable
from ..keys import direction
from ..runtables import utterance_means
from ..stats import PairedResult, holm, paired_comparison
from ..store import Run
from .baseline import load_side
from .gating import cells, check_size, effective_settings, select_gated
from .latency import LatencyResult, hardware_differences, stored_latency
from .match import (UKEY, comparability, compared_columns, config_items, config_pairs, parse_match,
                    prepared, shared_seeds, side_configs)
from .policy import Policy, resolve_policy
from .verdict import (VERDICTS, Comparison, ConfigResult, MetricResult, config_verdict, metric_brief,
                      metric_verdict)


__all__ = ["VERDICTS", "Comparison", "ConfigResult", "MetricResult", "comparability", "compare_runs",
           "metric_brief", "parse_match"]


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

    Returns a :class:`Comparison`; see :mod:`vocobench.gate.verdict` for the verdict rule.
    Raises :class:`InputError` for unusable or (without ``force``) incomparable inputs.
    """
    pol = resolve_policy(policy)
    base, cand = load_side(baseline), load_side(candidate)
    for run, side in ((base, "baseline"), (cand, "candidate")):
        if run.items is None or not len(run.items):
            raise InputError(f"the {side} has no finished items", source=str(run.path))
    configs = side_configs(base, cand)
    problems, cautions = comparability(base, cand, check_grid=not match, configs=configs)
    if problems and not force:
        raise InputError("not comparable: " + "; ".join(problems) + "; use --force to compare anyway")
    comp = Comparison(str(base.path), str(cand.path), [], pol, forced=list(problems),
                      notes=list(cautions), meta=_meta(base, cand))
    pairs = config_pairs(*configs, match)
    if not pairs:
        raise InputError("the runs have no configuration in common")
    bi, ci, comp.seeds, note = shared_seeds(prepared(base), prepared(cand))
    common = comp.seeds["used"] != "each run's own"
    if note:
        comp.notes.append(note)
    cols, col_notes = compared_columns(base, cand)
    if not cols:
        raise InputError("no metric column to compare: " + ("; ".join(col_notes) or
                         "neither run has a directed metric column"), source=str(cand.path))
    comp.notes.extend(col_notes)
    hw = hardware_differences(base.manifest, cand.manifest)
    if hw:
        comp.latency_note = "latency not comparable: " + "; ".join(hw)
    results = [config_items(bi, ci, b, c, matched_seeds=bool(common)) for b, c in pairs]
    gated, comp.gated_by = select_gated(pairs, pol, base, matched=bool(match))
    for i, res in enumerate(results):
        res.gated = i in gated
    check_size(results, len(cols), pol, source=str(base.path))
    m = cells(results, len(cols))
    settings, raised = effective_settings(pol, m)
    if raised:
        comp.notes.append(raised)
    cfg_b, cfg_c = list(dict.fromkeys(b for b, _ in pairs)), list(dict.fromkeys(c for _, c in pairs))
    for col in cols:
        spec = base.metric_columns[col]
        mb = utterance_means(bi, col, cfg_b, key=UKEY)
        mc = utterance_means(ci, col, cfg_c, key=UKEY)
        for (b, c), res in zip(pairs, results):
            pr = paired_comparison(mb[b.label], mc[c.label], settings, direction(spec))
            res.metrics.append(_metric(pr, col, spec, pol, m if res.gated else 1, settings.method,
                                       res.gated))
    family = [x for res in results if res.gated for x in res.metrics]
    for x, adj in zip(family, holm([x.p for x in family])):
        x.p_holm = float(adj)
    for res, (b, c) in zip(results, pairs):
        for x in res.metrics:
            metric_verdict(x, pol)
        res.latency = (LatencyResult("not comparable", reason="; ".join(hw)) if hw else
                       stored_latency(base.timing, cand.timing, b, c, pol))
        config_verdict(res, pol)
    comp.configs = results
    return comp


def _meta(base: Run, cand: Run) -> dict[str, Any]:
    def side(r: Run) -> dict[str, Any]:
        v = r.manifest.get("vocoder") or {}
        return {"path": str(r.path), "target": v.get("target"), "version": v.get("version"),
                "created_utc": r.manifest.get("created_utc"),
                "n_utterances": (r.manifest.get("dataset") or {}).get("n_utterances")}
    return {"baseline": side(base), "candidate": side(cand)}


def _metric(pr: PairedResult, col: str, spec: Mapping[str, Any], pol: Policy, m: int, method: str,
            gated: bool) -> MetricResult:
    """The gate's view of a paired comparison: ``[diff_low, diff_high]`` are the one-sided
    bounds, the allowance is resolved against the paired baseline mean, ``p`` tests "drop beyond
    the allowance" on the direction-aware differences, and ``detectable`` is the smallest drop
    the test shows with the policy's power at level ``α/m``."""
    allowance = pol.allowance(col)
    delta = allowance.margin(pr.base_mean)
    sign = 1.0 if pr.higher_is_better else -1.0
    p = bootstrap_p(sign * pr.d, sign * pr.boot, -delta, method) if pr.n >= 2 else float("nan")
    return MetricResult(column=col, unit=str(spec.get("unit", "")),
                        higher_is_better=pr.higher_is_better, n=pr.n, baseline_mean=pr.base_mean,
                        candidate_mean=pr.cand_mean, diff=pr.diff,
                        diff_low=pr.bound_lower, diff_high=pr.bound_upper,
                        allowed=delta, allowance=str(allowance), p=p, sd=pr.sd,
                        detectable=delta + detectable(pr.sd, pr.n, pol.alpha / max(m, 1), pol.power),
                        gated=gated)
