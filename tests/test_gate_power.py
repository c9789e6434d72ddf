"""Simulated study of the gate: false alarms under fresh seeds, power against a known degradation.

Targets (from the gate's issue): the same demo vocoder with fresh seeds passes in ≥ 95 % of
trials; a candidate degraded by about 0.1 PESQ (white noise at 32.5 dB SNR, calibration in
bench/gate_power_study.py) on 30 utterances is flagged in ≥ 90 %.

Design (our choice). Synthesis and scoring are real: the analytic denoiser (4 DDIM steps) on 30
segment/gain variants of the bundled recordings, scored by the metric registry (pesq_wb, stoi),
four seeds per utterance, each output scored clean and with the noise added (≈ 16 s of CPU).
PESQ's seed-to-seed noise here is heavy-tailed (single seeds score up to +0.4 above the
utterance's other seeds), so instead of a fitted Gaussian model the K trials re-draw from this
pool: per trial and utterance a random split of the four seeds, two to the baseline, two to the
candidate ("fresh seeds": no shared seed), passed through the real compare_runs with the default
policy. Trials are cheap (≈ 30 ms) but share the pool, so the rates are conditional on it;
bench/bench_gate_power.py runs fully independent trials with fresh synthesis for the
unconditional figures (see its output in the gate report).

K = 100 per scenario. Acceptance bounds: the 0.1 % quantile of Binomial(K, target) (scipy.stats
.binom), i.e. a gate exactly at the target would fail this test about once in a thousand seeds
of the study (approximate, since trials share the pool): ≥ 87/100 passes, ≥ 80/100 flagged.
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
TARGET_PASS, TARGET_FLAG = 0.95, 0.90        # the targets
TAIL = 0.001                                 # acceptance quantile (our choice)


@pytest.fixture(scope="module")
def study():
    variants = P.utterance_variants()
    syn = P.Synthesiser()
    rows = []
    for i in range(len(variants)):
        rows += syn.scores(variants, i, range(POOL_SEEDS), degrade=True)
    table = pd.DataFrame(rows)
    return P.ScoredPool.from_rows(table), syn.manifest(variants), table


def test_pool_is_what_the_study_claims(study):
    pool, manifest, table = study
    assert pool.clean.shape == (30, POOL_SEEDS, 2) and np.isfinite(pool.clean).all()
    assert len(set(pool.shas)) == 30                  # 30 distinct utterance contents
    drop = (pool.degraded - pool.clean).mean(axis=(0, 1))
    # "about 0.1 PESQ" (the example degradation); STOI drop below its 0.01 allowance,
    # so a flag must come from PESQ
    assert -0.13 <= drop[0] <= -0.07
    assert -0.01 < drop[1] <= 0.0
    # scores inside the P.862.2 MOS-LQO range [1.04, 4.64] (ITU-T P.862.2 mapping, from memory)
    assert ((pool.clean[..., 0] > 1.0) & (pool.clean[..., 0] < 4.7)).all()


def _rates(pool, manifest, degraded: bool, seed: int) -> tuple[int, int]:
    rng = np.random.default_rng(seed)
    ok = flagged = 0
    for _ in range(K):
        b, c = pool.trial(rng, degraded)
        comp = compare_runs(P.make_run(b, manifest, "baseline"), P.make_run(c, manifest, "candidate"))
        (cfg,) = comp.configs
        assert cfg.metrics and all(m.n == 30 for m in cfg.metrics)
        ok += comp.verdict == "pass"
        flagged += {m.column: m.verdict for m in cfg.metrics}["pesq_wb"] == "regression"
    return ok, flagged


def test_fresh_seeds_pass_in_at_least_95_percent(study):
    pool, manifest, _ = study
    passes, _ = _rates(pool, manifest, degraded=False, seed=11)
    bound = int(sst.binom.ppf(TAIL, K, TARGET_PASS))
    assert passes >= bound, f"{passes}/{K} passed; a gate at {TARGET_PASS:.0%} gives ≥ {bound}"


def test_degraded_candidate_flagged_in_at_least_90_percent(study):
    pool, manifest, _ = study
    _, flagged = _rates(pool, manifest, degraded=True, seed=12)
    bound = int(sst.binom.ppf(TAIL, K, TARGET_FLAG))
    assert flagged >= bound, f"{flagged}/{K} flagged; a gate at {TARGET_FLAG:.0%} gives ≥ {bound}"
