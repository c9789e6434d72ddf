"""Plots of a run (PNG and SVG) into ``RUN_DIR/report/plots/``.

Figures are built with :class:`matplotlib.figure.Figure` and the Agg canvas directly — no pyplot,
so no global backend is touched. Per metric column:

* ``<col>_vs_rtf``: mean with CI error bars against median RTF, one panel per schedule, one
  marker per sampler, the Pareto front ringed;
* ``<col>_vs_steps``: mean with CI against steps, one line per (schedule, sampler);
* ``<col>_spread``: per-utterance (seed-averaged) values per configuration, box and points.
"""
from __future__ import annotations

import re
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, NullFormatter

from ..stats import RunStatistics

MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*", "h", "<", ">")
DPI = 110
FORMATS = ("png", "svg")


def safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]", "_", str(text)) or "_"


def _save(fig: Figure, out_dir: Path, stem: str) -> list[Path]:
    FigureCanvasAgg(fig)
    paths = []
    with matplotlib.rc_context({"svg.hashsalt": "vocobench", "svg.fonttype": "none"}):
        for ext in FORMATS:
            p = out_dir / f"{stem}.{ext}"
            fig.savefig(p, dpi=DPI, metadata={"Date": None} if ext == "svg" else None)
            paths.append(p)
    return paths


def _plain_log(axis) -> None:
    """Log-scale tick labels as plain numbers (no mathtext: faster, and easier to read)."""
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _axis_label(st: RunStatistics, col: str) -> str:
    spec = st.columns[col]
    unit = f" [{spec['unit']}]" if spec.get("unit") else ""
    return f"{col}{unit} ({'higher' if spec['higher_is_better'] else 'lower'} is better)"


def _yerr(sub: pd.DataFrame, col: str) -> np.ndarray:
    m, lo, hi = (sub[f"{col}_{k}"].to_numpy(dtype=float) for k in ("mean", "ci_low", "ci_high"))
    return np.nan_to_num(np.vstack([m - lo, hi - m]), nan=0.0)


def metric_vs_rtf(st: RunStatistics, table: pd.DataFrame, col: str, out_dir: Path) -> list[Path]:
    schedules = list(dict.fromkeys(table["schedule"]))
    samplers = list(dict.fromkeys(table["sampler"]))
    fig = Figure(figsize=(4.2 * len(schedules), 3.6), layout="constrained")
    axes = fig.subplots(1, len(schedules), sharex=True, sharey=True, squeeze=False)[0]
    conf = f"{100 * st.settings.confidence:g} %"
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
            ax.scatter(front["rtf_median"], front[f"{col}_mean"], s=160, facecolors="none",
                       edgecolors="black", linewidths=1.2, zorder=5,
                       label="Pareto front" if k == 0 else None)
        rtf = table["rtf_median"].astype(float)
        if (rtf > 0).any():
            ax.set_xscale("log")
            _plain_log(ax.xaxis)
        ax.set_title(f"schedule {sched}", fontsize=9)
        ax.set_xlabel("median RTF (log scale)")
        ax.grid(True, alpha=0.3)
    axes[0].set_ylabel(_axis_label(st, col))
    handles, labels = axes[0].get_legend_handles_labels()
    for ax in axes[1:]:
        h, lab = ax.get_legend_handles_labels()
        for hh, ll in zip(h, lab):
            if ll not in labels:
                handles.append(hh)
                labels.append(ll)
    if handles:
        axes[-1].legend(handles, labels, fontsize=7, loc="best")
    fig.suptitle(f"{col} against latency (error bars: {conf} CI; numbers: steps)", fontsize=10)
    return _save(fig, out_dir, f"{safe_name(col)}_vs_rtf")


def metric_vs_steps(st: RunStatistics, table: pd.DataFrame, col: str, out_dir: Path) -> list[Path]:
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
    ax.legend(fontsize=7, loc="best")
    ax.set_title(f"{col} against steps ({100 * st.settings.confidence:g} % CI)", fontsize=10)
    return _save(fig, out_dir, f"{safe_name(col)}_vs_steps")


def spread(st: RunStatistics, col: str, out_dir: Path) -> list[Path]:
    t = st.per_utterance[col]
    labels = list(t.columns)
    data = [t[c].dropna().to_numpy(dtype=float) for c in labels]
    fig = Figure(figsize=(max(4.0, 0.45 * len(labels) + 1.5), 4.2), layout="constrained")
    ax = fig.subplots()
    pos = np.arange(1, len(labels) + 1)
    keep = [i for i, d in enumerate(data) if d.size]
    if keep:
        ax.boxplot([data[i] for i in keep], positions=pos[keep], widths=0.6, showfliers=False)
    rng = np.random.default_rng(0)            # jitter only; fixed for reproducible images
    for i in keep:
        ax.scatter(pos[i] + rng.uniform(-0.15, 0.15, data[i].size), data[i], s=8, alpha=0.6, zorder=3)
    ax.set_xticks(pos)
    ax.set_xticklabels(labels, rotation=60, ha="right", fontsize=7)
    ax.set_ylabel(_axis_label(st, col))
    ax.grid(True, axis="y", alpha=0.3)
    ax.set_title(f"{col} per utterance (seeds averaged)", fontsize=10)
    return _save(fig, out_dir, f"{safe_name(col)}_spread")


def write_plots(st: RunStatistics, table: pd.DataFrame, out_dir: Path) -> list[Path]:
    """All plots of the module docstring; returns the files written."""
    out_dir.mkdir(parents=True, exist_ok=True)
    for old in list(out_dir.glob("*.png")) + list(out_dir.glob("*.svg")):
        old.unlink()
    paths: list[Path] = []
    for col in st.columns:
        paths += metric_vs_rtf(st, table, col, out_dir)
        paths += metric_vs_steps(st, table, col, out_dir)
        paths += spread(st, col, out_dir)
    return paths
