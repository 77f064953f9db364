"""Cluster tasks of an exact count: its twin, and the first sweep that plans it.

Shard design.  One large n splits by *prime block*: the exact sweep for a block of primes
(`counting.spectrum.spectrum_residues`) is independent of every other block.  In-process,
`zeckenum.counting.count.count` runs the blocks in threads; here
`spectrum_residues_task(rules, n, block)` is its cluster twin.  A worker never receives the
state space or the windows: it rebuilds the game, its state space and its windows (the
engine's own `count.count_windows`, deterministic) from (rules, n), keeps them in a small
per-process cache (`workercache.WorkerCache`) so the other blocks of the same n on that
worker reuse them, and runs the same `spectrum_residues`.  Only a block of primes goes in
and one small int64 array (block size x (longest + 1)) comes out.

`count_facts_task(rules, n)` runs that first sweep and returns `Facts`: the few numbers
the client needs to plan the shards (count_bits -> primes, the memory of one block) and to
report the result (states, transitions, shortest, longest).  On a cluster the client sends
it to every worker at once, so each worker warms its cache in parallel and the client
itself stays light (it may be a laptop driving a large cluster).  Random play's twins
live in `random_tasks`.

The count by evaluation points (`counting.points`) shards by (prime, block of point
indices): `spectrum_points_task(rules, n, (prime, N, lo, hi))` is the twin of one shard
of `points.count_points`; it uses the same cached first sweep and returns the values
G(w**k) mod prime, k in [lo, hi), as one int64 row.  `points_facts_task` adds to the
`Facts` the words per point of a shard (`PointsFacts`), which sizes its memory.
"""

from __future__ import annotations

import threading
import time
from dataclasses import asdict, dataclass

import numpy as np
from zeckenum.cluster.workercache import WorkerCache, worker_address
from zeckenum.core.memory import available_bytes
from zeckenum.core.ntt import root_of_order, transform_size
from zeckenum.core.statespace import StateSpace, build_space
from zeckenum.core.sweep import Windows
from zeckenum.counting.count import count_windows, sweep_threads
from zeckenum.counting.points import points_peak_words, spectrum_points
from zeckenum.counting.route import sweep_updates
from zeckenum.counting.spectrum import peak_words, spectrum_residues
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

_cache: WorkerCache[tuple[str, int], tuple[StateSpace, Windows, Facts]] = WorkerCache()
"""Games (rules, n) whose first sweep this process keeps: the current n and the next."""
_facts_memo: dict[tuple[str, int, bool], Facts] = {}
"""Facts of the games this worker process mapped from the host cache, until released."""
_facts_lock = threading.Lock()


@dataclass(frozen=True)
class Facts:
    """What the first sweep of one game tells the planner (plain numbers, picklable).

    words_one     int64 words a block of one prime holds at its peak (`peak_words`)
    shared_bytes  bytes of the incoming-move lists all blocks of a process share
    fixed_bytes   bytes per block besides its residues
    window_bytes  bytes of the per-state windows (8 per state)
    updates_one   word updates of the exact sweep per prime (exact: sum over kept moves of
                  the source's window width)
    where         address of the worker that ran the sweep ("" in-process)
    """

    rules: str
    rules_hash: str
    n: int
    states: int
    transitions: int
    terminals: int
    shortest: int
    longest: int
    count_bits: int
    total_states: int
    words_one: int
    shared_bytes: int
    fixed_bytes: int
    window_bytes: int
    updates_one: int
    seconds_windows: float
    where: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def windows_with_facts(
    ruleset: RuleSet, n: int, limit: int | None = None, threads: int = 1
) -> tuple[StateSpace, Windows, Facts]:
    """State space, windows and `Facts` of one game (no caching).

    The first sweep is the engine's own (`count.count_windows`): refused over `limit`
    (default: the memory the machine has available), the incoming moves kept when they fit
    a quarter of it, exactly as `count.count` decides.
    """
    limit = available_bytes() if limit is None else limit
    t0 = time.perf_counter()
    space = build_space(ruleset.instantiate(n))
    windows, _ = count_windows(space, n, limit, threads)
    seconds = time.perf_counter() - t0
    facts = facts_of(ruleset, n, space, windows, seconds)
    return space, windows, facts


def facts_of(
    ruleset: RuleSet, n: int, space: StateSpace, windows: Windows, seconds: float
) -> Facts:
    """The `Facts` of one game, every number derived from its state space and windows."""
    largest = max(space.layer_size(lv) for lv in space.levels)
    fixed = largest * (space.spec.mv_bins.shape[0] * 24 + 8 * space.spec.nbins)
    if windows.incoming is not None:
        fixed = largest * 16
    return Facts(
        rules=ruleset.name,
        rules_hash=ruleset.content_hash(),
        n=n,
        states=windows.states,
        transitions=windows.transitions,
        terminals=windows.terminals,
        shortest=windows.shortest,
        longest=windows.longest,
        count_bits=windows.count_bits,
        total_states=space.total_states(),
        words_one=peak_words(space, windows, 1),
        shared_bytes=sum(inc.nbytes for inc in (windows.incoming or {}).values()),
        fixed_bytes=fixed,
        window_bytes=8 * space.total_states(),
        updates_one=sweep_updates(space, windows)[0],
        seconds_windows=round(seconds, 3),
    )


def prepared(rules: str | RuleSet, n: int) -> tuple[StateSpace, Windows, Facts]:
    """The (cached) first sweep of (rules, n) in this process; built at most once at a time.

    In a Dask worker the sweep is shared with the other worker processes of the host
    (`hostcache`): run once per host, its arrays memory-mapped by all.
    """
    ruleset = get_rules(rules)

    def build() -> tuple[StateSpace, Windows, Facts]:
        if worker_address():
            return host_windows_with_facts(ruleset, int(n))
        return windows_with_facts(ruleset, int(n))

    return _cache.get((ruleset.content_hash(), int(n)), build)


def host_windows_with_facts(ruleset: RuleSet, n: int) -> tuple[StateSpace, Windows, Facts]:
    """`windows_with_facts` of (rules, n) through this host's shared cache (`hostcache`).

    The cached arrays are checked against the game's state space when mapped, and the
    `Facts` are recomputed from the space and the checked arrays: only the sweep's time is
    taken from the cache's record (a statistic, never used to compute).
    """
    from zeckenum.cluster.hostcache import shared_windows

    space = build_space(ruleset.instantiate(n))

    def compute() -> tuple[Windows, dict]:
        _, win, facts = windows_with_facts(ruleset, n)
        return win, facts.to_dict()

    def compute_shared() -> tuple[Windows, dict]:
        # the host's other worker processes wait on the cache's lock meanwhile: the sweep
        # lists layers on the host's cores, as many as this worker's memory allows
        limit = available_bytes()
        threads = sweep_threads(space, limit, host_cores(), worker_memory_cap(limit))
        _, win, facts = windows_with_facts(ruleset, n, limit, threads)
        return win, facts.to_dict()

    win, recorded, _ = shared_windows(ruleset.content_hash(), n, compute, space,
                                      compute_shared)
    key = (ruleset.content_hash(), n, win.incoming is not None)
    with _facts_lock:
        facts = _facts_memo.get(key)
    if facts is None:  # a pure function of the game (and of keeping the moves)
        seconds = recorded.get("seconds_windows")
        if isinstance(seconds, bool) or not isinstance(seconds, (int, float)) or not (
                0 <= seconds < 1e9):
            seconds = 0.0
        facts = facts_of(ruleset, n, space, win, float(seconds))
        with _facts_lock:
            _facts_memo[key] = facts
    return space, win, facts


def host_cores() -> int:
    """Cores this process may run on (its CPU affinity)."""
    import os

    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # no affinity on this platform
        return max(1, os.cpu_count() or 1)


WORKER_MEMORY_SHARE = 0.8
"""Share of a Dask worker's memory limit a shared first sweep may forecast for itself (the
nanny restarts a worker near 95% of its limit)."""


def worker_memory_cap(default: int) -> int:
    """WORKER_MEMORY_SHARE of this Dask worker's memory limit, `default` when it has none
    (or outside a worker)."""
    try:
        from distributed import get_worker

        limit = get_worker().memory_manager.memory_limit
    except (ImportError, ValueError, AttributeError):
        return default
    return int(WORKER_MEMORY_SHARE * limit) if limit else default


def release_task(rules: str | RuleSet, n: int) -> bool:
    """Forget the first sweep of (rules, n) in this process and remove this host's shared
    copy (run on every worker when the count of n is done); True if this call removed it."""
    from zeckenum.cluster.hostcache import release

    ruleset = get_rules(rules)
    _cache.pop((ruleset.content_hash(), int(n)))
    with _facts_lock:
        for keep in (True, False):
            _facts_memo.pop((ruleset.content_hash(), int(n), keep), None)
    return release(ruleset.content_hash(), n)


def clear_cache() -> None:
    """Forget every cached first sweep of this process."""
    _cache.clear()
    with _facts_lock:
        _facts_memo.clear()


def count_facts_task(rules: str | RuleSet, n: int) -> Facts:
    """Run (or reuse) the first sweep of (rules, n) here and return its `Facts`."""
    _, _, facts = prepared(rules, n)
    return Facts(**{**facts.to_dict(), "where": worker_address()})


def spectrum_residues_task(
    rules: str | RuleSet, n: int, primes_block: tuple[int, ...] | list[int]
) -> tuple[np.ndarray, int]:
    """(residues, word updates) of one shard: residues[q, L] = games of length L mod block[q].

    The cluster twin of one thread of `count.count`: rebuilds (or reuses) the game's
    windows in this process and calls the same `spectrum.spectrum_residues`.
    """
    space, windows, _ = prepared(rules, n)
    return spectrum_residues(space, windows, list(primes_block))


@dataclass(frozen=True)
class PointsFacts(Facts):
    """`Facts` plus what a shard of the count by evaluation points needs to be sized.

    points_words_one  int64 words one point of a shard holds at its peak
                      (`points.points_peak_words(space, 1)`: max_drop + 1 layers of the
                      largest layer)
    """

    points_words_one: int = 0


def points_facts_of(facts: Facts, space: StateSpace) -> PointsFacts:
    """`facts` (of the game `space`) with the words per point of a points shard."""
    return PointsFacts(**facts.to_dict(), points_words_one=points_peak_words(space, 1))


def points_facts_task(rules: str | RuleSet, n: int) -> PointsFacts:
    """Run (or reuse) the first sweep of (rules, n) here and return its `PointsFacts`."""
    space, _, facts = prepared(rules, n)
    return points_facts_of(Facts(**{**facts.to_dict(), "where": worker_address()}), space)


def spectrum_points_task(
    rules: str | RuleSet, n: int, shard: tuple[int, int, int, int] | list[int]
) -> tuple[np.ndarray, int]:
    """(values, word updates) of one shard (prime, N, lo, hi) of the count by evaluation
    points: values[k - lo] = G(w**k) mod prime for k in [lo, hi), w of order N mod prime
    (`core.ntt.root_of_order`), G the game's length polynomial.

    The cluster twin of one shard of `points.count_points`: rebuilds (or reuses) the game's
    windows in this process and calls the same `points.spectrum_points`.  N must be the
    game's own (`core.ntt.transform_size` of its length span), else ValueError.
    """
    space, windows, _ = prepared(rules, n)
    q, order, lo, hi = (int(x) for x in shard)
    own = transform_size(windows.longest - windows.shortest)
    if order != own or not 0 <= lo < hi <= order:
        raise ValueError(f"shard {tuple(shard)} does not fit the {own} points of n = {n}")
    w = root_of_order(q, order)
    values, updates = spectrum_points(space, windows, q, [pow(w, k, q) for k in range(lo, hi)])
    return np.asarray(values, dtype=np.int64), int(updates)
