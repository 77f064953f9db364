"""The driver of sharded runs: `ShardDriver(kind, ns, pool, ...).run() -> {n: result}`.

One driver runs every kind of sharded run (a count, random play); a `kinds.ShardKind`
supplies what differs.  The flow for one n:

1. First sweep: the kind's facts task (`count_tasks.count_facts_task`,
   `random_tasks.random_facts_task`).  On a Dask cluster it is sent to every worker at
   once, so each worker builds its own first sweep in parallel and the first answer plans
   the run (`adopt`); in-process it runs once and the threads share it.
2. Plan: the kind's primes (a count: below 2**62 for its size bound; random play: below
   2**50 with a product above its denominator), plus the check prime, cut into equal
   blocks, a multiple of the workers (`plan.plan_from_primes`).
3. Shards: one shard task per block (`count_tasks.spectrum_residues_task`,
   `random_tasks.random_law_residues_task`, `random_tasks.random_win_residues_task`; a
   count by evaluation points: one per (prime, block of points),
   `count_tasks.spectrum_points_task`, planned by `plan.points_plan`); each
   finished shard is written to the checkpoint (if any) as soon as it arrives (`collect`,
   `store_shard`).
4. The kind's assembly rebuilds the result by the CRT, checked against the check prime,
   with the same function as the in-process path (`count.assemble_count`,
   `randomplay.assemble_random`) (`finish`).

With a checkpoint directory (refused up front when it cannot be written) the first sweep
still runs, as for a fresh run; its facts and the plan derived from them are compared with
the manifest (`checkpoint.Stored.verify`, in `resume`) before any shard is reused, and
only the recomputed values are used.  Verified shards are reused and only the others are
computed (`stats["shards_reused"]`, `stats["shards_computed"]`); a directory of another
kind, other parameters, another rule file or any edited fact, prime or block is refused.

Placement is by loose hints only (`allow_other_workers`): a single n's facts tasks (one
per worker) and its shards are dealt round-robin over the workers (left to the scheduler,
both first-sweep tasks queued on one worker and the shards piled up on the worker that
answered first: n = 150 on 2 workers took 5.1-5.4 s instead of 3.8 s); the shards of an n
of a range prefer the worker that swept it (measured 10-13% faster on n = 100..130 with 2
workers: that worker has the windows at hand).  Every few seconds the driver looks at the
workers and resubmits without hint every unfinished task whose preferred worker is gone
(`resubmit_orphans`), so no run waits on a dead worker (hinted tasks whose workers had all
died were never rescheduled by Dask, and the run hung).

The driver waits with a `backend.Watchdog` (`wait`): when the cluster has had no worker
and finished no task for the stall timeout, the run stops with `ClusterStalled` (exit 7);
every shard that finished is already in the checkpoint, whose manifest stays valid, so a
rerun resumes.  However a run ends (result, error, interrupt, stall), the driver asks the
workers to release the first sweeps of its n (best effort, `kind.release`; `close`).
"""

from __future__ import annotations

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
    stall_seconds,
)
from zeckenum.cluster.kinds import ShardKind, points_kind
from zeckenum.cluster.plan import AnyPlan, worker_bytes
from zeckenum.core.memory import available_bytes, refuse_if_over
from zeckenum.counting.count import check_n
from zeckenum.errors import InputError
from zeckenum.rules.model import RuleSet
from zeckenum.safeio import check_output_dir


@dataclass
class _Job:
    """Book-keeping of one n while its shards run."""

    n: int
    kind: ShardKind | None = None  # None: the driver's kind; else a resumed or fallback one
    fell_back: bool = False  # planned by the fallback: only its facts tasks (tagged) count
    facts: Any = None
    plan: AnyPlan | None = None
    cp: ckpt.Checkpoint | None = None
    stored: ckpt.Stored | None = None  # a manifest to verify against the first sweep
    residues: list = field(default_factory=list)
    updates: list = field(default_factory=list)
    reused: int = 0
    computed: int = 0
    rejected: int = 0
    t0: float = 0.0


def worker_limit(pool: Pool) -> int | None:
    """Memory one worker may use: the smallest memory limit of the cluster's workers
    (None: unknown or unlimited), or in-process what the machine has available."""
    if not isinstance(pool, DaskPool):
        return available_bytes()
    info = pool.client.scheduler_info(n_workers=-1)["workers"].values()
    limits = [int(w.get("memory_limit") or 0) for w in info]
    limits = [x for x in limits if x > 0]
    return min(limits) if limits else None


def wanted_parameters(kind: ShardKind, n: int, prime_offset: int) -> dict:
    """The parameters a checkpoint of this run must have been written for, kind first
    (then the kind's `checked` ones, e.g. a count's route)."""
    from zeckenum import __version__

    return {
        "kind": kind.name,
        "rules": kind.ruleset.name, "rules_hash": kind.ruleset.content_hash(), "n": n,
        "prime_offset": prime_offset, "version": __version__,
        **kind.checked,
        **{k: v for k, v in kind.parameters.items() if k != "kind"},
    }


def release_many(release: Callable[[Any, int], Any], ruleset: RuleSet, ns: list[int]) -> None:
    """Run `release(ruleset, n)` for every n (on a worker, when a run ends early)."""
    for n in ns:
        release(ruleset, n)


class ShardDriver:
    """The results of every n of one kind of run, with shards on `pool` (module docstring).

    checkpoint_dir  one folder per run of one n; with several n, sub-folders n-<n>
    on_shard(n, i)  called after shard i of n is stored (and checkpointed)
    stall_timeout   seconds with no worker and no finished task before `ClusterStalled`
                    (None: $ZECKENUM_STALL_TIMEOUT, else 600)
    max_memory      bytes one worker may use (at most the workers' own limit)

    Invariants while `run` waits: `tags` maps every submitted, unfinished future the
    driver still wants to ("facts", n) or ("shard", n, i) (a future withdrawn by
    `resubmit_orphans` is untagged and its late answer ignored); `hints` maps each
    unfinished hinted future to its preferred worker; `unreleased` lists the n whose first
    sweeps the workers may still hold.  The arguments are checked when the driver is made,
    before anything runs (bad ones: `InputError`).
    """

    def __init__(
        self,
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
    ) -> None:
        self.stall = stall_seconds(stall_timeout)
        self.ns = sorted({check_n(n) for n in ns}, reverse=True)
        if prime_offset < 0:
            raise InputError(f"prime offset must be >= 0, got {prime_offset}")
        self.kind, self.pool, self.ruleset = kind, pool, kind.ruleset
        self.prime_offset = prime_offset
        self.checkpoint_dir = checkpoint_dir
        self.blocks, self.max_primes_per_block = blocks, max_primes_per_block
        self.explicit = blocks is not None or max_primes_per_block is not None
        self.progress, self.on_shard = progress, on_shard
        self.workers = pool.workers
        self.nworkers = max(1, len(self.workers))
        self.single = len(self.ns) == 1
        self.limit = worker_limit(pool)
        if max_memory is not None:
            self.limit = int(max_memory) if self.limit is None else min(self.limit,
                                                                        int(max_memory))
        self.hinted = isinstance(pool, DaskPool) and not self.single
        self.bar: Any = None
        self.jobs: dict[int, _Job] = {}
        self.unreleased: list[int] = []
        self.done = pool.completion()
        self.watch: Watchdog | None = None
        self.tags: dict = {}
        self.hints: dict = {}
        self.results: dict[int, Any] = {}

    # ------------------------------------------------------------------------ the run

    def run(self) -> dict[int, Any]:
        """{n: result} of every n; everything submitted is released however it ends."""
        for n in self.ns:  # an unwritable checkpoint folder is refused before any sweep
            root = self.folder(n)
            if root is not None:
                check_output_dir(root, "checkpoint directory")
        if self.progress:
            from tqdm import tqdm

            ns = self.ns
            label = (f"{self.kind.label} n={ns[0]}" if self.single
                     else f"{self.kind.label} n={ns[-1]}..{ns[0]}")
            self.bar = tqdm(total=0, unit="shard", desc=label, leave=True)
        self.jobs = {n: _Job(n=n, t0=time.perf_counter()) for n in self.ns}
        self.watch = Watchdog(self.pool, self.stall, kept_note(self.checkpoint_dir))
        try:
            for n in self.ns:
                self.start(n)
            self.wait()
        finally:
            self.close()
        return self.results

    def folder(self, n: int) -> Path | None:
        """The checkpoint folder of n (None without checkpoints)."""
        if self.checkpoint_dir is None:
            return None
        root = Path(self.checkpoint_dir)
        return root if self.single else root / f"n-{n:05d}"

    def start(self, n: int) -> None:
        """Open n's checkpoint (checked now, verified when the first sweep answers) and
        submit its first sweep: on a cluster for a single n, one facts task per worker,
        each with a loose hint for its worker (left alone, the scheduler queued both on one
        worker and the other sat idle), so the workers sweep (or map their host's sweep) in
        parallel and the first answer plans the run."""
        job = self.jobs[n]
        root = self.folder(n)
        if root is not None:
            if (self.kind.fallback is not None and self.blocks is None
                    and self.max_primes_per_block is None):
                # a checkpoint of the fallback (shape left to the planner) resumes as such
                per = ckpt.stored_points_shape(root)
                if per is not None:
                    job.kind = points_kind(self.ruleset, per)
            job.stored = ckpt.open_existing(
                root, wanted_parameters(self.kind_of(job), n, self.prime_offset),
                self.ruleset)
        self.unreleased.append(n)
        targets = ([w for w in self.workers if w]
                   if (self.single and isinstance(self.pool, DaskPool)) else [])
        for w in targets or [None]:
            self.submit(("facts", n), w)

    def submit(self, tag: tuple, prefer: str | None) -> None:
        """Submit the task of `tag`: ("facts", n) the kind's facts task (("facts", n,
        "fallback"): the fallback kind's, `falls_back`), ("shard", n, i)
        the shard task of block i; `prefer` a loose hint (or None)."""
        kind = self.kind_of(self.jobs[tag[1]])
        if tag[0] == "facts":
            fut = self.pool.submit(kind.facts_task, self.ruleset, tag[1], *kind.facts_args,
                                   prefer=prefer)
        else:
            _, n, i = tag
            fut = self.pool.submit(kind.shard_task, self.ruleset, n, *kind.shard_args,
                                   self.jobs[n].plan.shard_input(i), priority=1,
                                   prefer=prefer)
        self.tags[fut] = tag
        if prefer is not None:
            self.hints[fut] = prefer
        self.done.add(fut)

    def wait(self) -> None:
        """Collect every finished task, resubmitting orphans every watchdog period and
        stopping with `ClusterStalled` when the cluster stalls (`backend.Watchdog`)."""
        watch = self.watch
        assert watch is not None
        looked = noted = time.monotonic()
        while self.done.pending:
            fut = self.done.next(watch.period)
            if self.hints and time.monotonic() - looked >= watch.period:
                self.resubmit_orphans()
                looked = time.monotonic()
            if time.monotonic() - noted >= watch.period:
                # batch jobs: running / pending shown, lost ones replaced (`state_note`)
                note = self.pool.state_note()
                if note and self.bar is not None:
                    self.bar.set_postfix_str(note)
                noted = time.monotonic()
            if fut is None:  # nothing finished for a while: is anybody still working?
                watch.idle()
                continue
            self.collect(fut)

    def collect(self, fut: Any) -> None:
        """Take one finished future: plan from the first facts answer of its n, or store
        its shard."""
        watch = self.watch
        assert watch is not None
        prefer = self.hints.pop(fut, None)
        if fut not in self.tags:  # a task withdrawn and resubmitted by `resubmit_orphans`
            return
        try:
            value = fut.result(timeout=watch.period)
        except WAIT_TIMEOUTS:
            # reported finished, but its result died with its worker and the task runs
            # again: wait for it like any unfinished task (with its hint, so that
            # `resubmit_orphans` resubmits it if that worker is gone too)
            if prefer is not None:
                self.hints[fut] = prefer
            self.done.add(fut)
            return
        watch.progress()
        tag = self.tags.pop(fut)
        if tag[0] == "facts":  # the first answer plans; the others only warmed caches
            job = self.jobs[tag[1]]
            if job.facts is None and (len(tag) == 3) == job.fell_back:
                self.adopt(job, value)
            return
        _, n, i = tag
        self.store_shard(self.jobs[n], i, value)

    def resubmit_orphans(self) -> None:
        """Resubmit without hint every unfinished task whose preferred worker is gone."""
        try:
            alive = set(self.pool.workers)
        except Exception:  # noqa: BLE001 - the scheduler cannot be asked: look next time
            return
        for fut, prefer in list(self.hints.items()):
            if fut.done():
                continue
            if prefer not in alive:
                del self.hints[fut]
                tag = self.tags.pop(fut)
                fut.cancel()  # its callback still arrives; `collect` skips untagged futures
                self.submit(tag, None)

    # --------------------------------------------------------------- plan and checkpoint

    def kind_of(self, job: _Job) -> ShardKind:
        """The kind n runs as: the driver's, or the one it fell back on (`adopt`)."""
        return job.kind if job.kind is not None else self.kind

    def plan_for(self, job: _Job, facts: Any) -> AnyPlan:
        return self.kind_of(job).plan(facts, self.prime_offset, self.nworkers, self.blocks,
                                      self.max_primes_per_block)

    def in_flight(self) -> int:
        """Shards one worker runs at once: every thread of the in-process pool, else one."""
        return self.nworkers if isinstance(self.pool, ThreadPool) else 1

    def refuse_over_limit(self, job: _Job, facts: Any, plan: AnyPlan) -> None:
        """MemoryRefused when the shards of `plan` in flight exceed one worker's limit."""
        if self.limit is not None:
            refuse_if_over(worker_bytes(facts, plan, self.in_flight()), self.limit,
                           f"the shards of n={job.n} in flight on one worker")

    def falls_back(self, job: _Job, facts: Any, plan: AnyPlan) -> bool:
        """Switch n to its kind's fallback when `plan` does not fit a worker and the run
        left the shape to the planner (no explicit blocks, no checkpoint of this kind):
        its first sweep is asked again in the fallback's terms (a cached, cheap task)."""
        kind = self.kind_of(job)
        if (kind.fallback is None or job.kind is not None or self.limit is None
                or self.blocks is not None or self.max_primes_per_block is not None
                or worker_bytes(facts, plan, self.in_flight()) <= self.limit):
            return False
        fallback = kind.fallback(self.limit, self.in_flight())
        if fallback is None:
            return False
        job.kind, job.fell_back = fallback, True
        self.submit(("facts", job.n, "fallback"), None)
        return True

    def adopt(self, job: _Job, facts: Any) -> None:
        """Plan n from its first sweep's facts (or resume from its checkpoint) and submit
        its shards."""
        if job.stored is not None:  # resume: the manifest is checked against these facts
            self.resume(job, job.stored, facts)
            return
        plan = self.plan_for(job, facts)
        if self.falls_back(job, facts, plan):
            return
        job.facts = facts
        job.plan = plan
        self.refuse_over_limit(job, facts, job.plan)
        job.residues = [None] * len(job.plan.blocks)
        job.updates = [0] * len(job.plan.blocks)
        root = self.folder(job.n)
        if root is not None:
            kind = self.kind_of(job)
            job.cp = ckpt.create(root, job.plan, facts.to_dict(), kind.parameters,
                                 kind.columns(facts), self.ruleset)
        self.start_shards(job)

    def resume(self, job: _Job, stored: ckpt.Stored, facts: Any) -> None:
        """Resume from a manifest: its facts, primes, blocks and columns must equal the
        ones recomputed from this run's own first sweep (`facts`, on a worker on a
        cluster), before any shard is reused; only the recomputed values are used."""
        kind = self.kind_of(job)
        fresh = self.plan_for(job, facts)
        cp = stored.verify(kind.parameters, facts.to_dict(), kind.fact_keys, fresh,
                           kind.columns(facts), self.ruleset)
        if self.explicit and fresh != cp.plan:
            raise ckpt.CheckpointRefused(
                f"checkpoint {stored.root} was written for another shard plan "
                f"({len(cp.plan.blocks)} blocks of primes, not {len(fresh.blocks)}); "
                "use another directory"
            )
        self.refuse_over_limit(job, facts, cp.plan)
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
        self.start_shards(job)

    def start_shards(self, job: _Job) -> None:
        """Submit every shard of n not yet done, with its placement hint (module
        docstring): a range's shards prefer the worker that swept their n, a single n's
        are dealt round-robin over the workers."""
        assert job.plan is not None and job.facts is not None
        nb = len(job.plan.blocks)
        if self.bar is not None:
            self.bar.total += nb
            self.bar.update(job.reused)
        pool = self.pool
        dask_workers = [w for w in self.workers if w] if isinstance(pool, DaskPool) else []
        todo = [i for i in range(nb) if job.residues[i] is None]
        for k, i in enumerate(todo):
            if self.hinted and job.facts.where:
                prefer = job.facts.where
            elif self.single and dask_workers:
                prefer = dask_workers[k % len(dask_workers)]
            else:
                prefer = None
            self.submit(("shard", job.n, i), prefer)
        if all(r is not None for r in job.residues):
            self.finish(job)

    def store_shard(self, job: _Job, i: int, value: tuple[np.ndarray, int]) -> None:
        """Keep shard i's residues, write them to the checkpoint, and finish n once every
        shard is in."""
        residues, updates = value
        job.residues[i] = np.asarray(residues, dtype=np.int64)
        job.updates[i] = int(updates)
        job.computed += 1
        if job.cp is not None:
            job.cp.save_shard(i, job.residues[i], int(updates))
        if self.bar is not None:
            self.bar.update(1)
        if self.on_shard is not None:
            self.on_shard(job.n, i)
        if all(r is not None for r in job.residues):
            self.finish(job)

    # --------------------------------------------------------------------- the end

    def finish(self, job: _Job) -> None:
        """Assemble n's result from its shards (the kind's assembly) and release n."""
        assert job.plan is not None and job.facts is not None
        stats = {
            "seconds_total": round(time.perf_counter() - job.t0, 3),
            "seconds_windows": job.facts.seconds_windows,
            "word_updates": int(sum(job.updates)),
            "backend": self.pool.kind,
            "workers": self.nworkers,
            "prime_blocks": len(job.plan.blocks),
            "shards_total": len(job.plan.blocks),
            "shards_computed": job.computed,
            "shards_reused": job.reused,
            "shards_rejected": job.rejected,
            **self.kind_of(job).extra_stats(job.facts),
            **self.pool.run_stats(),
        }
        residues = np.concatenate(job.residues, axis=0)
        self.results[job.n] = self.kind_of(job).assemble(job.facts, job.plan, residues, stats)
        self.release(job.n)

    def release(self, n: int) -> None:
        """Ask every worker to drop its first sweep of n (best effort: a leftover shared
        sweep is only space, and the next run of n replaces it as a dead run's)."""
        if n in self.unreleased:
            self.unreleased.remove(n)
            if self.kind.release is not None and isinstance(self.pool, DaskPool):
                self.pool.run_everywhere(self.kind.release, self.ruleset, n)

    def close(self) -> None:
        """Close the bar, drop every future still held, and release (in one call) the n a
        failed, interrupted or stalled run leaves."""
        if self.bar is not None:
            self.bar.close()
        for fut in self.tags:
            if hasattr(fut, "release"):
                fut.release()
            else:
                fut.cancel()
        if self.unreleased:
            left, self.unreleased[:] = list(self.unreleased), []
            if self.kind.release is not None and isinstance(self.pool, DaskPool):
                self.pool.run_everywhere(release_many, self.kind.release, self.ruleset, left)
