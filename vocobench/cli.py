"""The ``vocobench`` command. Exit codes: 0 success, 1 a check or gate failed, 2 unusable input."""
from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path
from typing import Any, Callable, Sequence

from . import __version__
from .errors import InputError, RunFailed

# The demo scenario ships with the source tree, not with the package: looked up from the current
# folder (the README runs the demo from the repository root) or given with --scenario.
DEMO_SCENARIO = Path("scenarios") / "pier-announcements"


def _option(text: str) -> tuple[str, Any]:
    import tomllib                       # only for -o values: every other command skips it

    key, sep, val = text.partition("=")
    if not sep or not key:
        raise argparse.ArgumentTypeError(f"expected KEY=VALUE, got {text!r}")
    try:
        return key, tomllib.loads(f"v = {val}")["v"]
    except tomllib.TOMLDecodeError:
        return key, val


def _workers(text: str) -> int | str:
    """``--workers``: a positive integer or ``auto``."""
    if text.strip().lower() == "auto":
        return "auto"
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise argparse.ArgumentTypeError(f"must be a positive integer or auto (got {text!r})")
    return n


def cmd_run(a: argparse.Namespace) -> int:
    from .config import load_config
    from .report.terminal import choice_from_args, showing
    from .sweep import run

    cfg = load_config(a.config)
    try:
        with showing(choice_from_args(a, strict=False)):
            out = run(cfg, a.out, progress=not a.quiet, report=not a.no_report, workers=a.workers,
                      scheduler=a.scheduler, fresh=a.fresh, retry_failed=a.retry_failed,
                      dry_run=a.dry_run)
    except RunFailed as e:
        print(f"vocobench: run failed: {e}", file=sys.stderr)
        return 1
    if not a.dry_run:
        print(f"run directory: {out}")
    return 0


def cmd_search(a: argparse.Namespace) -> int:
    from .config import load_config
    from .search import search

    cfg = load_config(a.config)
    out = search(cfg, a.out, progress=not a.quiet, workers=a.workers, scheduler=a.scheduler,
                 plots=not a.no_plots)
    print((out / "search" / "summary.md").read_text(encoding="utf-8"))
    print(f"search results: {out / 'search'} (schedules to paste: winners.toml)")
    return 0


def cmd_demo(a: argparse.Namespace) -> int:
    config = Path(a.scenario) / "config.toml"
    if not config.is_file():
        raise InputError("demo scenario not found: run this from the root of a vocobench source "
                         "checkout, or name the scenario folder with --scenario", source=str(config),
                         field="--scenario")
    a.config = config
    a.out = a.out or Path("reports") / "pier-announcements"
    return cmd_run(a)


def cmd_check(a: argparse.Namespace) -> int:
    from .check import check_metric_target, check_target

    target, options, search = a.target, dict(a.option or []), list(a.search_path or [])
    if a.metric:
        return _report_findings(a.metric, check_metric_target(a.metric, options, search or ["."]))
    if a.config:
        from .config import load_config

        cfg = load_config(a.config)
        target = target or cfg.target
        options = {**cfg.options, **options}
        search = [*cfg.search_path, *search]
    if not target:
        raise InputError("name a TARGET ('package.module:object') or give --config", field="TARGET")
    return _report_findings(target, check_target(target, options, search or ["."]))


def _report_findings(target: str, findings: list) -> int:
    for f in findings:
        print(f)
    bad = [f for f in findings if not f.ok]
    print(f"{target}: {'contract holds' if not bad else f'{len(bad)} violation(s)'}")
    return 1 if bad else 0


def cmd_schedules(a: argparse.Namespace) -> int:
    from . import schedules as S

    if a.kind is None:
        print("schedule kinds for [[sweep.schedule]] (kind = ...):")
        for k in S.KINDS:
            opts = ", ".join(sorted(S.KIND_OPTIONS[k])) or "no options"
            print(f"  {k:<16} options: {opts}")
        print("\nexamples (final ᾱ, final noise level √ᾱ):")
        for name, s in S.named_examples().items():
            print(f"  {name:<58} steps {len(s):>4}  ᾱ_N {s.alpha_bars[-1]:.3e}  √ᾱ_N {s.noise_levels[-1]:.3e}")
        return 0
    opts = dict(a.option or [])
    spec = S.make_spec({"kind": a.kind, **opts}, source="command line")
    sched = spec.build(a.steps, S.linear(a.training_steps))
    with _pandas_display():
        print(sched.to_frame().to_string(index=False, float_format=lambda v: f"{v:.6g}"))
    return 0


class _pandas_display:
    def __enter__(self) -> None:
        import pandas as pd

        self._ctx = pd.option_context("display.max_rows", 2000)
        self._ctx.__enter__()

    def __exit__(self, *exc: object) -> None:
        self._ctx.__exit__(*exc)


def cmd_metrics(a: argparse.Namespace) -> int:
    from .metrics import DEFAULT_METRICS, available_metrics

    for m in available_metrics():
        mark = "*" if m["name"] in DEFAULT_METRICS else " "
        print(f"{mark} {m['name']:<10} {m.get('description', '')}")
        for c in m["columns"]:
            d = {True: "higher is better", False: "lower is better", None: "diagnostic"}[c["higher_is_better"]]
            print(f"      {c['name']:<18} [{c['unit']}] {d}")
    print("* = used when [metrics] use is not given")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="vocobench",
        description="Quality against latency for waveform diffusion vocoders: sweep step counts, "
                    "noise schedules, samplers and seeds over your own recordings, score and time "
                    "every output, and decide.",
        epilog="Objective scores are no substitute for listening tests.")
    p.add_argument("--version", action="version", version=f"vocobench {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", required=True)

    r = sub.add_parser("run", help="run or resume a sweep described by a TOML config",
                       description="Run (or resume: finished items are kept) the sweep in CONFIG.")
    r.add_argument("config", metavar="CONFIG", type=Path, help="TOML run configuration")
    _run_flags(r)
    r.set_defaults(fn=cmd_run)

    q = sub.add_parser("search", help="search N-step schedules, then confirm them on held-out "
                                      "utterances", description="Search the inference schedules "
                       "described by the [search] table of CONFIG on part of the utterances, then "
                       "re-run the best with fresh seeds on the others and compare them with the "
                       "reference. Finished syntheses are kept: re-run to resume.")
    q.add_argument("config", metavar="CONFIG", type=Path, help="TOML run configuration with [search]")
    q.add_argument("--out", type=Path, metavar="DIR",
                   help="output directory (default: from the config, else reports/run)")
    q.add_argument("--workers", type=_workers, metavar="N", help="parallel synthesis-and-scoring "
                   "processes, or auto (one per usable core, fewer when memory is short)")
    q.add_argument("--scheduler", metavar="ADDRESS", help="send jobs to a Dask scheduler at ADDRESS")
    q.add_argument("--no-plots", action="store_true", help="skip the trace and schedule plots")
    q.add_argument("-q", "--quiet", action="store_true", help="no progress output")
    q.set_defaults(fn=cmd_search)

    d = sub.add_parser("demo", help="run the bundled pier-announcement scenario (CPU, about a minute)",
                       description="Sweep the analytic demo denoiser over the bundled test set.")
    _run_flags(d, out_default="reports/pier-announcements")
    d.add_argument("--scenario", type=Path, default=DEMO_SCENARIO, metavar="DIR",
                   help="scenario folder holding config.toml (default: %(default)s, from the current folder)")
    d.set_defaults(fn=cmd_demo)

    c = sub.add_parser("check", help="check a vocoder or denoiser against the plug-in contract",
                       description="Run TARGET on a short probe input and explain every contract "
                                   "violation. Exit 1 if any.")
    c.add_argument("target", metavar="TARGET", nargs="?", help="package.module:object or file.py:object")
    c.add_argument("-o", "--option", action="append", type=_option, metavar="KEY=VALUE",
                   help="keyword option for the class or factory (VALUE in TOML syntax); repeatable")
    c.add_argument("--search-path", action="append", metavar="DIR", help="extra import folder")
    c.add_argument("--config", type=Path, help="take target and options from this run config")
    c.add_argument("--metric", metavar="TARGET", help="check a metric object instead "
                   "('package.module:object' or file.py:object): identity score, determinism, "
                   "declared range, NaN handling")
    c.set_defaults(fn=cmd_check)

    s = sub.add_parser("schedules", help="list schedule kinds, or print one as β, ᾱ and noise levels",
                       description="Without KIND: list kinds and examples. With KIND: print the "
                                   "schedule for --steps as a table.")
    s.add_argument("kind", metavar="KIND", nargs="?",
                   help="schedule kind to print, e.g. cosine or stride (omit to list the kinds)")
    s.add_argument("--steps", type=int, default=6, metavar="N",
                   help="number of steps of the printed schedule (default: %(default)s)")
    s.add_argument("--training-steps", type=int, default=1000, metavar="N",
                   help="length of the linear training schedule used by kind 'stride' "
                        "(default: %(default)s)")
    s.add_argument("-o", "--option", action="append", type=_option, metavar="KEY=VALUE",
                   help="an option of the kind, as in [[sweep.schedule]] (VALUE in TOML "
                        "syntax); repeatable")
    s.set_defaults(fn=cmd_schedules)

    m = sub.add_parser("metrics", help="list the available metrics, units and directions",
                       description="List every metric with its columns, their units and whether "
                                   "higher or lower is better; * marks the default set.")
    m.set_defaults(fn=cmd_metrics)

    for name, mod in _plugins():
        mod(sub)
    return p


def _run_flags(r: argparse.ArgumentParser, out_default: str | None = None) -> None:
    from .report.terminal import add_view_flags

    r.add_argument("--out", type=Path, metavar="DIR",
                   help=f"run directory (default: {out_default or 'from the config, else reports/run'})")
    r.add_argument("--workers", type=_workers, metavar="N", help="parallel synthesis-and-scoring "
                   "processes, or auto (by cores, memory, device and estimated cost; the default "
                   "unless [run] workers says otherwise)")
    r.add_argument("--scheduler", metavar="ADDRESS", help="send jobs to a Dask scheduler at ADDRESS")
    r.add_argument("--no-report", action="store_true", help="skip tables, plots and listening page")
    r.add_argument("--fresh", action="store_true",
                   help="compute every item again (default: reuse items of the same vocoder "
                        "fingerprint, configuration and utterance)")
    r.add_argument("--retry-failed", action="store_true",
                   help="compute items that failed in an earlier run again (default: they stay failed)")
    r.add_argument("--dry-run", action="store_true",
                   help="print the plan (items, reuse, estimated cost) and write nothing")
    r.add_argument("-q", "--quiet", action="store_true", help="no progress output")
    add_view_flags(r)


# Subcommands of the report stage: name → (module, one-line help, description).
_REPORT_COMMANDS = {
    "report": (".report.cli", "re-render tables, plots, recommendation and page",
               "Regenerate every report of RUN_DIR from stored results."),
    "show": (".report.browse", "look through a run's results: per configuration, per utterance, "
                               "worst utterances",
             "Print a stored run's results without re-rendering or writing anything. Example, "
             "the utterances worst on STOI among the 4-step configurations: "
             "vocobench show RUN_DIR --worst stoi --steps 4"),
}


def _plugins() -> list[tuple[str, Callable[[Any], None]]]:
    """Subcommands contributed by later stages (report, gate), if present."""
    import importlib

    out = []
    for name, (module, short, long) in _REPORT_COMMANDS.items():
        try:
            mod = importlib.import_module(module, __package__)
        except ImportError:
            continue

        def add(sub: Any, name: str = name, mod: Any = mod, short: str = short, long: str = long) -> None:
            p = sub.add_parser(name, help=short, description=long)
            mod.add_arguments(p)
            p.set_defaults(fn=mod.main)

        out.append((name, add))
    try:
        from .gate.cli import register

        out.append(("gate", register))
    except ImportError:
        pass
    return out


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            warnings.formatwarning = lambda m, c, *a, **k: f"vocobench: warning: {m}\n"
            return int(args.fn(args) or 0)
    except InputError as e:
        print(f"vocobench: error: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("vocobench: interrupted; finished items are kept, re-run to resume", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
