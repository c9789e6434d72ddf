"""Progress on stderr: one self-overwriting line on a terminal, a line per tenth otherwise."""
from __future__ import annotations

import shutil
import sys
import textwrap
import time


def width() -> int:
    """Columns of the terminal (``COLUMNS`` first; 100 when unknown)."""
    return max(40, shutil.get_terminal_size((100, 24)).columns)


class Progress:
    """One self-overwriting stderr line with count, percentage and ETA."""

    def __init__(self, total: int, enabled: bool = True, label: str = "sweep") -> None:
        self.total, self.done, self.enabled, self.label = total, 0, enabled, label
        self.t0 = time.perf_counter()
        self.tty = sys.stderr.isatty()

    def step(self, what: str = "") -> None:
        self.done += 1
        if not self.enabled:
            return
        el = time.perf_counter() - self.t0
        eta = el / self.done * (self.total - self.done)
        line = (f"{self.label} [{self.done:>5}/{self.total}] {100 * self.done / max(self.total, 1):5.1f}% "
                f"elapsed {_hms(el)} eta {_hms(eta)} {what[:40]}")
        w = width() - 1
        line = line[:w]
        if self.tty:
            sys.stderr.write("\r" + line.ljust(w) + ("\n" if self.done == self.total else ""))
        elif self.done == self.total or self.done % max(1, self.total // 10) == 0:
            sys.stderr.write(line + "\n")
        sys.stderr.flush()


def say(enabled: bool, msg: str) -> None:
    """Print ``msg`` on stderr if ``enabled``, wrapped to the terminal's width."""
    if enabled:
        for line in msg.splitlines() or [""]:
            print(textwrap.fill(line, width(), subsequent_indent="  ", break_long_words=False,
                                break_on_hyphens=False) if line else "", file=sys.stderr)


def _hms(s: float) -> str:
    s = int(s)
    return f"{s // 3600}:{s // 60 % 60:02d}:{s % 60:02d}"
