"""Text formatting shared by the report and the gate: numbers, intervals and table cells.

* numbers: :func:`fmt` (significant digits), :func:`fmt_signed` (fixed decimals, typographic
  minus), :func:`fmt_p` (p-values); intervals ``m [lo, hi]``: :func:`interval`,
  :func:`signed_interval`;
* CSV: :func:`csv_text` (formula-like text cells neutralised, :func:`csv_cell`);
* tables: :func:`md_table` (GitHub-flavoured Markdown, every cell escaped by :func:`md_cell`),
  :func:`latex_table` (a plain ``tabular``, every cell escaped by :func:`latex_escape`) and
  :func:`text_table` (fixed width, for a terminal).
"""
from __future__ import annotations

import math
import re
from typing import Any, Sequence

NA = "–"                 # a missing number in report tables
NA_SIGNED = "n/a"        # a missing number in gate outputs
MINUS = "−"              # U+2212, typographic minus


# ---------------------------------------------------------------- numbers

def finite(x: Any) -> float | None:
    """``x`` as a finite float, else None (NaN, ±inf, None, not a number)."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def fmt(x: Any, sig: int = 4, sign: bool = False) -> str:
    """Number with ``sig`` significant digits (``sign``: always signed); NaN/None as a dash."""
    v = finite(x)
    if v is None:
        return NA
    return f"{v:+.{sig}g}" if sign else f"{v:.{sig}g}"


def fmt_signed(x: Any, digits: int = 3) -> str:
    """``+0.012`` / ``−0.210`` (``digits`` decimals, typographic minus), ``n/a`` for NaN/None."""
    v = finite(x)
    if v is None:
        return NA_SIGNED
    return f"{v:+.{digits}f}".replace("-", MINUS)


def fmt_p(p: Any) -> str:
    """p-value with three decimals, ``<0.001`` below that; NaN/None as a dash."""
    v = finite(p)
    if v is None:
        return NA
    return "<0.001" if v < 0.001 else f"{v:.3f}"


def interval(est: Any, lo: Any, hi: Any, sign: bool = False, sig: int = 4) -> str:
    """``est [lo, hi]`` by :func:`fmt` (bounds with 3 significant digits); the estimate alone
    when a bound is missing, a dash when the estimate is."""
    if finite(est) is None:
        return NA
    if finite(lo) is None or finite(hi) is None:
        return fmt(est, sig, sign)
    return f"{fmt(est, sig, sign)} [{fmt(lo, 3, sign)}, {fmt(hi, 3, sign)}]"


def signed_interval(est: Any, lo: Any, hi: Any, digits: int = 3) -> str:
    """``+0.012 [−0.030, +0.041]`` by :func:`fmt_signed` (missing numbers as ``n/a``)."""
    return f"{fmt_signed(est, digits)} [{fmt_signed(lo, digits)}, {fmt_signed(hi, digits)}]"


# ---------------------------------------------------------------- Markdown

def md_cell(text: Any) -> str:
    """Text safe in a Markdown table cell or line: ``|`` escaped (it would end the cell;
    GitHub-flavoured Markdown spec, "Tables" extension), ``<`` written as ``&lt;`` (it could open
    raw HTML, which renderers pass through) and line breaks replaced by spaces (a row is one
    line). ``>`` and ``&`` stay as they are, readable in the plain file."""
    text = str(text).replace("<", "&lt;").replace("|", "\\|")
    return text.replace("\r\n", " ").replace("\r", " ").replace("\n", " ")


_MD_ALIGN = {"l": ":---", "r": "---:", "c": ":---:", "": "---"}


def md_table(header: Sequence[Any], rows: Sequence[Sequence[Any]], align: str = "") -> str:
    """A Markdown table, every cell escaped by :func:`md_cell`.

    ``align``: one letter per column, ``l``, ``r`` or ``c`` (``"lrr"``); a shorter string leaves
    the remaining columns unaligned (``---``). Ends with a newline.
    """
    spec = [_MD_ALIGN[align[i]] if i < len(align) else "---" for i in range(len(header))]
    out = ["| " + " | ".join(md_cell(h) for h in header) + " |", "|" + "|".join(spec) + "|"]
    out += ["| " + " | ".join(md_cell(c) for c in r) + " |" for r in rows]
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- LaTeX

_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}",
                  "Δ": r"$\Delta$", "↑": r"$\uparrow$", "↓": r"$\downarrow$", "–": "--",
                  "≥": r"$\geq$", "≤": r"$\leq$", "×": r"$\times$"}


def latex_escape(text: Any) -> str:
    """Text safe in LaTeX: the ten special characters ``# $ % & ~ _ ^ \\ { }`` and ``< >``
    escaped by LaTeX kernel text-mode commands, and the few non-ASCII symbols of our tables
    written as math."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(text))


def latex_table(header: Sequence[Any], rows: Sequence[Sequence[Any]], caption: str = "") -> str:
    """A plain LaTeX ``table``/``tabular`` (no packages beyond the LaTeX kernel): first column
    left-aligned, the others right-aligned; every cell escaped by :func:`latex_escape`."""
    spec = "l" + "r" * (len(header) - 1)
    out = [r"\begin{table}[ht]", r"\centering", r"\small", rf"\begin{{tabular}}{{{spec}}}", r"\hline",
           " & ".join(latex_escape(h) for h in header) + r" \\", r"\hline"]
    out += [" & ".join(latex_escape(c) for c in r) + r" \\" for r in rows]
    out += [r"\hline", r"\end{tabular}"]
    if caption:
        out.append(rf"\caption{{{latex_escape(caption)}}}")
    out.append(r"\end{table}")
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- plain text

def text_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    """Fixed-width text: first column left-aligned, the others right-aligned."""
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)]

    def line(cells: Sequence[str]) -> str:
        return "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths)))

    out = [line(header), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in rows]
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- CSV

# OWASP, "CSV Injection": a spreadsheet runs a cell that starts with one of these as a formula;
# prefix such a cell with a single quote so it is read as text.
CSV_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def csv_cell(x: Any) -> Any:
    """A text cell that a spreadsheet would read as a formula, neutralised with a leading
    ``'``; numbers, and text that is only a plain number such as ``-0.5``, pass unchanged."""
    if isinstance(x, str) and x.startswith(CSV_FORMULA_START) and not _PLAIN_NUMBER.fullmatch(x):
        return "'" + x
    return x


def csv_text(frame: Any) -> str:
    """A pandas DataFrame as CSV text (no index) with every text cell and header passed
    through :func:`csv_cell`."""
    out = frame.rename(columns=csv_cell)
    for col in out.columns:
        if out[col].dtype.kind in "OSU":         # object or text columns; numbers untouched
            out[col] = out[col].map(csv_cell)
    return out.to_csv(index=False)
