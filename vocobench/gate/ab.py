"""A/B latency on this machine: both vocoders loaded in one process, timed interleaved.

For every configuration pair and timing utterance: each side is warmed up (``[timing] warmup``
calls, at least one; the first call includes lazy initialisation and is never used), then
``repeats`` rounds each time one baseline call and one candidate call, alternating the order
(AB, BA, AB, …) so that slow drift and order effects hit both sides alike. Every call is
bracketed by the plug-in's ``synchronize()`` (:func:`vocobench.timing.time_call`) and runs under
the config's ``[timing] threads`` limit, which must be the same in both configs. Both sides use
the baseline's first seed, so they draw the same noise.

The verdict uses the paired rounds: ``median(RTF_candidate) / median(RTF_baseline)`` with a
paired percentile bootstrap interval (rounds resampled as pairs) and the rule of
:mod:`vocobench.gate.latency`.
"""
from __future__ import annotations

from contextlib import ExitStack
from pathlib import Path
from typing import Any, Callable, Mapping

import numpy as np

from ..config import RunConfig, load_config
from ..errors import InputError
from ..params import is_integer
from ..sweep import Setup, Worker, item_rng, load_utterance, prepare, timing_utterances
from ..timing import hardware, thread_limit, time_call
from .compare import Comparison, ConfigResult
from .verdict import config_verdict
from .latency import LatencyResult, latency_verdict, ratio_of_medians
from .policy import Policy, resolve_policy

# Our choice: 10 rounds per timing utterance give ≥ 20 paired calls with the default two timing
# utterances, enough for a percentile interval of a median ratio, at 20 calls per side.
DEFAULT_AB_REPEATS = 10


def _setup(cfg: "RunConfig | str | Path") -> Setup:
    c = cfg if isinstance(cfg, RunConfig) else load_config(cfg)
    return prepare(c, out_dir=c.output_dir or Path("reports") / "ab")


def ab_compare(baseline: "RunConfig | str | Path", candidate: "RunConfig | str | Path",
               policy: "Policy | str | Path | Mapping[str, Any] | None" = None, *,
               repeats: int | None = None, match: Mapping[str, str] | None = None,
               progress: Callable[[str], None] | None = None) -> Comparison:
    """Time both vocoders interleaved (see module docstring); returns a latency-only comparison."""
    pol = resolve_policy(policy)
    say = progress or (lambda s: None)
    sb, sc = _setup(baseline), _setup(candidate)
    rounds = DEFAULT_AB_REPEATS if repeats is None else repeats
    if not is_integer(rounds) or rounds < 2:
        raise InputError("A/B repeats must be an integer ≥ 2", field="--repeats", value=rounds)
    tb, tc = sb.config.timing, sc.config.timing
    if tb.threads != tc.threads:
        raise InputError(f"timing.threads differ ({tb.threads} vs {tc.threads}); an A/B comparison "
                         "times both under one limit: make them equal", source=sc.config.source,
                         field="timing.threads", value=tc.threads)
    warm = max(tb.warmup, tc.warmup, 1)
    lab_b = {g.label: i for i, g in enumerate(sb.grid)}
    lab_c = {g.label: i for i, g in enumerate(sc.grid)}
    pairs = match or {lab: lab for lab in lab_b if lab in lab_c}
    for b, c in pairs.items():
        if b not in lab_b or c not in lab_c:
            side, lab, valid = ("baseline", b, lab_b) if b not in lab_b else ("candidate", c, lab_c)
            raise InputError(f"configuration not in the {side} grid; valid: {', '.join(valid)}",
                             field="--match-config", value=lab)
    if not pairs:
        raise InputError("the two configs have no configuration in common (use --match-config)")
    by_key = {(u.id, u.sha256): i for i, u in enumerate(sc.testset.utterances)}
    index_b = {u.id: i for i, u in enumerate(sb.testset.utterances)}
    utts = [(index_b[u.id], by_key[(u.id, u.sha256)]) for u in timing_utterances(sb)
            if (u.id, u.sha256) in by_key]
    if not utts:
        raise InputError("no timing utterance of the baseline is in the candidate's test set "
                         "(same id and content)", source=sc.config.source, field="testset.path")
    seed = sb.config.seeds[0]
    wb, wc = Worker(sb, cache_size=1), Worker(sc, cache_size=1)
    results, raw = [], {}
    with ExitStack() as stack:
        stack.enter_context(thread_limit(tb.threads, sb.plugin.obj))
        stack.enter_context(thread_limit(tb.threads, sc.plugin.obj))
        for b, c in pairs.items():
            res = ConfigResult(b, c)
            try:
                a_rtf, b_rtf = _time_pair(sb, sc, wb, wc, lab_b[b], lab_c[c], utts, seed, warm, rounds)
            except _SideFailed as e:
                res.latency = LatencyResult("not measured", source="A/B", reason=str(e))
                res.verdict = "regression" if e.side == "candidate" else "inconclusive"
                res.reasons = [str(e)]
                results.append(res)
                say(f"A/B {res.name}: {e}")
                continue
            r, lo, hi = ratio_of_medians(a_rtf, b_rtf, pol.settings, paired=True)
            verdict, why = latency_verdict(r, lo, hi, len(a_rtf), len(b_rtf), pol.max_rtf_increase_pct)
            res.latency = LatencyResult(verdict, float(np.median(a_rtf)), float(np.median(b_rtf)), r,
                                        lo, hi, len(a_rtf), len(b_rtf), "A/B", why)
            config_verdict(res, pol)
            if verdict == "improvement":             # no metric names it: give the latency's reason
                res.reasons = [why]
            raw[res.name] = {"baseline_rtf": a_rtf, "candidate_rtf": b_rtf}
            results.append(res)
            say(f"A/B {res.name}: ×{r:.3f} [{lo:.3f}, {hi:.3f}] {verdict}")
    comp = Comparison(sb.config.source, sc.config.source, results, pol, mode="ab")
    comp.meta = {"ab": {"threads": tb.threads, "warmup": warm, "rounds": rounds,
                        "order": "alternating AB/BA", "seed": seed,
                        "utterances": [sb.testset.utterances[i].id for i, _ in utts],
                        "hardware": hardware()}, "ab_timings": raw}
    comp.notes.append(f"A/B on this machine: {rounds} interleaved rounds × {len(utts)} utterance(s) "
                      f"per configuration, {warm} warm-up call(s) a side, {tb.threads} thread(s)")
    return comp


class _SideFailed(RuntimeError):
    def __init__(self, side: str, msg: str) -> None:
        super().__init__(msg)
        self.side = side


def _time_pair(sb: Setup, sc: Setup, wb: Worker, wc: Worker, pb: int, pc: int,
               utts: list[tuple[int, int]], seed: int, warm: int, rounds: int
               ) -> tuple[list[float], list[float]]:
    a_rtf: list[float] = []
    b_rtf: list[float] = []
    for ib, ic in utts:
        calls = []
        for side, s, w, p, i in (("baseline", sb, wb, pb, ib), ("candidate", sc, wc, pc, ic)):
            try:
                _, feats = load_utterance(s, i)
                fn = w.synth(p)
            except InputError:
                raise
            except Exception as e:
                raise _SideFailed(side, f"{side} could not be set up: {type(e).__name__}: {e}") from None
            u, g = s.testset.utterances[i], s.grid[p]
            calls.append((side, s, (lambda fn=fn, f=feats, g=g, u=u: fn(f, g.schedule, item_rng(seed, u))),
                          u.duration_s))
        for side, s, call, _ in calls:
            _once(side, s, call, warm)
        for r in range(rounds):
            order = calls if r % 2 == 0 else calls[::-1]
            got = {}
            for side, s, call, dur in order:
                got[side] = _once(side, s, call, 0) / dur
            a_rtf.append(got["baseline"])
            b_rtf.append(got["candidate"])
    return a_rtf, b_rtf


def _once(side: str, s: Setup, call: Callable[[], Any], warmup: int) -> float:
    """One synchronised timed call (``warmup`` > 0: warm-up calls first, nothing returned of use)."""
    try:
        t = time_call(call, warmup=warmup, repeats=0, sync=s.plugin.synchronize)
    except Exception as e:
        raise _SideFailed(side, f"{side} vocoder raised {type(e).__name__}: {e}") from None
    return t.first_s


__all__ = ["ab_compare", "DEFAULT_AB_REPEATS"]
