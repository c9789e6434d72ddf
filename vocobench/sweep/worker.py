"""The worker: synthesises and scores one job at a time, caching per-utterance work."""
from __future__ import annotations

import signal
import threading
import time
from collections import OrderedDict, deque
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Sequence

import numpy as np

from ..errors import InputError, ItemFailure, MetricUnavailable
from ..outputs import as_waveform, audio_sha, save_audio
from ..testset import Utterance, load_audio, load_features
from .plan import Job, Setup


def item_rng(seed: int, utt: Utterance) -> np.random.Generator:
    """Per-item generator: same seed and same utterance content ⇒ same noise."""
    return np.random.default_rng([seed, int(utt.sha256[:8], 16)])


def load_utterance(setup: Setup, i: int) -> tuple[np.ndarray, np.ndarray]:
    """Reference audio (at the vocoder's rate) and mel features of utterance ``i``: the stored
    features, which must have the front-end's ``n_mels`` bands, else the front-end's own."""
    u = setup.testset.utterances[i]
    ref = load_audio(u, setup.plugin.sample_rate)
    feats = load_features(u)
    if feats is None:
        feats = setup.plugin.frontend(ref)
    elif feats.shape[0] != setup.plugin.frontend.n_mels:
        raise InputError("features have the wrong number of mel bands", source=str(u.features_path),
                         field="n_mels", value=feats.shape[0])
    return ref, feats


class deadline:
    """Raise :class:`ItemFailure` if the body runs past ``seconds`` (SIGALRM; main thread only)."""

    def __init__(self, seconds: float | None) -> None:
        self.seconds = seconds
        self.active = bool(seconds) and threading.current_thread() is threading.main_thread() \
            and hasattr(signal, "setitimer")

    def __enter__(self) -> None:
        if self.active:
            def on_alarm(signum: int, frame: Any) -> None:
                raise ItemFailure(f"vocoder call exceeded the {self.seconds:g} s timeout")

            self._old = signal.signal(signal.SIGALRM, on_alarm)
            signal.setitimer(signal.ITIMER_REAL, float(self.seconds))  # type: ignore[arg-type]

    def __exit__(self, *exc: object) -> None:
        if self.active:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, self._old)


class Worker:
    """Synthesises and scores jobs; caches per-utterance work (reference audio, analysis)."""

    def __init__(self, setup: Setup, cache_size: int = 2) -> None:
        self.s = setup
        self._synth: dict[int, Callable] = {}
        self._batch_synth: dict[int, Callable | None] = {}
        b = setup.config.batch
        self.batch = b if isinstance(b, int) else 1      # "auto" is resolved before the sweep
        self._utt: OrderedDict[int, dict[str, Any]] = OrderedDict()
        self._cache_size = cache_size

    def utterance(self, i: int) -> dict[str, Any]:
        """Reference audio and features of utterance ``i`` (LRU-cached); metric states are added
        by :meth:`states` on first use, so the timing phase never computes them."""
        if i in self._utt:
            self._utt.move_to_end(i)
            return self._utt[i]
        ref, feats = load_utterance(self.s, i)
        entry = {"ref": ref, "feats": feats}
        self._utt[i] = entry
        while len(self._utt) > self._cache_size:
            self._utt.popitem(last=False)
        return entry

    def states(self, i: int) -> dict[str, Any]:
        """Reference-side analysis of every metric for utterance ``i`` (cached with the audio)."""
        entry = self.utterance(i)
        if "states" not in entry:
            sr = self.s.plugin.sample_rate
            entry["states"] = {m.name: m.prepare(entry["ref"], sr) for m in self.s.metrics}
        return entry["states"]

    def synth(self, p: int) -> Callable:
        """The plug-in's synthesiser for grid point ``p`` (built once)."""
        if p not in self._synth:
            g = self.s.grid[p]
            self._synth[p] = self.s.plugin.synthesizer(g.sampler, self.s.config.sampler_options.get(g.sampler))
        return self._synth[p]

    def synthesize(self, job: Job) -> tuple[np.ndarray, float]:
        """The vocoder's raw output for ``job`` and its synchronised wall time in seconds."""
        outs, secs = self.synthesize_many([job])
        return outs[0], secs

    def synthesize_many(self, jobs: Sequence[Job]) -> tuple[list[Any], float]:
        """Raw outputs of jobs sharing an utterance and configuration, in one vocoder call when
        there are several (each item's noise from its own generator), and the call's
        synchronised wall time in seconds."""
        first = jobs[0]
        g, u = self.s.grid[first.point], self.s.testset.utterances[first.utt]
        feats = self.utterance(first.utt)["feats"]
        timeout = self.s.config.item_timeout_s
        self.s.plugin.synchronize()
        t0 = time.perf_counter()
        with deadline(timeout and timeout * len(jobs)):
            if len(jobs) == 1:
                outs = [self.synth(first.point)(feats, g.schedule, item_rng(first.seed, u))]
            else:
                outs = self.batch_synth(first.point)(feats, g.schedule,  # type: ignore[misc]
                                                     [item_rng(j.seed, u) for j in jobs])
        self.s.plugin.synchronize()
        return list(outs), time.perf_counter() - t0

    def batch_synth(self, p: int) -> Callable | None:
        """The plug-in's batched synthesiser for grid point ``p`` (None: it cannot batch)."""
        if p not in self._batch_synth:
            g = self.s.grid[p]
            self._batch_synth[p] = self.s.plugin.batch_synthesizer(
                g.sampler, self.s.config.sampler_options.get(g.sampler))
        return self._batch_synth[p]

    def next_group(self, queue: "deque[Job]") -> list[Job]:
        """Pop from ``queue`` the jobs of the next vocoder call: the following jobs of the same
        utterance and configuration (the seeds), at most ``[run] batch`` of them."""
        first = queue.popleft()
        group = [first]
        limit = self.batch if self.batch > 1 and self.batch_synth(first.point) else 1
        while queue and len(group) < limit and (queue[0].utt, queue[0].point) == (first.utt, first.point):
            group.append(queue.popleft())
        return group

    def run(self, jobs: Iterable[Job]) -> Iterator[dict[str, Any]]:
        """Records of ``jobs`` in order, consecutive seeds batched as :meth:`next_group` says."""
        queue = deque(jobs)
        while queue:
            yield from self.process_group(self.next_group(queue))

    def process(self, job: Job) -> dict[str, Any]:
        """The item record of ``job``: synthesised, checked, saved if asked, scored."""
        return self.process_group([job])[0]

    def process_group(self, jobs: Sequence[Job]) -> list[dict[str, Any]]:
        """Item records of jobs sharing an utterance and configuration, synthesised in one call.
        A failed batched call is retried item by item, so each failure is its own item's."""
        recs = [self._record(j) for j in jobs]
        try:
            self.utterance(jobs[0].utt)
            try:
                outs, secs = self.synthesize_many(jobs)
            except ItemFailure:
                raise
            except Exception as e:
                raise ItemFailure(f"vocoder raised {type(e).__name__}: {e}") from None
        except ItemFailure as e:
            if len(jobs) > 1:
                return [self.process(j) for j in jobs]
            recs[0].update(status="failed", failure=str(e))
            return recs
        used = getattr(self.synth(jobs[0].point), "last_schedule", None) if len(jobs) == 1 else None
        for rec, job, out in zip(recs, jobs, outs):
            try:
                self._finish(rec, job, out, secs / len(jobs), len(jobs), used)
            except ItemFailure as e:
                rec.update(status="failed", failure=str(e))
        return recs

    def _record(self, job: Job) -> dict[str, Any]:
        g, u = self.s.grid[job.point], self.s.testset.utterances[job.utt]
        return {"key": job.key, "utt_id": u.id, "utt_sha": u.sha256[:16], "tags": u.tags,
                "schedule": g.spec.name, "sampler": g.sampler, "steps": g.steps,
                "nfe": g.nfe, "seed": job.seed, "duration_s": u.duration_s,
                "status": "ok", "failure": None, "metrics": {}, "notes": {},
                "synth_s": None, "rtf": None, "ms_per_nfe": None, "audio_sha": None,
                "audio_path": None, "length_diff": None}

    def _finish(self, rec: dict[str, Any], job: Job, out: Any, secs: float, batch: int,
                used: Any) -> None:
        """Check, save and score one synthesised item (``secs``: its share of the call)."""
        g, u = self.s.grid[job.point], self.s.testset.utterances[job.utt]
        if used is not None:            # adaptive samplers: the schedule this item ran
            rec["schedule_used"] = used
        y = as_waveform(out)
        rec.update(synth_s=secs, rtf=secs / u.duration_s, ms_per_nfe=1e3 * secs / max(g.nfe, 1),
                   audio_sha=audio_sha(y))
        if batch > 1:                   # synth_s is then the call's time shared out
            rec["batch"] = batch
        ref, est, info = self.s.policy.apply(self.utterance(job.utt)["ref"], y,
                                             self.s.plugin.frontend.hop_length)
        rec["length_diff"] = info.get("length_diff")
        if self._save(job):          # named by the job key: unique whatever the ids
            rel = Path("audio") / f"{job.key}.flac"
            save_audio(self.s.out_dir / rel, y, self.s.plugin.sample_rate)
            rec["audio_path"] = str(rel)
        self._score(rec, self.states(job.utt), est)

    def _score(self, rec: dict[str, Any], states: dict[str, Any], est: np.ndarray) -> None:
        sr = self.s.plugin.sample_rate
        for m in self.s.metrics:
            try:
                vals = m.score(states[m.name], est, sr)
                rec["metrics"].update({c.name: float(vals[c.name]) for c in m.columns})
                note = m.caution(sr)            # e.g. a wide-band score of narrow-band audio
                if note:
                    rec["notes"].update({c.name: note for c in m.columns})
            except MetricUnavailable as e:
                for c in m.columns:
                    rec["metrics"][c.name] = float("nan")
                    rec["notes"][c.name] = str(e)
            except Exception as e:       # a metric bug must not end the sweep
                for c in m.columns:
                    rec["metrics"][c.name] = float("nan")
                    rec["notes"][c.name] = f"metric error {type(e).__name__}: {e}"

    def _save(self, job: Job) -> bool:
        mode = self.s.config.save_audio
        return mode == "all" or (mode == "first-seed" and job.seed == self.s.config.seeds[0])
