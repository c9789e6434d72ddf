"""``vocobench show RUN``: look through a finished run without writing anything.

Three views, each printed as a table sized to the terminal, or as CSV or JSON (``--format``):

* per configuration (the default): the table of ``vocobench report``, with the recommended rows
  and the reference marked; its statistics are computed afresh, in memory, with the run's
  ``[decide]`` options;
* per utterance (``--by utt``): one row per utterance and configuration, seeds averaged;
* the worst utterances on one metric (``--worst COL``): (utterance, configuration) pairs, worst
  first whichever way the metric points, with the difference to the reference configuration on
  the same utterance. ``show RUN --worst stoi --steps 4`` lists the utterances worst on STOI
  among the 4-step configurations.

Filters: ``--utt`` and ``--tag`` choose utterances (statistics are then computed over those
only); ``--config`` and ``--steps`` choose the configurations shown (the reference is still
computed, as the comparisons need it). Patterns are shell-style (``quadratic/*/10``).
"""
from __future__ import annotations

import argparse
import dataclasses
import fnmatch
import sys
from typing import TYPE_CHECKING, Sequence

from ..errors import InputError
from .terminal import add_view_flags, choice_from_args

if TYPE_CHECKING:
    import pandas as pd

    from ..store import Run

FORMATS = ("table", "csv", "json")
DEFAULT_TOP = 10


def add_arguments(p: argparse.ArgumentParser) -> None:
    """The ``show`` arguments."""
    p.add_argument("run_dir", metavar="RUN_DIR", help="run directory to look at")
    p.add_argument("--by", choices=("config", "utt"), default="config",
                   help="one row per configuration (default) or per utterance and configuration")
    p.add_argument("--worst", metavar="COL",
                   help="rank (utterance, configuration) pairs on this metric column, worst first")
    p.add_argument("--top", type=int, default=DEFAULT_TOP, metavar="N",
                   help=f"rows listed by --worst (default {DEFAULT_TOP}; 0 = all)")
    p.add_argument("--config", action="append", metavar="PATTERN",
                   help="configurations shown, as schedule/sampler/steps; shell-style patterns "
                        "allowed (repeatable)")
    p.add_argument("--steps", metavar="N[,N...]", help="only configurations with these step counts")
    p.add_argument("--utt", action="append", metavar="PATTERN",
                   help="only these utterance ids; shell-style patterns allowed (repeatable)")
    p.add_argument("--tag", action="append", metavar="KEY=VALUE",
                   help="only utterances whose tag KEY equals VALUE (repeatable; all must hold)")
    p.add_argument("--format", choices=FORMATS, default="table",
                   help="table for reading (default), csv or json for scripts")
    add_view_flags(p)


def main(args: argparse.Namespace) -> int:
    """Print the view chosen by ``args``; InputError for bad input (the CLI exits 2)."""
    from ..store import load_run

    if args.top < 0:
        raise InputError("must be 0 or more", source="command line", field="--top", value=args.top)
    run = load_run(args.run_dir)
    run = _only_utterances(run, args.utt, args.tag)
    labels = _configs_shown(run, args.config, _steps(args.steps))
    if args.worst:
        frame = worst(run, args.worst, labels, args.top)
        title = f"worst on {args.worst}" + ("" if args.top == 0 else f" (top {args.top})")
    elif args.by == "utt":
        frame = per_utterance(run, labels, _metric_names(run, args))
        title = "per utterance and configuration (seeds averaged)"
    else:
        return _per_config(run, args, labels)
    _emit(frame, args.format, title, run, view="worst" if args.worst else "utt")
    return 0


# ---------------------------------------------------------------- selection

def _steps(text: str | None) -> set[int] | None:
    if text is None:
        return None
    try:
        return {int(x) for x in text.split(",") if x.strip()}
    except ValueError:
        raise InputError("expected step counts such as 4 or 4,8", source="command line",
                         field="--steps", value=text) from None


def _tags(run: "Run") -> list[str]:
    return [c[4:] for c in run.items.columns if c.startswith("tag_")]


def _only_utterances(run: "Run", utts: Sequence[str] | None, tags: Sequence[str] | None) -> "Run":
    """The run restricted to the utterances matching every filter (an error when none does)."""
    items = run.items
    keep = items["utt_id"].astype(str)
    mask = keep.map(lambda u: True)
    if utts:
        mask &= keep.map(lambda u: any(fnmatch.fnmatchcase(u, p) for p in utts))
    for t in tags or ():
        key, sep, value = t.partition("=")
        if not sep or not key:
            raise InputError("expected KEY=VALUE", source="command line", field="--tag", value=t)
        if f"tag_{key}" not in items.columns:
            raise InputError("no such tag; the utterances have: " + (", ".join(_tags(run)) or "none"),
                             source="command line", field="--tag", value=t)
        mask &= items[f"tag_{key}"].astype(str) == value
    if mask.all():
        return run
    if not mask.any():
        raise InputError("no utterance matches the filters", source="command line",
                         field="--utt/--tag", value=" ".join([*(utts or []), *(tags or [])]))
    return dataclasses.replace(run, items=items[mask].reset_index(drop=True))


def _configs_shown(run: "Run", patterns: Sequence[str] | None, steps: set[int] | None) -> list[str]:
    from ..runtables import configurations

    configs = configurations(run.manifest, run.items)
    shown = [c.label for c in configs
             if (not patterns or any(fnmatch.fnmatchcase(c.label, p) for p in patterns))
             and (steps is None or c.steps in steps)]
    if not shown:
        raise InputError("no configuration matches; the run has: "
                         + ", ".join(c.label for c in configs), source="command line",
                         field="--config/--steps",
                         value=" ".join([*(patterns or []), *map(str, sorted(steps or []))]))
    return shown


def _metric_names(run: "Run", args: argparse.Namespace) -> list[str]:
    """Metric columns of the per-utterance view: chosen by --metrics/--columns, else the
    directed ones."""
    from ..keys import directed_columns

    cols = dict(run.manifest.get("columns") or {})
    choice = choice_from_args(args, strict=True)
    wanted = [*(choice.columns or ()), *(choice.metrics or ())]
    if not wanted:
        return directed_columns(cols)
    bad = [w for w in wanted if w not in cols]
    if bad:
        raise InputError("no such metric column; the run has: " + ", ".join(cols),
                         source="command line", field="--metrics/--columns", value=bad[0])
    return list(dict.fromkeys(wanted))


# ---------------------------------------------------------------- views

def per_utterance(run: "Run", labels: Sequence[str], metrics: Sequence[str]) -> "pd.DataFrame":
    """One row per (utterance, configuration) of ``labels``: ok and failed seeds, the tags, and
    the mean of each metric column over the ok seeds."""
    import pandas as pd

    from ..keys import labels as label_of
    from ..runtables import ok_mask

    items = run.items.assign(config=label_of(run.items), ok=ok_mask(run.items))
    items = items[items["config"].isin(labels)]
    for m in metrics:
        items[m] = pd.to_numeric(items[m], errors="coerce") if m in items else float("nan")
    tags = [c for c in items.columns if c.startswith("tag_")]
    keys = ["utt_id", "config"]
    g = items.groupby(keys, sort=False)
    out = g[tags].first() if tags else g.size().to_frame().iloc[:, :0]
    out["seeds_ok"] = g["ok"].sum().astype(int)
    out["seeds_failed"] = g["ok"].size().astype(int) - out["seeds_ok"]
    means = items[items["ok"]].groupby(keys, sort=False)[list(metrics)].mean()
    out = out.join(means).reset_index()
    order = {lab: i for i, lab in enumerate(labels)}
    utts = _utterance_order(run)
    out["_u"] = out["utt_id"].map(lambda u: utts.get(str(u), len(utts)))
    out["_c"] = out["config"].map(order)
    return out.sort_values(["_u", "_c"], kind="stable").drop(columns=["_u", "_c"]).reset_index(drop=True)


def _utterance_order(run: "Run") -> dict[str, int]:
    ids = [str(u.get("id")) for u in (run.manifest.get("dataset") or {}).get("utterances") or []]
    ids += list(dict.fromkeys(run.items["utt_id"].astype(str)))
    return {u: i for i, u in enumerate(dict.fromkeys(ids))}


def _reference(run: "Run") -> str:
    from ..keys import ConfigKey
    from ..runtables import configurations, default_reference

    ref = (run.manifest.get("decide") or {}).get("reference")
    if ref:
        return ConfigKey.parse(ref, source="manifest.json", field="decide.reference").label
    return default_reference(configurations(run.manifest, run.items)).label


def worst(run: "Run", column: str, labels: Sequence[str], top: int) -> "pd.DataFrame":
    """The ``top`` worst (utterance, configuration) pairs of ``labels`` on ``column`` (0 = all),
    with the reference's value on the same utterance and the difference."""
    from ..keys import direction

    cols = dict(run.manifest.get("columns") or {})
    if column not in cols or direction(cols[column]) is None:
        directed = [c for c, s in cols.items() if direction(s) is not None]
        raise InputError("not a metric column with a direction; choose from " + ", ".join(directed),
                         source="command line", field="--worst", value=column)
    ref = _reference(run)
    rows = per_utterance(run, list(dict.fromkeys([*labels, ref])), [column])
    base = rows[rows["config"] == ref].set_index("utt_id")[column]
    rows = rows[rows["config"].isin(labels) & rows[column].notna()].copy()
    rows["reference_value"] = rows["utt_id"].map(base)
    rows["diff_vs_reference"] = rows[column] - rows["reference_value"]
    rows = rows.sort_values(column, ascending=bool(direction(cols[column])), kind="stable")
    rows.insert(0, "rank", range(1, len(rows) + 1))
    rows = rows.rename(columns={column: "value"}).assign(column=column, reference=ref)
    return rows.head(top) if top else rows


def _per_config(run: "Run", args: argparse.Namespace, labels: list[str]) -> int:
    from .render import decide, options_for
    from .terminal import check_choice, console, echo_table

    _, _, st, table, decision = decide(run, options_for(run, None))
    if args.format != "table":
        chosen = table[table["config"].isin(labels)].copy()
        chosen["recommended"] = chosen["config"].isin(decision.recommended if decision else [])
        _emit(chosen, args.format, "per configuration", run, view="config",
              reference=st.reference.label)
        return 0
    choice = choice_from_args(args, strict=True)
    check_choice(choice, st.columns)
    out = console()
    n = len(set(run.items["utt_id"].astype(str)))
    out.print(f"{len(labels)} of {len(st.configs)} configurations, {n} utterances: {run.path}",
              overflow="fold")
    echo_table(table, st, decision, choice, out=out, rows=labels)
    return 0


# ---------------------------------------------------------------- output

def _emit(frame: "pd.DataFrame", fmt: str, title: str, run: "Run", view: str,
          reference: str | None = None) -> None:
    if fmt == "csv":
        frame.to_csv(sys.stdout, index=False)
    elif fmt == "json":
        from ..store import dumps

        print(dumps({"view": view, "run": str(run.path), "reference": reference or _reference(run),
                     "rows": frame.to_dict(orient="records")}))
    else:
        _print_table(frame, title)


def _print_table(frame: "pd.DataFrame", title: str) -> None:
    """A per-utterance or worst-utterance frame as a terminal table: identifiers never cut,
    tags joined into one last column, failed seeds shown only when there are some."""
    from rich import box
    from rich.table import Table

    from ..textfmt import fmt
    from .terminal import console

    out = console()
    metric = str(frame["column"].iloc[0]) if "column" in frame and len(frame) else "value"
    names = {"utt_id": "utterance", "config": "configuration", "value": metric,
             "reference_value": "reference", "diff_vs_reference": "Δ vs reference"}
    tags = [c for c in frame.columns if c.startswith("tag_")]
    failed = "seeds_failed" in frame and bool((frame["seeds_failed"] > 0).any())
    cols = [c for c in frame.columns if c not in {"column", "reference", "seeds_ok", "seeds_failed",
                                                  *tags}]
    def build(tag_width: int | None) -> Table:
        t = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold")
        for c in cols:
            t.add_column(names.get(c, c), no_wrap=True,
                         justify="right" if frame[c].dtype.kind in "iuf" else "left")
        if failed:
            t.add_column("failed", justify="right", no_wrap=True)
        if tag_width is not None:
            t.add_column("tags", no_wrap=True, overflow="ellipsis", max_width=tag_width)
        for _, r in frame.iterrows():
            cells = [fmt(r[c], 4, sign=c == "diff_vs_reference") if frame[c].dtype.kind == "f"
                     else str(r[c]) for c in cols]
            if failed:
                cells.append(f"{int(r['seeds_failed'])}/{int(r['seeds_ok'] + r['seeds_failed'])}")
            if tag_width is not None:
                cells.append(" ".join(f"{c[4:]}={r[c]}" for c in tags if str(r[c]) not in ("", "nan")))
            t.add_row(*cells)
        return t

    t = build(None)
    if tags:       # the tags take what room is left, cut short with an ellipsis
        rest = out.measure(t, options=out.options.update(width=10_000)).maximum
        t = build(max(8, out.width - rest - 2))
    out.print(title, overflow="fold")
    out.print(t)
    if "reference" in frame.columns and len(frame):
        out.print(f"Δ vs reference: the value minus that of the reference configuration "
                  f"{frame['reference'].iloc[0]} on the same utterance (seeds averaged)")
    if failed:
        out.print("failed: failed seeds / all seeds of that utterance and configuration")
    if not len(frame):
        out.print("nothing to show: every matching item failed or has no value")
