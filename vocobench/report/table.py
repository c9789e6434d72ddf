"""The quality-against-latency table: one row per configuration.

:func:`build_table` holds the raw numbers (written as CSV, full precision); :func:`display_table`
the formatted cells, which :mod:`vocobench.textfmt` renders as fixed-width text (terminal),
Markdown and LaTeX (a plain ``tabular``, so no template engine is needed).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..stats import RunStatistics, pareto_mask
from ..textfmt import NA, fmt, fmt_p, interval


def build_table(st: RunStatistics) -> pd.DataFrame:
    """Wide table of raw numbers, one row per configuration in grid order.

    Per metric column ``c``: ``c_mean, c_ci_low, c_ci_high, c_n, c_diff, c_diff_low, c_diff_high,
    c_diff_bound, c_p, c_p_holm, c_front``. ``c_front`` is Pareto-front membership over (median
    RTF, mean of c); configurations with failed items or no latency are left off the front.
    ``pareto`` lists the metrics whose front a row is on.
    """
    lat, fail = st.latency, st.failures
    rows = []
    for c in st.configs:
        L = lat.loc[c.label]
        rows.append({"config": c.label, "schedule": c.schedule, "sampler": c.sampler,
                     "steps": c.steps, "nfe": int(L["nfe"]), "reference": c == st.reference,
                     "rtf_median": L["rtf_median"], "rtf_p90": L["rtf_p90"],
                     "ms_per_nfe": L["ms_per_nfe"], "first_call_s": L["first_call_s"],
                     "n_timed": int(L["n_timed"]), "latency_source": L["latency_source"],
                     "items": int(fail.loc[c.label, "items"]), "failed": int(fail.loc[c.label, "failed"])})
    table = pd.DataFrame(rows)
    eligible = (table["failed"] == 0).to_numpy()
    for col, spec in st.columns.items():
        m = st.metrics[st.metrics["column"] == col].set_index("config").reindex(table["config"])
        for k in ("mean", "ci_low", "ci_high", "n", "diff", "diff_low", "diff_high", "diff_bound",
                  "p", "p_holm"):
            table[f"{col}_{k}"] = m[k].to_numpy()
        cost = np.where(eligible, table["rtf_median"].to_numpy(dtype=float), np.nan)
        table[f"{col}_front"] = pareto_mask(cost, table[f"{col}_mean"].to_numpy(dtype=float),
                                            bool(spec["higher_is_better"]))
    table["pareto"] = [", ".join(c for c in st.columns if table.loc[i, f"{c}_front"]) for i in table.index]
    return table


# ---------------------------------------------------------------- display cells

def display_table(table: pd.DataFrame, st: RunStatistics) -> tuple[list[str], list[list[str]]]:
    """Header and string cells shared by the text, Markdown and LaTeX renderings; a
    "Recommended" column marks the recommended rows once the table has a ``recommended`` column."""
    conf = f"{round(100 * st.settings.confidence):d} %"
    header = ["Configuration", "NFE", "RTF median", "RTF p90", "ms per NFE", "First call s", "Failed"]
    for col, spec in st.columns.items():
        unit = f" {spec.get('unit')}" if spec.get("unit") else ""
        arrow = "↑" if spec["higher_is_better"] else "↓"
        header += [f"{col}{unit} {arrow} mean [{conf} CI]", f"Δ {col} vs reference [{conf} CI]",
                   f"Δ {col} Holm p"]
    header.append("Pareto front")
    marked = "recommended" in table.columns          # set by decide.recommend
    if marked:
        header.append("Recommended")
    rows = []
    for _, r in table.iterrows():
        label = r["config"] + (" (reference)" if r["reference"] else "")
        if r["latency_source"] == "sweep":
            label += " (sweep timing)"
        cells = [label, str(int(r["nfe"])), fmt(r["rtf_median"], 3), fmt(r["rtf_p90"], 3),
                 fmt(r["ms_per_nfe"], 3), fmt(r["first_call_s"], 3),
                 f"{int(r['failed'])}/{int(r['items'])}" if r["failed"] else "0"]
        for col in st.columns:
            cells.append(interval(r[f"{col}_mean"], r[f"{col}_ci_low"], r[f"{col}_ci_high"]))
            if r["reference"]:
                cells += ["reference", NA]
            else:
                cells += [interval(r[f"{col}_diff"], r[f"{col}_diff_low"], r[f"{col}_diff_high"],
                                   sign=True, sig=3), fmt_p(r[f"{col}_p_holm"])]
        cells.append(r["pareto"] or NA)
        if marked:
            cells.append(f"◀ {r['recommended']}" if r["recommended"] else "")
        rows.append(cells)
    return header, rows


def worst_utterances(st: RunStatistics, n: int) -> pd.DataFrame:
    """The ``n`` worst utterances (seed-averaged) per configuration and metric, direction-aware."""
    rows = []
    for col, spec in st.columns.items():
        t = st.per_utterance[col]
        for c in st.configs:
            s = t[c.label].dropna()
            s = s.sort_values(ascending=bool(spec["higher_is_better"]), kind="stable").head(n)
            for rank, (utt, v) in enumerate(s.items(), 1):
                rows.append({"config": c.label, "column": col, "rank": rank, "utt_id": utt, "value": v})
    return pd.DataFrame(rows, columns=["config", "column", "rank", "utt_id", "value"])
