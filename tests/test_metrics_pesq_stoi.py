"""PESQ (pesq package, ITU-T P.862 / P.862.1 / P.862.2) and STOI / ESTOI (pystoi)."""
from __future__ import annotations

import math

import numpy as np
import pytest

from test_metrics_synth import degrade, speech_like
from vocobench.errors import MetricUnavailable
from vocobench.metrics import build_metrics

SR = 22050
RAW_PESQ_MAX = 4.5                     # ITU-T P.862: raw PESQ score tops out at 4.5


def _mapped(raw, a, b, c, d):
    return a + b / (1 + math.exp(c * raw + d))


# ITU-T P.862.2 (WB) and P.862.1 (NB) MOS-LQO mappings, written out here independently of the
# package constants: the ceilings are 4.644 (WB) and 4.549 (NB).
WB_CEILING = _mapped(RAW_PESQ_MAX, 0.999, 4.0, -1.3669, 3.8224)
NB_CEILING = _mapped(RAW_PESQ_MAX, 0.999, 4.0, -1.4945, 4.6607)


@pytest.fixture(scope="module")
def speech():
    return speech_like(SR, 3.0, seed=0)


def test_mapping_ceilings_are_the_published_values():
    # P.862.2 / P.862.1: an undistorted input maps to 4.644 / 4.549.
    assert WB_CEILING == pytest.approx(4.644, abs=5e-4)
    assert NB_CEILING == pytest.approx(4.549, abs=5e-4)


@pytest.mark.parametrize("name, ceiling", [("pesq_wb", WB_CEILING), ("pesq_nb", NB_CEILING)])
def test_pesq_identity_hits_the_mapping_ceiling(speech, name, ceiling):
    # PESQ(x, x) = ceiling (an utterance was detected, otherwise MetricUnavailable is raised).
    m = build_metrics([name])[0]
    assert m.score(m.prepare(speech, SR), speech, SR)[name] == pytest.approx(ceiling, abs=2e-3)


@pytest.mark.parametrize("name", ["pesq_wb", "pesq_nb"])
def test_pesq_falls_with_added_noise(speech, name):
    # common practice, no source: PESQ decreases monotonically as white noise is added.
    m = build_metrics([name])[0]
    state = m.prepare(speech, SR)
    scores = [m.score(state, degrade(speech, SR, snr), SR)[name] for snr in (40, 30, 20, 10, 0)]
    assert all(a > b for a, b in zip(scores, scores[1:])), scores
    assert 1.0 <= scores[-1] and scores[0] <= 4.65


def test_pesq_native_rate_equals_hand_resampled(speech):
    # Same resampler (libsoxr VHQ) by hand to 16 kHz, then pesq.pesq directly.
    import pesq
    import soxr

    est = degrade(speech, SR, 15.0)
    m = build_metrics(["pesq_wb"])[0]
    at_native = m.score(m.prepare(speech, SR), est, SR)["pesq_wb"]
    r16 = soxr.resample(speech.astype(np.float64), SR, 16000, quality="VHQ")
    e16 = soxr.resample(est.astype(np.float64), SR, 16000, quality="VHQ")
    assert at_native == pytest.approx(pesq.pesq(16000, r16, e16, "wb"), abs=1e-6)
    m16 = build_metrics(["pesq_wb"])[0]
    assert m16.score(m16.prepare(r16, 16000), e16, 16000)["pesq_wb"] == \
        pytest.approx(at_native, abs=1e-6)


def test_pesq_resample_poly_option_is_close_to_soxr(speech):
    # Two high-quality resamplers should agree to within a few hundredths of a MOS point
    # (common practice, no source).
    est = degrade(speech, SR, 15.0)
    a, b = (build_metrics(["pesq_wb"], options={"pesq_wb": {"resampler": r}})[0]
            for r in ("soxr_vhq", "resample_poly"))
    va, vb = (m.score(m.prepare(speech, SR), est, SR)["pesq_wb"] for m in (a, b))
    assert abs(va - vb) < 0.05
    assert a.variant()["resampler"] != b.variant()["resampler"]


def test_pesq_unscorable_inputs_raise_metric_unavailable(speech):
    m = build_metrics(["pesq_wb"])[0]
    short = speech[: int(0.2 * SR)]      # pesq: buffer must be at least 1/4 s
    with pytest.raises(MetricUnavailable, match="1/4 of a second"):
        m.score(m.prepare(short, SR), short, SR)
    with pytest.raises(MetricUnavailable, match="silent"):
        m.score(m.prepare(speech, SR), np.zeros_like(speech), SR)


@pytest.mark.parametrize("name, extended", [("stoi", False), ("estoi", True)])
def test_stoi_equals_pystoi_direct(speech, name, extended):
    # pystoi called directly on the same arrays at 22.05 kHz is the reference.
    from pystoi import stoi

    m = build_metrics([name])[0]
    state = m.prepare(speech, SR)
    for snr in (30.0, 5.0, -5.0):
        est = degrade(speech, SR, snr)
        assert m.score(state, est, SR)[name] == pytest.approx(stoi(speech, est, SR, extended),
                                                              abs=1e-12)


def test_stoi_too_short_is_unavailable(speech):
    m = build_metrics(["stoi"])[0]
    short = speech[: int(0.3 * SR)]
    with pytest.raises(MetricUnavailable):
        m.score(m.prepare(short, SR), short, SR)


def test_pesq_wb_on_8_khz_audio_carries_a_caution():
    # P.862.2 is wide-band (16 kHz): 8 kHz audio is upsampled and has nothing above 4 kHz, which
    # the model scores as a band limitation. The caution goes into variant() (the manifest) and is
    # warned once; at 16 kHz and above there is none.
    m = build_metrics(["pesq_wb"])[0]
    assert "upsampled" in m.variant(8000)["caution"]
    assert "caution" not in m.variant(16000) and "caution" not in m.variant(22050)
    x = speech_like(8000, 1.0)
    with pytest.warns(UserWarning, match="upsampled to 16000 Hz"):
        m.prepare(x, 8000)
    assert "caution" not in build_metrics(["pesq_nb"])[0].variant(8000)
