"""The contract check (``vocobench check``) on vocoders that each break one rule, and on correct ones.

The rules come from the plug-in contract in vocobench.contracts (1-D float waveform of about
frames × hop samples, all randomness from the generator passed in, front-end at the vocoder's rate).
"""
from __future__ import annotations

import pytest
from conftest import TESTS_DIR, run_vocobench
from external_vocoder import FrameGainDenoiser, ShapedNoiseVocoder, faulty

from vocobench import cli
from vocobench.analytic import AnalyticDenoiser
from vocobench.check import check_object, check_target


def _failed(findings) -> list[str]:
    return [f.what for f in findings if not f.ok]


@pytest.mark.parametrize("obj", [faulty.CorrectVocoder(), ShapedNoiseVocoder(), FrameGainDenoiser(),
                                 AnalyticDenoiser({"sample_rate": 8000, "n_fft": 256, "win_length": 256,
                                                   "hop_length": 64, "n_mels": 20, "fmax": 4000.0})],
                         ids=["correct-vocoder", "external-vocoder", "external-denoiser", "analytic"])
def test_correct_plugins_pass_every_check(obj):
    findings = check_object(obj, type(obj).__name__)
    assert _failed(findings) == [], [str(f) for f in findings]
    # every sampler the plug-in offers was exercised for length, finiteness and both seed checks
    for what in ("output length", "finite samples", "fixed seed reproducible", "seed used"):
        assert sum(what in f.what for f in findings) >= 1


@pytest.mark.parametrize("cls, violation", [
    (faulty.WrongLengthVocoder, "output length"),           # about frames × hop samples
    (faulty.EmptyVocoder, "output length"),                 # zero samples is a length, too
    (faulty.NaNVocoder, "finite samples"),                  # NaN is not audio
    (faulty.OwnSeedVocoder, "seed used"),                   # ignores the generator given
    (faulty.GlobalRandomVocoder, "fixed seed reproducible"),  # numpy's global random state
    (faulty.RateMismatchVocoder, "sample rate"),            # front-end at another rate
    (faulty.TwoDimensionalVocoder, "output shape"),         # (2, n) instead of (n,)
    (faulty.BatchMixingDenoiser, "batch-aware"),            # ε̂ of one item depends on the others
    (faulty.WrongShapeDenoiser, "predict_noise output shape"),
])
def test_each_violation_is_reported(cls, violation):
    findings = check_object(cls(), cls.__name__)
    failed = _failed(findings)
    assert any(violation in w for w in failed), [str(f) for f in findings]
    for f in findings:
        if not f.ok:
            assert f.detail, f"a failure must explain itself: {f}"


def test_missing_attributes_and_bad_target_are_findings():
    class NoRate:
        frontend = faulty.FRONTEND_16K

        def __call__(self, features, schedule, rng):
            return features

    assert _failed(check_object(NoRate())) == ["declared attributes"]
    assert _failed(check_target("external_vocoder.faulty:NoSuchThing", search_path=[TESTS_DIR])) == ["load"]


def test_exit_codes(tmp_path, capsys):
    # the CLI's exit codes (vocobench.cli): 0 when the contract holds, 1 on a violation, 2 on
    # unusable input. One real subprocess, so `python -m vocobench` and its exit status are exercised.
    bad = run_vocobench("check", "external_vocoder.faulty:GlobalRandomVocoder", "--search-path",
                        str(TESTS_DIR), cwd=tmp_path)
    assert bad.returncode == 1, bad.stdout + bad.stderr
    assert "[FAIL]" in bad.stdout and "fixed seed reproducible" in bad.stdout
    assert "1 violation(s)" in bad.stdout
    # in-process, same entry point
    assert cli.main(["check", "external_vocoder.faulty:CorrectVocoder", "--search-path", str(TESTS_DIR)]) == 0
    assert "contract holds" in capsys.readouterr().out
    assert cli.main(["check", "external_vocoder.faulty:NaNVocoder", "--search-path", str(TESTS_DIR)]) == 1
    assert cli.main(["check"]) == 2
    capsys.readouterr()
