"""MelFrontEnd against librosa's own mel spectrogram, computed directly here with the same parameters."""
from __future__ import annotations

import dataclasses

import librosa
import numpy as np
import pytest
from conftest import speechlike

from vocobench.errors import InputError
from vocobench.frontend import MelFrontEnd

CASES = {
    # 22.05 kHz, 80 Slaney mels to 8 kHz, magnitude, ln (a common vocoder set-up; common practice)
    "slaney-mag-ln": dict(sample_rate=22050, n_fft=1024, win_length=1024, hop_length=256, n_mels=80,
                          fmin=0.0, fmax=8000.0, mel_scale="slaney", mel_norm="slaney", power=1.0,
                          log="ln"),
    "slaney-pow-log10": dict(sample_rate=16000, n_fft=512, win_length=400, hop_length=160, n_mels=64,
                             fmin=20.0, fmax=None, mel_scale="slaney", mel_norm="slaney", power=2.0,
                             log="log10", floor=1e-10),
    # 24 kHz, n_fft 1200, hop 300, 100 HTK mels, log10 (the external vocoder's front-end)
    "htk-mag-log10": dict(sample_rate=24000, n_fft=1200, win_length=1200, hop_length=300, n_mels=100,
                          fmin=0.0, fmax=12000.0, mel_scale="htk", mel_norm=None, power=1.0,
                          log="log10"),
    "htk-pow-ln-nocenter": dict(sample_rate=16000, n_fft=1024, win_length=1024, hop_length=256,
                                n_mels=40, fmin=50.0, fmax=7600.0, mel_scale="htk", mel_norm=None,
                                power=2.0, log="ln", center=False),
}
LOGS = {"ln": np.log, "log10": np.log10}


@pytest.mark.parametrize("name", sorted(CASES))
def test_matches_librosa_melspectrogram(name):
    p = {"floor": 1e-5, "center": True, **CASES[name]}
    fe = MelFrontEnd(**p)
    y = speechlike(p["sample_rate"], 0.6, seed=3)
    # librosa.feature.melspectrogram (librosa 0.11 reference implementation), Hann window, reflect
    # padding when centred (the padding vocoder front-ends use; common practice, no source)
    mel = librosa.feature.melspectrogram(
        y=y, sr=p["sample_rate"], n_fft=p["n_fft"], hop_length=p["hop_length"],
        win_length=p["win_length"], window="hann", center=p["center"], pad_mode="reflect",
        power=p["power"], n_mels=p["n_mels"], fmin=p["fmin"], fmax=p["fmax"],
        htk=p["mel_scale"] == "htk", norm=p["mel_norm"])
    want = LOGS[p["log"]](np.maximum(mel, p["floor"]))
    got = fe(y)
    assert got.shape == want.shape == (p["n_mels"], fe.n_frames(len(y)))
    assert got.dtype == np.float32
    np.testing.assert_allclose(got, want, rtol=0, atol=2e-5)
    # the features are not trivially floored: most of the range is above the floor
    assert np.mean(want > LOGS[p["log"]](p["floor"]) + 1) > 0.5
    # the inverse of the log (and floor) gives back librosa's mel energies where above the floor
    lin = fe.to_linear_mel(got)
    above = mel > 10 * p["floor"]
    np.testing.assert_allclose(lin[above], mel[above], rtol=1e-4)


def test_add_floor_and_normalisation():
    p = CASES["htk-mag-log10"]
    fe = MelFrontEnd(**p, floor_mode="add", normalize=(-2.0, 3.0))
    y = speechlike(p["sample_rate"], 0.4, seed=1)
    mel = librosa.feature.melspectrogram(y=y, sr=24000, n_fft=1200, hop_length=300, win_length=1200,
                                         window="hann", center=True, pad_mode="reflect", power=1.0,
                                         n_mels=100, fmin=0.0, fmax=12000.0, htk=True, norm=None)
    want = (np.log10(mel + 1e-5) - (-2.0)) / 3.0
    np.testing.assert_allclose(fe(y), want, rtol=0, atol=2e-5)
    np.testing.assert_allclose(fe.to_linear_mel(fe(y)), mel, rtol=2e-4, atol=1e-6)


def test_frame_count_and_expected_length():
    # librosa.stft with center=True pads n_fft/2 each side: 1 + ⌊n/hop⌋ frames (librosa docs)
    fe = MelFrontEnd()
    for n in (22050, 22051, 256 * 40):
        frames = librosa.stft(np.zeros(n, np.float32), n_fft=1024, hop_length=256).shape[1]
        assert fe.n_frames(n) == frames
    assert fe.expected_samples(40) == 40 * 256


@pytest.mark.parametrize("field, value", [
    ("sample_rate", 0), ("sample_rate", 22050.5), ("n_fft", -1), ("hop_length", 0),
    ("n_mels", True), ("win_length", 2048), ("fmin", -1.0), ("fmax", 12000.0), ("fmin", 11025.0),
    ("mel_scale", "bark"), ("mel_norm", "l2"), ("power", 3.0), ("log", "log7"), ("floor", 0.0),
    ("floor", float("nan")), ("floor_mode", "max"), ("fmin", "low"), ("fmax", "8k"), ("floor", None),
    ("normalize", (0.0, 0.0)), ("normalize", (1.0,)), ("normalize", (float("nan"), 1.0)),
])
def test_bad_parameter_names_the_field(field, value):
    # every bad parameter raises InputError naming the field (vocobench's input-error contract)
    with pytest.raises(InputError) as e:
        MelFrontEnd(**{field: value})
    assert e.value.field == field
    assert f"'{field}'" in str(e.value)
    with pytest.raises(InputError) as e:                 # the same through a plug-in's dict
        MelFrontEnd.from_dict({field: value}, source="my_vocoder")
    assert e.value.field == field and str(e.value).startswith("my_vocoder")


def test_non_numeric_normalize_in_a_dict_is_named():
    with pytest.raises(InputError) as e:
        MelFrontEnd.from_dict({"normalize": ["a", "b"]}, source="my_vocoder")
    assert e.value.field == "normalize"


def test_unknown_parameter_is_named():
    with pytest.raises(InputError) as e:
        MelFrontEnd.from_dict({"hop_size": 256}, source="my_vocoder")
    assert e.value.field == "hop_size" and "hop_length" in str(e.value)


def test_dict_round_trip_and_fingerprint():
    fe = MelFrontEnd(**CASES["htk-mag-log10"])
    assert MelFrontEnd.from_dict(fe.to_dict()) == fe
    other = dataclasses.replace(fe, hop_length=240)
    assert other.fingerprint() != fe.fingerprint()
    assert fe.differences(other) == {"hop_length": (300, 240)}


@pytest.mark.parametrize("center", [True, False])
def test_numpy_stft_and_mel_bank_equal_librosa_bit_for_bit(center):
    # librosa 0.11 reference implementation: the front-end computes the same numbers without
    # importing librosa (whose import compiles numba helpers), so features and scores are unchanged.
    from vocobench.metrics.melbank import mel, stft_magnitude

    rng = np.random.default_rng(3)
    y = (0.1 * rng.standard_normal(22050)).astype(np.float32)
    ref = np.abs(librosa.stft(y, n_fft=1024, hop_length=256, win_length=800, window="hann",
                              center=center, pad_mode="reflect"))
    assert np.array_equal(stft_magnitude(y, 1024, 256, 800, center), ref)
    for kw in ({"fmin": 0.0, "fmax": 8000.0}, {"fmin": 30.0, "fmax": None, "htk": True, "norm": None}):
        lib = librosa.filters.mel(sr=22050, n_fft=1024, n_mels=80, **kw)
        assert np.array_equal(mel(22050, 1024, 80, **kw), lib)


def test_default_pipeline_does_not_import_librosa():
    # importing librosa compiles numba helpers (about 25 CPU-s on a first run): the front-end and
    # the default metrics must not need it
    import subprocess
    import sys

    code = ("import sys, numpy as np\n"
            "from vocobench.analytic import DEMO_FRONTEND\n"
            "from vocobench.metrics import build_metrics\n"
            "y = np.sin(np.arange(22050) * 0.05).astype(np.float32)\n"
            "f = DEMO_FRONTEND(y)\n"
            "for m in build_metrics(['mcd', 'pesq_wb', 'stoi', 'logmel_l1'], {}):\n"
            "    m.score(m.prepare(y, 22050), 0.9 * y, 22050)\n"
            "print('librosa' in sys.modules)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
