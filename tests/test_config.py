"""Run configuration: a valid file parses; bad ones raise InputError naming the file and the field."""
from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from vocobench import cli
from vocobench.config import SECTIONS, load_config
from vocobench.errors import InputError
from vocobench.schedules import KINDS

BASE = """
[vocoder]
target = "external_vocoder.models:ShapedNoiseVocoder"

[testset]
path = "testset"

[sweep]
steps = [1, 4]
seeds = [0, 1]

[[sweep.schedule]]
name = "cos"
kind = "cosine"
"""


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "cfg.toml"
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


def _error(tmp_path: Path, text: str) -> InputError:
    path = _write(tmp_path, text)
    with pytest.raises(InputError) as e:
        load_config(path)
    assert str(path) in str(e.value)                 # the message names the file
    return e.value


def test_valid_config_parses(tmp_path):
    cfg = load_config(_write(tmp_path, BASE + '\n[timing]\nrepeats = 2\n'))
    assert cfg.steps == [1, 4] and cfg.seeds == [0, 1]
    assert [(s.name, s.kind) for s in cfg.schedules] == [("cos", "cosine")]
    assert cfg.testset == tmp_path / "testset"       # relative to the config's folder
    assert cfg.timing.repeats == 2 and cfg.timing.warmup == 1


def test_unknown_section(tmp_path):
    # a typo must not fall back to a default silently (common practice, no source)
    e = _error(tmp_path, BASE + "\n[sweeps]\nsteps = [2]\n")
    assert e.field == "sweeps"
    for sec in SECTIONS:
        assert sec in str(e)


def test_unknown_key(tmp_path):
    e = _error(tmp_path, BASE.replace("seeds = [0, 1]", "seeds = [0, 1]\nstep = [3]"))
    assert e.field == "sweep.step" and "steps" in str(e)


@pytest.mark.parametrize("steps", ["[0, 4]", "[-2]", "[1.5]", "[]", "4", "[2, 2]"])
def test_bad_steps(tmp_path, steps):
    # a step count is a positive integer number of denoising steps (Ho et al. 2020: t = 1..T)
    e = _error(tmp_path, BASE.replace("steps = [1, 4]", f"steps = {steps}"))
    assert e.field == "sweep.steps"


def test_bad_schedule_kind_lists_the_valid_ones(tmp_path):
    e = _error(tmp_path, BASE.replace('kind = "cosine"', 'kind = "cosin"'))
    assert e.field == "sweep.schedule.kind" and e.value == "cosin"
    for k in KINDS:
        assert k in str(e)


def test_bad_schedule_option(tmp_path):
    e = _error(tmp_path, BASE.replace('kind = "cosine"', 'kind = "cosine"\nbeta_end = 0.1'))
    assert e.field == "sweep.schedule.beta_end"


def test_malformed_toml(tmp_path):
    # TOML v1.0.0 (toml.io): a key/value pair needs '=' and a string must be closed
    e = _error(tmp_path, BASE + '\n[timing\nrepeats = 2\n')
    assert "malformed TOML" in str(e)
    e = _error(tmp_path, BASE.replace('"testset"', '"testset'))
    assert "malformed TOML" in str(e)


@pytest.mark.parametrize("edit, field", [
    (lambda s: s.replace('target = "external_vocoder.models:ShapedNoiseVocoder"', ""), "vocoder.target"),
    (lambda s: s.replace("external_vocoder.models:ShapedNoiseVocoder", "no_colon_here"), "vocoder.target"),
    (lambda s: s.replace("seeds = [0, 1]", "seeds = [-1]"), "sweep.seeds"),
    (lambda s: s + "\n[timing]\nrepeats = 0\n", "timing.repeats"),
    (lambda s: s + "\n[metrics]\nlength_mode = \"stretch\"\n", "metrics.length_mode"),
    (lambda s: s + "\n[output]\nsave_audio = \"some\"\n", "output.save_audio"),
    (lambda s: s + "\n[run]\nworkers = 0\n", "run.workers"),
])
def test_other_bad_values_name_their_field(tmp_path, edit, field):
    assert _error(tmp_path, edit(BASE)).field == field


def test_missing_file_and_cli_exit_code(tmp_path, capsys):
    with pytest.raises(InputError):
        load_config(tmp_path / "absent.toml")
    # the CLI turns InputError into one line on stderr and exit code 2 (vocobench.cli)
    bad = _write(tmp_path, BASE.replace("steps = [1, 4]", "steps = [0]"))
    assert cli.main(["run", str(bad), "--out", str(tmp_path / "out"), "-q"]) == 2
    err = capsys.readouterr().err
    assert "sweep.steps" in err and err.count("\n") == 1
    assert not (tmp_path / "out").exists()           # nothing is written for a bad config
