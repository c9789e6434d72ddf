"""Can the test set support a recommendation? The evidence checks behind
:mod:`vocobench.report.decide`.

* :func:`too_few` — a test set below ``min_items``, or so small that no exact paired test can
  reach the report's level (``2⁻ⁿ > α``, :func:`vocobench.inference.min_exact_p`), supports no
  recommendation at all.
* :func:`undecided` — configurations whose mean differences lie inside every margin but whose
  one-sided bounds do not: not shown worse, not shown within. Each comes with the utterances
  that would show it within the margins if the observed differences were the true ones,
  ``n = ((z₁₋α + z_power)·σ_d / (margin − drop))²`` per metric, the largest over the metrics
  (:func:`vocobench.inference.needed`; Chow, Shao & Wang 2008, §3.1).
* :func:`ties` — configurations within the RTF budget that the best one on the primary metric is
  not shown better than (one-sided paired bootstrap bound at the report's confidence, not
  adjusted for the number of rivals), with the utterances that would separate them, by the same
  formula with the observed mean difference as the effect.

Using an observed difference as the planning effect is optimistic when that difference is
noise; the figures are for planning, not verdicts.
"""
from __future__ import annotations

import math
from typing import Iterable, Mapping

import numpy as np

from ..inference import min_exact_p, needed
from ..stats import RunStatistics, paired_comparison
from .options import ReportOptions


def too_few(n: int, opts: ReportOptions) -> str:
    """Why ``n`` utterances support no recommendation ("" when they may)."""
    alpha = 1.0 - opts.confidence
    why = []
    if n < opts.min_items:
        why.append(f"{n} utterances are fewer than decide.min_items = {opts.min_items}")
    if min_exact_p(n) > alpha:
        why.append(f"with {n} utterances no paired test can reach the {100 * opts.confidence:g} % "
                   f"level (smallest exact p-value 2^-{n} = {min_exact_p(n):.3g} > {alpha:.3g})")
    return "; ".join(why)


def _floor(n: int | None, opts: ReportOptions) -> int | None:
    return None if n is None else max(n, opts.min_items)


def _diffs(st: RunStatistics, col: str, config: str, other: str) -> np.ndarray:
    t = st.per_utterance[col]
    d = (t[config] - t[other]).to_numpy(dtype=np.float64)
    return d[np.isfinite(d)]


def undecided(st: RunStatistics, configs: Iterable[str], margins: Mapping[str, tuple[float, str]],
              opts: ReportOptions) -> dict[str, int | None]:
    """``config → utterances needed`` for the configurations inside every margin on average
    (module docstring); ``None`` when no number of utterances would do."""
    ref = st.reference.label
    alpha = 1.0 - opts.confidence
    out: dict[str, int | None] = {}
    for c in configs:
        worst: int | None = 0
        for col, (margin, _) in margins.items():
            d = _diffs(st, col, c, ref)
            if d.size < 2:
                worst = None
                break
            hib = bool(st.columns[col]["higher_is_better"])
            drop = -float(d.mean()) if hib else float(d.mean())
            if drop >= margin:
                break                               # outside on average: decided, not undecided
            n = needed(float(np.std(d, ddof=1)), margin - drop, alpha, opts.power)
            worst = None if n is None or worst is None else max(worst, n)
        else:
            out[c] = _floor(worst, opts)
    return out


def ties(st: RunStatistics, best: str, rivals: Iterable[str], primary: str,
         opts: ReportOptions) -> dict[str, int | None]:
    """``rival → utterances needed`` for the rivals ``best`` is not shown better than."""
    hib = bool(st.columns[primary]["higher_is_better"])
    t = st.per_utterance[primary]
    alpha = 1.0 - opts.confidence
    out: dict[str, int | None] = {}
    for r in rivals:
        if r == best:
            continue
        pr = paired_comparison(t[best], t[r], st.settings, hib)       # d = rival − best
        shown = pr.bound_upper < 0 if hib else pr.bound_lower > 0
        if math.isfinite(pr.bound_upper) and shown:
            continue
        gap = abs(pr.diff) if math.isfinite(pr.diff) else math.nan
        out[r] = _floor(needed(pr.sd, gap, alpha, opts.power) if math.isfinite(gap) else None, opts)
    return out


def smallest(needs: Mapping[str, int | None]) -> int | None:
    """The smallest finite figure of ``needs`` (``None`` if there is none)."""
    vals = [v for v in needs.values() if v is not None]
    return min(vals) if vals else None
