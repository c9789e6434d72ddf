"""Schedule search on the analytic demo denoiser (1000-step training schedule): does a 6-step
schedule found by the search hold up on held-out utterances, and does successive halving reach
the exhaustive grid's held-out score for a fraction of its syntheses?

Plain script: ``python bench/bench_search.py [--out DIR] [--grid-points K]``. Test set: the six
demo recordings (scenarios/pier-announcements) cut into three pieces each (18 utterances, speaker
tag kept), split half search / half held-out by speaker. Sampler DDIM (η = 0), metrics stoi and
logmel_l1 (the demo's decision metrics, margins 0.01 and 0.15 from its [decide] table), space:
Karras-ρ schedules with free log-SNR endpoints, K points per dimension.

1. **halving** (η = 4, first rung one utterance): winner and finalists confirmed with a fresh seed
   on the held-out split against the 1000-step reference (paired bootstrap interval, Holm p).
2. **grid**: every grid point on every search utterance, same confirmation.
3. **constrained**: halving over Karras-ρ, geometric and training-step sub-sequence spaces,
   maximising stoi while keeping logmel_l1 within 0.15 of the reference on the search split.

Targets (issue 15): halving's best held-out stoi within 1 % of the grid's; halving's syntheses at
most a quarter of the grid's. Both runs share one output folder, so the reference is computed once.
"""
from __future__ import annotations

import argparse
import csv
import json
import sys
import time
from pathlib import Path

import numpy as np
import soundfile as sf

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from vocobench.config import parse_config  # noqa: E402
from vocobench.search import search  # noqa: E402

DEMO = ROOT / "scenarios" / "pier-announcements" / "testset"
PIECES = 3
TARGET_REL = 0.01              # issue 15: within 1 % of the grid's best held-out score
TARGET_COST = 0.25             # issue 15: at most a quarter of the grid's syntheses


def make_testset(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    rows = list(csv.DictReader(open(DEMO / "manifest.csv")))
    out = [("id", "path", "speaker")]
    for r in rows:
        y, sr = sf.read(DEMO / r["path"])
        for k, piece in enumerate(np.array_split(y, PIECES)):
            name = f"{r['id']}_{k}"
            sf.write(folder / f"{name}.wav", piece, sr, subtype="PCM_16")
            out.append((name, f"{name}.wav", r["speaker"]))
    with open(folder / "manifest.csv", "w", newline="") as f:
        csv.writer(f).writerows(out)
    return folder / "manifest.csv"


def config(manifest: Path, strategy: str, k: int) -> dict:
    if strategy == "constrained":
        c = config(manifest, "halving", k)
        c["search"].update(objective="constrained", margins={"logmel_l1": 0.15}, candidates=3 * k ** 3,
                           spaces=[{"kind": "karras"}, {"kind": "geometric"}, {"kind": "subsequence"}])
        return c
    return {
        "vocoder": {"target": "vocobench.analytic:AnalyticDenoiser",
                    "options": {"conditioning": "step", "training_steps": 1000}},
        "testset": {"path": str(manifest)}, "sweep": {"samplers": ["ddim"]},
        "sampler_options": {"ddim": {"eta": 0.0}},
        "metrics": {"use": ["stoi", "logmel_l1"]}, "output": {"save_audio": "none"},
        "decide": {"metrics": ["stoi", "logmel_l1"], "margins": {"stoi": 0.01, "logmel_l1": 0.15},
                   "primary": "stoi"},
        "search": {"steps": [6], "strategy": strategy, "spaces": [{"kind": "karras"}],
                   "grid_points": k, "candidates": k ** 3, "eta": 4, "min_utterances": 1,
                   "finalists": 2},
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", type=Path, default=ROOT / "reports" / "bench_search")
    ap.add_argument("--grid-points", type=int, default=4)
    a = ap.parse_args()
    manifest = make_testset(a.out / "testset")
    res = {}
    for strategy in ("halving", "grid", "constrained"):
        t0 = time.perf_counter()
        search(parse_config(config(manifest, strategy, a.grid_points), source=f"bench {strategy}"),
               a.out / "run", progress=False)
        s = json.loads((a.out / "run" / "search" / "search.json").read_text())
        (a.out / f"{strategy}.json").write_text(json.dumps(s, indent=1))
        for f in ("summary.md", "search_trace.png", "search_schedules.png", "winners.toml"):
            src = a.out / "run" / "search" / f
            (a.out / f"{strategy}_{f}").write_bytes(src.read_bytes())
        t = s["targets"][0]
        if not t["finalists"]:
            print(f"\n== {strategy}: no feasible candidate")
            continue
        best = t["finalists"][0]
        res[strategy] = {"syntheses": t["budget"]["syntheses_asked"], "seconds": time.perf_counter() - t0,
                         "winner": best["name"], "betas": best["betas"], "overall": best["overall"],
                         "held_out": best["held_out"],
                         "optimistic": best["optimistic_search_split"]}
        print(f"\n== {strategy}: {res[strategy]['syntheses']} syntheses, winner {best['name']} "
              f"({best['overall']})")
        for col, h in best["held_out"].items():
            print(f"  {col}: held-out candidate {h['candidate_mean']:.4f} vs reference "
                  f"{h['reference_mean']:.4f}, diff {h['diff']:+.4f} [{h['diff_low']:+.4f}, "
                  f"{h['diff_high']:+.4f}], margin {h['margin']}, p_holm {h['p_holm']:.3g}: "
                  f"{h['verdict']}  (optimistic search-split mean {best['optimistic_search_split'][col]:.4f})")
    g, h = res["grid"], res["halving"]
    gs, hs = g["held_out"]["stoi"]["candidate_mean"], h["held_out"]["stoi"]["candidate_mean"]
    rel = (gs - hs) / abs(gs)
    cost = h["syntheses"] / g["syntheses"]
    print(f"\nhalving best held-out stoi {hs:.4f} vs grid {gs:.4f}: shortfall {100 * rel:+.2f} % "
          f"(target ≤ {100 * TARGET_REL:.0f} %) -> {'met' if rel <= TARGET_REL else 'NOT met'}")
    print(f"syntheses: halving {h['syntheses']} / grid {g['syntheses']} = {cost:.3f} "
          f"(target ≤ {TARGET_COST}) -> {'met' if cost <= TARGET_COST else 'NOT met'}")
    (a.out / "bench_search.json").write_text(json.dumps(res, indent=1))
    if rel > TARGET_REL or cost > TARGET_COST:
        sys.exit(1)


if __name__ == "__main__":
    main()
