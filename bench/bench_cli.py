"""Start-up cost of the command line: ``vocobench --help`` and every subcommand's ``--help``.

Plain script, run from the repository root: ``python bench/bench_cli.py [--repeats N]``. Each
help command runs in a fresh interpreter (``python -m vocobench ... --help``), as a user's shell
would start it; printed per command: the median and best wall time of the repeats, the CPU time
of the child process, and which heavy libraries the parser pulled in (read from
``python -X importtime``). Target: every help command <= 0.3 s wall (median) on an idle machine.
Exit 1 if a command misses it.
"""
from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGET_S = 0.3
HEAVY = ("numpy", "pandas", "scipy", "matplotlib", "librosa", "torch", "rich")
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


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeats", type=int, default=7, help="timed calls per command (default 7)")
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
    if missed:
        print("over target: " + "; ".join(missed))
        return 1
    print("all help commands within target")
    return 0


if __name__ == "__main__":
    sys.exit(main())
