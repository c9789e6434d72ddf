"""Bad input → one line naming file, field and value; exit code 2; no traceback; nothing written.

The expected behaviour is our own contract (issue "nothing lost"); the audio facts used (WAV
structure, float WAV can hold NaN) are common practice, no source.
"""
from __future__ import annotations

import os
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

    def raising_ctor(tmp: Path, ts: Path) -> str:
        (tmp / "ctor_raises.py").write_text(
            "class Voc:\n    def __init__(self):\n        raise RuntimeError('no GPU found\\nat all')\n")
        return BASE.format(testset="ts").replace("vocobench.analytic:AnalyticDenoiser", "ctor_raises:Voc")
    yield ("vocoder constructor raises", raising_ctor,
           ["vocoder.target", "constructing the target raised RuntimeError: no GPU found / at all",
            "ctor_raises:Voc"])
    yield ("sampler option typo", lambda tmp, ts: BASE.format(testset="ts")
           + "\n[sampler_options.ddim]\netaa = 0.5\n", ["sampler_options.ddim.etaa", "unknown option", "eta"])
    yield ("sampler option type", lambda tmp, ts: BASE.format(testset="ts")
           + '\n[sampler_options.ddim]\neta = "high"\n', ["sampler_options.ddim.eta", "'high'"])
    yield ("DDIM eta negative", lambda tmp, ts: BASE.format(testset="ts")
           + "\n[sampler_options.ddim]\neta = -3\n", ["sampler_options.ddim.eta", "≥ 0", "-3"])
    yield ("sampler options for a vocoder without samplers", lambda tmp, ts: BASE.format(testset="ts")
           .replace("vocobench.analytic:AnalyticDenoiser", "external_vocoder.faulty:CorrectVocoder")
           .replace('samplers = ["ddim"]\n', "").replace('kind = "stride"', 'kind = "cosine"')
           + "\n[sampler_options.native]\nmix = 1\n", ["sampler_options.native", "declares no samplers"])
    yield ("betas as strings", lambda tmp, ts: BASE.format(testset="ts").replace(
        'kind = "stride"', 'kind = "explicit"\nbetas = ["0.1"]'), ["sweep.schedule.betas", "'0.1'"])
    yield ("integer schedule name", lambda tmp, ts: BASE.format(testset="ts").replace(
        'name = "uniform"', "name = 5"), ["sweep.schedule.name", "non-empty string", "5"])
    yield ("cosine s negative", lambda tmp, ts: BASE.format(testset="ts").replace(
        'kind = "stride"', 'kind = "cosine"\ns = -5'), ["sweep.schedule.s", "> 0", "-5"])
    yield ("failed share above one", lambda tmp, ts: BASE.format(testset="ts")
           + "\n[run]\nmax_failed_share = 2\n", ["run.max_failed_share", "[0, 1]", "2"])
    yield ("workers neither a count nor auto", lambda tmp, ts: BASE.format(testset="ts")
           + '\n[run]\nworkers = "many"\n', ["run.workers", 'or "auto"', "'many'"])
    yield ("batch of zero", lambda tmp, ts: BASE.format(testset="ts")
           + "\n[run]\nbatch = 0\n", ["run.batch", "positive integer", "0"])


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


# ---------------------------------------------------------------- inputs beyond the config
# (case id, make(tmp, ts, monkeypatch) -> (argv, watched path or None), substrings, absent substrings)

_MOUNTS: list[Path] = []     # read-only folders to undo after a case
RO_REASON = "read-only file system" if os.geteuid() == 0 else "permission denied"


def _readonly(folder: Path, fill=None) -> Path:
    """``folder`` on a read-only filesystem (a tmpfs remounted read-only, as root) or, where
    mounting is not possible, a folder without write permission."""
    folder.mkdir()
    root = os.geteuid() == 0
    if root and subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64m", "tmpfs", str(folder)],
                               capture_output=True).returncode:
        pytest.skip("cannot mount a tmpfs here")
    _MOUNTS.append(folder)
    if fill:
        fill(folder)
    if root:
        subprocess.run(["mount", "-o", "remount,ro", str(folder)], check=True)
    else:
        folder.chmod(0o555)
    return folder


@pytest.fixture
def unmount():
    yield
    while _MOUNTS:
        folder = _MOUNTS.pop()
        if os.geteuid() == 0:
            subprocess.run(["umount", str(folder)], capture_output=True)
        else:
            folder.chmod(0o755)


def _config_file(tmp: Path, text: str) -> Path:
    (tmp / "cfg.toml").write_text(text)
    return tmp / "cfg.toml"


def _fixture_run(folder: Path) -> Path:
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from test_report_fixture import make_run

    return make_run(folder)


def command_cases():
    base = BASE.format(testset="ts")

    def out_is_file(tmp, ts, mp):
        (tmp / "out").write_text("a file")
        return ["run", str(_config_file(tmp, base)), "--out", str(tmp / "out")], tmp / "out"
    yield ("output dir is a file", out_is_file, ["--out", "must be a folder", "is a file"], [])

    def below_file(tmp, ts, mp):
        (tmp / "f").write_text("a file")
        return ["run", str(_config_file(tmp, base)), "--out", str(tmp / "f" / "run")], tmp / "f"
    yield ("output dir below a file", below_file, ["--out", "lies below a file"], [])

    def ro_out(tmp, ts, mp):
        ro = _readonly(tmp / "ro")
        return ["run", str(_config_file(tmp, base)), "--out", str(ro / "run")], ro
    yield ("output dir on a read-only filesystem", ro_out, ["--out", "cannot write there", RO_REASON], [])

    def ro_report(tmp, ts, mp):
        ro = _readonly(tmp / "ro", fill=_fixture_run)
        return ["report", str(ro / "run")], ro
    yield ("report on a read-only filesystem", ro_report, ["RUN_DIR", "cannot write there", RO_REASON], [])

    def report_on_file(tmp, ts, mp):
        (tmp / "notarun").write_text("x")
        return ["report", str(tmp / "notarun")], tmp / "notarun"
    yield ("report of a file", report_on_file, ["notarun", "not a vocobench run directory"], [])

    def report_dir_is_file(tmp, ts, mp):
        run = _fixture_run(tmp)
        (run / "report").write_text("x")
        return ["report", str(run)], run
    yield ("report folder is a file", report_dir_is_file, ["report", "is a file"], [])

    def junit_folder(tmp, ts, mp):
        a = _fixture_run(tmp / "a")
        b = _fixture_run(tmp / "b")
        (tmp / "out.xml").mkdir()
        return ["compare", str(a), str(b), "--markdown", str(tmp / "v.md"), "--junit",
                str(tmp / "out.xml")], tmp
    yield ("compare --junit pointing at a folder", junit_folder, ["--junit", "is a folder", "out.xml"], [])

    def corrupted(name: str, old: str, new: str):
        def make(tmp, ts, mp):
            run = _fixture_run(tmp)
            (run / name).write_text((run / name).read_text().replace(old, new, 1))
            return ["report", str(run)], run
        return make
    yield ("hand-corrupted manifest", corrupted("manifest.json", '"grid": [', '"grid": 5, "x": ['),
           ["manifest.json", "field 'grid'", "JSON list", "5"], [])
    yield ("hand-corrupted manifest grid entry", corrupted("manifest.json", '"steps": 8', '"steps": "8"'),
           ["manifest.json", "grid[0]"], [])
    yield ("hand-corrupted item value", corrupted("items.jsonl", '"steps": 8', '"steps": "eight"'),
           ["items.jsonl:1", "field 'steps'", "'eight'"], [])
    yield ("hand-corrupted item metric", corrupted("items.jsonl", '"mcd_db": ', '"mcd_db": "abc", "x": '),
           ["items.jsonl:1", "field 'metrics.mcd_db'", "a number", "'abc'"], [])
    yield ("item audio path escapes the run", corrupted("items.jsonl", '"audio_path": "audio/',
                                                        '"audio_path": "../../'),
           ["items.jsonl:1", "audio_path", "inside the run"], [])

    def journal_for_run(tmp, ts, mp):
        out = tmp / "out"
        out.mkdir()
        (out / "items.jsonl").write_text("[1, 2]\n{}\n")
        return ["run", str(_config_file(tmp, base)), "--out", str(out)], out
    yield ("run over a corrupted journal", journal_for_run, ["items.jsonl:1", "not a JSON object"], [])

    def worker_dies(tmp, ts, mp):
        from vocobench.sweep import local

        (tmp / "dies.py").write_text(WORKER_DIES)
        mp.setattr(local, "MAIN_COMPUTES", False)
        text = base.replace("vocobench.analytic:AnalyticDenoiser", "dies:Voc")
        return ["run", str(_config_file(tmp, text)), "--out", str(tmp / "out"), "--workers", "2"], None
    yield ("a worker dies", worker_dies, ["run.workers", "died (signal 9)", "--workers 1", "re-run to resume", "(got 2)"],
           ["__main__"])


WORKER_DIES = """
import multiprocessing, os, signal
from vocobench.analytic import AnalyticDenoiser

class Voc(AnalyticDenoiser):
    def predict_noise(self, x_t, features, t):
        if multiprocessing.parent_process() is not None:      # a spawned helper, not this process
            os.kill(os.getpid(), signal.SIGKILL)
        return super().predict_noise(x_t, features, t)
"""
COMMAND_CASES = list(command_cases())


def _snapshot(path: Path | None):
    if path is None or not path.exists():
        return None
    if path.is_file():
        return path.read_bytes()
    return {str(p.relative_to(path)): (p.read_bytes() if p.is_file() else None)
            for p in sorted(path.rglob("*")) if not p.is_symlink()}


@pytest.mark.parametrize("name,make,expect,absent", COMMAND_CASES, ids=[c[0] for c in COMMAND_CASES])
def test_bad_input_beyond_the_config_is_one_clear_line(tmp_path, capsys, monkeypatch, unmount, name,
                                                       make, expect, absent):
    ts = tmp_path / "ts"
    _write_testset(ts)
    argv, watched = make(tmp_path, ts, monkeypatch)
    before = _snapshot(watched)
    capsys.readouterr()
    rc = main(argv)
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if ln.startswith("vocobench")
             and not ln.startswith("vocobench: warning")]
    assert len(lines) == 1 and "error:" in lines[0], err
    for s in expect:
        assert s in lines[0], (s, lines[0])
    for s in absent:
        assert s not in lines[0], (s, lines[0])
    assert _snapshot(watched) == before, "nothing may be written for bad input"
    print(lines[0])


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
