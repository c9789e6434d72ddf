"""Files a run writes: modes that honour the umask, and CSV cells a spreadsheet cannot run.

* Modes: POSIX open(2)/mkdir(2) — a new file gets the requested mode (0666 for files, 0777 for
  folders) less the process umask; a temporary file's 0600 must not leak into results.
* CSV: OWASP, "CSV Injection" — cells starting with ``=``, ``+``, ``-``, ``@``, tab (0x09) or
  carriage return (0x0D) are read as formulas by spreadsheet software; prefix them with a single
  quote. Numbers stay numbers.
"""
from __future__ import annotations

import csv
import json
import os
import shutil
import stat
import sys
import tomllib
from pathlib import Path

import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from conftest import REPO_ROOT  # noqa: E402
from test_report_fixture import make_run  # noqa: E402
from vocobench.config import parse_config  # noqa: E402
from vocobench.report import ReportOptions, render_report  # noqa: E402
from vocobench.store import write_tables  # noqa: E402
from vocobench.sweep import run  # noqa: E402
from vocobench.textfmt import csv_cell, csv_text  # noqa: E402

TS = REPO_ROOT / "scenarios" / "pier-announcements" / "testset"


@pytest.fixture
def umask():
    old = os.umask(0o022)
    yield lambda m: os.umask(m)
    os.umask(old)


def _modes(run_dir: Path) -> dict[str, int]:
    out = {}
    for p in [run_dir, *run_dir.rglob("*")]:
        if p.is_symlink():
            continue
        out[str(p.relative_to(run_dir)) or "."] = stat.S_IMODE(p.stat().st_mode)
    return out


@pytest.mark.parametrize("mask", [0o022, 0o027, 0o002])
def test_files_and_folders_honour_the_umask(tmp_path, umask, mask):
    (tmp_path / "ts").mkdir()
    shutil.copy(TS / "pier03.wav", tmp_path / "ts" / "pier03.wav")
    cfg = tmp_path / "cfg.toml"
    cfg.write_text("""
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "ts"
[sweep]
steps = [1]
samplers = ["ddim"]
[metrics]
use = ["stoi"]
[timing]
repeats = 1
[decide]
resamples = 200
""")
    umask(mask)
    out = run(parse_config(tomllib.loads(cfg.read_text()), tmp_path, str(cfg)), tmp_path / "run",
              progress=False)
    modes = _modes(out)
    names = {Path(k).name for k in modes}
    assert {"manifest.json", "items.jsonl", "items.csv", "timing.csv", "summary.md",
            "listening.html", "table.csv", "report.json", ".lock"} <= names
    assert any(k.startswith("audio/") for k in modes) and any(k.endswith(".png") for k in modes)
    for name, mode in modes.items():
        is_dir = (out / name).is_dir()
        want = (0o777 if is_dir else 0o666) & ~mask
        assert mode == want, (name, oct(mode), oct(want))


def test_csv_cells_that_start_a_formula_are_quoted_and_numbers_stay_numbers():
    # OWASP's list of formula-starting characters, one cell each; plain numbers pass.
    for text in ("=1+2", "+1+2", "-2+3+cmd|' /C calc'!A0", "@SUM(A1)", "\tx", "\rx"):
        assert csv_cell(text) == "'" + text
    for value in ("-0.5", "+3", "-1e-3", "abc", "a=b", -0.5, 3, None):
        assert csv_cell(value) == value
    frame = pd.DataFrame({"id": ["=cmd", "ok"], "score": [-0.5, 2.0], "label": ["-0.5", "@x"]})
    back = list(csv.reader(csv_text(frame).splitlines()))
    assert back == [["id", "score", "label"], ["'=cmd", "-0.5", "-0.5"], ["ok", "2.0", "'@x"]]


def test_items_and_report_csv_files_are_neutralised(tmp_path):
    ids = ("=HYPERLINK(\"http://x\")", "+u2", "@u3", "-u4")
    run_dir = make_run(tmp_path, utt_ids=ids, schedules={"cosine": "=cos"})
    p = run_dir / "items.jsonl"
    recs = [json.loads(x) for x in p.read_text().splitlines()]
    recs[0]["metrics"]["mcd_db"] = -0.5                        # a negative number stays a number
    p.write_text("".join(json.dumps(r) + "\n" for r in recs))
    write_tables(run_dir)
    rows = list(csv.DictReader((run_dir / "items.csv").open(newline="")))
    assert {r["utt_id"] for r in rows} == {"'" + u for u in ids}
    assert rows[0]["mcd_db"] == "-0.5" and float(pd.read_csv(run_dir / "items.csv")["mcd_db"][0]) == -0.5
    render_report(run_dir, ReportOptions(resamples=200, plots=False, page=False), echo=False)
    table = list(csv.DictReader((run_dir / "report" / "table.csv").open(newline="")))
    assert "'=cos/ddim/64" in {r["config"] for r in table}
    worst = (run_dir / "report" / "worst_utterances.csv").read_text()
    assert "=HYPERLINK" in worst and ",=HYPERLINK" not in worst and "\n=HYPERLINK" not in worst


def test_saved_flac_is_the_file_soundfile_writes_and_clips_only_the_copy(tmp_path):
    # encoded in memory, then written at once: byte for byte what libsndfile writes to a file
    import numpy as np
    import soundfile as sf

    from vocobench.outputs import save_audio

    y = (0.4 * np.random.default_rng(3).standard_normal(30001)).astype(np.float32)
    y[::101] = 1.7                                         # beyond ±1: clipped in the copy
    keep = y.copy()
    save_audio(tmp_path / "audio" / "k.flac", y, 22050)
    sf.write(str(tmp_path / "direct.flac"), np.clip(y, -1.0, 1.0), 22050, format="FLAC",
             subtype="PCM_24")
    assert (tmp_path / "audio" / "k.flac").read_bytes() == (tmp_path / "direct.flac").read_bytes()
    assert np.array_equal(y, keep) and not (tmp_path / "audio" / "k.flac.part").exists()
