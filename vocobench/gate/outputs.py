"""Renderings of a :class:`~vocobench.gate.compare.Comparison`: one verdict line, a Markdown
summary for a pull-request comment, JSON, and JUnit XML (one test case per configuration:
``<failure>`` for a gated regression or a gated inconclusive one, ``<skipped>`` for an accepted
inconclusive one and for configurations that are information only).

The JUnit layout follows the widely used Ant/Jenkins JUnit XML schema (``testsuites`` →
``testsuite@name,tests,failures,errors,skipped,time`` → ``testcase@name,classname,time``;
common practice, no single published standard).
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from ..keys import ConfigKey
from ..store import dumps, write_atomic
from ..textfmt import fmt_signed, md_cell, md_table, signed_interval
from .verdict import Comparison, ConfigResult, MetricResult

LINE_SHOWN = 3                  # configurations named in the verdict line


def _config_brief(c: ConfigResult) -> str:
    return f"{c.name} " + ", ".join(c.reasons[:2]) if c.reasons else c.name


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'s' * (n != 1)}"


def verdict_line(comp: Comparison) -> str:
    """One line: ``REGRESSION: …``, ``PASS: …`` or ``INCONCLUSIVE: …`` (accepted or not)."""
    gated, info = comp.gated, comp.information
    n = len(gated)
    tail = []
    if info:
        tail.append(f"{len(info)} more compared as information, not gated")
    if comp.mode == "runs" and comp.latency_note:
        tail.append(comp.latency_note)
    if comp.forced:
        tail.append("forced despite: " + "; ".join(comp.forced))
    suffix = ("; " + "; ".join(tail)) if tail else ""
    what = _plural(n, "gated configuration")
    if comp.verdict == "regression":
        bad = comp.by_verdict("regression")
        shown = "; ".join(_config_brief(c) for c in bad[:LINE_SHOWN])
        more = f"; and {len(bad) - LINE_SHOWN} more" if len(bad) > LINE_SHOWN else ""
        return f"REGRESSION: {len(bad)} of {what} worse ({shown}{more}){suffix}"
    if comp.verdict == "pass":
        names = ", ".join(c.name for c in gated[:LINE_SHOWN]) + \
            (f" and {n - LINE_SHOWN} more" if n > LINE_SHOWN else "")
        return f"PASS: {what} shown no worse than allowed ({names}){suffix}"
    open_ = comp.by_verdict("inconclusive")
    shown = "; ".join(_config_brief(c) for c in open_[:LINE_SHOWN])
    head = (f"{len(open_)} of {what} neither shown no worse nor shown worse ({shown}"
            + (f"; and {len(open_) - LINE_SHOWN} more" if len(open_) > LINE_SHOWN else "") + ")")
    if comp.accepted:
        return ("INCONCLUSIVE, ACCEPTED by the policy (accept_inconclusive = true): not shown to be "
                f"no worse, yet exit 0: {head}{suffix}")
    return f"INCONCLUSIVE: {head}; not a pass (exit 3){suffix}"


def resolution_lines(comp: Comparison) -> list[str]:
    """Per gated cell: the smallest drop this test can show, from n and the observed spread."""
    pol = comp.policy
    out = [f"Gated: {comp.gated_by}."]
    for c in comp.gated:
        for m in c.metrics:
            unit = f" {m.unit}" if m.unit else ""
            if not math.isfinite(m.detectable):
                out.append(f"  {c.name} {m.column}: {m.verdict}; {m.n} paired utterances, no spread")
                continue
            out.append(f"  {c.name} {m.column}: {m.verdict}; with {m.n} utterances and this spread "
                       f"(paired SD {m.sd:.3g}), the smallest drop this test can show is "
                       f"{m.detectable:.3g}{unit} (allowed {m.allowed:.3g}; drop bound "
                       f"{m.drop_bound + 0.0:+.3g} at {pol.confidence:g}; {pol.power:.0%} power)")
    return out


# ---------------------------------------------------------------- Markdown

def _cell(m: MetricResult) -> str:
    if m.n == 0:
        return "n/a"
    head = signed_interval(m.diff, m.diff_low, m.diff_high) if math.isfinite(m.diff_low) \
        else fmt_signed(m.diff)
    p = f" Holm p={m.p_holm:.2g}" if math.isfinite(m.p_holm) else \
        (f" p={m.p:.2g}" if math.isfinite(m.p) else "")
    flag = {"regression": " ❌", "pass": " ✅", "inconclusive": " ❔"}.get(m.verdict, "")
    return f"{head}{p}{flag}"


def _latency_cell(c: ConfigResult) -> str:
    lat = c.latency
    if not math.isfinite(lat.ratio):
        return lat.verdict
    ci = f" [{lat.ratio_low:.2f}, {lat.ratio_high:.2f}]" if math.isfinite(lat.ratio_low) else ""
    return f"×{lat.ratio:.2f}{ci} {lat.verdict}"


def _allow_text(m: MetricResult) -> str:
    if m.allowance.endswith("%"):
        return f"{m.column} {m.allowance} of the baseline mean"
    return f"{m.column} {m.allowance}" + (f" {m.unit}" if m.unit else "")


def _table(comp: Comparison, rows: list[ConfigResult]) -> list[str]:
    cols = [m.column for m in comp.configs[0].metrics] if comp.configs else []
    head = ["configuration", "verdict", *[f"{c} Δ" for c in cols], "RTF ratio", "failed (base/cand)", "n"]
    cells = []
    for c in rows:
        n = max((m.n for m in c.metrics), default=0)
        cells.append([f"`{c.name}`", f"**{c.verdict}**", *[_cell(m) for m in c.metrics], _latency_cell(c),
                      f"{c.failed_baseline}/{c.failed_candidate}"
                      + (f" ({c.new_failures} new)" if c.new_failures else ""), str(n)])
    return md_table(head, cells).splitlines()


TITLES = {"regression": "❌ REGRESSION", "pass": "✅ PASS", "inconclusive": "❔ INCONCLUSIVE"}


def markdown(comp: Comparison) -> str:
    """Summary fit for a pull-request comment."""
    pol = comp.policy
    title = TITLES[comp.verdict] + (" (accepted by the policy)" if comp.accepted else "")
    mb, mc = comp.meta.get("baseline", {}), comp.meta.get("candidate", {})
    lines = [f"### vocobench compare: {title}", "", md_cell(verdict_line(comp)), ""]
    if comp.mode == "ab":
        lines.append(f"A/B latency on this machine: baseline `{comp.baseline}` vs candidate `{comp.candidate}`.")
    else:
        lines.append(f"Baseline `{comp.baseline}` ({mb.get('target')} {mb.get('version') or ''}, "
                     f"{mb.get('created_utc')}) · candidate `{comp.candidate}` "
                     f"({mc.get('target')} {mc.get('version') or ''}, {mc.get('created_utc')})")
    lines.append("")
    if comp.forced:
        lines += ["**Compared with --force although:** " + md_cell("; ".join(comp.forced)), ""]
    if comp.accepted:
        lines += ["**Accepted without evidence:** the policy sets `accept_inconclusive = true`; "
                  "this result does not show that the candidate is no worse.", ""]
    lines += ["#### Gated configurations", "", md_cell(f"Gated: {comp.gated_by}."), "",
              *_table(comp, comp.gated), ""]
    for c in comp.gated:
        if c.reasons and c.verdict != "pass":
            lines.append(f"- `{md_cell(c.name)}`: {c.verdict} — " + md_cell("; ".join(c.reasons)))
    lines += ["", "Resolution:", "", *[f"- {md_cell(x.strip())}" for x in resolution_lines(comp)[1:]], ""]
    if comp.information:
        lines += ["<details><summary>Information: configurations not gated (unadjusted; they do "
                  "not change the verdict)</summary>", "", *_table(comp, comp.information), "",
                  "</details>", ""]
    allow = ", ".join(_allow_text(m) for m in (comp.configs[0].metrics if comp.configs else []))
    lines += ["#### Rule", "",
              f"Δ = candidate − baseline, mean over paired utterances (seeds averaged first); "
              f"[L, U] = one-sided {pol.confidence:g} bootstrap bounds. A gated metric passes when "
              f"its drop bound is below the allowed drop (non-inferiority), and is a regression when "
              f"its p-value of \"drop beyond the allowance\", Holm-adjusted over the gated metrics "
              f"(Holm p), is ≤ {pol.alpha:.3g}; otherwise it is inconclusive. The comparison passes "
              f"only if every gated metric passes; any new failed item is a regression; "
              f"inconclusive exits 3 unless the policy accepts it.",
              f"Allowed drop: {allow or 'n/a'}; RTF +{pol.max_rtf_increase_pct:g} %. "
              f"Policy: {pol.source}.", ""]
    notes = list(comp.notes) + ([comp.latency_note] if comp.latency_note else [])
    if notes:
        lines += ["#### Notes", "", *[f"- {md_cell(n)}" for n in notes], ""]
    return "\n".join(lines)


# ---------------------------------------------------------------- JSON, JUnit

def to_json(comp: Comparison) -> str:
    return dumps(comp.to_dict()) + "\n"


def _detail(c: ConfigResult) -> str:
    lines = [f"{c.name}: {c.verdict}"]
    for m in c.metrics:
        lines.append(f"  {m.column}: Δ {signed_interval(m.diff, m.diff_low, m.diff_high)} n={m.n} "
                     f"allowed {m.allowed:.4g} p={m.p:.3g} p_holm={m.p_holm:.3g} "
                     f"smallest drop shown {m.detectable:.3g} → {m.verdict}"
                     + (f" ({m.reason})" if m.reason else ""))
    lat = c.latency
    lines.append(f"  latency: {lat.verdict}" + (f" ratio {lat.ratio:.3f}" if math.isfinite(lat.ratio) else "")
                 + (f" [{lat.ratio_low:.3f}, {lat.ratio_high:.3f}]" if math.isfinite(lat.ratio_low) else "")
                 + (f" ({lat.reason})" if lat.reason else ""))
    lines.append(f"  items {c.items_baseline}/{c.items_candidate}, failed {c.failed_baseline}/"
                 f"{c.failed_candidate}, new failures {c.new_failures}, missing {c.missing}")
    return "\n".join(lines)


def junit(comp: Comparison, suite: str = "vocobench.compare") -> str:
    """JUnit XML, one ``testcase`` per configuration."""
    k = comp.counts()
    failures = k["regression"] + (0 if comp.accepted else k["inconclusive"])
    attrs = {"name": suite, "tests": str(len(comp.configs)), "failures": str(failures),
             "errors": "0", "skipped": str(len(comp.configs) - failures - k["pass"]), "time": "0"}
    root = ET.Element("testsuites", attrs)
    ts = ET.SubElement(root, "testsuite", {**attrs, "timestamp":
                                            datetime.now(timezone.utc).isoformat(timespec="seconds")})
    props = ET.SubElement(ts, "properties")
    for name, value in (("baseline", comp.baseline), ("candidate", comp.candidate), ("mode", comp.mode),
                        ("policy", comp.policy.source), ("verdict", comp.verdict)):
        ET.SubElement(props, "property", {"name": name, "value": str(value)})
    for c in comp.configs:
        key = ConfigKey.parse(c.label)
        tc = ET.SubElement(ts, "testcase", {"name": c.name,
                                            "classname": f"{suite}.{key.schedule}.{key.sampler}",
                                            "time": "0"})
        msg = "; ".join(c.reasons) or c.verdict
        if not c.gated:
            ET.SubElement(tc, "skipped", {"message": f"information, not gated: {c.verdict}"})
        elif c.verdict == "regression" or (c.verdict == "inconclusive" and not comp.accepted):
            f = ET.SubElement(tc, "failure", {"message": msg, "type": c.verdict})
            f.text = _detail(c)
        elif c.verdict == "inconclusive":
            ET.SubElement(tc, "skipped", {"message": "inconclusive, accepted by the policy: " + msg})
        else:
            out = ET.SubElement(tc, "system-out")
            out.text = _detail(c)
    notes = list(comp.forced) + list(comp.notes) + ([comp.latency_note] if comp.latency_note else [])
    if notes:
        ET.SubElement(ts, "system-out").text = "\n".join(notes)
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def write_outputs(comp: Comparison, *, markdown_path: Any = None, json_path: Any = None,
                  junit_path: Any = None) -> None:
    for path, render in ((markdown_path, markdown), (json_path, to_json), (junit_path, junit)):
        if path:
            write_atomic(Path(path), render(comp))
