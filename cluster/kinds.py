"""Kinds of sharded run: what a count and random play each supply to the one driver.

The driver (`driver.ShardDriver`) knows nothing about counting or probabilities.  A
`ShardKind` tells it how to run the first sweep (`facts_task`, returning a small facts
object), how to plan the primes (`plan`), which task computes one prime block
(`shard_task`, returning (residues [prime][column], word updates)), how many columns a
shard has (for checkpoint checks), the parameters and facts a checkpoint must match (a
manifest's facts are only ever compared with the recomputed ones, never used), and how the
residues of all blocks become the result (`assemble`, the same function the in-process
path uses).

count   facts `count_tasks.count_facts_task`, shards `count_tasks.spectrum_residues_task`,
        assembly `count.assemble_count`, release `count_tasks.release_task` (the host's
        shared sweep)
count by evaluation points (route "points", `points_kind`): facts
        `count_tasks.points_facts_task`, plan `plan.points_plan`, shards
        `count_tasks.spectrum_points_task` (prime, block of points), assembly
        `core.ntt.lengths_from_values` per prime, then `count.assemble_count`
random  facts `random_tasks.random_facts_task`, shards
        `random_tasks.random_law_residues_task` (length law) or
        `random_tasks.random_win_residues_task` (winners only), assembly
        `randomplay.assemble_random`
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from zeckenum.cluster.count_tasks import (
    Facts,
    PointsFacts,
    count_facts_task,
    points_facts_task,
    release_task,
    spectrum_points_task,
    spectrum_residues_task,
)
from zeckenum.cluster.plan import (
    AnyPlan,
    PointsPlan,
    ShardPlan,
    check_points_per_shard,
    make_plan,
    plan_from_primes,
    points_plan,
)
from zeckenum.cluster.random_tasks import (
    RandomFacts,
    random_facts_task,
    random_law_residues_task,
    random_win_residues_task,
)
from zeckenum.core.modular import check_mul_primes, mul_primes_exceeding
from zeckenum.core.ntt import lengths_from_values, root_of_order, transform_size
from zeckenum.counting.count import assemble_count
from zeckenum.counting.result import CountResult
from zeckenum.counting.route import best_points
from zeckenum.randomplay.exact import (
    LAW_PRIMES_PER_BLOCK,
    WIN_PRIMES_PER_BLOCK,
    RandomResult,
    assemble_random,
)
from zeckenum.rules.model import RuleSet


@dataclass(frozen=True)
class ShardKind:
    """Everything kind-specific about a sharded run of one rule set.

    name          the checkpoint's "kind" parameter ("count" or "random")
    label         progress bar text ("count", "random law", "random wins")
    facts_task    facts_task(ruleset, n, *facts_args) -> facts (the first sweep, on a worker)
    shard_task    shard_task(ruleset, n, *shard_args, block) -> (residues, word updates),
                  residues int64 of shape (primes in block, columns)
    parameters    the kind parameters a checkpoint must match, "kind" first (written
                  into its manifest)
    plan          plan(facts, prime_offset, workers, blocks, max_primes_per_block)
    columns       columns(facts): residues per prime of every shard
    assemble      assemble(facts, plan, residues of all blocks stacked, stats) -> result
    extra_stats   extra_stats(facts): the kind's own entries of the result's stats
    fact_keys     the facts a checkpoint's manifest must match exactly on resume (every
                  one that reaches the result or the plan; timings, memory sizes and the
                  worker's address are left out: they differ between machines)
    release       release(ruleset, n), run on every Dask worker when n is done (frees what
                  the workers keep of n), or None
    fallback      fallback(limit, in_flight) -> the kind to run instead when this kind's
                  plan does not fit `limit` bytes per worker with `in_flight` shards at
                  once (the windowed count falls back on evaluation points), or None
    checked       parameters a checkpoint must match that this kind's manifests do not
                  record (a missing one is read as `manifest.LEGACY_PARAMETERS` has it):
                  the windowed count's {"route": "windows"}, so that its manifests stay
                  as they were and a points checkpoint is still refused
    """

    name: str
    label: str
    ruleset: RuleSet
    facts_task: Callable[..., Any]
    facts_args: tuple
    shard_task: Callable[..., tuple[np.ndarray, int]]
    shard_args: tuple
    parameters: dict
    plan: Callable[..., AnyPlan]
    columns: Callable[[Any], int]
    assemble: Callable[[Any, Any, np.ndarray, dict], Any]
    extra_stats: Callable[[Any], dict]
    fact_keys: tuple[str, ...] = ()
    release: Callable[..., Any] | None = None
    fallback: Callable[[int, int], ShardKind | None] | None = None
    checked: dict = field(default_factory=dict)


# ----------------------------------------------------------------------------- count

COUNT_FACT_KEYS = ("rules", "rules_hash", "n", "states", "transitions", "terminals",
                   "shortest", "longest", "count_bits", "total_states")
"""Facts of a count a checkpoint must match: the game, the census and the size bound that
fixes the primes."""

RANDOM_FACT_KEYS = ("rules", "rules_hash", "n", "model", "players", "winners_only",
                    "denominator", "states", "transitions", "terminals", "shortest",
                    "longest", "max_indegree", "weight_bound", "columns")
"""Facts of random play a checkpoint must match: the kind parameters, the game, the
denominator M that fixes the primes and the bounds that admit them."""


def assemble_count_shards(
    facts: Facts, plan: ShardPlan, residues: np.ndarray, stats: dict
) -> CountResult:
    """`count.assemble_count` of the stacked residues of all blocks (primes + [check])."""
    return assemble_count(
        facts.rules, facts.rules_hash, facts.n, facts.states, facts.transitions,
        facts.shortest, facts.longest,
        list(plan.primes), plan.check_prime, residues, stats,
    )


def count_kind(ruleset: RuleSet) -> ShardKind:
    """The exact count: primes below 2**62 for the size bound, `spectrum_residues_task` shards.

    When its prime blocks do not fit a worker's memory it falls back on the count by
    evaluation points with the largest shards that fit (`points_kind` with a limit): the
    same rule as in-process (`counting.route`): the windowed sweep where it fits, else points.
    """
    return ShardKind(
        name="count", label="count", ruleset=ruleset,
        facts_task=count_facts_task, facts_args=(),
        shard_task=spectrum_residues_task, shard_args=(),
        parameters={"kind": "count"},
        plan=make_plan,
        columns=lambda facts: facts.longest + 1,
        assemble=assemble_count_shards,
        extra_stats=lambda facts: {"count_bits": facts.count_bits,
                                   "terminal_states": facts.terminals},
        fact_keys=COUNT_FACT_KEYS,
        release=release_task,
        checked={"route": "windows"},
        fallback=lambda limit, in_flight: points_kind(ruleset, None, limit, in_flight),
    )


def points_within(facts: PointsFacts, limit: int, in_flight: int) -> int:
    """The largest K (0 if none) whose `in_flight` shards of K points fit `limit` bytes
    beside the worker's first-sweep data (`plan.worker_bytes`' terms), evened out over the
    N points (`counting.route.best_points`)."""
    order = transform_size(facts.longest - facts.shortest)
    room = limit - facts.window_bytes - facts.shared_bytes
    return best_points(room, max(1, in_flight), 8 * facts.points_words_one, facts.fixed_bytes,
                       order)


def assemble_points_shards(
    facts: Facts, plan: PointsPlan, values: np.ndarray, stats: dict
) -> CountResult:
    """The count from the values of all shards of a points plan, stacked in block order:
    per prime its N values (every index covered exactly once, else ValueError), the
    inverse transform (`core.ntt.lengths_from_values`, which checks that no term lies
    outside the game's lengths), then `count.assemble_count` as in-process."""
    order = plan.order
    allp = plan.all_primes
    table = {q: np.zeros(order, dtype=np.int64) for q in allp}
    seen = {q: np.zeros(order, dtype=np.int64) for q in allp}
    at = 0
    for q, lo, hi in plan.blocks:
        table[q][lo:hi] = values[at : at + hi - lo]
        seen[q][lo:hi] += 1
        at += hi - lo
    if at != values.size or any(np.any(seen[q] != 1) for q in allp):
        raise ValueError("the shards of a points plan do not cover every point once")
    residues = np.zeros((len(allp), facts.longest + 1), dtype=np.int64)
    for row, q in enumerate(allp):
        residues[row, :] = lengths_from_values(table[q].tolist(), q, root_of_order(q, order),
                                               facts.shortest, facts.longest,
                                               "the length polynomial")
    stats = {k: v for k, v in stats.items() if k != "prime_blocks"}
    stats.update(method="points", points=order, points_per_shard=plan.per_shard,
                 shards=len(plan.blocks))
    return assemble_count(
        facts.rules, facts.rules_hash, facts.n, facts.states, facts.transitions,
        facts.shortest, facts.longest, list(plan.primes), plan.check_prime, residues, stats,
    )


def points_kind(ruleset: RuleSet, points_per_shard: int | None, limit: int | None = None,
                in_flight: int = 1) -> ShardKind:
    """The exact count by evaluation points: NTT primes below 2**50 for the size bound,
    `spectrum_points_task` shards of at most `points_per_shard` points (`points_plan`;
    None: all N, split further when there are fewer shards than workers, and with `limit`
    at most the largest K whose `in_flight` shards fit `limit` bytes per worker,
    `points_within`)."""
    per = check_points_per_shard(points_per_shard)

    def plan(facts: PointsFacts, prime_offset: int = 0, workers: int = 1,
             blocks: int | None = None, max_primes_per_block: int | None = None) -> PointsPlan:
        k = per
        if k is None and limit is not None:
            k = points_within(facts, limit, in_flight)
            unlimited = points_plan(facts, prime_offset, None, workers)
            k = min(k, unlimited.per_shard) if k >= 1 else 1  # 0: refused by the driver
        return points_plan(facts, prime_offset, k, workers)

    return ShardKind(
        name="count", label="count by points", ruleset=ruleset,
        facts_task=points_facts_task, facts_args=(),
        shard_task=spectrum_points_task, shard_args=(),
        parameters={"kind": "count", "route": "points"},
        plan=plan,
        columns=lambda facts: transform_size(facts.longest - facts.shortest),
        assemble=assemble_points_shards,
        extra_stats=lambda facts: {"count_bits": facts.count_bits,
                                   "terminal_states": facts.terminals},
        fact_keys=COUNT_FACT_KEYS,
        release=release_task,
    )


# ----------------------------------------------------------------------------- random play


def random_plan(
    facts: RandomFacts, prime_offset: int = 0, workers: int = 1, blocks: int | None = None,
    max_primes_per_block: int | None = None,
) -> ShardPlan:
    """The shard plan of exact random play: the primes below 2**50 whose product exceeds
    the denominator M (`core.modular.mul_primes_exceeding`) plus the check prime, refused outside
    the proved arithmetic ranges (`core.modular.check_mul_primes`), in equal blocks of
    about `randomplay.LAW_PRIMES_PER_BLOCK` (or `WIN_PRIMES_PER_BLOCK`) primes."""
    primes, check = mul_primes_exceeding(int(facts.denominator), prime_offset)
    check_mul_primes([*primes, check], facts.max_indegree, facts.weight_bound)
    per_block = WIN_PRIMES_PER_BLOCK if facts.winners_only else LAW_PRIMES_PER_BLOCK
    return plan_from_primes(facts, prime_offset, primes, check, workers, blocks,
                            max_primes_per_block, per_block)


def assemble_random_shards(
    facts: RandomFacts, plan: ShardPlan, residues: np.ndarray, stats: dict
) -> RandomResult:
    """`randomplay.assemble_random` of the stacked residues of all blocks."""
    return assemble_random(
        rules=facts.rules, rules_hash=facts.rules_hash, n=facts.n, players=facts.players,
        model=facts.model, winners_only=facts.winners_only,
        denominator=int(facts.denominator), states=facts.states,
        transitions=facts.transitions, primes=list(plan.primes),
        check_prime=plan.check_prime, residues=residues, stats=stats,
    )


def random_kind(ruleset: RuleSet, model: str, players: int, winners_only: bool) -> ShardKind:
    """Exact random play: the length law (`random_law_residues_task` shards) or, with
    `winners_only`, the win probabilities (`random_win_residues_task` shards)."""
    if winners_only:
        task, args, label = random_win_residues_task, (model, players), "random wins"
    else:
        task, args, label = random_law_residues_task, (model,), "random law"
    return ShardKind(
        name="random", label=label, ruleset=ruleset,
        facts_task=random_facts_task, facts_args=(model, players, winners_only),
        shard_task=task, shard_args=args,
        parameters={"kind": "random", "model": model, "players": players,
                    "winners_only": winners_only},
        plan=random_plan,
        columns=lambda facts: facts.columns,
        assemble=assemble_random_shards,
        extra_stats=lambda facts: {
            "terminal_states": facts.terminals,
            "denominator_bits": int(facts.denominator).bit_length(),
        },
        fact_keys=RANDOM_FACT_KEYS,
    )
