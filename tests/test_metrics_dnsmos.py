"""DNSMOS (``dnsmos``) against the reference function of the package that ships its models.

Reference: ``speechmos.dnsmos.run`` (the DNS challenge's dnsmos_local.py procedure, Reddy et al.
2021/2022). Skipped, with the reason shown, when the optional extra 'quality' is not installed.
Speech: tests/data (tests/data/make_speech.sh).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

pytest.importorskip("onnxruntime", reason="onnxruntime not installed (optional extra 'quality')")
pytest.importorskip("speechmos", reason="speechmos not installed (optional extra 'quality')")

from vocobench.errors import MetricUnavailable  # noqa: E402
from vocobench.metrics import build_metrics  # noqa: E402
from vocobench.metrics.dsp import resample  # noqa: E402

DATA = Path(__file__).resolve().parent / "data"
SR = 16000
COLUMNS = {"dnsmos_sig": "sig_mos", "dnsmos_bak": "bak_mos", "dnsmos_ovrl": "ovrl_mos",
           "dnsmos_p808": "p808_mos"}


def _speech(name: str) -> np.ndarray:
    x, sr = sf.read(str(DATA / f"speech_{name}.wav"), dtype="float64")
    assert sr == SR
    return x


def _noisy(x: np.ndarray, snr_db: float) -> np.ndarray:
    rng = np.random.default_rng(11)
    y = x + rng.standard_normal(x.size) * math.sqrt(np.mean(x ** 2) / 10 ** (snr_db / 10))
    return np.clip(y, -1.0, 1.0)          # the reference function refuses samples beyond ±1


def _reference(x: np.ndarray) -> dict[str, float]:
    from speechmos import dnsmos

    out = dnsmos.run(x, SR)
    return {ours: float(out[theirs]) for ours, theirs in COLUMNS.items()}


def _ours(x: np.ndarray, sr: int = SR) -> dict[str, float]:
    m = build_metrics(["dnsmos"])[0]
    return m.score(m.prepare(x, sr), x, sr)


@pytest.mark.parametrize("case", ["male", "female", "long", "noisy"])
def test_scores_match_the_reference_function(case):
    # short clips (repeated to 9.01 s), a 14 s clip (several 9.01 s windows, batched here, one at
    # a time in the reference) and a noisy clip: same numbers to 1e-4
    x = {"male": lambda: _speech("male"), "female": lambda: _speech("female"),
         "long": lambda: np.concatenate([_speech("female"), _speech("male"), _speech("female")]),
         "noisy": lambda: _noisy(_speech("male"), 10.0)}[case]()
    ours, ref = _ours(x), _reference(x)
    for col in COLUMNS:
        assert ours[col] == pytest.approx(ref[col], abs=1e-4), col


def test_other_rates_are_resampled_to_16_khz_first():
    x = resample(_speech("male"), SR, 22050)
    ours, ref = _ours(x, 22050), _reference(np.clip(resample(x, 22050, SR), -1, 1))
    for col in COLUMNS:
        assert ours[col] == pytest.approx(ref[col], abs=1e-4), col


def test_clean_ranks_above_30_db_above_10_db_noise():
    # BAK rates the background, OVRL and P.808 the whole (Reddy et al. 2022; ITU-T P.835): all
    # three fall as noise rises. SIG rates the speech signal alone and need not (measured: flat
    # within 0.3 MOS here), so it is not part of the ranking.
    for name in ("male", "female"):
        x = _speech(name)
        clean, mid, bad = _ours(x), _ours(_noisy(x, 30.0)), _ours(_noisy(x, 10.0))
        for col in ("dnsmos_bak", "dnsmos_ovrl", "dnsmos_p808"):
            assert clean[col] > mid[col] > bad[col], (name, col, clean, mid, bad)


def test_silence_is_unavailable_and_variant_records_the_models():
    m = build_metrics(["dnsmos"])[0]
    with pytest.raises(MetricUnavailable):
        m.score(m.prepare(_speech("male"), SR), np.zeros(SR), SR)
    v = m.variant(SR)
    assert v["sample_rate"] == SR and len(v["model_sha"]) == 16
    assert set(v["libraries"]) >= {"speechmos", "onnxruntime"}
