"""The command line's help: every argument explained, and help that loads no numerical stack.

Sources: the argparse documentation (Python 3.11 standard library: ``help=None`` leaves an
argument unexplained in ``--help``; ``argparse.SUPPRESS`` hides it) and ``python -X importtime``
(CPython command-line documentation: one stderr line per module imported). Speed itself is
measured in bench/bench_cli.py, not here.
"""
from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tomllib

import pytest

from conftest import REPO_ROOT, run_vocobench

sys.path.insert(0, str(REPO_ROOT))

from vocobench.cli import build_parser  # noqa: E402

HEAVY = ("numpy", "pandas", "scipy", "matplotlib", "librosa", "torch")


def _commands(parser: argparse.ArgumentParser, prefix=()):
    """(words, parser) for the top level and every (nested) subcommand."""
    yield prefix, parser
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _commands(sub, (*prefix, name))


COMMANDS = [words for words, _ in _commands(build_parser())]


def test_every_subcommand_is_listed():
    # The subcommands documented in README.md's command table, plus `show`.
    names = {w[0] for w in COMMANDS if w}
    assert {"run", "demo", "check", "schedules", "metrics", "report", "show", "compare",
            "baseline"} <= names
    assert ("baseline", "freeze") in COMMANDS


@pytest.mark.parametrize("words", COMMANDS, ids=lambda w: " ".join(w) or "vocobench")
def test_help_explains_every_argument(words, tmp_path):
    parser = dict(_commands(build_parser()))[words]
    r = run_vocobench(*words, "--help", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    text = " ".join(r.stdout.split())
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for choice in action._choices_actions:        # one line per subcommand
                assert choice.help, f"{' '.join(words)} {choice.dest}: no help"
            continue
        assert action.help and action.help != argparse.SUPPRESS, \
            f"{' '.join(words) or 'vocobench'} {action.option_strings or action.dest}: no help"
        label = action.option_strings[-1] if action.option_strings else (action.metavar or action.dest)
        assert label in text, label
        first = " ".join(str(action.help).split()[:3]).replace("%%", "%")
        assert "%(" in first or first in text, first


@pytest.mark.parametrize("words", [(), ("report",), ("show",), ("compare",), ("run",)],
                         ids=lambda w: " ".join(w) or "vocobench")
def test_help_imports_no_numerical_library(words, tmp_path):
    r = subprocess.run([sys.executable, "-X", "importtime", "-m", "vocobench", *words, "--help"],
                       cwd=tmp_path, capture_output=True, text=True,
                       env={"PYTHONPATH": str(REPO_ROOT), "PATH": "/usr/bin:/bin"})
    assert r.returncode == 0, r.stderr
    imported = {line.rsplit("|", 1)[-1].strip().split(".")[0]
                for line in r.stderr.splitlines() if line.startswith("import time:")}
    assert "vocobench" in imported                # the check reads real import lines
    assert not imported & set(HEAVY), sorted(imported & set(HEAVY))


def test_report_method_choices_match_the_statistics():
    # `report --method` lists the methods without importing vocobench.stats; they must agree.
    from vocobench.report.cli import METHOD_NAMES
    from vocobench.stats import METHODS

    assert tuple(METHOD_NAMES) == tuple(METHODS)


def test_decide_example_in_options_uses_real_metric_columns():
    # The [decide] example in vocobench/report/options.py must name columns the metric registry
    # produces (the columns `vocobench metrics` lists), and parse as TOML and as [decide] options.
    import vocobench.report.options as options
    from vocobench.metrics import available_metrics

    doc = options.__doc__
    block = doc[doc.index("\n    [decide]"):doc.index("Keys, types")]
    table = tomllib.loads(re.sub(r"^ {4}", "", block, flags=re.M))["decide"]
    columns = {c["name"] for m in available_metrics() for c in m["columns"]}
    assert set(table["margins"]) <= columns, set(table["margins"]) - columns
    options.ReportOptions.from_mapping(table)
