"""How a sweep uses the machine (vocobench.sweep.resources, Worker batching): batched synthesis of
an utterance's seeds and the automatic process count must not change results.

Reference: the sweep at batch 1 in one process (common practice, no source: batching or
distributing independent items must not change them). Per-item generators make an item's noise
the noise it gets alone (NumPy documentation, "Random Generator": one stream fills an array in C
order), so for a batch-invariant model the audio hashes must be equal bit for bit.
"""
from __future__ import annotations

import shutil
import textwrap
from pathlib import Path

import numpy as np
import pytest

from vocobench.config import parse_config
from vocobench.contracts import load_plugin
from vocobench.store import ITEMS, TIMING, read_jsonl
from vocobench.sweep import prepare, run
from vocobench.sweep import resources

DEMO_SET = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"

PLUGINS = textwrap.dedent('''
    import numpy as np
    from vocobench.analytic import AnalyticDenoiser

    class OnDevice(AnalyticDenoiser):
        """The analytic denoiser, declaring an accelerator (nothing runs on one)."""
        device = "cuda:0"

    class Mixing(AnalyticDenoiser):
        """Not batch invariant: each item's estimate leans on the batch mean."""
        def predict_noise(self, x_t, features, t):
            eps = super().predict_noise(x_t, features, t)
            return eps + 1e-3 * np.asarray(x_t).mean(axis=0, keepdims=True)

    CALLS = []

    class Toy:
        """End to end: a fixed tone plus each item's own noise; batches when asked."""
        sample_rate = 16000
        frontend = {"sample_rate": 16000, "n_fft": 512, "win_length": 512, "hop_length": 128,
                    "n_mels": 40}
        accepts_batch = True
        fail_batches = False

        def __call__(self, features, schedule, rng):
            feats = np.asarray(features)
            if feats.ndim == 2:
                CALLS.append(1)
                return self.one(feats, rng)
            CALLS.append(len(rng))
            if self.fail_batches:
                raise RuntimeError("no batches today")
            return np.stack([self.one(feats[b], g) for b, g in enumerate(rng)])

        def one(self, feats, rng):
            n = feats.shape[-1] * 128
            t = np.arange(n) / 16000
            return 0.1 * np.sin(2 * np.pi * 220 * t) + 0.01 * rng.standard_normal(n)

    class Failing(Toy):
        fail_batches = True

    class Single(Toy):
        accepts_batch = False
''')

ANALYTIC = {"conditioning": "step", "training_steps": 1000}


@pytest.fixture(scope="module")
def root(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("resources")
    (root / "testset").mkdir()
    for u in ("pier01", "pier03"):
        shutil.copy(DEMO_SET / f"{u}.wav", root / "testset" / f"{u}.wav")
    (root / "plugins.py").write_text(PLUGINS)
    return root


def _config(root: Path, target: str = "vocobench.analytic:AnalyticDenoiser", options=None,
            samplers=("ddpm", "ddim"), **run_opts):
    data = {
        "vocoder": {"target": target, "options": ANALYTIC if options is None else options},
        "testset": {"path": "testset"},
        "sweep": {"steps": [2, 4], "samplers": list(samplers), "seeds": [0, 1, 2],
                  **({} if options is None else {"schedule": [{"name": "cos", "kind": "cosine"}]})},
        "metrics": {"use": ["mcd", "stoi"]},
        "timing": {"warmup": 0, "repeats": 1, "utterances": 1},
        "run": {"workers": 1, **run_opts},
    }
    return parse_config(data, base_dir=root, source=str(root / "config.toml"))


def _items(run_dir: Path) -> dict[str, tuple]:
    return {r["key"]: (r["status"], r["audio_sha"], r["metrics"], r.get("batch", 1))
            for r in read_jsonl(run_dir / ITEMS)}


@pytest.fixture(scope="module")
def alone(root) -> dict[str, tuple]:
    return _items(run(_config(root, batch=1), root / "alone", progress=False, report=False))


def test_batched_seeds_give_the_items_they_get_alone(root, alone):
    out = run(_config(root, batch=3), root / "batched", progress=False, report=False)
    got = _items(out)
    assert got.keys() == alone.keys() and len(got) == 24
    assert {k: v[:3] for k, v in got.items()} == {k: v[:3] for k, v in alone.items()}
    assert {v[3] for v in got.values()} == {3} and {v[3] for v in alone.values()} == {1}
    # the timing phase still times single calls, on its own (batched seconds are shares)
    timing = read_jsonl(out / TIMING)
    assert timing and {t["source"] for t in timing} == {"timing"} and {t["batch"] for t in timing} == {1}


def test_a_batch_limit_below_the_seeds_splits_the_group(root, alone):
    got = _items(run(_config(root, batch=2), root / "batch2", progress=False, report=False))
    assert {k: v[:3] for k, v in got.items()} == {k: v[:3] for k, v in alone.items()}
    assert sorted(v[3] for v in got.values()) == [1] * 8 + [2] * 16     # seeds 0+1, then 2


def test_auto_batches_on_an_accelerator_only(root):
    on_cpu = prepare(_config(root), root / "x")
    assert resources.choose_batch(on_cpu, "auto").value == 1
    dev = prepare(_config(root, f"{root / 'plugins.py'}:OnDevice"), root / "y")
    choice = resources.choose_batch(dev, "auto")
    assert choice.value == 3 and "bit-identical" in choice.reason
    assert resources.choose_workers(dev, dev.jobs, 1e-3, 0.1, True).value == 1


def test_a_batch_dependent_model_is_detected(root):
    setup = prepare(_config(root, f"{root / 'plugins.py'}:Mixing"), root / "z")
    diff = resources.batch_invariance(setup.plugin, "ddim", None)
    assert diff is not None and 0 < diff < 1
    forced = resources.choose_batch(setup, 2)
    assert forced.value == 2 and "depends on its batch" in forced.reason
    setup.plugin.obj.device = "cuda"
    auto = resources.choose_batch(setup, "auto")
    assert auto.value == 1 and "depends on its batch" in auto.reason


def test_end_to_end_vocoder_batches_only_when_it_says_so(root):
    toy = load_plugin(f"{root / 'plugins.py'}:Toy")
    assert toy.batch_synthesizer("native") is not None
    assert load_plugin(f"{root / 'plugins.py'}:Single").batch_synthesizer("native") is None
    a = _items(run(_config(root, f"{root / 'plugins.py'}:Toy", {}, ("native",), batch=1),
                   root / "toy1", progress=False, report=False))
    b = _items(run(_config(root, f"{root / 'plugins.py'}:Toy", {}, ("native",), batch=3),
                   root / "toy3", progress=False, report=False))
    assert {k: v[:3] for k, v in a.items()} == {k: v[:3] for k, v in b.items()}
    assert {v[3] for v in b.values()} == {3}


def test_a_failed_batched_call_is_retried_item_by_item(root):
    cfg = _config(root, f"{root / 'plugins.py'}:Failing", {}, ("native",), batch=3)
    setup = prepare(cfg, root / "fail")
    from vocobench.sweep import Worker

    recs = Worker(setup).process_group(setup.jobs[:3])
    assert [r["status"] for r in recs] == ["ok"] * 3 and all("batch" not in r for r in recs)


def test_auto_workers_weighs_timing_reuse_against_processes(root):
    setup = prepare(_config(root), root / "w")
    big = dict(cores=4, memory=64 * 2**30, rss=2**30)
    # a costly model: the sweep dwarfs helper start-up and the timing phase
    assert resources.choose_workers(setup, setup.jobs, 1.0, 0.1, True, **big).value == 4
    # a cheap one: start-up and a separate timing phase cost more than they save
    assert resources.choose_workers(setup, setup.jobs[:2], 1e-6, 5.0, True, **big).value == 1
    # memory for two processes of this size (this one included), one core, nothing to do
    assert resources.choose_workers(setup, setup.jobs, 1.0, 0.1, True, cores=4,
                                    memory=2**30, rss=2**30).value == 2
    assert resources.choose_workers(setup, setup.jobs, 1.0, 0.1, True, cores=1).value == 1
    assert resources.choose_workers(setup, [], 1.0, 0.1, True, **big).value == 1
    assert resources.choose_workers(setup, setup.jobs, None, 0.1, True, **big).value == 1


def test_the_run_says_what_auto_chose(root, capsys):
    run(_config(root, workers="auto"), root / "auto", progress=True, report=False)
    out = " ".join(capsys.readouterr().err.split())       # unwrapped
    assert "(auto): " in out and "usable core" in out


def test_tables_follow_the_plan_not_the_finishing_order(root, alone):
    # several workers journal items in the order they finish, which changes from run to run;
    # the tables (and every resampling statistic drawn from them) must not
    from vocobench.store import load_run

    src = root / "alone"
    dst = root / "shuffled"
    shutil.copytree(src, dst)
    lines = (src / ITEMS).read_text().splitlines()
    order = np.random.default_rng(1).permutation(len(lines))
    (dst / ITEMS).write_text("\n".join(lines[i] for i in order) + "\n")
    a, b = load_run(src).items, load_run(dst).items
    assert list(order) != sorted(order)
    assert list(b["key"]) == list(a["key"])
