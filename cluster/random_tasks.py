"""Cluster tasks of exact random play: the first sweep that plans it, and its shards.

Shard design, as for counts (`count_tasks`): one large n splits by *prime block*.  The exact
sweep of random play for a block of primes below 2**50 is independent of every other
block: in-process `randomplay.random_play` runs the blocks in threads, and here
`random_law_residues_task(rules, n, model, block)` (the length law) and
`random_win_residues_task(rules, n, model, players, block)` (winners only) are their
cluster twins, calling the same `randomplay.random_law_residues` /
`randomplay.random_win_residues`.

A worker never receives the skeleton: it rebuilds the game, its state space and the first
sweep (`randomplay.skeleton.random_skeleton`, deterministic) from (rules, n, model), keeps
the skeleton in a small per-process cache (`workercache.WorkerCache`) so the other blocks of
the same game on that worker reuse it, and sweeps its block.  Only a block of primes goes in; one
small int64 array (primes in block x columns: longest + 1 lengths, or `players` residues of
the length mod players) and a word-update count come out.

`random_facts_task` runs that first sweep and returns `RandomFacts`: the few numbers the
client needs to plan the shards (the denominator M -> primes, the memory of one block) and
to report the result (states, transitions).
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass

import numpy as np
from zeckenum.cluster.workercache import WorkerCache, worker_address
from zeckenum.core.checks import check_model
from zeckenum.core.modular import check_mul_primes
from zeckenum.core.statespace import build_space
from zeckenum.randomplay.exact import (
    law_words_per_prime,
    random_law_residues,
    random_win_residues,
    win_words_per_prime,
)
from zeckenum.randomplay.skeleton import Skeleton, random_skeleton, skeleton_nbytes, weight_bound
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet


@dataclass(frozen=True)
class RandomFacts:
    """What the first sweep of one random-play run tells the planner (plain, picklable).

    denominator   M, the common denominator of every probability, as a decimal string
                  (it exceeds 2**64); the primes' product must exceed it
    max_indegree  most moves into one state; weight_bound: largest D(s) to invert (both
                  bound the primes, `core.modular.check_mul_primes`)
    columns       residues per prime of one shard: longest + 1 (law) or players (winners)
    words_one     int64 words one prime of a block holds at its peak (buffer ring, output
                  and inverse table)
    window_bytes  bytes of the skeleton every process keeps (windows, D, moves in)
    shared_bytes  0 (nothing else is shared between blocks); fixed_bytes: 0
    updates_one   word additions of the exact sweep per prime (one per move and source
                  length, or per move and residue class)
    where         address of the worker that ran the sweep ("" in-process)
    """

    rules: str
    rules_hash: str
    n: int
    model: str
    players: int
    winners_only: bool
    denominator: str
    states: int
    transitions: int
    terminals: int
    shortest: int
    longest: int
    max_indegree: int
    weight_bound: int
    columns: int
    words_one: int
    window_bytes: int
    shared_bytes: int
    fixed_bytes: int
    updates_one: int
    seconds_windows: float
    where: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, eq=False)
class _Swept:
    """One cached first sweep: the skeleton and what the facts need besides it."""

    skel: Skeleton
    weight_bound: int
    law_updates: int
    seconds: float


_cache: WorkerCache[tuple[str, int, str], _Swept] = WorkerCache()
"""Games (rules, n, model) whose skeleton this process keeps: the current n and the next."""


def law_updates_per_prime(skel: Skeleton) -> int:
    """Word additions `random_law_residues` makes per prime: one per (kept move, length in
    its source's window)."""
    total = 0
    for level in skel.levels:
        inc = skel.incoming[level]
        for d in np.unique(inc.drop):
            src_level = level + int(d)
            if src_level not in skel.win:
                continue
            sel = inc.drop == d
            total += int(skel.win[src_level][inc.src[sel]].astype(np.int64).sum())
    return total


def random_prepared(rules: str | RuleSet, n: int, model: str) -> _Swept:
    """The (cached) first sweep of (rules, n, model) in this process; built at most once at a
    time."""
    ruleset = get_rules(rules)
    check_model(model)

    def build() -> _Swept:
        t0 = time.perf_counter()
        space = build_space(ruleset.instantiate(int(n)))
        skel = random_skeleton(space, model, threads=1)
        return _Swept(skel=skel, weight_bound=weight_bound(space, skel, model),
                      law_updates=law_updates_per_prime(skel),
                      seconds=round(time.perf_counter() - t0, 3))

    return _cache.get((ruleset.content_hash(), int(n), model), build)


def clear_random_cache() -> None:
    """Forget every cached first sweep of random play in this process."""
    _cache.clear()


def random_facts_task(
    rules: str | RuleSet, n: int, model: str, players: int, winners_only: bool
) -> RandomFacts:
    """Run (or reuse) the first sweep of (rules, n, model) here and return its facts for a
    run of the length law (or, with `winners_only`, of the win probabilities)."""
    ruleset = get_rules(rules)
    swept = random_prepared(ruleset, n, model)
    skel = swept.skel
    if winners_only:
        columns = players
        ring = win_words_per_prime(skel, players)
        updates = players * skel.transitions
    else:
        columns = skel.longest + 1
        ring = law_words_per_prime(skel)
        updates = swept.law_updates
    return RandomFacts(
        rules=ruleset.name,
        rules_hash=ruleset.content_hash(),
        n=int(n),
        model=model,
        players=int(players),
        winners_only=bool(winners_only),
        denominator=str(skel.denominator),
        states=skel.states,
        transitions=skel.transitions,
        terminals=skel.terminals,
        shortest=skel.shortest,
        longest=skel.longest,
        max_indegree=skel.max_indegree,
        weight_bound=swept.weight_bound,
        columns=columns,
        words_one=ring + columns + max(skel.max_weight, 1) + 1,
        window_bytes=skeleton_nbytes(skel),
        shared_bytes=0,
        fixed_bytes=0,
        updates_one=updates,
        seconds_windows=swept.seconds,
        where=worker_address(),
    )


def _block(skel_entry: _Swept, primes_block: tuple[int, ...] | list[int]) -> np.ndarray:
    """The block as int64 primes, refused outside the proved arithmetic ranges."""
    block = [int(p) for p in primes_block]
    check_mul_primes(block, skel_entry.skel.max_indegree, skel_entry.weight_bound)
    return np.asarray(block, dtype=np.int64)


def random_law_residues_task(
    rules: str | RuleSet, n: int, model: str, primes_block: tuple[int, ...] | list[int]
) -> tuple[np.ndarray, int]:
    """(residues, word updates) of one shard of the length law:
    residues[q, L] = P(length = L) mod block[q] (shape block size x (longest + 1)).

    The cluster twin of one thread of `random_play`: rebuilds (or reuses) the first sweep
    in this process and calls the same `randomplay.random_law_residues`.
    """
    swept = random_prepared(rules, n, model)
    block = _block(swept, primes_block)
    out = random_law_residues(swept.skel, block, model == "moves")
    return out, swept.law_updates * block.size


def random_win_residues_task(
    rules: str | RuleSet, n: int, model: str, players: int,
    primes_block: tuple[int, ...] | list[int],
) -> tuple[np.ndarray, int]:
    """(residues, word updates) of one shard of the win probabilities:
    residues[q, r] = P(length = r mod players) mod block[q] (shape block size x players).

    The cluster twin of one thread of `random_play(winners_only=True)`: calls the same
    `randomplay.random_win_residues` on the (cached) first sweep of this process.
    """
    swept = random_prepared(rules, n, model)
    block = _block(swept, primes_block)
    out = random_win_residues(swept.skel, block, model == "moves", int(players))
    return out, int(players) * swept.skel.transitions * block.size
