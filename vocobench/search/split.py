"""Deterministic split of a test set into a search split and a held-out split.

Each utterance gets the key sha256(split seed, content hash); within each stratum (the value of a
tag such as ``speaker``; one stratum when no utterance carries the tag) utterances are ordered by
key and given the rank quantile (i + ½)/n; the ⌊f·N + ½⌋ utterances of lowest quantile (ties by
key) are held out, so every stratum is held out in proportion, singletons spread by key. Same files and seed ⇒ same split, whatever their order
or names (a hash-based split is common practice, no source). The held-out split is never seen
while searching; the split is recorded with the results.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import Any, Sequence

from ..errors import InputError
from ..testset import Utterance


@dataclass(frozen=True)
class Split:
    search: list[Utterance]
    held_out: list[Utterance]
    stratified_by: str | None
    seed: int

    def describe(self) -> dict[str, Any]:
        return {"seed": self.seed, "stratified_by": self.stratified_by,
                "search": [u.id for u in self.search], "held_out": [u.id for u in self.held_out]}


def _key(seed: int, u: Utterance) -> str:
    return hashlib.sha256(f"{seed}\0{u.sha256}\0{u.id}".encode()).hexdigest()


def split_utterances(utts: Sequence[Utterance], fraction: float, tag: str | None = None,
                     seed: int = 0) -> Split:
    """Split ``utts`` (see the module docstring); both splits get at least one utterance."""
    if len(utts) < 2:
        raise InputError("a search needs at least two utterances (a search and a held-out one)",
                         field="testset", value=len(utts))
    has_tag = bool(tag) and any(tag in u.tags for u in utts)
    strata: dict[str, list[Utterance]] = {}
    for u in utts:
        strata.setdefault(str(u.tags.get(tag, "")) if has_tag else "", []).append(u)
    rank: dict[str, tuple[float, str]] = {}
    for name in sorted(strata):
        group = sorted(strata[name], key=lambda u: _key(seed, u))
        for i, u in enumerate(group):              # spread each stratum evenly over the order
            rank[u.id] = ((i + 0.5) / len(group), _key(seed, u))
    k = min(len(utts) - 1, max(1, int(fraction * len(utts) + 0.5)))
    ordered = sorted(utts, key=lambda u: rank[u.id])
    held, rest = ordered[:k], ordered[k:]
    order = {u.id: i for i, u in enumerate(sorted(utts, key=lambda u: _key(seed, u)))}
    return Split(sorted(rest, key=lambda u: order[u.id]), sorted(held, key=lambda u: order[u.id]),
                 tag if has_tag else None, seed)
