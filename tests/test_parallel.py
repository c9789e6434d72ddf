"""Parallel sweeps (vocobench.sweep.local, vocobench.sweep.dask_backend): a local spawn pool and
a Dask LocalCluster must give the same items as the serial sweep, journal as they go, and resume.

The reference for every check here is the serial sweep itself: a parallel run is correct when
its journal holds the same keys with the same audio hashes and metric values (common practice,
no source: a parallel map must not change results). Figures of speed and memory are measured by
bench/bench_harness.py, not here.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from vocobench.config import parse_config
from vocobench.errors import InputError
from vocobench.store import ITEMS, read_jsonl
from vocobench.sweep import Job, WorkerDied, chunk_jobs, run
from vocobench.sweep import dask_backend, local, orchestrate, preflight      # patched below

DEMO_SET = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"
UTTERANCES = ("pier01", "pier03")          # the two shortest-but-one: 2.7 s and 2.4 s


def _config(root: Path, **sweep):
    data = {
        "vocoder": {"target": "vocobench.analytic:AnalyticDenoiser",
                    "options": {"conditioning": "step", "training_steps": 1000}},
        "testset": {"path": "testset"},
        "sweep": {"steps": [1, 2], "samplers": ["ddim"], "seeds": [0], **sweep},
        "sampler_options": {"ddim": {"eta": 0.0}},
        "metrics": {"use": ["mcd", "pesq_wb", "stoi"]},
        "timing": {"warmup": 0, "repeats": 1, "utterances": 1},
        "output": {"save_audio": "first-seed"},
    }
    return parse_config(data, base_dir=root, source=str(root / "config.toml"))


@pytest.fixture(scope="module")
def root(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("parallel")
    (root / "testset").mkdir()
    for u in UTTERANCES:
        shutil.copy(DEMO_SET / f"{u}.wav", root / "testset" / f"{u}.wav")
    return root


def _items(run_dir: Path) -> dict[str, tuple]:
    return {r["key"]: (r["status"], r["audio_sha"], r["metrics"]) for r in read_jsonl(run_dir / ITEMS)}


@pytest.fixture(scope="module")
def serial(root) -> Path:
    return run(_config(root), root / "serial", progress=False, report=False, workers=1)


@pytest.fixture(scope="module")
def local2(root) -> Path:
    import multiprocessing

    alive: list[int] = []
    timing = orchestrate.run_timing

    def spy(*args, **kwargs):                  # the timing phase must run with no pool left
        alive.append(len(multiprocessing.active_children()))
        return timing(*args, **kwargs)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(orchestrate, "run_timing", spy)
        mp.setattr(local, "MAIN_COMPUTES", False)   # two spawned helpers do every item
        out = run(_config(root), root / "local2", progress=False, report=False, workers=2)
    assert alive == [0]
    return out


def test_serial_sweep_is_complete(serial):
    items = _items(serial)
    assert len(items) == len(UTTERANCES) * 2                     # 2 utterances × steps [1, 2]
    assert all(status == "ok" for status, _, _ in items.values())


def test_two_local_workers_match_serial(serial, local2):
    a, b = _items(serial), _items(local2)
    assert a.keys() == b.keys()
    for key in a:            # exact equality: same noise (per-item seed), same single-thread BLAS
        assert b[key] == a[key], key
    recs = read_jsonl(local2 / ITEMS)
    assert len(recs) == len(a)                                   # journalled once each
    for r in recs:           # audio written by the workers into the run directory
        assert (local2 / r["audio_path"]).is_file()


def test_dask_local_cluster_matches_serial(root, serial):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as cluster:
        out = run(_config(root), root / "dask", progress=False, report=False,
                  scheduler=cluster.scheduler_address)
    a, b = _items(serial), _items(out)
    assert a.keys() == b.keys()
    for key in a:
        assert b[key] == a[key], key
    assert len(read_jsonl(out / ITEMS)) == len(a)


def test_resume_with_two_workers_computes_only_missing_keys(root, local2):
    out = root / "resume"
    shutil.copytree(local2, out)
    journal = out / ITEMS
    lines = journal.read_text(encoding="utf-8").splitlines(keepends=True)
    kept = lines[:1]
    # a crash mid-write leaves a torn last line; the journal must drop it and go on
    journal.write_text("".join(kept) + lines[1][: len(lines[1]) // 2], encoding="utf-8")
    run(_config(root), out, progress=False, report=False, workers=2)   # main process computes too
    import multiprocessing

    assert not multiprocessing.active_children()                 # every helper reaped
    after = journal.read_text(encoding="utf-8").splitlines(keepends=True)
    assert after[:1] == kept                                     # finished item untouched
    keys = [json.loads(x)["key"] for x in after]
    assert len(keys) == len(set(keys)) == len(lines)             # each missing key computed once
    assert _items(out) == _items(local2)


def test_worker_input_error_reaches_the_caller(root, monkeypatch):
    # features with the wrong number of mel bands are found by the worker, not by prepare():
    # the InputError must cross the process boundary intact (message, type), as in a serial run
    import numpy as np

    bad = root / "bad"
    (bad / "testset").mkdir(parents=True)
    shutil.copy(DEMO_SET / "pier01.wav", bad / "testset" / "pier01.wav")
    np.save(bad / "testset" / "pier01.npy", np.zeros((40, 200), dtype=np.float32))
    (bad / "testset" / "manifest.csv").write_text("id,path,features\npier01,pier01.wav,pier01.npy\n")
    cfg = _config(bad)
    cfg.testset = bad / "testset" / "manifest.csv"
    monkeypatch.setattr(local, "MAIN_COMPUTES", False)      # the error must come from a helper
    with pytest.raises(InputError, match="wrong number of mel bands"):
        run(cfg, bad / "out", progress=False, report=False, workers=2)


def test_dead_worker_is_reported_and_finished_items_are_kept(root, tmp_path, monkeypatch):
    # a vocoder that kills its process on one utterance (as a native crash would)
    (tmp_path / "crashing.py").write_text(textwrap.dedent("""
        import os
        from vocobench.analytic import AnalyticDenoiser

        class Crashing(AnalyticDenoiser):
            def predict_noise(self, x_t, features, t):
                if x_t.shape[-1] < 56000:            # pier03 (2.36 s at 22.05 kHz)
                    os._exit(7)
                return super().predict_noise(x_t, features, t)
    """))
    cfg = _config(root)
    cfg.target, cfg.options, cfg.metrics = "crashing:Crashing", {}, ["stoi"]
    cfg.search_path = [tmp_path]
    out = tmp_path / "out"
    monkeypatch.setattr(local, "MAIN_COMPUTES", False)      # never crash the test process
    monkeypatch.setattr(preflight, "probe_seconds_per_eval", lambda setup: 1e-3)  # nor its probe
    with pytest.raises(WorkerDied, match="exit code 7"):
        run(cfg, out, progress=False, report=False, workers=2)
    done = read_jsonl(out / ITEMS)
    assert all(r["utt_id"] == "pier01" for r in done)            # pier03 never finished
    sys.modules.pop("crashing", None)


def test_chunks_follow_factoring_within_utterances():
    # Hummel, Schonberg & Flynn 1992 (factoring): each chunk is ceil(R / 2P) of the R jobs left,
    # so the last 2P jobs go out one by one; here chunks also stop at utterance boundaries.
    jobs = [Job(f"k{u}-{p}", u, p, 0) for u in (2, 0, 1) for p in range(20)]
    chunks = chunk_jobs(jobs, workers=2)
    flat = [j for c in chunks for j in c]
    assert flat == sorted(jobs, key=lambda j: j.utt)              # utterance-major, stable
    assert all(len({j.utt for j in c}) == 1 for c in chunks)      # one utterance per chunk
    left = len(jobs)
    for c in chunks:
        assert len(c) <= -(-left // 4)                            # ceil(R / (2·2))
        left -= len(c)
    assert [len(c) for c in chunks[-4:]] == [1, 1, 1, 1]          # the last 2P jobs singly
    assert max(len(c) for c in chunk_jobs(jobs, workers=1, max_size=5)) == 5
    assert chunk_jobs([], workers=4) == []


@pytest.mark.parametrize("workers", [0, -2, 1.5, True])
def test_bad_worker_count_is_an_input_error(root, tmp_path, workers):
    with pytest.raises(InputError, match="positive integer"):
        run(_config(root), tmp_path / "out", progress=False, report=False, workers=workers)
    assert not (tmp_path / "out").exists()                       # checked before anything runs


def test_missing_dask_is_an_input_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)   # as if not installed
    with pytest.raises(InputError, match=r"pip install 'vocobench\[dask\]'"):
        dask_backend.run_dask(None, [Job("k", 0, 0, 0)], lambda r: None, "tcp://127.0.0.1:1")


def test_unreachable_scheduler_is_an_input_error(monkeypatch):
    pytest.importorskip("distributed")
    monkeypatch.setattr(dask_backend, "DASK_CONNECT_TIMEOUT_S", 1.0)
    with pytest.raises(InputError, match="cannot reach the Dask scheduler"):
        dask_backend.run_dask(None, [Job("k", 0, 0, 0)], lambda r: None, "tcp://127.0.0.1:9")


CONFIG_TOML = """
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "testset"
[sweep]
steps = [1, 2]
samplers = ["ddim"]
[metrics]
use = ["stoi"]
"""
EXITS_IN_HELPER = """
import multiprocessing, os
from vocobench.analytic import AnalyticDenoiser

class Voc(AnalyticDenoiser):
    def predict_noise(self, x_t, features, t):
        if multiprocessing.parent_process() is not None:      # a spawned helper, not this process
            os._exit(1)
        return super().predict_noise(x_t, features, t)
"""


def test_the_main_guard_hint_only_when_it_applies(tmp_path):
    """An unguarded script with workers > 1: its spawned helpers run it again and die with exit
    code 1, and the hint names the guard. A guarded script whose helper exits with code 1 for
    another reason gets no such hint (Python docs, multiprocessing, "Safe importing of main
    module")."""
    (tmp_path / "testset").mkdir()
    shutil.copy(DEMO_SET / "pier01.wav", tmp_path / "testset" / "pier01.wav")
    (tmp_path / "cfg.toml").write_text(CONFIG_TOML)
    (tmp_path / "exits.py").write_text(EXITS_IN_HELPER)
    body = ("import vocobench as vb\nfrom vocobench.sweep import local\nlocal.MAIN_COMPUTES = False\n"
            "cfg = vb.load_config('cfg.toml')\n{target}"
            "vb.run(cfg, 'out', workers=2, report=False, progress=False)\n")
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    results = {}
    for name, text in (("unguarded", body.format(target="")),
                       ("guarded", "if __name__ == '__main__':\n" + "".join(
                           "    " + ln + "\n" for ln in body.format(
                               target="cfg.target = 'exits:Voc'\n").splitlines()))):
        (tmp_path / f"{name}.py").write_text(text)
        shutil.rmtree(tmp_path / "out", ignore_errors=True)
        p = subprocess.run([sys.executable, f"{name}.py"], cwd=tmp_path, env=env, capture_output=True,
                           text=True, timeout=300)
        assert p.returncode != 0
        results[name] = p.stderr.strip().splitlines()[-1]
    assert "died (exit code 1)" in results["unguarded"] and "__main__" in results["unguarded"]
    assert "died (exit code 1)" in results["guarded"] and "__main__" not in results["guarded"]
    assert "--workers 1" in results["guarded"]
