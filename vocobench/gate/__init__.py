"""Release regression gate: is the candidate vocoder (or sampler setting) worse than the baseline?

* :func:`compare_runs` — pass, regression or inconclusive between two stored runs or frozen
  baselines (decision rule in :mod:`vocobench.gate.verdict`, gated set and size check in
  :mod:`vocobench.gate.gating`, thresholds in :mod:`vocobench.gate.policy`);
* :func:`plan_size` — utterances needed to detect a given drop, from a pilot run's spread;
* :func:`ab_compare` — interleaved A/B latency of two configs on this machine;
* :func:`freeze` / :func:`load_side` — compact ``vocobench-baseline/1`` files;
* :func:`assert_no_regression` — for a user's own pytest suite;
* :mod:`vocobench.gate.outputs` — verdict line, Markdown, JSON, JUnit XML.
"""
from __future__ import annotations

import importlib
from typing import Any

# name → submodule; loaded on first use, so that `vocobench compare --help` stays quick
_EXPORTS = {
    "BASELINE_FORMAT": "baseline", "freeze": "baseline", "load_baseline": "baseline",
    "load_side": "baseline", "Comparison": "compare", "ConfigResult": "compare",
    "MetricResult": "compare", "compare_runs": "compare", "parse_match": "compare",
    "LatencyResult": "latency", "junit": "outputs", "markdown": "outputs", "to_json": "outputs",
    "resolution_lines": "outputs", "verdict_line": "outputs", "SizePlan": "plan",
    "plan_size": "plan", "DEFAULT_ALLOW": "policy", "Allowance": "policy",
    "Policy": "policy", "load_policy": "policy", "assert_no_regression": "pytest_helper",
    "ab_compare": "ab",
}


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def ab_compare(*args, **kwargs):  # type: ignore[no-untyped-def]
    """See :func:`vocobench.gate.ab.ab_compare` (imported lazily: it loads the sweep)."""
    from .ab import ab_compare as _ab

    return _ab(*args, **kwargs)


__all__ = ["BASELINE_FORMAT", "DEFAULT_ALLOW", "Allowance", "Comparison", "ConfigResult",
           "LatencyResult", "MetricResult", "Policy", "SizePlan", "ab_compare",
           "assert_no_regression", "compare_runs", "freeze", "junit", "load_baseline",
           "load_policy", "load_side", "markdown", "parse_match", "plan_size", "resolution_lines",
           "to_json", "verdict_line"]
