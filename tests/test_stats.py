"""Tests of vocobench.stats against scipy, Holm 1979, and hand-worked small cases."""
from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats as sst

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_report_fixture import RTF, make_run  # noqa: E402
from vocobench.errors import InputError  # noqa: E402
from vocobench.stats import (BootstrapSettings, Config, bootstrap_mean_interval,  # noqa: E402
                             default_reference, holm, pareto_mask, summarise, wilcoxon_p)
from vocobench.store import load_run  # noqa: E402


def test_bootstrap_interval_covers_true_mean_at_nominal_rate():
    # Source: definition of a confidence interval; bootstrap intervals for the mean have
    # asymptotically nominal coverage (Efron & Tibshirani 1993, Ch. 12-14, from memory).
    # 400 trials: binomial SE = sqrt(.95·.05/400) ≈ 0.0109; accept 0.95 ± 3 SE (≈ ±0.033).
    # n = 200 per sample: the small-sample undercoverage of bootstrap intervals is first-order
    # like that of a z-interval with the plug-in SD, P(|t_199| < 1.96·sqrt(199/200)) ≈ 0.949,
    # far inside the tolerance (at n = 50 it is ≈ 0.94 and the check would sit near its edge).
    # 499 resamples: the endpoint Monte-Carlo error adds little at this tolerance; keeps it fast.
    # Each trial uses its own bootstrap seed so the endpoint errors do not repeat across trials.
    trials, n, mu, sigma = 400, 200, 1.3, 2.0
    rng = np.random.default_rng(20240601)
    covered = covered_upper = 0
    for i in range(trials):
        x = rng.normal(mu, sigma, n)
        settings = BootstrapSettings(confidence=0.95, n_resamples=499, seed=i)
        lo, hi = bootstrap_mean_interval(x, settings)
        covered += lo <= mu <= hi
        _, ub = bootstrap_mean_interval(x, settings, alternative="less")   # one-sided 95 % bound
        covered_upper += mu <= ub
    se = math.sqrt(0.95 * 0.05 / trials)
    assert abs(covered / trials - 0.95) <= 3 * se, covered / trials
    assert abs(covered_upper / trials - 0.95) <= 3 * se, covered_upper / trials


def test_bootstrap_is_reproducible_with_recorded_seed():
    # Common practice, no source: a fixed seed makes the report reproducible.
    x = np.random.default_rng(1).normal(size=30)
    s = BootstrapSettings(n_resamples=500, seed=11)
    assert bootstrap_mean_interval(x, s) == bootstrap_mean_interval(x, s)
    # and the interval is scipy's own for that seed (scipy.stats.bootstrap is the reference)
    ref = sst.bootstrap((x,), np.mean, n_resamples=500, rng=np.random.default_rng(11))
    assert bootstrap_mean_interval(x, s) == pytest.approx(
        (ref.confidence_interval.low, ref.confidence_interval.high), rel=0, abs=0)


def test_constant_sample_gives_constant_interval_and_short_sample_nan():
    # Hand: every resample of a constant sample has the same mean.
    assert bootstrap_mean_interval([0.2, 0.2, 0.2]) == (0.2, 0.2)
    assert all(math.isnan(v) for v in bootstrap_mean_interval([1.0]))


def test_wilcoxon_exact_value_from_definition():
    # Wilcoxon 1945 signed-rank test: with n = 5 non-zero differences all positive, W− = 0 is the
    # most extreme of 2^5 equally likely sign patterns, so the exact two-sided p = 2/32 = 0.0625.
    assert wilcoxon_p([0.3, 0.1, 0.5, 0.2, 0.4]) == pytest.approx(0.0625, abs=1e-12)
    # scipy.stats.wilcoxon is the reference implementation for any other pattern
    d = [0.3, -0.1, 0.5, 0.2, -0.4, 0.15]
    assert wilcoxon_p(d) == pytest.approx(sst.wilcoxon(d).pvalue, abs=0)


def test_wilcoxon_in_summary_equals_scipy_on_utterance_means(tmp_path):
    # Reference: scipy.stats.wilcoxon on the per-utterance (seed-averaged) paired differences,
    # recomputed here from the raw items with pandas.
    run = load_run(make_run(tmp_path))
    st = summarise(run, settings=BootstrapSettings(n_resamples=200))
    items = run.items[run.items["status"] == "ok"]
    means = items.groupby(["schedule", "sampler", "steps", "utt_id"])["pesq_wb"].mean()
    ref = means.loc[("linear", "ddim", 64)]
    for cfg in (("linear", "ddim", 8), ("linear", "ddim", 16), ("cosine", "ddim", 64)):
        d = (means.loc[cfg] - ref).to_numpy()
        expected = sst.wilcoxon(d).pvalue
        got = st.row(Config(*cfg), "pesq_wb")["p"]
        assert got == pytest.approx(expected, abs=1e-12)


def test_holm_matches_hand_worked_step_down():
    # Holm 1979 procedure, worked by hand: p = (0.01, 0.04, 0.03, 0.005), m = 4.
    # Sorted: 0.005 (H4), 0.01 (H1), 0.03 (H3), 0.04 (H2).
    # Multipliers m−j+1 = 4, 3, 2, 1 → 0.02, 0.03, 0.06, 0.04; running max → 0.02, 0.03, 0.06, 0.06.
    # At α = 0.05 the step-down rejects H4 (0.005 ≤ 0.05/4) and H1 (0.01 ≤ 0.05/3), then stops at
    # H3 (0.03 > 0.05/2): exactly the hypotheses with adjusted p ≤ 0.05.
    adj = holm([0.01, 0.04, 0.03, 0.005])
    assert adj == pytest.approx([0.03, 0.06, 0.06, 0.02], abs=1e-15)
    assert list(adj <= 0.05) == [True, False, False, True]
    # NaN (the reference's own, uncompared slot) stays out of the family: m = 2 here, by hand
    # 0.02·2 = 0.04, max(0.04, 0.03·1) = 0.04.
    out = holm([np.nan, 0.03, 0.02])
    assert math.isnan(out[0]) and out[1:] == pytest.approx([0.04, 0.04])
    # Capped at 1 (Holm 1979: adjusted values are probabilities).
    assert holm([0.6, 0.7]) == pytest.approx([1.0, 1.0])


def test_pareto_front_of_hand_made_set():
    # Hand-made points (cost, quality), higher quality better:
    #  A (1, 1.0)  front: cheapest
    #  B (2, 3.0)  front
    #  C (2, 2.0)  dominated by B (same cost, worse quality)
    #  D (3, 3.0)  dominated by B (dearer, equal quality)
    #  E (4, 4.0)  front: best quality
    #  F (5, 3.5)  dominated by E
    #  G (nan, 9)  no latency: neither on the front nor dominating
    cost = [1, 2, 2, 3, 4, 5, np.nan]
    qual = [1.0, 3.0, 2.0, 3.0, 4.0, 3.5, 9.0]
    assert list(pareto_mask(cost, qual, higher_is_better=True)) == [True, True, False, False, True, False, False]
    # Lower-is-better: negate the qualities → same front (direction-aware).
    assert list(pareto_mask(cost, [-q for q in qual], higher_is_better=False)) == \
        [True, True, False, False, True, False, False]
    # Ties on both coordinates: neither strictly better, so both stay on the front.
    assert list(pareto_mask([1, 1], [2.0, 2.0], True)) == [True, True]


def test_utterance_is_the_unit_and_failures_are_excluded_and_counted(tmp_path):
    # Hand, from the fixture: linear/ddpm/4 has MCD base = ref + (−0.1) = (2.9, 3.1, 3.3, 3.5),
    # seed values base ∓ 0.01, and u4 seed 1 failed, so u4's mean is its seed-0 value 3.49.
    # Mean of utterance means = (2.9 + 3.1 + 3.3 + 3.49) / 4 = 3.1975; the mean over the 7 ok
    # items would be (2.89+2.91+3.09+3.11+3.29+3.31+3.49)/7 = 3.1557… — different, so this checks
    # the unit.
    run = load_run(make_run(tmp_path))
    st = summarise(run, settings=BootstrapSettings(n_resamples=200))
    row = st.row(Config("linear", "ddpm", 4), "mcd_db")
    assert row["n"] == 4
    assert row["mean"] == pytest.approx(3.1975, abs=1e-12)
    assert st.failures.loc["linear/ddpm/4", "failed"] == 1
    assert st.failures.loc["linear/ddpm/4", "items"] == 8
    assert st.failures.loc["linear/ddim/16", "failed"] == 0


def test_default_reference_most_steps_ties_to_grid_order(tmp_path):
    # Fixture grid order: linear/ddim/{8,16,32,64}, linear/ddpm/4, cosine/ddim/64 → two configs
    # with 64 steps; the first in grid order (linear/ddim/64) is the reference.
    run = load_run(make_run(tmp_path))
    st = summarise(run, settings=BootstrapSettings(n_resamples=200))
    assert st.reference == Config("linear", "ddim", 64)
    assert default_reference([Config("a", "x", 4), Config("b", "x", 9), Config("c", "x", 9)]) == \
        Config("b", "x", 9)
    # The reference's own comparison fields are empty.
    assert math.isnan(st.row(st.reference, "mcd_db")["p"])


def test_paired_difference_and_one_sided_bound_are_direction_aware(tmp_path):
    # Hand: cosine/ddim/64 differs from the reference by exactly +0.05 dB MCD and +0.01 PESQ on
    # every utterance, so every bootstrap resample of d has that mean: interval and bounds equal it.
    # linear/ddim/16: MCD d = (0.2, 0.3, 0.4, 0.3); every resample mean lies in [0.2, 0.4], so all
    # interval ends are quantiles inside [0.2, 0.4]. The one-sided 95 % bound is the end of a 90 %
    # two-sided interval, hence between the 95 % two-sided ends: diff_low ≤ diff_bound ≤ diff_high
    # (worse side = upper where lower is better, lower where higher is better).
    run = load_run(make_run(tmp_path))
    st = summarise(run, settings=BootstrapSettings(n_resamples=500))
    c = st.row(Config("cosine", "ddim", 64), "mcd_db")
    assert (c["diff"], c["diff_low"], c["diff_high"], c["diff_bound"]) == pytest.approx((0.05,) * 4)
    c = st.row(Config("cosine", "ddim", 64), "pesq_wb")
    assert c["diff_bound"] == pytest.approx(0.01)
    r = st.row(Config("linear", "ddim", 16), "mcd_db")
    assert r["diff"] == pytest.approx(0.3)
    assert 0.2 - 1e-12 <= r["diff_low"] <= r["diff_bound"] <= r["diff_high"] <= 0.4 + 1e-12
    r = st.row(Config("linear", "ddim", 16), "pesq_wb")          # higher is better: lower bound
    assert -0.05 - 1e-12 <= r["diff_low"] <= r["diff_bound"] <= r["diff_high"] <= -0.02 + 1e-12


def test_latency_from_timing_journal_excludes_first_call(tmp_path):
    # Hand, from the fixture: per config, 2 utterances × repeats 0..2 at RTF (0.9, 1.0, 1.1)·r, and
    # a first call (repeat −1) at 10·r. Median of (0.9, 0.9, 1, 1, 1.1, 1.1)·r = r; numpy's linear
    # 90th percentile: position 0.9·5 = 4.5 between 1.1·r and 1.1·r = 1.1·r. First call seconds =
    # 10·r·2.0 s. ms per NFE = median of 1000·f·r·2/n over f = r·2000/n.
    run = load_run(make_run(tmp_path))
    st = summarise(run, settings=BootstrapSettings(n_resamples=200))
    for (s, a, n), r in RTF.items():
        L = st.latency.loc[f"{s}/{a}/{n}"]
        assert L["rtf_median"] == pytest.approx(r)
        assert L["rtf_p90"] == pytest.approx(1.1 * r)
        assert L["first_call_s"] == pytest.approx(20 * r)
        assert L["ms_per_nfe"] == pytest.approx(r * 2000 / n)
        assert L["n_timed"] == 6 and L["latency_source"] == "timing"


def test_unknown_column_and_reference_raise_input_error(tmp_path):
    run = load_run(make_run(tmp_path))
    with pytest.raises(InputError) as e:
        summarise(run, columns=["nope"])
    assert e.value.field == "metrics"
    with pytest.raises(InputError) as e:
        summarise(run, reference=Config("linear", "ddim", 999))
    assert e.value.field == "reference"
    with pytest.raises(InputError) as e:
        Config.parse("linear/ddim/many")
    assert e.value.field == "reference"
    bad = dict(run.manifest)
    bad["columns"] = {**run.manifest["columns"], "mcd_db": {"unit": "dB", "higher_is_better": None}}
    other = type(run)(run.path, bad, run.items, run.timing)
    # a column without a direction (e.g. a frame count) is informational: left out by default …
    assert list(summarise(other, settings=BootstrapSettings(n_resamples=200)).columns) == ["pesq_wb"]
    # … and an error when asked for by name
    with pytest.raises(InputError) as e:
        summarise(other, columns=["mcd_db"])
    assert e.value.field == "columns.mcd_db.higher_is_better"
