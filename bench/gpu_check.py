"""GPU check on the DiffWave-sized example: timing, peak memory, batching, half precision, overhead.

Plain script, installs nothing: ``python bench/gpu_check.py`` (or ``bench/gpu_check.sh``) on a
machine with CUDA, from the repository root, with the project and torch installed. About 2–4 minutes
on a data-centre GPU; every step is bounded so that the whole stays under 8 minutes. Prints, for
``scenarios/diffwave-cpu`` (Kong et al. 2021 architecture, random weights) on ``cuda``:

1. synchronised wall time (``torch.cuda.synchronize`` around ``time.perf_counter``, what
   ``vocobench.timing`` does) against CUDA-event time of the same calls: agreement within 3 %;
2. the harness's peak device memory (``peak_mem_bytes`` of the timing journal, through
   ``TorchDenoiser.peak_memory_bytes``) against ``torch.cuda.max_memory_allocated`` read around the
   same call here;
3. batched throughput (items per second) for batch 1, 2, 4, … against batch 1, and whether an
   item's audio is the same in a batch as alone; a CUDA out-of-memory error halves the batch;
4. float16 and bfloat16 against float32: relative L2 difference of one forward pass, against
   ``TOLERANCE_ROUNDOFFS`` unit roundoffs of the format;
5. the harness (``vocobench.sweep.run`` with one worker, timing phase apart) against a bare loop of
   the same forward and metric calls.

Without CUDA it says so and exits 0. ``--dry-run`` runs the same code on the CPU with a tiny
network (CUDA-only figures print as n/a): it checks the script, not the GPU.
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))
import neural_common as nc  # noqa: E402

TIMING_AGREEMENT = 0.03        # the target: wall within 3 % of CUDA-event time
# IEEE 754-2008 binary16: 11 significand bits, u = 2^-11; bfloat16: 8 bits, u = 2^-8.
UNIT_ROUNDOFF = {"float16": 2.0 ** -11, "bfloat16": 2.0 ** -8}
# Tolerance of one forward pass, in unit roundoffs of the format: 30 residual layers of 4 rounded
# operations each, errors adding like a random walk, give about √120 ≈ 11 u; 32 u leaves a margin of
# 3 (a judgement, no source).
TOLERANCE_ROUNDOFFS = 32
BATCHES = (1, 2, 4, 8, 16, 32)
BUDGET_S = 420                 # stop growing the batch / repeating once this much time has passed
SECONDS = 2.0                  # audio per item: pier01 cut to 2 s
DRY_SECONDS, DRY_BATCHES = 0.3, 2   # --dry-run: the CPU only checks the script


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--dry-run", action="store_true", help="CPU, tiny network: checks the script only")
    ap.add_argument("--device", default="cuda", help="default cuda")
    ap.add_argument("--json", type=Path, help="also write the figures to this file")
    args = ap.parse_args()
    try:
        import torch
    except ImportError:
        print("gpu_check: torch is not installed (pip install 'vocobench[torch]'); nothing checked")
        return 0
    if not args.dry_run and not torch.cuda.is_available():
        print(f"gpu_check: no CUDA device visible (torch {torch.__version__}, built for CUDA "
              f"{torch.version.cuda}); nothing to check here. Run it on a machine with a GPU, or "
              "with --dry-run to exercise the script on the CPU.")
        return 0
    device = "cpu" if args.dry_run else args.device
    opts = dict(nc.TINY) if args.dry_run else {}
    start = time.perf_counter()
    print(f"gpu_check on {device_name(device)}, torch {torch.__version__}, {nc.load_average()}")
    fig: dict[str, Any] = {"device": device_name(device), "dry_run": args.dry_run}
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        den, plan, feats, n = setup(device, opts, DRY_SECONDS if args.dry_run else SECONDS)
        fig["timing"] = check_timing(den, plan, feats, n, args.dry_run)
        fig["batching"] = check_batching(den, plan, feats, n, start,
                                         BATCHES[:DRY_BATCHES] if args.dry_run else BATCHES)
        fig["precision"] = check_precision(device, opts, feats)
        fig["overhead"] = check_overhead(work, device, opts, args.dry_run)
        fig["memory"] = check_memory(den, plan, feats, n, fig["overhead"].pop("peak_journal"))
    fig["total_s"] = time.perf_counter() - start
    print(f"\ntotal {fig['total_s']:.0f} s (limit 480 s)")
    if args.json:
        args.json.write_text(json.dumps(fig, indent=1, default=str))
    return 0


def device_name(device: str) -> str:
    import torch

    if device.startswith("cuda"):
        return f"{torch.cuda.get_device_name(torch.device(device))} (CUDA {torch.version.cuda})"
    return "CPU (dry run)"


def setup(device: str, opts: dict[str, Any], seconds: float):
    """The denoiser on ``device``, a 6-step DDIM plan and pier01's first seconds of features."""
    import soundfile as sf

    from vocobench.samplers import make_plan
    from vocobench.schedules import ScheduleSpec

    model = nc.load_model_module()
    den = model.make(device=device, **opts)
    y, sr = sf.read(str(nc.DEMO_SET / "pier01.wav"), dtype="float32")
    feats = den.frontend(y[: int(seconds * sr)])
    sched = ScheduleSpec("uniform", "stride", {"stride": "uniform"}).build(6, den.training_schedule)
    plan = make_plan("ddim", sched, "step", den.training_schedule, {"eta": 0.0})
    return den, plan, feats, den.frontend.expected_samples(feats.shape[-1])


def check_timing(den, plan, feats, n: int, dry: bool) -> dict[str, Any]:
    """Synchronised wall time against CUDA events around the same 6-step syntheses."""
    import numpy as np
    import torch

    from vocobench.timing import time_call

    call = lambda: den.sample(plan, feats[None], n, np.random.default_rng(0))  # noqa: E731
    walls, events = [], []
    for _ in range(6):
        ev = (torch.cuda.Event(enable_timing=True), torch.cuda.Event(enable_timing=True)) \
            if not dry else None
        den.synchronize()
        t0 = time.perf_counter()
        if ev:
            ev[0].record()
        call()
        if ev:
            ev[1].record()
        den.synchronize()
        walls.append(time.perf_counter() - t0)
        if ev:
            events.append(ev[0].elapsed_time(ev[1]) / 1e3)
    walls, events = walls[1:], events[1:]               # the first call warms up
    harness = time_call(call, warmup=1, repeats=5, sync=den.synchronize).seconds
    out = {"wall_s": float(np.median(walls)), "harness_s": float(np.median(harness)),
           "event_s": float(np.median(events)) if events else None}
    print("\n1. timing: 6-step DDIM, %.1f s of audio" % (n / den.sample_rate))
    if out["event_s"]:
        out["wall_over_event"] = out["wall_s"] / out["event_s"]
        out["harness_over_event"] = out["harness_s"] / out["event_s"]
        ok = abs(out["harness_over_event"] - 1) <= TIMING_AGREEMENT
        print(f"   wall {out['wall_s']*1e3:.1f} ms, harness {out['harness_s']*1e3:.1f} ms, CUDA events "
              f"{out['event_s']*1e3:.1f} ms: harness/events {out['harness_over_event']:.3f}× "
              f"({'within' if ok else 'OUTSIDE'} {TIMING_AGREEMENT:.0%})")
    else:
        print(f"   wall {out['wall_s']*1e3:.1f} ms, harness {out['harness_s']*1e3:.1f} ms; CUDA events n/a")
    return out


def check_batching(den, plan, feats, n: int, start: float, batches) -> dict[str, Any]:
    """Items per second by batch size (one generator per item where the adapter takes a list)."""
    import numpy as np

    print("\n2. batched throughput (same utterance, seeds 0..B-1)")
    rows, alone, b = [], None, 1
    for b in batches:
        if time.perf_counter() - start > BUDGET_S / 2:
            break
        try:
            secs, y = nc.best_of(lambda: batch_call(den, plan, feats, n, b), 3, den.synchronize)
        except Exception as e:             # torch.cuda.OutOfMemoryError and its relatives
            if "out of memory" not in str(e).lower():
                raise
            print(f"   batch {b}: CUDA out of memory; stopping at batch {b // 2}")
            break
        if alone is None:
            alone = secs
            first = y[0]
        same = bool(np.array_equal(y[0], first))
        rows.append({"batch": b, "s": secs, "items_per_s": b / secs, "speedup": alone * b / secs,
                     "item0_identical": same})
        print(f"   batch {b:3d}: {secs*1e3:8.1f} ms, {b/secs:7.2f} items/s, {alone*b/secs:5.2f}× "
              f"batch 1, item 0 {'bit-identical' if same else 'differs'}")
    return {"rows": rows}


def batch_call(den, plan, feats, n: int, b: int):
    import numpy as np

    rngs = [np.random.default_rng(s) for s in range(b)]
    y = nc.seed_batch(den, plan, feats, n, rngs)
    if y is None:                          # the adapter takes one generator for the whole batch
        y = den.sample(plan, np.repeat(feats[None], b, axis=0), n, np.random.default_rng(0))
    return y


def check_precision(device: str, opts: dict[str, Any], feats) -> dict[str, Any]:
    """One forward pass in float16 / bfloat16 against float32, same weights and inputs."""
    import numpy as np

    model = nc.load_model_module()
    rng = np.random.default_rng(1)
    n = feats.shape[-1] * 256
    x = rng.standard_normal((1, n)).astype(np.float32)
    t = np.array([17.0], dtype=np.float32)
    ref = model.make(device=device, dtype="float32", **opts).predict_noise(x, feats[None], t)
    print(f"\n3. precision: one forward pass, relative L2 against float32 "
          f"(tolerance {TOLERANCE_ROUNDOFFS} unit roundoffs)")
    out = {}
    for name, u in UNIT_ROUNDOFF.items():
        try:
            eps = model.make(device=device, dtype=name, **opts).predict_noise(x, feats[None], t)
        except RuntimeError as e:          # an operation without a kernel for this dtype/device
            print(f"   {name}: not supported here ({str(e).splitlines()[0]})")
            out[name] = None
            continue
        r = float(np.linalg.norm(eps.astype(np.float64) - ref) / np.linalg.norm(ref))
        out[name] = {"rel_l2": r, "tolerance": TOLERANCE_ROUNDOFFS * u, "in_roundoffs": r / u}
        print(f"   {name}: {r:.2e} = {r/u:.1f} u (tolerance {TOLERANCE_ROUNDOFFS * u:.2e}) "
              f"{'ok' if r <= TOLERANCE_ROUNDOFFS * u else 'OUTSIDE'}")
    return out


def check_overhead(work: Path, device: str, opts: dict[str, Any], dry: bool) -> dict[str, Any]:
    """``vocobench.sweep.run`` (one worker) against the bare loop of the same calls."""
    from vocobench.store import load_run
    from vocobench.sweep import run

    cfg = nc.scenario_config(work, utterances=2, steps=[6], seeds=[0, 1], device=device, **opts)
    cfg.timing.utterances, cfg.timing.warmup, cfg.timing.repeats = 1, 1, 2
    warm = nc.scenario_config(work, utterances=1, steps=[2], seeds=[0], device=device, **opts)
    nc.bare_loop(warm)
    run(warm, work / "warm", progress=False, report=False, workers=1)
    bare = nc.bare_loop(cfg)
    with nc.clock() as t:
        out = run(cfg, work / "run", progress=False, report=False, workers=1)
    r = load_run(out)
    own = r.timing[r.timing.get("source", "timing") != "sweep"] if len(r.timing) else r.timing
    timing_s = float(own["seconds"].sum()) if len(own) else 0.0      # the timing phase's own calls
    ratio = (t["wall"] - timing_s) / bare["wall"]
    print(f"\n4. harness against a bare loop ({bare['items']} items, one worker)")
    print(f"   bare {bare['wall']:.2f} s, harness {t['wall']:.2f} s of which timed calls "
          f"{timing_s:.2f} s: overhead {ratio:.3f}× without the timing phase, "
          f"{t['wall'] / bare['wall']:.3f}× whole run")
    peak = r.timing["peak_mem_bytes"].dropna() if len(r.timing) else []
    return {"bare_s": bare["wall"], "run_s": t["wall"], "timed_calls_s": timing_s,
            "overhead": ratio, "whole": t["wall"] / bare["wall"],
            "peak_journal": int(max(peak)) if len(peak) else None}


def check_memory(den, plan, feats, n: int, journal_peak: int | None) -> dict[str, Any]:
    """The harness's recorded peak against ``torch.cuda.max_memory_allocated`` around one call of
    the same 6-step plan on the same utterance (pier01, the timing phase's first)."""
    import numpy as np
    import torch

    print("\n5. peak device memory")
    if den.device.type != "cuda":
        print("   n/a on the CPU (the harness records peak memory for CUDA only)")
        return {"journal": journal_peak, "direct": None}
    import soundfile as sf

    y, sr = sf.read(str(nc.DEMO_SET / "pier01.wav"), dtype="float32")   # the timed utterance, whole
    feats = den.frontend(y)
    n = den.frontend.expected_samples(feats.shape[-1])
    torch.cuda.reset_peak_memory_stats(den.device)
    den.sample(plan, feats[None], n, np.random.default_rng(0))
    torch.cuda.synchronize(den.device)
    direct = int(torch.cuda.max_memory_allocated(den.device))
    params = sum(p.numel() * p.element_size() for p in den.module.parameters())
    print(f"   max_memory_allocated {direct / 2**20:.1f} MiB (parameters {params / 2**20:.1f} MiB); "
          f"harness's timing journal {journal_peak and journal_peak / 2**20:.1f} MiB "
          f"for the same utterance and plan: ratio "
          f"{journal_peak / direct if journal_peak else float('nan'):.3f})")
    return {"journal": journal_peak, "direct": direct, "parameters": params}


if __name__ == "__main__":
    sys.exit(main())
