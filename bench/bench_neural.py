"""The harness on a network-sized vocoder: whole command against a bare loop, timing phase cost,
batched seeds.

Plain script: ``python bench/bench_neural.py [--quick]``. The vocoder is the DiffWave-sized noise
predictor of ``scenarios/diffwave-cpu`` (Kong et al. 2021 architecture, random weights, about 2.4 s
of compute per second of audio per step on one thread), run with the scenario's default settings on
a reduced grid: the first ``UTTERANCES`` pier-announcement recordings cut to ``SECONDS``, ``STEPS``
DDIM steps, seeds 0 and 1, metrics MCD and STOI. Prints, as ratios against their targets:

1. **whole command** — ``vocobench.sweep.run`` (default workers and threads, timing phase included,
   no report) against a bare loop that builds the same model and makes the same forward and metric
   calls on the same items with the same thread count; median of three pairs run in alternating
   order (single pairs move by ±7 % on a shared machine). Target ≤ 1.15×.
2. **timing phase** — wall time of the timing phase against the sweep's own synthesis time (the sum
   of the items' ``synth_s``). Target ≤ 30 %.
3. **batched seeds** — one utterance's seeds through ``TorchDenoiser.sample`` as one batch, one
   generator per item, against the same items one at a time: audio hashes bit-identical, time per
   item not above batch 1's (target ≤ 1.0×). The row also says what ``[run] batch = "auto"`` (the
   default) chose in the whole-command run: on a CPU it keeps batch 1, because batched waveform
   networks run slower per item there; the explicit batch is measured anyway.

``--quick`` uses a 3-layer, 8-channel network: it checks the script, not the figures. The load
average is printed with each measurement: on a shared machine the figures need an idle one.
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
import neural_common as nc  # noqa: E402

TARGETS = {"whole": 1.15, "timing": 0.30, "batch": 1.0}
UTTERANCES, SECONDS, STEPS, SEEDS = 2, 1.5, 4, (0, 1)
PAIRS = 3             # whole command: median of run/bare pairs in alternating order (3 in --quick too)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="tiny network: checks the script only")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        cfg = nc.scenario_config(work, utterances=UTTERANCES, steps=[STEPS], seeds=SEEDS,
                                 quick=args.quick, seconds=SECONDS)
        whole = measure_whole(work, cfg)
        batch = measure_batch(work, cfg)
        cores = measure_cores(cfg, quick=args.quick)
    print(f"\nDiffWave-sized denoiser{' (quick: tiny network)' if args.quick else ''}, "
          f"{UTTERANCES} utterances × {SECONDS} s, {STEPS} DDIM steps, seeds {list(SEEDS)}")
    rows = [("whole command / bare loop", whole["ratio"], TARGETS["whole"], "×", whole["load"]),
            ("timing phase / sweep synthesis", whole["timing_share"], TARGETS["timing"], "",
             whole["load"]),
            ("batched seeds, time per item / batch 1", batch["ratio"], TARGETS["batch"], "×",
             batch["load"])]
    missed = 0
    for name, value, target, unit, load in rows:
        ok = value <= target
        missed += not ok
        fmt = f"{value:.1%}" if not unit else f"{value:.3f}{unit}"
        tfmt = f"{target:.0%}" if not unit else f"{target:.2f}{unit}"
        print(f"  {name:42s} {fmt:>9s}  target ≤ {tfmt:6s} {'ok' if ok else 'MISSED'}  ({load})")
    print(f"  batched audio hashes bit-identical to batch 1: {batch['identical']}; default "
          f"settings chose workers {whole['workers']}, batch {whole['batch']} "
          f"(the run's own words: {whole['why']})")
    print("  whole command / bare loop, each pair: " + ", ".join(f"{x:.3f}" for x in whole["ratios"]))
    print(f"  details (median pair): bare {whole['bare_s']:.1f} s ({whole['bare_threads']} threads), run "
          f"{whole['run_s']:.1f} s (sweep synthesis {whole['synth_s']:.1f} s, timing phase "
          f"{whole['timing_s']:.1f} s, {whole['workers']} worker(s), {whole['threads']} thread(s)); "
          f"batch of {batch['batch']}: {batch['batched_s']:.2f} s against {batch['alone_s']:.2f} s")
    print(f"  two cores, forward passes per second on one {SECONDS} s item: 2 processes × 1 thread "
          f"{cores['processes']:.3f}, 1 process × 2 threads {cores['threads']:.3f}, 1 × 1 "
          f"{cores['single']:.3f}; 2 threads change the output: max |Δ| {cores['diff']:.2g} "
          f"({cores['load']})")
    return 1 if missed or not batch["identical"] else 0


def _forwards(args: tuple[dict, int, int]) -> tuple[float, Any]:
    """In a fresh process: ``n`` timed forward passes at ``threads`` threads (after one untimed);
    returns passes per second and the last output."""
    import time

    import torch

    options, threads, n = args
    torch.set_num_threads(threads)
    net = nc.load_model_module().build(**options).eval()
    g = torch.Generator().manual_seed(0)
    frames = int(SECONDS * 22050 / 256)
    x = torch.randn(1, frames * 256, generator=g)
    mel = torch.randn(1, 80, frames, generator=g)
    t = torch.tensor([10.0])
    with torch.inference_mode():
        y = net(x, mel, t)
        t0 = time.perf_counter()
        for _ in range(n):
            y = net(x, mel, t)
    return n / (time.perf_counter() - t0), y.numpy()


def measure_cores(cfg, quick: bool = False, n: int = 4) -> dict[str, Any]:
    """Two cores used by two one-thread processes against one two-thread process (and one
    thread alone), each in fresh spawned processes, and whether two threads change the output."""
    import multiprocessing as mp

    import numpy as np

    opts = {k: v for k, v in cfg.options.items() if k in nc.TINY}
    load = nc.load_average()
    ctx = mp.get_context("spawn")
    with ctx.Pool(2) as pool:
        pair = pool.map(_forwards, [(opts, 1, n), (opts, 1, n)])
    with ctx.Pool(1) as pool:
        [(two, y2)] = pool.map(_forwards, [(opts, 2, n)])
        [(one, y1)] = pool.map(_forwards, [(opts, 1, n)])
    return {"processes": pair[0][0] + pair[1][0], "threads": two, "single": one,
            "diff": float(np.max(np.abs(y2 - y1))), "load": f"{load} at start"}


def measure_whole(work: Path, cfg) -> dict[str, Any]:
    """``run`` with default workers/threads against the bare loop at the harness's thread count."""
    from vocobench.store import load_run
    from vocobench.sweep import run

    import bench_harness as bh               # sibling script: its phase instrumentation

    phases = bh.Phases()
    from vocobench.sweep import orchestrate, resources

    chosen: dict[str, Any] = {}
    inner_jobs, inner_workers = orchestrate.run_jobs, resources.choose_workers

    def spy_jobs(setup, jobs, journal, bar, workers, scheduler):
        chosen.update(workers=workers, batch=setup.config.batch)
        return inner_jobs(setup, jobs, journal, bar, workers, scheduler)

    def spy_workers(*a, **k):
        c = inner_workers(*a, **k)
        chosen["why"] = c.reason
        return c
    orchestrate.run_jobs, orchestrate.choose_workers = spy_jobs, spy_workers
    load = nc.load_average()
    warm = nc.scenario_config(work, utterances=1, steps=[1], seeds=[0], seconds=0.5,
                              **{k: v for k, v in cfg.options.items() if k in nc.TINY})
    threads = 1                               # the sweep's items run with one thread
    run(warm, work / "warm", progress=False, report=False)
    nc.bare_loop(warm, threads=threads)
    pairs = []
    for i in range(PAIRS):                    # alternating order: a drift hits both sides
        got: dict[str, Any] = {}
        for side in (("run", "bare") if i % 2 == 0 else ("bare", "run")):
            if side == "bare":
                got["bare"] = nc.bare_loop(cfg, threads=threads)["wall"]
                continue
            phases.reset()
            with nc.clock() as t:
                out = run(cfg, work / f"run{i}", progress=False, report=False)
            synth = float(load_run(out).items["synth_s"].sum())
            got.update(run=t["wall"], synth=synth, timing=phases.wall.get("run_timing", 0.0))
        pairs.append({**got, "ratio": got["run"] / got["bare"]})
    mid = sorted(pairs, key=lambda p: p["ratio"])[len(pairs) // 2]
    return {"ratio": mid["ratio"], "ratios": [p["ratio"] for p in pairs],
            "timing_share": max(p["timing"] / p["synth"] for p in pairs), "bare_s": mid["bare"],
            "bare_threads": threads, "run_s": mid["run"], "synth_s": mid["synth"],
            "timing_s": mid["timing"], "workers": chosen.get("workers"), "batch": chosen.get("batch"),
            "why": chosen.get("why", "workers set in the config"), "threads": threads,
            "load": f"{load} at start"}


def measure_batch(work: Path, cfg) -> dict[str, Any]:
    """One utterance's seeds as one batch against one at a time (median of 3 after a warm-up)."""
    import numpy as np

    from vocobench.outputs import audio_sha
    from vocobench.samplers import make_plan
    from vocobench.sweep import item_rng
    from vocobench.testset import load_audio, load_testset

    load = nc.load_average()
    plugin = nc.plugin_for(cfg)
    den, fe = plugin.obj, plugin.frontend
    u = load_testset(cfg.testset).utterances[0]
    feats = fe(load_audio(u, plugin.sample_rate))
    n = fe.expected_samples(feats.shape[-1])
    sched = cfg.schedules[0].build(STEPS, plugin.training_schedule)
    plan = make_plan("ddim", sched, "step", plugin.training_schedule,
                     cfg.sampler_options.get("ddim"))
    seeds = list(SEEDS)

    def alone():
        return [den.sample(plan, feats[None], n, item_rng(s, u))[0] for s in seeds]

    def batched():
        return nc.seed_batch(den, plan, feats, n, [item_rng(s, u) for s in seeds])

    from vocobench.timing import thread_limit

    with thread_limit(1, den):                # as the sweep's items run
        t1, ys = nc.best_of(alone, 3, den.synchronize)
        tb, yb = nc.best_of(batched, 3, den.synchronize)
    if yb is None:
        return {"ratio": float("nan"), "identical": False, "batch": len(seeds), "alone_s": t1,
                "batched_s": float("nan"), "load": load}
    same = [audio_sha(np.asarray(a, np.float32)) for a in ys] == \
        [audio_sha(np.asarray(b, np.float32)) for b in yb]
    return {"ratio": tb / t1, "identical": same, "batch": len(seeds), "alone_s": t1,
            "batched_s": tb, "load": f"{load} at start"}


if __name__ == "__main__":
    sys.exit(main())
