"""Publishing a report: rendered into a staging folder, then swapped in at once.

``RUN_DIR/report`` is a symbolic link to a hidden folder ``RUN_DIR/.report-XXXX`` that holds one
complete rendering, and ``RUN_DIR/summary.md`` links to ``report/summary.md``. A new rendering
goes into a new hidden folder (:class:`Staging`) and is published by replacing the link with
one ``rename`` (atomic on POSIX filesystems), so a reader — or a kill at any moment — finds the
old report or the new one, never a mix and never a page pointing at clips that are gone. Hidden
folders left by a kill are removed by the next rendering. On a filesystem without symbolic
links the folders are swapped by two renames instead (a kill between them leaves no report,
and the next run renders one).

``report/report.json`` records the digest of what the report was built from — manifest, items,
timings, decision options and vocobench version (:func:`report_digest`) — and the hash of its
summary: :func:`report_is_current` compares both with the run as it is now.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import shutil
import tempfile
import uuid
from pathlib import Path
from typing import Any

from .. import __version__
from ..errors import InputError
from ..store import Run, current_umask, dumps, write_atomic
from .options import ReportOptions, options_for

LINK, SUMMARY, STAMP = "report", "summary.md", "report.json"
PREFIX = ".report-"               # rendered folders (the link's target, staging ones)
LINK_TMP = ".report.link-"        # a new link before it replaces the old one


def report_digest(run: Run, options: ReportOptions) -> str:
    """Digest of everything a report is built from: the manifest, the items and timings (as
    loaded: other grids left out, last record per key), the decision options and the version."""
    opts = {f.name: getattr(options, f.name) for f in dataclasses.fields(options) if f.name != "source"}
    h = hashlib.sha256()
    for part in (dumps(run.manifest), run.items.to_csv(index=False), run.timing.to_csv(index=False),
                 dumps(opts), __version__):
        h.update(part.encode("utf-8") + b"\0")
    return h.hexdigest()[:32]


def _sha(path: Path) -> str | None:
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:
        return None


def report_is_current(run: Run, options: ReportOptions | None = None) -> bool:
    """Whether ``RUN_DIR/report`` was built from exactly this run and these options (default:
    the run's ``[decide]`` table) and its summary is the one at the top of the run directory."""
    root = Path(run.path)
    try:
        stamp = json.loads((root / LINK / STAMP).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return (isinstance(stamp, dict) and stamp.get("digest") == report_digest(run, options_for(run, options))
            and stamp.get("summary_sha256") is not None
            and stamp.get("summary_sha256") == _sha(root / SUMMARY))


class Staging:
    """A rendering in progress: write the report files into :attr:`folder` (the future
    ``report/``, with ``summary.md`` in it), then :meth:`publish`; :meth:`discard` on failure."""

    def __init__(self, run_dir: str | Path) -> None:
        self.run_dir = Path(run_dir)
        check_report_path(self.run_dir)
        collect(self.run_dir)
        self.folder = Path(tempfile.mkdtemp(prefix=PREFIX, dir=self.run_dir))
        os.chmod(self.folder, 0o777 & ~current_umask())

    def publish(self, digest: str) -> None:
        """Stamp the rendering with ``digest`` and swap it in (see the module docstring)."""
        summary = self.folder / SUMMARY
        write_atomic(self.folder / STAMP, json.dumps(
            {"digest": digest, "summary_sha256": _sha(summary), "vocobench_version": __version__},
            indent=1) + "\n")
        link = self.run_dir / LINK
        new = self.run_dir / f"{LINK_TMP}{uuid.uuid4().hex[:8]}"
        try:
            os.symlink(self.folder.name, new)
        except OSError:              # no symbolic links on this filesystem
            self._swap_folders(link)
            return
        old = os.readlink(link) if link.is_symlink() else None
        if link.is_dir() and old is None:         # a report folder from an earlier version
            link.rename(self.run_dir / f"{PREFIX}old-{uuid.uuid4().hex[:8]}")
        os.replace(new, link)
        top = self.run_dir / SUMMARY
        if not (top.is_symlink() and os.readlink(top) == f"{LINK}/{SUMMARY}"):
            tmp = self.run_dir / f"{LINK_TMP}{uuid.uuid4().hex[:8]}"
            os.symlink(f"{LINK}/{SUMMARY}", tmp)
            os.replace(tmp, top)
        collect(self.run_dir)

    def _swap_folders(self, link: Path) -> None:
        aside = self.run_dir / f"{PREFIX}old-{uuid.uuid4().hex[:8]}"
        if link.is_dir():
            link.rename(aside)
        self.folder.rename(link)
        write_atomic(self.run_dir / SUMMARY, (link / SUMMARY).read_bytes())
        shutil.rmtree(aside, ignore_errors=True)

    def discard(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)


def check_report_path(run_dir: str | Path) -> None:
    """Raise :class:`InputError` if ``RUN_DIR/report`` exists and is not a folder."""
    link = Path(run_dir) / LINK
    if link.exists() and not link.is_dir():
        raise InputError("cannot write the report: this path is a file", source=str(link),
                         field="report", value=str(link))


def collect(run_dir: Path) -> None:
    """Remove rendered folders the ``report`` link no longer points to, and stray new links
    (left by a kill; a rendering holds the run directory's lock)."""
    link = run_dir / LINK
    keep = Path(os.readlink(link)).name if link.is_symlink() else None
    for p in run_dir.glob(f"{PREFIX}*"):
        if p.name != keep and p.is_dir() and not p.is_symlink():
            shutil.rmtree(p, ignore_errors=True)
    for p in run_dir.glob(f"{LINK_TMP}*"):
        p.unlink(missing_ok=True)


def final_path(staging: Staging, path: Any) -> Path:
    """Where a file written into the staging folder is found once published."""
    return staging.run_dir / LINK / Path(path).relative_to(staging.folder)
