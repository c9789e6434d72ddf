"""Reports and the terminal say what they rest on; a failing run exits non-zero; timing resumes
per repeat.

Counts are worked out by hand from tests/test_report_fixture.py (6 configurations × 4
utterances × 2 seeds = 48 items, one failed). Exit codes are the CLI's documented ones (0 ok,
1 a check failed, 2 unusable input). Our own contract, no outside source.
"""
from __future__ import annotations

import json
import sys
import tomllib
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from conftest import COSINE_STOI_ONE_TIMING, REPO_ROOT, small_config  # noqa: E402
from test_report_fixture import make_run  # noqa: E402
from vocobench.cli import main  # noqa: E402
from vocobench.config import parse_config  # noqa: E402
from vocobench.report import ReportOptions, render_report  # noqa: E402
from vocobench.store import read_jsonl  # noqa: E402
from vocobench.sweep import run, timing_phase  # noqa: E402

FAST = dict(resamples=200, plots=False, page=False)


def _rewrite(run_dir: Path, keep=lambda r: True, change=lambda r: r, extra=()) -> None:
    p = run_dir / "items.jsonl"
    recs = [change(r) for r in read_jsonl(p) if keep(r)] + list(extra)
    p.write_text("".join(json.dumps(r) + "\n" for r in recs))


def _manifest(run_dir: Path, **changes) -> None:
    p = run_dir / "manifest.json"
    m = json.loads(p.read_text())
    for k, v in changes.items():
        m[k] = v(m) if callable(v) else v
    p.write_text(json.dumps(m))


def test_a_partial_grid_says_so_and_names_the_planned_reference(tmp_path, capsys):
    run_dir = make_run(tmp_path)
    _rewrite(run_dir, keep=lambda r: r["steps"] != 64)        # both 64-step configurations lost
    res = render_report(run_dir, ReportOptions(**FAST), echo=True)
    out = capsys.readouterr().out
    # Hand: 48 − 2 configurations × 8 items = 32 items done of 48; the reference falls back to
    # linear/ddim/32, and the grid's own reference linear/ddim/64 has 0 of 8 items.
    # the terminal wraps long lines to its width: compare with white space folded
    for text in (" ".join(t.split()) for t in (out, (run_dir / "summary.md").read_text(),
                                                res.recommendation)):
        assert "The grid is incomplete (32 of 48 items)" in text
        assert "reference linear/ddim/32 is the configuration with most steps among those" in text
        assert "linear/ddim/64 has 0 of 8 items" in text
    flat = " ".join(out.split())
    assert "Items: 32 of 48 planned done (1 failed); utterances used: 4 of 4" in flat
    assert "Incomplete: 16 planned items have no result yet" in flat
    rec = (run_dir / "report" / "recommendation.md").read_text()
    assert "The grid is incomplete" in rec


def test_one_utterance_of_four_and_a_short_reference(tmp_path):
    run_dir = make_run(tmp_path)
    _rewrite(run_dir, keep=lambda r: r["utt_id"] == "u1")
    res = render_report(run_dir, ReportOptions(**FAST), echo=False)
    summary = (run_dir / "summary.md").read_text()
    # Hand: u1 only → 12 items of 48, 1 of 4 utterances; the reference has 2 of 8 items.
    assert "Items: 12 of 48 planned done (0 failed); utterances used: 1 of 4" in summary
    assert "the reference linear/ddim/64 has 2 of 8 items" in res.recommendation


def test_missing_items_elsewhere_still_say_incomplete(tmp_path):
    run_dir = make_run(tmp_path)
    _rewrite(run_dir, keep=lambda r: not (r["steps"] == 8 and r["utt_id"] in ("u3", "u4")))
    res = render_report(run_dir, ReportOptions(**FAST), echo=False)
    # Hand: linear/ddim/8 loses 2 utterances × 2 seeds → 44 of 48; every utterance still has results
    assert res.recommendation.startswith("The grid is incomplete (44 of 48 items, 4 of 4 utterances")
    assert "compared on fewer utterances than planned" in res.recommendation


def test_complete_run_has_no_incomplete_note(tmp_path):
    run_dir = make_run(tmp_path)
    res = render_report(run_dir, ReportOptions(**FAST), echo=False)
    assert "incomplete" not in res.recommendation.lower()
    assert "Items: 48 of 48 planned done (1 failed)" in (run_dir / "summary.md").read_text()


def test_failures_by_reason_ignored_rows_resampled_inputs_and_timing(tmp_path):
    run_dir = make_run(tmp_path)
    keys = [r["key"] for r in read_jsonl(run_dir / "items.jsonl")]
    nan = {"status": "failed", "metrics": {}}
    foreign = [dict(r, key=f"other{i}") for i, r in enumerate(read_jsonl(run_dir / "items.jsonl")[:3])]
    _rewrite(run_dir, change=lambda r: {**r, **nan, "failure": "output has 3 non-finite samples (NaN/Inf)"}
             if r["key"] == keys[0] else {**r, **nan, "failure": "output has 7 non-finite samples (NaN/Inf)"}
             if r["key"] == keys[1] else r, extra=foreign)
    _manifest(run_dir, job_keys=keys, vocoder=lambda m: {**m["vocoder"], "sample_rate": 22050})
    by_item = {(r["schedule"], r["sampler"], r["steps"], r["utt_id"]): r["key"]
               for r in read_jsonl(run_dir / "items.jsonl") if r["seed"] == 0 and r["key"] in keys}
    timing = [dict(t, key=by_item[(t["schedule"], t["sampler"], t["steps"], t["utt_id"])])
              for t in read_jsonl(run_dir / "timing.jsonl")]         # timing keyed as a sweep does
    (run_dir / "timing.jsonl").write_text("".join(json.dumps(t) + "\n" for t in timing))
    render_report(run_dir, ReportOptions(**FAST), echo=False)
    s = (run_dir / "summary.md").read_text()
    assert ("Failed ×2: output has # non-finite samples (NaN/Inf) (first: output has 3 non-finite "
            "samples (NaN/Inf); in linear/ddim/8)") in s
    assert "Failed ×1: vocoder raised RuntimeError (first: vocoder raised RuntimeError: boom; in linear/ddpm/4)" in s
    assert "Ignored: 3 items and 0 timing records of another grid" in s
    assert "Resampled: 4 utterances 16000 Hz → 22050 Hz" in s
    # Hand (fixture): repeats 0..2 for every timed configuration and utterance
    assert "Timing: 3 repeats configured, 3 measured per configuration and utterance" in s


TS = REPO_ROOT / "scenarios" / "pier-announcements" / "testset"
RAISING = '''
import numpy as np
from vocobench.analytic import DEMO_FRONTEND

class Voc:
    sample_rate = 22050
    frontend = DEMO_FRONTEND
    def __call__(self, features, schedule, rng):
        if len(schedule) in FAILING:
            raise RuntimeError("boom")
        return 0.01 * rng.standard_normal(features.shape[-1] * 256)
'''


def _failing_config(tmp: Path, failing: tuple[int, ...], extra: str = "") -> Path:
    (tmp / "failing.py").write_text(f"FAILING = {failing!r}\n" + RAISING)
    return small_config(tmp, 'target = "failing:Voc"', "steps = [1, 2]",
                        COSINE_STOI_ONE_TIMING + extra + "\n", utterances=("pier01", "pier03"))


@pytest.fixture
def forget_failing():
    yield
    sys.modules.pop("failing", None)


def test_an_all_failed_run_exits_1_naming_the_reason(tmp_path, capsys, forget_failing):
    cfg = _failing_config(tmp_path, (1, 2))
    rc = main(["run", str(cfg), "--out", str(tmp_path / "run")])
    err = capsys.readouterr().err
    assert rc == 1
    assert ("vocobench: run failed: every item failed (4 of 4); most common reason: vocoder "
            "raised RuntimeError (4 items), first message: vocoder raised RuntimeError: boom") in err
    assert "Traceback" not in err
    summary = (tmp_path / "run" / "summary.md").read_text()          # the report says it too
    assert "Items: 4 of 4 planned done (4 failed); utterances used: 0 of 2" in summary
    assert "Failed ×4: vocoder raised RuntimeError (first: vocoder raised RuntimeError: boom" in summary
    assert len(read_jsonl(tmp_path / "run" / "items.jsonl")) == 4        # results kept


@pytest.mark.parametrize("share,rc", [(None, 0), (0.25, 1)])
def test_failed_share_above_the_configured_limit_exits_1(tmp_path, capsys, forget_failing, share, rc):
    extra = "" if share is None else f"[run]\nmax_failed_share = {share}\n"
    cfg = _failing_config(tmp_path, (1,), extra)
    got = main(["run", str(cfg), "--out", str(tmp_path / "run"), "-q", "--no-report"])
    err = capsys.readouterr().err
    assert got == rc, err
    if rc:      # Hand: 2 of 4 items fail (steps 1) → 50 % > 25 %
        assert "2 of 4 items failed (50 %, more than run.max_failed_share = 0.25)" in err


def _timing_config(tmp: Path) -> Path:
    return small_config(tmp, 'target = "vocobench.analytic:AnalyticDenoiser"',
                        'steps = [1, 2]\nsamplers = ["ddim"]', """[metrics]
use = ["stoi"]
[timing]
warmup = 1
repeats = 4
utterances = 1
reuse_sweep = false
rel_width = 0
[output]
save_audio = "none"
[decide]
resamples = 200
plots = false
page = false
""")


class Killed(BaseException):
    """Stands for SIGKILL inside the timing block."""


def test_timing_resumes_the_missing_repeats(tmp_path, monkeypatch):
    cfg_path = _timing_config(tmp_path)
    cfg = parse_config(tomllib.loads(cfg_path.read_text()), tmp_path, str(cfg_path))
    out = tmp_path / "run"
    real = timing_phase.time_call

    def dies_after_two_repeats(fn, **kw):
        keep = kw["on_time"]

        def on_time(i, s):
            keep(i, s)
            if i == 1:
                raise Killed
        return real(fn, **{**kw, "on_time": on_time})

    with monkeypatch.context() as m:
        m.setattr(timing_phase, "time_call", dies_after_two_repeats)
        with pytest.raises(Killed):
            run(cfg, out, progress=False)
    recs = read_jsonl(out / "timing.jsonl")
    assert [r["repeat"] for r in recs] == [-1, 0, 1]                 # kept the moment measured
    render_report(out, echo=False)
    assert "Timing: 4 repeats configured, 2 measured per configuration and utterance; 1 blocks short" \
        in (out / "summary.md").read_text()
    run(cfg, out, progress=False)
    recs = read_jsonl(out / "timing.jsonl")
    first = recs[0]["key"]
    assert [r["repeat"] for r in recs if r["key"] == first] == [-1, 0, 1, 2, 3]   # only 2 and 3 added
    assert sorted(r["repeat"] for r in recs if r["key"] != first) == [-1, 0, 1, 2, 3]
    assert "Timing: 4 repeats configured, 4 measured per configuration and utterance" \
        in (out / "summary.md").read_text()
