"""Simulated study of the gate's three outcomes: false alarms and inconclusive results under
fresh seeds, power against a known degradation, and passes at the allowance itself.

Targets (from the gate's issues): the same demo vocoder with fresh seeds is called a regression in
≤ 5 % of trials (false alarms) and — our usability target — is inconclusive in ≤ 10 %; a
candidate degraded by about 0.1 PESQ (white noise at 32.5 dB SNR, calibration in
bench/gate_power_study.py) on 30 utterances is flagged (pesq_wb regression) in ≥ 90 %; a
candidate degraded by about the allowance (0.05 PESQ, noise at 37 dB) passes in ≤ 5 %, the level
of the intersection–union pass rule (Berger 1982) when the true drop is at least the allowance.

Design (our choice). Synthesis and scoring are real: the analytic denoiser (4 DDIM steps) on 30
segment/gain variants of the six original recordings, scored by the metric registry (pesq_wb,
stoi), four seeds per utterance, each output scored as is and with each noise (≈ 25 s of CPU).
PESQ's seed-to-seed noise here is heavy-tailed (single seeds score up to +0.4 above the
utterance's other seeds), so instead of a fitted Gaussian model the K trials re-draw from this
pool: per trial and utterance a random split of the four seeds, two to the baseline, two to the
candidate ("fresh seeds": no shared seed), passed through the real compare_runs with the default
policy. Trials are cheap (≈ 40 ms) but share the pool, so the rates are conditional on it;
bench/bench_gate_power.py runs fully independent trials with fresh synthesis for the
unconditional figures, with Clopper–Pearson intervals.

K = 100 per scenario. Acceptance bounds: the 0.1 % tail quantiles of Binomial(K, target)
(scipy.stats.binom), i.e. a gate exactly at a target fails its check about once in a thousand
seeds of the study (approximate, since trials share the pool).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sst

from vocobench.gate import compare_runs

BENCH = Path(__file__).resolve().parents[1] / "bench"     # the study lives with the benchmarks
if str(BENCH) not in sys.path:
    sys.path.insert(0, str(BENCH))
import gate_power_study as P  # noqa: E402

K = 100
POOL_SEEDS = 4
TARGET_FALSE_ALARM, TARGET_INCONCLUSIVE, TARGET_FLAG = 0.05, 0.10, 0.90
TARGET_BOUNDARY_PASS = 0.05                  # = α of the default policy (confidence 0.95)
TAIL = 0.001                                 # acceptance quantile (our choice)


@pytest.fixture(scope="module")
def study():
    variants = P.utterance_variants()
    syn = P.Synthesiser()
    rows = []
    for i in range(len(variants)):
        rows += syn.scores(variants, i, range(POOL_SEEDS), tuple(P.CONDITIONS))
    table = pd.DataFrame(rows)
    return P.ScoredPool.from_rows(table), syn.manifest(variants), table


def test_pool_is_what_the_study_claims(study):
    pool, manifest, table = study
    assert pool.clean.shape == (30, POOL_SEEDS, 2) and np.isfinite(pool.clean).all()
    assert len(set(pool.shas)) == 30                  # 30 distinct utterance contents
    assert {i[:6] for i in pool.ids} == set(P.RECORDINGS)
    drop = (pool.scores["degraded"] - pool.clean).mean(axis=(0, 1))
    # "about 0.1 PESQ" (the example degradation); STOI drop below its 0.01 allowance,
    # so a flag must come from PESQ
    assert -0.13 <= drop[0] <= -0.07
    assert -0.01 < drop[1] <= 0.0
    edge = (pool.scores["boundary"] - pool.clean).mean(axis=(0, 1))
    assert -0.07 <= edge[0] <= -0.04                  # about the 0.05 allowance
    # scores inside the P.862.2 MOS-LQO range [1.04, 4.64] (ITU-T P.862.2 mapping, from memory)
    assert ((pool.clean[..., 0] > 1.0) & (pool.clean[..., 0] < 4.7)).all()


def _outcomes(pool, manifest, condition: str, seed: int) -> tuple[dict[str, int], int]:
    rng = np.random.default_rng(seed)
    counts = {"pass": 0, "regression": 0, "inconclusive": 0}
    flagged = 0
    for _ in range(K):
        b, c = pool.trial(rng, condition)
        comp = compare_runs(P.make_run(b, manifest, "baseline"), P.make_run(c, manifest, "candidate"))
        (cfg,) = comp.configs
        assert cfg.gated and cfg.metrics and all(m.n == 30 for m in cfg.metrics)
        counts[comp.verdict] += 1
        flagged += {m.column: m.verdict for m in cfg.metrics}["pesq_wb"] == "regression"
    return counts, flagged


def _at_most(rate: float) -> int:
    return int(sst.binom.ppf(1 - TAIL, K, rate))


def test_fresh_seeds_rarely_false_alarm_and_rarely_inconclusive(study):
    pool, manifest, _ = study
    counts, _ = _outcomes(pool, manifest, "clean", seed=11)
    assert counts["regression"] <= _at_most(TARGET_FALSE_ALARM), counts
    assert counts["inconclusive"] <= _at_most(TARGET_INCONCLUSIVE), counts


def test_degraded_candidate_flagged_in_at_least_90_percent(study):
    pool, manifest, _ = study
    counts, flagged = _outcomes(pool, manifest, "degraded", seed=12)
    bound = int(sst.binom.ppf(TAIL, K, TARGET_FLAG))
    assert flagged >= bound, f"{flagged}/{K} flagged; a gate at {TARGET_FLAG:.0%} gives ≥ {bound}"
    assert counts["pass"] == 0                        # a drop twice the allowance never passes


def test_drop_at_the_allowance_rarely_passes(study):
    pool, manifest, _ = study
    counts, _ = _outcomes(pool, manifest, "boundary", seed=13)
    assert counts["pass"] <= _at_most(TARGET_BOUNDARY_PASS), counts
