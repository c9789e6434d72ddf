"""What a search leaves in ``OUT/search/``: ``search.json`` (everything), ``winners.toml`` (each
finalist as a ``[[sweep.schedule]]`` table to paste), ``summary.md``, and two plots: the search
trace (objective against syntheses spent) and the winning schedules as log-SNR against the
fraction of the trajectory, next to standard schedules of the same length.
"""
from __future__ import annotations

import math
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..schedules import NoiseSchedule, cosine, subsequence
from ..store import dumps, write_atomic
from ..textfmt import fmt, fmt_p, md_table
from ..samplers import log_snr


def toml_block(row: Mapping[str, Any], steps: int, sampler: str) -> str:
    """One ``[[sweep.schedule]]`` table; β written with ``repr`` so they read back bit-exact."""
    betas = ", ".join(repr(float(b)) for b in row["betas"])
    return (f"# {row['space']} {steps} steps, searched with sampler {sampler}; held-out: "
            f"{row['overall']}\n[[sweep.schedule]]\nname = \"{row['name']}\"\nkind = \"explicit\"\n"
            f"betas = [{betas}]\n")


def summary_md(s: Mapping[str, Any]) -> str:
    o, sp = s["options"], s["split"]
    lines = ["# Schedule search", "",
             f"Strategy **{o['strategy']}**, objective **{o['objective']}** (primary `{s['primary']}`), "
             f"decision metrics {', '.join(f'`{m}`' for m in s['metrics'])}.",
             f"Split (seed {sp['seed']}, stratified by {sp['stratified_by'] or 'nothing'}): "
             f"{len(sp['search'])} search utterances, {len(sp['held_out'])} held-out. "
             f"Search seeds {o['seeds']}, held-out seeds {o['holdout_seeds']}.",
             f"Reference: {s['reference']['spec']['name']} ({s['reference']['steps']} steps).", ""]
    for t in s["targets"]:
        b = t["budget"]
        within = f" (NFE {t['nfe']}, budget {t['nfe_budget']})" if t.get("nfe_budget") else f" (NFE {t['nfe']})"
        lines += [f"## {t['steps']} steps, sampler {t['sampler']}{within}", "",
                  f"Search size: {b['candidates']} candidates; budget spent: {b['syntheses_asked']} "
                  f"syntheses asked for, cached or not; {b['syntheses_computed']} syntheses computed "
                  f"in this session (reference and held-out included), {b['seconds']:.0f} s"
                  + (f"; stopped: {t['stopped']}" if t["stopped"] else "") + ".", ""]
        if not t["finalists"]:
            lines += ["No candidate was scored on the whole search split.", ""]
            continue
        lines += ["Search-split scores are **optimistic** (the candidates were selected on them). "
                  "Held-out: fresh seeds, utterances never seen by the search; difference = candidate "
                  "− reference with its bootstrap interval, Holm-adjusted Wilcoxon p.", ""]
        lines.append(md_table(
            ["candidate", "metric", "optimistic (search)", "reference (search)",
             "held-out diff [interval]", "margin", "p (Holm)", "verdict"],
            [[r["name"], col, fmt(r["optimistic_search_split"].get(col)),
              fmt(t["reference_search_split"].get(col)),
              f"{fmt(h['diff'])} [{fmt(h['diff_low'])}, {fmt(h['diff_high'])}]", fmt(h["margin"]),
              fmt_p(h["p_holm"]), h["verdict"]]
             for r in t["finalists"] for col, h in r["held_out"].items()], align="llrrrrrl").rstrip("\n"))
        lines += ["", *(f"* {r['name']} ({r['space']}): **{r['overall']}**" for r in t["finalists"]), ""]
    return "\n".join(lines) + "\n"


def write_outputs(out: Path, s: Mapping[str, Any], training: NoiseSchedule | None, plots: bool = True) -> None:
    d = out / "search"
    d.mkdir(parents=True, exist_ok=True)
    write_atomic(d / "search.json", dumps(s) + "\n")
    toml = "".join(toml_block(r, t["steps"], t["sampler"]) + "\n" for t in s["targets"] for r in t["finalists"])
    write_atomic(d / "winners.toml", toml)
    write_atomic(d / "winners.json", dumps([{"steps": t["steps"], "sampler": t["sampler"], **r}
                                            for t in s["targets"] for r in t["finalists"]]) + "\n")
    write_atomic(d / "summary.md", summary_md(s))
    if plots:
        plot_trace(s, d / "search_trace.png")
        plot_schedules(s, training, d / "search_schedules.png")


def plot_trace(s: Mapping[str, Any], path: Path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    for t in s["targets"]:
        tr = [p for p in t["trace"] if p["value"] is not None]
        if not tr:
            continue
        n_all = max(p["utterances"] for p in tr)
        x = [p["syntheses"] for p in tr]
        y = [p["value"] for p in tr]
        ax.scatter(x, y, s=8, alpha=0.35, label=f"{t['steps']} steps, {t['sampler']}: each evaluation")
        best, bx, by = -math.inf, [], []
        for p in tr:
            if p["utterances"] == n_all and p["value"] > best:
                best = p["value"]
            if math.isfinite(best):
                bx.append(p["syntheses"])
                by.append(best)
        ax.step(bx, by, where="post", label=f"{t['steps']} steps, {t['sampler']}: best on the full split")
    ax.set_xlabel("syntheses spent")
    ax.set_ylabel(f"{s['primary']} (signed: higher is better)")
    ax.set_title("Search trace (search split: optimistic)")
    ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def plot_schedules(s: Mapping[str, Any], training: NoiseSchedule | None, path: Path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 4.0))
    shown = set()
    for t in s["targets"]:
        n = t["steps"]
        if n not in shown:
            shown.add(n)
            std = {f"cosine {n}": cosine(n)}
            if training is not None:
                std.update({f"uniform stride {n}": subsequence(training, n, "uniform"),
                            f"quadratic stride {n}": subsequence(training, n, "quadratic")})
            for label, sch in std.items():
                _line(ax, sch, label, "--")
        for r in t["finalists"][:3]:
            _line(ax, NoiseSchedule(np.asarray(r["betas"])), f"{r['name']} ({t['sampler']})", "-o")
    if training is not None:
        _line(ax, training, f"training ({len(training)})", ":")
    ax.set_xlabel("step / N (1 = noisiest)")
    ax.set_ylabel("log-SNR ln(ᾱ/(1−ᾱ))")
    ax.set_title("Winning schedules and standard ones")
    ax.legend(fontsize=6)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def _line(ax: Any, sch: NoiseSchedule, label: str, style: str) -> None:
    n = len(sch)
    ax.plot(np.arange(1, n + 1) / n, 2 * log_snr(sch.alpha_bars), style, label=label, markersize=3)
