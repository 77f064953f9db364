"""Sharded runs: exact counts and exact random play in threads, on a local Dask cluster,
or on a remote one, with checkpoints and resume.

`run_count(n, workers=..., scheduler=..., checkpoint_dir=...)` gives the same
`CountResult` as `zeckenum.count(n)`, and `run_random(n, ...)` the same `RandomResult` as
`zeckenum.randomplay.exact.random_play(n, ...)` (equal field by field; only `stats` differ).
One driver, `shards_on_pool`, runs both; a `kinds.ShardKind` supplies what differs.  The
flow for one n:

1. First sweep: the kind's prepare task (`count_tasks.count_facts_task`,
   `random_tasks.random_facts_task`).  On a Dask cluster it is sent to every worker at
   once, so each worker builds its own first sweep in parallel and the first answer plans
   the run; in-process it runs once and the threads share it.
2. Plan: the kind's primes (a count: below 2**62 for its size bound; random play: below
   2**50 with a product above its denominator), plus the check prime, cut into equal
   blocks, a multiple of the workers (`plan.plan_from_primes`).
3. Shards: one shard task per block (`count_tasks.spectrum_residues_task`,
   `random_tasks.random_law_residues_task`, `random_tasks.random_win_residues_task`); each
   finished shard is written to the checkpoint (if any) as soon as it arrives.
4. The kind's assembly rebuilds the result by the CRT, checked against the check prime,
   with the same function as the in-process path (`count.assemble_count`,
   `randomplay.assemble_random`).

With a checkpoint directory (refused up front when it cannot be written) the first sweep
still runs, as for a fresh run; its facts and the plan derived from them are compared with
the manifest (`checkpoint.Stored.verify`) before any shard is reused, and only the
recomputed values are used.  Verified shards are reused and only the others are computed
(`stats["shards_reused"]`, `stats["shards_computed"]`); a directory of another kind, other
parameters, another rule file or any edited fact, prime or block is refused.
Ranges of n (`run_counts`) submit one task per (n, block); on a cluster the largest n go
first.  Placement is by loose hints only (`allow_other_workers`): a single n's prepare
tasks (one per worker) and its shards are dealt round-robin over the workers (left to the
scheduler, both prepare tasks queued on one worker and the shards piled up on the worker
that answered first: n = 150 on 2 workers took 5.1-5.4 s instead of 3.8 s); the shards of
an n of a range prefer the worker that swept it (measured 10-13% faster on n = 100..130
with 2 workers: that worker has the windows at hand).  The driver looks at the workers
every few seconds and resubmits without hint every unfinished task whose preferred worker
is gone, so no run waits on a dead worker (hinted tasks whose workers had all died were
never rescheduled by Dask, and the run hung).

The driver waits with a `backend.Watchdog` (`stall_timeout`, default
$ZECKENUM_STALL_TIMEOUT or 600 s): when the cluster has had no worker and finished no task
for that long, the run stops with `ClusterStalled` (exit 7); every shard that finished is
already in the checkpoint, whose manifest stays valid, so a rerun resumes.  However a run
ends (result, error, interrupt, stall), the driver asks the workers to release the first
sweeps of its n (best effort, `kind.release`).
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from zeckenum.cluster import checkpoint as ckpt
from zeckenum.cluster.backend import (
    WAIT_TIMEOUTS,
    DaskPool,
    Pool,
    ThreadPool,
    Watchdog,
    kept_note,
    open_pool,
    stall_seconds,
)
from zeckenum.cluster.kinds import ShardKind, count_kind, random_kind
from zeckenum.cluster.plan import ShardPlan, worker_bytes
from zeckenum.core.memory import available_bytes, refuse_if_over
from zeckenum.counting.count import check_n, refuse_count
from zeckenum.counting.result import CountResult
from zeckenum.errors import InputError
from zeckenum.randomplay.exact import RandomResult, refuse_random, validate
from zeckenum.rules.model import RuleSet, get_rules
from zeckenum.safeio import check_output_dir

log = logging.getLogger("zeckenum.cluster")


@dataclass
class _Job:
    """Book-keeping of one n while its shards run."""

    n: int
    facts: Any = None
    plan: ShardPlan | None = None
    cp: ckpt.Checkpoint | None = None
    stored: ckpt.Stored | None = None  # a manifest to verify against the first sweep
    residues: list = field(default_factory=list)
    updates: list = field(default_factory=list)
    reused: int = 0
    computed: int = 0
    rejected: int = 0
    t0: float = 0.0


def _wanted(kind: ShardKind, n: int, prime_offset: int) -> dict:
    """The parameters a checkpoint of this run must have been written for, kind first."""
    from zeckenum import __version__

    return {
        "kind": kind.name,
        "rules": kind.ruleset.name, "rules_hash": kind.ruleset.content_hash(), "n": n,
        "prime_offset": prime_offset, "version": __version__,
        **{k: v for k, v in kind.parameters.items() if k != "kind"},
    }


def _worker_limit(pool: Pool) -> int | None:
    """Memory one worker may use: the smallest memory limit of the cluster's workers
    (None: unknown or unlimited), or in-process what the machine has available."""
    if not isinstance(pool, DaskPool):
        return available_bytes()
    info = pool.client.scheduler_info(n_workers=-1)["workers"].values()
    limits = [int(w.get("memory_limit") or 0) for w in info]
    limits = [x for x in limits if x > 0]
    return min(limits) if limits else None


def shards_on_pool(
    kind: ShardKind,
    ns: Iterable[int],
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
) -> dict[int, Any]:
    """The results of every n in `ns` for one kind of run, with shards on `pool`; {n: result}.

    checkpoint_dir  one folder per run of one n; with several n, sub-folders n-<n>
    on_shard(n, i)  called after shard i of n is stored (and checkpointed)
    stall_timeout   seconds with no worker and no finished task before `ClusterStalled`
                    (None: $ZECKENUM_STALL_TIMEOUT, else 600)
    max_memory      bytes one worker may use (at most the workers' own limit)
    """
    stall = stall_seconds(stall_timeout)
    ns = sorted({check_n(n) for n in ns}, reverse=True)
    if prime_offset < 0:
        raise InputError(f"prime offset must be >= 0, got {prime_offset}")
    ruleset = kind.ruleset
    explicit = blocks is not None or max_primes_per_block is not None
    workers = pool.workers
    nworkers = max(1, len(workers))
    single = len(ns) == 1
    limit = _worker_limit(pool)
    if max_memory is not None:
        limit = int(max_memory) if limit is None else min(limit, int(max_memory))

    def folder(n: int) -> Path | None:
        if checkpoint_dir is None:
            return None
        return Path(checkpoint_dir) if single else Path(checkpoint_dir) / f"n-{n:05d}"

    for n in ns:  # an unwritable checkpoint folder is refused before any first sweep runs
        root = folder(n)
        if root is not None:
            check_output_dir(root, "checkpoint directory")

    bar = None
    if progress:
        from tqdm import tqdm

        label = f"{kind.label} n={ns[0]}" if single else f"{kind.label} n={ns[-1]}..{ns[0]}"
        bar = tqdm(total=0, unit="shard", desc=label, leave=True)

    jobs = {n: _Job(n=n, t0=time.perf_counter()) for n in ns}
    unreleased: list[int] = []  # n whose first sweep the workers may hold, in start order
    done = pool.completion()
    watch = Watchdog(pool, stall, kept_note(checkpoint_dir))
    tags: dict = {}  # future -> ("prepare", n) | ("shard", n, i), until it is done
    hints: dict = {}  # unfinished hinted shard future -> its preferred worker
    hinted = isinstance(pool, DaskPool) and not single
    results: dict[int, Any] = {}

    def plan_for(facts: Any) -> ShardPlan:
        return kind.plan(facts, prime_offset, nworkers, blocks, max_primes_per_block)

    def start_shards(job: _Job) -> None:
        assert job.plan is not None and job.facts is not None
        nb = len(job.plan.blocks)
        if bar is not None:
            bar.total += nb
            bar.update(job.reused)
        # Placement (module docstring): a range's shards prefer the worker that swept
        # their n; a single n's shards are dealt round-robin over the workers (left to
        # the scheduler, they piled up on the worker that answered first while the other
        # was still sweeping).  Both are loose hints that `unhint_orphans` withdraws when
        # their worker is gone.
        dask_workers = [w for w in workers if w] if isinstance(pool, DaskPool) else []
        todo = [i for i in range(nb) if job.residues[i] is None]
        for k, i in enumerate(todo):
            if hinted and job.facts.where:
                prefer = job.facts.where
            elif single and dask_workers:
                prefer = dask_workers[k % len(dask_workers)]
            else:
                prefer = None
            submit_shard(job.n, i, prefer)
        if all(r is not None for r in job.residues):
            finish(job)

    def submit_shard(n: int, i: int, prefer: str | None) -> None:
        fut = pool.submit(kind.shard_task, ruleset, n, *kind.shard_args,
                          jobs[n].plan.blocks[i], priority=1, prefer=prefer)
        tags[fut] = ("shard", n, i)
        if prefer is not None:
            hints[fut] = prefer
        done.add(fut)

    def submit_prepare(n: int, prefer: str | None) -> None:
        fut = pool.submit(kind.facts_task, ruleset, n, *kind.facts_args, prefer=prefer)
        tags[fut] = ("prepare", n)
        if prefer is not None:
            hints[fut] = prefer
        done.add(fut)

    def unhint_orphans() -> None:
        """Resubmit without hint every unfinished task whose preferred worker is gone."""
        try:
            alive = set(pool.workers)
        except Exception:  # noqa: BLE001 - the scheduler cannot be asked: look next time
            return
        for fut, prefer in list(hints.items()):
            if fut.done():
                continue
            if prefer not in alive:
                del hints[fut]
                tag = tags.pop(fut)
                fut.cancel()  # its callback still arrives; the loop skips untagged futures
                if tag[0] == "prepare":
                    submit_prepare(tag[1], None)
                else:
                    submit_shard(tag[1], tag[2], None)

    def finish(job: _Job) -> None:
        assert job.plan is not None and job.facts is not None
        stats = {
            "seconds_total": round(time.perf_counter() - job.t0, 3),
            "seconds_windows": job.facts.seconds_windows,
            "word_updates": int(sum(job.updates)),
            "backend": pool.kind,
            "workers": nworkers,
            "prime_blocks": len(job.plan.blocks),
            "shards_total": len(job.plan.blocks),
            "shards_computed": job.computed,
            "shards_reused": job.reused,
            "shards_rejected": job.rejected,
            **kind.extra_stats(job.facts),
        }
        residues = np.concatenate(job.residues, axis=0)
        results[job.n] = kind.assemble(job.facts, job.plan, residues, stats)
        release(job.n)

    def release(n: int) -> None:
        """Ask every worker to drop its first sweep of n (best effort: a leftover shared
        sweep is only space, and the next run of n replaces it as a dead run's)."""
        if n in unreleased:
            unreleased.remove(n)
            if kind.release is not None and isinstance(pool, DaskPool):
                pool.run_everywhere(kind.release, ruleset, n)

    def adopt(job: _Job, facts: Any) -> None:
        if job.stored is not None:  # resume: the manifest is checked against these facts
            resume(job, job.stored, facts)
            return
        job.facts = facts
        job.plan = plan_for(facts)
        if limit is not None:
            threads = nworkers if isinstance(pool, ThreadPool) else 1
            refuse_if_over(worker_bytes(facts, job.plan, threads), limit,
                           f"the shards of n={job.n} in flight on one worker")
        job.residues = [None] * len(job.plan.blocks)
        job.updates = [0] * len(job.plan.blocks)
        root = folder(job.n)
        if root is not None:
            job.cp = ckpt.create(root, job.plan, facts.to_dict(), kind.parameters,
                                 kind.columns(facts), ruleset)
        start_shards(job)

    def resume(job: _Job, stored: ckpt.Stored, facts: Any) -> None:
        """Resume from a manifest: its facts, primes, blocks and columns must equal the
        ones recomputed from this run's own first sweep (`facts`, on a worker on a
        cluster), before any shard is reused; only the recomputed values are used."""
        fresh = plan_for(facts)
        cp = stored.verify(kind.parameters, facts.to_dict(), kind.fact_keys, fresh,
                           kind.columns(facts), ruleset)
        if explicit and fresh != cp.plan:
            raise ckpt.CheckpointRefused(
                f"checkpoint {stored.root} was written for another shard plan "
                f"({len(cp.plan.blocks)} blocks of primes, not {len(fresh.blocks)}); "
                "use another directory"
            )
        if limit is not None:
            threads = nworkers if isinstance(pool, ThreadPool) else 1
            refuse_if_over(worker_bytes(facts, cp.plan, threads), limit,
                           f"the shards of n={job.n} in flight on one worker")
        job.facts, job.plan, job.cp = facts, cp.plan, cp
        nb = len(cp.plan.blocks)
        job.residues, job.updates = [None] * nb, [0] * nb
        for i in range(nb):
            had = bool(cp.shards[i].get("sha256"))
            r = cp.load_shard(i)
            if r is not None:
                job.residues[i] = r
                job.updates[i] = int(cp.shards[i].get("word_updates") or 0)
                job.reused += 1
            elif had:
                job.rejected += 1
        cp.save_manifest()
        start_shards(job)

    try:
        for n in ns:
            job = jobs[n]
            root = folder(n)
            if root is not None:  # checked now; verified when the first sweep answers
                job.stored = ckpt.open_existing(root, _wanted(kind, n, prime_offset), ruleset)
            unreleased.append(n)
            # a single n on a cluster: one prepare task per worker, each with a loose hint
            # for its worker (left alone, the scheduler queued both on one worker and the
            # other sat idle: n = 150 on 2 workers took 5.1-5.4 s instead of 3.8 s), so
            # the workers sweep (or map their host's sweep) in parallel and the first
            # answer plans the run (and, on resume, is what the manifest is checked
            # against); a hint whose worker is gone is withdrawn by `unhint_orphans`
            targets = [w for w in workers if w] if (single and isinstance(pool, DaskPool)) else []
            for w in targets or [None]:
                submit_prepare(n, w)

        looked = time.monotonic()
        while done.pending:
            fut = done.next(watch.period)
            if hints and time.monotonic() - looked >= watch.period:
                unhint_orphans()
                looked = time.monotonic()
            if fut is None:  # nothing finished for a while: is anybody still working?
                watch.idle()
                continue
            prefer = hints.pop(fut, None)
            if fut not in tags:  # a shard withdrawn and resubmitted by `unhint_orphans`
                continue
            try:
                value = fut.result(timeout=watch.period)
            except WAIT_TIMEOUTS:
                # reported finished, but its result died with its worker and the task runs
                # again: wait for it like any unfinished task (with its hint, so that
                # `unhint_orphans` resubmits it if that worker is gone too)
                if prefer is not None:
                    hints[fut] = prefer
                done.add(fut)
                continue
            watch.progress()
            tag = tags.pop(fut)
            if tag[0] == "prepare":  # the first answer plans; the others only warmed caches
                job = jobs[tag[1]]
                if job.facts is None:
                    adopt(job, value)
                continue
            _, n, i = tag
            job = jobs[n]
            residues, updates = value
            job.residues[i] = np.asarray(residues, dtype=np.int64)
            job.updates[i] = int(updates)
            job.computed += 1
            if job.cp is not None:
                job.cp.save_shard(i, job.residues[i], int(updates))
            if bar is not None:
                bar.update(1)
            if on_shard is not None:
                on_shard(n, i)
            if all(r is not None for r in job.residues):
                finish(job)
    finally:
        if bar is not None:
            bar.close()
        for fut in tags:
            if hasattr(fut, "release"):
                fut.release()
            else:
                fut.cancel()
        if unreleased:  # a failed, interrupted or stalled run releases too, in one call
            left, unreleased[:] = list(unreleased), []
            if kind.release is not None and isinstance(pool, DaskPool):
                pool.run_everywhere(release_many, kind.release, ruleset, left)
    return results


def release_many(release: Callable[[Any, int], Any], ruleset: RuleSet, ns: list[int]) -> None:
    """Run `release(ruleset, n)` for every n (on a worker, when a run ends early)."""
    for n in ns:
        release(ruleset, n)


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
) -> dict[int, CountResult]:
    """Exact counts of every n in `ns` with shards on `pool`; {n: CountResult}.

    checkpoint_dir  one folder per run of one n; with several n, sub-folders n-<n>
    on_shard(n, i)  called after shard i of n is stored (and checkpointed)
    stall_timeout   see `shards_on_pool`
    """
    return shards_on_pool(
        count_kind(get_rules(rules)), ns, pool, prime_offset=prime_offset,
        checkpoint_dir=checkpoint_dir, blocks=blocks,
        max_primes_per_block=max_primes_per_block, progress=progress, on_shard=on_shard,
        stall_timeout=stall_timeout,
        max_memory=max_memory,
    )


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
    stall_timeout   see `shards_on_pool`
    """
    validate(n, players, model)
    kind = random_kind(get_rules(rules), model, players, bool(winners_only))
    return shards_on_pool(
        kind, [n], pool, prime_offset=prime_offset, checkpoint_dir=checkpoint_dir,
        blocks=blocks, max_primes_per_block=max_primes_per_block, progress=progress,
        on_shard=on_shard, stall_timeout=stall_timeout, max_memory=max_memory,
    )[n]


def run_counts(
    ns: Iterable[int],
    rules: str | RuleSet = "standard",
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    checkpoint_dir: str | Path | None = None,
    progress: bool = False,
    prime_offset: int = 0,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    threads: int | None = None,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
) -> dict[int, CountResult]:
    """Exact counts for every n in `ns` on the chosen backend ({n: CountResult}).

    Backends: in-process threads (default), `workers=K` (a LocalCluster started and closed
    here), `scheduler=ADDRESS` (an existing cluster).  In-process, one n runs at a time
    (its blocks in threads); on a cluster, all (n, block) tasks are in flight at once.
    stall_timeout: seconds with no worker and no finished task before `ClusterStalled`
    (exit 7; None: $ZECKENUM_STALL_TIMEOUT, else 600).
    """
    ns = list(ns)
    if checkpoint_dir is not None:  # refused before a cluster starts
        check_output_dir(checkpoint_dir, "checkpoint directory")
    stall = stall_seconds(stall_timeout)
    opts = dict(prime_offset=prime_offset, checkpoint_dir=checkpoint_dir, blocks=blocks,
                max_primes_per_block=max_primes_per_block, progress=progress, on_shard=on_shard,
                stall_timeout=stall, max_memory=max_memory)
    with open_pool(workers, scheduler, threads, warm=("count",)) as pool:
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
    scheduler: str | None = None,
    checkpoint_dir: str | Path | None = None,
    progress: bool = False,
    prime_offset: int = 0,
    blocks: int | None = None,
    max_primes_per_block: int | None = None,
    threads: int | None = None,
    on_shard: Callable[[int, int], None] | None = None,
    stall_timeout: float | None = None,
    max_memory: int | None = None,
) -> CountResult:
    """`zeckenum.count(n)` computed shard by shard, optionally on Dask and checkpointed.

    Equal to `count(n, rules, prime_offset=prime_offset)` (stats aside).  stats adds
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
        max_memory=max_memory,
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
    scheduler: str | None = None,
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
    validate(n, players, model)
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


__all__ = [
    "count_on_pool", "random_on_pool", "run_count",
    "run_counts", "run_random", "shards_on_pool",
]
