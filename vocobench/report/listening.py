"""The listening page: ``RUN_DIR/report/listening.html`` with level-limited audio beside it.

One self-contained HTML file (inline style, no external resources); clips and spectrogram images
are files in ``report/audio/`` and ``report/spectra/`` linked by relative paths, so the report
folder can be moved or zipped as a whole. Every clip is a peak-normalised copy at
:data:`PEAK_DBFS` written as 16-bit WAV, so a noisy low-step output cannot play louder than the
others. Spectrogram images come from :mod:`vocobench.report.spectrogram` (the image alone, its
axes in HTML). Every string that comes from the user (ids, tags, labels, paths) is
``html.escape``'d.
"""
from __future__ import annotations

import hashlib
import html
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence
from urllib.parse import quote

import numpy as np
import pandas as pd

from ..keys import labels
from ..stats import RunStatistics
from ..textfmt import fmt
from .spectrogram import CSS as SPEC_CSS
from .spectrogram import RANGE_DB, Extent, axes_html, write_spectrogram

PEAK_DBFS = -3.0                 # peak of every clip on the page (our choice, below full scale)

WARNING = ("Careful with the volume: outputs at few steps can contain loud noise. Every clip "
           f"here is a peak-normalised copy (peak {PEAK_DBFS:g} dBFS, 16-bit WAV); start with the "
           "volume low. Objective scores are no substitute for listening tests.")

_STYLE = """
body{font-family:system-ui,sans-serif;margin:1.5em;max-width:1200px;color:#222}
.warning{background:#fff3cd;border:2px solid #d39e00;padding:.8em 1em;margin:1em 0;font-size:1.05em}
table{border-collapse:collapse;margin:.5em 0 1.5em}
td,th{border:1px solid #ccc;padding:.3em .5em;vertical-align:middle;text-align:left}
th{background:#f3f3f3}
.scores{font-size:.85em;white-space:nowrap}
.missing{color:#a00}
code{font-size:.9em}
"""

_SCRIPT = """
(function(){
  var els = document.querySelectorAll('audio'), n = els.length, done = 0, bad = 0;
  var out = document.getElementById('audio-status');
  function show(){
    out.textContent = 'Audio clips: ' + n + '; ready ' + (done - bad) + '; failed ' + bad +
      (done < n ? '; loading…' : '.');
    out.setAttribute('data-done', done === n ? '1' : '0');
    out.setAttribute('data-failed', String(bad));
  }
  els.forEach(function(a){
    a.volume = 0.5;
    function ok(){ if (!a.dataset.state) { a.dataset.state = 'ready'; done++; show(); } }
    function err(){ if (!a.dataset.state) { a.dataset.state = 'error'; done++; bad++; show(); } }
    a.addEventListener('loadedmetadata', ok);
    a.addEventListener('error', err);
    if (a.error) err(); else if (a.readyState >= 1) ok();
  });
  show();
})();
"""


def esc(x: Any) -> str:
    return html.escape(str(x), quote=True)


def level_limit(x: np.ndarray, peak_dbfs: float = PEAK_DBFS) -> tuple[np.ndarray, float]:
    """Peak-normalise to ``peak_dbfs``; returns (signal, applied gain in dB). Silence stays silent.

    Non-finite samples are set to 0 first.
    """
    y = np.nan_to_num(np.asarray(x, dtype=np.float64), nan=0.0, posinf=0.0, neginf=0.0)
    if y.ndim > 1:
        y = y.mean(axis=1)
    peak = float(np.max(np.abs(y))) if y.size else 0.0
    if peak == 0.0:
        return y, 0.0
    gain = 10.0 ** (peak_dbfs / 20.0) / peak
    return y * gain, 20.0 * math.log10(gain)


def write_clip(src: Path, dst: Path) -> tuple[np.ndarray, int, float]:
    """Read ``src``, level-limit it, write 16-bit WAV ``dst``; returns (signal, rate, gain dB)."""
    import soundfile as sf

    x, sr = sf.read(str(src), dtype="float64", always_2d=False)
    y, gain = level_limit(x)
    dst.parent.mkdir(parents=True, exist_ok=True)
    sf.write(str(dst), y, sr, subtype="PCM_16", format="WAV")
    return y, int(sr), gain


def reference_path(entry: Mapping[str, Any], manifest: Mapping[str, Any], run_dir: Path) -> Path | None:
    """Locate a reference recording: absolute, else relative to the test set, the run, the cwd."""
    p = entry.get("path")
    if not p:
        return None
    p = Path(str(p))
    if p.is_absolute():
        return p if p.is_file() else None
    src = Path(str((manifest.get("dataset") or {}).get("source") or "."))
    for base in (src if src.is_dir() else src.parent, run_dir, Path.cwd()):
        if (base / p).is_file():
            return base / p
    return None


@dataclass
class Cell:
    label: str
    audio: str | None = None          # relative to report/
    image: str | None = None
    extent: Extent | None = None      # what the spectrogram image spans
    scores: str = ""
    missing: str = ""


def default_choice(st: RunStatistics, recommended: Sequence[str]) -> list[str]:
    """Reference, the recommended configurations, the fewest-step one (grid order for ties)."""
    return list(dict.fromkeys([st.reference.label, *recommended, fewest_steps(st)]))


def fewest_steps(st: RunStatistics) -> str:
    return min(st.configs, key=lambda c: c.steps).label


def write_listening_page(run: Any, st: RunStatistics, chosen: Sequence[str], report_dir: Path,
                         limit: int = 20, roles: Mapping[str, str] | None = None) -> list[Path]:
    """Write the page and its clips/images; returns every file written (page last).

    ``roles`` maps a configuration label to a note shown beside it (e.g. "recommended").
    """
    roles = dict(roles or {})
    run_dir = Path(run.path)
    items = run.items
    lab = labels(items)
    manifest = run.manifest
    entries = {str(u.get("id")): u for u in (manifest.get("dataset") or {}).get("utterances") or []}
    utts = [u for u in entries if u in set(items["utt_id"].astype(str))]
    utts += [u for u in dict.fromkeys(items["utt_id"].astype(str)) if u not in entries]
    total = len(utts)
    if limit:
        utts = utts[:limit]
    written: list[Path] = []
    sections = []
    for i, utt in enumerate(utts):
        cells = []
        ref = Cell("reference recording")
        rp = reference_path(entries.get(utt, {}), manifest, run_dir)
        if rp is None:
            ref.missing = "reference recording not found"
        else:
            _clip(rp, report_dir, reference_stem(utt, entries.get(utt, {})), ref, written)
        cells.append(ref)
        for label in chosen:
            cell = Cell(label + (f" ({roles[label]})" if roles.get(label) else ""))
            sel = items[(items["utt_id"].astype(str) == utt) & (lab == label)]
            ok = sel[sel["status"].astype(str) == "ok"] if "status" in sel.columns else sel
            with_audio = ok[ok["audio_path"].notna()] if "audio_path" in ok.columns else ok.iloc[0:0]
            if not len(sel):
                cell.missing = "no item for this utterance"
            elif not len(ok):
                cell.missing = "failed: " + str(sel.iloc[0].get("failure") or "")
            elif not len(with_audio):
                cell.missing = "audio not saved"
            if len(ok):
                row = (with_audio if len(with_audio) else ok).sort_values("seed").iloc[0]
                cell.scores = _scores(row, st)
                if len(with_audio):
                    _clip(run_dir / str(row["audio_path"]), report_dir, clip_stem(row), cell, written)
            cells.append(cell)
        sections.append(_section(i, utt, entries.get(utt, {}), cells))
    page = _page(run, st, chosen, sections, len(utts), total)
    from ..store import write_atomic

    out = report_dir / "listening.html"
    write_atomic(out, page)
    written.append(out)
    return written


def clip_stem(row: Mapping[str, Any]) -> str:
    """File name (no extension) of an item's clip: its job key, unique whatever the ids."""
    key = row.get("key")
    text = str(row.get("audio_path") if key is None or key != key else key)     # NaN: no key
    plain = text.isascii() and text.isalnum()
    return "item_" + (text if plain else hashlib.sha256(text.encode()).hexdigest()[:24])


def reference_stem(utt: str, entry: Mapping[str, Any]) -> str:
    """File name (no extension) of a reference clip: a hash of the utterance's id and content."""
    return "ref_" + hashlib.sha256(f"{utt}\0{entry.get('sha256')}".encode()).hexdigest()[:24]


def _clip(src: Path, report_dir: Path, stem: str, cell: Cell, written: list[Path]) -> None:
    try:
        wav = report_dir / "audio" / f"{stem}.wav"
        y, sr, gain = write_clip(src, wav)
        png = report_dir / "spectra" / f"{stem}.png"
        extent = write_spectrogram(y, sr, png)
    except Exception as e:              # an unreadable file must not stop the report
        cell.missing = f"could not read audio ({type(e).__name__}: {e})"
        return
    cell.audio, cell.image, cell.extent = f"audio/{stem}.wav", f"spectra/{stem}.png", extent
    cell.scores = (cell.scores + "<br>" if cell.scores else "") + esc(f"playback gain {gain:+.1f} dB")
    written += [wav, png]


def _scores(row: pd.Series, st: RunStatistics) -> str:
    parts = [esc(f"seed {row.get('seed')}")]
    for col, spec in st.columns.items():
        unit = f" {spec.get('unit')}" if spec.get("unit") else ""
        parts.append(esc(f"{col}: {fmt(row.get(col))}{unit}"))
    return "<br>".join(parts)


def _section(i: int, utt: str, entry: Mapping[str, Any], cells: list[Cell]) -> str:
    tags = entry.get("tags") or {}
    tag_text = ", ".join(f"{k}={v}" for k, v in tags.items())
    dur = entry.get("duration_s")
    meta = " · ".join(x for x in (f"{float(dur):.2f} s" if dur is not None else "", tag_text) if x)
    rows = []
    for c in cells:
        if c.audio:
            audio = (f'<audio controls preload="metadata" src="{esc(quote(c.audio))}">'
                     "your browser cannot play WAV</audio>")
            img = f'<img class="spec" src="{esc(quote(c.image or ""))}" alt="{esc("spectrogram of " + c.label)}">'
            img = axes_html(img, c.extent) if c.extent else img
        else:
            audio, img = f'<span class="missing">{esc(c.missing)}</span>', ""
        rows.append(f"<tr><td>{esc(c.label)}</td><td>{audio}</td><td>{img}</td>"
                    f'<td class="scores">{c.scores or "–"}</td></tr>')
    return (f'<section id="utt-{i}"><h2>{esc(utt)}</h2>'
            + (f"<p>{esc(meta)}</p>" if meta else "")
            + "<table><tr><th>Version</th><th>Listen</th><th>Spectrogram</th><th>Scores (this seed)</th></tr>"
            + "".join(rows) + "</table></section>")


def _page(run: Any, st: RunStatistics, chosen: Sequence[str], sections: list[str], shown: int,
          total: int) -> str:
    m = run.manifest
    voc = m.get("vocoder") or {}
    target = voc.get("target") if isinstance(voc, Mapping) else voc
    info = [f"Run folder: {Path(run.path).name}", f"vocoder: {target}" if target else "",
            f"created {m.get('created_utc')}" if m.get("created_utc") else "",
            f"reference configuration: {st.reference.label}"]
    shown_text = f"Showing {shown} of {total} utterances." if shown < total else f"{total} utterances."
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc('Listening page — ' + Path(run.path).name)}</title>"
            f"<style>{_STYLE}{SPEC_CSS}</style></head><body>"
            "<h1>Listening page</h1>"
            f'<div class="warning" role="alert"><strong>{esc(WARNING)}</strong></div>'
            f"<p>{esc(' · '.join(x for x in info if x))}</p>"
            f"<p>Configurations shown: {esc(', '.join(chosen))}. {esc(shown_text)} "
            "Spectrograms: 0 to half the sample rate, bottom to top; "
            f"{RANGE_DB:g} dB range, same scale for every clip.</p>"
            '<p id="audio-status" data-done="0">Audio clips: loading…</p>'
            + "\n".join(sections)
            + f"<script>{_SCRIPT}</script></body></html>\n")
