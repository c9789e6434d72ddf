"""A vocoder package written outside vocobench (tests/external_vocoder) run end to end by module:object.

Its front-end is 24 kHz (n_fft 1200, hop 300, 100 HTK mels, log10); the test set holds 16 kHz and
24 kHz files, so resampling to the vocoder's rate is exercised.
"""
from __future__ import annotations

import csv
import json
import textwrap
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from conftest import TESTS_DIR, run_vocobench
from external_vocoder import FRONTEND, FrameGainDenoiser, ShapedNoiseVocoder

from vocobench.check import check_object
from vocobench.frontend import MelFrontEnd
from vocobench.schedules import cosine


def _config(tmp_path: Path, body: str) -> Path:
    p = tmp_path / "cfg.toml"
    p.write_text(textwrap.dedent(body), encoding="utf-8")
    return p


def _read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def test_external_plugins_hold_the_contract():
    # the same check `vocobench check` runs (vocobench.check); both models are correct by construction
    for obj in (ShapedNoiseVocoder(), FrameGainDenoiser()):
        bad = [str(f) for f in check_object(obj) if not f.ok]
        assert bad == []


def test_shaped_noise_vocoder_improves_with_steps(speech_folder):
    # Griffin & Lim 1984: each magnitude projection does not increase the spectral inconsistency, so
    # more steps of the "gl" sampler bring the output's log-mel closer to the conditioning features
    fe = MelFrontEnd.from_dict(FRONTEND)
    y, sr = sf.read(str(speech_folder / "utt_c.wav"), dtype="float32")
    assert sr == 24000
    feats = fe(y)
    voc = ShapedNoiseVocoder()
    err = []
    for n in (1, 8):
        out = voc(feats, cosine(n), np.random.default_rng(0), sampler="gl")
        assert out.shape == (fe.expected_samples(feats.shape[-1]),)
        err.append(float(np.mean(np.abs(fe(out)[:, : feats.shape[-1]] - feats))))
    assert err[1] < err[0]


def test_external_vocoder_runs_through_the_cli(tmp_path, speech_folder):
    cfg = _config(tmp_path, f"""
        [vocoder]
        target = "external_vocoder.models:ShapedNoiseVocoder"
        search_path = ["{TESTS_DIR}"]

        [testset]
        path = "{speech_folder.name}"

        [sweep]
        steps = [1, 4]
        seeds = [0, 1]

        [[sweep.schedule]]
        name = "cosine"
        kind = "cosine"

        [metrics]
        use = ["stoi"]

        [timing]
        warmup = 1
        repeats = 1
        utterances = 1
    """)
    out = tmp_path / "run"
    r = run_vocobench("run", str(cfg), "--out", str(out), "--no-report", "-q", cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    # jobs = utterances × schedules × samplers × steps × seeds (the run-directory format)
    n_jobs = 3 * 1 * 2 * 2 * 2
    rows = _read_csv(out / "items.csv")
    assert len(rows) == n_jobs
    assert len({(r["utt_id"], r["schedule"], r["sampler"], r["steps"], r["seed"]) for r in rows}) == n_jobs
    assert {r["status"] for r in rows} == {"ok"}, [r["failure"] for r in rows if r["status"] != "ok"]
    assert {r["sampler"] for r in rows} == {"gl", "gl-noise"}
    assert "stoi" in rows[0]
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    fe = manifest["frontend"]
    assert (fe["sample_rate"], fe["n_fft"], fe["hop_length"], fe["n_mels"]) == (24000, 1200, 300, 100)
    assert (fe["mel_scale"], fe["mel_norm"], fe["log"]) == ("htk", None, "log10")
    assert manifest["vocoder"]["sample_rate"] == 24000 and manifest["vocoder"]["kind"] == "vocoder"
    assert manifest["vocoder"]["target"] == "external_vocoder.models:ShapedNoiseVocoder"
    assert sorted(u["native_rate"] for u in manifest["dataset"]["utterances"]) == [16000, 16000, 24000]
    # a 16 kHz reference is synthesised at 24 kHz: saved audio is 24 kHz, one hop per frame
    row = next(r for r in rows if r["utt_id"] == "utt_a" and r["audio_path"])
    info = sf.info(str(out / row["audio_path"]))
    frames = 1 + round(0.8 * 24000) // 300
    assert info.samplerate == 24000 and info.frames == frames * 300
    # one worker: the sweep's own uncontended call is the one repeat (no first call, no warm-up)
    timing = _read_csv(out / "timing.csv")
    assert len(timing) == 1 * 2 * 2                              # 1 repeat × 4 configurations × 1 utt
    assert {r["source"] for r in timing} == {"sweep"}


def test_external_denoiser_runs_with_builtin_samplers(tmp_path, speech_folder):
    from vocobench.config import load_config
    from vocobench.sweep import run

    cfg = _config(tmp_path, f"""
        [vocoder]
        target = "external_vocoder.models:FrameGainDenoiser"
        search_path = ["{TESTS_DIR}"]

        [testset]
        path = "{speech_folder.name}"

        [sweep]
        steps = [2, 5]
        samplers = ["ddpm", "ddim"]
        seeds = [3]

        [[sweep.schedule]]
        name = "uniform"
        kind = "stride"

        [[sweep.schedule]]
        name = "cos"
        kind = "cosine"

        [sampler_options.ddim]
        eta = 0.0

        [metrics]
        use = ["stoi"]

        [timing]
        repeats = 1
        utterances = 1
    """)
    out = run(load_config(cfg), tmp_path / "run", progress=False, report=False)
    rows = _read_csv(out / "items.csv")
    assert len(rows) == 3 * 2 * 2 * 2 * 1
    assert {r["status"] for r in rows} == {"ok"}, [r["failure"] for r in rows if r["status"] != "ok"]
    assert {int(r["nfe"]) for r in rows} == {2, 5}       # one denoiser call per step (NFE = N)
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["frontend"]["sample_rate"] == 24000
    voc = manifest["vocoder"]
    assert voc["kind"] == "denoiser" and voc["conditioning"] == "level"
    assert voc["training_schedule"]["betas"] == pytest.approx(FrameGainDenoiser.training_schedule)
    # a stride schedule takes its steps from the declared training schedule (Song et al. 2021)
    grid = {(g["schedule"], g["steps"]): g for g in manifest["grid"]}
    assert grid[("uniform", 5)]["train_steps"] == [9, 19, 29, 39, 49]
