"""Bring-your-own metrics: a metric written in this file, named ``file.py:object`` in a run config,
runs through ``vocobench run`` and ``vocobench compare`` like a built-in; ``vocobench check
--metric`` checks such objects; code fingerprints follow the code.

Sources: the user-metric contract and provenance record documented in
vocobench/metrics/external.py (our own contract); segmental SNR as defined by Quackenbush,
Barnwell & Clements 1988 ("Objective measures of speech quality", Prentice Hall) with the per-frame
clamp to [-10, 35] dB of Hansen & Pellom 1998 ("An effective quality evaluation protocol for speech
enhancement algorithms", ICSLP); exit codes from vocobench/cli.py.
"""
from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from vocobench.check import check_metric
from vocobench.errors import InputError, MetricUnavailable
from vocobench.fingerprint import code_fingerprint, files_fingerprint, option_files_fingerprint
from vocobench.metrics import build_metrics

HERE = Path(__file__).resolve()
DEMO = HERE.parent.parent / "scenarios" / "pier-announcements" / "testset"
SEGSNR_CLAMP_DB = (-10.0, 35.0)          # Hansen & Pellom 1998


class SegmentalSnr:
    """A user's metric, written against the documented contract only (no vocobench import)."""

    name = "segsnr"
    description = "segmental SNR, frames clamped to [-10, 35] dB"
    version = "1.0"
    columns = [{"name": "segsnr", "unit": "dB", "higher_is_better": True,
                "range": list(SEGSNR_CLAMP_DB), "description": "mean clamped frame SNR"}]

    def __init__(self, frame_ms: float = 20.0):
        self.frame_ms = frame_ms

    def _frames(self, x, sr):
        n = int(round(self.frame_ms * sr / 1000))
        return np.asarray(x, dtype=np.float64)[: x.size // n * n].reshape(-1, n)

    def prepare(self, reference, sample_rate):
        return self._frames(reference, sample_rate)

    def score(self, state, estimate, sample_rate):
        est = self._frames(estimate, sample_rate)
        err = np.sum((state - est) ** 2, axis=1)
        sig = np.sum(state ** 2, axis=1)
        with np.errstate(divide="ignore"):
            snr = 10 * np.log10(sig / err)
        return {"segsnr": float(np.mean(np.clip(np.nan_to_num(snr, posinf=99, neginf=-99),
                                                *SEGSNR_CLAMP_DB)))}


class RandomScore(SegmentalSnr):
    name = "noisy_metric"
    columns = [{"name": "noisy_metric", "unit": "dB", "higher_is_better": True,
                "range": [-100, 100]}]

    def score(self, state, estimate, sample_rate):
        return {"noisy_metric": float(np.random.default_rng().uniform(-1, 1))}


class BackwardsDistance(SegmentalSnr):
    """Claims a distance is better when higher, and lets NaN through: both must be reported."""

    name = "backwards"
    needs_finite_estimate = False
    columns = [{"name": "backwards", "unit": "dB", "higher_is_better": True, "range": [0.5, 1]}]

    def score(self, state, estimate, sample_rate):
        return {"backwards": float(np.nanmean(np.abs(state - self._frames(estimate, sample_rate))))}


def _target(obj: str) -> str:
    return f"{HERE}:{obj}"


def _speech(sr=16000, seconds=1.0):
    t = np.arange(int(sr * seconds)) / sr
    return (0.3 * np.sin(2 * np.pi * 140 * t) * (0.6 - 0.4 * np.cos(2 * np.pi * 3 * t)))


def test_segsnr_user_metric_matches_the_formula_and_records_provenance():
    m = build_metrics([_target("SegmentalSnr")], {_target("SegmentalSnr"): {"frame_ms": 10.0}})[0]
    x = _speech()
    y = x + 0.01 * np.random.default_rng(0).standard_normal(x.size)
    got = m.score(m.prepare(x, 16000), y, 16000)["segsnr"]
    fx, fy = x.reshape(-1, 160), y.reshape(-1, 160)
    per_frame = 10 * np.log10(np.sum(fx ** 2, 1) / np.sum((fx - fy) ** 2, 1))
    assert got == pytest.approx(np.mean(np.clip(per_frame, -10, 35)), rel=1e-12)
    v = m.variant(16000)
    prov = v["provenance"]
    assert prov["target"] == _target("SegmentalSnr") and prov["version"] == "1.0"
    # the same file imported as a plain module has the same code fingerprint
    assert prov["code"] == code_fingerprint(HERE.stem) and len(prov["code"]) == 16
    assert v["options"] == {"frame_ms": 10.0} and v["columns"] == ["segsnr"]
    # NaN in the estimate: unavailable (needs_finite_estimate defaults to true)
    bad = y.copy()
    bad[5] = np.nan
    with pytest.raises(MetricUnavailable):
        m.score(m.prepare(x, 16000), bad, 16000)


def test_user_metric_errors_name_the_field():
    cases = [(f"{HERE}:NoSuchThing", "no attribute"),
             (f"{HERE.parent / 'missing.py'}:X", "file not found")]
    for target, text in cases:
        with pytest.raises(InputError, match=text) as exc:
            build_metrics([target], source="cfg.toml")
        assert exc.value.field == "metrics.use"
    with pytest.raises(InputError, match="options do not fit"):
        build_metrics([_target("SegmentalSnr")], {_target("SegmentalSnr"): {"frame": 1}})
    with pytest.raises(InputError, match="not in \\[metrics\\] use"):
        build_metrics(["stoi"], {_target("SegmentalSnr"): {}})


def test_user_metric_names_and_columns_must_not_clash(tmp_path):
    clash = tmp_path / "clash.py"
    clash.write_text("class Stoi:\n    name = 'mystoi'\n    columns = [{'name': 'stoi', "
                     "'unit': 'x', 'higher_is_better': True, 'range': [0, 1]}]\n"
                     "    def prepare(self, r, sr): return r\n"
                     "    def score(self, s, e, sr): return {'stoi': 1.0}\n"
                     "class Builtin(Stoi):\n    name = 'mcd'\n"
                     "class Reserved(Stoi):\n    name = 'okname'\n    columns = [{'name': 'seed', "
                     "'unit': 'x', 'higher_is_better': None, 'range': [0, 1]}]\n")
    with pytest.raises(InputError, match="also a column of metric"):
        build_metrics(["stoi", f"{clash}:Stoi"])
    with pytest.raises(InputError, match="taken by a built-in"):
        build_metrics([f"{clash}:Builtin"])
    with pytest.raises(InputError, match="field of the item records"):
        build_metrics([f"{clash}:Reserved"])


def test_code_fingerprint_follows_content_not_place(tmp_path):
    src = "class M:\n    name = 'm'\n"
    a, b = tmp_path / "a" / "usermetric_fp.py", tmp_path / "b" / "usermetric_fp.py"
    for p in (a, b):
        p.parent.mkdir()
        p.write_text(src)
    from vocobench.contracts import resolve

    fa = code_fingerprint(resolve(f"{a}:M"))
    fb = code_fingerprint(resolve(f"{b}:M"))
    assert fa == fb                       # same code elsewhere: same fingerprint
    b.write_text(src + "# edited\n")
    assert code_fingerprint(resolve(f"{b}:M")) != fa
    # a package: every module of the package counts, addressed by name or by object
    assert code_fingerprint("vocobench.metrics") == code_fingerprint("vocobench.errors")
    # files named by option values (e.g. model weights)
    w = tmp_path / "weights.bin"
    w.write_bytes(b"\x00" * 10)
    fp = option_files_fingerprint({"checkpoint": str(w), "steps": 4, "name": "x"})
    assert list(fp) == ["checkpoint"] and fp["checkpoint"] == files_fingerprint([w])
    w.write_bytes(b"\x01" * 10)
    assert option_files_fingerprint({"checkpoint": str(w)})["checkpoint"] != fp["checkpoint"]


def test_check_passes_a_good_metric_and_explains_bad_ones():
    good = check_metric(build_metrics([_target("SegmentalSnr")])[0])
    assert [str(f) for f in good if not f.ok] == []
    noisy = {f.what: f for f in check_metric(build_metrics([_target("RandomScore")])[0])}
    assert not noisy["determinism"].ok
    back = {f.what: f for f in check_metric(build_metrics([_target("BackwardsDistance")])[0])}
    assert not back["identity score"].ok and "direction" in back["identity score"].detail
    assert not back["NaN handling"].ok and not back["declared range"].ok


def _cli(*args, cwd):
    # imported here: `vocobench run` imports this file as the user's module, without conftest
    from conftest import run_vocobench

    return run_vocobench(*args, cwd=cwd)


def test_check_metric_cli_exit_codes(tmp_path):
    ok = _cli("check", "--metric", _target("SegmentalSnr"), "-o", "frame_ms=25.0",
                       cwd=tmp_path)
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert "contract holds" in ok.stdout and "[ok] determinism" in ok.stdout
    bad = _cli("check", "--metric", _target("RandomScore"), cwd=tmp_path)
    assert bad.returncode == 1 and "[FAIL] determinism" in bad.stdout
    missing = _cli("check", "--metric", f"{HERE}:Nope", cwd=tmp_path)
    assert missing.returncode == 1 and "[FAIL] load" in missing.stdout


def test_user_metric_runs_through_run_and_compare(tmp_path):
    ts = tmp_path / "ts"
    ts.mkdir()
    for f in ("pier01.wav", "pier02.wav"):
        shutil.copy(DEMO / f, ts / f)
    shutil.copy(HERE, tmp_path / "my_metrics.py")       # relative file.py target, config folder
    cfg = tmp_path / "cfg.toml"
    cfg.write_text("""
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "ts"
[sweep]
steps = [2]
samplers = ["ddim"]
seeds = [0, 1]
[metrics]
use = ["stoi", "my_metrics.py:SegmentalSnr"]
[metrics.options."my_metrics.py:SegmentalSnr"]
frame_ms = 25.0
[timing]
repeats = 1
utterances = 1
[output]
save_audio = "none"
""")
    out = tmp_path / "run"
    r = _cli("run", str(cfg), "--out", str(out), "--no-report", "-q", cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["columns"]["segsnr"]["higher_is_better"] is True
    assert manifest["columns"]["segsnr"]["unit"] == "dB"
    prov = manifest["metrics"]["segsnr"]["provenance"]
    assert prov["target"] == "my_metrics.py:SegmentalSnr" and prov["version"] == "1.0"
    items = [json.loads(line) for line in (out / "items.jsonl").read_text().splitlines()]
    assert len(items) == 2 * 2 and all(i["status"] == "ok" for i in items)
    assert all(math.isfinite(i["metrics"]["segsnr"]) for i in items)
    # a second run of the same config reuses every item (same cache keys)
    again = _cli("run", str(cfg), "--out", str(out), "--no-report", "-q", cwd=tmp_path)
    assert again.returncode == 0
    assert len((out / "items.jsonl").read_text().splitlines()) == 4
    # compare: the user column is compared like a built-in one
    report = tmp_path / "compare.json"
    # 2 utterances, 2 gated tests: only α = 0.5 lets an exact paired test reach α/m = 2^-2
    c = _cli("compare", str(out), str(out), "--min-items", "2", "--confidence", "0.5",
             "--json", str(report), cwd=tmp_path)
    assert c.returncode == 0, c.stdout + c.stderr
    doc = json.loads(report.read_text())
    assert "segsnr" in json.dumps(doc) and "stoi" in json.dumps(doc)
