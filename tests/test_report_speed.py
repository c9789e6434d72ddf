"""The report's fast paths give what the slower ones gave, and commands load only what they use.

References: ``scipy.signal.stft`` (the spectrogram the page showed before), matplotlib's own
colour mapping (``Colormap(Normalize(vmin, vmax)(x))``, as ``imshow`` applies it), Pillow's PNG
decoder (ISO/IEC 15948), and ``python -X importtime`` (CPython command-line documentation: one
stderr line per module imported).
"""
from __future__ import annotations

import re
import subprocess
import sys

import numpy as np
import pytest
from scipy.signal import stft

from conftest import REPO_ROOT
from test_report_fixture import make_run

sys.path.insert(0, str(REPO_ROOT))

from vocobench.report import spectrogram as S  # noqa: E402

HEAVY = ("librosa", "torch", "numba", "sklearn")


@pytest.mark.parametrize("n", [100, 512, 513, 700, 12345, 22050])
def test_stft_matches_scipy(n):
    y = np.random.default_rng(n).standard_normal(n)
    y = np.pad(y, (0, max(0, S.NPERSEG - n)))
    z = stft(y, fs=22050, nperseg=S.NPERSEG, noverlap=3 * S.NPERSEG // 4, window="hann")[2]
    ref = 20 * np.log10(np.abs(z) + 1e-12)
    got = S.stft_db(y, 22050)
    assert got.shape == ref.shape
    assert np.max(np.abs(got - ref)) < 1e-9


def test_png_shows_what_imshow_showed(tmp_path):
    # Same pixels as matplotlib's magma over [TOP_DB − RANGE_DB, TOP_DB] applied to the pooled
    # scipy spectrogram, low frequencies at the bottom; an 8-bit indexed PNG that Pillow reads.
    from matplotlib import colormaps
    from matplotlib.colors import Normalize
    from PIL import Image

    sr = 22050
    t = np.arange(int(4.0 * sr)) / sr
    rng = np.random.default_rng(1)
    y = 0.5 * np.sin(2 * np.pi * (300 + 600 * t) * t) + 0.02 * rng.standard_normal(t.size)
    ext = S.write_spectrogram(y, sr, tmp_path / "a.png")
    assert (ext.seconds, ext.khz) == (pytest.approx(4.0), pytest.approx(sr / 2000))
    db = 20 * np.log10(np.abs(stft(y, fs=sr, nperseg=S.NPERSEG, noverlap=3 * S.NPERSEG // 4)[2]) + 1e-12)
    db = S.pool(S.pool(db, S.ROWS, axis=0), S.MAX_COLUMNS, axis=1)
    norm = Normalize(S.TOP_DB - S.RANGE_DB, S.TOP_DB)
    want = colormaps["magma"](norm(db), bytes=True)[::-1, :, :3]
    im = Image.open(tmp_path / "a.png")
    assert im.format == "PNG" and im.mode == "P"
    got = np.asarray(im.convert("RGB"))
    assert got.shape == want.shape == (S.ROWS, S.MAX_COLUMNS, 3)
    same = np.all(got == want, axis=2)
    # only values within rounding of a colour boundary may differ (scipy and numpy FFTs differ
    # in the last bits)
    assert same.mean() > 0.999, same.mean()
    # a negative control: the same image upside down is another image
    assert np.mean(np.all(got[::-1] == want, axis=2)) < 0.5


def test_png_is_the_same_bytes_each_time(tmp_path):
    y = np.random.default_rng(2).standard_normal(8000)
    S.write_spectrogram(y, 16000, tmp_path / "a.png")
    S.write_spectrogram(y, 16000, tmp_path / "b.png")
    assert (tmp_path / "a.png").read_bytes() == (tmp_path / "b.png").read_bytes()


@pytest.mark.parametrize("hi", [0.03, 0.4, 1.0, 1.5, 2.67, 7.3, 8.0, 11.025, 24.0, 61.0])
@pytest.mark.parametrize("most", [4, 5, 6])
def test_nice_ticks(hi, most):
    ticks = S.nice_ticks(hi, most)
    step = ticks[1] - ticks[0]
    mantissa = step / 10 ** np.floor(np.log10(step))
    assert ticks[0] == 0 and 2 <= len(ticks) <= most
    assert any(np.isclose(mantissa, m) for m in (1, 2, 2.5, 5))
    assert np.allclose(np.diff(ticks), step) and ticks[-1] <= hi + 1e-9 < ticks[-1] + step
    e = np.floor(np.log10(step))
    finer = [m * 10 ** k for k in (e - 1, e) for m in (1, 2, 2.5, 5) if m * 10 ** k < step * 0.99]
    assert all(np.floor(hi / f + 1e-9) + 1 > most for f in finer)    # no smaller nice step fits


def _imported(args: list[str], cwd) -> set[str]:
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "vocobench", *args], cwd=cwd,
                       capture_output=True, text=True, timeout=300,
                       env={"PYTHONPATH": str(REPO_ROOT), "PATH": "/usr/bin:/bin",
                            "OMP_NUM_THREADS": "1"})
    assert r.returncode == 0, r.stderr[-2000:]
    names = {m.group(1) for m in re.finditer(r"^import time:.*\|\s*(\S+)$", r.stderr, re.M)}
    assert "vocobench.cli" in names                 # the check reads real import lines
    return names


def _any(names: set[str], prefixes) -> list[str]:
    """The modules in ``names`` that are, or are inside, one of ``prefixes``."""
    return sorted(n for n in names if any(n == p or n.startswith(p + ".") for p in prefixes))


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    return make_run(tmp_path_factory.mktemp("imports"))


def test_listening_page_draws_without_a_figure(run_dir, tmp_path):
    # Spectrograms need neither matplotlib's figures and canvases nor scipy.signal ...
    names = _imported(["report", str(run_dir), "--no-plots", "-q"], tmp_path)
    assert list((run_dir / "report" / "spectra").glob("*.png"))
    assert not _any(names, ("matplotlib.figure", "matplotlib.pyplot", "matplotlib.backends.backend_agg",
                            "scipy.signal", *HEAVY))
    # ... while the plots do use them (so the check above can fail).
    names = _imported(["report", str(run_dir), "-q"], tmp_path)
    assert {"matplotlib.figure", "matplotlib.backends.backend_agg"} <= names


@pytest.mark.parametrize("view", [["--format", "csv"], ["--by", "utt", "--format", "json"],
                                  ["--worst", "mcd_db"]], ids=" ".join)
def test_show_draws_nothing(run_dir, tmp_path, view):
    names = _imported(["show", str(run_dir), *view], tmp_path)
    assert not _any(names, ("matplotlib", "PIL", "soundfile", *HEAVY))
