"""Spectral distances (lsd, mrstft, logmel_l1); the F0 error is in test_metrics_pitch.py."""
from __future__ import annotations

import math

import numpy as np
import pytest

from test_metrics_synth import degrade, speech_like
from vocobench.metrics import build_metrics
from vocobench.metrics.dsp import stft_power

SR = 22050
GAIN = 0.5


@pytest.fixture(scope="module")
def speech():
    return speech_like(SR, 2.0, seed=0, level=0.5)


@pytest.fixture(scope="module")
def noisy(speech):
    """Speech with a 30 dB white-noise floor: every STFT bin stays far above the floors/clamps
    of the metrics, so the gain identities below hold exactly."""
    return degrade(speech, SR, 30.0)


def _score(name, ref, est, sr=SR, options=None):
    m = build_metrics([name], options={name: options or {}})[0]
    return m.score(m.prepare(ref, sr), est, sr)


def test_stft_power_matches_librosa():
    # librosa.stft with center=True, reflect padding and a periodic Hann window is the reference.
    import librosa

    x = speech_like(SR, 0.5).astype(np.float64)
    for n_fft, hop, win in [(1024, 120, 600), (512, 50, 240), (2048, 512, 2048)]:
        ref = np.abs(librosa.stft(x, n_fft=n_fft, hop_length=hop, win_length=win, window="hann",
                                  center=True, pad_mode="reflect")) ** 2
        np.testing.assert_allclose(stft_power(x, n_fft, hop, win), ref.T, rtol=1e-9, atol=1e-12)


def test_lsd_of_a_gain_change(noisy):
    # Gray & Markel 1976 LSD: a uniform gain g shifts every log-power bin by 20·log10 g, so the
    # distance is |20·log10 g| dB (6.0206 dB for g = 0.5).
    v = _score("lsd", noisy, GAIN * noisy)["lsd"]
    assert v == pytest.approx(abs(20 * math.log10(GAIN)), abs=0.01)


def test_mrstft_of_a_gain_change(noisy):
    # Yamamoto et al. 2020: SC = ‖|S|−|Ŝ|‖_F/‖|S|‖_F = |1 − g| and the log-magnitude term
    # = |ln g| for Ŝ = g·S where the magnitude clamp is inactive.
    v = _score("mrstft", noisy, GAIN * noisy)
    assert v["mrstft_sc"] == pytest.approx(1 - GAIN, rel=1e-3)
    assert v["mrstft_mag"] == pytest.approx(abs(math.log(GAIN)), rel=2e-3)
    assert v["mrstft"] == pytest.approx(v["mrstft_sc"] + v["mrstft_mag"], rel=1e-12)


def test_mrstft_resolutions_are_recorded_and_configurable(speech):
    m = build_metrics(["mrstft"], options={"mrstft": {"resolutions": [[256, 64, 256]]}})[0]
    assert m.variant()["options"]["resolutions"] == [[256, 64, 256]]
    default = build_metrics(["mrstft"])[0].variant()["options"]["resolutions"]
    assert default == [[1024, 120, 600], [2048, 240, 1200], [512, 50, 240]]
    assert m.score(m.prepare(speech, SR), degrade(speech, SR, 10.0), SR)["mrstft"] > 0


def test_logmel_l1_equals_librosa_log_mel(speech, noisy):
    # HiFi-GAN V1 mel (n_fft 1024, hop 256, 80 Slaney mels, 0–8 kHz, magnitude, ln clamp 1e-5)
    # computed with librosa directly; reference value for the L1 distance.
    import librosa

    est = degrade(speech, SR, 15.0)

    def logmel(x):
        s = librosa.feature.melspectrogram(y=x.astype(np.float64), sr=SR, n_fft=1024,
                                           hop_length=256, win_length=1024, center=True,
                                           pad_mode="reflect", power=1.0, n_mels=80, fmin=0.0,
                                           fmax=8000.0)
        return np.log(np.maximum(s, 1e-5))

    expected = np.mean(np.abs(logmel(speech) - logmel(est)))
    assert _score("logmel_l1", speech, est)["logmel_l1"] == pytest.approx(expected, rel=1e-9)
    # a gain g shifts every log-mel value by ln g (definition of the logarithm)
    assert _score("logmel_l1", noisy, GAIN * noisy)["logmel_l1"] == \
        pytest.approx(abs(math.log(GAIN)), rel=2e-3)
