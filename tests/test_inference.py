"""vocobench.inference against the outside world: scipy.stats (bootstrap, wilcoxon,
permutation_test, norm), a textbook sample-size constant, and a simulation of the power claim.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats as sst

from vocobench.inference import (bootstrap_p, detectable, min_exact_p, needed, resamples_for,
                                 sample_size, utterances_for_level)


@pytest.mark.parametrize("method", ["BCa", "percentile", "basic"])
def test_bootstrap_p_inverts_scipys_one_sided_bound(method):
    # Test–interval duality: at the threshold t = scipy's one-sided upper bound at confidence c,
    # the p-value of "mean < t" read from the same bootstrap distribution is 1 − c, up to the
    # Monte Carlo discreteness (1/B) and quantile interpolation. Reference: scipy.stats.bootstrap.
    rng = np.random.default_rng(3)
    for _ in range(10):
        x = rng.gamma(2.0, 1.0, size=int(rng.integers(8, 40))) - 2.0      # skewed, like PESQ noise
        for c in (0.9, 0.95, 0.99):
            res = sst.bootstrap((x,), np.mean, n_resamples=4000, confidence_level=c, method=method,
                                alternative="less", rng=np.random.default_rng(0))
            upper = res.confidence_interval.high
            p = bootstrap_p(x, res.bootstrap_distribution, upper, method)
            assert abs(p - (1 - c)) <= 0.003
            # and the decision agrees on either side of the bound
            span = np.ptp(res.bootstrap_distribution)
            assert bootstrap_p(x, res.bootstrap_distribution, upper + 0.05 * span, method) < 1 - c
            assert bootstrap_p(x, res.bootstrap_distribution, upper - 0.05 * span, method) > 1 - c


def test_bootstrap_p_edge_cases():
    assert math.isnan(bootstrap_p([1.0], [], 0.0))
    assert bootstrap_p([0.2, 0.2, 0.2], [], 0.5) == 0.0         # constant below the threshold
    assert bootstrap_p([0.2, 0.2, 0.2], [], 0.1) == 1.0
    # a threshold above every resample: every bound at any level lies below it (scipy's BCa
    # bound at 1 − 1/B is still below), so p is the Monte Carlo floor 1/(B + 1), also for BCa
    # on skewed data, where the acceleration would otherwise stretch the tail
    x = np.array([-5.0, -4.9, -4.8, -4.7, -4.6, -4.5, -4.4, -2.0])
    res = sst.bootstrap((x,), np.mean, n_resamples=999, method="BCa", alternative="less",
                        confidence_level=1 - 1 / 999, rng=np.random.default_rng(0))
    t = float(res.bootstrap_distribution.max()) + 0.01
    assert res.confidence_interval.high < t
    for method in ("BCa", "percentile", "basic"):
        assert bootstrap_p(x, res.bootstrap_distribution, t + 1.0, method) == pytest.approx(1 / 1000)
    assert bootstrap_p(x, res.bootstrap_distribution, -100.0, "BCa") == 1.0


@pytest.mark.parametrize("n", [2, 3, 6, 10])
def test_min_exact_p_is_the_exact_signed_rank_and_sign_flip_minimum(n):
    # All differences positive: the exact one-sided Wilcoxon signed-rank p-value (Wilcoxon 1945,
    # scipy.stats.wilcoxon, method="exact") and the sign-flip permutation test of the mean
    # (Fisher 1935; scipy.stats.permutation_test, permutation_type="samples") both give 2^-n.
    d = np.arange(1, n + 1, dtype=float)
    assert min_exact_p(n) == pytest.approx(sst.wilcoxon(d, alternative="greater", method="exact").pvalue)
    perm = sst.permutation_test((d,), np.mean, permutation_type="samples", alternative="greater",
                                n_resamples=np.inf)
    assert min_exact_p(n) == pytest.approx(perm.pvalue)


def test_utterances_for_level():
    # 2^-4 = 0.0625 > 0.05 ≥ 2^-5; 2^-6 = 0.0156 > 0.0125 ≥ 2^-7; 2^-11 > 0.05/120 ≥ 2^-12
    assert utterances_for_level(0.05) == 5
    assert utterances_for_level(0.05 / 4) == 7
    assert utterances_for_level(0.05 / 120) == 12
    assert utterances_for_level(0.5) == 1


def test_sample_size_matches_textbook_constants():
    # (z_{1−α} + z_{1−β})² for σ/Δ = 1: one-sided α = 0.05, power 0.9 → 8.56 (1.645 + 1.282 =
    # 2.926, squared; Chow, Shao & Wang 2008, §3.1, from memory); α = 0.025, power 0.8 → 7.85,
    # Lehr's "8 over Δ²" for a one-sample / paired test (Lehr 1992, Stat. Med. 11, from memory).
    assert sample_size(1.0, 1.0, 0.05, 0.9) == pytest.approx(8.564, abs=1e-3)
    assert sample_size(1.0, 1.0, 0.025, 0.8) == pytest.approx(7.849, abs=1e-3)
    assert sample_size(2.0, 1.0, 0.05, 0.9) == pytest.approx(4 * 8.564, abs=4e-3)   # ∝ σ²
    assert sample_size(1.0, 0.0, 0.05, 0.9) == math.inf and needed(1.0, -1.0, 0.05, 0.9) is None
    assert needed(1.0, 1.0, 0.05, 0.9) == 9


def test_detectable_is_the_inverse_and_gives_the_stated_normal_power():
    # At n = sample_size(...), the one-sided z-test's power Φ(√n·Δ/σ − z_{1−α}) equals the target
    # (normal power function, scipy.stats.norm).
    for sd, eff, a, pw in ((0.08, 0.05, 0.025, 0.9), (0.01, 0.004, 0.05, 0.8)):
        n = sample_size(sd, eff, a, pw)
        assert sst.norm.cdf(math.sqrt(n) * eff / sd - sst.norm.ppf(1 - a)) == pytest.approx(pw)
        assert detectable(sd, n, a, pw) == pytest.approx(eff)


def test_planned_size_gives_the_power_in_simulation():
    # Normal differences, SD 1, true mean drop 0.5 beyond the threshold, one-sided α = 0.05,
    # power 0.9 → n = 35 (34.3 rounded up). Simulated with the gate's own test (percentile
    # bootstrap p of "mean < 0"): rejection rate ≈ 0.9. 400 trials: binomial SD 1.5 points; the
    # bootstrap on n = 35 behaves like a t-test, a point or two below the normal approximation.
    n = needed(1.0, 0.5, 0.05, 0.9)
    assert n == 35
    rng = np.random.default_rng(7)
    hits = 0
    for _ in range(400):
        x = rng.normal(-0.5, 1.0, n)
        res = sst.bootstrap((x,), np.mean, n_resamples=999, method="percentile",
                            rng=np.random.default_rng(0))
        hits += bootstrap_p(x, res.bootstrap_distribution, 0.0, "percentile") <= 0.05
    assert 0.84 <= hits / 400 <= 0.95


def test_resamples_for():
    assert resamples_for(0.0125) == 799 and resamples_for(0.0125, floor=2000) == 2000
