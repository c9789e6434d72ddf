"""Schedule search: the best N-step inference schedules for a model on a test set, confirmed on
held-out utterances.

``search(cfg, out_dir)`` reads the config's ``[search]`` table (:data:`options.SEARCH`), splits the
utterances (:mod:`.split`), proposes candidates from spaces (:mod:`.spaces`) with a strategy
(:mod:`.strategies`), scores them through the sweep's jobs and journal (:mod:`.engine`), confirms
the finalists with fresh seeds on the held-out split (:mod:`.holdout`) and writes β lists, a
summary and plots (:mod:`.outputs`). Modules import downward in that order; ``runner`` ties them.
"""
from __future__ import annotations

from .holdout import verdict
from .objective import Objective, pareto_front, utterance_means
from .options import SEARCH, SearchOptions
from .runner import search
from .spaces import SPACE, Candidate, Space, make_space
from .split import Split, split_utterances
from .strategies import STRATEGIES, halving_rungs

__all__ = ["SEARCH", "SPACE", "STRATEGIES", "Candidate", "Objective", "SearchOptions", "Space",
           "Split", "halving_rungs", "make_space",
           "pareto_front", "search", "split_utterances", "utterance_means", "verdict"]
