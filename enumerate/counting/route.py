"""Which exact route a count takes, and its shape, from the first sweep's exact sizes.

A count has two exact routes after its first sweep (`core.sweep`):

windows  (`counting.spectrum.spectrum_residues`) a shard is a block of b primes below 2**62;
         it holds b words per (state, length of its window) of the layers in flight
         (`spectrum.peak_words`) plus fixed buffers; word updates per prime: one per
         (kept move, length of its source's window) (`window_updates`).
points   (`counting.points.spectrum_points`) a shard is (prime below 2**50, block of K
         evaluation points); it holds K words per state of the layers in flight
         (`points.points_peak_words`); word updates per prime and point: one per kept move
         plus one per state of the swept layers but the start (`point_updates`); N =
         `core.ntt.transform_size(longest - shortest)` points per prime.

Both read the moves into each layer from the first sweep's kept `Incoming` ("keep") or list
them again per shard ("recompute": no shared move lists, one listing of the largest layer
per running shard instead).  So there are four *variants*, and for each one the memory of
a run is exact arithmetic on `CountSizes`:

    peak = shared + (shards in flight) x (one shard's bytes)

shared = what the first sweep leaves held (rank table, windows, terminal ranks, with "keep"
the kept moves), at least the first sweep's forecast peak (`count.count_windows`: the
allocator may keep what it touched).

Rule (`choose_count_route`), for a limit per process and `threads` shards in flight:

1. the windows route when it fits (it does the fewest word updates): keep the moves when
   the plan fits with them, else recompute them; the primes are cut by the one planner
   `core.blocks.block_plan` exactly as the windowed count always did, so a run that fits
   today keeps today's shape (and output);
2. else the points route with the largest K whose `threads` shards fit (K <= N, rounded to
   equal blocks: K = ceil(N / ceil(N / K_max))); keep or recompute, whichever allows the
   larger K (keep on a tie: re-listing costs time);
3. else MemoryRefused (exit 3), one line naming the smallest limit with which some variant
   fits (`smallest_limit`): "... needs at least X ...; --max-memory XM or more".

"keep" is possible only when the first sweep kept the moves (it does when its forecast
plus the moves' estimate fit a quarter of the limit, `count.count_windows`); a smallest
limit for a keep variant therefore also asks for that quarter, so a rerun with the named
limit sweeps alike and fits.  Every number is exact and equal to what the run allocates
and reports: `RoutePlan.word_updates == stats["word_updates"]`, `RoutePlan.shard_bytes` =
the ring buffers the shard allocates + its fixed buffers.

A hook for exact random play: random play's shards are prime blocks today
(`randomplay.exact.random_block_plan`, which already chooses the block size under the
limit); its points route, when it exists, can reuse `best_points` with its own sizes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from zeckenum.core.blocks import block_plan
from zeckenum.core.memory import human
from zeckenum.core.modular import primes_for_bits
from zeckenum.core.ntt import ntt_primes_for_bits, transform_size
from zeckenum.core.statespace import StateSpace, build_space, rank_table_bytes, states_upper_bound
from zeckenum.core.sweep import Windows, incoming_bytes_estimate, moves_into
from zeckenum.counting.count import (
    COUNT_PRIMES_PER_BLOCK,
    count_space,
    listing_bytes,
    windows_bytes,
    windows_pass_bytes,
)
from zeckenum.counting.points import points_peak_words
from zeckenum.counting.spectrum import peak_words
from zeckenum.errors import MemoryRefused
from zeckenum.rules.model import GameSpec

ROUTES = ("windows", "points")


@dataclass(frozen=True)
class CountSizes:
    """Exact sizes of one count after its first sweep (plain ints; see `count_sizes`).

    states / moves      reachable states and kept moves (transitions)
    layer_sizes         states of each swept layer (levels <= the start's), every state
    window_sums         sum of the window widths of each swept layer
    window_updates      word updates of the windowed sweep per prime
    point_updates       word updates of the points sweep per (prime, point)
    window_words        words of a windows shard's ring per prime (`spectrum.peak_words`)
    point_words         words of a points shard's ring per point (`points.points_peak_words`)
    windows_primes      primes of the windowed route incl. the check prime
    points_primes       primes of the points route incl. the check prime
    points              N, evaluation points per prime
    held_bytes          what the first sweep leaves held without the kept moves
    kept_bytes          bytes of the kept moves: exact when `kept`, else their estimate
    kept                whether the first sweep kept the moves
    sweep_bytes         the first sweep's forecast peak without kept moves
    kept_estimate       the first sweep's estimate of the kept moves (its keep rule)
    listing_bytes       one listing of the largest layer (`count.listing_bytes`)
    largest_layer       states of the largest layer
    space_bytes         the up-front check of the state space (rank table + 8 per state bound)
    """

    n: int
    states: int
    moves: int
    layer_sizes: tuple[int, ...]
    window_sums: tuple[int, ...]
    count_bits: int
    shortest: int
    longest: int
    max_drop: int
    window_updates: int
    point_updates: int
    window_words: int
    point_words: int
    windows_primes: int
    points_primes: int
    points: int
    held_bytes: int
    kept_bytes: int
    kept: bool
    sweep_bytes: int
    kept_estimate: int
    listing_bytes: int
    largest_layer: int
    space_bytes: int

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["layer_sizes"] = list(self.layer_sizes)
        d["window_sums"] = list(self.window_sums)
        return d


@dataclass(frozen=True)
class RoutePlan:
    """The route and shape of one count, with exact forecasts.

    route               "windows" or "points"
    keep_moves          read the first sweep's kept moves (False: list them again per shard)
    threads             shards in flight at once (per worker on a cluster)
    primes              primes incl. the check prime
    primes_per_shard    the largest block of primes (windows route; 1 for points)
    points_per_shard    K (points route; 0 for windows)
    points              N (points route; 0 for windows)
    shards              number of shards
    shard_bytes         bytes of the largest shard (ring buffers + fixed buffers)
    shared_bytes        bytes held once for all shards (first sweep's data)
    peak_bytes          shared + `threads` largest shards: the forecast peak of a process
    word_updates        exact word updates of the whole run (the run's stats["word_updates"])
    variants            every variant considered: dicts of route, keep, fits, shape, bytes
    """

    route: str
    keep_moves: bool
    threads: int
    primes: int
    primes_per_shard: int
    points_per_shard: int
    points: int
    shards: int
    shard_bytes: int
    shared_bytes: int
    peak_bytes: int
    word_updates: int
    variants: tuple[dict, ...] = field(default=(), compare=False)

    def to_dict(self) -> dict:
        """JSON form: the plan's numbers, with human sizes beside the bytes."""
        d = {k: v for k, v in self.__dict__.items() if k != "variants"}
        d["memory_per_shard"] = human(self.shard_bytes)
        d["memory_peak"] = human(self.peak_bytes)
        d["variants"] = [dict(v) for v in self.variants]
        return d


def sweep_updates(space: StateSpace, windows: Windows) -> tuple[int, int]:
    """(word updates of `spectrum_residues` per prime, moves `pull_points` reads per point):
    over the moves into every swept layer from a swept layer (`moves_into`: the kept ones,
    or all listed again), the sum of their sources' window widths, and their number."""
    win_updates = point_moves = 0
    for level in windows.win:
        _ptr, drop, src = moves_into(space, windows, level)
        for d in np.unique(drop):
            src_level = level + int(d)
            if src_level not in windows.win:
                continue
            sel = drop == d
            point_moves += int(np.count_nonzero(sel))
            win_updates += int(windows.win[src_level][src[sel]].astype(np.int64).sum())
    return win_updates, point_moves


def count_sizes(space: StateSpace, windows: Windows, threads: int = 1,
                prime_offset: int = 0, updates: bool = True) -> CountSizes:
    """The `CountSizes` of a count from its state space and first sweep, every number from
    the functions the run uses (`peak_words`, `points_peak_words`, `windows_bytes`,
    `windows_pass_bytes(space, threads)`, `listing_bytes`, the prime choosers).

    The word updates need each move's source window: read from the kept moves, or listed
    again layer by layer when the first sweep did not keep them (about as long as the
    listing part of the first sweep); `updates=False` skips them (both 0: not forecast;
    the route rule does not depend on them)."""
    levels = sorted(windows.win, reverse=True)
    win_updates, point_moves = sweep_updates(space, windows) if updates else (0, 0)
    layer_sizes = tuple(int(windows.win[lv].size) for lv in levels)
    order = transform_size(windows.longest - windows.shortest)
    wprimes, _ = primes_for_bits(windows.count_bits, prime_offset)
    pprimes, _ = ntt_primes_for_bits(windows.count_bits, order, prime_offset)
    kept = windows.incoming is not None
    held = windows_bytes(space, replace(windows, incoming=None))
    spec = space.spec
    return CountSizes(
        n=spec.n, states=windows.states, moves=windows.transitions,
        layer_sizes=layer_sizes,
        window_sums=tuple(int(windows.win[lv].astype(np.int64).sum()) for lv in levels),
        count_bits=windows.count_bits, shortest=windows.shortest, longest=windows.longest,
        max_drop=space.max_drop, window_updates=win_updates,
        point_updates=point_moves + sum(layer_sizes) - 1 if updates else 0,
        window_words=peak_words(space, windows, 1), point_words=points_peak_words(space, 1),
        windows_primes=len(wprimes) + 1, points_primes=len(pprimes) + 1, points=order,
        held_bytes=held,
        kept_bytes=(windows_bytes(space, windows) - held if kept
                    else incoming_bytes_estimate(space)),
        kept=kept, sweep_bytes=windows_pass_bytes(space, threads),
        kept_estimate=incoming_bytes_estimate(space), listing_bytes=listing_bytes(space),
        largest_layer=space.largest_layer(),
        space_bytes=rank_table_bytes(spec.nbins, spec.n, spec.start_level)
        + 8 * states_upper_bound(spec.values, spec.n),
    )


# ------------------------------------------------------------------ the variants' arithmetic


def shared_bytes(sizes: CountSizes, keep: bool) -> int:
    """Bytes held once for all shards: the first sweep's data (with the kept moves when
    `keep`), at least the first sweep's forecast peak (`count.count_windows`)."""
    if keep:
        return max(sizes.held_bytes + sizes.kept_bytes, sizes.sweep_bytes + sizes.kept_estimate)
    return max(sizes.held_bytes, sizes.sweep_bytes)


def window_block_bytes(sizes: CountSizes, keep: bool) -> int:
    """Fixed bytes of a windows shard besides its ring: the word offsets of the two layers
    in flight (`spectrum.layer_offsets`, int64 per state) and, when the moves are not kept,
    one listing of the largest layer."""
    if keep:
        return sizes.largest_layer * 16
    return sizes.listing_bytes + sizes.largest_layer * 16


def point_shard_bytes(sizes: CountSizes, keep: bool, per_shard: int) -> int:
    """Bytes of a points shard of `per_shard` points: its ring (`points_peak_words`) and,
    when the moves are listed again, one listing of the largest layer."""
    return 8 * sizes.point_words * per_shard + (0 if keep else sizes.listing_bytes)


def keep_floor(sizes: CountSizes) -> int:
    """The smallest limit with which the first sweep keeps the moves (`count_windows`:
    forecast + estimate <= limit // 4)."""
    return 4 * (sizes.sweep_bytes + sizes.kept_estimate)


def points_word_updates(sizes: CountSizes) -> int:
    """Exact word updates of the points route: primes x N x updates per point."""
    return sizes.points_primes * sizes.points * sizes.point_updates


def windows_word_updates(sizes: CountSizes) -> int:
    """Exact word updates of the windowed route: primes x updates per prime."""
    return sizes.windows_primes * sizes.window_updates


def windows_plan(sizes: CountSizes, keep: bool, limit: int, threads: int) -> RoutePlan:
    """The windowed route's plan by the one planner (`core.blocks.block_plan`: blocks aim at
    COUNT_PRIMES_PER_BLOCK primes and shrink until `threads` fit), or MemoryRefused when
    `threads` blocks of one prime do not fit."""
    shared = shared_bytes(sizes, keep)
    plan = block_plan(
        list(range(sizes.windows_primes)), threads, per_block=COUNT_PRIMES_PER_BLOCK,
        prime_bytes=8 * sizes.window_words, block_bytes=window_block_bytes(sizes, keep),
        shared_bytes=shared, limit=limit, what="the exact sweep",
    )
    return RoutePlan(
        route="windows", keep_moves=keep, threads=plan.threads, primes=sizes.windows_primes,
        primes_per_shard=max(len(b) for b in plan.blocks), points_per_shard=0, points=0,
        shards=len(plan.blocks), shard_bytes=max(plan.bytes_per_block), shared_bytes=shared,
        peak_bytes=plan.peak_bytes, word_updates=windows_word_updates(sizes),
    )


def best_points(room: int, in_flight: int, word_bytes: int, fixed: int, order: int) -> int:
    """The largest K <= order (0 if none) with in_flight x (K x word_bytes + fixed) <= room,
    then evened out: K = ceil(order / ceil(order / K)) (as many blocks, sizes within one)."""
    if room < 0 or in_flight < 1:
        return 0
    k = room // in_flight - fixed
    k = min(order, k // word_bytes if word_bytes > 0 else order)
    if k < 1:
        return 0
    return -(-order // -(-order // k))


def points_plan(sizes: CountSizes, keep: bool, limit: int, threads: int,
                per_shard: int | None = None) -> RoutePlan | None:
    """The points route's plan: K = `per_shard` (capped at N) or the largest that fits;
    None when `threads` shards of one point (of `per_shard`) do not fit."""
    order = sizes.points
    shared = shared_bytes(sizes, keep)
    in_flight = max(1, min(threads, sizes.points_primes * order))
    fixed = 0 if keep else sizes.listing_bytes
    if per_shard is None:
        k = best_points(limit - shared, in_flight, 8 * sizes.point_words, fixed, order)
    else:
        k = max(1, min(int(per_shard), order))
        if shared + in_flight * point_shard_bytes(sizes, keep, k) > limit:
            k = 0
    if k < 1:
        return None
    in_flight = min(in_flight, sizes.points_primes * -(-order // k))
    shard = point_shard_bytes(sizes, keep, k)
    return RoutePlan(
        route="points", keep_moves=keep, threads=in_flight, primes=sizes.points_primes,
        primes_per_shard=1, points_per_shard=k, points=order,
        shards=sizes.points_primes * -(-order // k), shard_bytes=shard, shared_bytes=shared,
        peak_bytes=shared + in_flight * shard, word_updates=points_word_updates(sizes),
    )


def smallest_limit(sizes: CountSizes, threads: int, route: str | None = None,
                   per_shard: int | None = None) -> int:
    """The smallest limit with which some variant (of `route`, with `per_shard` points)
    fits, for the first sweep as well: the number a refusal names."""
    floor = max(sizes.space_bytes, sizes.sweep_bytes)
    best = math.inf
    for keep in (False, True):
        shared = shared_bytes(sizes, keep)
        need = keep_floor(sizes) if keep else 0
        if route in (None, "windows"):
            t = max(1, min(threads, sizes.windows_primes))
            one = 8 * sizes.window_words + window_block_bytes(sizes, keep)
            best = min(best, max(need, shared + t * one))
        if route in (None, "points"):
            k = 1 if per_shard is None else max(1, min(int(per_shard), sizes.points))
            t = max(1, min(threads, sizes.points_primes * -(-sizes.points // k)))
            best = min(best, max(need, shared + t * point_shard_bytes(sizes, keep, k)))
    return int(max(floor, best))


def limit_text(nbytes: int) -> str:
    """A limit as --max-memory reads it, rounded up (so it is not below): whole KiB below
    1 GiB, else whole MiB."""
    unit, name = (2**10, "K") if nbytes < 2**30 else (2**20, "M")
    return f"{-(-int(nbytes) // unit)}{name}"


def refuse_below(need: int, limit: int, what: str) -> None:
    """MemoryRefused (exit 3), one line naming the smallest working limit, when `limit` is
    below `need`."""
    if limit < need:
        raise MemoryRefused(
            f"{what} needs at least {human(need)} (estimated for its smallest shape) but "
            f"the limit is {human(limit)}; "
            f"--max-memory {limit_text(need)} or more")


def choose_count_route(
    sizes: CountSizes, limit: int, threads: int, *, points_per_shard: int | None = None,
    route: str | None = None, what: str = "the count", fewer: bool = False,
) -> RoutePlan:
    """The route and shape of a count under `limit` bytes with `threads` shards in flight
    (the rule in the module docstring).  `route` forces "windows" or "points";
    `points_per_shard` forces the points route with that K (capped at N).  Keep variants
    need `sizes.kept`.  With `fewer`, when nothing fits `threads` shards in flight, fewer
    (down to one) are tried.  MemoryRefused names the smallest working limit (for the
    fewest shards in flight tried)."""
    for t in range(threads, 0 if fewer else threads - 1, -1):
        try:
            return _choose(sizes, limit, t, points_per_shard, route, what)
        except MemoryRefused:
            if t == 1 or not fewer:
                raise
    raise AssertionError("unreachable")  # pragma: no cover


def fitting_threads(space: StateSpace, limit: int, threads: int) -> int:
    """The most threads t <= `threads` whose `space_floor` fits `limit` (1 when none does):
    a count whose threads are not given runs fewer when memory is short."""
    for t in range(threads, 1, -1):
        if space_floor(space, t) <= limit:
            return t
    return 1


def _choose(sizes: CountSizes, limit: int, threads: int, points_per_shard: int | None,
            route: str | None, what: str) -> RoutePlan:
    """`choose_count_route` for exactly `threads` shards in flight."""
    if points_per_shard is not None:
        route = "points"
    if route is not None and route not in ROUTES:
        raise ValueError(f"unknown route {route!r}")
    keeps = (True, False) if sizes.kept else (False,)
    variants: list[dict] = []
    chosen: RoutePlan | None = None
    if route in (None, "windows"):
        for keep in keeps:
            try:
                plan = windows_plan(sizes, keep, limit, threads)
            except MemoryRefused:
                variants.append({"route": "windows", "keep_moves": keep, "fits": False})
                continue
            variants.append(_variant(plan))
            if chosen is None:
                chosen = plan
    if chosen is None and route in (None, "points"):
        options = [p for p in (points_plan(sizes, keep, limit, threads, points_per_shard)
                               for keep in keeps) if p is not None]
        for keep in keeps:
            if not any(p.keep_moves == keep for p in options):
                variants.append({"route": "points", "keep_moves": keep, "fits": False})
        variants += [_variant(p) for p in options]
        if options:
            chosen = max(options, key=lambda p: (p.points_per_shard, p.keep_moves))
    if chosen is None:
        refuse_below(smallest_limit(sizes, threads, route, points_per_shard), limit, what)
        raise AssertionError("a limit above the smallest working one must fit")  # pragma: no cover
    return replace(chosen, variants=tuple(variants))


def _variant(plan: RoutePlan) -> dict:
    return {"route": plan.route, "keep_moves": plan.keep_moves, "fits": True,
            "shards": plan.shards, "primes_per_shard": plan.primes_per_shard,
            "points_per_shard": plan.points_per_shard, "shard_bytes": plan.shard_bytes,
            "peak_bytes": plan.peak_bytes, "word_updates": plan.word_updates}


def space_floor(space: StateSpace, threads: int) -> int:
    """A lower bound, before the first sweep, of every variant's smallest limit (the
    window widths are not known yet: counted as 0 words; the first sweep's data as its
    forecast).  A limit below it is refused before the first sweep runs; above it the
    exact smallest limit is known after the first sweep (`smallest_limit`)."""
    spec = space.spec
    sweep = windows_pass_bytes(space, threads)
    est = incoming_bytes_estimate(space)
    largest = space.largest_layer()
    lst = listing_bytes(space)
    words = 8 * points_peak_words(space, 1)
    t = min(threads, 2)  # every route has at least two shards (one prime + the check prime)
    keep = max(4 * (sweep + est), sweep + est + t * min(largest * 16, words))
    again = sweep + t * (lst + min(largest * 16, words))
    table = rank_table_bytes(spec.nbins, spec.n, spec.start_level)
    return max(table + 8 * states_upper_bound(spec.values, spec.n), sweep, min(keep, again))


FLOOR_TABLE_BYTES = 16 * 2**20
"""A rank table this small is built even over a smaller limit, to name the smallest
limit that works (`routed_space`)."""


def routed_space(spec: GameSpec, limit: int, threads: int, what: str) -> StateSpace:
    """The state space of a count, after the up-front refusal of a limit below
    `space_floor` (naming it).  A rank table of at most FLOOR_TABLE_BYTES is built to
    compute that floor even when the limit is below it; a larger one only after the
    up-front refusals of `count.count_space` (rank table and states bound, which allocate
    nothing)."""
    table = rank_table_bytes(spec.nbins, spec.n, spec.start_level)
    if table <= FLOOR_TABLE_BYTES:
        space = build_space(spec, max(limit, table))
    else:  # refused before anything is allocated when the table and states do not fit
        space = count_space(spec, limit)
    refuse_below(space_floor(space, threads), limit, what)
    return space
