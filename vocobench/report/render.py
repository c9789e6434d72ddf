"""`render_report`: a stored run → summary, tables, recommendation, plots, listening page.

Nothing is re-synthesised or re-scored: everything comes from ``manifest.json``,
``items.jsonl`` and ``timing.jsonl``. Files written::

    RUN_DIR/summary.md
    RUN_DIR/report/table.md, table.csv, table.tex, recommendation.md,
                   worst_utterances.md, worst_utterances.csv,
                   plots/*.png|svg, listening.html, audio/*.wav, spectra/*.png
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

import numpy as np
import pandas as pd

from ..errors import InputError
from ..keys import ConfigKey, is_directed
from ..stats import RunStatistics, summarise
from ..store import Run, load_run, write_atomic
from ..textfmt import csv_text, latex_table, md_cell, md_table
from .basis import Basis, basis
from .decide import CAUTION, Recommendation, recommend
from .listening import default_choice, fewest_steps, write_listening_page
from .options import ReportOptions, options_for
from .publish import Staging, final_path, report_digest
from .recommendation import recommendation_text
from .table import build_table, display_table, worst_utterances

TITLE = "Quality against latency"

TABLE_NOTES = ("↑ higher is better, ↓ lower is better. Δ = configuration − reference, from "
               "per-utterance paired differences. Holm p: Wilcoxon signed-rank test, Holm-adjusted "
               "across the configurations compared (per metric). Latency from the timing phase "
               "(first call excluded; shown apart). Pareto front: over median RTF and the metric's "
               "mean; configurations with failed items are left off it.")


@dataclass
class ReportResult:
    """What :func:`render_report` wrote and decided."""

    paths: dict[str, Path]                # name → file ("plots" entries are listed in `plots`)
    table: pd.DataFrame                   # raw numbers, one row per configuration
    recommendation: str                   # plain-words text
    decision: Recommendation | None = None
    stats: RunStatistics | None = None
    plots: list[Path] = field(default_factory=list)
    page_files: list[Path] = field(default_factory=list)


def check_options(opts: ReportOptions, run: Any) -> ConfigKey | None:
    """Check names in the options against the run; returns the parsed reference (or None)."""
    cols = dict(run.manifest.get("columns") or {})
    src = opts.source

    def unknown_col(key: str, name: str) -> InputError:
        return InputError(f"unknown metric column; the run has: {', '.join(cols) or 'none'}",
                          source=src, field=f"decide.{key}", value=name)

    def check(key: str, name: str) -> None:
        if name not in cols:
            raise unknown_col(key, name)
        if not is_directed(cols[name]):
            raise InputError("column has no direction (higher_is_better), so it cannot be "
                             "compared", source=src, field=f"decide.{key}", value=name)

    for m in opts.metrics or ():
        check("metrics", m)
    if opts.primary is not None:
        check("primary", opts.primary)
    for m in opts.margins:
        check(f"margins.{m}", m)
    ref = ConfigKey.parse(opts.reference, source=src, field="decide.reference") if opts.reference else None
    for lab in opts.listen or ():
        ConfigKey.parse(lab, source=src, field="decide.listen")
    return ref


def decide(run: Run, opts: ReportOptions) -> tuple[ReportOptions, ConfigKey | None, RunStatistics,
                                                 pd.DataFrame, Recommendation | None]:
    """Statistics, table and recommendation of a loaded run under ``opts``: the one path the
    report, ``vocobench show`` and ``baseline freeze`` share. Without ``decide.metrics`` every
    column with a finite mean is decided on. Returns (options as used, chosen reference or None,
    statistics, table with the recommended rows marked, recommendation or None)."""
    ref = check_options(opts, run)
    st = summarise(run, reference=ref, settings=opts.settings, reference_source=opts.source,
                   reference_field="decide.reference")
    if opts.metrics is None:                      # default: every column that has values
        with_values = tuple(c for c in st.columns
                            if np.isfinite(st.metrics.loc[st.metrics["column"] == c, "mean"]).any())
        opts = opts.replace(metrics=with_values) if with_values else opts
    table = build_table(st)
    decision = recommend(st, table, opts) if st.columns and opts.metrics else None
    return opts, ref, st, table, decision


def render_report(run_dir: str | Path | Run, options: ReportOptions | None = None,
                  echo: bool = True) -> ReportResult:
    """Compute statistics of a stored run and write every report file.

    The files are rendered into a staging folder and swapped in at once (see
    :mod:`vocobench.report.publish`): an interrupted rendering leaves the previous report whole.

    Parameters
    ----------
    run_dir : a run directory (``vocobench-run/1``), or that run already loaded.
    options : decision options; default: the run's ``[decide]`` table (manifest ``decide``).
    echo : print the terminal table, what the report rests on, the recommendation and the
        paths written.
    """
    run = run_dir if isinstance(run_dir, Run) else load_run(run_dir)
    run_dir = Path(run.path)
    opts = options_for(run, options)
    digest = report_digest(run, opts)
    opts, ref, st, table, decision = decide(run, opts)
    labels = {c.label for c in st.configs}
    for lab in opts.listen or ():
        if ConfigKey.parse(lab).label not in labels:
            raise InputError("configuration not in this run; valid: " + ", ".join(sorted(labels)),
                             source=opts.source, field="decide.listen", value=lab)
    if decision is not None:
        text = decision.text
    else:
        text = "The run has no metric values; only latency is reported.\n\n" + CAUTION + "\n"
    rests_on = basis(run)
    note = rests_on.reference_note(st.reference, chosen=ref is not None)
    if note:
        text = f"{note}\n\n{text}"
    header, rows = display_table(table, st)
    parts = ReportParts(run_dir, st, table, header, rows, worst_utterances(st, opts.worst), opts.worst,
                        text)
    staging = Staging(run_dir)
    try:
        paths, plots, page_files = _write(staging, run, st, opts, parts, decision, rests_on)
        staging.publish(digest)
    except BaseException:
        staging.discard()
        raise
    paths = {k: final_path(staging, p) for k, p in paths.items()}
    paths["summary.md"] = run_dir / "summary.md"
    result = ReportResult(paths=paths, table=table, recommendation=text, decision=decision, stats=st,
                          plots=[final_path(staging, p) for p in plots],
                          page_files=[final_path(staging, p) for p in page_files])
    if echo:
        from .terminal import echo_table, echo_text

        print(f"{TITLE} — {run_dir}")
        echo_table(table, st, decision)
        print("\n".join(rests_on.lines()))
        echo_text(text)
        print("Written:")
        for p in [*paths.values(), *([run_dir / "report" / "plots"] if plots else [])]:
            print(f"  {p}")
    return result


def _write(staging: Staging, run: Run, st: RunStatistics, opts: ReportOptions, parts: "ReportParts",
           decision: Recommendation | None, rests_on: Basis) -> tuple[dict[str, Path], list, list]:
    """Every report file, into the staging folder; returns (files by name, plots, page files)."""
    rep = staging.folder
    paths: dict[str, Path] = {}
    for name, writer in WRITERS.items():
        _put(paths, name, rep / name, writer(parts))
    _put(paths, "recommendation.json", rep / "recommendation.json",      # read by the gate
         recommendation_text(decision, opts))
    plots: list[Path] = []
    if opts.plots and st.columns:
        from .plots import write_plots

        plots = write_plots(st, parts.table, rep / "plots", decision, svg=opts.svg)
    page_files: list[Path] = []
    if opts.page:
        chosen = [ConfigKey.parse(x).label for x in opts.listen] if opts.listen else \
            default_choice(st, decision.recommended if decision else [])
        page_files = write_listening_page(run, st, chosen, rep, limit=opts.listen_limit,
                                          roles=_roles(st, decision))
        paths["listening.html"] = page_files[-1]
        page_files = page_files[:-1]
    finals = {k: final_path(staging, p) for k, p in paths.items()}
    summary = _summary(run, st, opts, _table_md(parts), parts.text, finals, plots, rests_on)
    write_atomic(rep / "summary.md", summary)
    return paths, plots, page_files


def _roles(st: RunStatistics, decision: Recommendation | None) -> dict[str, str]:
    roles: dict[str, list[str]] = {}
    pairs = [(st.reference.label, "reference configuration")]
    if decision is not None:
        pairs += [(decision.cheapest, "cheapest within the margins"),
                  (decision.best_in_budget, "best within the RTF budget")]
    pairs.append((fewest_steps(st), "fewest steps"))
    for label, role in pairs:
        if label:
            roles.setdefault(label, []).append(role)
    return {k: "; ".join(v) for k, v in roles.items()}


def _put(paths: dict[str, Path], name: str, path: Path, text: str) -> None:
    write_atomic(path, text)
    paths[name] = path


def _md_text(text: str) -> str:
    """Plain recommendation text as Markdown: top-level lines as paragraphs, indented lines as
    list items under them; everything HTML-escaped (Markdown renderers pass raw HTML)."""
    out: list[str] = []
    for line in text.splitlines():
        if not line.strip():
            continue
        if line.startswith("    "):
            out.append("- " + md_cell(line.strip()))
        else:
            out += ["", md_cell(line)]
    return "\n".join(out).lstrip("\n") + "\n"


@dataclass
class ReportParts:
    """What the report file writers draw on."""

    run_dir: Path
    st: RunStatistics
    table: pd.DataFrame                   # raw numbers (build_table)
    header: list[str]                     # display cells (display_table)
    rows: list[list[str]]
    worst: pd.DataFrame                   # worst_utterances
    n_worst: int
    text: str                             # the recommendation, plain words


def _table_md(p: ReportParts) -> str:
    return md_table(p.header, p.rows, align="l" + "r" * (len(p.header) - 1))


def _worst_md(p: ReportParts) -> str:
    n = p.n_worst
    out = ["# Worst utterances per configuration\n",
           f"The {n} worst utterances (seeds averaged) per configuration and metric.\n"]
    for col in p.st.columns:
        sub = p.worst[p.worst["column"] == col]
        rows = []
        for c in p.st.configs:
            s = sub[sub["config"] == c.label]
            cells = [f"{u} ({v:.4g})" for u, v in zip(s["utt_id"], s["value"])]
            rows.append([c.label, *cells, *["–"] * (n - len(cells))])
        out += [f"## {md_cell(col)}\n",
                md_table(["Configuration", *[f"#{i}" for i in range(1, n + 1)]], rows, align="l" * (n + 1))]
    return "\n".join(out) + "\n"


# Report files (in RUN_DIR/report, written in this order) → writer; a new format is one entry.
WRITERS: dict[str, Callable[[ReportParts], str]] = {
    "table.md": lambda p: f"# {TITLE}\n\n{_table_md(p)}\n{md_cell(TABLE_NOTES)}\n",
    "table.csv": lambda p: csv_text(p.table),
    "table.tex": lambda p: latex_table(p.header, p.rows, caption=f"{TITLE} ({p.run_dir.name})"),
    "worst_utterances.csv": lambda p: csv_text(p.worst),
    "worst_utterances.md": _worst_md,
    "recommendation.md": lambda p: f"# Recommendation\n\n{_md_text(p.text)}",
}


def _variant(v: Any) -> str:
    if isinstance(v, Mapping):
        return ", ".join(f"{k}={json.dumps(x, sort_keys=True, default=str)}" for k, x in v.items())
    return json.dumps(v, sort_keys=True, default=str)


def _summary(run: Any, st: RunStatistics, opts: ReportOptions, md_table: str, text: str,
             paths: Mapping[str, Path], plots: list[Path], rests_on: Basis) -> str:
    m = run.manifest
    voc = m.get("vocoder") or {}
    ds = m.get("dataset") or {}
    tm = m.get("timing") or {}
    e = md_cell
    lines = [f"# Quality against latency — {e(Path(run.path).name)}", ""]
    if isinstance(voc, Mapping) and voc:
        bits = [str(voc.get(k)) for k in ("target", "kind", "version") if voc.get(k)]
        if voc.get("fingerprint"):
            bits.append(f"fingerprint {voc['fingerprint']} ({voc.get('fingerprint_basis', '')})")
        lines.append(f"- Vocoder: {e(' · '.join(bits))}")
    if m.get("created_utc"):
        lines.append(f"- Created: {e(m['created_utc'])} (vocobench {e(m.get('vocobench_version', '?'))})")
    n_utt = len(ds.get("utterances") or []) or ds.get("n_utterances")
    lines.append(f"- Test set: {e(n_utt)} utterances, fingerprint {e(ds.get('fingerprint', '?'))}")
    lines.append(f"- Seeds: {e(', '.join(str(s) for s in m.get('seeds') or []) or '?')}")
    if tm:
        lines.append(f"- Timing: warm-up {e(tm.get('warmup'))}, threads {e(tm.get('threads'))}, "
                     f"utterances timed {e(len(tm.get('utterances') or []))}")
    lines += [f"- {e(x)}" for x in rests_on.lines()]
    lines.append("- Metric variants:")
    for name, var in (m.get("metrics") or {}).items():
        lines.append(f"    - {e(name)}: {e(_variant(var))}")
    if not m.get("metrics"):
        lines.append("    - none recorded")
    s = st.settings
    lines.append(f"- Statistics: bootstrap {e(s.method)}, {s.n_resamples} resamples, seed {s.seed}, "
                 f"{100 * s.confidence:g} % level; unit = utterance (seeds averaged first); "
                 "failed items excluded and counted")
    lines += ["", f"> {e(CAUTION)}", "", "## Quality against latency", "", md_table, e(TABLE_NOTES), "",
              "## Recommendation", "", _md_text(text), "## Files", ""]
    base = Path(run.path)
    for name, p in paths.items():
        lines.append(f"- {e(Path(p).relative_to(base))}")
    if plots:
        lines.append(f"- report/plots/ ({len(plots)} files)")
    return "\n".join(lines) + "\n"
