"""Cluster tasks of optimal play: the twin of `classify.layer_classes`.

`layer_classes_task(rules, n, players, lo, hi, boundary)` classifies the levels lo .. hi of
the upward sweep on a worker.  It never receives the state space: it rebuilds the game's
state space from (rules, n) (and, for rule sets other than the standard game, its
reachability bits, `classify.reachable_bits`), keeps them in a small per-process cache so
the next shard of the same n on that worker reuses them, and calls the same wrapper.  Only
the boundary (the packed bits of the top max_drop + 1 layers of the range below) goes in
and the new boundary with the range's statistics comes out.  The chain that runs these
tasks one after the other is `solve_chain.run_solve`.
"""

from __future__ import annotations

import numpy as np
from zeckenum.cluster.workercache import WorkerCache
from zeckenum.core.statespace import StateSpace, build_space
from zeckenum.optimal.classify import layer_classes, reachable_bits
from zeckenum.optimal.solve import needs_reach
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

_cache: WorkerCache[tuple[str, int], tuple[StateSpace, dict | None]] = WorkerCache()


def prepared_space(rules: str | RuleSet, n: int) -> tuple[StateSpace, dict | None]:
    """(state space, reachability bits or None) of (rules, n), cached in this process."""
    ruleset = get_rules(rules)

    def build() -> tuple[StateSpace, dict | None]:
        space = build_space(ruleset.instantiate(n))
        return space, (reachable_bits(space)[0] if needs_reach(ruleset) else None)

    return _cache.get((ruleset.content_hash(), int(n)), build)


def layer_classes_task(
    rules: str | RuleSet, n: int, players: int, lo: int, hi: int,
    boundary: dict[int, np.ndarray],
) -> tuple[dict[int, np.ndarray], dict]:
    """(boundary after level hi, statistics) of the levels lo .. hi of the upward sweep.

    The cluster twin of `classify.layer_classes`: `boundary` is what the shard below
    returned ({} for the first shard).
    """
    space, reach = prepared_space(rules, n)
    return layer_classes(space, players, reach=reach, levels=range(lo, hi + 1),
                         held=boundary)


__all__ = ["layer_classes_task", "prepared_space"]
