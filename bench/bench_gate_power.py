"""False alarms, power and inconclusive rate of the regression gate, fresh synthesis per trial.

Plain script: ``python bench/bench_gate_power.py [--trials K] [--workers N]``. Each trial
synthesises the 30 demo utterance variants of ``bench/gate_power_study.py`` with the analytic
denoiser (4 DDIM steps) for two baseline and two candidate seeds that no other trial uses, scores
them (``pesq_wb``, ``stoi``) and runs :func:`vocobench.gate.compare_runs` with the default policy
(no recorded recommendation, so the one configuration is gated: 2 tests) against three
candidates: the same model ("fresh seeds"), the model with white noise at 32.5 dB SNR (about
−0.1 PESQ, twice the allowance) and at 37 dB (about −0.05 PESQ, the allowance itself). Every
trial's outcome is pass, regression or inconclusive. Trials are independent, so each count is
binomial; the script prints Clopper–Pearson 95 % intervals (Clopper & Pearson 1934, "The use of
confidence or fiducial limits illustrated in the case of the binomial", Biometrika; computed by
``scipy.stats.binomtest(...).proportion_ci(method="exact")``).

Targets (the gate's issue): false alarms (regression under fresh seeds) ≤ 5 %; the 0.1 PESQ drop
flagged (pesq_wb regression) ≥ 90 %. Reported besides: the inconclusive rates, and the pass rate
at the allowance, which the intersection–union rule keeps at or below 5 % when the true drop is
at least the allowance (Berger 1982).

K = 100 (default) puts the half-width of an interval near ±3–6 points at these rates; one trial
costs about 18 s of CPU (240 PESQ+STOI scores, 120 syntheses), so 100 trials take about
15–20 min on two idle cores.
"""
from __future__ import annotations

import argparse
import sys
import time
from multiprocessing import Pool
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from scipy import stats as sst  # noqa: E402

from vocobench.gate import compare_runs  # noqa: E402
import gate_power_study as P  # noqa: E402

TARGET_FALSE_ALARM = 0.05
TARGET_FLAG = 0.90
OUTCOMES = ("pass", "regression", "inconclusive")
LABELS = {"clean": "fresh seeds, same model", "degraded": "noise 32.5 dB (≈ −0.1 PESQ)",
          "boundary": "noise 37 dB (≈ −0.05 PESQ)"}
_STATE: dict = {}


def _init() -> None:
    _STATE["variants"] = P.utterance_variants()
    _STATE["syn"] = P.Synthesiser()
    _STATE["manifest"] = _STATE["syn"].manifest(_STATE["variants"])


def _trial(k: int) -> dict:
    syn, variants, man = _STATE["syn"], _STATE["variants"], _STATE["manifest"]
    base, cands = P.fresh_trial(syn, variants, k)
    b = P.make_run(base, man, "baseline")
    out: dict = {}
    for cond, scores in cands.items():
        comp = compare_runs(b, P.make_run(scores, man, cond))
        cells = {m.column: m.verdict for m in comp.configs[0].metrics}
        out[cond] = {"verdict": comp.verdict, "pesq": cells["pesq_wb"],
                     "drop_pesq": float(cands["clean"]["pesq_wb"].mean() - scores["pesq_wb"].mean())}
    return out


def ci(k: int, n: int) -> str:
    """``k/n = rate [95 % CI low, high]`` by the Clopper–Pearson interval."""
    c = sst.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return f"{k}/{n} = {k / n:.1%} [95 % CI {c.low:.1%}, {c.high:.1%}]"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=100)
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args(argv)
    t0, c0 = time.perf_counter(), time.process_time()
    with Pool(a.workers, initializer=_init) as pool:
        out = []
        for i, r in enumerate(pool.imap_unordered(_trial, range(a.trials)), 1):
            out.append(r)
            if i % 10 == 0 or i == a.trials:
                print(f"  {i}/{a.trials} trials, {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    n = len(out)
    print(f"trials: {n} (independent, fresh seeds), 30 utterances, 2 seeds a side, default policy")
    for cond in P.CONDITIONS:
        drop = np.mean([r[cond]["drop_pesq"] for r in out])
        print(f"{LABELS[cond]} (realised mean PESQ drop {drop:+.3f}):")
        for v in OUTCOMES:
            print(f"    {v:<13} {ci(sum(r[cond]['verdict'] == v for r in out), n)}")
        print(f"    pesq_wb cell regression {ci(sum(r[cond]['pesq'] == 'regression' for r in out), n)}")
    false_alarms = sum(r["clean"]["verdict"] == "regression" for r in out)
    flagged = sum(r["degraded"]["pesq"] == "regression" for r in out)
    print(f"targets: false alarms ≤ {TARGET_FALSE_ALARM:.0%} (got {false_alarms / n:.1%}); "
          f"0.1 PESQ drop flagged ≥ {TARGET_FLAG:.0%} (got {flagged / n:.1%})")
    print(f"wall {time.perf_counter() - t0:.0f} s, main-process CPU {time.process_time() - c0:.1f} s")
    return 0 if false_alarms / n <= TARGET_FALSE_ALARM and flagged / n >= TARGET_FLAG else 1


if __name__ == "__main__":
    sys.exit(main())
