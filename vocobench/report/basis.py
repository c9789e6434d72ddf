"""What a report rests on: items done of those planned, utterances used, failures by reason,
records of other grids left out, resampled inputs, timing repeats measured, and whether the
reference is the one the grid planned.

Every report (summary, recommendation, terminal) states these, so a partial or failing run is
never read as a complete one: in particular the default reference ("most steps") is taken among
configurations that have items, and when that is not the grid's own most-steps configuration
with all its items, the report says the grid is incomplete.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import pandas as pd

from ..keys import ConfigKey, labels
from ..runtables import default_reference, failure_reasons, ok_mask
from ..store import Run


@dataclass
class Basis:
    """Counts behind a report (see the module docstring)."""

    planned: int | None                  # items of the grid (None: unknown)
    done: int                            # items journalled, ok or failed
    failed: int
    utterances: int                      # in the test set
    used: int                            # utterances with at least one ok item
    per_config: int | None               # items planned per configuration
    config_items: dict[str, int]         # items (ok or failed) per configuration label
    grid: list[ConfigKey]                # planned configurations, grid order
    failures: pd.DataFrame               # reason, count, first, configs
    ignored: dict[str, int] = field(default_factory=dict)
    resampled: dict[tuple[int, int], int] = field(default_factory=dict)   # (from, to) → count
    repeats: int | None = None           # timing repeats configured
    measured: tuple[int, int] | None = None   # fewest and most repeats measured per block
    short_blocks: int = 0                # timing blocks with fewer repeats than configured

    def reference_note(self, reference: ConfigKey, chosen: bool) -> str | None:
        """What an incomplete grid means for the comparison (``None`` for a complete one): the
        reference is not the grid's own (most steps among configurations with items), or it
        lacks items, or other configurations do. ``chosen``: the reference was set in the
        options."""
        planned = default_reference(self.grid) if self.grid else reference
        have = self.config_items.get(reference.label, 0)
        full = self.per_config is None or have >= self.per_config
        missing = self.planned is not None and self.done < self.planned
        items = f"{self.done} of {self.planned} items" if self.planned else f"{self.done} items"
        finish = "Finish the run (run the same command again) before trusting the comparison."
        if not chosen and planned != reference:
            return (f"The grid is incomplete ({items}): the reference {reference.label} is the "
                    f"configuration with most steps among those that have items; the grid's "
                    f"reference {planned.label} has {self.config_items.get(planned.label, 0)} of "
                    f"{self.per_config} items. {finish}")
        if not full:
            return (f"The grid is incomplete ({items}): the reference {reference.label} has {have} "
                    f"of {self.per_config} items, so every comparison rests on fewer utterances "
                    f"than planned. {finish}")
        if missing:
            return (f"The grid is incomplete ({items}, {self.used} of {self.utterances} "
                    "utterances with results): configurations that lack items are compared on "
                    f"fewer utterances than planned. {finish}")
        return None

    def lines(self) -> list[str]:
        """Plain sentences, for the terminal and (as list items) the summary."""
        planned = f" of {self.planned} planned" if self.planned is not None else ""
        out = [f"Items: {self.done}{planned} done ({self.failed} failed); utterances used: "
               f"{self.used} of {self.utterances}"]
        if self.planned is not None and self.done < self.planned:
            out.append(f"Incomplete: {self.planned - self.done} planned items have no result yet")
        for r in self.failures.itertuples(index=False):
            cfgs = ", ".join(r.configs[:4]) + (f" and {len(r.configs) - 4} more" if len(r.configs) > 4 else "")
            out.append(f"Failed ×{r.count}: {r.reason} (first: {r.first}; in {cfgs})")
        n_other = sum(self.ignored.values())
        if n_other:
            out.append(f"Ignored: {self.ignored.get('items', 0)} items and "
                       f"{self.ignored.get('timing', 0)} timing records of another grid, vocoder "
                       "code or version in this folder")
        for (a, b), n in sorted(self.resampled.items()):
            out.append(f"Resampled: {n} utterance{'s' if n != 1 else ''} {a} Hz → {b} Hz")
        if self.repeats is not None:
            if self.measured is None:
                out.append(f"Timing: {self.repeats} repeats configured; none measured")
            else:
                lo, hi = self.measured
                got = f"{lo}" if lo == hi else f"{lo} to {hi}"
                short = f"; {self.short_blocks} blocks short" if self.short_blocks else ""
                out.append(f"Timing: {self.repeats} repeats configured, {got} measured per "
                           f"configuration and utterance{short}")
        return out


def _planned(m: Mapping[str, Any], grid: list[ConfigKey], n_utts: int) -> tuple[int | None, int | None]:
    seeds = m.get("seeds")
    per = n_utts * len(seeds) if n_utts and isinstance(seeds, list) and seeds else None
    if isinstance(m.get("job_keys"), list):
        total = len(m["job_keys"])
    else:
        total = per * len(grid) if per and grid else None
    return total, per


def basis(run: Run) -> Basis:
    """The :class:`Basis` of a loaded run."""
    m, items, timing = run.manifest, run.items, run.timing
    grid = [ConfigKey.of(g) for g in m.get("grid") or []]
    utts = (m.get("dataset") or {}).get("utterances") or []
    n_utts = len(utts) or int((m.get("dataset") or {}).get("n_utterances") or 0)
    planned, per = _planned(m, grid, n_utts)
    ok = ok_mask(items) if len(items) else pd.Series(dtype=bool)
    used = items.loc[ok, "utt_id"].astype(str).nunique() if len(items) else 0
    counts = labels(items).value_counts().to_dict() if len(items) else {}
    rate = (m.get("vocoder") or {}).get("sample_rate")
    resampled: dict[tuple[int, int], int] = {}
    for u in utts:
        src = u.get("native_rate")
        if rate and src and int(src) != int(rate):
            resampled[(int(src), int(rate))] = resampled.get((int(src), int(rate)), 0) + 1
    repeats = (m.get("timing") or {}).get("repeats")
    measured, short = None, 0
    if len(timing) and "repeat" in timing.columns:
        timed = timing[pd.to_numeric(timing["repeat"], errors="coerce") >= 0]
        if len(timed):
            per_block = timed.groupby([labels(timed), timed["utt_id"].astype(str)]).size()
            measured = (int(per_block.min()), int(per_block.max()))
            short = int((per_block < (repeats or 0)).sum())
    return Basis(planned=planned, done=len(items), failed=int((~ok).sum()) if len(items) else 0,
                 utterances=n_utts, used=int(used), per_config=per,
                 config_items={str(k): int(v) for k, v in counts.items()}, grid=grid,
                 failures=failure_reasons(items), ignored=dict(run.ignored or {}),
                 resampled=resampled, repeats=repeats, measured=measured, short_blocks=short)


def basis_lines(run: Run) -> list[str]:
    """:meth:`Basis.lines` of a loaded run (what ``vocobench run`` prints when the report is
    already up to date)."""
    return basis(run).lines()
