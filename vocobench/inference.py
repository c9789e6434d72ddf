"""Tests and sample sizes for paired per-utterance differences: the numbers behind the gate's
three outcomes, the report's refusal to name an unsupported winner and the sample-size planner.

* :func:`bootstrap_p` — the p-value of a one-sided hypothesis about a mean, read from the same
  bootstrap distribution as the one-sided bound, by inverting that bound (test–interval duality:
  the p-value is the level at which the bound reaches the threshold; Efron & Tibshirani 1993,
  "An Introduction to the Bootstrap", Ch. 15–16 on the achieved significance level, from
  memory). Percentile and basic bounds invert through the empirical distribution with the
  Monte Carlo convention ``(1 + count) / (B + 1)`` (Davison & Hinkley 1997, "Bootstrap Methods
  and their Application", §4.2.1, from memory); the BCa bound (Efron 1987) inverts through its
  bias correction ``z0`` and acceleration ``a``, computed as :func:`scipy.stats.bootstrap` does.
  So "p ≤ α" and "the bound lies beyond the threshold" agree, up to the interpolation of
  quantiles.
* :func:`min_exact_p` — ``2⁻ⁿ``, the smallest one-sided p-value any exact paired test on ``n``
  utterances can reach: the sign-flip randomisation test of the mean (Fisher 1935, "The Design
  of Experiments", §21) and the exact Wilcoxon signed-rank test (Wilcoxon 1945) both reach it
  only when every difference has the same sign. Below it no honest verdict is possible.
* :func:`sample_size`, :func:`detectable` — the normal-approximation sample size of a one-sided
  paired (one-sample) test of a mean, ``n = ((z₁₋α + z_power)·σ_d / Δ)²``, and its inverse, the
  smallest effect detected with that power, ``(z₁₋α + z_power)·σ_d / √n`` (Chow, Shao & Wang
  2008, "Sample Size Calculations in Clinical Research", 2nd ed., §3.1, from memory). For a
  non-inferiority or "worse by more than the allowance" question, Δ is the distance between the
  true difference and the allowance.
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from scipy import stats as sst

# Our choice: a bootstrap p-value can be no smaller than 1/(B + 1); the smallest threshold it is
# compared with (Holm's first step, α/m) should sit at least this many resamples deep, so that a
# verdict is not decided by the resample count (Davison & Hinkley 1997, §4.2.5, advise several
# times 1/α resamples for a Monte Carlo test at level α; from memory).
P_RESOLUTION = 10


def z(q: float) -> float:
    """Standard normal quantile (``scipy.stats.norm.ppf``)."""
    return float(sst.norm.ppf(q))


def min_exact_p(n: int) -> float:
    """Smallest one-sided p-value of an exact paired test on ``n`` differences: ``2⁻ⁿ``."""
    return 0.5 ** int(n)


def utterances_for_level(alpha: float) -> int:
    """Fewest paired utterances whose :func:`min_exact_p` is at most ``alpha``."""
    return max(1, math.ceil(-math.log2(alpha) - 1e-12))


def resamples_for(alpha: float, floor: int = 0) -> int:
    """Bootstrap resamples ``B`` with ``1/(B + 1)`` at least :data:`P_RESOLUTION` times below
    ``alpha`` (the smallest level a p-value is compared with); never fewer than ``floor``."""
    return max(int(floor), math.ceil(P_RESOLUTION / alpha) - 1)


def sample_size(sd: float, effect: float, alpha: float, power: float) -> float:
    """``((z₁₋α + z_power)·sd / effect)²`` (unrounded); ``inf`` when ``effect ≤ 0``, NaN when
    ``sd`` is not finite. One-sided level ``alpha``."""
    if not (math.isfinite(sd) and math.isfinite(effect)):
        return math.nan
    if effect <= 0:
        return math.inf
    return ((z(1.0 - alpha) + z(power)) * sd / effect) ** 2


def detectable(sd: float, n: int, alpha: float, power: float) -> float:
    """Smallest effect a one-sided level-``alpha`` test on ``n`` paired utterances detects with
    probability ``power``: ``(z₁₋α + z_power)·sd/√n`` (the inverse of :func:`sample_size`)."""
    if n < 1 or not math.isfinite(sd):
        return math.nan
    return (z(1.0 - alpha) + z(power)) * sd / math.sqrt(n)


def needed(sd: float, effect: float, alpha: float, power: float) -> int | None:
    """:func:`sample_size` rounded up, at least :func:`utterances_for_level`; ``None`` when no
    number of utterances suffices (``effect ≤ 0``) or ``sd`` is unknown."""
    n = sample_size(sd, effect, alpha, power)
    if not math.isfinite(n):
        return None
    return max(math.ceil(n - 1e-9), utterances_for_level(alpha), 2)


def _jackknife_acceleration(x: np.ndarray) -> float:
    """BCa acceleration of the mean from the jackknife (Efron 1987, Eq. 6.6): for the mean the
    jackknife influence values are ``x_i − x̄``, so ``a = Σu³ / (6 (Σu²)^{3/2})``."""
    u = x - x.mean()
    den = float(np.sum(u ** 2))
    return float(np.sum(u ** 3) / (6.0 * den ** 1.5)) if den > 0 else 0.0


def bootstrap_p(x: Sequence[float], boot: Sequence[float], threshold: float,
                method: str = "BCa") -> float:
    """p-value of H₁: ``mean(x) < threshold`` against H₀: ``mean(x) ≥ threshold``.

    ``boot`` is the bootstrap distribution of ``mean(x)`` (``scipy.stats.bootstrap(...)
    .bootstrap_distribution``) and ``method`` the interval method whose one-sided upper bound
    the p-value inverts: ``p ≤ α`` when that bound at confidence ``1 − α`` lies below
    ``threshold`` (module docstring). For H₁: ``mean(x) > t`` call it with ``−x``, ``−boot``,
    ``−t``. Fewer than two finite values give NaN; a constant sample gives 0 or 1; a threshold
    above every resample gives the Monte Carlo floor ``1/(B + 1)`` whatever the method (every
    bound lies below it), one at or below every resample gives 1.
    """
    a = np.asarray(x, dtype=np.float64)
    a = a[np.isfinite(a)]
    if a.size < 2:
        return math.nan
    theta = float(a.mean())
    if np.ptp(a) == 0.0:
        return 0.0 if theta < threshold else 1.0
    b = np.asarray(boot, dtype=np.float64)
    b = b[np.isfinite(b)]
    if method == "basic":
        b = 2.0 * theta - b                     # the basic bound is the reflected percentile one
    big = b.size
    above = int(np.count_nonzero(b >= threshold))
    if above == 0:                              # every bound lies below the threshold
        return 1.0 / (big + 1.0)
    if above == big:                            # none does
        return 1.0
    tail = (1.0 + above) / (big + 1.0)          # percentile p-value
    if method != "BCa":
        return float(tail)
    frac = (np.count_nonzero(b < theta) + np.count_nonzero(b <= theta)) / (2.0 * big)
    if not 0.0 < frac < 1.0:                    # BCa undefined: the bounds fall back likewise
        return float(tail)
    z0 = z(frac)
    acc = _jackknife_acceleration(a)
    v = -z(tail) - z0                           # Φ⁻¹(F(t)) − z0, F(t) = 1 − tail
    if 1.0 + acc * v <= 0.0:
        return float(min(1.0, tail))
    zq = v / (1.0 + acc * v) - z0               # solves z0 + (z0 + zq)/(1 − a(z0 + zq)) = Φ⁻¹(F)
    return float(sst.norm.sf(zq))
