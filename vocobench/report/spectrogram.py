"""Spectrogram images of the listening page, drawn without a plotting figure.

Each image is the log-magnitude STFT itself, one pixel per (pooled) frequency row and time column,
low frequencies at the bottom, mapped through the ``magma`` colour map over the same dB range for
every clip and written as an 8-bit indexed PNG (ISO/IEC 15948, colour type 3). The axes (time in
s, frequency in kHz from 0 to sr/2) are HTML around the image (:func:`axes_html`), so a page of
dozens of clips costs milliseconds per image instead of a figure layout and draw each.
"""
from __future__ import annotations

import html
import math
import struct
import zlib
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

NPERSEG = 512                # STFT frame (samples), periodic Hann window, 75 % overlap
RANGE_DB = 80.0              # dynamic range shown (common practice, no source)
TOP_DB = -6.0                # a full-scale sine reads −6 dB with "spectrum" scaling
MAX_COLUMNS = 480            # time columns kept (averaged down), keeps PNGs small
ROWS = 128                   # frequency rows kept (averaged down)
CMAP = "magma"
COLOURS = 256                # entries of the colour map (matplotlib's default N)
SIZE_PX = (400, 150)         # width, height of the image on the page (CSS pixels)
X_TICKS, Y_TICKS = 6, 5      # at most this many labelled ticks per axis
PNG_LEVEL = 6                # zlib level: 9 is ~9× slower for 1 % smaller files (measured)

CSS = """
.sp{position:relative;display:inline-block;margin:4px 6px 30px 50px}
.sp img{display:block;width:%dpx;height:%dpx}
.sp .xt,.sp .yt{position:absolute;font-size:10px;line-height:1;white-space:nowrap;color:#333}
.sp .xt{top:100%%;transform:translateX(-50%%);padding-top:5px}
.sp .xt::before{content:"";position:absolute;top:0;left:50%%;height:3px;border-left:1px solid #333}
.sp .yt{right:100%%;transform:translateY(50%%);padding-right:6px}
.sp .yt::after{content:"";position:absolute;right:0;top:50%%;width:3px;border-top:1px solid #333}
.sp .xl{position:absolute;top:100%%;left:0;right:0;margin-top:17px;text-align:center;font-size:10px}
.sp .yl{position:absolute;right:100%%;top:0;bottom:0;margin-right:30px;font-size:10px;
  writing-mode:vertical-rl;transform:rotate(180deg);text-align:center}
""" % SIZE_PX


@dataclass(frozen=True)
class Extent:
    """What an image spans: time 0 to ``seconds``, frequency 0 to ``khz``."""

    seconds: float
    khz: float


def stft_db(y: np.ndarray, sr: int) -> np.ndarray:
    """Magnitude STFT in dB, (frequency bins, frames): the same frames and scaling as
    ``scipy.signal.stft(y, sr, nperseg=NPERSEG, noverlap=3 * NPERSEG // 4)`` (periodic Hann,
    zero padding of half a frame at both ends and up to whole frames, divided by the window sum)."""
    n, hop = NPERSEG, NPERSEG // 4
    x = np.asarray(y, dtype=np.float64)
    x = np.concatenate([np.zeros(n // 2), x, np.zeros(n // 2)])
    x = np.concatenate([x, np.zeros(-(x.size - n) % hop)])
    win = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)
    frames = np.lib.stride_tricks.sliding_window_view(x, n)[::hop]
    z = np.fft.rfft(frames * win, axis=1).T / win.sum()
    return 20.0 * np.log10(np.abs(z) + 1e-12)


def pool(a: np.ndarray, size: int, axis: int) -> np.ndarray:
    """Average blocks along ``axis`` so that it has at most ``size`` entries."""
    n = a.shape[axis]
    if n <= size:
        return a
    edges = np.linspace(0, n, size + 1).astype(int)
    return np.add.reduceat(a, edges[:-1], axis=axis) / np.diff(edges).reshape(
        (-1, 1) if axis == 0 else (1, -1))


def spectrogram(y: np.ndarray, sr: int) -> tuple[np.ndarray, Extent]:
    """Pooled dB image (row 0 = lowest frequency) and its extent. Clips shorter than a frame
    are padded to one."""
    duration = y.size / sr
    if y.size < NPERSEG:
        y = np.pad(y, (0, NPERSEG - y.size))
    db = pool(pool(stft_db(y, sr), ROWS, axis=0), MAX_COLUMNS, axis=1)
    return db, Extent(max(duration, NPERSEG / sr), sr / 2000.0)


def colour_index(db: np.ndarray) -> np.ndarray:
    """Colour-map entry of each value, as matplotlib maps ``Normalize(TOP_DB − RANGE_DB, TOP_DB)``
    through a ``COLOURS``-entry map (values outside the range take the end colours)."""
    t = (db - (TOP_DB - RANGE_DB)) / RANGE_DB * COLOURS
    return np.clip(np.floor(np.nan_to_num(t, nan=0.0)), 0, COLOURS - 1).astype(np.uint8)


@lru_cache(maxsize=1)
def palette() -> bytes:
    """The colour map's ``COLOURS`` RGB entries, 3 bytes each (matplotlib's colour maps are
    loaded here, on first use)."""
    from matplotlib import colormaps

    rgba = colormaps[CMAP].resampled(COLOURS)(np.arange(COLOURS), bytes=True)
    return rgba[:, :3].astype(np.uint8).tobytes()


def png_indexed(index: np.ndarray, rgb: bytes) -> bytes:
    """An 8-bit indexed PNG of ``index`` (rows top to bottom) with palette ``rgb``."""
    h, w = index.shape

    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))

    rows = np.hstack([np.zeros((h, 1), np.uint8), np.ascontiguousarray(index, np.uint8)])
    return (b"\x89PNG\r\n\x1a\n"
            + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 3, 0, 0, 0))
            + chunk(b"PLTE", rgb)
            + chunk(b"IDAT", zlib.compress(rows.tobytes(), PNG_LEVEL))
            + chunk(b"IEND", b""))


def write_spectrogram(y: np.ndarray, sr: int, dst: Path) -> Extent:
    """The spectrogram of ``y`` as a PNG at ``dst`` (high frequencies in the top row); returns
    its extent for :func:`axes_html`."""
    db, extent = spectrogram(np.asarray(y, dtype=np.float64), sr)
    dst.parent.mkdir(parents=True, exist_ok=True)
    dst.write_bytes(png_indexed(colour_index(db)[::-1], palette()))
    return extent


def nice_ticks(hi: float, most: int) -> list[float]:
    """0, s, 2s, … up to ``hi``, with the smallest step s of 1, 2, 2.5 or 5 × 10^k giving at
    most ``most`` ticks."""
    if not hi > 0:
        return [0.0]
    mag = 10.0 ** math.floor(math.log10(hi / most))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if hi / (m * mag) < most)
    return [round(i * step, 9) for i in range(int(math.floor(hi / step + 1e-9)) + 1)]


def axes_html(img: str, extent: Extent) -> str:
    """``img`` (an ``<img>`` tag) inside its time and frequency axes, positioned with CSS."""
    xs = "".join(f'<span class="xt" style="left:{100 * v / extent.seconds:.3f}%">{v:g}</span>'
                 for v in nice_ticks(extent.seconds, X_TICKS))
    ys = "".join(f'<span class="yt" style="bottom:{100 * v / extent.khz:.3f}%">{v:g}</span>'
                 for v in nice_ticks(extent.khz, Y_TICKS))
    return (f'<span class="sp">{img}{xs}{ys}<span class="xl">{html.escape("time (s)")}</span>'
            f'<span class="yl">{html.escape("frequency (kHz)")}</span></span>')
