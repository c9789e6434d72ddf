"""Shared helpers for the foundation tests: synthetic speech-like audio and the CLI in a subprocess.

Nothing here is autouse; fixtures are opt-in by name.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

TESTS_DIR = Path(__file__).resolve().parent
REPO_ROOT = TESTS_DIR.parent

# tests/external_vocoder is imported as a user's package would be: from a folder on sys.path
if str(TESTS_DIR) not in sys.path:
    sys.path.insert(0, str(TESTS_DIR))


def speechlike(sample_rate: int, seconds: float, f0: tuple[float, float] = (110.0, 170.0),
               syllable_hz: float = 4.0, seed: int = 0) -> np.ndarray:
    """Harmonic glide with a syllabic envelope and a crude formant tilt, peak 0.5.

    A synthetic stand-in for voiced speech (common practice, no source): f0 glides linearly,
    harmonics up to Nyquist are weighted by two resonances near 500 Hz and 1500 Hz, and a raised
    cosine at ``syllable_hz`` gates it into syllables; a little noise keeps unvoiced gaps non-silent.
    """
    rng = np.random.default_rng(seed)
    n = int(round(seconds * sample_rate))
    t = np.arange(n) / sample_rate
    f = f0[0] + (f0[1] - f0[0]) * t / seconds
    phase = 2 * np.pi * np.cumsum(f) / sample_rate
    y = np.zeros(n)
    for k in range(1, 60):
        if k * f.max() >= 0.45 * sample_rate:
            break
        fk = k * f.mean()
        gain = 1 / (1 + ((fk - 500) / 200) ** 2) + 0.5 / (1 + ((fk - 1500) / 300) ** 2) + 0.02
        y += gain * np.sin(k * phase + rng.uniform(0, 2 * np.pi))
    env = 0.55 - 0.45 * np.cos(2 * np.pi * syllable_hz * t)
    y = env * y + 0.01 * rng.standard_normal(n)
    return (0.5 * y / np.max(np.abs(y))).astype(np.float32)


def write_wav(path: Path, y: np.ndarray, sample_rate: int) -> Path:
    import soundfile as sf

    path.parent.mkdir(parents=True, exist_ok=True)
    sf.write(str(path), y, sample_rate, subtype="PCM_16")
    return path


@pytest.fixture
def speech_folder(tmp_path: Path) -> Path:
    """A folder of three short speech-like wav files: two at 16 kHz, one at 24 kHz."""
    folder = tmp_path / "testset"
    specs = [("utt_a", 16000, (100.0, 150.0)), ("utt_b", 16000, (180.0, 240.0)),
             ("utt_c", 24000, (120.0, 90.0))]
    for i, (name, sr, f0) in enumerate(specs):
        write_wav(folder / f"{name}.wav", speechlike(sr, 0.8, f0, seed=i), sr)
    return folder


def run_vocobench(*args: str, cwd: Path, timeout: float = 180) -> subprocess.CompletedProcess:
    """``python -m vocobench ARGS`` in a subprocess, with the checkout importable."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO_ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    env.setdefault("OMP_NUM_THREADS", "1")
    return subprocess.run([sys.executable, "-m", "vocobench", *args], cwd=str(cwd), env=env,
                          capture_output=True, text=True, timeout=timeout)


DEMO_TESTSET = REPO_ROOT / "scenarios" / "pier-announcements" / "testset"
# the sections most small test runs share: one cosine schedule, STOI only, one timed call
COSINE_STOI_ONE_TIMING = """[[sweep.schedule]]
name = "cos"
kind = "cosine"
[metrics]
use = ["stoi"]
[timing]
repeats = 1
utterances = 1
"""


def small_config(tmp: Path, vocoder: str, sweep: str, rest: str = "",
                 utterances: tuple[str, ...] = ("pier03",)) -> Path:
    """Copy a few demo recordings to ``tmp/ts`` and write ``tmp/cfg.toml``: the ``[vocoder]``
    lines, the test set, the ``[sweep]`` lines, then ``rest`` (further tables)."""
    (tmp / "ts").mkdir(exist_ok=True)
    for u in utterances:
        shutil.copy(DEMO_TESTSET / f"{u}.wav", tmp / "ts" / f"{u}.wav")
    cfg = tmp / "cfg.toml"
    cfg.write_text(f'[vocoder]\n{vocoder}\n[testset]\npath = "ts"\n[sweep]\n{sweep}\n{rest}')
    return cfg
