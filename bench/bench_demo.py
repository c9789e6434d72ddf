"""`vocobench demo` end to end, with a breakdown by stage.

Plain script: ``python bench/bench_demo.py [--keep DIR]``, from the repository root. Runs the demo
command (``vocobench.cli.main(["demo", "--out", DIR, "-q"])``) in a fresh interpreter, so imports
count, and times its stages by wrapping the sweep's functions in that process (instrumentation
only): imports and parser, preparation (config, plug-in, test set, keys), quality sweep, timing
phase, tables, report. Targets: whole command ≤ 60 s, report stage ≤ 5 s (on an idle 2-core
machine). Also prints the load average at the start, since other load distorts wall times.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGETS = {"total": 60.0, "report": 5.0}
WRAPPED = {"prepare": "orchestrate", "run_jobs": "orchestrate", "run_timing": "orchestrate",
           "write_tables": "orchestrate", "_report": "orchestrate"}
LABELS = {"imports": "imports, parser", "prepare": "preparation", "run_jobs": "quality sweep",
          "run_timing": "timing phase", "write_tables": "tables", "_report": "report"}


def child(out: str) -> None:
    t0 = time.perf_counter()
    import importlib

    from vocobench import cli

    stages = {"imports": time.perf_counter() - t0}
    for name, where in WRAPPED.items():
        mod = importlib.import_module(f"vocobench.sweep.{where}")
        fn = getattr(mod, name)

        def timed(*a, _fn=fn, _name=name, **k):
            s = time.perf_counter()
            try:
                return _fn(*a, **k)
            finally:
                stages[_name] = stages.get(_name, 0.0) + time.perf_counter() - s
        setattr(mod, name, timed)
    code = cli.main(["demo", "--out", out, "-q"])
    stages["total"] = time.perf_counter() - t0
    print(json.dumps({"code": code, "stages": stages}))


def main() -> int:
    keep = sys.argv[sys.argv.index("--keep") + 1] if "--keep" in sys.argv else None
    load = "load average %.2f %.2f %.2f" % os.getloadavg()
    with tempfile.TemporaryDirectory() as tmp:
        out = keep or str(Path(tmp) / "demo")
        t0 = time.perf_counter()
        res = subprocess.run([sys.executable, __file__, "--child", out], cwd=ROOT,
                             capture_output=True, text=True)
        wall = time.perf_counter() - t0
    if res.returncode:
        sys.stderr.write(res.stderr)
        return res.returncode
    st = json.loads(res.stdout.strip().splitlines()[-1])["stages"]
    print(f"vocobench demo ({load} at start)")
    for name, label in LABELS.items():
        print(f"  {label:18s} {st.get(name, 0.0):7.1f} s")
    other = st["total"] - sum(st.get(n, 0.0) for n in LABELS)
    print(f"  {'other':18s} {other:7.1f} s")
    print(f"  {'whole command':18s} {wall:7.1f} s   target ≤ {TARGETS['total']:.0f} s "
          f"{'ok' if wall <= TARGETS['total'] else 'MISSED'}")
    rep = st.get("_report", 0.0)
    print(f"  {'report stage':18s} {rep:7.1f} s   target ≤ {TARGETS['report']:.0f} s "
          f"{'ok' if rep <= TARGETS['report'] else 'MISSED'}")
    return 0 if wall <= TARGETS["total"] and rep <= TARGETS["report"] else 1


if __name__ == "__main__":
    if "--child" in sys.argv:
        child(sys.argv[sys.argv.index("--child") + 1])
    else:
        sys.exit(main())
