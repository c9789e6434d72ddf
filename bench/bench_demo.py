"""`vocobench demo` end to end, with a breakdown by stage.

Plain script: ``python bench/bench_demo.py [--keep DIR]``, from the repository root. Runs the demo
command (``vocobench.cli.main(["demo", "--out", DIR, "-q"])``) in a fresh interpreter, so imports
count, and times its stages by wrapping the sweep's functions in that process (instrumentation
only): imports and parser, preparation (config, plug-in, test set, keys), quality sweep, timing
phase, tables, report; each as wall time and as the main process's CPU time (spawned sweep
helpers not included). Targets: whole command ≤ 60 s, report stage ≤ 5 s (on an idle 2-core
machine). Also prints the load average at the start and at the end, since other load distorts
wall times; the CPU figures are the ones to compare on a busy machine.
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
    t0, c0 = time.perf_counter(), time.process_time()
    import importlib

    from vocobench import cli

    stages = {"imports": time.perf_counter() - t0}
    cpu = {"imports": time.process_time() - c0}
    for name, where in WRAPPED.items():
        mod = importlib.import_module(f"vocobench.sweep.{where}")
        fn = getattr(mod, name)

        def timed(*a, _fn=fn, _name=name, **k):
            s, c = time.perf_counter(), time.process_time()
            try:
                return _fn(*a, **k)
            finally:
                stages[_name] = stages.get(_name, 0.0) + time.perf_counter() - s
                cpu[_name] = cpu.get(_name, 0.0) + time.process_time() - c
        setattr(mod, name, timed)
    code = cli.main(["demo", "--out", out, "-q"])
    stages["total"] = time.perf_counter() - t0
    cpu["total"] = time.process_time() - c0
    print(json.dumps({"code": code, "stages": stages, "cpu": cpu}))


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
    data = json.loads(res.stdout.strip().splitlines()[-1])
    st, cpu = data["stages"], data["cpu"]
    print(f"vocobench demo ({load} at start, %.2f %.2f %.2f at the end)" % os.getloadavg())
    print(f"  {'stage':18s} {'wall':>7s}   {'cpu':>7s} (main process)")
    for name, label in LABELS.items():
        print(f"  {label:18s} {st.get(name, 0.0):7.1f} s {cpu.get(name, 0.0):7.1f} s")
    other = st["total"] - sum(st.get(n, 0.0) for n in LABELS)
    print(f"  {'other':18s} {other:7.1f} s")
    print(f"  {'whole command':18s} {wall:7.1f} s   target ≤ {TARGETS['total']:.0f} s "
          f"{'ok' if wall <= TARGETS['total'] else 'MISSED'}")
    rep = st.get("_report", 0.0)
    print(f"  {'report stage':18s} {rep:7.1f} s {cpu.get('_report', 0.0):7.1f} s cpu   target ≤ "
          f"{TARGETS['report']:.0f} s {'ok' if rep <= TARGETS['report'] else 'MISSED'}")
    return 0 if wall <= TARGETS["total"] and rep <= TARGETS["report"] else 1


if __name__ == "__main__":
    if "--child" in sys.argv:
        child(sys.argv[sys.argv.index("--child") + 1])
    else:
        sys.exit(main())
