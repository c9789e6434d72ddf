"""Start-up cost of the command line: ``vocobench --help`` and every subcommand's ``--help``.

Plain script, run from the repository root: ``python bench/bench_cli.py [--repeats N]
[--run RUN_DIR]``. Each help command runs in a fresh interpreter (``python -m vocobench ...
--help``), as a user's shell would start it; printed per command: the median and best wall time
of the repeats, the CPU time of the child process, and which heavy libraries the parser pulled in
(read from ``python -X importtime``). Target: every help command <= 0.3 s wall (median) on an
idle machine. Exit 1 if a command misses it.

With ``--run RUN_DIR`` (a finished run, e.g. the demo's), also the commands that read a run —
``show`` views and ``report`` with and without plots and page, on a copy of the run — with each
heavy library's import time (cumulative ms of its outermost imports) and the vocobench module
under which it was first imported ("at run time": imported by a function, not by a module).
"""
from __future__ import annotations

import argparse
import json
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGET_S = 0.3
HEAVY = ("numpy", "pandas", "scipy", "matplotlib", "librosa", "torch", "rich", "numba",
         "soundfile", "sklearn", "PIL")
COMMANDS = ([], ["run"], ["demo"], ["check"], ["schedules"], ["metrics"], ["report"], ["show"],
            ["compare"], ["baseline"], ["baseline", "freeze"])


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    return env


def _known(words: list[str]) -> bool:
    """Whether this checkout has the subcommand (older checkouts lack ``show``)."""
    r = subprocess.run([sys.executable, "-m", "vocobench", *words, "--help"], env=_env(),
                       capture_output=True, text=True, cwd=ROOT)
    return r.returncode == 0


def _time_once(words: list[str]) -> tuple[float, float]:
    """(wall s, child CPU s) of one ``--help`` call."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "vocobench", *words, "--help"], env=_env(),
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True, cwd=ROOT)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def _heavy_imports(words: list[str]) -> list[str]:
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "vocobench", *words, "--help"],
                       env=_env(), capture_output=True, text=True, cwd=ROOT)
    names = {line.rsplit("|", 1)[-1].strip().split(".")[0]
             for line in r.stderr.splitlines() if line.startswith("import time:")}
    return sorted(n for n in HEAVY if n in names)


def import_costs(args: list[str]) -> dict[str, tuple[float, str]]:
    """Heavy library → (ms, first vocobench importer) for ``vocobench ARGS``."""
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "vocobench", *args], env=_env(),
                       capture_output=True, text=True, cwd=ROOT)
    if r.returncode:
        raise SystemExit(f"vocobench {' '.join(args)} failed:\n{r.stderr[-2000:]}")
    rows = [(int(m[1]), len(m[2]), m[3]) for m in re.finditer(
        r"^import time:\s+\d+ \|\s+(\d+) \|( *)(\S+)$", r.stderr, re.M)]
    parent: list[int | None] = [None] * len(rows)
    waiting: list[int] = []           # a module is printed after the modules it imports
    for i, (_, depth, _) in enumerate(rows):
        while waiting and rows[waiting[-1]][1] > depth:
            parent[waiting.pop()] = i
        waiting.append(i)
    out: dict[str, tuple[float, str]] = {}
    for i, (us, _, name) in enumerate(rows):
        top, up = name.split(".")[0], parent[i]
        if top not in HEAVY or (up is not None and rows[up][2].split(".")[0] == top):
            continue
        by = "at run time"
        while up is not None and not rows[up][2].startswith("vocobench"):
            up = parent[up]
        if up is not None:
            by = rows[up][2]
        ms, first = out.get(top, (0.0, by))
        out[top] = (ms + us / 1000, first)
    return out


def audit_run(run_dir: Path) -> None:
    """Print :func:`import_costs` of the commands that read a run, on a copy of ``run_dir``."""
    with tempfile.TemporaryDirectory() as tmp:
        run = Path(tmp) / "run"
        shutil.copytree(run_dir, run, symlinks=True)
        columns = json.loads((run / "manifest.json").read_text(encoding="utf-8")).get("columns") or {}
        worst = next(iter(columns), None)
        commands = [["show", str(run)], ["show", str(run), "--format", "csv"],
                    ["show", str(run), "--by", "utt", "--format", "json"],
                    *([["show", str(run), "--worst", worst]] if worst else []),
                    ["report", str(run), "-q", "--no-plots", "--no-page"],
                    ["report", str(run), "-q", "--no-plots"], ["report", str(run), "-q"]]
        print(f"\nheavy imports of the commands that read a run ({run_dir.name}); ms cumulative")
        for args in commands:
            name = "vocobench " + " ".join(a if a != str(run) else "RUN" for a in args)
            costs = import_costs(args)
            print(f"{name}\n    " + ("; ".join(f"{k} {ms:.0f} ms (first via {by})"
                                                for k, (ms, by) in costs.items()) or "none"))


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeats", type=int, default=7, help="timed calls per command (default 7)")
    p.add_argument("--run", type=Path, metavar="RUN_DIR",
                   help="also audit the imports of show and report on (a copy of) this run")
    a = p.parse_args(argv)
    for _ in range(2):                                    # warm the file cache first
        _time_once([])
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", "pass"], check=True)
    floor = time.perf_counter() - t0
    print(f"python {sys.version.split()[0]}; bare interpreter start {floor:.3f} s; "
          f"median of {a.repeats}; target <= {TARGET_S} s")
    print(f"{'command':<34} {'median s':>9} {'best s':>8} {'cpu s':>7}  heavy imports")
    missed = []
    for words in COMMANDS:
        if words and not _known(words):
            continue
        runs = [_time_once(words) for _ in range(a.repeats)]
        wall = statistics.median(w for w, _ in runs)
        best = min(w for w, _ in runs)
        cpu = statistics.median(c for _, c in runs)
        heavy = _heavy_imports(words)
        name = "vocobench " + " ".join([*words, "--help"])
        flag = "" if wall <= TARGET_S else "  (over target)"
        print(f"{name:<34} {wall:9.3f} {best:8.3f} {cpu:7.3f}  {', '.join(heavy) or 'none'}{flag}")
        if wall > TARGET_S:
            missed.append(name)
    if a.run:
        audit_run(a.run)
    if missed:
        print("over target: " + "; ".join(missed))
        return 1
    print("all help commands within target")
    return 0


if __name__ == "__main__":
    sys.exit(main())
