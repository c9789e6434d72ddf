"""Results follow the code: the vocoder's fingerprint covers its source and its option files.

Editing the vocoder's package recomputes every item; ``version`` in the config overrides the
code; an option naming a file (a checkpoint) joins by content; failed items stay failed unless
``--retry-failed``; ``--fresh`` recomputes everything. (Our own caching contract; SHA-256 per
FIPS 180-4, checked against hashlib.)
"""
from __future__ import annotations

import hashlib
import json
import os
import sys
import tomllib
from pathlib import Path

import pytest

from conftest import COSINE_STOI_ONE_TIMING, run_vocobench, small_config
from vocobench import fingerprint
from vocobench.config import parse_config
from vocobench.store import read_jsonl
from vocobench.sweep import prepare, run

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"

MODEL = '''
import os
import numpy as np
from vocobench.analytic import DEMO_FRONTEND
from .helpers import GAIN

class Voc:
    sample_rate = 22050
    frontend = DEMO_FRONTEND
    def __init__(self, checkpoint=None):
        self.checkpoint = checkpoint
    def __call__(self, features, schedule, rng):
        if len(schedule) == 2 and os.path.exists(os.path.join(os.path.dirname(__file__), "FAIL")):
            raise RuntimeError("flaky")
        return GAIN * rng.standard_normal(features.shape[-1] * 256)
'''


def _project(tmp: Path, extra: str = "") -> Path:
    pkg = tmp / "vpkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "model.py").write_text(MODEL)
    (pkg / "helpers.py").write_text("GAIN = 0.01\n")
    return small_config(tmp, f'target = "vpkg.model:Voc"\n{extra}', "steps = [1, 2]\nseeds = [0]",
                        COSINE_STOI_ONE_TIMING + '[output]\nsave_audio = "none"\n')


def _config(cfg: Path):
    return parse_config(tomllib.loads(cfg.read_text()), cfg.parent, str(cfg))


@pytest.fixture
def fresh_import():
    yield
    for name in [m for m in sys.modules if m == "vpkg" or m.startswith("vpkg.")]:
        del sys.modules[name]


def test_editing_a_vocoder_file_recomputes(tmp_path):
    cfg = _project(tmp_path)
    out = tmp_path / "run"
    first = run_vocobench("run", str(cfg), "--out", str(out), "--no-report", cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    assert "0 reused, 2 to compute" in first.stderr
    assert "code of package vpkg" in first.stderr
    again = run_vocobench("run", str(cfg), "--out", str(out), "--no-report", cwd=tmp_path)
    assert "2 reused, 0 to compute" in again.stderr
    # a module of the package that the target only imports: GAIN 0.01 → 0.02 changes the audio
    (tmp_path / "vpkg" / "helpers.py").write_text("GAIN = 0.02\n")
    edited = run_vocobench("run", str(cfg), "--out", str(out), "--no-report", cwd=tmp_path)
    assert edited.returncode == 0, edited.stderr
    assert "0 reused, 2 to compute" in edited.stderr
    assert "2 items in this folder come from another grid" in edited.stderr
    recs = read_jsonl(out / "items.jsonl")
    assert len(recs) == 4 and len({r["key"] for r in recs}) == 4
    old, new = recs[:2], recs[2:]
    assert {r["audio_sha"] for r in old}.isdisjoint({r["audio_sha"] for r in new})
    fp = [json.loads((out / "manifest.json").read_text())["vocoder"]["fingerprint"]]
    assert fp[0] in edited.stderr


def test_version_overrides_the_code(tmp_path, fresh_import):
    cfg = _project(tmp_path, extra='version = "v7"')
    a = prepare(_config(cfg))
    (tmp_path / "vpkg" / "helpers.py").write_text("GAIN = 0.5\n")
    b = prepare(_config(cfg))
    assert [j.key for j in a.jobs] == [j.key for j in b.jobs]
    assert "version 'v7'" in a.identity.basis and "code not hashed" in a.identity.basis


def test_an_option_naming_a_file_joins_by_content(tmp_path, fresh_import):
    ckpt = tmp_path / "weights.bin"
    ckpt.write_bytes(b"\x00" * 1000)
    cfg = _project(tmp_path, extra=f'options = {{ checkpoint = "{ckpt}" }}')
    a = prepare(_config(cfg))
    assert "option file checkpoint" in a.identity.basis
    st = ckpt.stat()
    os.utime(ckpt, ns=(st.st_atime_ns, st.st_mtime_ns + 10 ** 9))   # touched, same bytes
    assert prepare(_config(cfg)).identity == a.identity
    ckpt.write_bytes(b"\x01" * 1000)                                  # new weights
    b = prepare(_config(cfg))
    assert b.identity.fingerprint != a.identity.fingerprint
    assert not {j.key for j in a.jobs} & {j.key for j in b.jobs}


def test_size_and_mtime_shortcut(tmp_path):
    f = tmp_path / "blob"
    f.write_bytes(b"abc" * 100)
    assert fingerprint.file_digest(f) == hashlib.sha256(b"abc" * 100).hexdigest()
    st = f.stat()
    f.write_bytes(b"xyz" * 100)                        # same size; mtime put back: not re-read
    os.utime(f, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert fingerprint.file_digest(f) == hashlib.sha256(b"abc" * 100).hexdigest()
    f.write_bytes(b"xyz" * 101)                        # size changed: read again
    assert fingerprint.file_digest(f) == hashlib.sha256(b"xyz" * 101).hexdigest()


def test_package_hash_covers_the_package_within_bounds(tmp_path, monkeypatch, fresh_import):
    _project(tmp_path)
    for i in range(5):
        (tmp_path / "vpkg" / f"extra{i}.py").write_text(f"X = {i}\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    import vpkg.model

    fp = fingerprint.code_fingerprint(vpkg.model.Voc)
    # an instance, its class and its module give one fingerprint
    assert fingerprint.code_fingerprint(vpkg.model.Voc()) == fp == fingerprint.code_fingerprint(vpkg.model)
    (tmp_path / "vpkg" / "extra4.py").write_text("X = 9\n")         # same size, other content
    assert fingerprint.code_fingerprint(vpkg.model) != fp
    # past the bound (sorted: __init__, extra0..4, helpers, model) files enter by name and size
    monkeypatch.setattr(fingerprint, "MAX_PACKAGE_FILES", 3)
    bounded = fingerprint.code_fingerprint(vpkg.model)
    (tmp_path / "vpkg" / "extra4.py").write_text("X = 8\n")
    assert fingerprint.code_fingerprint(vpkg.model) == bounded
    (tmp_path / "vpkg" / "extra4.py").write_text("X = 10\n")        # size changed
    assert fingerprint.code_fingerprint(vpkg.model) != bounded


def test_failed_items_stay_failed_unless_retried_and_fresh_recomputes(tmp_path, capsys, fresh_import):
    cfg = _project(tmp_path, extra='version = "fixed"\n[run]\nmax_failed_share = 1.0')
    (tmp_path / "vpkg" / "FAIL").write_text("")
    out = tmp_path / "run"
    c = _config(cfg)
    run(c, out, report=False)
    assert [r["status"] for r in read_jsonl(out / "items.jsonl")] == ["ok", "failed"]
    (tmp_path / "vpkg" / "FAIL").unlink()
    capsys.readouterr()
    run(c, out, report=False)
    err = capsys.readouterr().err
    assert "1 reused, 0 to compute" in err
    assert "1 items failed in an earlier run and stay failed (not retried)" in err
    assert "--retry-failed" in err
    assert len(read_jsonl(out / "items.jsonl")) == 2
    run(c, out, report=False, retry_failed=True)
    assert "retrying 1 items" in capsys.readouterr().err
    recs = read_jsonl(out / "items.jsonl")
    assert [r["status"] for r in recs] == ["ok", "failed", "ok"] and recs[1]["key"] == recs[2]["key"]
    run(c, out, report=False, fresh=True)
    assert "--fresh: every item is computed again" in capsys.readouterr().err
    assert len(read_jsonl(out / "items.jsonl")) == 5


def test_a_class_and_its_instance_are_hashed_once(tmp_path, monkeypatch, fresh_import):
    from vocobench.sweep import plan

    _project(tmp_path)
    monkeypatch.syspath_prepend(str(tmp_path))
    import vpkg.model

    calls = []
    real = plan.code_fingerprint
    monkeypatch.setattr(plan, "code_fingerprint", lambda obj: calls.append(obj) or real(obj))
    cfg = parse_config({"vocoder": {"target": "vpkg.model:Voc"}, "testset": {"path": str(DEMO)}},
                       tmp_path, str(tmp_path / "cfg.toml"))
    ident = plan.vocoder_identity(cfg, plan.Plugin.wrap(vpkg.model.Voc()), vpkg.model.Voc)
    assert len(calls) == 1
    # the same fingerprint as joining the (equal) code of both objects once
    assert ident.fingerprint == hashlib.sha256(real(vpkg.model.Voc).encode()).hexdigest()[:16]


def test_package_versions_are_a_fresh_table_each_time():
    from vocobench.sweep import package_versions

    first = package_versions()
    first["numpy"] = "edited"
    assert package_versions()["numpy"] != "edited"
