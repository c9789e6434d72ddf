"""Which configurations decide the verdict, and whether the test set can decide at all.

Gated set (policy ``gated``)
----------------------------
* a list of ``schedule/sampler/steps`` labels: those configurations (baseline or candidate side);
* ``"all"``: every compared configuration;
* ``"recommended"`` (default): with ``--match-config``, the matched pairs (asked for by name);
  else the configurations the baseline's recorded recommendation names
  (``report/recommendation.json`` of a run directory, or the copy a frozen baseline carries;
  format in :mod:`vocobench.report.recommendation`), and every configuration when the baseline
  records none, or when its recommendation names none (too little evidence to name one).

Multiplicity is controlled over the gated cells only (``m`` = gated configurations × compared
metrics); the other configurations are compared as information.

Size check
----------
:func:`check_size` runs after the items are paired and before any statistic: a gated
configuration with fewer than ``max(min_items, ⌈log₂(m/α)⌉)`` paired utterances is refused with
an :class:`~vocobench.errors.InputError` (exit 2), because ``2⁻ⁿ``, the smallest p-value of any
exact paired test on ``n`` utterances (:func:`vocobench.inference.min_exact_p`), would exceed
Holm's first threshold ``α/m``: no regression could ever be shown.
"""
from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import Any, Mapping, Sequence

from ..errors import InputError
from ..inference import min_exact_p, resamples_for, utterances_for_level
from ..keys import ConfigKey
from ..report.recommendation import RECOMMENDATION_FILE, read_recommendation
from ..bootstrap import BootstrapSettings
from ..store import Run
from .baseline import BASELINE_KEY
from .policy import Policy
from .verdict import ConfigResult


def recorded_recommendation(run: Run) -> dict[str, Any] | None:
    """The recommendation recorded with ``run`` (see module docstring), or ``None``."""
    kept = run.manifest.get(BASELINE_KEY) if isinstance(run.manifest, Mapping) else None
    if isinstance(kept, Mapping):
        return dict(kept)
    path = Path(run.path)
    if path.is_dir() and (path / RECOMMENDATION_FILE).is_file():
        return read_recommendation(path / RECOMMENDATION_FILE)
    return None


def select_gated(pairs: Sequence[tuple[ConfigKey, ConfigKey]], pol: Policy, base: Run,
                 matched: bool) -> tuple[list[int], str]:
    """Indices of the gated ``pairs`` and why they are gated (said in every output)."""
    every = list(range(len(pairs)))
    if isinstance(pol.gated, tuple):
        names = set(pol.gated)
        known = {lab for b, c in pairs for lab in (b.label, c.label)}
        for lab in pol.gated:
            if lab not in known:
                raise InputError("not a compared configuration; compared: "
                                 + ", ".join(sorted({b.label for b, _ in pairs})),
                                 source=pol.source, field="gated", value=lab)
        chosen = [i for i, (b, c) in enumerate(pairs) if b.label in names or c.label in names]
        return chosen, "named by the policy (gated = " + ", ".join(pol.gated) + ")"
    if pol.gated == "all":
        return every, "all compared configurations (policy gated = \"all\")"
    if matched:
        return every, "the configurations paired by --match-config"
    rec = recorded_recommendation(base)
    if rec is None:
        return every, "all compared configurations: the baseline records no recommendation"
    named = [str(x) for x in rec.get("recommended") or []]
    if not named:
        return every, ("all compared configurations: the baseline's recommendation names none "
                       f"({rec.get('status_text') or 'too little evidence'})")
    chosen = [i for i, (b, _) in enumerate(pairs) if b.label in named]
    if not chosen:
        return every, ("all compared configurations: the baseline's recommended "
                       f"{', '.join(named)} is not among the compared ones")
    return chosen, "the baseline's recommended configuration (" + ", ".join(named) + ")"


def cells(results: Sequence[ConfigResult], n_metrics: int) -> int:
    """Number of gated cells ``m``."""
    return sum(r.gated for r in results) * n_metrics


def check_size(results: Sequence[ConfigResult], n_metrics: int, pol: Policy, source: str) -> None:
    """Refuse a test set too small to ever show a regression (module docstring)."""
    m = cells(results, n_metrics)
    gated = [r for r in results if r.gated]
    if not m or not gated:
        return
    level = pol.alpha / m
    need = max(pol.min_items, utterances_for_level(level))
    worst = min(gated, key=lambda r: r.paired)
    n = worst.paired
    if n >= need:
        return
    why = []
    if min_exact_p(n) > level:
        why.append(f"the smallest p-value any exact paired test on {n} utterances can reach is "
                   f"2^-{n} = {min_exact_p(n):.3g}, above Holm's first threshold α/m = "
                   f"{pol.alpha:g}/{m} = {level:.3g}, so no regression could ever be shown")
    if n < pol.min_items:
        why.append(f"fewer than min_items = {pol.min_items}")
    raise InputError(f"test set too small for a verdict, refused before comparing: "
                     f"{worst.name} has {n} paired utterances ({len(gated)} gated configuration"
                     f"{'s' * (len(gated) != 1)} × {n_metrics} metric{'s' * (n_metrics != 1)} = "
                     f"{m} test{'s' * (m != 1)}); " + "; ".join(why) + f"; at least {need} are "
                     "needed (add utterances, gate fewer configurations, or see vocobench "
                     "plan-size)", source=source, field="min_items", value=n)


def effective_settings(pol: Policy, m: int) -> tuple[BootstrapSettings, str]:
    """The policy's bootstrap settings with enough resamples for Holm's first threshold
    (:func:`vocobench.inference.resamples_for`), and a note when they were raised."""
    s = pol.settings
    if not m:
        return s, ""
    b = resamples_for(pol.alpha / m, floor=s.n_resamples)
    if b == s.n_resamples:
        return s, ""
    return replace(s, n_resamples=b), (f"bootstrap resamples raised from {s.n_resamples} to {b} so "
                                       f"that p-values resolve Holm's first threshold α/m = "
                                       f"{pol.alpha / m:.3g} ({m} gated tests)")

