"""``vocobench compare``, ``vocobench baseline freeze`` and ``vocobench plan-size`` (hooked in
by ``vocobench.cli``).

Exit codes of ``compare``: 0 pass (or an inconclusive result the policy accepts, said in the
verdict), 1 regression, 2 unusable or incomparable input (also a test set too small for any
verdict, refused before comparing), 3 inconclusive.
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
    gate = None
    if a.gate:
        words = [g for g in a.gate if g in ("all", "recommended")]
        gate = words[-1] if words else list(a.gate)
    changes: dict[str, Any] = {"allow": allow or None, "max_rtf_increase_pct": a.max_rtf_increase,
                               "min_items": a.min_items, "confidence": a.confidence,
                               "power": a.power, "gated": gate,
                               "accept_inconclusive": True if a.accept_inconclusive else None}
    if any(v is not None for v in changes.values()):
        changes["source"] = f"{pol.source} + command line"
    return pol.updated(**changes)


def _policy_flags(c: argparse.ArgumentParser) -> None:
    c.add_argument("--policy", type=Path, metavar="FILE", help="thresholds in a TOML policy file")
    c.add_argument("--allow", action="append", metavar="METRIC=DROP",
                   help="allowed mean drop of a metric column, in its unit, or 'N%%' of the "
                        "baseline mean (repeatable)")
    c.add_argument("--max-rtf-increase", type=float, metavar="PCT", help="allowed RTF increase in %%")
    c.add_argument("--min-items", type=int, metavar="N",
                   help="fewest paired utterances for a verdict (fewer: refused, exit 2)")
    c.add_argument("--confidence", type=float, metavar="C", help="confidence level, e.g. 0.95")
    c.add_argument("--power", type=float, metavar="P",
                   help="power of the stated resolution and of sample sizes, e.g. 0.9")
    c.add_argument("--gate", action="append", metavar="CONFIG",
                   help="configuration whose verdict decides (schedule/sampler/steps; repeatable), "
                        "or 'all', or 'recommended' (default: the baseline's recommendation)")
    c.add_argument("--match-config", action="append", metavar="BASE=CAND",
                   help="pair baseline configuration BASE with candidate CAND "
                        "(schedule/sampler/steps each; repeatable; only these are compared)")


def cmd_plan(a: argparse.Namespace) -> int:
    from ..textfmt import text_table
    from .compare import parse_match
    from .plan import parse_drops, plan_size

    a.accept_inconclusive = False
    pol = build_policy(a)
    plan = plan_size(a.run_dir, parse_drops(a.drop or []), policy=pol, candidate=a.candidate,
                     match=parse_match(a.match_config or []) or None)
    print(f"Utterances needed ({pol.power:.0%} power, one-sided level {plan.alpha:g}, "
          f"{plan.tests} gated test{'s' * (plan.tests != 1)}; gated: {plan.gated_by}).")
    print(f"Spread: {plan.spread}.")
    print(text_table(*plan.table()))
    print("flag: a true drop of this size is shown beyond the allowance (regression); pass: a "
          "candidate with no drop is shown within it; needed: both, at least min_items. Normal "
          "approximation (Chow, Shao & Wang 2008).")
    total = plan.needed
    print(f"needed for every row: {total} utterances" if total is not None else
          "some drop is within its allowance: no number of utterances flags it as a regression")
    return 0


def cmd_compare(a: argparse.Namespace) -> int:
    from ..store import check_output_file
    from .compare import compare_runs, parse_match
    from .outputs import resolution_lines, verdict_line, write_outputs

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
    if comp.mode == "runs":
        print("\n".join(resolution_lines(comp)))
    return comp.exit_code


def cmd_freeze(a: argparse.Namespace) -> int:
    from .baseline import freeze

    out = freeze(a.run_dir, a.out)
    print(f"baseline written: {out} ({out.stat().st_size} bytes)")
    return 0


def register(sub: Any) -> None:
    """Add ``compare``, ``baseline`` (with ``freeze``) and ``plan-size`` to the subcommands."""
    c = sub.add_parser(
        "compare", help="is the candidate worse than the baseline? (exit 0 pass, 1 regression, "
                        "3 inconclusive)",
        description="Paired comparison, per configuration and metric, of a candidate run with a "
                    "baseline run or frozen baseline file: pass (shown no worse than allowed on "
                    "every gated metric), regression (shown worse) or inconclusive (neither). "
                    "Exit 0 pass, 1 regression, 2 unusable input or a test set too small for "
                    "any verdict, 3 inconclusive (0 if the policy accepts it).")
    c.add_argument("baseline", metavar="BASELINE",
                   help="run directory or baseline file (with --ab: the baseline's run config)")
    c.add_argument("candidate", metavar="CANDIDATE",
                   help="run directory or baseline file (with --ab: the candidate's run config)")
    _policy_flags(c)
    c.add_argument("--accept-inconclusive", action="store_true",
                   help="exit 0 on an inconclusive result (the verdict says it was accepted)")
    c.add_argument("--force", action="store_true",
                   help="compare the common part of runs that are not comparable (said in the report)")
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

    p = sub.add_parser(
        "plan-size", help="utterances needed to detect a given drop, from a pilot run's spread",
        description="From a pilot run (or a baseline file), estimate how many utterances a "
                    "comparison needs to flag a given drop per metric with the given power, and "
                    "to pass a candidate with no drop, from the observed paired spread (normal "
                    "approximation; see vocobench/gate/plan.py).")
    p.add_argument("run_dir", metavar="RUN", help="pilot run directory or baseline file")
    p.add_argument("--drop", action="append", metavar="METRIC=DROP", required=True,
                   help="drop to detect, in the metric's unit (repeatable), e.g. pesq_wb=0.1")
    p.add_argument("--candidate", metavar="RUN2",
                   help="a second run: the spread of its paired differences with RUN")
    _policy_flags(p)
    p.set_defaults(fn=cmd_plan)
