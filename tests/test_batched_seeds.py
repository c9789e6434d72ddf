"""Batched synthesis with one generator per item: an item's audio is the audio it gets alone.

Reference for the draw order: NumPy's ``Generator.standard_normal(size)`` fills the array in C order
from one stream (NumPy documentation, "Random Generator"), so row 0 of ``standard_normal((1, n))``
is ``standard_normal(n)``; each item's own Generator then gives it the draws it gets alone. The
DiffWave-architecture network of ``scenarios/diffwave-cpu`` (Kong et al. 2021) is written to be
batch invariant, so with it the whole batched output must equal the per-item outputs bit for bit
(at its published size; for tiny widths and lengths the CPU convolution may pick another kernel by
batch size).
"""
from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from vocobench.samplers import make_plan, run_plan
from vocobench.schedules import linear

REPO = Path(__file__).resolve().parents[1]
SEEDS = (3, 5, 8)


def gens():
    return [np.random.default_rng(s) for s in SEEDS]


def test_numpy_stream_fills_rows_in_order():
    # NumPy documentation: one stream, C order
    a = np.random.default_rng(7).standard_normal((1, 64))[0]
    b = np.random.default_rng(7).standard_normal(64)
    assert np.array_equal(a, b)


@pytest.mark.parametrize("sampler", ["ddpm", "ddim"])
def test_run_plan_per_item_generators_match_items_alone(sampler):
    # ε̂ = 0.3·x is elementwise, hence batch invariant: any difference comes from the noise
    training = linear(50, 1e-4, 0.05)        # DiffWave_BASE's schedule (Kong et al. 2021, Sec. 5)
    plan = make_plan(sampler, linear(6, 1e-4, 0.5), "step", training, {})
    predict = lambda x, f, t: 0.3 * x        # noqa: E731
    feats = np.zeros((len(SEEDS), 4, 5), np.float32)
    batched = run_plan(plan, predict, feats, 160, gens())
    alone = [run_plan(plan, predict, feats[:1], 160, g)[0] for g in gens()]
    assert np.array_equal(batched, np.stack(alone))
    shared = run_plan(plan, predict, feats, 160, np.random.default_rng(SEEDS[0]))
    assert not np.array_equal(shared[1], alone[1])     # a shared Generator gives other draws


def test_run_plan_rejects_a_wrong_number_of_generators():
    plan = make_plan("ddpm", linear(2, 1e-4, 0.5), "step", linear(50, 1e-4, 0.05), {})
    with pytest.raises(ValueError, match="one numpy Generator per batch item"):
        run_plan(plan, lambda x, f, t: x, np.zeros((3, 4, 5)), 160, gens()[:2])


@pytest.mark.parametrize("noise", ["torch", "numpy"])
def test_diffwave_batch_equals_items_alone(noise):
    pytest.importorskip("torch")
    spec = importlib.util.spec_from_file_location("dw", REPO / "scenarios/diffwave-cpu/model.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    den = mod.make(noise=noise, threads=1)       # the paper's size: 30 layers, 64 channels
    plan = make_plan("ddpm", den.training_schedule.__class__(den.training_schedule.betas[::10], "s"),
                     "step", den.training_schedule, {})
    feats = np.random.default_rng(0).standard_normal((len(SEEDS), 80, 4)).astype(np.float32) - 4
    n = den.frontend.expected_samples(4)
    batched = den.sample(plan, feats, n, gens())
    alone = np.concatenate([den.sample(plan, feats[b:b + 1], n, g) for b, g in enumerate(gens())])
    assert np.array_equal(batched, alone)


def test_out_of_memory_halves_the_batch_and_says_so():
    # a module that runs out of device memory above 2 items (torch.OutOfMemoryError, what the
    # CUDA caching allocator raises): the batch is halved until it fits, each item's audio unchanged
    torch = pytest.importorskip("torch")
    from vocobench.torch_adapter import TorchDenoiser

    class Small(torch.nn.Module):
        sample_rate, conditioning = 22050, "step"
        frontend = {"sample_rate": 22050, "n_fft": 1024, "win_length": 1024, "hop_length": 256,
                    "n_mels": 80, "fmin": 0.0, "fmax": 8000.0}
        training_schedule = linear(50, 1e-4, 0.05)

        def forward(self, x, f, t):
            if x.shape[0] > 2:
                raise torch.OutOfMemoryError("CUDA out of memory (simulated)")
            return 0.3 * x

    den = TorchDenoiser(Small(), noise="torch")
    plan = make_plan("ddpm", linear(4, 1e-4, 0.5), "step", Small.training_schedule, {})
    feats = np.zeros((4, 80, 2), np.float32)
    seeds = [np.random.default_rng(s) for s in range(4)]
    with pytest.warns(UserWarning, match="halving to 2"):
        out = den.sample(plan, feats, 512, seeds)
    alone = [den.sample(plan, feats[:1], 512, np.random.default_rng(s))[0] for s in range(4)]
    assert np.array_equal(out, np.stack(alone))
    with pytest.raises(torch.OutOfMemoryError):       # a shared Generator cannot be split
        den.sample(plan, feats, 512, np.random.default_rng(0))
