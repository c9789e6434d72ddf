"""Which parts of two stored runs may be compared, and how their items pair up.

Matching
--------
An item is identified by ``(utterance, schedule, sampler, steps, seed)``, the utterance by its id
*and* content hash (``utt_id`` + ``utt_sha``), so a re-recorded file under an old id never pairs.
When the two runs share seeds, only the shared seeds are used (same seed, same noise draw: the
comparison then has common random numbers); when they share none, each side's own seeds are used
and the report says so. As in :mod:`vocobench.stats`, the utterance is the unit: the seeds of an
utterance are averaged first (``ok`` items only), then ``d_u = candidate_u − baseline_u`` over the
utterances both runs have.

Comparability
-------------
Two runs are comparable only with the same test set (``dataset.fingerprint``), front-end,
metric variants (library versions alone are a caution, not a refusal), length policy and
configurations (grid). Otherwise :class:`~vocobench.errors.InputError` names every difference,
unless ``force``: then the common part is compared and the differences head the report.
``match`` pairs configurations explicitly (``{"uniform/ddim/50": "uniform/ddim/10"}``), e.g. to
compare a cheaper sampler setting against the current one; the grid check is then skipped.
"""
from __future__ import annotations

from typing import Any, Iterable, Mapping, Sequence

import pandas as pd

from ..errors import InputError
from ..keys import ConfigKey, direction, directed_columns, labels
from ..runtables import configurations, ok_mask, require_item_fields
from ..store import Run
from .verdict import ConfigResult

UKEY = "_ukey"
CFG = "_cfg"
MATCH_FIELD = "--match-config"


def _variant_core(v: Any) -> Any:
    return {k: x for k, x in v.items() if k != "libraries"} if isinstance(v, Mapping) else v


def _dict_diff(a: Mapping[str, Any] | None, b: Mapping[str, Any] | None) -> list[str]:
    a, b = dict(a or {}), dict(b or {})
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


def comparability(base: Run, cand: Run, *, check_grid: bool = True,
                  configs: tuple[Sequence[ConfigKey], Sequence[ConfigKey]] | None = None
                  ) -> tuple[list[str], list[str]]:
    """``(problems, cautions)``: reasons the runs are not comparable, and softer differences.

    ``configs``: each side's :func:`~vocobench.stats.configurations`, if already computed.
    """
    mb, mc = base.manifest, cand.manifest
    problems, cautions = [], []
    db, dc = mb.get("dataset") or {}, mc.get("dataset") or {}
    if db.get("fingerprint") is None or db.get("fingerprint") != dc.get("fingerprint"):
        problems.append(f"different test sets (baseline fingerprint {db.get('fingerprint')} of "
                        f"{db.get('n_utterances', '?')} utterances, candidate {dc.get('fingerprint')} "
                        f"of {dc.get('n_utterances', '?')})")
    fe = _dict_diff(mb.get("frontend"), mc.get("frontend"))
    if fe:
        shown = ", ".join(f"{k} {(mb.get('frontend') or {}).get(k)!r} vs {(mc.get('frontend') or {}).get(k)!r}"
                          for k in fe[:4])
        problems.append(f"different front-ends ({shown})")
    metb, metc = mb.get("metrics") or {}, mc.get("metrics") or {}
    if set(metb) != set(metc):
        problems.append(f"different metric sets (baseline {sorted(metb)}, candidate {sorted(metc)})")
    changed = sorted(k for k in set(metb) & set(metc) if _variant_core(metb[k]) != _variant_core(metc[k]))
    if changed:
        detail = "; ".join(f"{k}: {', '.join(_dict_diff(_variant_core(metb[k]), _variant_core(metc[k])))}"
                           for k in changed)
        problems.append(f"different metric variants ({detail})")
    libs = sorted(k for k in set(metb) & set(metc) if k not in changed and metb[k] != metc[k])
    if libs:
        cautions.append("metric library versions differ for " + ", ".join(libs)
                        + " (same settings; scores may still shift slightly)")
    if (mb.get("length_policy") or None) != (mc.get("length_policy") or None):
        problems.append(f"different length policies ({mb.get('length_policy')} vs {mc.get('length_policy')})")
    if check_grid:
        cb, cc = configs or side_configs(base, cand)
        gb, gc = [c.label for c in cb], [c.label for c in cc]
        only_b, only_c = [g for g in gb if g not in gc], [g for g in gc if g not in gb]
        if only_b or only_c:
            problems.append("different configurations (only in baseline: "
                            f"{', '.join(only_b) or 'none'}; only in candidate: {', '.join(only_c) or 'none'})")
    return problems, cautions


def side_configs(base: Run, cand: Run) -> tuple[list[ConfigKey], list[ConfigKey]]:
    """Each side's configurations with items (none for a run without items)."""
    return tuple(configurations(r.manifest, r.items) if len(r.items) else [] for r in (base, cand))


def prepared(run: Run) -> pd.DataFrame:
    """The run's items with an utterance key (id + content hash), a label, an integer seed and
    an ``ok`` flag (columns ``UKEY``, ``CFG``, ``seed``, ``_ok``)."""
    items = run.items
    require_item_fields(items, str(run.path))
    df = items.copy()
    sha = df["utt_sha"].astype(str) if "utt_sha" in df.columns else pd.Series("", index=df.index)
    df[UKEY] = df["utt_id"].astype(str) + "@" + sha.where(sha != "None", "")
    df[CFG] = labels(df)
    if "seed" not in df.columns:
        df["seed"] = 0
    df["seed"] = pd.to_numeric(df["seed"], errors="coerce").fillna(-1).astype(int)
    df["_ok"] = ok_mask(df)
    return df


def compared_columns(base: Run, cand: Run) -> tuple[list[str], list[str]]:
    """Metric columns compared (in both, same direction, directed) and notes on the rest."""
    cb, cc = base.metric_columns, cand.metric_columns
    cols, notes = [], []
    for name in directed_columns(cb):
        other = cc.get(name)
        if not isinstance(other, Mapping):
            notes.append(f"{name}: not in the candidate, not compared")
        elif direction(other) is not direction(cb[name]):
            notes.append(f"{name}: direction differs between the runs, not compared")
        elif name not in base.items.columns or name not in cand.items.columns:
            notes.append(f"{name}: no values stored, not compared")
        else:
            cols.append(name)
    return cols, notes


def _key(x: "ConfigKey | str") -> ConfigKey:
    return x if isinstance(x, ConfigKey) else ConfigKey.parse(x, source=MATCH_FIELD)


def config_pairs(cb: Sequence[ConfigKey], cc: Sequence[ConfigKey],
                 match: Mapping[str, str] | None) -> list[tuple[ConfigKey, ConfigKey]]:
    """``(baseline, candidate)`` configuration pairs: those of ``match``, else the common ones."""
    if not match:
        common = set(cc)
        return [(c, c) for c in cb if c in common]
    out = []
    for b, c in match.items():
        bk, ck = _key(b), _key(c)
        for k, side, have in ((bk, "baseline", cb), (ck, "candidate", cc)):
            if k not in have:
                raise InputError(f"configuration has no items in the {side}; valid: "
                                 + ", ".join(x.label for x in have), field=MATCH_FIELD, value=k.label)
        out.append((bk, ck))
    return out


def parse_match(texts: Iterable[str]) -> dict[str, str]:
    """``BASE_LABEL=CAND_LABEL`` strings → mapping (labels are ``schedule/sampler/steps``)."""
    out: dict[str, str] = {}
    for t in texts:
        b, sep, c = str(t).partition("=")
        if not sep:
            raise InputError("expected BASE_CONFIG=CAND_CONFIG (schedule/sampler/steps each)",
                             field=MATCH_FIELD, value=t)
        bl = _key(b.strip()).label
        if bl in out:
            raise InputError("baseline configuration matched twice", field=MATCH_FIELD, value=bl)
        out[bl] = _key(c.strip()).label
    return out


def config_items(bi: pd.DataFrame, ci: pd.DataFrame, b: ConfigKey, c: ConfigKey,
                 matched_seeds: bool) -> ConfigResult:
    """Item counts of one configuration pair: items, failures, new failures, missing items and
    paired utterances (an ``ok`` item on both sides)."""
    xb, xc = bi[bi[CFG] == b.label], ci[ci[CFG] == c.label]
    res = ConfigResult(b.label, c.label, items_baseline=len(xb), items_candidate=len(xc),
                       failed_baseline=int((~xb["_ok"]).sum()), failed_candidate=int((~xc["_ok"]).sum()))
    keys = [UKEY, "seed"] if matched_seeds else [UKEY]
    ok_b = xb.groupby(keys)["_ok"].all()
    ok_c = xc.groupby(keys)["_ok"].all()
    both = ok_b.to_frame("b").join(ok_c.to_frame("c"), how="left")
    res.missing = int(both["c"].isna().sum())
    both = both.dropna()
    res.new_failures = int((both["b"].astype(bool) & ~both["c"].astype(bool)).sum())
    res.paired = len(set(xb.loc[xb["_ok"], UKEY]) & set(xc.loc[xc["_ok"], UKEY]))
    return res


def shared_seeds(bi: pd.DataFrame, ci: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame,
                                                           dict[str, Any], str]:
    """Keep only the seeds both prepared item tables have (same seed, same noise draw: common
    random numbers); with none in common keep each side's own. Returns both tables, the seeds
    record and a note for the reader ('' when the seeds agree)."""
    seeds_b, seeds_c = sorted(set(bi["seed"])), sorted(set(ci["seed"]))
    common = sorted(set(seeds_b) & set(seeds_c))
    record = {"baseline": seeds_b, "candidate": seeds_c, "used": common or "each run's own"}
    if not common:
        return bi, ci, record, (f"no seed in common (baseline {seeds_b}, candidate {seeds_c}); "
                                "utterance means over each run's own seeds are compared "
                                "(different noise draws)")
    note = "" if seeds_b == seeds_c else (f"seeds differ (baseline {seeds_b}, candidate "
                                          f"{seeds_c}); only the shared seeds {common} are compared")
    return bi[bi["seed"].isin(common)], ci[ci["seed"].isin(common)], record, note
