"""The generated configuration reference: every declared parameter table as Markdown.

DEVELOPERS.md holds the output between ``<!-- params:begin -->`` and ``<!-- params:end -->``;
``python -m vocobench.docs DEVELOPERS.md`` rewrites that part, and a test fails when it is stale.
"""
from __future__ import annotations

import sys
from pathlib import Path

from .params import Table, markdown

BEGIN, END = "<!-- params:begin -->", "<!-- params:end -->"


def parameter_tables() -> list[Table]:
    """Run config sections, schedule kinds, sampler and metric options, [decide], [search] and its
    spaces, gate policy."""
    from .config import CONFIG
    from .gate.policy import POLICY
    from .metrics.base import REGISTRY, metric_class
    from .report.options import DECIDE
    from .samplers import SAMPLER_OPTIONS
    from .schedules import KIND_OPTIONS
    from .search import SEARCH, SPACE

    metrics = []
    for name in REGISTRY:
        cls = metric_class(name)
        spec = cls.options_spec
        metrics.append(Table(f"metrics.options.{name}", spec.params, doc=cls.description + ".",
                             rules=spec.rules, entry="option"))
    return [CONFIG, *KIND_OPTIONS.values(), *SAMPLER_OPTIONS.values(), *metrics, DECIDE, SEARCH, SPACE, POLICY]


def configuration_reference() -> str:
    """Markdown of :func:`parameter_tables`, as placed between the markers."""
    return markdown(parameter_tables())


def with_reference(text: str) -> str:
    """``text`` with the part between the markers replaced by the current reference."""
    if BEGIN not in text or END not in text:
        raise ValueError(f"markers {BEGIN} … {END} not found")
    head, rest = text.split(BEGIN, 1)
    _, tail = rest.split(END, 1)
    return f"{head}{BEGIN}\n{configuration_reference()}{END}{tail}"


def main(argv: list[str] | None = None) -> int:
    """Rewrite the reference inside the given Markdown file (e.g. DEVELOPERS.md)."""
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 1:
        print("usage: python -m vocobench.docs FILE.md", file=sys.stderr)
        return 2
    path = Path(args[0])
    path.write_text(with_reference(path.read_text(encoding="utf-8")), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
