"""A tiny hand-built run directory in the documented ``vocobench-run/1`` format (DEVELOPERS.md).

Used by the decision-stage tests; the numbers are constructed inputs and every expected output
is worked out by hand in the tests that use them. Per-utterance values (seeds averaged):

* utterances u1..u4, 2.0 s each, seeds 0 and 1; seed 0 stores ``base − 0.01``, seed 1 ``base + 0.01``
  so the seed average is ``base``;
* reference-to-be ``linear/ddim/64``: MCD [3.0, 3.2, 3.4, 3.6], PESQ [3.5, 3.6, 3.7, 3.8];
* other configurations add the per-utterance offsets in ``OFFSETS``;
* ``linear/ddpm/4`` has one failed item (u4, seed 1);
* timing: for u1 and u2, one first call (repeat −1, RTF 10·r) and repeats 0..2 at RTF
  0.9·r, r, 1.1·r, with r = ``RTF[config]``.
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from vocobench.store import FORMAT, dumps, load_run  # noqa: E402

UTTS = ("u1", "u2", "u3", "u4")
DURATION_S = 2.0
SR = 16000
REF_MCD = (3.0, 3.2, 3.4, 3.6)
REF_PESQ = (3.5, 3.6, 3.7, 3.8)
# config → (MCD offsets, PESQ offsets), per utterance
OFFSETS = {
    ("linear", "ddim", 8): ((0.60, 0.70, 0.90, 0.80), (-0.30, -0.40, -0.35, -0.45)),
    ("linear", "ddim", 16): ((0.20, 0.30, 0.40, 0.30), (-0.02, -0.05, -0.03, -0.04)),
    ("linear", "ddim", 32): ((0.05, 0.10, 0.15, 0.10), (-0.01, -0.02, 0.00, -0.01)),
    ("linear", "ddim", 64): ((0.0,) * 4, (0.0,) * 4),
    ("linear", "ddpm", 4): ((-0.10,) * 4, (0.20,) * 4),
    ("cosine", "ddim", 64): ((0.05,) * 4, (0.01,) * 4),
}
RTF = {("linear", "ddim", 8): 0.08, ("linear", "ddim", 16): 0.16, ("linear", "ddim", 32): 0.32,
       ("linear", "ddim", 64): 0.64, ("linear", "ddpm", 4): 0.04, ("cosine", "ddim", 64): 0.66}
FAILED = {(("linear", "ddpm", 4), "u4", 1)}
SEEDS = (0, 1)


def _tone(seed: int, amp: float, n: int = int(0.4 * SR)) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / SR
    return amp * np.sin(2 * np.pi * 220 * t) + 0.01 * rng.standard_normal(n)


def make_run(root: Path, *, utt_ids=UTTS, names=("mcd_db", "pesq_wb"), decide=None,
             schedules=None, loud_first: bool = False) -> Path:
    """Write the run directory under ``root/run`` (and references under ``root/testset``)."""
    import soundfile as sf

    run = root / "run"
    (run / "audio").mkdir(parents=True, exist_ok=True)
    ts = root / "testset"
    ts.mkdir(parents=True, exist_ok=True)
    rename = schedules or {}
    mcd, pesq = names
    utterances = []
    for k, u in enumerate(utt_ids):
        p = ts / f"ref{k}.wav"
        sf.write(p, _tone(100 + k, 0.5), SR, subtype="PCM_16")
        utterances.append({"id": u, "sha256": f"{k:064d}", "duration_s": DURATION_S,
                           "native_rate": SR, "channels": 1, "tags": {"speaker": f"s{k}&\"q\""},
                           "path": str(p), "features": None})
    grid = [{"schedule": rename.get(s, s), "sampler": a, "steps": n, "nfe": n, "kind": s}
            for (s, a, n) in OFFSETS]
    items, timing = [], []
    for ci, ((s, a, n), (dm, dp)) in enumerate(OFFSETS.items()):
        sname = rename.get(s, s)
        for k, u in enumerate(utt_ids):
            for seed in SEEDS:
                sign = -1 if seed == 0 else 1
                failed = ((s, a, n), UTTS[k], seed) in FAILED
                rec = {"key": f"{sname}|{a}|{n}|{k}|{seed}", "utt_id": u, "utt_sha": f"{k:016d}",
                       "tags": utterances[k]["tags"], "schedule": sname, "sampler": a, "steps": n,
                       "nfe": n, "seed": seed, "duration_s": DURATION_S, "synth_s": None,
                       "rtf": None, "ms_per_nfe": None, "audio_sha": None, "audio_path": None,
                       "length_diff": 0, "status": "failed" if failed else "ok",
                       "failure": "vocoder raised RuntimeError: boom" if failed else None,
                       "metrics": {}, "notes": {}}
                if not failed:
                    rec["metrics"] = {mcd: REF_MCD[k] + dm[k] + sign * 0.01,
                                      pesq: REF_PESQ[k] + dp[k] + sign * 0.01}
                    rec.update(synth_s=RTF[(s, a, n)] * DURATION_S, rtf=RTF[(s, a, n)] * 1.5)
                    if seed == 0:
                        rel = Path("audio") / f"c{ci}_u{k}.flac"
                        loud = loud_first and ci == 0 and k == 0
                        if loud:        # loud noise, stored as float WAV (FLAC cannot exceed 1.0)
                            rel = rel.with_suffix(".wav")
                            y = 4.0 * np.random.default_rng(ci).standard_normal(int(0.4 * SR))
                            sf.write(run / rel, y, SR, subtype="FLOAT")
                        else:
                            sf.write(run / rel, _tone(ci * 10 + k, 0.1 + 0.1 * ci), SR, subtype="PCM_16")
                        rec["audio_path"] = str(rel)
                items.append(rec)
        r = RTF[(s, a, n)]
        for u in utt_ids[:2]:
            for rep, f in ((-1, 10.0), (0, 0.9), (1, 1.0), (2, 1.1)):
                timing.append({"schedule": sname, "sampler": a, "steps": n, "nfe": n, "utt_id": u,
                               "duration_s": DURATION_S, "repeat": rep, "seconds": f * r * DURATION_S,
                               "rtf": f * r, "ms_per_nfe": 1e3 * f * r * DURATION_S / n,
                               "peak_mem_bytes": None})
    manifest = {
        "format": FORMAT, "vocobench_version": "0.1.0", "created_utc": "2025-01-01T00:00:00+00:00",
        "config": {}, "vocoder": {"target": "tests.fake:Vocoder", "kind": "vocoder", "version": "t1"},
        "frontend": {}, "metrics": {"mcd": {"order": 24, "alpha": 0.42}, "pesq": {"mode": "wb"}},
        "columns": {mcd: {"metric": "mcd", "unit": "dB", "higher_is_better": False, "range": [0, None]},
                    pesq: {"metric": "pesq", "unit": "", "higher_is_better": True, "range": [1.04, 4.64]}},
        "length_policy": {}, "dataset": {"source": str(ts), "fingerprint": "f" * 16,
                                         "n_utterances": len(utt_ids), "utterances": utterances},
        "grid": grid, "seeds": list(SEEDS),
        "timing": {"warmup": 1, "repeats": 3, "utterances": list(utt_ids[:2]), "threads": 1},
        "hardware": {}, "packages": {}, "decide": decide or {},
    }
    (run / "manifest.json").write_text(json.dumps(json.loads(dumps(manifest)), indent=1))
    (run / "items.jsonl").write_text("".join(dumps(r) + "\n" for r in items))
    (run / "timing.jsonl").write_text("".join(dumps(r) + "\n" for r in timing))
    return run


def test_fixture_is_a_loadable_run(tmp_path):
    # Source: DEVELOPERS.md run-directory format, read back through vocobench.store.load_run.
    run = load_run(make_run(tmp_path))
    assert len(run.items) == len(OFFSETS) * len(UTTS) * len(SEEDS)
    assert (run.items["status"] == "failed").sum() == len(FAILED)
    assert {"mcd_db", "pesq_wb"} <= set(run.items.columns)
    assert len(run.timing) == len(OFFSETS) * 2 * 4
