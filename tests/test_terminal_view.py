"""The terminal view: fits the width, marks the recommended rows, the reference, the Pareto front
and the differences, shows what --columns/--metrics choose, colours only on a terminal.

The run is tests/test_report_fixture.py (hand-built; its decision is worked out by hand in
tests/test_report.py). Sources: the run's own statistics table (the marks must agree with it);
the ECMA-48 standard for terminal escape sequences (SGR colour codes are CSI 30-37/90-97 for
foreground colours); the NO_COLOR convention (no-color.org: when NO_COLOR is set and not empty,
no ANSI colour). Width: a line's length in characters, which equals its terminal columns here
since every character used is single-width in Unicode's East Asian Width tables.
"""
from __future__ import annotations

import io
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import REPO_ROOT
from test_report_fixture import make_run

from vocobench.errors import InputError
from vocobench.report import ReportOptions, render_report
from vocobench.report import terminal as T

MARGINS = {"mcd_db": 0.5, "pesq_wb": 0.1}
COLOUR = re.compile(r"\x1b\[[0-9;]*(3[0-7]|9[0-7]|38;)[0-9;]*m")
DEMO = REPO_ROOT / "scenarios" / "pier-announcements"


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    # 4 utterances: the lowered evidence bars of tests/test_report.py (min_items 4, confidence 0.9)
    bars = {"min_items": 4, "confidence": 0.9}
    run_dir = make_run(tmp_path_factory.mktemp("tv"),
                       decide={"margins": MARGINS, "rtf_budget": 0.2, "resamples": 300,
                               "plots": False, "page": False, **bars})
    res = render_report(run_dir, ReportOptions(margins=MARGINS, rtf_budget=0.2, resamples=300,
                                               plots=False, page=False, **bars), echo=False)
    return run_dir, res


def run_vocobench(*args: str, cwd: Path, timeout: float = 300, env=None):
    """``python -m vocobench ARGS`` in a subprocess with extra environment (COLUMNS)."""
    full = {k: v for k, v in os.environ.items() if k not in ("COLUMNS", "FORCE_COLOR", "NO_COLOR")}
    full.update(PYTHONPATH=str(REPO_ROOT), OMP_NUM_THREADS="1", **(env or {}))
    return subprocess.run([sys.executable, "-m", "vocobench", *args], cwd=str(cwd), env=full,
                          capture_output=True, text=True, timeout=timeout)


def _text(res, width=100, **choice) -> str:
    buf = io.StringIO()
    T.echo_table(res.table, res.stats, res.decision, T.ViewChoice(**choice),
                 out=T.console(file=buf, width=width, color=False))
    return buf.getvalue()


def _row(text: str, label: str) -> str:
    return next(line for line in text.splitlines() if f" {label} " in f" {line} ")


@pytest.mark.parametrize("width", [60, 80, 100, 120, 200])
def test_fits_the_width_and_marks_rows(result, width):
    _, res = result
    text = _text(res, width)
    assert max(len(line) for line in text.splitlines()) <= width
    rec = res.decision.recommended
    # Hand (tests/test_report.py): budget 0.2 → best PESQ within it is linear/ddim/16, which is
    # also the cheapest within the margins.
    assert rec == ["linear/ddim/16"]
    assert _row(text, "linear/ddim/16").lstrip().startswith(T.RECOMMENDED)
    assert _row(text, "linear/ddim/64").lstrip().startswith("ref")
    assert not _row(text, "linear/ddim/8").lstrip().startswith((T.RECOMMENDED, "ref"))
    assert "recommended: linear/ddim/16" in " ".join(text.split())


def test_marks_agree_with_the_statistics(result):
    _, res = result
    text = _text(res, 200)
    t = res.table.set_index("config")
    checks = res.decision.checks.set_index(["config", "column"])["passed"]
    for label in t.index:
        row = _row(text, label)
        cells = row.split("  ")
        fronts = sum(bool(t.loc[label, f"{c}_front"]) for c in res.stats.columns)
        assert row.count(T.FRONT) == fronts, label
        outside = sum(not checks[(label, c)] for c in res.stats.columns) if label != "linear/ddim/64" else 0
        assert row.count(T.OUTSIDE) == outside, (label, cells)
    # 4 utterances: the smallest two-sided Wilcoxon p is 2/2^4 = 0.125 (Wilcoxon 1945), so no
    # difference can be significant at 95 %.
    assert T.BETTER not in text.split("Cells:")[0] and T.WORSE not in text.split("Cells:")[0]


def test_significant_differences_are_marked_by_direction(result):
    # Hand: a Holm p below 1 − 0.95 marks ▲ when the difference points the better way (up for
    # PESQ, down for MCD) and ▼ otherwise; at p = 0.2 nothing is marked.
    _, res = result
    t = res.table.copy()
    i = t.index[t["config"] == "linear/ddim/8"][0]
    t.loc[i, ["mcd_db_p_holm", "pesq_wb_p_holm"]] = 0.01
    t.loc[i, "mcd_db_diff"], t.loc[i, "pesq_wb_diff"] = -0.5, -0.3
    j = t.index[t["config"] == "linear/ddim/32"][0]
    t.loc[j, "pesq_wb_p_holm"], t.loc[j, "pesq_wb_diff"] = 0.2, -0.3
    buf = io.StringIO()
    T.echo_table(t, res.stats, res.decision, T.ViewChoice(metrics=("mcd_db", "pesq_wb")),
                 out=T.console(file=buf, width=200, color=False))
    row8, row32 = _row(buf.getvalue(), "linear/ddim/8"), _row(buf.getvalue(), "linear/ddim/32")
    mcd_cell, pesq_cell = row8.split("]")[1], row8.split("]")[2]
    assert T.BETTER in mcd_cell and T.WORSE not in mcd_cell
    assert T.WORSE in pesq_cell and T.BETTER not in pesq_cell
    assert T.BETTER not in row32 and T.WORSE not in row32


def test_columns_and_metrics_choose_what_is_shown(result):
    _, res = result
    head = lambda text: " ".join(text.split("───")[0].split())   # noqa: E731
    default = head(_text(res, 200))
    assert all(w in default for w in ("configuration", "NFE", "RTF", "mcd_db", "pesq_wb", "failed"))
    only = head(_text(res, 200, metrics=("pesq_wb",)))
    assert "pesq_wb" in only and "mcd_db" not in only and "NFE" in only
    cols = head(_text(res, 200, columns=("rtf_p90", "mcd_db")))
    assert "RTF p90" in cols and "mcd_db" in cols and "NFE" not in cols and "pesq_wb" not in cols
    with pytest.raises(InputError) as e:
        _text(res, 100, columns=("nfe", "bogus"), strict=True)
    assert e.value.field == "--columns" and "bogus" in str(e.value)
    lenient = _text(res, 100, columns=("nfe", "bogus"))
    assert "no such column: bogus" in lenient


def test_narrow_terminal_leaves_metrics_out_and_says_so(result):
    _, res = result
    text = _text(res, 62)
    assert max(len(line) for line in text.splitlines()) <= 62
    assert "left out for width: pesq_wb" in " ".join(text.split())


def test_wrapped_text_keeps_to_the_width(result):
    _, res = result
    buf = io.StringIO()
    T.echo_text(res.recommendation, T.console(file=buf, width=70, color=False))
    lines = buf.getvalue().splitlines()
    assert max(len(line) for line in lines) <= 70
    assert " ".join(buf.getvalue().split()) == " ".join(res.recommendation.split())


@pytest.mark.parametrize("env, coloured", [({}, False), ({"FORCE_COLOR": "1"}, True),
                                           ({"FORCE_COLOR": "1", "NO_COLOR": "1"}, False)])
def test_colour_only_on_a_terminal_and_never_with_no_color(result, env, coloured):
    # Captured output is not a terminal: no colour. FORCE_COLOR makes the console act as a
    # terminal (so colour is really produced there); NO_COLOR then still turns colour off.
    run_dir, _ = result
    r = run_vocobench("show", str(run_dir), cwd=run_dir,
                      env={"COLUMNS": "150", "TERM": "xterm-256color", **env})
    assert r.returncode == 0, r.stderr
    assert bool(COLOUR.search(r.stdout)) == coloured


@pytest.fixture(scope="module")
def small_demo(tmp_path_factory):
    """A scenario like the bundled demo, made small: 4 of its recordings, its 2 schedules × 2
    samplers × 2 step counts, the demo's metrics and [decide] rule with the evidence bars
    lowered for 4 utterances (min_items 4, confidence 0.9: 2^-4 ≤ 0.1)."""
    root = tmp_path_factory.mktemp("demo")
    scenario = root / "scenario"
    (scenario / "testset").mkdir(parents=True)
    for k in (1, 2, 3, 4):
        shutil.copy(DEMO / "testset" / f"pier0{k}.wav", scenario / "testset" / f"pier0{k}.wav")
    config = (DEMO / "config.toml").read_text()
    config = config.replace('path = "testset/manifest.csv"', 'path = "testset"')
    config = config.replace("steps = [1, 3, 10, 50]", "steps = [3, 10]")
    config = config.replace("seeds = [0, 1]", "seeds = [0]")
    config = config.replace("repeats = 3", "repeats = 1").replace("workers = 2", "workers = 1")
    assert "steps = [3, 10]" in config
    config += "min_items = 4\nconfidence = 0.9\n"            # [decide] is the last table
    (scenario / "config.toml").write_text(config)
    out = root / "run"
    r = run_vocobench("demo", "--scenario", str(scenario), "--out", str(out), "--columns",
                      "nfe,rtf,stoi,logmel_l1,mcd,pesq_wb", cwd=root, timeout=600,
                      env={"COLUMNS": "100"})
    return out, r


def _widest(text: str) -> int:
    return max((len(line) for line in text.splitlines()), default=0)


def test_demo_output_fits_100_columns(small_demo):
    out, r = small_demo
    assert r.returncode == 0, r.stderr
    assert _widest(r.stdout) <= 100 and _widest(r.stderr) <= 100
    assert re.search(rf"^{T.RECOMMENDED}\s+\S+/\S+/\d+", r.stdout, flags=re.M), r.stdout
    assert "ref reference: " in r.stdout
    head = " ".join(r.stdout.split("───")[0].split())
    assert all(w in head for w in ("NFE", "RTF", "stoi", "logmel_l1")) and "RTF p90" not in head


def test_readme_demo_output_fits_100_columns():
    # The README's demo output block (between its demo-output markers) is at most 100 wide.
    text = (REPO_ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("<!-- demo-output:begin -->")[1].split("<!-- demo-output:end -->")[0]
    assert block.strip().startswith("```") and T.RECOMMENDED in block
    assert _widest(block) <= 100


def test_report_output_fits_120_columns_and_show_agrees(small_demo, tmp_path):
    out, _ = small_demo
    r = run_vocobench("report", str(out), "--no-plots", "--no-page", cwd=tmp_path,
                      env={"COLUMNS": "120"})
    assert r.returncode == 0, r.stderr
    assert _widest(r.stdout) <= 120
    rec = re.findall(rf"^{T.RECOMMENDED}\s+(\S+/\S+/\d+)", r.stdout, flags=re.M)
    assert rec
    s = run_vocobench("show", str(out), "--format", "json", cwd=tmp_path)
    rows = json.loads(s.stdout)["rows"]
    assert sorted(x["config"] for x in rows if x["recommended"]) == sorted(rec)
    narrow = run_vocobench("show", str(out), "--metrics", "stoi", cwd=tmp_path, env={"COLUMNS": "60"})
    assert narrow.returncode == 0 and _widest(narrow.stdout) <= 60
    assert "logmel_l1" not in narrow.stdout.split("───")[0]
