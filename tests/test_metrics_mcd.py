"""Mel-cepstral distortion against SPTK (via pysptk), the Kubichek formula and librosa MFCCs."""
from __future__ import annotations

import math
import sys
import types
from pathlib import Path

import numpy as np
import pytest
from scipy.signal import get_window, lfilter

from test_metrics_synth import degrade, speech_like
from vocobench.metrics import build_metrics
from vocobench.metrics.warped_cepstrum import (SPTK_MANUAL_ALPHA, MelCepstralAnalyzer,
                                               mcd_from_cepstra, mel_alpha)

SR = 22050


def _pysptk():
    # pysptk 1.0.1 imports pkg_resources (only for its example-audio path); setuptools >= 81 no
    # longer ships it, so give it an empty stand-in when it is missing.
    try:
        import pkg_resources  # noqa: F401
    except ImportError:
        sys.modules.setdefault("pkg_resources", types.ModuleType("pkg_resources"))
    return pytest.importorskip("pysptk")


def _frames(x, length, hop):
    n = 1 + (x.size - length) // hop
    return np.stack([x[i * hop: i * hop + length] for i in range(n)]).astype(np.float64)


def _sptk_mcd(ref, est, sr, order=24, silence_db=-40.0):
    """The documented computation, done with SPTK's mcep (pysptk) instead of vocobench."""
    pysptk = _pysptk()
    length = 2 ** round(math.log2(0.025 * sr))       # nearest power of two to 25 ms
    hop = round(0.010 * sr)                          # 10 ms
    alpha = pysptk.util.mcepalpha(sr)
    fr, fe = _frames(ref, length, hop), _frames(est, length, hop)
    energy = 10 * np.log10(np.sum(fr ** 2, axis=1) + 1e-20)
    keep = energy >= energy.max() + silence_db
    win = np.blackman(length)                        # symmetric, as SPTK `window -w 0`
    cr = np.array([pysptk.sptk.mcep(f * win, order, alpha, etype=1, eps=1e-10) for f in fr[keep]])
    ce = np.array([pysptk.sptk.mcep(f * win, order, alpha, etype=1, eps=1e-10) for f in fe[keep]])
    d = cr[:, 1:] - ce[:, 1:]
    return float(np.mean(10 / np.log(10) * np.sqrt(2 * np.sum(d * d, axis=1))))


def test_kubichek_formula_worked_example():
    # Kubichek 1993: MCD = (10/ln10)·sqrt(2·Σ(c_d − ĉ_d)²); one coefficient off by δ gives
    # (10/ln10)·√2·δ dB.
    c = np.random.default_rng(0).standard_normal((5, 24))
    for delta in (0.01, 0.1, 0.5):
        off = c.copy()
        off[:, 7] += delta
        expected = 10 / math.log(10) * math.sqrt(2) * delta
        np.testing.assert_allclose(mcd_from_cepstra(c, off), expected, rtol=1e-12)
    assert mcd_from_cepstra(c, c).max() == 0.0


@pytest.mark.parametrize("sr", [8000, 16000, 22050, 24000, 44100, 48000])
def test_alpha_matches_sptk_helper(sr):
    # pysptk.util.mcepalpha (port of SPTK's mcep_alpha_calc) is the reference.
    assert mel_alpha(sr) == pytest.approx(float(_pysptk().util.mcepalpha(sr)), abs=1e-9)
    if sr in SPTK_MANUAL_ALPHA:   # SPTK manual table (from memory): two-decimal values
        assert mel_alpha(sr) == pytest.approx(SPTK_MANUAL_ALPHA[sr], abs=0.015)


def test_analysis_matches_sptk_mcep_per_frame():
    # SPTK mcep is the reference implementation of mel-cepstral analysis (Tokuda et al. 1994).
    pysptk = _pysptk()
    x = speech_like(16000, 1.0, seed=5).astype(np.float64)
    length, alpha = 512, float(pysptk.util.mcepalpha(16000))
    frames = _frames(x, length, 160)
    energy = 10 * np.log10(np.sum(frames ** 2, axis=1) + 1e-20)
    frames = frames[energy >= energy.max() - 40] * np.blackman(length)
    ours = MelCepstralAnalyzer(length, 24, alpha, floor=1e-10).analyze(frames)
    ref = np.array([pysptk.sptk.mcep(f, 24, alpha, etype=1, eps=1e-10) for f in frames])
    # per-frame cepstral distance between the two analyses, tiny against MCDs of several dB
    assert mcd_from_cepstra(ours[:, 1:], ref[:, 1:]).max() < 0.05


@pytest.mark.parametrize("case", ["noise20", "noise35", "tilt", "other_voice"])
def test_mcd_matches_pysptk_within_0p1_db(case):
    ref = speech_like(SR, 1.5, seed=0)
    est = {"noise20": lambda: degrade(ref, SR, 20.0),
           "noise35": lambda: degrade(ref, SR, 35.0),
           "tilt": lambda: lfilter([1.0, -0.6], [1.0], ref).astype(np.float32),
           "other_voice": lambda: speech_like(SR, 1.5, seed=1)}[case]()
    m = build_metrics(["mcd"])[0]
    ours = m.score(m.prepare(ref, SR), est, SR)["mcd"]
    expected = _sptk_mcd(ref, est, SR)
    assert expected > 0.5                      # the case really is distorted
    assert ours == pytest.approx(expected, abs=0.1)


def test_mcd_identical_is_zero_and_grows_with_noise():
    ref = speech_like(SR, 2.0)
    m = build_metrics(["mcd"])[0]
    state = m.prepare(ref, SR)
    assert m.score(state, ref, SR)["mcd"] == 0.0
    # common practice, no source: more additive noise, larger spectral distortion
    vals = [m.score(state, degrade(ref, SR, snr), SR)["mcd"] for snr in (40, 25, 10)]
    assert vals[0] < vals[1] < vals[2]


def test_dtw_recovers_a_frame_shift():
    # DTW (Sakoe & Chiba 1978) aligns identical frames shifted in time at zero cost; the
    # frame-by-frame comparison does not.
    ref = speech_like(SR, 2.0)
    hop = round(0.010 * SR)
    est = np.concatenate([np.zeros(5 * hop, np.float32), ref[:-5 * hop]])
    plain = build_metrics(["mcd"])[0]
    dtw = build_metrics(["mcd"], options={"mcd": {"alignment": "dtw"}})[0]
    v_plain = plain.score(plain.prepare(ref, SR), est, SR)
    v_dtw = dtw.score(dtw.prepare(ref, SR), est, SR)
    assert v_dtw["mcd"] < 0.1 * v_plain["mcd"]
    n_keep = v_plain["mcd_frames"]
    assert v_dtw["mcd_frames"] >= n_keep - 5      # path spans (nearly) all non-silent frames


def _speech_file(name="male"):
    import soundfile as sf

    x, sr = sf.read(str(Path(__file__).resolve().parent / "data" / f"speech_{name}.wav"),
                    dtype="float64")
    return x, sr


def _sptk_mcd_dtw(ref, est, sr, order=24, silence_db=-40.0):
    """DTW-aligned MCD with SPTK's mcep (pysptk) on all non-silent frames of both signals,
    aligned by dynamic time warping (Sakoe & Chiba 1978; librosa.sequence.dtw on Euclidean
    cepstral distances), mean Kubichek distance along the path."""
    import librosa
    from scipy.spatial.distance import cdist

    pysptk = _pysptk()
    length, hop = 2 ** round(math.log2(0.025 * sr)), round(0.010 * sr)
    alpha = pysptk.util.mcepalpha(sr)
    fr, fe = _frames(ref, length, hop), _frames(est, length, hop)
    threshold = (10 * np.log10(np.sum(fr ** 2, axis=1) + 1e-20)).max() + silence_db
    win = np.blackman(length)

    def cep(frames):
        keep = 10 * np.log10(np.sum(frames ** 2, axis=1) + 1e-20) >= threshold
        return np.array([pysptk.sptk.mcep(f * win, order, alpha, etype=1, eps=1e-10)
                         for f in frames[keep]])[:, 1:]

    cr, ce = cep(fr), cep(fe)
    _, path = librosa.sequence.dtw(C=cdist(cr, ce), backtrack=True)
    return float(np.mean(mcd_from_cepstra(cr[path[:, 0]], ce[path[:, 1]])))


def test_dtw_scores_a_shorter_estimate_against_the_whole_reference():
    # Review defect: the Python API cut the reference to a shorter estimate before DTW, dropping
    # the reference's tail (our pair: 8.222 dB instead of 7.911). DTW aligns sequences of any
    # length, so the whole reference must be used: the value equals the run path with the "pad"
    # length policy (estimate zero-padded, silent padding frames dropped) and SPTK + DTW.
    import librosa

    x, sr = _speech_file("male")
    est = librosa.effects.time_stretch(x, rate=1.15)             # 1/1.15 of the duration
    m = build_metrics(["mcd"], options={"mcd": {"alignment": "dtw"}})[0]
    state = m.prepare(x, sr)
    short = m.score(state, est, sr)
    padded = m.score(state, np.concatenate([est, np.zeros(x.size - est.size)]), sr)
    assert short == padded
    assert short["mcd"] == pytest.approx(_sptk_mcd_dtw(x, est, sr), abs=0.01)
    cut = m.score(m.prepare(x[: est.size], sr), est, sr)["mcd"]
    assert abs(cut - short["mcd"]) > 0.1                          # the old, cut-reference value
    longer = m.score(state, np.concatenate([x, np.zeros(1000)]), sr)   # longer is scored too
    assert longer["mcd"] == pytest.approx(0.0, abs=1e-9)


def test_relative_floor_makes_mcd_level_independent():
    # The periodogram floor (SPTK mcep -e 1e-10) fills empty bands of a band-limited output; at
    # lower levels it fills them relatively higher, so the absolute floor gives a smaller MCD for
    # the same pair played quieter (measured: 29.2 / 21.8 / 14.8 dB at 0 / -20 / -40 dB peak).
    # With floor = "relative" the floor scales with the reference's squared peak: a common gain
    # of both signals leaves every cepstrum but c0 unchanged (log of a scaled spectrum), so MCD
    # is the same at every level, and equals the SPTK-faithful value at a full-scale peak.
    from scipy.signal import butter, sosfiltfilt

    x, sr = _speech_file("male")
    est = sosfiltfilt(butter(12, 3000, fs=sr, output="sos"), x)
    values = {}
    for floor in ("absolute", "relative"):
        m = build_metrics(["mcd"], options={"mcd": {"floor": floor}})[0]
        values[floor] = []
        for db in (0.0, -20.0, -40.0):
            g = 10 ** (db / 20) / np.max(np.abs(x))
            values[floor].append(m.score(m.prepare(g * x, sr), g * est, sr)["mcd"])
    a, r = values["absolute"], values["relative"]
    assert a[0] > a[1] + 3 > a[2] + 6                              # level-dependent
    assert r[1] == pytest.approx(r[0], abs=1e-6) and r[2] == pytest.approx(r[0], abs=1e-6)
    assert r[0] == pytest.approx(a[0], abs=1e-9)


def test_mcd_mfcc_equals_librosa_mfcc_kubichek():
    # Reference: librosa.feature.melspectrogram + librosa.feature.mfcc called directly, with
    # the documented settings (Hann 512 = nearest power of two to 25 ms, hop 10 ms, 40 mels,
    # 13 MFCCs, dB without top_db clipping), scaled by ln(10)/20 (dB -> ln amplitude) and
    # sqrt(2/40) (orthonormal DCT-II -> (2/N)-normalised cosine series), Kubichek 1993 on c1..c12.
    import librosa

    ref, est = speech_like(SR, 2.0), degrade(speech_like(SR, 2.0), SR, 20.0)
    m = build_metrics(["mcd_mfcc"])[0]
    ours = m.score(m.prepare(ref, SR), est, SR)

    def mfcc(x):
        s = librosa.feature.melspectrogram(y=x.astype(np.float64), sr=SR, n_fft=512,
                                           hop_length=220, center=False, n_mels=40, power=2.0)
        db = librosa.power_to_db(s, ref=1.0, amin=1e-10, top_db=None)
        return librosa.feature.mfcc(S=db, n_mfcc=13).T * (math.log(10) / 20) * math.sqrt(2 / 40)

    fr = _frames(ref, 512, 220)
    energy = 10 * np.log10(np.sum(fr ** 2, axis=1) + 1e-20)
    keep = energy >= energy.max() - 40
    d = (mfcc(ref)[keep] - mfcc(est)[keep])[:, 1:]
    expected = np.mean(10 / np.log(10) * np.sqrt(2 * np.sum(d * d, axis=1)))
    assert ours["mcd_mfcc"] == pytest.approx(expected, rel=1e-6)
    assert ours["mcd_mfcc_frames"] == keep.sum()


def test_window_is_sptk_blackman():
    # SPTK `window -w 0` Blackman: 0.42 − 0.5cos(2πn/(L−1)) + 0.08cos(4πn/(L−1)) (symmetric).
    n = np.arange(512)
    w = 0.42 - 0.5 * np.cos(2 * np.pi * n / 511) + 0.08 * np.cos(4 * np.pi * n / 511)
    np.testing.assert_allclose(get_window("blackman", 512, fftbins=False), w, atol=1e-12)


def test_mfcc_rescaling_gives_one_sided_cosine_coefficients():
    # scipy.fft.dct type II (unnormalised) is y_k = 2·Σ_n x_n cos(πk(2n+1)/2N); the one-sided
    # cosine-series coefficient is y_k / N. librosa's orthonormal MFCC times √(2/N) must equal it
    # for k >= 1 (the convention documented for mcd_mfcc).
    import librosa
    from scipy.fft import dct

    db = np.random.default_rng(0).standard_normal((40, 7))
    ortho = librosa.feature.mfcc(S=db, n_mfcc=13)
    np.testing.assert_allclose((ortho * math.sqrt(2 / 40))[1:], (dct(db, type=2, axis=0) / 40)[1:13],
                               rtol=1e-10, atol=1e-12)
