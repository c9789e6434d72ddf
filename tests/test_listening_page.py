"""Tests of the listening page: level limiting, links, escaping, and a headless Chromium load."""
from __future__ import annotations

import math
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_report_fixture import make_run  # noqa: E402
from vocobench.report import ReportOptions, render_report  # noqa: E402
from vocobench.report.listening import PEAK_DBFS, clip_stem, level_limit  # noqa: E402

CHROMIUM = "/usr/bin/chromium"
EVIL_ID = "<script>alert(1)</script>"
EVIL_SCHEDULE = "<img src=x onerror=alert(2)>"


class _Tags(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.scripts = 0

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self.scripts += tag == "script"


def _parse(text: str) -> _Tags:
    p = _Tags()
    p.feed(text)
    return p


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    root = tmp_path_factory.mktemp("lp")
    # linear/ddim/8 (listed below) holds, for the first utterance, loud noise at peak ≈ 4·|N(0,1)|max,
    # far above full scale, stored as float WAV.
    run = make_run(root, loud_first=True, utt_ids=(EVIL_ID, "u&2", "u3", "u4"),
                   schedules={"cosine": EVIL_SCHEDULE})
    opts = ReportOptions(resamples=300, plots=False, margins={"mcd_db": 0.5, "pesq_wb": 0.1},
                         listen=("linear/ddim/8", "linear/ddim/64", f"{EVIL_SCHEDULE}/ddim/64"))
    res = render_report(run, opts, echo=False)
    return run, res


def test_level_limit_peak_at_minus_3_dbfs():
    # dBFS: level relative to digital full scale (±1.0 here), 20·log10(peak) (common practice,
    # no source). A peak of 4.0 becomes 10^(−3/20) ≈ 0.7079; silence stays silent; NaN → 0.
    y, gain = level_limit(np.array([0.5, -4.0, np.nan, 1.0]))
    assert np.max(np.abs(y)) == pytest.approx(10 ** (PEAK_DBFS / 20))
    assert gain == pytest.approx(20 * math.log10(10 ** (-3 / 20) / 4.0))
    assert y[2] == 0.0
    z, g0 = level_limit(np.zeros(10))
    assert not z.any() and g0 == 0.0


def test_clips_are_16_bit_and_level_limited(page):
    run, res = page
    wavs = sorted((run / "report" / "audio").glob("*.wav"))
    # 4 utterances × (reference recording + 3 configurations) = 16 clips.
    assert len(wavs) == 16
    for w in wavs:
        info = sf.info(str(w))
        assert info.subtype == "PCM_16" and info.format == "WAV"
        x, _ = sf.read(str(w))
        # 16-bit quantisation step is 2^-15 (PCM_16 full scale ±1).
        assert np.max(np.abs(x)) == pytest.approx(10 ** (PEAK_DBFS / 20), abs=2 ** -15)
    # the loud-noise item (first utterance, linear/ddim/8, seed 0: fixture key), limited like the rest
    loud = run / "report" / "audio" / f"{clip_stem({'key': 'linear|ddim|8|0|0'})}.wav"
    assert np.max(np.abs(sf.read(str(loud))[0])) < 0.71


def test_every_link_resolves_and_warning_present(page):
    run, res = page
    html_path = run / "report" / "listening.html"
    text = html_path.read_text(encoding="utf-8")
    tags = _parse(text).tags
    audio = [a for t, a in tags if t == "audio"]
    imgs = [a for t, a in tags if t == "img"]
    assert len(audio) == 16 and len(imgs) == 16
    for a in audio + imgs:
        assert not a["src"].startswith(("/", "http")), a["src"]          # relative links only
        assert (html_path.parent / a["src"]).is_file(), a["src"]
    assert "loud noise" in text and "no substitute for listening tests" in text
    assert not re.search(r"<(link|iframe)\b", text) and "http" not in text   # self-contained


def test_user_strings_are_escaped(page):
    # html.escape (Python stdlib) is the reference for escaping; the parsed page must contain no
    # element that came from a user string.
    run, res = page
    for f in (run / "report" / "listening.html", run / "summary.md", run / "report" / "table.md",
              run / "report" / "recommendation.md", run / "report" / "worst_utterances.md"):
        text = f.read_text(encoding="utf-8")
        assert "<script>alert" not in text and "<img src=x" not in text, f.name
    page_text = (run / "report" / "listening.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page_text
    assert "u&amp;2" in page_text and "s0&amp;&quot;q&quot;" in page_text
    parsed = _parse(page_text)
    assert parsed.scripts == 1                                    # only the page's own script
    assert all(a.get("onerror") is None for _, a in parsed.tags)
    worst = (run / "report" / "worst_utterances.md").read_text(encoding="utf-8")
    assert "&lt;script>" in worst and "<script" not in worst   # only `<` opens raw HTML


def _chromium_dom(url: str, profile: Path) -> str:
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={profile}", "--virtual-time-budget=5000",
           "--dump-dom", url]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=90)
    return out.stdout


@pytest.mark.skipif(not Path(CHROMIUM).exists() or shutil.which(CHROMIUM) is None,
                    reason="chromium not installed")
def test_page_renders_and_every_audio_loads_in_chromium(page, tmp_path):
    # Reference: the browser itself (HTMLMediaElement readyState ≥ HAVE_METADATA = 1, WHATWG
    # HTML standard). The page's script marks each <audio> data-state="ready" on loadedmetadata
    # (or readyState ≥ 1) and "error" on error; the status line counts them.
    run, res = page
    html_path = run / "report" / "listening.html"
    dom = _chromium_dom(html_path.as_uri(), tmp_path / "profile")
    if not dom.strip():
        pytest.skip("chromium produced no DOM here")
    states = re.findall(r'<audio[^>]*data-state="(\w+)"', dom)
    assert len(states) == 16 and set(states) == {"ready"}, states
    assert re.search(r'id="audio-status"[^>]*data-done="1"', dom)
    assert "Listening page" in dom
    # Negative control: a missing clip is reported as an error (so the check above can fail).
    broken = tmp_path / "broken"
    shutil.copytree(html_path.parent, broken)
    (broken / "audio" / "u001_ref.wav").unlink()
    dom = _chromium_dom((broken / "listening.html").as_uri(), tmp_path / "profile2")
    states = re.findall(r'<audio[^>]*data-state="(\w+)"', dom)
    assert states.count("error") == 1 and states.count("ready") == 15, states
