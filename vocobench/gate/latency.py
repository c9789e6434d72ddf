"""Latency verdicts: ratio of median real-time factors, candidate over baseline.

RTF measured on different machines is not comparable, so stored runs are compared only when
their recorded hardware (processor, CPU count and affinity, machine, platform, the plug-in's
device description) and the timing thread limit agree; otherwise the latency verdict is
"not comparable" with the differences as the reason, and only an A/B run
(:mod:`vocobench.gate.ab`, both vocoders timed interleaved in one process) can decide.

Rule: ``r = median(RTF_candidate) / median(RTF_baseline)`` over the timed calls (repeat ≥ 0) on
the timing utterances both runs have, with one-sided percentile bootstrap bounds ``L`` and
``U`` (Efron 1979), each at the policy's confidence, resampling each side's calls (paired per
round in A/B mode).
With ``g = 1 + max_rtf_increase_pct/100``: **regression** if ``L > g``; **improvement** if
``U < 1/g``; **pass** if ``U ≤ g`` (shown within the allowance); **inconclusive** otherwise and
with fewer than two timed calls a side.

In a comparison of stored runs the latency can add a regression to a configuration but never
decides a pass (timings of two runs are rarely comparable enough); in A/B mode it is the verdict.

Caution: repeats within one stored run do not see run-to-run drift (thermal state, other load),
so stored-run intervals can be too narrow; prefer the A/B mode for a latency decision.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats as sst

from ..keys import CONFIG_KEYS, ConfigKey, labels
from ..bootstrap import BootstrapSettings

HARDWARE_KEYS = ("processor", "cpu_count", "affinity", "machine", "platform", "plugin")


@dataclass
class LatencyResult:
    """Latency of one configuration pair; ``verdict`` is pass, regression, improvement,
    inconclusive, not comparable or not measured."""

    verdict: str
    baseline_rtf: float = math.nan
    candidate_rtf: float = math.nan
    ratio: float = math.nan
    ratio_low: float = math.nan
    ratio_high: float = math.nan
    n_baseline: int = 0
    n_candidate: int = 0
    source: str = ""
    reason: str = ""


def hardware_differences(mb: Mapping[str, Any], mc: Mapping[str, Any]) -> list[str]:
    """Why RTFs of two runs are not comparable (empty list: comparable)."""
    hb, hc = mb.get("hardware"), mc.get("hardware")
    if not isinstance(hb, Mapping) or not isinstance(hc, Mapping):
        return ["hardware not recorded"]
    out = [f"{k} differs ({hb.get(k)!r} vs {hc.get(k)!r})" for k in HARDWARE_KEYS
           if hb.get(k) != hc.get(k)]
    tb, tc = (mb.get("timing") or {}).get("threads"), (mc.get("timing") or {}).get("threads")
    if tb != tc:
        out.append(f"timing thread limit differs ({tb} vs {tc})")
    return out


def ratio_of_medians(a: Sequence[float], b: Sequence[float], settings: BootstrapSettings,
                     paired: bool = False) -> tuple[float, float, float]:
    """``median(b)/median(a)`` with one-sided percentile bootstrap bounds, each at
    ``settings.confidence`` (NaN bounds for n < 2)."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if paired:
        ok = np.isfinite(a) & np.isfinite(b)
        a, b = a[ok], b[ok]
    else:
        a, b = a[np.isfinite(a)], b[np.isfinite(b)]
    if not a.size or not b.size or np.median(a) <= 0:
        return math.nan, math.nan, math.nan
    r = float(np.median(b) / np.median(a))
    if a.size < 2 or b.size < 2:
        return r, math.nan, math.nan

    def stat(x: np.ndarray, y: np.ndarray, axis: int = -1) -> np.ndarray:
        return np.median(y, axis=axis) / np.median(x, axis=axis)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = sst.bootstrap((a, b), stat, paired=paired, vectorized=True,
                            n_resamples=int(settings.n_resamples), method="percentile",
                            rng=np.random.default_rng(settings.seed))
    dist = np.asarray(res.bootstrap_distribution, dtype=np.float64)
    c = float(settings.confidence)
    return r, float(np.quantile(dist, 1.0 - c)), float(np.quantile(dist, c))


def latency_verdict(ratio: float, low: float, high: float, n_a: int, n_b: int,
                    max_increase_pct: float) -> tuple[str, str]:
    g = 1.0 + max_increase_pct / 100.0
    if not math.isfinite(ratio):
        return "not measured", "no timed calls on one side"
    if n_a < 2 or n_b < 2 or not (math.isfinite(low) and math.isfinite(high)):
        return "inconclusive", f"too few timed calls for an interval ({n_a} vs {n_b})"
    if low > g:
        return "regression", f"RTF up by more than {max_increase_pct:g} %"
    if high < 1.0 / g:
        return "improvement", f"RTF down by more than a factor {g:g}"
    if high <= g:
        return "pass", ""
    return "inconclusive", f"RTF ratio bound {high:.3g} above the allowed {g:.3g}, increase not shown"


def _timed(timing: pd.DataFrame, cfg: ConfigKey) -> pd.DataFrame:
    need = {*CONFIG_KEYS, "utt_id", "repeat", "rtf"}
    if timing is None or not len(timing) or not need <= set(timing.columns):
        return pd.DataFrame(columns=sorted(need))
    t = timing[labels(timing) == cfg.label]
    return t[pd.to_numeric(t["repeat"], errors="coerce") >= 0]


def stored_latency(tb: pd.DataFrame, tc: pd.DataFrame, b: ConfigKey, c: ConfigKey,
                   policy: Any) -> LatencyResult:
    """Latency verdict from two runs' timing journals (same hardware assumed; see module doc)."""
    xb, xc = _timed(tb, b), _timed(tc, c)
    utts = set(xb["utt_id"].astype(str)) & set(xc["utt_id"].astype(str))
    xb = xb[xb["utt_id"].astype(str).isin(utts)]
    xc = xc[xc["utt_id"].astype(str).isin(utts)]
    rb = pd.to_numeric(xb["rtf"], errors="coerce").dropna().to_numpy()
    rc = pd.to_numeric(xc["rtf"], errors="coerce").dropna().to_numpy()
    if not rb.size or not rc.size:
        return LatencyResult("not measured", n_baseline=int(rb.size), n_candidate=int(rc.size),
                             source="timing phase", reason="no common timed utterance")
    r, lo, hi = ratio_of_medians(rb, rc, policy.settings)
    verdict, why = latency_verdict(r, lo, hi, rb.size, rc.size, policy.max_rtf_increase_pct)
    return LatencyResult(verdict, float(np.median(rb)), float(np.median(rc)), r, lo, hi,
                         int(rb.size), int(rc.size), "timing phase", why)
