"""F0 and periodicity errors (``f0``) on real (self-made) speech and on signals with known answers.

Speech: tests/data/speech_{male,female}.wav, made by tests/data/make_speech.sh (eSpeak NG).
Pitch shifts are made with librosa.effects.pitch_shift (phase-vocoder time stretch by 2^(−c/1200),
then resampling by 2^(c/1200)): the output keeps the input's length and timing, so frame i of the
shifted signal describes the same moment as frame i of the original, and every F0 is multiplied by
exactly 2^(c/1200). A 16 ms window (n_fft 256, hop 32 at 16 kHz) is used because the default
128 ms window smears fast F0 movements (measured with Praat: +50 cents read as +55, 15 % voicing
disagreements); 16 ms spans 2–4 pitch periods of these voices, and frames stay aligned to 2 ms.
"""
from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from test_metrics_synth import harmonic_tone
from vocobench.errors import InputError
from vocobench.metrics import build_metrics
from vocobench.metrics.pitch_error import pitch_scores
from vocobench.metrics.pitch_tracking import periodicity

DATA = Path(__file__).resolve().parent / "data"
SR = 16000
SHIFTS_CENTS = (50, -50, 100, -100)
HAS_PRAAT = importlib.util.find_spec("parselmouth") is not None
PRAAT_REASON = "praat-parselmouth not installed (optional extra 'quality')"
TRACKERS = ["pyin", "yin", pytest.param("praat", marks=pytest.mark.skipif(not HAS_PRAAT,
                                                                          reason=PRAAT_REASON))]


def _speech(name: str) -> np.ndarray:
    x, sr = sf.read(str(DATA / f"speech_{name}.wav"), dtype="float32")
    assert sr == SR
    return x


def _shifted(x: np.ndarray, cents: float) -> np.ndarray:
    import librosa

    return librosa.effects.pitch_shift(x, sr=SR, n_steps=cents / 100, bins_per_octave=12,
                                       n_fft=256, hop_length=32, res_type="soxr_vhq"
                                       ).astype(np.float32)


def _noisy(x: np.ndarray, snr_db: float) -> np.ndarray:
    rng = np.random.default_rng(7)
    p = np.mean(np.square(x, dtype=np.float64))
    return (x + rng.standard_normal(x.size) * math.sqrt(p / 10 ** (snr_db / 10))).astype(np.float32)


@pytest.fixture(scope="module")
def shifted():
    return {(name, c): _shifted(_speech(name), c) for name in ("male", "female")
            for c in SHIFTS_CENTS}


@pytest.mark.parametrize("tracker", TRACKERS)
@pytest.mark.parametrize("name", ["male", "female"])
def test_pitch_shift_of_real_speech_is_reported_within_5_cents(tracker, name, shifted):
    # A shift of c cents multiplies every F0 by 2^(c/1200) (the cent, Ellis 1885): RMSE and bias
    # over the frames voiced in both must read |c| and c; no frame is a gross (>20 %) error.
    m = build_metrics(["f0"], options={"f0": {"tracker": tracker}})[0]
    state = m.prepare(_speech(name), SR)
    for c in SHIFTS_CENTS:
        v = m.score(state, shifted[(name, c)], SR)
        assert v["f0_rmse_cents"] == pytest.approx(abs(c), abs=5.0), (c, v)
        assert v["f0_bias_cents"] == pytest.approx(c, abs=5.0), (c, v)
        assert v["f0_gpe"] < 0.05 and v["f0_frames"] > 250, (c, v)
    same = m.score(state, _speech(name), SR)
    assert same["f0_rmse_cents"] == 0.0 and same["f0_vde"] == 0.0 and same["f0_vuv_f1"] == 1.0
    assert same["f0_periodicity_rmse"] == 0.0


@pytest.mark.parametrize("tracker", TRACKERS)
def test_15_db_noise_scores_worse_than_30_db(tracker):
    # More noise, less periodicity and less reliable tracks (Boersma 1993: r = S/(S+N)).
    m = build_metrics(["f0"], options={"f0": {"tracker": tracker}})[0]
    for name in ("male", "female"):
        x = _speech(name)
        state = m.prepare(x, SR)
        v30, v15 = (m.score(state, _noisy(x, snr), SR) for snr in (30.0, 15.0))
        for col in ("f0_rmse_cents", "f0_vde", "f0_periodicity_rmse"):
            assert v15[col] > v30[col], (name, col, v30, v15)
        assert v15["f0_vuv_f1"] < v30["f0_vuv_f1"] and v15["f0_gpe"] >= v30["f0_gpe"]


@pytest.mark.parametrize("tracker", TRACKERS)
def test_tracks_are_clamped_to_the_search_range(tracker):
    # A 640 Hz tone tracked with fmax 600 Hz: every voiced value lies in [fmin, fmax].
    t = np.arange(SR) / SR
    x = (0.3 * np.sin(2 * np.pi * 640 * t)).astype(np.float32)
    m = build_metrics(["f0"], options={"f0": {"tracker": tracker, "fmax": 600.0}})[0]
    f0, voiced = m.track(x, SR)
    assert np.all((f0[voiced] >= 50.0) & (f0[voiced] <= 600.0))
    assert np.all(f0[~voiced] == 0.0)


@pytest.mark.skipif(not HAS_PRAAT, reason=PRAAT_REASON)
def test_pyin_agrees_with_praat_on_real_speech():
    # Praat (Boersma 1993) is the reference tracker of phoneticians: on frames both call voiced,
    # pYIN stays within a quarter tone for almost all frames and has no octave errors.
    pyin = build_metrics(["f0"])[0]
    praat = build_metrics(["f0"], options={"f0": {"tracker": "praat"}})[0]
    for name in ("male", "female"):
        x = _speech(name)
        a, va = praat.track(x, SR)
        b, vb = pyin.track(x, SR)
        both = va & vb
        cents = 1200 * np.log2(b[both] / a[both])
        assert both.sum() > 0.8 * min(va.sum(), vb.sum())
        assert np.mean(np.abs(cents) < 50) > 0.95 and np.max(np.abs(cents)) < 1200 * np.log2(1.2)
        assert np.mean(va != vb) < 0.1


def test_f0_error_of_a_100_cent_shift_on_a_harmonic_glide():
    # 100 cents = a frequency ratio of 2^(100/1200) (Ellis 1885 definition of the cent).
    sr = 22050
    n = 2 * sr
    f0 = 120.0 * 2.0 ** (np.arange(n) / sr)                # one-octave glide, 120 -> 240 Hz
    ref = (0.3 * harmonic_tone(f0, sr)).astype(np.float32)
    est = (0.3 * harmonic_tone(f0 * 2 ** (100 / 1200), sr)).astype(np.float32)
    m = build_metrics(["f0"])[0]
    v = m.score(m.prepare(ref, sr), est, sr)
    assert v["f0_rmse_cents"] == pytest.approx(100.0, abs=5.0)
    assert v["f0_bias_cents"] == pytest.approx(100.0, abs=5.0)
    assert v["f0_gpe"] == 0.0 and v["f0_vde"] < 0.05
    assert v["f0_frames"] > 0.9 * (n / round(0.010 * sr))


def test_octave_error_is_gross_and_kept_out_of_the_rmse():
    # GPE (Rabiner et al. 1976): one octave up is 100 % > 20 % off in every frame; those frames
    # are counted by f0_gpe and left out of the RMSE, which then has no frame (NaN).
    sr = 22050
    f0 = np.full(sr, 150.0)
    ref = (0.3 * harmonic_tone(f0, sr)).astype(np.float32)
    est = (0.3 * harmonic_tone(2 * f0, sr)).astype(np.float32)
    m = build_metrics(["f0"])[0]
    v = m.score(m.prepare(ref, sr), est, sr)
    assert v["f0_gpe"] == pytest.approx(1.0) and math.isnan(v["f0_rmse_cents"])


def test_noise_output_is_a_voicing_error():
    # White noise has no periodicity: frames voiced in the reference become voicing errors
    # (Nakatani et al. 2008 VDE) and misses (low F1; pYIN still calls about 12 % of white-noise
    # frames voiced, measured); its periodicity is far below speech's.
    x = _speech("female")
    noise = (0.1 * np.random.default_rng(3).standard_normal(x.size)).astype(np.float32)
    m = build_metrics(["f0"])[0]
    _, voiced = m.track(x, SR)
    v = m.score(m.prepare(x, SR), noise, SR)
    assert v["f0_vde"] > 0.8 * voiced.mean() and v["f0_vuv_f1"] < 0.3
    assert v["f0_periodicity_rmse"] > 0.3


def test_vuv_f1_and_vde_follow_their_definitions():
    # F1 = 2TP / (2TP + FP + FN) (van Rijsbergen 1979); VDE = share of frames whose decisions
    # differ (Nakatani et al. 2008). Worked example: TP 3, FP 1, FN 2, TN 4 over 10 frames.
    v_ref = np.array([1, 1, 1, 1, 1, 0, 0, 0, 0, 0], bool)
    v_est = np.array([1, 1, 1, 0, 0, 1, 0, 0, 0, 0], bool)
    f0 = np.full(10, 100.0)
    est_f0 = f0 * np.array([2 ** (10 / 1200), 2 ** (-20 / 1200), 1.5, 1, 1, 1, 1, 1, 1, 1])
    loud = np.ones(10, bool)
    per_ref, per_est = np.full(10, 0.9), np.full(10, 0.6)
    v = pitch_scores({"f0": f0, "voiced": v_ref, "periodicity": per_ref, "loud": loud},
                     {"f0": est_f0, "voiced": v_est, "periodicity": per_est})
    assert v["f0_vuv_f1"] == pytest.approx(6 / 9) and v["f0_vde"] == pytest.approx(0.3)
    assert v["f0_gpe"] == pytest.approx(1 / 3)                       # the 1.5x frame
    assert v["f0_rmse_cents"] == pytest.approx(math.sqrt((10 ** 2 + 20 ** 2) / 2))
    assert v["f0_bias_cents"] == pytest.approx(-5.0)
    assert v["f0_periodicity_rmse"] == pytest.approx(0.3) and v["f0_frames"] == 3


@pytest.mark.parametrize("hnr_db", [0.0, 10.0, 20.0])
def test_periodicity_estimates_the_harmonics_to_noise_ratio(hnr_db):
    # Boersma 1993: for a periodic signal plus white noise the normalised autocorrelation peak is
    # r = S/(S+N), i.e. HNR = 10·log10(r/(1−r)). Max-over-lags bias grows as r falls (0 dB: +0.03).
    t = np.arange(2 * SR) / SR
    for f0 in (100.0, 230.0):
        x = sum(np.sin(2 * np.pi * k * f0 * t + k) / k for k in range(1, 20) if k * f0 < 7000)
        noise = np.random.default_rng(0).standard_normal(x.size)
        x = x + noise * math.sqrt(np.mean(x ** 2) / 10 ** (hnr_db / 10))
        expected = 1 / (1 + 10 ** (-hnr_db / 10))
        got = np.median(periodicity(x, SR, 50.0, 600.0, 160)[10:-10])
        assert got == pytest.approx(expected, abs=0.04 if hnr_db == 0 else 0.01)
        if HAS_PRAAT:        # Praat's own harmonicity (To Harmonicity (ac), Boersma 1993)
            import parselmouth

            h = parselmouth.Sound(x, sampling_frequency=SR).to_harmonicity_ac(0.01, 50.0, 0.1, 4.5)
            hv = h.values[0][h.values[0] > -200]
            assert got == pytest.approx(np.median(10 ** (hv / 10) / (1 + 10 ** (hv / 10))),
                                        abs=0.01)


def test_praat_tracker_without_the_extra_is_a_config_error(monkeypatch):
    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name == "parselmouth" else real(name, *a))
    with pytest.raises(InputError, match="quality"):
        build_metrics(["f0"], options={"f0": {"tracker": "praat"}})
