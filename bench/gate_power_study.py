"""False-alarm and power study of the gate on the analytic demo denoiser.

Thirty "utterances" are made from the six original bundled pier recordings (``RECORDINGS``;
the bundled set has grown since, the study keeps its calibration): five variants of each, a
1.5 s segment starting 0.25 s later per variant and scaled by −6, −3, 0, +3, +6 dB (different
content and level; the late segments of the shorter files are also shorter). Each variant is
synthesised by the analytic denoiser (uniform stride schedule, DDIM η = 0, 4 steps) from the
front-end's mel of that segment with per-(utterance, seed) noise, and scored against the segment
with the metric registry (``pesq_wb``, ``stoi``). Candidates (``CONDITIONS``): the same model
(``clean``); ``degraded``, white Gaussian noise 32.5 dB below the output's RMS, which costs about
0.1 PESQ (wide-band) — twice the default allowance of 0.05 — and about 0.007 STOI, below its
allowance (our calibration: mean drop −0.102 PESQ over 6 seeds × 30 utterances); ``boundary``,
noise at 37 dB, about 0.05 PESQ, the allowance itself (our calibration, 2 seeds × 30 utterances:
−0.054), where the gate must rarely pass (intersection–union level) and rarely flag. The studies
report the realised drops.

Scores become in-memory runs (:func:`make_run`) that go through the real
:func:`~vocobench.gate.compare.compare_runs`, with disjoint seeds on the two sides ("fresh
seeds"), two seeds a side as in the demo config.

A study, not part of the package: it reads the demo recordings of this repository
(``scenarios/pier-announcements/testset``). Used by ``bench/bench_gate_power.py`` and
``tests/test_gate_power.py``.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
import pandas as pd

from vocobench.store import FORMAT, Run

DEMO_TESTSET = Path(__file__).resolve().parents[1] / "scenarios" / "pier-announcements" / "testset"
RECORDINGS = ("pier01", "pier02", "pier03", "pier04", "pier05", "pier06")
VARIANTS_PER_FILE = 5
SEGMENT_S = 1.5
OFFSET_STEP_S = 0.25
GAINS_DB = (-6.0, -3.0, 0.0, 3.0, 6.0)
STEPS = 4
SAMPLER = "ddim"
SCHEDULE = {"name": "uniform", "kind": "stride", "stride": "uniform"}
METRICS = ("pesq_wb", "stoi")
DEGRADE_SNR_DB = 32.5
CONDITIONS = {"clean": None, "degraded": DEGRADE_SNR_DB, "boundary": 37.0}   # noise SNR, dB
CONFIG = ("uniform", SAMPLER, STEPS)


@dataclass(frozen=True)
class Variant:
    id: str
    audio: np.ndarray
    sha: str


def utterance_variants(folder: Path = DEMO_TESTSET, sample_rate: int = 22050) -> list[Variant]:
    """The 30 segment/gain variants of the six original recordings (see module docstring)."""
    from vocobench.testset import load_audio, load_testset

    out = []
    for u in load_testset(folder).utterances:
        if u.id not in RECORDINGS:
            continue
        y = load_audio(u, sample_rate)
        n = int(SEGMENT_S * sample_rate)
        for v in range(VARIANTS_PER_FILE):
            start = int(v * OFFSET_STEP_S * sample_rate)
            seg = (y[start:start + n] * 10 ** (GAINS_DB[v] / 20)).astype(np.float32)
            sha = hashlib.sha256(seg.tobytes()).hexdigest()[:16]
            out.append(Variant(f"{u.id}v{v}", seg, sha))
    return out


class Synthesiser:
    """Analytic denoiser + metric registry, one thread (scores must not depend on BLAS threads)."""

    def __init__(self) -> None:
        from vocobench.contracts import load_plugin
        from vocobench.metrics import LengthPolicy, build_metrics
        from vocobench.schedules import make_spec

        self.plugin = load_plugin("vocobench.analytic:AnalyticDenoiser")
        self.schedule = make_spec(dict(SCHEDULE)).build(STEPS, self.plugin.training_schedule)
        self.fn = self.plugin.synthesizer(SAMPLER, {"eta": 0.0})
        self.metrics = build_metrics(list(METRICS), {})
        self.policy = LengthPolicy()
        self.sr = self.plugin.sample_rate

    def scores(self, variants: Sequence[Variant], index: int, seeds: Iterable[int],
               conditions: Sequence[str] = ("clean",)) -> list[dict[str, Any]]:
        """Rows ``utt_id, utt_sha, seed, condition, <metric columns>`` for one variant, one per
        seed and condition (``CONDITIONS``: the output as is, or with noise at that SNR)."""
        from threadpoolctl import threadpool_limits

        v = variants[index]
        rows = []
        with threadpool_limits(1):
            feats = self.plugin.frontend(v.audio)
            for seed in seeds:
                out = np.asarray(self.fn(feats, self.schedule, np.random.default_rng([seed, index])),
                                 dtype=np.float32)
                ref, est, _ = self.policy.apply(v.audio, out, self.plugin.frontend.hop_length)
                states = [m.prepare(ref, self.sr) for m in self.metrics]
                rms = float(np.sqrt(np.mean(est.astype(np.float64) ** 2)))
                noise = np.random.default_rng([seed, index, 31]).standard_normal(est.size)
                for cond in conditions:
                    snr = CONDITIONS[cond]
                    y = est if snr is None else (est + rms * 10 ** (-snr / 20) * noise).astype(np.float32)
                    row: dict[str, Any] = {"utt_id": v.id, "utt_sha": v.sha, "seed": seed,
                                           "condition": cond}
                    for m, st in zip(self.metrics, states):
                        row.update({k: float(x) for k, x in m.score(st, y, self.sr).items()})
                    rows.append(row)
        return rows

    def manifest(self, variants: Sequence[Variant]) -> dict[str, Any]:
        cols = {c.name: {"metric": m.name, "unit": c.unit, "higher_is_better": c.higher_is_better,
                         "range": list(c.valid_range)} for m in self.metrics for c in m.columns}
        fp = hashlib.sha256("".join(f"{v.id}\0{v.sha}\n" for v in variants).encode()).hexdigest()[:16]
        return {"format": FORMAT, "frontend": self.plugin.frontend.to_dict(),
                "metrics": {m.name: m.variant() for m in self.metrics}, "columns": cols,
                "length_policy": self.policy.describe(),
                "dataset": {"fingerprint": fp, "n_utterances": len(variants)},
                "grid": [{"schedule": CONFIG[0], "sampler": CONFIG[1], "steps": CONFIG[2], "nfe": STEPS}],
                "hardware": {"processor": "simulated"}, "timing": {"threads": 1},
                "vocoder": {"target": "vocobench.analytic:AnalyticDenoiser"}}


def make_run(scores: pd.DataFrame, manifest: dict[str, Any], name: str) -> Run:
    """An in-memory run of one configuration from rows ``utt_id, utt_sha, seed, <metrics>``."""
    items = scores.drop(columns=[c for c in ("condition",) if c in scores.columns]).copy()
    items["schedule"], items["sampler"], items["steps"] = CONFIG
    items["status"] = "ok"
    return Run(Path(name), manifest, items.reset_index(drop=True), pd.DataFrame())


@dataclass
class ScoredPool:
    """Scores of ``S`` seeds per utterance: one array ``(U, S, M)`` per condition."""

    ids: list[str]
    shas: list[str]
    columns: list[str]
    scores: dict[str, np.ndarray]

    @property
    def clean(self) -> np.ndarray:
        return self.scores["clean"]

    @classmethod
    def from_rows(cls, rows: pd.DataFrame, columns: Sequence[str] = METRICS) -> "ScoredPool":
        ids = list(dict.fromkeys(rows["utt_id"]))
        shas = list(rows.drop_duplicates("utt_id").set_index("utt_id").loc[ids, "utt_sha"])
        seeds = sorted(set(rows["seed"]))
        arr = {}
        for cond in dict.fromkeys(rows["condition"]):
            t = rows[rows["condition"] == cond].set_index(["utt_id", "seed"])[list(columns)]
            idx = pd.MultiIndex.from_product([ids, seeds])
            arr[cond] = t.reindex(idx).to_numpy(dtype=np.float64).reshape(len(ids), len(seeds), -1)
        return cls(ids, shas, list(columns), arr)

    def frame(self, values: np.ndarray, seeds: Sequence[int]) -> pd.DataFrame:
        """Rows ``utt_id, utt_sha, seed, <columns>`` from ``(U, k, M)`` values."""
        u, k, _ = values.shape
        out = pd.DataFrame(values.reshape(u * k, -1), columns=self.columns)
        out.insert(0, "seed", np.tile(np.asarray(seeds), u))
        out.insert(0, "utt_sha", np.repeat(self.shas, k))
        out.insert(0, "utt_id", np.repeat(self.ids, k))
        return out

    def trial(self, rng: np.random.Generator, condition: str, per_side: int = 2
              ) -> tuple[pd.DataFrame, pd.DataFrame]:
        """One trial re-drawn from the pool: per utterance, a random permutation of its pool
        seeds gives ``per_side`` seeds to the baseline (clean scores) and the next ``per_side``
        to the candidate (scores of ``condition``), so the sides never share a seed. Seeds
        are relabelled ``0..per_side−1`` (baseline) and ``per_side..2·per_side−1`` (candidate)."""
        u, s, _ = self.clean.shape
        if s < 2 * per_side:
            raise ValueError("the pool needs at least 2·per_side seeds per utterance")
        perm = np.argsort(rng.random((u, s)), axis=1)
        rows = np.arange(u)[:, None]
        base = self.clean[rows, perm[:, :per_side]]
        cand = self.scores[condition][rows, perm[:, per_side:2 * per_side]]
        return (self.frame(base, range(per_side)), self.frame(cand, range(per_side, 2 * per_side)))


def fresh_trial(syn: Synthesiser, variants: Sequence[Variant], k: int, per_side: int = 2
                ) -> tuple[pd.DataFrame, dict[str, pd.DataFrame]]:
    """Trial ``k`` with fresh synthesis: baseline seeds ``2k·per_side + 0..per_side−1``, candidate
    seeds the next ``per_side`` (never used by another trial). Returns the baseline's scores and
    the candidate's scores per condition of ``CONDITIONS`` (same candidate outputs, noise
    added)."""
    first = 2 * k * per_side
    base_seeds = list(range(first, first + per_side))
    cand_seeds = list(range(first + per_side, first + 2 * per_side))
    base, cand = [], []
    for i in range(len(variants)):
        base += syn.scores(variants, i, base_seeds)
        cand += syn.scores(variants, i, cand_seeds, tuple(CONDITIONS))
    b, c = pd.DataFrame(base), pd.DataFrame(cand)
    cols = ["utt_id", "utt_sha", "seed", *METRICS]
    return b[cols], {cond: c[c["condition"] == cond][cols].reset_index(drop=True)
                     for cond in CONDITIONS}
