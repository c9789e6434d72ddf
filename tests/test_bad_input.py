"""Bad input → one line naming file, field and value; exit code 2; no traceback; nothing written.

The expected behaviour is our own contract (issue "nothing lost"); the audio facts used (WAV
structure, float WAV can hold NaN) are common practice, no source.
"""
from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from vocobench.cli import main

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"

BASE = """
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "{testset}"
[sweep]
steps = [1, 2]
samplers = ["ddim"]
seeds = [0]
[[sweep.schedule]]
name = "uniform"
kind = "stride"
[metrics]
use = ["stoi"]
"""


def _write_testset(folder: Path) -> None:
    folder.mkdir()
    shutil.copy(DEMO / "pier01.wav", folder / "a.wav")
    shutil.copy(DEMO / "pier02.wav", folder / "b.wav")


def _csv(folder: Path, rows: list[str]) -> str:
    (folder / "m.csv").write_text("\n".join(["id,path"] + rows) + "\n")
    return "ts/m.csv"


def _audio(folder: Path, name: str, y: np.ndarray, sr: int = 22050, subtype: str = "PCM_16") -> None:
    sf.write(str(folder / name), y, sr, subtype=subtype)


SR = 22050
TONE = (0.3 * np.sin(2 * np.pi * 200 * np.arange(SR) / SR)).astype(np.float32)


# (case id, setup(tmp, ts) -> config text, substrings the one-line message must contain)
def cases():
    def with_files(fn):
        def make(tmp: Path, ts: Path) -> str:
            return BASE.format(testset=fn(ts) or "ts")
        return make

    yield ("malformed TOML", lambda tmp, ts: "[vocoder\ntarget = 1", ["malformed TOML"])
    yield ("unknown section", lambda tmp, ts: BASE.format(testset="ts") + "\n[sweeps]\n",
           ["sweeps", "unknown section"])
    yield ("unknown key", lambda tmp, ts: BASE.format(testset="ts").replace("seeds = [0]", "seed = [0]"),
           ["sweep.seed", "unknown key"])
    yield ("missing target", lambda tmp, ts: BASE.format(testset="ts").replace(
        'target = "vocobench.analytic:AnalyticDenoiser"', ""), ["vocoder.target", "missing"])
    yield ("target without colon", lambda tmp, ts: BASE.format(testset="ts").replace(
        "vocobench.analytic:AnalyticDenoiser", "vocobench.analytic.AnalyticDenoiser"),
        ["vocoder.target", "package.module:object"])
    yield ("module does not import", lambda tmp, ts: BASE.format(testset="ts").replace(
        "vocobench.analytic:", "no_such_pkg_xyz.mod:"), ["cannot import", "ModuleNotFoundError", "no_such_pkg_xyz"])
    yield ("attribute missing", lambda tmp, ts: BASE.format(testset="ts").replace(
        "AnalyticDenoiser", "NoSuchThing"), ["NoSuchThing", "no attribute"])
    yield ("option not accepted", lambda tmp, ts: BASE.format(testset="ts").replace(
        "[testset]", 'options = { wings = 2 }\n[testset]'), ["vocoder.options", "wings"])
    yield ("steps zero", lambda tmp, ts: BASE.format(testset="ts").replace("steps = [1, 2]", "steps = [0, 2]"),
           ["sweep.steps", "positive", "0"])
    yield ("steps not integers", lambda tmp, ts: BASE.format(testset="ts").replace("steps = [1, 2]", 'steps = ["a"]'),
           ["sweep.steps", "'a'"])
    yield ("negative seed", lambda tmp, ts: BASE.format(testset="ts").replace("seeds = [0]", "seeds = [-1]"),
           ["sweep.seeds", "-1"])
    yield ("unknown sampler", lambda tmp, ts: BASE.format(testset="ts").replace('["ddim"]', '["euler"]'),
           ["sweep.samplers", "euler", "ddim", "ddpm"])
    yield ("unknown schedule kind", lambda tmp, ts: BASE.format(testset="ts").replace('kind = "stride"', 'kind = "spiral"'),
           ["sweep.schedule.kind", "spiral", "cosine"])
    yield ("beta above one", lambda tmp, ts: BASE.format(testset="ts").replace(
        'kind = "stride"', 'kind = "explicit"\nbetas = [0.1, 1.5]'), ["(0, 1)", "1.5"])
    yield ("beta not finite", lambda tmp, ts: BASE.format(testset="ts").replace(
        'kind = "stride"', 'kind = "explicit"\nbetas = [0.1, nan]'), ["finite", "betas"])
    yield ("beta list empty", lambda tmp, ts: BASE.format(testset="ts").replace(
        'kind = "stride"', 'kind = "explicit"\nbetas = []'), ["betas", "non-empty"])
    yield ("stride too long", lambda tmp, ts: BASE.format(testset="ts").replace("steps = [1, 2]", "steps = [1, 5000]"),
           ["5000", "steps"])
    yield ("unknown metric", lambda tmp, ts: BASE.format(testset="ts").replace('use = ["stoi"]', 'use = ["moss"]'),
           ["moss", "valid", "pesq_wb", "stoi"])
    yield ("bad save_audio", lambda tmp, ts: BASE.format(testset="ts") + '\n[output]\nsave_audio = "some"\n',
           ["output.save_audio", "some"])
    yield ("repeats zero", lambda tmp, ts: BASE.format(testset="ts") + "\n[timing]\nrepeats = 0\n",
           ["timing.repeats", "0"])
    yield ("test set missing", lambda tmp, ts: BASE.format(testset="nowhere"), ["nowhere", "not found"])

    def empty_folder(ts: Path):
        e = ts.parent / "empty"
        e.mkdir()
        return "empty"
    yield ("empty folder", with_files(empty_folder), ["empty", "no .wav/.flac files"])

    def corrupt(ts: Path):
        (ts / "c.wav").write_bytes(b"RIFF\x00\x00\x00\x00WAVEjunkjunkjunk")
    yield ("corrupt audio", with_files(corrupt), ["c.wav", "unreadable or corrupt"])

    def empty(ts: Path):
        _audio(ts, "e.wav", np.zeros(0, dtype=np.float32))
    yield ("empty audio", with_files(empty), ["e.wav", "empty audio"])

    def short(ts: Path):
        _audio(ts, "s.wav", TONE[:1000])
    yield ("too short", with_files(short), ["s.wav", "too short", "duration_s"])

    def silent(ts: Path):
        _audio(ts, "q.wav", np.zeros(SR, dtype=np.float32))
    yield ("silent reference", with_files(silent), ["q.wav", "silent"])

    def nan(ts: Path):
        y = TONE.copy()
        y[100] = np.nan
        _audio(ts, "n.wav", y, subtype="FLOAT")
    yield ("non-finite samples", with_files(nan), ["n.wav", "NaN"])

    def low_rate(ts: Path):
        _audio(ts, "r.wav", TONE[:4000], sr=4000)
    yield ("unusual sample rate", with_files(low_rate), ["r.wav", "sample_rate", "4000"])

    def dup(ts: Path):
        return _csv(ts, ["x,a.wav", "x,b.wav"])
    yield ("duplicate ids", with_files(dup), ["m.csv", "duplicate", "'x'"])

    def escape(ts: Path):
        shutil.copy(ts / "a.wav", ts.parent / "outside.wav")
        return _csv(ts, ["x,../outside.wav"])
    yield ("path escapes test set", with_files(escape), ["m.csv", "escapes", "../outside.wav"])

    def nocol(ts: Path):
        (ts / "m.csv").write_text("name,file\nx,a.wav\n")
        return "ts/m.csv"
    yield ("manifest lacks column", with_files(nocol), ["m.csv", "'id'"])

    def missing_audio(ts: Path):
        return _csv(ts, ["x,gone.wav"])
    yield ("manifest names missing file", with_files(missing_audio), ["gone.wav", "not found"])


CASES = list(cases())


@pytest.mark.parametrize("name,make,expect", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_one_clear_line(tmp_path, capsys, name, make, expect):
    ts = tmp_path / "ts"
    _write_testset(ts)
    cfg = tmp_path / "cfg.toml"
    cfg.write_text(make(tmp_path, ts))
    out = tmp_path / "out"
    rc = main(["run", str(cfg), "--out", str(out), "-q", "--no-report"])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if not ln.startswith("vocobench: warning")]
    assert len(lines) == 1 and lines[0].startswith("vocobench: error:"), err
    for s in expect:
        assert s in lines[0], (s, lines[0])
    assert not out.exists(), "nothing may be written for bad input"
    print(lines[0])


def test_at_least_25_cases():
    assert len(CASES) >= 25


def test_no_traceback_at_process_level(tmp_path):
    cfg = tmp_path / "cfg.toml"
    cfg.write_text("[vocoder\n")
    p = subprocess.run([sys.executable, "-m", "vocobench", "run", str(cfg)], capture_output=True, text=True)
    assert p.returncode == 2
    assert "Traceback" not in p.stderr and str(cfg) in p.stderr


def test_multichannel_is_mixed_down_with_warning(tmp_path):
    from vocobench.testset import load_audio, load_testset

    st = np.stack([TONE, 0.5 * TONE], axis=1)
    sf.write(str(tmp_path / "st.wav"), st, SR)
    with pytest.warns(UserWarning, match="mixed down"):
        ts = load_testset(tmp_path)
    y = load_audio(ts.utterances[0], SR)
    # mean of the two channels (common practice, no source); 16-bit quantisation tolerance
    assert np.allclose(y, 0.75 * TONE, atol=2e-4)
