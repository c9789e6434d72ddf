"""A helper for a user's own pytest suite::

    from vocobench.gate import assert_no_regression

    def test_vocoder_release():
        assert_no_regression("baselines/v1.json.gz", "reports/candidate")

It raises ``AssertionError`` whose message is the Markdown summary, so a failing test shows the
offending configurations, their intervals and the rule applied: on a regression, and on an
inconclusive result unless the policy accepts it (``accept_inconclusive``) — the same outcomes
that make ``vocobench compare`` exit non-zero.
"""
from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from ..store import Run
from .compare import Comparison, compare_runs
from .outputs import markdown
from .policy import Policy


def assert_no_regression(baseline: "str | Path | Run", candidate: "str | Path | Run",
                         policy: "Policy | str | Path | Mapping[str, Any] | None" = None, *,
                         force: bool = False, match: Mapping[str, str] | None = None) -> Comparison:
    """Compare (see :func:`vocobench.gate.compare_runs`); raise ``AssertionError`` unless the
    comparison passes (or is inconclusive and the policy accepts that).

    Returns the :class:`Comparison` otherwise, for further checks. Incomparable inputs, and a
    test set too small for any verdict, raise :class:`vocobench.errors.InputError` (an error,
    not a test failure).
    """
    comp = compare_runs(baseline, candidate, policy, force=force, match=match)
    if comp.exit_code != 0:
        raise AssertionError(markdown(comp))
    return comp
