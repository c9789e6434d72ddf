"""Plots of a run (PNG and SVG) into ``RUN_DIR/report/plots/``.

Figures are built with :class:`matplotlib.figure.Figure` and the Agg canvas directly — no pyplot,
so no global backend is touched. Per metric column:

* ``<col>_vs_rtf``: mean with CI error bars against median RTF, one panel per schedule, one
  marker per sampler, the Pareto front ringed, the recommended configurations starred and the
  RTF budget drawn as a dashed vertical line. The RTF axis is logarithmic when the values span
  more than a decade, linear otherwise (a log axis inside one decade has no labelled ticks);
* ``<col>_vs_steps``: mean with CI against steps, one line per (schedule, sampler);
* ``<col>_spread``: per-utterance (seed-averaged) values per configuration, box and points; each
  utterance keeps its colour and its place within the box in every configuration, so it can be
  followed across them.
"""
from __future__ import annotations

import math
import re
import textwrap
from pathlib import Path
from typing import TYPE_CHECKING, Sequence

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter, NullFormatter

from ..stats import RunStatistics

if TYPE_CHECKING:
    from .decide import Recommendation

MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*", "h", "<", ">")
DPI = 110
FORMATS = ("png", "svg")         # every format a plot can be written in
DEFAULT_FORMATS = ("png",)       # SVG on request ([decide] svg = true): it doubles the drawing time
TITLE_CHARS_PER_INCH = 13        # about right for 10 pt DejaVu Sans (measured, our choice)
LOG_DECADES = 1.0                # an RTF axis spanning more than this many decades is logarithmic
UTT_LEGEND_MAX = 20              # spread plots name the utterances up to this many
BUDGET_LINE = {"color": "0.35", "linestyle": "--", "linewidth": 1}


def safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", str(text)) or "_"


def _save(fig: Figure, out_dir: Path, stem: str, formats: Sequence[str] = DEFAULT_FORMATS
          ) -> list[Path]:
    FigureCanvasAgg(fig)
    paths = []
    with matplotlib.rc_context({"svg.hashsalt": "vocobench", "svg.fonttype": "none"}):
        for ext in formats:
            p = out_dir / f"{stem}.{ext}"
            fig.savefig(p, dpi=DPI, metadata={"Date": None} if ext == "svg" else None)
            paths.append(p)
    return paths


def _plain_log(axis, label_minor_below: float = 0.0) -> None:
    """Log-scale tick labels as plain numbers (no mathtext: faster, and easier to read). When
    the data span at most ``label_minor_below`` decades, the 2× and 5× ticks are labelled too."""
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    if label_minor_below <= 0:
        axis.set_minor_formatter(NullFormatter())
        return

    def minor(v: float, _: int) -> str:
        lo, hi = sorted(axis.get_view_interval())
        if v <= 0 or lo <= 0 or math.log10(hi / lo) > label_minor_below:
            return ""
        mantissa = round(v / 10 ** math.floor(math.log10(v) + 1e-9), 6)
        return f"{v:g}" if mantissa in (2.0, 5.0) else ""

    axis.set_minor_formatter(FuncFormatter(minor))


def _rtf_axis(ax, values: np.ndarray) -> str:
    """Scale and tick labels of an RTF axis; returns its label."""
    v = values[np.isfinite(values) & (values > 0)]
    if v.size and v.max() / v.min() > 10 ** LOG_DECADES:
        ax.set_xscale("log")
        _plain_log(ax.xaxis, label_minor_below=2.5)
        return "median RTF (log scale)"
    ax.xaxis.set_major_formatter(FuncFormatter(lambda x, _: f"{x:g}"))
    return "median RTF"


def _suptitle(fig: Figure, text: str, width_in: float) -> None:
    """Figure title wrapped to the figure's width, so that it is never cut off."""
    fig.suptitle(textwrap.fill(text, max(20, int(width_in * TITLE_CHARS_PER_INCH))), fontsize=10)


def _axis_label(st: RunStatistics, col: str) -> str:
    spec = st.columns[col]
    unit = f" [{spec['unit']}]" if spec.get("unit") else ""
    return f"{col}{unit} ({'higher' if spec['higher_is_better'] else 'lower'} is better)"


def _yerr(sub: pd.DataFrame, col: str) -> np.ndarray:
    m, lo, hi = (sub[f"{col}_{k}"].to_numpy(dtype=float) for k in ("mean", "ci_low", "ci_high"))
    return np.nan_to_num(np.vstack([m - lo, hi - m]), nan=0.0)


def rtf_figure(st: RunStatistics, table: pd.DataFrame, col: str,
               decision: "Recommendation | None" = None) -> Figure:
    """The ``<col>_vs_rtf`` figure (see the module docstring)."""
    schedules = list(dict.fromkeys(table["schedule"]))
    samplers = list(dict.fromkeys(table["sampler"]))
    width = max(4.2 * len(schedules), 6.0)
    fig = Figure(figsize=(width, 3.8), layout="constrained")
    axes = fig.subplots(1, len(schedules), sharex=True, sharey=True, squeeze=False)[0]
    conf = f"{100 * st.settings.confidence:g} %"
    budget = getattr(decision, "rtf_budget", None)
    recommended = set(decision.recommended) if decision is not None else set()
    xs = table["rtf_median"].to_numpy(dtype=float)
    seen = xs[np.isfinite(xs) & (xs > 0)]
    # the budget line is drawn where it does not squeeze the data into a corner; else named only
    on_axis = budget is not None and (not seen.size or seen.min() / 2 <= budget <= 2 * seen.max())
    for ax, sched in zip(axes, schedules):
        for k, samp in enumerate(samplers):
            sub = table[(table["schedule"] == sched) & (table["sampler"] == samp)].sort_values("steps")
            sub = sub[np.isfinite(sub["rtf_median"].astype(float)) & np.isfinite(sub[f"{col}_mean"].astype(float))]
            if not len(sub):
                continue
            ax.errorbar(sub["rtf_median"], sub[f"{col}_mean"], yerr=_yerr(sub, col),
                        marker=MARKERS[k % len(MARKERS)], color=f"C{k % 10}", capsize=3,
                        linewidth=1, label=samp)
            for _, r in sub.iterrows():
                note = f"{r['steps']}" + (" (failed items)" if r["failed"] else "")
                ax.annotate(note, (r["rtf_median"], r[f"{col}_mean"]), fontsize=7,
                            xytext=(3, 3), textcoords="offset points")
            front = sub[sub[f"{col}_front"].astype(bool)]
            if len(front):
                ax.scatter(front["rtf_median"], front[f"{col}_mean"], s=160, facecolors="none",
                           edgecolors="black", linewidths=1.2, zorder=5, label="Pareto front")
            rec = sub[sub["config"].isin(recommended)]
            if len(rec):
                ax.scatter(rec["rtf_median"], rec[f"{col}_mean"], s=260, marker="*", color="gold",
                           edgecolors="black", linewidths=0.8, zorder=6, label="recommended")
        if on_axis:
            ax.axvline(float(budget), label=f"RTF budget {float(budget):g}", **BUDGET_LINE)
        ax.set_title(f"schedule {sched}", fontsize=9)
        ax.grid(True, alpha=0.3)
    xlabel = _rtf_axis(axes[0], np.append(xs, float(budget)) if on_axis else xs)
    for ax in axes:
        ax.set_xlabel(xlabel)
    axes[0].set_ylabel(_axis_label(st, col))
    handles, labels = [], []
    for ax in axes:
        for hh, ll in zip(*ax.get_legend_handles_labels()):
            if ll not in labels:
                handles.append(hh)
                labels.append(ll)
    if budget is not None and not on_axis:
        side = "right" if budget > seen.max() else "left"
        handles.append(Line2D([], [], **BUDGET_LINE))
        labels.append(f"RTF budget {float(budget):g} (off the axis, to the {side})")
    if handles:
        fig.legend(handles, labels, fontsize=7, loc="outside lower center",
                   ncols=min(len(handles), 3 * len(axes)))
    _suptitle(fig, f"{col} against latency (error bars: {conf} CI; numbers: steps)", width)
    return fig


def metric_vs_rtf(st: RunStatistics, table: pd.DataFrame, col: str, out_dir: Path,
                  decision: "Recommendation | None" = None,
                  formats: Sequence[str] = DEFAULT_FORMATS) -> list[Path]:
    return _save(rtf_figure(st, table, col, decision), out_dir, f"{safe_name(col)}_vs_rtf", formats)


def metric_vs_steps(st: RunStatistics, table: pd.DataFrame, col: str, out_dir: Path,
                    formats: Sequence[str] = DEFAULT_FORMATS) -> list[Path]:
    fig = Figure(figsize=(5.5, 3.8), layout="constrained")
    ax = fig.subplots()
    samplers = list(dict.fromkeys(table["sampler"]))
    for k, ((sched, samp), sub) in enumerate(table.groupby(["schedule", "sampler"], sort=False)):
        sub = sub.sort_values("steps")
        ax.errorbar(sub["steps"], sub[f"{col}_mean"], yerr=_yerr(sub, col), capsize=3,
                    marker=MARKERS[samplers.index(samp) % len(MARKERS)], color=f"C{k % 10}",
                    linewidth=1, label=f"{sched} / {samp}")
    if (table["steps"] > 0).all():
        ax.set_xscale("log", base=2)
        _plain_log(ax.xaxis)
    ax.set_xlabel("steps (log scale)")
    ax.set_ylabel(_axis_label(st, col))
    ax.grid(True, alpha=0.3)
    if ax.get_legend_handles_labels()[0]:       # nothing to label when no configuration scored
        ax.legend(fontsize=7, loc="best")
    ax.set_title(f"{col} against steps ({100 * st.settings.confidence:g} % CI)", fontsize=10)
    return _save(fig, out_dir, f"{safe_name(col)}_vs_steps", formats)


def utterance_colours(utts: Sequence[str]) -> dict[str, tuple]:
    """One colour per utterance, the same in every configuration: the qualitative tab10 or tab20
    map while it has enough colours, else evenly spaced on turbo."""
    name = "tab10" if len(utts) <= 10 else "tab20" if len(utts) <= 20 else "turbo"
    cmap = matplotlib.colormaps[name]
    n = max(len(utts) - 1, 1)
    return {u: cmap(i if name != "turbo" else i / n) for i, u in enumerate(utts)}


def spread(st: RunStatistics, col: str, out_dir: Path,
           formats: Sequence[str] = DEFAULT_FORMATS) -> list[Path]:
    t = st.per_utterance[col]
    labels = list(t.columns)
    t = t.set_axis([str(u) for u in t.index]).sort_index()
    utts = list(t.index)
    colours = utterance_colours(utts)
    data = [t[c].dropna().to_numpy(dtype=float) for c in labels]
    named = len(utts) <= UTT_LEGEND_MAX
    fig = Figure(figsize=(max(4.0, 0.45 * len(labels) + 1.5) + (1.3 if named else 0), 4.2),
                 layout="constrained")
    ax = fig.subplots()
    pos = np.arange(1, len(labels) + 1)
    keep = [i for i, d in enumerate(data) if d.size]
    if keep:
        ax.boxplot([data[i] for i in keep], positions=pos[keep], widths=0.6, showfliers=False,
                   medianprops={"color": "black"})
    # each utterance at the same offset inside every box, in its own colour
    offsets = np.linspace(-0.2, 0.2, len(utts)) if len(utts) > 1 else np.zeros(1)
    for j, u in enumerate(utts):
        y = t.iloc[j].to_numpy(dtype=float)
        ok = np.isfinite(y)
        if ok.any():
            ax.scatter(pos[ok] + offsets[j], y[ok], s=12, color=colours[u], alpha=0.85, zorder=3,
                       edgecolors="none", label=u if named else None)
    ax.set_xticks(pos)
    ax.set_xticklabels(labels, rotation=60, ha="right", fontsize=7)
    ax.set_ylabel(_axis_label(st, col))
    ax.grid(True, axis="y", alpha=0.3)
    if named and utts and ax.get_legend_handles_labels()[0]:
        ax.legend(title="utterance", fontsize=6, title_fontsize=7, loc="upper left",
                  bbox_to_anchor=(1.01, 1.0), borderaxespad=0)
    ax.set_title(f"{col} per utterance (seeds averaged; one colour per utterance)", fontsize=10)
    return _save(fig, out_dir, f"{safe_name(col)}_spread", formats)


def write_plots(st: RunStatistics, table: pd.DataFrame, out_dir: Path,
                decision: "Recommendation | None" = None, svg: bool = False) -> list[Path]:
    """All plots of the module docstring; returns the files written. ``decision`` supplies the
    recommended configurations and the RTF budget drawn on the RTF plots. PNG always, SVG too
    with ``svg``."""
    formats = FORMATS if svg else DEFAULT_FORMATS
    out_dir.mkdir(parents=True, exist_ok=True)
    for old in list(out_dir.glob("*.png")) + list(out_dir.glob("*.svg")):
        old.unlink()
    paths: list[Path] = []
    for col in st.columns:
        paths += metric_vs_rtf(st, table, col, out_dir, decision, formats)
        paths += metric_vs_steps(st, table, col, out_dir, formats)
        paths += spread(st, col, out_dir, formats)
    return paths
