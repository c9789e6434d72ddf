"""Reports are published whole, clips are named by job key, and "up to date" means the same inputs.

A kill at any point of a rendering leaves the old report or the new one (never a mix, never a
page linking missing clips), and rendering again gives a report identical, byte for byte, to an
uninterrupted one. Kills are simulated by raising at every file-system step of a rendering
(with no clean-up, as after SIGKILL), and once by a real SIGKILL (POSIX: the process gets no
chance to clean up). Our own durability contract; ``rename`` replacing a link atomically is
POSIX rename(2) semantics.
"""
from __future__ import annotations

import hashlib
import os
import shutil
import signal
import subprocess
import sys
import time
import tomllib
from html.parser import HTMLParser
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from conftest import REPO_ROOT  # noqa: E402
from test_report_fixture import make_run  # noqa: E402
from vocobench.config import parse_config  # noqa: E402
from vocobench.report import ReportOptions, listening, publish, render_report  # noqa: E402
from vocobench.store import load_run, read_jsonl  # noqa: E402
from vocobench.sweep import run  # noqa: E402

DEMO = REPO_ROOT / "scenarios" / "pier-announcements" / "testset"
OLD = dict(resamples=300, plots=False, listen_limit=1, margins={"mcd_db": 0.5, "pesq_wb": 0.1})
NEW = dict(OLD, margins={"mcd_db": 0.18, "pesq_wb": 0.1})


class Killed(BaseException):
    """Stands for SIGKILL: nothing catches it, nothing is cleaned up."""


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def _tree(run_dir: Path) -> dict[str, str]:
    """Every file a reader reaches through ``report/`` and ``summary.md``, with its hash."""
    out = {}
    rep = run_dir / "report"
    if rep.is_dir():
        for p in sorted(rep.rglob("*")):
            if p.is_file():
                out["report/" + p.relative_to(rep).as_posix()] = _sha(p)
    if (run_dir / "summary.md").is_file():
        out["summary.md"] = _sha(run_dir / "summary.md")
    return out


class _Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.src: list[str] = []
        self.sections: dict[str, list[str]] = {}
        self._h2 = False
        self._sec: str | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self._h2 = tag == "h2"
        if tag in ("audio", "img"):
            self.src.append(a["src"])
            if self._sec is not None:
                self.sections[self._sec].append(a["src"])

    def handle_data(self, data):
        if self._h2:
            self._sec = data
            self.sections[data] = []
            self._h2 = False


def _page_links(run_dir: Path) -> _Links:
    p = _Links()
    p.feed((run_dir / "report" / "listening.html").read_text(encoding="utf-8"))
    return p


def _links_resolve(run_dir: Path) -> bool:
    page = run_dir / "report" / "listening.html"
    return not page.exists() or all((page.parent / s).is_file() for s in _page_links(run_dir).src)


def _render(run_dir: Path, opts: dict) -> None:
    render_report(run_dir, ReportOptions(**opts), echo=False)


@pytest.fixture(scope="module")
def states(tmp_path_factory):
    """A run with the OLD report, and the trees of the OLD and NEW renderings."""
    root = tmp_path_factory.mktemp("pub")
    base = make_run(root)
    _render(base, OLD)
    new = root / "n" / "run"
    shutil.copytree(base, new, symlinks=True)
    _render(new, NEW)
    old_tree, new_tree = _tree(base), _tree(new)
    assert old_tree != new_tree          # other margins: another recommendation, other clips
    return base, old_tree, new_tree


def _kill_at(monkeypatch, k: int) -> list[int]:
    """Raise :class:`Killed` at the k-th write, rename, link or removal of a rendering."""
    count = [0]

    def wrap(owner, name):
        orig = getattr(owner, name)

        def step(*a, **kw):
            count[0] += 1
            if count[0] == k:
                raise Killed
            return orig(*a, **kw)
        monkeypatch.setattr(owner, name, step)

    for owner, name in ((os, "replace"), (os, "rename"), (os, "symlink"), (shutil, "rmtree"),
                        (listening, "write_clip"), (listening, "write_spectrogram")):
        wrap(owner, name)
    monkeypatch.setattr(publish.Staging, "discard", lambda self: None)
    return count


def test_a_kill_at_any_point_of_rendering_leaves_old_or_new_and_rerender_is_identical(
        states, tmp_path, monkeypatch):
    base, old_tree, new_tree = states
    with monkeypatch.context() as m:            # how many steps an uninterrupted rendering takes
        probe = tmp_path / "probe" / "run"
        shutil.copytree(base, probe, symlinks=True)
        steps = _kill_at(m, 0)
        _render(probe, NEW)
    assert steps[0] >= 15
    seen = set()
    for k in range(1, steps[0] + 1):
        work = tmp_path / f"k{k}" / "run"
        shutil.copytree(base, work, symlinks=True)
        with monkeypatch.context() as m:
            _kill_at(m, k)
            with pytest.raises(Killed):
                _render(work, NEW)
        after = _tree(work)
        assert after in (old_tree, new_tree), f"a mix after a kill at step {k}"
        assert _links_resolve(work), f"page links a missing clip after a kill at step {k}"
        seen.add("old" if after == old_tree else "new")
        _render(work, NEW)
        assert _tree(work) == new_tree, f"re-render after a kill at step {k} differs"
        hidden = [p.name for p in work.iterdir() if p.name.startswith(".report")]
        assert hidden == [os.readlink(work / "report")], hidden      # leftovers removed
        shutil.rmtree(work.parent)
    assert seen == {"old", "new"}          # kills landed before and after the swap


def test_without_symbolic_links_folders_are_swapped(states, tmp_path, monkeypatch):
    base, old_tree, new_tree = states
    work = tmp_path / "nolink" / "run"
    shutil.copytree(base, work, symlinks=True)

    def no_links(*a, **kw):
        raise OSError(1, "Operation not permitted")
    monkeypatch.setattr(os, "symlink", no_links)
    _render(work, NEW)
    assert (work / "report").is_dir() and not (work / "report").is_symlink()
    assert _tree(work) == new_tree and publish.report_is_current(load_run(work), ReportOptions(**NEW))


def test_real_sigkill_of_vocobench_report(states, tmp_path):
    base, old_tree, new_tree = states
    env = dict(os.environ, PYTHONPATH=str(REPO_ROOT))
    flags = ["--resamples", "300", "--no-plots", "--listen-limit", "0",
             "--margin", "mcd_db=0.18", "--margin", "pesq_wb=0.1"]
    ref = tmp_path / "ref" / "run"
    shutil.copytree(base, ref, symlinks=True)
    subprocess.run([sys.executable, "-m", "vocobench", "report", str(ref), "-q", *flags], env=env,
                   check=True)
    work = tmp_path / "kill" / "run"
    shutil.copytree(base, work, symlinks=True)
    before = _tree(work)
    proc = subprocess.Popen([sys.executable, "-m", "vocobench", "report", str(work), "-q", *flags],
                            env=env)
    keep = os.readlink(work / "report")
    deadline, staged = time.time() + 60, None
    while time.time() < deadline and proc.poll() is None:
        staged = [p for p in work.glob(".report-*") if p.name != keep and (p / "audio").is_dir()
                  and len(list((p / "audio").iterdir())) >= 2]
        if staged:
            break
        time.sleep(0.005)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert staged, "the kill must land while the new report is being rendered"
    assert _tree(work) == before and _links_resolve(work)      # the old report, whole
    again = subprocess.run([sys.executable, "-m", "vocobench", "report", str(work), "-q", *flags],
                           env=env)
    assert again.returncode == 0
    assert _tree(work) == _tree(ref)


def _sweep(tmp: Path, steps=(1, 2), ids=("pier01", "pier03"), save="none") -> Path:
    ts = tmp / "ts"
    if not ts.exists():
        ts.mkdir()
        rows = ["id,path"]
        for i, u in enumerate(ids):
            shutil.copy(DEMO / f"pier0{i + 1}.wav", ts / f"f{i}.wav")
            rows.append(f"{u},f{i}.wav")
        (ts / "m.csv").write_text("\n".join(rows) + "\n")
    cfg = tmp / f"cfg{len(steps)}.toml"
    cfg.write_text(f"""
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
[testset]
path = "ts/m.csv"
[sweep]
steps = {list(steps)}
samplers = ["ddim"]
[metrics]
use = ["stoi"]
[timing]
repeats = 1
utterances = 1
[output]
save_audio = "{save}"
[decide]
resamples = 200
plots = false
""")
    return cfg


def _cfg(path: Path):
    return parse_config(tomllib.loads(path.read_text()), path.parent, str(path))


def test_ids_that_clean_to_one_name_keep_separate_audio(tmp_path):
    ids = ("a/1", "a_1", "spk/01", "spk_01")
    cfg = _sweep(tmp_path, steps=(1,), ids=ids, save="all")
    out = run(_cfg(cfg), tmp_path / "run", progress=False)
    items = load_run(out).items.set_index("utt_id")
    paths = [items.loc[u, "audio_path"] for u in ids]
    assert len(set(paths)) == 4 and all((out / p).is_file() for p in paths)
    hashes = {_sha(out / p) for p in paths}
    assert len(hashes) == 4                    # four different recordings → four different outputs
    page = _page_links(out)
    for u in ids:                              # each section plays its own utterance's clips
        row = items.loc[u]
        want = f"audio/{listening.clip_stem({'key': row['key']})}.wav"
        assert want in page.sections[u], (u, page.sections[u])
        assert sum(want in v for v in page.sections.values()) == 1


def test_up_to_date_means_same_items_and_options(tmp_path, capsys, monkeypatch):
    a, b = _sweep(tmp_path, steps=(1, 2)), _sweep(tmp_path, steps=(1, 2, 3))
    out = tmp_path / "run"
    run(_cfg(a), out)
    capsys.readouterr()
    run(_cfg(a), out)
    assert "reports are up to date" in capsys.readouterr().err
    run(_cfg(b), out)                          # another grid in the same folder
    capsys.readouterr()
    run(_cfg(a), out)                          # every item of A is reused, but the report is B's
    err = capsys.readouterr().err
    assert "4 reused, 0 to compute" in err and "reports are up to date" not in err
    assert "Items: 4 of 4 planned" in (out / "summary.md").read_text()
    # a kill while rendering: the next run renders again, and the report is current after it
    run(_cfg(b), out, report=False)
    with monkeypatch.context() as m:
        m.setattr(publish.Staging, "publish", lambda self, digest: (_ for _ in ()).throw(Killed()))
        m.setattr(publish.Staging, "discard", lambda self: None)
        with pytest.raises(Killed):
            run(_cfg(b), out)
    capsys.readouterr()
    run(_cfg(b), out)
    assert "reports are up to date" not in capsys.readouterr().err
    assert publish.report_is_current(load_run(out))
    assert len(read_jsonl(out / "items.jsonl")) == 6
