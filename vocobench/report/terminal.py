"""The terminal view of a run: one row per configuration, as wide as the terminal allows.

A row holds the configuration, its NFE, its median RTF and one narrow column per metric: the
mean over utterances with its interval, followed by marks: ``◆`` on that metric's Pareto front,
``▲``/``▼`` significantly better/worse than the reference (Holm-adjusted Wilcoxon p below
1 − confidence) and ``!`` where the non-inferiority check of the decision failed. The recommended
rows carry ``★``, the reference ``ref``; a legend under the table spells the marks out. The full
table (every interval, difference and p-value) stays in the report files.

The width comes from :class:`rich.console.Console` (``COLUMNS`` wins over the detected size; 80
when the output is not a terminal), and so does colour: none when the output is not a terminal
or ``NO_COLOR`` is set. When the one-line layout is too wide, each interval moves under its mean;
when that is still too wide, trailing metrics are left out and named. ``rich`` and ``pandas``
are imported inside the functions, so building the command line stays quick.
"""
from __future__ import annotations

import contextlib
import contextvars
import textwrap
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable, Iterator, Sequence

from ..errors import InputError
from ..textfmt import finite, fmt

if TYPE_CHECKING:
    import argparse

    import pandas as pd
    from rich.console import Console
    from rich.table import Table

    from ..stats import RunStatistics
    from .decide import Recommendation


def _failed(r: Any) -> str:
    return f"{int(r['failed'])}/{int(r['items'])}" if r["failed"] else "0"


def _rtf(r: Any) -> str:
    return fmt(r["rtf_median"], 3) + ("°" if r.get("latency_source") == "sweep" else "")


# Non-metric columns the view can show: name → (header, cell of a build_table row).
INFO: dict[str, tuple[str, Callable[[Any], str]]] = {
    "nfe": ("NFE", lambda r: str(int(r["nfe"]))),
    "rtf": ("RTF", _rtf),
    "rtf_p90": ("RTF p90", lambda r: fmt(r["rtf_p90"], 3)),
    "ms_per_nfe": ("ms/NFE", lambda r: fmt(r["ms_per_nfe"], 3)),
    "first_call": ("1st call s", lambda r: fmt(r["first_call_s"], 3)),
    "failed": ("failed", _failed),
}
ALIASES = {"rtf_median": "rtf", "first_call_s": "first_call"}
FRONT, BETTER, WORSE, OUTSIDE, RECOMMENDED = "◆", "▲", "▼", "!", "★"
STYLES = {FRONT: "cyan", BETTER: "green", WORSE: "red", OUTSIDE: "bold yellow"}


@dataclass(frozen=True)
class ViewChoice:
    """What the terminal table shows: ``columns`` (info and metric names, exactly these) and/or
    ``metrics`` (metric columns); ``None`` keeps the default. ``strict``: an unknown name is an
    :class:`InputError` (``report``, ``show``); otherwise a note (``run``, ``demo``: the sweep's
    results must not be lost over a typo in a display flag)."""

    columns: tuple[str, ...] | None = None
    metrics: tuple[str, ...] | None = None
    strict: bool = False


_CHOICE: contextvars.ContextVar[ViewChoice] = contextvars.ContextVar("vocobench_view",
                                                                    default=ViewChoice())


@contextlib.contextmanager
def showing(choice: ViewChoice) -> Iterator[None]:
    """Within the block, tables echoed by :func:`echo_table` follow ``choice`` (so that ``run``
    can choose the view of the report its sweep renders at the end)."""
    token = _CHOICE.set(choice)
    try:
        yield
    finally:
        _CHOICE.reset(token)


def add_view_flags(parser: "argparse.ArgumentParser", metrics: bool = True) -> None:
    """``--columns`` (and ``--metrics`` when ``metrics``) on a command that prints the table."""
    parser.add_argument(
        "--columns", metavar="NAME[,NAME...]",
        help="exactly these columns in the terminal table, after the configuration: "
             + ", ".join(INFO) + " and metric columns (default: nfe, rtf, failed when any "
             "item failed, then every metric)")
    if metrics:
        parser.add_argument("--metrics", metavar="COL[,COL...]",
                            help="metric columns in the terminal table (default: every metric "
                                 "with values, those the decision checks first)")


def _names(text: str | Sequence[str] | None) -> tuple[str, ...] | None:
    if text is None:
        return None
    parts = text.split(",") if isinstance(text, str) else text
    out = tuple(p.strip() for p in parts if p.strip())
    return out or None


def choice_from_args(args: "argparse.Namespace", strict: bool) -> ViewChoice:
    return ViewChoice(_names(getattr(args, "columns", None)), _names(getattr(args, "metrics", None)),
                      strict)


def check_choice(choice: ViewChoice, metric_columns: Sequence[str]) -> None:
    """Raise :class:`InputError` for a name of ``choice`` that the view cannot show (run this
    before anything is written)."""
    for flag, names, valid in (("--columns", choice.columns, [*INFO, *ALIASES, *metric_columns]),
                               ("--metrics", choice.metrics, list(metric_columns))):
        for name in names or ():
            if name not in valid:
                raise InputError("no such column in this run; choose from "
                                 + ", ".join(x for x in valid if x not in ALIASES),
                                 source="command line", field=flag, value=name)


def resolve(choice: ViewChoice, table: "pd.DataFrame", st: "RunStatistics",
            decision: "Recommendation | None") -> tuple[list[str], list[str], list[str]]:
    """(info columns, metric columns, notes) of ``choice`` for this run, in display order."""
    if choice.strict:
        check_choice(choice, list(st.columns))
    with_values = [c for c in st.columns if f"{c}_mean" in table
                   and any(finite(v) is not None for v in table[f"{c}_mean"])]
    first = [m for m in (decision.metrics if decision else []) if m in with_values]
    metrics = list(dict.fromkeys([*first, *with_values]))
    info = ["nfe", "rtf"] + (["failed"] if (table["failed"] > 0).any() else [])
    unknown: list[str] = []
    if choice.columns is not None:
        info, metrics = [], []
        for name in choice.columns:
            name = ALIASES.get(name, name)
            (info if name in INFO else metrics if name in st.columns else unknown).append(name)
    if choice.metrics is not None:
        metrics = [*metrics, *choice.metrics] if choice.columns is not None else list(choice.metrics)
        unknown += [m for m in metrics if m not in st.columns]
        metrics = [m for m in metrics if m in st.columns]
    notes = [f"not shown, no such column: {', '.join(unknown)} (there are: "
             f"{', '.join([*INFO, *st.columns])})"] if unknown else []
    return list(dict.fromkeys(info)), list(dict.fromkeys(metrics)), notes


# ---------------------------------------------------------------- building the table

def _marks(r: Any, col: str, hib: bool, alpha: float, failed_checks: set[tuple[str, str]]) -> str:
    out = FRONT if bool(r.get(f"{col}_front")) else ""
    if r["reference"]:
        return out
    p, d = finite(r.get(f"{col}_p_holm")), finite(r.get(f"{col}_diff"))
    if p is not None and d not in (None, 0.0) and p < alpha:
        out += BETTER if (d > 0) == hib else WORSE
    if (r["config"], col) in failed_checks:
        out += OUTSIDE
    return out


def _metric_cell(r: Any, col: str, marks: str, stacked: bool) -> Any:
    """``mean [lo, hi] marks`` on one line, or ``mean marks`` over ``[lo, hi]`` when stacked."""
    from rich.text import Text

    mean, lo, hi = (r.get(f"{col}_{k}") for k in ("mean", "ci_low", "ci_high"))
    cell = Text(fmt(mean, 4))
    bounds = f"[{fmt(lo, 3)}, {fmt(hi, 3)}]" if finite(lo) is not None and finite(hi) is not None \
        and finite(mean) is not None else ""
    if bounds and not stacked:
        cell.append(" " + bounds)
    if marks:
        cell.append(" ")
        for m in marks:
            cell.append(m, style=STYLES[m])
    if bounds and stacked:
        cell.append("\n" + bounds)
    return cell


def _header(st: "RunStatistics", col: str) -> str:
    spec = st.columns[col]
    unit = f"\n{spec['unit']}" if spec.get("unit") else ""
    return f"{col} {'↑' if spec['higher_is_better'] else '↓'}{unit}"


def build_view(table: "pd.DataFrame", st: "RunStatistics", decision: "Recommendation | None",
               info: Sequence[str], metrics: Sequence[str], stacked: bool,
               rows: Sequence[str] | None = None) -> "Table":
    """The rich table: ``info`` and ``metrics`` columns, the rows of ``rows`` (labels; default
    every configuration), intervals under their means when ``stacked``."""
    from rich import box
    from rich.table import Table

    recommended = set(decision.recommended) if decision else set()
    failed_checks: set[tuple[str, str]] = set()
    if decision is not None and len(decision.checks):
        bad = decision.checks[~decision.checks["passed"].astype(bool)]
        failed_checks = set(zip(bad["config"], bad["column"]))
    alpha = 1.0 - st.settings.confidence
    t = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold",
              padding=(0, 1))
    t.add_column("", no_wrap=True)
    t.add_column("configuration", no_wrap=True)
    for name in info:
        t.add_column(INFO[name][0], justify="right", no_wrap=True)
    for col in metrics:
        t.add_column(_header(st, col), justify="right")
    keep = set(rows) if rows is not None else None
    for _, r in table.iterrows():
        if keep is not None and r["config"] not in keep:
            continue
        mark = (RECOMMENDED if r["config"] in recommended else "") + ("ref" if r["reference"] else "")
        cells = [mark, r["config"], *(INFO[n][1](r) for n in info)]
        for col in metrics:
            hib = bool(st.columns[col]["higher_is_better"])
            cells.append(_metric_cell(r, col, _marks(r, col, hib, alpha, failed_checks), stacked))
        style = "bold" if r["config"] in recommended else "dim" if r["reference"] else None
        t.add_row(*cells, style=style)
    return t


def _width(console: "Console", renderable: Any) -> int:
    return console.measure(renderable, options=console.options.update(width=10_000)).maximum


def fit(console: "Console", table: "pd.DataFrame", st: "RunStatistics",
        decision: "Recommendation | None", info: Sequence[str], metrics: Sequence[str],
        rows: Sequence[str] | None = None) -> tuple["Table", list[str]]:
    """The widest layout that fits ``console.width``: one line per row, else intervals under
    their means, else fewer metrics (trailing ones first). Returns (table, metrics left out)."""
    for stacked in (False, True):
        t = build_view(table, st, decision, info, metrics, stacked, rows)
        if _width(console, t) <= console.width:
            return t, []
    shown = list(metrics)
    while len(shown) > 1:
        shown.pop()
        t = build_view(table, st, decision, info, shown, True, rows)
        if _width(console, t) <= console.width:
            break
    return t, [m for m in metrics if m not in shown]


# ---------------------------------------------------------------- printing

def console(file: Any = None, width: int | None = None, color: bool | None = None) -> "Console":
    """A console for the views: rich's width and colour detection unless given; no markup, emoji
    or highlighting, so labels and numbers are printed as they are."""
    from rich.console import Console

    kw: dict[str, Any] = {} if color is None else {"color_system": "standard" if color else None,
                                                   "force_terminal": bool(color)}
    return Console(file=file, width=width, markup=False, emoji=False, highlight=False, **kw)


def legend(table: "pd.DataFrame", st: "RunStatistics", decision: "Recommendation | None",
           shown: Sequence[str], n_utt: int | None = None) -> list[Any]:
    """Lines explaining the marks of a table built by :func:`build_view`."""
    from rich.text import Text

    conf = f"{100 * st.settings.confidence:g} %"
    lines = []
    if decision is not None:
        primary = getattr(decision, "primary", None)
        roles = {getattr(decision, "cheapest", None): "cheapest within the margins",
                 getattr(decision, "best_in_budget", None):
                     f"best {primary} within the RTF budget" if primary else "best within the budget"}
        rec = [f"{c} ({roles[c]})" if c in roles else c for c in decision.recommended]
        line = Text(RECOMMENDED + " ", style="bold")
        line.append("recommended: " + ("; ".join(rec) if rec else "none"))
        lines.append(line)
    lines.append(Text(f"ref reference: {st.reference.label}"
                      + ("; differences are against it" if shown else "")))
    if shown:
        unit = f" over {n_utt} utterances" if n_utt else ""
        marks = Text(f"Cells: mean [{conf} interval]{unit}. ")
        for sym, words in ((FRONT, "on the Pareto front of median RTF against that metric"),
                           (BETTER + WORSE, "significantly better / worse than the reference "
                                            f"(Holm-adjusted Wilcoxon p < {1 - st.settings.confidence:.2g})"),
                           (OUTSIDE, f"a loss beyond the margin is not ruled out (one-sided {conf} "
                                     "bound)")):
            for ch in sym:
                marks.append(ch, style=STYLES[ch])
            marks.append(f" {words}. ")
        marks.rstrip()
        lines.append(marks)
    sweep = "latency_source" in table and bool((table["latency_source"] == "sweep").any())
    lines.append(Text("RTF: median real-time factor in the timing phase"
                      + (" (° from the sweep's own timing)" if sweep else "")
                      + ". Every interval, difference and p-value: report/table.md."))
    return lines


def echo_table(table: "pd.DataFrame", st: "RunStatistics", decision: "Recommendation | None",
               choice: ViewChoice | None = None, out: "Console | None" = None,
               rows: Sequence[str] | None = None) -> None:
    """Print the view of ``table`` (the choice of :func:`showing` unless given), then its legend;
    ``rows``: the configuration labels shown (default: all)."""
    out = out or console()
    info, metrics, notes = resolve(choice or _CHOICE.get(), table, st, decision)
    counts = [finite(v) for m in metrics for v in table.get(f"{m}_n", [])]
    n_utt = int(max((c for c in counts if c is not None), default=0)) or None
    view, hidden = fit(out, table, st, decision, info, metrics, rows)
    out.print(view)
    if hidden:
        notes.append(f"left out for width: {', '.join(hidden)} (choose with --metrics or "
                     "--columns, or widen the terminal)")
    for line in [*legend(table, st, decision, metrics and [m for m in metrics if m not in hidden], n_utt),
                 *notes]:
        out.print(line)


def echo_text(text: str, out: "Console | None" = None) -> None:
    """Print plain text wrapped to the console's width; an indented line keeps its indent and
    its continuation lines are indented a little further."""
    out = out or console()
    width = max(20, out.width)
    for line in text.splitlines():
        body = line.lstrip(" ")
        indent = " " * (len(line) - len(body))
        wrapped = textwrap.fill(body, width, initial_indent=indent, break_on_hyphens=False,
                                subsequent_indent=indent + ("  " if indent else ""),
                                break_long_words=False) if body else ""
        out.print(wrapped, soft_wrap=True)

