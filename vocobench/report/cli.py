"""``vocobench report RUN_DIR [flags]``: flags override the run's ``[decide]`` options."""
from __future__ import annotations

import argparse
import sys
from typing import Any

from ..errors import InputError
from .terminal import add_view_flags, check_choice, choice_from_args, showing

# The bootstrap methods (vocobench.stats.METHODS), written out so that building the parser does
# not load the statistics stack; tests/test_cli_help.py checks that the two lists agree.
METHOD_NAMES = ("BCa", "percentile", "basic")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``report`` arguments to ``parser`` (defaults: the run's ``[decide]`` table)."""
    parser.add_argument("run_dir", metavar="RUN_DIR", help="run directory to report on")
    parser.add_argument("--reference", metavar="SCHEDULE/SAMPLER/STEPS",
                        help="configuration compared against (default: the one with most steps)")
    parser.add_argument("--metrics", metavar="COL[,COL...]",
                        help="metric columns that must stay within their margins; also the "
                             "metrics of the terminal table")
    parser.add_argument("--margin", action="append", default=[], metavar="COL=VALUE",
                        help="non-inferiority margin for a column, in its unit (repeatable)")
    parser.add_argument("--margin-rel", type=float, metavar="FRACTION",
                        help="margin for columns without one, as a fraction of the reference mean")
    parser.add_argument("--primary", metavar="COL", help="metric for the best pick within the RTF budget")
    parser.add_argument("--rtf-budget", metavar="RTF", help="RTF ceiling for that pick ('none' disables)")
    parser.add_argument("--listen", metavar="CONFIG[,CONFIG...]",
                        help="configurations on the listening page")
    parser.add_argument("--listen-limit", type=int, metavar="N", help="utterances on the page (0 = all)")
    parser.add_argument("--confidence", type=float, metavar="LEVEL", help="interval level, e.g. 0.95")
    parser.add_argument("--resamples", type=int, metavar="N", help="bootstrap resamples")
    parser.add_argument("--seed", type=int, metavar="N", help="bootstrap seed")
    parser.add_argument("--method", choices=METHOD_NAMES, help="bootstrap interval method")
    parser.add_argument("--min-items", type=int, metavar="N",
                        help="fewest utterances for a recommendation (fewer: none is named)")
    parser.add_argument("--power", type=float, metavar="P",
                        help="power of the 'utterances needed' figures, e.g. 0.9")
    parser.add_argument("--worst", type=int, metavar="N", help="worst utterances listed per configuration")
    parser.add_argument("--no-plots", action="store_true", help="skip the plots")
    parser.add_argument("--no-page", action="store_true", help="skip the listening page")
    parser.add_argument("-q", "--quiet", action="store_true", help="print nothing on success")
    add_view_flags(parser, metrics=False)


def _margins(pairs: list[str]) -> dict[str, float]:
    out = {}
    for p in pairs:
        col, sep, val = p.partition("=")
        try:
            if not sep or not col:
                raise ValueError
            out[col.strip()] = float(val)
        except ValueError:
            raise InputError("expected COL=VALUE", source="command line", field="--margin",
                             value=p) from None
    return out


def _budget(text: str | None) -> float | bool | None:
    if text is None:
        return None
    if text.strip().lower() == "none":
        return False
    try:
        return float(text)
    except ValueError:
        raise InputError("expected a number or 'none'", source="command line", field="--rtf-budget",
                         value=text) from None


def build_options(args: argparse.Namespace, run: Any = None):
    """The run's ``[decide]`` options with the flags applied (``run``: the loaded run, else
    ``args.run_dir`` is loaded)."""
    from ..store import load_run
    from .render import options_for

    base = options_for(run if run is not None else load_run(args.run_dir), None)
    margins = {**base.margins, **_margins(args.margin)} if args.margin else None
    opts = base.replace(reference=args.reference, metrics=args.metrics, margins=margins,
                        margin_rel=args.margin_rel, primary=args.primary,
                        rtf_budget=_budget(args.rtf_budget), listen=args.listen,
                        listen_limit=args.listen_limit, confidence=args.confidence,
                        resamples=args.resamples, seed=args.seed, method=args.method,
                        min_items=args.min_items, power=args.power,
                        worst=args.worst, plots=False if args.no_plots else None,
                        page=False if args.no_page else None)
    return opts


def main(args: argparse.Namespace) -> int:
    """Run the report; returns 0, or 2 after printing an input error."""
    from ..keys import directed_columns
    from ..store import RunLock, check_writable, load_run
    from .publish import check_report_path
    from .render import render_report

    try:
        run = load_run(args.run_dir)
        choice = choice_from_args(args, strict=True)
        check_choice(choice, directed_columns(run.manifest.get("columns") or {}))
        opts = build_options(args, run)
        check_writable(args.run_dir, field="RUN_DIR", source="command line")
        check_report_path(args.run_dir)
        with RunLock(args.run_dir), showing(choice):     # no sweep writes it meanwhile
            render_report(run, opts, echo=not args.quiet)
    except InputError as e:
        print(f"vocobench report: error: {e}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":              # python -m vocobench.report.cli RUN_DIR
    _p = argparse.ArgumentParser(prog="vocobench report")
    add_arguments(_p)
    sys.exit(main(_p.parse_args()))
