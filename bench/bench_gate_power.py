"""False-alarm rate and power of the regression gate, with fresh synthesis in every trial.

Plain script: ``python bench/bench_gate_power.py [--trials K] [--workers N]``. Each trial
synthesises the 30 demo utterance variants of ``bench/gate_power_study.py`` with the analytic
denoiser (4 DDIM steps) for two baseline and two candidate seeds that no other trial uses, scores
them (``pesq_wb``, ``stoi``) and runs :func:`vocobench.gate.compare_runs` with the default policy
twice: baseline vs the same model ("fresh seeds", should pass) and baseline vs the candidate with
white noise at 32.5 dB SNR added (about −0.1 PESQ, should be flagged). Trials are independent,
so the counts are binomial; the script prints Clopper–Pearson 95 % intervals (Clopper & Pearson
1934, "The use of confidence or fiducial limits…", Biometrika).

Targets: pass rate under fresh seeds ≥ 95 %; flagged (pesq_wb regression) ≥ 90 %.
K = 100 (default) puts the half-width of the interval near ±3–6 points at these rates; one trial
costs about 13.5 s of CPU (180 PESQ+STOI scores, 120 syntheses), so 100 trials take
≈ 12–17 min on two cores (measured: 60 trials in 10 min on two shared cores).
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

TARGET_PASS = 0.95
TARGET_FLAG = 0.90
_STATE: dict = {}


def _init() -> None:
    _STATE["variants"] = P.utterance_variants()
    _STATE["syn"] = P.Synthesiser()
    _STATE["manifest"] = _STATE["syn"].manifest(_STATE["variants"])


def _trial(k: int) -> dict:
    syn, variants, man = _STATE["syn"], _STATE["variants"], _STATE["manifest"]
    base, clean, worse = P.fresh_trial(syn, variants, k)
    b = P.make_run(base, man, "baseline")
    null = compare_runs(b, P.make_run(clean, man, "same model"))
    flag = compare_runs(b, P.make_run(worse, man, "degraded"))
    pesq = {m.column: m for m in flag.configs[0].metrics}["pesq_wb"]
    return {"null_pass": null.verdict == "pass", "null_verdicts": [m.verdict for m in null.configs[0].metrics],
            "flag_any": flag.verdict == "regression", "flag_pesq": pesq.verdict == "regression",
            "drop_pesq": float((worse["pesq_wb"].mean() - clean["pesq_wb"].mean()))}


def _ci(k: int, n: int) -> str:
    ci = sst.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return f"{k}/{n} = {k / n:.1%} [95 % CI {ci.low:.1%}, {ci.high:.1%}]"


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
    passes = sum(r["null_pass"] for r in out)
    flags = sum(r["flag_pesq"] for r in out)
    flags_any = sum(r["flag_any"] for r in out)
    drop = np.mean([r["drop_pesq"] for r in out])
    print(f"trials: {n} (independent, fresh seeds), 30 utterances, 2 seeds a side, default policy")
    print(f"fresh seeds, same model   pass:              {_ci(passes, n)}   target ≥ {TARGET_PASS:.0%}")
    print(f"degraded (+noise 32.5 dB) pesq_wb regression: {_ci(flags, n)}   target ≥ {TARGET_FLAG:.0%}")
    print(f"degraded                  any regression:    {_ci(flags_any, n)}")
    print(f"realised mean PESQ drop of the degraded candidate: {drop:+.3f}")
    print(f"wall {time.perf_counter() - t0:.0f} s, main-process CPU {time.process_time() - c0:.1f} s")
    return 0 if passes / n >= TARGET_PASS and flags / n >= TARGET_FLAG else 1


if __name__ == "__main__":
    sys.exit(main())
