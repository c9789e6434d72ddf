"""Before a sweep: ``--dry-run`` prints the plan and the estimated cost and writes nothing; a grid
estimated at more than an hour says so before it starts.

The estimate is steps × seconds of audio × the measured time per step; the vocoder below sleeps
2 ms per step, and a sleep lasts at least as long as asked (POSIX nanosleep), so its estimate
has a known lower bound. Our own contract otherwise.
"""
from __future__ import annotations

import shutil
from pathlib import Path

from conftest import REPO_ROOT
from vocobench.cli import main
from vocobench.sweep import orchestrate

TS = REPO_ROOT / "scenarios" / "pier-announcements" / "testset"
SLOW = '''
import time
import numpy as np
from vocobench.analytic import DEMO_FRONTEND

class Voc:
    sample_rate = 22050
    frontend = DEMO_FRONTEND
    def __call__(self, features, schedule, rng):
        time.sleep(0.002 * len(schedule))
        return 0.01 * rng.standard_normal(features.shape[-1] * 256)
'''


def _config(tmp: Path, target: str, steps: str, extra: str = "") -> Path:
    (tmp / "slowvoc.py").write_text(SLOW)
    (tmp / "ts").mkdir(exist_ok=True)
    for u in ("pier01", "pier03"):
        shutil.copy(TS / f"{u}.wav", tmp / "ts" / f"{u}.wav")
    cfg = tmp / "cfg.toml"
    # a denoiser is offered every built-in sampler: sweep two, so the counts below are by hand
    samplers = 'samplers = ["ddpm", "ddim"]\n' if "analytic" in target else ""
    cfg.write_text(f"""
[vocoder]
target = "{target}"
[testset]
path = "ts"
[sweep]
steps = {steps}
{samplers}seeds = [0, 1]
[[sweep.schedule]]
name = "cos"
kind = "cosine"
[metrics]
use = ["stoi"]
[output]
save_audio = "none"
{extra}
""")
    return cfg


def _tree(folder: Path) -> dict[str, tuple[int, int]]:
    return {str(p): (p.stat().st_size, p.stat().st_mtime_ns) for p in folder.rglob("*")}


def test_dry_run_prints_the_plan_and_writes_nothing(tmp_path, capsys):
    cfg = _config(tmp_path, "vocobench.analytic:AnalyticDenoiser", "[1, 2]",
                  '[timing]\nrepeats = 1\nutterances = 1\n')
    out = tmp_path / "run"
    assert main(["run", str(cfg), "--out", str(out), "--dry-run"]) == 0
    text = capsys.readouterr().out
    assert "dry run: nothing is computed or written" in text
    # Hand: 2 samplers (ddpm, ddim) × 2 steps = 4 configurations; × 2 utterances × 2 seeds = 16
    assert "16 items (4 configurations × 2 utterances × 2 seeds): 0 reused, 16 to compute" in text
    for label in ("cos/ddpm/1", "cos/ddim/2"):
        assert label in text
    assert "estimated cost:" in text and "contract-check probe" in text
    assert not out.exists()
    assert main(["run", str(cfg), "--out", str(out), "-q", "--no-report"]) == 0
    before = _tree(out)
    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--dry-run", "--retry-failed"]) == 0
    text = capsys.readouterr().out
    assert "16 reused, 0 to compute" in text and "estimated cost: nothing to compute" in text
    assert _tree(out) == before


def test_a_grid_over_an_hour_says_so_before_starting(tmp_path, capsys, monkeypatch):
    # Lower bound by hand: the probe (3 steps, 0.5 s of audio) sleeps ≥ 6 ms → ≥ 4 ms per step
    # per second of audio; 100000 steps × (2.67 s + 2.36 s) × 2 seeds ≈ 1.0e6 step-seconds →
    # ≥ 4000 s for the sweep alone.
    cfg = _config(tmp_path, "slowvoc:Voc", "[100000]")
    out = tmp_path / "run"
    assert main(["run", str(cfg), "--out", str(out), "--dry-run"]) == 0
    plan = capsys.readouterr().out
    assert "estimated cost: " in plan and " h " in plan.split("estimated cost:")[1]

    def interrupted(*a, **kw):                 # the user reads the warning and presses Ctrl-C
        raise KeyboardInterrupt
    monkeypatch.setattr(orchestrate, "run_jobs", interrupted)
    assert main(["run", str(cfg), "--out", str(out)]) == 130
    err = capsys.readouterr().err
    warn = [ln for ln in err.splitlines() if ln.startswith("vocobench: warning:")]
    assert len(warn) == 1 and "over an hour" in warn[0] and "--dry-run" in warn[0]
    assert err.index("vocobench: warning:") < err.index("interrupted")


def test_a_resumed_grid_is_estimated_from_its_own_items(tmp_path, capsys):
    cfg = _config(tmp_path, "vocobench.analytic:AnalyticDenoiser", "[1, 2]",
                  '[timing]\nrepeats = 1\nutterances = 1\n')
    out = tmp_path / "run"
    assert main(["run", str(cfg), "--out", str(out), "-q", "--no-report"]) == 0
    cfg.write_text(cfg.read_text().replace("steps = [1, 2]", "steps = [1, 2, 3]"))
    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--dry-run"]) == 0
    text = capsys.readouterr().out
    assert "16 reused, 8 to compute" in text and "measured on finished items of this run" in text


def test_probe_features_are_the_front_end_of_the_probe_with_one_thread_and_a_fresh_copy():
    import numpy as np

    from vocobench.analytic import DEMO_FRONTEND
    from vocobench.check import probe_signal
    from vocobench.sweep.preflight import probe_features
    from vocobench.timing import thread_limit

    with thread_limit(1):
        expected = DEMO_FRONTEND(probe_signal(DEMO_FRONTEND.sample_rate))
    first = probe_features(DEMO_FRONTEND)
    assert np.array_equal(first, expected)
    first[:] = 0.0                                          # a caller's change stays its own
    assert np.array_equal(probe_features(DEMO_FRONTEND), expected)
