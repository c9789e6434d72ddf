"""``vocobench compare`` and ``vocobench baseline freeze`` (hooked in by ``vocobench.cli``).

Exit codes: 0 no regression, 1 regression, 2 unusable or incomparable input.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .policy import Policy


def build_policy(a: argparse.Namespace) -> "Policy":
    """Default policy < ``--policy FILE`` < individual options."""
    from .policy import Policy, load_policy, parse_allow_option   # here: keeps --help quick

    pol = load_policy(a.policy) if a.policy else Policy()
    allow = dict(parse_allow_option(t) for t in (a.allow or []))
    changes: dict[str, Any] = {"allow": allow or None, "max_rtf_increase_pct": a.max_rtf_increase,
                               "min_items": a.min_items, "confidence": a.confidence}
    if any(v is not None for v in changes.values()):
        changes["source"] = f"{pol.source} + command line"
    return pol.updated(**changes)


def cmd_compare(a: argparse.Namespace) -> int:
    from ..store import check_output_file
    from .compare import compare_runs, parse_match
    from .outputs import verdict_line, write_outputs

    for flag, path in (("--markdown", a.markdown), ("--json", a.json), ("--junit", a.junit)):
        if path is not None:                 # checked before any work, so nothing is half-written
            check_output_file(path, field=flag)
    policy = build_policy(a)
    match = parse_match(a.match_config or []) or None
    if a.ab:
        from .ab import ab_compare

        say = None if a.quiet else (lambda s: print(s, file=sys.stderr))
        comp = ab_compare(a.baseline, a.candidate, policy, repeats=a.repeats, match=match, progress=say)
    else:
        comp = compare_runs(a.baseline, a.candidate, policy, force=a.force, match=match)
    write_outputs(comp, markdown_path=a.markdown, json_path=a.json, junit_path=a.junit)
    print(verdict_line(comp))
    return comp.exit_code


def cmd_freeze(a: argparse.Namespace) -> int:
    from .baseline import freeze

    out = freeze(a.run_dir, a.out)
    print(f"baseline written: {out} ({out.stat().st_size} bytes)")
    return 0


def register(sub: Any) -> None:
    """Add ``compare`` and ``baseline`` (with ``freeze``) to the ``vocobench`` subcommands."""
    c = sub.add_parser(
        "compare", help="is the candidate worse than the baseline? (exit 1 on a regression)",
        description="Paired comparison, per configuration and metric, of a candidate run with a "
                    "baseline run or frozen baseline file: verdicts pass, regression, improvement "
                    "or inconclusive. Exit 0 no regression, 1 regression, 2 unusable input.")
    c.add_argument("baseline", metavar="BASELINE",
                   help="run directory or baseline file (with --ab: the baseline's run config)")
    c.add_argument("candidate", metavar="CANDIDATE",
                   help="run directory or baseline file (with --ab: the candidate's run config)")
    c.add_argument("--policy", type=Path, metavar="FILE", help="thresholds in a TOML policy file")
    c.add_argument("--allow", action="append", metavar="METRIC=DROP",
                   help="allowed mean drop of a metric column, in its unit, or 'N%%' of the "
                        "baseline mean (repeatable)")
    c.add_argument("--max-rtf-increase", type=float, metavar="PCT", help="allowed RTF increase in %%")
    c.add_argument("--min-items", type=int, metavar="N",
                   help="fewest paired utterances for a verdict (fewer: inconclusive)")
    c.add_argument("--confidence", type=float, metavar="C", help="confidence level, e.g. 0.95")
    c.add_argument("--force", action="store_true",
                   help="compare the common part of runs that are not comparable (said in the report)")
    c.add_argument("--match-config", action="append", metavar="BASE=CAND",
                   help="pair baseline configuration BASE with candidate CAND "
                        "(schedule/sampler/steps each; repeatable; only these are compared)")
    c.add_argument("--ab", action="store_true",
                   help="BASELINE and CANDIDATE are run configs: load both here and time them "
                        "interleaved for a latency verdict on this machine")
    c.add_argument("--repeats", type=int, metavar="N",
                   help="A/B rounds per configuration and timing utterance (default 10)")
    c.add_argument("--markdown", type=Path, metavar="FILE", help="write a Markdown summary")
    c.add_argument("--json", type=Path, metavar="FILE", help="write the full result as JSON")
    c.add_argument("--junit", type=Path, metavar="FILE",
                   help="write JUnit XML, one test case per configuration")
    c.add_argument("-q", "--quiet", action="store_true", help="no progress output (A/B)")
    c.set_defaults(fn=cmd_compare)

    b = sub.add_parser("baseline", help="freeze a run into a compact baseline file to commit",
                       description="Manage frozen baselines (format vocobench-baseline/1).")
    bs = b.add_subparsers(dest="baseline_command", metavar="ACTION", required=True)
    f = bs.add_parser("freeze", help="write RUN_DIR's results (no audio) and manifest to FILE",
                      description="Write a compact, versioned baseline of RUN_DIR; FILE ending in "
                                  ".gz is gzip-compressed. compare accepts it on either side.")
    f.add_argument("run_dir", metavar="RUN_DIR", type=Path, help="the run directory to freeze")
    f.add_argument("--out", type=Path, metavar="FILE", required=True,
                   help="baseline file to write; a name ending in .gz is gzip-compressed")
    f.set_defaults(fn=cmd_freeze)
