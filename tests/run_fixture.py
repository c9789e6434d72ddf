"""Hand-built run directories in the documented ``vocobench-run/1`` format (DEVELOPERS.md) with
chosen per-seed scores, for the gate-rule and recommendation tests.

The values are constructed inputs; every expected output is worked out in the tests. Metric
columns: ``stoi`` (higher is better, unit "score") and ``mcd`` (lower is better, dB). Without
``rtf`` no latency is recorded, and the report's costs fall back to NFE (= steps).
"""
from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Mapping

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from vocobench.store import FORMAT, dumps  # noqa: E402

COLUMNS = {"stoi": {"metric": "stoi", "unit": "score", "higher_is_better": True, "range": [0, 1]},
           "mcd": {"metric": "mcd", "unit": "dB", "higher_is_better": False, "range": [0, None]}}


def utt(k: int) -> str:
    return f"u{k:02d}"


def write_run(root: Path, name: str, scores: Mapping[str, Mapping[str, np.ndarray]], *,
              decide: Mapping | None = None, seeds: tuple[int, ...] = (0, 1),
              failed: tuple[tuple[str, str, int], ...] = (), fingerprint: str = "f" * 16,
              rtf: Mapping[str, float] | None = None) -> Path:
    """Write ``root/name`` from ``scores``: configuration label → column → array ``(U, S)`` of
    per-seed values (``S = len(seeds)``). ``failed``: ``(label, utterance id, seed)`` items
    stored as failed. ``rtf``: label → median RTF of a timing phase on the first utterance
    (repeats at 1.0, 1.05, 1.1 × it); otherwise no latency is recorded."""
    run = root / name
    run.mkdir(parents=True)
    labels = list(scores)
    n_utt = next(iter(next(iter(scores.values())).values())).shape[0]
    utts = [{"id": utt(k), "sha256": f"{k:064d}", "duration_s": 2.0, "tags": {}, "path": None}
            for k in range(n_utt)]
    items = []
    for label in labels:
        sched, sampler, steps = label.rsplit("/", 2)
        for k in range(n_utt):
            for j, seed in enumerate(seeds):
                bad = (label, utt(k), seed) in failed
                items.append({"key": f"{label}|{k}|{seed}", "utt_id": utt(k), "utt_sha": f"{k:016d}",
                              "tags": {}, "schedule": sched, "sampler": sampler, "steps": int(steps),
                              "nfe": int(steps), "seed": seed, "duration_s": 2.0, "synth_s": None,
                              "rtf": None, "ms_per_nfe": None, "audio_sha": None, "audio_path": None,
                              "length_diff": 0, "status": "failed" if bad else "ok",
                              "failure": "injected" if bad else None, "notes": {},
                              "metrics": {} if bad else
                              {c: float(v[k, j]) for c, v in scores[label].items()}})
    grid, timing = [], []
    for lab in labels:
        sched, sampler, steps = lab.rsplit("/", 2)
        grid.append({"schedule": sched, "sampler": sampler, "steps": int(steps), "nfe": int(steps)})
        for rep in range(-1, 3) if rtf and lab in rtf else ():
            r = rtf[lab] * (1 + 0.05 * rep)             # repeats 0..2: 1.0, 1.05, 1.1 × rtf
            timing.append({"schedule": sched, "sampler": sampler, "steps": int(steps),
                           "nfe": int(steps), "utt_id": utt(0), "duration_s": 2.0, "repeat": rep,
                           "seconds": 2.0 * r, "rtf": r, "ms_per_nfe": None, "peak_mem_bytes": None})
    columns = {c: COLUMNS[c] for c in next(iter(scores.values()))}
    manifest = {"format": FORMAT, "vocobench_version": "0.1.0", "created_utc": "2025-01-01T00:00:00+00:00",
                "config": {}, "vocoder": {"target": "tests.fake:Vocoder", "version": name},
                "frontend": {}, "metrics": {c: {} for c in columns}, "columns": columns,
                "length_policy": {}, "grid": grid, "seeds": list(seeds),
                "dataset": {"source": "hand-built", "fingerprint": fingerprint,
                            "n_utterances": n_utt, "utterances": utts},
                "timing": {"threads": 1}, "hardware": {"processor": "hand-built"}, "packages": {},
                "decide": dict(decide or {})}
    (run / "manifest.json").write_text(json.dumps(json.loads(dumps(manifest)), indent=1))
    (run / "items.jsonl").write_text("".join(dumps(r) + "\n" for r in items))
    (run / "timing.jsonl").write_text("".join(dumps(r) + "\n" for r in timing))
    return run


def seeded(base: np.ndarray, seeds: int = 2, spread: float = 0.0) -> np.ndarray:
    """``(U, S)`` values: ``base`` per utterance ± ``spread`` across seeds (seed mean = base)."""
    signs = np.array([(-1) ** j for j in range(seeds)], dtype=float)
    if seeds % 2:
        signs[-1] = 0.0
    return np.asarray(base, dtype=float)[:, None] + spread * signs[None, :]
