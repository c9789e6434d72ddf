"""What ``bench_neural.py`` and ``gpu_check.py`` share: the DiffWave-sized scenario, a reduced grid,
the bare loop of the same forward and metric calls, and batched synthesis with one generator per item.

Not a script. The network is ``scenarios/diffwave-cpu/model.py`` (Kong et al. 2021 architecture,
random weights); the utterances are the first few pier-announcement recordings.
"""
from __future__ import annotations

import shutil
import sys
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

SCENARIO = ROOT / "scenarios" / "diffwave-cpu"
CONFIG = SCENARIO / "config.toml"
DEMO_SET = ROOT / "scenarios" / "pier-announcements" / "testset"
TINY = {"layers": 3, "residual_channels": 8}     # --quick / --dry-run: checks the scripts only


@contextmanager
def clock() -> Iterator[dict[str, float]]:
    """Wall and CPU seconds of the body."""
    out: dict[str, float] = {}
    t0, c0 = time.perf_counter(), time.process_time()
    yield out
    out["wall"], out["cpu"] = time.perf_counter() - t0, time.process_time() - c0


def subset(work: Path, n: int, seconds: float | None = None) -> Path:
    """A folder test set holding the first ``n`` demo recordings, cut to ``seconds`` if given."""
    import soundfile as sf

    dst = work / f"testset{n}_{seconds}"
    dst.mkdir(parents=True, exist_ok=True)
    for f in sorted(DEMO_SET.glob("*.wav"))[:n]:
        if seconds is None:
            shutil.copy(f, dst / f.name)
            continue
        y, sr = sf.read(str(f), dtype="float32")
        sf.write(str(dst / f.name), y[: int(seconds * sr)], sr, subtype=sf.info(str(f)).subtype)
    return dst


def scenario_config(work: Path, *, utterances: int = 2, steps: Sequence[int] = (6,),
                    seeds: Sequence[int] = (0, 1), quick: bool = False,
                    seconds: float | None = None, **options: Any):
    """The scenario's config on a reduced grid; ``options`` go to the model's ``make``."""
    from vocobench.config import load_config

    cfg = load_config(CONFIG)
    cfg.testset = subset(work, utterances, seconds)
    cfg.steps, cfg.seeds = list(steps), list(seeds)
    cfg.options = {**cfg.options, **(TINY if quick else {}), **options}
    cfg.decide = {}
    return cfg


def load_model_module():
    """``scenarios/diffwave-cpu/model.py`` as a module (its folder name is not importable)."""
    import importlib.util

    spec = importlib.util.spec_from_file_location("diffwave_cpu_model", SCENARIO / "model.py")
    mod = importlib.util.module_from_spec(spec)      # type: ignore[arg-type]
    spec.loader.exec_module(mod)                      # type: ignore[union-attr]
    return mod


def plugin_for(cfg):
    from vocobench.contracts import load_plugin

    return load_plugin(cfg.target, cfg.options, cfg.search_path)


def bare_loop(cfg, threads: int = 1, testset: Any = None,
              make_plugin: Callable[[Any], Any] | None = None) -> dict[str, Any]:
    """The sweep's items with no harness: build the model, then per utterance compute the features
    and the metrics' reference analysis, and per item synthesise, equalise lengths and score, with
    ``threads`` BLAS and plug-in threads (the harness's sweep runs with one).

    ``testset``: default the config's; ``make_plugin(cfg)``: default :func:`plugin_for`.
    """
    import numpy as np

    from vocobench.metrics import LengthPolicy, build_metrics
    from vocobench.sweep import item_rng
    from vocobench.testset import load_audio, load_testset
    from vocobench.timing import thread_limit

    with clock() as t:
        plugin = (make_plugin or plugin_for)(cfg)
        fe, sr = plugin.frontend, plugin.sample_rate
        metrics = build_metrics(cfg.metrics, cfg.metric_options)
        policy = LengthPolicy(mode=cfg.length_mode, tolerance_hops=cfg.length_tolerance_hops)
        samplers = cfg.samplers or plugin.samplers()
        synth = {s: plugin.synthesizer(s, cfg.sampler_options.get(s)) for s in samplers}
        points = [(spec.build(n, plugin.training_schedule), s)
                  for spec in cfg.schedules for n in cfg.steps for s in samplers]
        n = 0
        with thread_limit(threads, plugin.obj):
            for u in (testset or load_testset(cfg.testset)).utterances:
                ref = load_audio(u, sr)
                feats = fe(ref)
                states = [m.prepare(ref, sr) for m in metrics]
                for sched, s in points:
                    for seed in cfg.seeds:
                        y = np.asarray(synth[s](feats, sched, item_rng(seed, u)), dtype=np.float32)
                        _, est, _ = policy.apply(ref, y, fe.hop_length)
                        for m, st in zip(metrics, states):
                            m.score(st, est, sr)
                        n += 1
    return {**t, "items": n, "threads": threads}


def seed_batch(den: Any, plan: Any, feats: Any, n_samples: int, rngs: list) -> Any:
    """``den.sample`` on a batch of one utterance's seeds, one generator per item, where the
    adapter accepts a list of generators; ``None`` where it does not."""
    import numpy as np

    batch = np.repeat(np.asarray(feats)[None], len(rngs), axis=0)
    try:
        return den.sample(plan, batch, n_samples, rngs)
    except (TypeError, AttributeError):
        return None


def best_of(fn: Callable[[], Any], repeats: int, sync: Callable[[], None] = lambda: None
            ) -> tuple[float, Any]:
    """Median wall time of ``repeats`` synchronised calls after one warm-up call, and the output."""
    import statistics

    out = fn()
    times = []
    for _ in range(repeats):
        sync()
        t0 = time.perf_counter()
        out = fn()
        sync()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def load_average() -> str:
    import os

    try:
        return "load average %.2f %.2f %.2f" % os.getloadavg()
    except OSError:
        return "load average unknown"
