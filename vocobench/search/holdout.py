"""The held-out check: finalists and the reference re-synthesised with fresh seeds on utterances
the search never saw, compared with the paired test of ``report`` (:func:`stats.paired_comparison`:
per-utterance means, bootstrap interval of the mean difference, Wilcoxon p, Holm over the family
of finalists × metrics).

Verdict per metric: ``better`` when the one-sided bound on the improving side clears zero and
the Holm-adjusted p is below 1 − confidence; else ``non-inferior`` when the bound on the worse
side stays within the margin (the rule of ``report``'s recommendation); else ``not shown
non-inferior``.
"""
from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

from ..stats import BootstrapSettings, PairedResult, holm_family, paired_comparison, within_margin
from .objective import Objective, utterance_means


def verdict(r: PairedResult, margin: float, confidence: float) -> str:
    gain = r.bound_lower if r.higher_is_better else -r.bound_upper
    if math.isfinite(gain) and gain > 0 and r.p_holm < 1 - confidence:
        return "better"
    if within_margin(r.worse_bound, margin, r.higher_is_better):
        return "non-inferior"
    return "not shown non-inferior"


def compare(reference: Sequence[Mapping[str, Any]], finalists: Mapping[str, Sequence[Mapping[str, Any]]],
            obj: Objective, margins: Mapping[str, float], settings: BootstrapSettings
            ) -> dict[str, dict[str, dict[str, Any]]]:
    """finalist → metric → comparison with the reference (means, interval, p, Holm p, verdict)."""
    cols = list(dict.fromkeys([obj.primary, *obj.metrics]))
    flat: list[tuple[str, str, PairedResult]] = []
    for name, recs in finalists.items():
        for col in cols:
            r = paired_comparison(utterance_means(reference, col), utterance_means(recs, col),
                                  settings, higher_is_better=obj.higher[col])
            flat.append((name, col, r))
    adjusted = holm_family([r for _, _, r in flat])
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for (name, col, _), r in zip(flat, adjusted):
        m = margins[col]
        out.setdefault(name, {})[col] = {
            "n": r.n, "reference_mean": r.base_mean, "candidate_mean": r.cand_mean, "diff": r.diff,
            "diff_low": r.diff_low, "diff_high": r.diff_high, "worse_bound": r.worse_bound,
            "p": r.p, "p_holm": r.p_holm, "margin": m, "higher_is_better": r.higher_is_better,
            "verdict": verdict(r, m, settings.confidence)}
    return out


def overall(result: Mapping[str, Mapping[str, Any]]) -> str:
    """One word for a finalist across metrics: better on all, else non-inferior on all, else not."""
    v = [m["verdict"] for m in result.values()]
    if v and all(x == "better" for x in v):
        return "better on every metric"
    if v and all(x in ("better", "non-inferior") for x in v):
        return "non-inferior"
    return "not shown non-inferior"
