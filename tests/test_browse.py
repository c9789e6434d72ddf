"""`vocobench show`: per configuration, per utterance, worst utterances, filters and formats.

The run is tests/test_report_fixture.py; every expected value below is worked out by hand from
its construction (seeds 0 and 1 store base ∓ 0.01, so the seed average is the base value; MCD is
lower-is-better). JSON is read back with the standard library's json, CSV with csv.
"""
from __future__ import annotations

import csv
import io
import json

import pytest

from test_report_fixture import OFFSETS, REF_MCD, make_run

from vocobench.cli import main

# the fixture's 4 utterances need the lowered evidence bars of tests/test_report.py (FAST) for a
# recommendation to be named: min_items 4, confidence 0.9 (2^-4 ≤ 0.1)
DECIDE = {"margins": {"mcd_db": 0.5, "pesq_wb": 0.1}, "rtf_budget": 0.2, "resamples": 300,
          "min_items": 4, "confidence": 0.9}


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    return make_run(tmp_path_factory.mktemp("show"), decide=DECIDE)


@pytest.fixture
def show(capsys, monkeypatch, run_dir):
    def call(*args, columns="120"):
        monkeypatch.setenv("COLUMNS", columns)
        rc = main(["show", str(run_dir), *args])
        out, err = capsys.readouterr()
        return rc, out, err

    return call


def _mcd(config, k):
    return REF_MCD[k] + OFFSETS[config][0][k]


def test_worst_utterances_at_a_step_count(show):
    # Hand: linear/ddim/8 is the only 8-step configuration; its MCD per utterance is
    # REF_MCD + offsets = 3.6, 3.9, 4.3, 4.4, so the worst (highest) first: u4, u3, u2, u1; the
    # reference (most steps, first in grid) is linear/ddim/64, so the differences are the offsets.
    rc, out, _ = show("--worst", "mcd_db", "--steps", "8", "--format", "json")
    assert rc == 0
    doc = json.loads(out)
    assert doc["view"] == "worst" and doc["reference"] == "linear/ddim/64"
    rows = doc["rows"]
    assert [r["utt_id"] for r in rows] == ["u4", "u3", "u2", "u1"]
    assert [r["rank"] for r in rows] == [1, 2, 3, 4]
    cfg = ("linear", "ddim", 8)
    assert [r["value"] for r in rows] == pytest.approx([_mcd(cfg, k) for k in (3, 2, 1, 0)])
    assert [r["diff_vs_reference"] for r in rows] == pytest.approx([0.8, 0.9, 0.7, 0.6])
    rc, text, _ = show("--worst", "mcd_db", "--steps", "8", "--top", "2")
    assert rc == 0 and text.index(" u4 ") < text.index(" u3 ") and " u2 " not in text


def test_worst_is_direction_aware(show):
    # Hand: PESQ is higher-is-better; for linear/ddpm/4 every utterance is REF_PESQ + 0.2, so the
    # worst is the lowest reference utterance, u1 (3.7), then u2 (3.8); u4 has one failed seed
    # and its other seed (3.8 + 0.2 − 0.01 = 3.99) is still the best.
    rc, out, _ = show("--worst", "pesq_wb", "--config", "linear/ddpm/4",
                       "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert [r["utt_id"] for r in rows] == ["u1", "u2", "u3", "u4"]
    assert float(rows[0]["value"]) == pytest.approx(3.7)
    assert float(rows[-1]["value"]) == pytest.approx(3.99)
    assert rows[-1]["seeds_failed"] == "1"


def test_per_utterance_view_and_filters(show):
    # Hand: tags are speaker = s<k>&"q"; s1&"q" is u2. linear/* at 64 steps is linear/ddim/64.
    rc, out, _ = show("--by", "utt", "--tag", 'speaker=s1&"q"', "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert {r["utt_id"] for r in rows} == {"u2"} and len(rows) == len(OFFSETS)
    rc, out, _ = show("--by", "utt", "--utt", "u[12]", "--config", "linear/*/64",
                       "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert [(r["utt_id"], r["config"]) for r in rows] == [("u1", "linear/ddim/64"),
                                                           ("u2", "linear/ddim/64")]
    assert [float(r["mcd_db"]) for r in rows] == pytest.approx(REF_MCD[:2])
    rc, text, _ = show("--by", "utt", "--utt", "u1", "--metrics", "pesq_wb")
    assert rc == 0 and "pesq_wb" in text and "mcd_db" not in text


def test_per_configuration_view_marks_and_subsets(show):
    # Hand (tests/test_report.py): margins MCD 0.5, PESQ 0.1, budget 0.2 → linear/ddim/16.
    rc, out, _ = show("--format", "json")
    rows = {r["config"]: r for r in json.loads(out)["rows"]}
    assert [c for c, r in rows.items() if r["recommended"]] == ["linear/ddim/16"]
    assert rows["linear/ddim/64"]["reference"]
    # Statistics over u1 and u2 only: mean MCD of linear/ddim/8 = (3.6 + 3.9) / 2.
    rc, out, _ = show("--utt", "u1", "--utt", "u2", "--steps", "8",
                       "--format", "json")
    rows = json.loads(out)["rows"]
    assert [r["config"] for r in rows] == ["linear/ddim/8"]
    assert rows[0]["mcd_db_mean"] == pytest.approx(3.75)
    rc, text, _ = show("--config", "linear/ddim/*", columns="100")
    assert rc == 0 and max(len(line) for line in text.splitlines()) <= 100
    assert "cosine" not in text.split("★ recommended")[0]
    assert any(line.lstrip().startswith("★") and "linear/ddim/16" in line for line in text.splitlines())


@pytest.mark.parametrize("args, field", [
    (["--steps", "four"], "--steps"),
    (["--tag", "accent=x"], "--tag"),
    (["--tag", "speaker"], "--tag"),
    (["--utt", "nobody"], "--utt/--tag"),
    (["--config", "linear/ddim/999"], "--config/--steps"),
    (["--worst", "nothing"], "--worst"),
    (["--worst", "mcd_db", "--top", "-1"], "--top"),
    (["--columns", "nfe,bogus"], "--columns"),
    (["--by", "utt", "--metrics", "bogus"], "--metrics/--columns"),
])
def test_bad_input_names_the_flag_and_exits_2(show, args, field):
    rc, out, err = show(*args)
    assert rc == 2 and f"'{field}'" in err and out == ""
