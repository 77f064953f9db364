"""Sharded runs: exact counts and exact random play in threads, on a local Dask cluster,
or on a remote one, with checkpoints and resume.

`run_count(n, workers=..., scheduler=..., checkpoint_dir=...)` gives the same
`CountResult` as `zeckenum.count(n)`, and `run_random(n, ...)` the same `RandomResult` as
`zeckenum.randomplay.exact.random_play(n, ...)` (equal field by field; only `stats` differ).
These functions check their arguments and open the backend (`backend.open_pool`); one
driver, `driver.ShardDriver`, runs both kinds, a `kinds.ShardKind` supplying what differs
(the flow of one n, placement, resume and the watchdog are described in `driver`).
Ranges of n (`run_counts`) submit one task per (n, block); on a cluster the largest n go
first.  With `points_per_shard=K` a count runs by evaluation points (`kinds.points_kind`):
one task per (n, prime, block of at most K points), the same result as
`zeckenum.count(n, points_per_shard=K)` in-process.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from pathlib import Path

from zeckenum.cluster.backend import Pool, ThreadPool, open_pool, stall_seconds
from zeckenum.cluster.batch import BatchSpec
from zeckenum.cluster.driver import ShardDriver
from zeckenum.cluster.kinds import ShardKind, count_kind, points_kind, random_kind
from zeckenum.cluster.plan import check_points_per_shard
from zeckenum.core.checks import check_n, check_random_args
from zeckenum.counting.count import refuse_count
from zeckenum.counting.result import CountResult
from zeckenum.errors import InputError
from zeckenum.randomplay.exact import RandomResult, refuse_random
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet
from zeckenum.safeio import check_output_dir


def count_on_pool(
    ns: Iterable[int],
    rules: str | RuleSet,
    pool: Pool,
    *,
    prime_offset: int = 0,
    checkpoint_dir: str | Path | None = None,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    progress: bool = False,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
    points_per_shard: int | None = None,
) -> dict[int, CountResult]:
    """Exact counts of every n in `ns` with shards on `pool`; {n: CountResult}.

    checkpoint_dir    one folder per run of one n; with several n, sub-folders n-<n>
    on_shard(n, i)    called after shard i of n is stored (and checkpointed)
    stall_timeout     see `driver.ShardDriver`
    points_per_shard  count by evaluation points, shards of at most this many points
                      (`count_kind_for`)
    """
    return ShardDriver(
        count_kind_for(get_rules(rules), points_per_shard, blocks, max_primes_per_block),
        ns, pool, prime_offset=prime_offset,
        checkpoint_dir=checkpoint_dir, blocks=blocks,
        max_primes_per_block=max_primes_per_block, progress=progress, on_shard=on_shard,
        stall_timeout=stall_timeout,
        max_memory=max_memory,
    ).run()


def count_kind_for(
    ruleset: RuleSet, points_per_shard: int | None, blocks: int | None = None,
    max_primes_per_block: int | None = None,
) -> ShardKind:
    """The windowed count (prime blocks), or with `points_per_shard` the count by
    evaluation points; InputError for a bad `points_per_shard` or one given with a prime
    blocking (`blocks`, `max_primes_per_block`), which does not apply to points."""
    if check_points_per_shard(points_per_shard) is None:
        return count_kind(ruleset)
    if blocks is not None or max_primes_per_block is not None:
        raise InputError("points per shard cut a count into (prime, block of points) "
                         "shards: blocks and max primes per block do not apply")
    return points_kind(ruleset, points_per_shard)


def random_on_pool(
    n: int,
    rules: str | RuleSet,
    pool: Pool,
    players: int = 2,
    model: str = "moves",
    *,
    winners_only: bool = False,
    prime_offset: int = 0,
    checkpoint_dir: str | Path | None = None,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    progress: bool = False,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
) -> RandomResult:
    """Exact random play at n with shards on `pool` (equal to `random_play`, stats aside).

    on_shard(n, i)  called after shard i is stored (and checkpointed)
    stall_timeout   see `driver.ShardDriver`
    """
    check_random_args(n, players, model)
    kind = random_kind(get_rules(rules), model, players, bool(winners_only))
    return ShardDriver(
        kind, [n], pool, prime_offset=prime_offset, checkpoint_dir=checkpoint_dir,
        blocks=blocks, max_primes_per_block=max_primes_per_block, progress=progress,
        on_shard=on_shard, stall_timeout=stall_timeout, max_memory=max_memory,
    ).run()[n]


def run_counts(
    ns: Iterable[int],
    rules: str | RuleSet = "standard",
    *,
    workers: int | None = None,
    scheduler: str | BatchSpec | None = None,
    checkpoint_dir: str | Path | None = None,
    progress: bool = False,
    prime_offset: int = 0,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    threads: int | None = None,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
    points_per_shard: int | None = None,
) -> dict[int, CountResult]:
    """Exact counts for every n in `ns` on the chosen backend ({n: CountResult}).

    Backends: in-process threads (default), `workers=K` (a LocalCluster started and closed
    here), `scheduler=ADDRESS` (an existing cluster), `scheduler=BatchSpec(...)` (workers
    as batch jobs submitted and cancelled here, `batch`).  In-process, one n runs at a time
    (its blocks in threads); on a cluster, all (n, block) tasks are in flight at once.
    stall_timeout: seconds with no worker and no finished task before `ClusterStalled`
    (exit 7; None: $ZECKENUM_STALL_TIMEOUT, else 600).
    points_per_shard: count by evaluation points (`count_kind_for`), several n alike.
    """
    ns = list(ns)
    count_kind_for(get_rules(rules), points_per_shard, blocks, max_primes_per_block)
    if checkpoint_dir is not None:  # refused before a cluster starts
        check_output_dir(checkpoint_dir, "checkpoint directory")
    stall = stall_seconds(stall_timeout)
    opts = dict(prime_offset=prime_offset, checkpoint_dir=checkpoint_dir, blocks=blocks,
                max_primes_per_block=max_primes_per_block, progress=progress, on_shard=on_shard,
                stall_timeout=stall, max_memory=max_memory, points_per_shard=points_per_shard)
    warm = ("count",) if points_per_shard is None else ("count", "points")
    with open_pool(workers, scheduler, threads, warm=warm) as pool:
        if isinstance(pool, ThreadPool) and len(ns) > 1:
            out: dict[int, CountResult] = {}
            for n in sorted(set(ns)):
                sub = None if checkpoint_dir is None else Path(checkpoint_dir) / f"n-{n:05d}"
                out.update(count_on_pool([n], rules, pool, **{**opts, "checkpoint_dir": sub}))
            return out
        return count_on_pool(ns, rules, pool, **opts)


def run_count(
    n: int,
    rules: str | RuleSet = "standard",
    *,
    workers: int | None = None,
    scheduler: str | BatchSpec | None = None,
    checkpoint_dir: str | Path | None = None,
    progress: bool = False,
    prime_offset: int = 0,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    threads: int | None = None,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
    points_per_shard: int | None = None,
) -> CountResult:
    """`zeckenum.count(n)` computed shard by shard, optionally on Dask and checkpointed.

    Equal to `count(n, rules, prime_offset=prime_offset, points_per_shard=...)` (stats
    aside; with `points_per_shard`, by evaluation points: other primes).  stats adds
    shards_total / shards_computed / shards_reused / shards_rejected and the backend.
    stall_timeout: as `run_counts`.
    `max_memory`: the first sweep's forecast is refused here, before any worker starts
    (`count.refuse_count`; default limit: what this machine has available, not applied
    to a remote scheduler's workers, whose own limits the driver checks).
    """
    n = check_n(n)
    if max_memory is not None or scheduler is None:
        refuse_count(n, rules, max_memory=max_memory)
    res = run_counts(
        [n], rules, workers=workers, scheduler=scheduler, checkpoint_dir=checkpoint_dir,
        progress=progress, prime_offset=prime_offset, blocks=blocks,
        max_primes_per_block=max_primes_per_block, threads=threads, on_shard=on_shard,
        stall_timeout=stall_timeout,
        max_memory=max_memory, points_per_shard=points_per_shard,
    )
    return res[n]


def run_random(
    n: int,
    rules: str | RuleSet = "standard",
    players: int = 2,
    model: str = "moves",
    *,
    winners_only: bool = False,
    workers: int | None = None,
    scheduler: str | BatchSpec | None = None,
    checkpoint_dir: str | Path | None = None,
    progress: bool = False,
    prime_offset: int = 0,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    threads: int | None = None,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
) -> RandomResult:
    """`randomplay.random_play(n, ...)` computed shard by shard, optionally on Dask and
    checkpointed.

    Equal to `random_play(n, rules, players, model, winners_only=winners_only,
    prime_offset=prime_offset)` (stats aside).  Backends as `run_counts`: in-process threads
    (default), `workers=K` (a LocalCluster started and closed here), `scheduler=ADDRESS`.
    stats: shards_total / shards_computed / shards_reused / shards_rejected, the backend,
    word updates, terminal states and the denominator's bits.  stall_timeout: as
    `run_counts`.
    """
    check_random_args(n, players, model)
    if prime_offset < 0:  # refused before a cluster starts
        raise InputError(f"prime offset must be >= 0, got {prime_offset}")
    # the first sweep's forecast, before any worker starts or any folder is made
    # (`max_memory`, default: what this machine has available, not applied to a remote
    # scheduler's workers)
    if max_memory is not None or scheduler is None:
        refuse_random(n, rules, players, model, max_memory=max_memory)
    if checkpoint_dir is not None:
        check_output_dir(checkpoint_dir, "checkpoint directory")
    stall = stall_seconds(stall_timeout)
    with open_pool(workers, scheduler, threads, warm=("random",)) as pool:
        return random_on_pool(
            n, rules, pool, players, model, winners_only=winners_only,
            prime_offset=prime_offset, checkpoint_dir=checkpoint_dir, blocks=blocks,
            max_primes_per_block=max_primes_per_block, progress=progress, on_shard=on_shard,
            stall_timeout=stall,
            max_memory=max_memory,
        )


__all__ = ["count_kind_for", "count_on_pool", "random_on_pool", "run_count", "run_counts",
           "run_random"]
