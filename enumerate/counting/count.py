"""`count`: the exact census of all games of a rule set at one n (the main job).

The path of one number, from the command line to the kernel and back:

1. `cli.count_command` parses N and calls `count(n)`.
2. `count` instantiates the rule set (`rules.RuleSet.instantiate`) and ranks its states
   (`statespace.build_space`).
3. `core.sweep.sweep_windows` walks the layers once: reachable states, moves, each state's
   window of path lengths, and a float estimate of the number of games that fixes how many
   primes the exact sweep needs (`modular.primes_for_bits`, plus one check prime).
4. `counting.route.choose_count_route` picks the route and shard shape from the first
   sweep's exact sizes and the memory limit: blocks of primes (cut by the one planner
   `core.blocks.block_plan`) of the windowed sweep when they fit, else (prime, block of
   evaluation points) shards of `counting.points`.  Each block is one independent shard,
   `spectrum.spectrum_residues`, run in threads here (`core.blocks.run_blocks`) or on a
   cluster.
   Its kernel `spectrum.pull_residues` gathers rows of residues along every move.
5. `modular.reconstruct` rebuilds each length's count by the CRT and checks it against the
   check prime; the `results.CountResult` goes back to the CLI or the notebook.
"""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np
from zeckenum.core.blocks import run_blocks, split_evenly
from zeckenum.core.checks import check_n, check_prime_offset, check_threads, thread_count
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.modular import primes_for_bits, reconstruct
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.core.sweep import Windows, incoming_bytes_estimate, sweep_windows
from zeckenum.counting.result import CountResult
from zeckenum.counting.spectrum import spectrum_residues
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet


def listing_bytes(space: StateSpace) -> int:
    """Bytes of the largest layer's move listing (`core.listing.moves_in`), an upper bound:
    ptr and D (int64 per state; the listing walks the layer, so no states' rows), and per
    move into the layer (exactly counted, `StateSpace.moves_by_level`) drop (int8, counted
    as 8), source (int64), move (int32) and the first sweep's keep flag."""
    return space.listing_peak(16, 8 + 8 + 4 + 1)


def windows_pass_bytes(space: StateSpace, threads: int = 1) -> int:
    """Forecast peak bytes of the first sweep (`core.sweep.sweep_windows`), an upper bound.

    Counts the rank table, lmin and win (int32 each) for every state of the space, the
    working arrays (lmin, lmax int32, log2 paths float64) of the max_drop + 1 live layers,
    and `threads` + 2 move listings of the largest layer (the prefetched ones, the one being
    swept, one being built).  The kept incoming moves are not counted here (see
    `incoming_bytes_estimate`).
    """
    largest = space.largest_layer()
    in_flight = (space.max_drop + 1) * largest * 16 + (threads + 2) * listing_bytes(space)
    return int(space.tab.nbytes) + 8 * space.total_states() + in_flight


COUNT_PRIMES_PER_BLOCK = 4
"""Target primes per block: long enough rows to amortise each move's bookkeeping, small
enough that the layers in flight of `threads` blocks stay a fraction of the memory."""


def windows_bytes(space: StateSpace, windows: Windows) -> int:
    """Bytes the first sweep leaves held through the exact sweep: the rank table, every
    layer's lmin, win and terminal ranks, and the kept incoming moves."""
    arrays = [*windows.lmin.values(), *windows.win.values(), *windows.terminal_ranks.values()]
    kept = sum(inc.nbytes for inc in (windows.incoming or {}).values())
    return int(space.tab.nbytes) + sum(int(a.nbytes) for a in arrays) + kept


def count_space(spec, limit: int) -> StateSpace:  # noqa: ANN001 - a GameSpec
    """The state space of a count after the up-front refusals: first the rank table's
    exact size plus 8 bytes (lmin, win) for each of up to `states_upper_bound` states,
    without allocating anything (`refuse_space`), then the rank table."""
    refuse_space(spec, limit, f"counting n={spec.n}", per_state=8)
    return build_space(spec, limit)


def refuse_count(
    n: int, rules: str | RuleSet = "standard", *, max_memory: int | None = None,
    threads: int = 1,
) -> None:
    """The up-front refusals of `count` (rank table, states bound, first sweep forecast),
    without running it: the client of a sharded count calls it before any worker starts.
    Each worker's first sweep is the same as this forecast; the exact sweep's blocks are
    sized by the shard plan (`cluster.plan.worker_bytes`)."""
    n = check_n(n)
    limit = resolve_limit(max_memory)
    space = count_space(get_rules(rules).instantiate(n), limit)
    refuse_if_over(windows_pass_bytes(space, threads), limit, f"counting n={n} (first sweep)")


def count_windows(
    space: StateSpace, n: int, limit: int, threads: int = 1
) -> tuple[Windows, int]:
    """(windows, forecast peak bytes) of the first sweep of the count of n, as `count` runs it.

    Refused (`refuse_if_over`) when the forecast `windows_pass_bytes(space, threads)`
    exceeds `limit`; the incoming moves are kept for the exact sweep when they fit, with
    that forecast, a quarter of `limit`.  The forecast peak includes the kept moves.  The
    cluster's first sweep (`cluster.count_tasks`) calls this too, so both decide alike.
    """
    first = windows_pass_bytes(space, threads)
    refuse_if_over(first, limit, f"counting n={n} (first sweep)")
    keep = first + incoming_bytes_estimate(space) <= limit // 4
    windows = sweep_windows(space, keep_incoming=keep, threads=threads)
    return windows, first + (incoming_bytes_estimate(space) if keep else 0)


def sweep_threads(space: StateSpace, limit: int, cores: int, cap: int | None = None) -> int:
    """Most threads, at most `cores`, for the first sweep of a count under `limit`
    (`count_windows`) that keep the moves exactly when one thread would, and whose forecast
    peak (`windows_pass_bytes`, plus the kept moves) fits `cap` (default `limit`): the
    listing threads are what grows with them.  At least 1."""
    cap = limit if cap is None else cap
    kept = incoming_bytes_estimate(space)
    keep = windows_pass_bytes(space, 1) + kept <= limit // 4
    best = 1
    for threads in range(2, max(1, cores) + 1):
        first = windows_pass_bytes(space, threads)
        if (first + kept <= limit // 4) != keep or first + (kept if keep else 0) > cap:
            break
        best = threads
    return best


def count(
    n: int,
    rules: str | RuleSet = "standard",
    *,
    threads: int | None = None,
    prime_offset: int = 0,
    max_memory: int | None = None,
    progress: bool = False,
    points_per_shard: int | None = None,
) -> CountResult:
    """Exact number of games of every length for the game `rules` started from n.

    threads           shards run at once, in threads (default: all cores, fewer when the
                      memory limit allows fewer)
    prime_offset      skip that many primes (two offsets far enough apart give disjoint
                      prime sets: an independent recomputation)
    max_memory        byte limit for the run (default: what the machine has available); it
                      chooses the route and shard shape (`counting.route.choose_count_route`:
                      the windowed sweep when it fits, else evaluation points with the
                      largest block that fits); a limit too small for any shape is refused
                      (MemoryRefused, naming the smallest that works) before the exact sweep
    points_per_shard  force the evaluation-point route with blocks of this many points
    """
    # the route module builds on this one (and on counting.points, which does too)
    from zeckenum.counting.route import (
        choose_count_route,
        count_sizes,
        fitting_threads,
        routed_space,
    )

    n = check_n(n)
    check_prime_offset(prime_offset)
    ruleset = get_rules(rules)
    limit = resolve_limit(max_memory)
    nthreads = thread_count(check_threads(threads))
    what = f"counting n={n}"

    t0 = time.perf_counter()
    spec = ruleset.instantiate(n)
    auto = threads is None  # threads not given: fewer when the memory is short
    space = routed_space(spec, limit, 1 if auto else nthreads, what)
    if auto:
        nthreads = fitting_threads(space, limit, nthreads)
    windows, first_peak = count_windows(space, n, limit, nthreads)
    sizes = count_sizes(space, windows, nthreads, prime_offset,
                        updates=windows.incoming is not None)
    route = choose_count_route(sizes, limit, nthreads, points_per_shard=points_per_shard,
                               what=what, fewer=auto)
    if not route.keep_moves and windows.incoming is not None:
        windows = replace(windows, incoming=None)  # list them again per shard: less memory
    t1 = time.perf_counter()
    shape = {
        "route": route.route,
        "keep_moves": route.keep_moves,
        "shards": route.shards,
        "memory_per_shard_bytes": route.shard_bytes,
        "forecast_word_updates": route.word_updates or None,
        "count_bits": windows.count_bits,
        "terminal_states": windows.terminals,
    }

    if route.route == "points":
        from zeckenum.counting.points import points_residues

        primes, check_prime, residues, updates = points_residues(
            space, windows, sizes.points, route.points_per_shard, route.threads, prime_offset)
        shape.update(method="points", points=sizes.points,
                     points_per_shard=route.points_per_shard)
    else:
        primes, check_prime = primes_for_bits(windows.count_bits, prime_offset)
        blocks = split_evenly([*primes, check_prime], route.shards)
        bar = None
        if progress:
            from tqdm import tqdm

            bar = tqdm(
                total=windows.states * len(blocks), unit="state", desc=f"count n={n}",
                unit_scale=True,
            )

        def run(block: tuple[int, ...]) -> tuple[np.ndarray, int]:
            return spectrum_residues(space, windows, list(block), bar.update if bar else None)

        parts = run_blocks(blocks, run, route.threads)
        if bar is not None:
            bar.close()
        residues = np.concatenate([p[0] for p in parts], axis=0)
        updates = sum(p[1] for p in parts)
        shape.update(prime_blocks=len(blocks), primes_per_shard=route.primes_per_shard,
                     planned_peak_bytes=int(route.peak_bytes))
    t2 = time.perf_counter()
    return assemble_count(
        ruleset.name, ruleset.content_hash(), n, windows.states, windows.transitions,
        windows.shortest, windows.longest,
        primes, check_prime, residues,
        stats={
            "seconds_total": round(time.perf_counter() - t0, 3),
            "seconds_windows": round(t1 - t0, 3),
            "seconds_exact": round(t2 - t1, 3),
            "word_updates": int(updates),
            "threads": route.threads,
            "forecast_peak_bytes": int(max(route.peak_bytes, first_peak)),
            **shape,
        },
    )


def assemble_count(
    rules_name: str,
    rules_hash: str,
    n: int,
    states: int,
    transitions: int,
    shortest: int,
    longest: int,
    primes: list[int],
    check_prime: int,
    residues: np.ndarray,
    stats: dict,
) -> CountResult:
    """The CountResult from the spectrum's residues, rows in the order primes + [check].

    Garner's CRT rebuilds the count of each length from shortest to longest, checked
    against the check prime (CheckPrimeMismatch on any disagreement).  Shared by the
    in-process path and the cluster path (`zeckenum.cluster.run`).
    """
    nrec = len(primes)
    lengths = range(shortest, longest + 1)
    values = reconstruct(
        [[int(x) for x in residues[:nrec, length]] for length in lengths],
        list(primes),
        check_prime,
        [int(residues[nrec, length]) for length in lengths],
        what="count of games of one length",
    )
    length_counts = {L: v for L, v in zip(lengths, values, strict=True) if v}
    return CountResult(
        rules=rules_name,
        rules_hash=rules_hash,
        n=n,
        states=states,
        transitions=transitions,
        games=sum(length_counts.values()),
        shortest=min(length_counts),
        longest=max(length_counts),
        length_counts=length_counts,
        primes=tuple(primes),
        check_prime=check_prime,
        stats=stats,
    )
