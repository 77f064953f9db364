"""The first sweep, shared by counting and random play: reachability, per-state length
windows, the moves kept for the exact sweeps, and what sizes them.

For every state s reachable from the start, the sweep finds the shortest and the longest
number of moves of a path start -> s (its *length window* [lmin, lmin + win - 1]).  On
request it also gathers

* an upper estimate of log2(number of such paths) (`paths`, counting): at the terminal
  states it bounds every length count and so fixes how many primes the exact count needs;
* for every prime p up to a bound on the total move weight D(s) (`factor_primes`, exact
  random play), the largest sum of v_p(D(s)) along a path start -> s: at the terminal
  states this gives the exact common denominator of the random-play probabilities.

The sweep *pulls*: layers are visited from the start's level downward, and each state
gathers from its predecessors (moves into it), inside a layer in ascending rank, which is
topological (see `statespace`).  A move may drop the level by up to `max_drop`, so the
layers level + 1 .. level + max_drop stay live.  The moves into each layer are listed by
`listing.moves_in` (prefetched in threads, `listing.prefetch_listings`); those whose source
is reachable are kept (`Incoming`), with their weights, so that the exact sweeps re-read
them instead of listing them again.  Each finished layer is yielded as a `SweptLayer`
(`swept_layers`); `sweep_windows` collects them into the `Windows` of a count, random play
into its `Skeleton` (`randomplay.skeleton.random_skeleton`).

One kernel, `pull_windows`, gathers a layer.  `gather_passes` plans its calls; the later
sweeps of random play (exact and float) use the same plan and `drop_stale`.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.listing import LayerMoves, moves_in, prefetch_listings
from zeckenum.core.statespace import StateSpace
from zeckenum.rules.model import GameSpec

UNREACHED = np.iinfo(np.int32).max
"""lmin of a state no path reaches (while the sweep runs)."""


@kernel(inline=True)
def _log2_add(x: float, y: float) -> float:
    """log2(2**x + 2**y) for x finite, y finite or -inf (one rounding order, kept fixed:
    the path estimate's bits must not depend on how the kernel is called)."""
    if y == -np.inf:
        return x
    if x >= y:
        return x + np.log2(1.0 + np.exp2(y - x))
    return y + np.log2(1.0 + np.exp2(x - y))


@kernel
def pull_windows(
    lmin: np.ndarray, lmax: np.ndarray, lp: np.ndarray, ex: np.ndarray,
    up_lmin: np.ndarray, up_lmax: np.ndarray, up_lp: np.ndarray, up_ex: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, keep: np.ndarray, dsum: np.ndarray,
    spf: np.ndarray, pidx: np.ndarray, end_ex: np.ndarray, stats: np.ndarray,
    which: int = -1,
) -> None:
    """Reachability, length windows, log2 path counts and lcm exponents gathered into one
    layer (see the module docstring).

    lmin/lmax are path lengths in moves (lmin == UNREACHED: not reached); lp is log2 of the
    number of paths (-inf: none), or empty when not estimated; ex[j, b] (one column per
    factor prime, none when not tracked) is, once state j is complete, the largest sum of
    v_{p_b}(D(s)) over the states s of a path start -> j *including j itself* (what its
    moves carry on).  Sources of drop-0 moves are this layer's arrays (finished, ascending
    rank), of the other moves the up_* arrays.  `which` selects the moves gathered
    (`gather_passes`): -1 all of them, every drop being 0 or 1 (up_* is the layer one
    level up); d >= 1 only the moves of drop d (up_* is the layer d levels up), leaving the
    states unfinished; 0 only the drop-0 moves, then finishing the states.  keep[e] marks
    the moves whose source is reachable.  Finished terminal states (dsum 0) fold into
    end_ex (max); stats = [states, moves, terminals, shortest, longest, max D], over the
    reached states and kept moves.  spf[x]: smallest prime factor of x, pidx[p]: column of
    prime p.
    """
    nbp = ex.shape[1]
    paths = lp.size > 0
    for j in range(lmin.size):
        for e in range(ptr[j], ptr[j + 1]):
            # two written-out branches: selecting an array per move would cost reference
            # counting on every move
            i = src[e]
            if which >= 0 and drop[e] != which:
                continue
            if drop[e] == 0:
                a = lmin[i]
                if a == UNREACHED:
                    continue
                z = lmax[i]
                for b in range(nbp):
                    if ex[i, b] > ex[j, b]:
                        ex[j, b] = ex[i, b]
                if paths:
                    lp[j] = _log2_add(lp[i], lp[j])
            else:
                a = up_lmin[i]
                if a == UNREACHED:
                    continue
                z = up_lmax[i]
                for b in range(nbp):
                    if up_ex[i, b] > ex[j, b]:
                        ex[j, b] = up_ex[i, b]
                if paths:
                    lp[j] = _log2_add(up_lp[i], lp[j])
            keep[e] = True
            stats[1] += 1
            if a + 1 < lmin[j]:
                lmin[j] = a + 1
            if z + 1 > lmax[j]:
                lmax[j] = z + 1
        if which > 0 or lmin[j] == UNREACHED:
            continue
        stats[0] += 1
        d = dsum[j]
        if d == 0:
            stats[2] += 1
            if lmin[j] < stats[3]:
                stats[3] = lmin[j]
            if lmax[j] > stats[4]:
                stats[4] = lmax[j]
            for b in range(nbp):
                if ex[j, b] > end_ex[b]:
                    end_ex[b] = ex[j, b]
            continue
        if d > stats[5]:
            stats[5] = d
        if nbp > 0:
            while d > 1:
                p = spf[d]
                ex[j, pidx[p]] += 1
                d //= p


@dataclass(frozen=True, eq=False)
class Incoming:
    """Moves into the states of one layer whose source is reachable (compressed rows).

    Rows of state j: ptr[j]..ptr[j+1]-1; move e comes from rank src[e] of the layer
    drop[e] levels above, with weight w[e] (w empty: every weight is 1).  Dtypes: ptr
    int64, drop int8, src int32, w int64.
    """

    ptr: np.ndarray
    drop: np.ndarray
    src: np.ndarray
    w: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    @property
    def nbytes(self) -> int:
        return self.ptr.nbytes + self.drop.nbytes + self.src.nbytes + self.w.nbytes


@kernel
def compact_rows(
    ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, w: np.ndarray, keep: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Compressed rows restricted to kept entries: (ptr int64, drop int8, src int32, w int64).

    w holds a per-entry weight (random play's move weights) or is empty, and is then
    returned empty.
    """
    size = ptr.size - 1
    total = 0
    for e in range(keep.size):
        if keep[e]:
            total += 1
    new_ptr = np.zeros(size + 1, dtype=np.int64)
    new_drop = np.empty(total, dtype=np.int8)
    new_src = np.empty(total, dtype=np.int32)
    new_w = np.empty(total if w.size else 0, dtype=np.int64)
    k = 0
    for j in range(size):
        for e in range(ptr[j], ptr[j + 1]):
            if keep[e]:
                new_drop[k] = drop[e]
                new_src[k] = src[e]
                if w.size:
                    new_w[k] = w[e]
                k += 1
        new_ptr[j + 1] = k
    return new_ptr, new_drop, new_src, new_w


def compress_incoming(moves: LayerMoves, keep: np.ndarray) -> Incoming:
    """The moves in of `moves` restricted to kept ones, in compact dtypes (int32 ranks,
    int8 drops), with their weights."""
    if moves.other.size and int(moves.other.max()) >= 2**31:
        raise ValueError("a layer with 2**31 states or more does not fit int32 ranks")
    return Incoming(*compact_rows(moves.ptr, moves.drop, moves.other, moves.w, keep))


FOLD_OUTSIDE, FOLD_LATER, FOLD_UNREACHED = 1, 2, 3
"""Errors of `fold_windows`: a source outside its layer, a drop-0 source of a later rank,
a kept move from an unreachable state."""


@kernel
def fold_windows(lo: np.ndarray, hi: np.ndarray, used: np.ndarray, ptr: np.ndarray,
                 drop: np.ndarray, src: np.ndarray, d: int, src_lmin: np.ndarray,
                 src_win: np.ndarray, kept: bool) -> int:
    """Fold into lo/hi[j] the window the moves of drop d into state j imply (1 + the
    source's lmin .. lmin + win), counting in used[j] the moves from reachable sources: the
    check of an untrusted first sweep, in the memory of its per-state arrays.

    Sources are ranks into src_lmin/src_win (win 0: unreachable).  Returns 0, or
    FOLD_OUTSIDE (a source outside that layer), FOLD_LATER (a drop-0 source not of a lower
    rank), FOLD_UNREACHED (`kept`: the moves are a first sweep's kept ones, whose sources
    must all be reachable).
    """
    for j in range(ptr.size - 1):
        for e in range(ptr[j], ptr[j + 1]):
            if drop[e] != d:
                continue
            s = np.int64(src[e])
            if s < 0 or s >= src_win.size:
                return FOLD_OUTSIDE
            if d == 0 and s >= j:
                return FOLD_LATER
            w = np.int64(src_win[s])
            if w <= 0:
                if kept:
                    return FOLD_UNREACHED
                continue
            a = np.int64(src_lmin[s]) + 1
            if a < lo[j]:
                lo[j] = a
            if a + w - 1 > hi[j]:
                hi[j] = a + w - 1
            used[j] += 1
    return 0


@kernel
def drops_present(drop: np.ndarray, max_drop: int) -> np.ndarray:
    """seen[d] for d in 0..max_drop: whether some move drops the level by d (no temporary
    the size of the moves, unlike a bincount of int8 drops)."""
    seen = np.zeros(max_drop + 1, dtype=np.bool_)
    for e in range(drop.size):
        d = drop[e]
        if 0 <= d <= max_drop:  # any other drop reads no live layer (as before)
            seen[d] = True
    return seen


def gather_passes(
    drop: np.ndarray, max_drop: int, level: int, live: Mapping[int, object],
    merge: bool = True,
) -> list[tuple[int, int]]:
    """The kernel calls that gather one layer: [(which, source level)].

    `which` is the sweep kernels' pass selector.  With `merge`, when no move of the game
    drops the level by more than 1, there is one pass, which = -1 (drop-0 moves from the
    layer itself, drop-1 moves from the layer one level up) -- or which = 0 (drop-0 moves
    only) when that layer is not live.  Otherwise one pass per drop d >= 1 present among the
    moves `drop` whose source layer level + d is live, in ascending d, then the finishing
    pass which = 0 over the moves inside the layer, in ascending rank.  (A layer that is
    not live holds no reachable state.)  The last pass always has which <= 0, so every
    state is finished.  A float sum gathered by the passes depends on their plan: each
    sweep keeps its own `merge` fixed.
    """
    if merge and max_drop <= 1:
        return [(-1, level + 1)] if level + 1 in live else [(0, level)]
    present = np.flatnonzero(drops_present(drop, max_drop))
    ups = [(int(d), level + int(d)) for d in present if d > 0 and level + int(d) in live]
    return ups + [(0, level)]


def drop_stale(live: dict, level: int, max_drop: int) -> None:
    """Forget the live layers no layer below `level` can gather from (above level +
    max_drop - 1)."""
    for stale in [lv for lv in live if lv > level + max_drop - 1]:
        del live[stale]


@dataclass(frozen=True, eq=False)
class SweptLayer:
    """One finished layer of the first sweep.

    lmin / win int32 per rank (win 0: unreachable, lmin then 0); dsum int64 = D(s), the
    total weight of the moves out of s (0: no move); ends: ranks of the reached states
    without moves (int64, ascending); incoming: the kept moves in (None when not kept).
    """

    level: int
    lmin: np.ndarray
    win: np.ndarray
    dsum: np.ndarray
    ends: np.ndarray
    incoming: Incoming | None


def factor_tables(factor_primes: np.ndarray, bound: int) -> tuple[np.ndarray, np.ndarray]:
    """(spf, pidx) for `pull_windows`: spf[x] the smallest prime factor of 2 <= x <= bound,
    pidx[p] the column of prime p, from all the primes up to `bound` (ascending)."""
    spf = np.zeros(bound + 1, dtype=np.int64)
    for p in factor_primes[::-1]:
        spf[p::p] = p
    pidx = np.zeros(bound + 1, dtype=np.int64)
    pidx[factor_primes] = np.arange(factor_primes.size)
    return spf, pidx


def swept_layers(
    space: StateSpace, *, pairs: bool = False, paths: bool = False, keep_moves: bool = True,
    factor_primes: np.ndarray | None = None, weight_bound: int = 0, threads: int = 1,
    totals: dict | None = None,
) -> Iterator[SweptLayer]:
    """The first sweep, one finished layer at a time (from the start's level down).

    pairs         weights of the random model "pairs" (D(s) and the kept moves' w), else 1
    paths         estimate log2 of the number of paths (counting)
    keep_moves    keep each layer's reachable moves in (`Incoming`)
    factor_primes all primes up to `weight_bound` >= every D(s) (ascending int64): track
                  the lcm exponents of D along the paths (exact random play); a D(s) above
                  the bound is a RuntimeError
    threads       layers listed ahead in parallel

    When the iterator is exhausted, `totals` (if given) holds start_level, start_rank,
    states, transitions, terminals, shortest, longest (over reached states and kept moves),
    max_weight (largest D met), max_indegree (most kept moves into one state), max_drop,
    max_window, terminal_paths_log2 (with `paths`, else -inf) and denominator (with
    `factor_primes`: lcm over games of the product of D(s), else 1).
    """
    spec = space.spec
    if factor_primes is None:
        factor_primes = spf = pidx = np.zeros(0, dtype=np.int64)
    else:
        spf, pidx = factor_tables(factor_primes, weight_bound)
    nbp = factor_primes.size
    start_level, start_rank = space.rank(spec.start)
    levels = [lv for lv in space.levels if lv <= start_level]
    end_ex = np.zeros(nbp, dtype=np.int32)
    stats = np.array([0, 0, 0, UNREACHED, -1, 0], dtype=np.int64)
    pool = ThreadPoolExecutor(max_workers=threads) if threads >= PULL_SPLIT_MIN_THREADS else None
    try:
        yield from _sweep_layers(
            space, levels, start_level, start_rank, pairs, paths, keep_moves, factor_primes,
            spf, pidx, weight_bound, threads, pool, end_ex, stats, totals)
    finally:
        if pool is not None:
            pool.shutdown()


PULL_SPLIT_MIN_MOVES = 1 << 18
"""Moves of one pass below which `_pull` does not split it over threads."""

PULL_SPLIT_MIN_THREADS = 4
"""Threads from which the sweep splits its passes (`_pull`).  With fewer, the listing
threads and the gathering thread already keep the cores busy: on 2 cores, n = 250, the
split made the 2-thread sweep slower (7.29 s against 6.55 s,
`benchmarks/bench_first_sweep.py`)."""


def _pull(pool: ThreadPoolExecutor | None, threads: int, which: int, up: tuple,
          lmin: np.ndarray, lmax: np.ndarray, lp: np.ndarray, ex: np.ndarray,
          lm: LayerMoves, keep: np.ndarray, spf: np.ndarray, pidx: np.ndarray,
          end_ex: np.ndarray, stats: np.ndarray) -> None:
    """One `pull_windows` pass over a layer, split over `threads` when it gathers from a
    layer above only (which >= 1).

    Such a pass reads finished layers only and writes, for each state j of the layer, its
    own lmin/lmax/lp/ex[j] and the keep flags of its own rows (and the move count): ranges
    of states with about equal numbers of moves run at once, each with its own stats,
    summed after (a pass which >= 1 changes only stats[1]).  Each state still gathers its
    moves in row order, so every result, the float path estimate included, is the same bit
    for bit as one call's.  A pass with drop-0 moves (which <= 0) reads states of the
    layer itself and runs as one call.
    """
    moves = int(lm.ptr[-1])
    if pool is None or which <= 0 or moves < PULL_SPLIT_MIN_MOVES:
        pull_windows(lmin, lmax, lp, ex, *up, lm.ptr, lm.drop, lm.other, keep, lm.dsum,
                     spf, pidx, end_ex, stats, which)
        return
    cuts = np.searchsorted(lm.ptr, np.linspace(0, moves, threads + 1)[1:-1])
    bounds = [0, *sorted({int(c) for c in cuts if 0 < c < lm.size}), lm.size]
    parts = [np.zeros_like(stats) for _ in bounds[1:]]

    def run(k: int) -> None:
        a, b = bounds[k], bounds[k + 1]
        part = parts[k]
        part[3] = UNREACHED
        part[4] = -1
        pull_windows(lmin[a:b], lmax[a:b], lp[a:b] if lp.size else lp, ex[a:b], *up,
                     lm.ptr[a : b + 1], lm.drop, lm.other, keep, lm.dsum[a:b], spf, pidx,
                     end_ex, part, which)

    for f in [pool.submit(run, k) for k in range(len(bounds) - 1)]:
        f.result()
    stats[1] += sum(int(p[1]) for p in parts)


def _sweep_layers(
    space: StateSpace, levels: list[int], start_level: int, start_rank: int, pairs: bool,
    paths: bool, keep_moves: bool, factor_primes: np.ndarray, spf: np.ndarray,
    pidx: np.ndarray, weight_bound: int, threads: int, pool: ThreadPoolExecutor | None,
    end_ex: np.ndarray, stats: np.ndarray, totals: dict | None,
) -> Iterator[SweptLayer]:
    """The body of `swept_layers` (its pull passes split over `pool`, see `_pull`)."""
    max_drop = space.max_drop
    nbp = factor_primes.size
    z32 = np.zeros(0, dtype=np.int32)
    empty = (z32, z32, np.zeros(0), np.zeros((0, nbp), dtype=np.int32))
    live: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
    max_in = max_window = 0
    term_lp = -np.inf
    # the path estimate is a float sum: always gathered drop by drop, drop 0 last; the
    # integer results do not depend on the plan, so threads split the drops too (`_pull`)
    merge = not paths and pool is None
    for level, lm in zip(levels, prefetch_listings(space, levels, threads, pairs), strict=True):
        size = lm.size
        lmin = np.full(size, UNREACHED, dtype=np.int32)
        lmax = np.full(size, -1, dtype=np.int32)
        lp = np.full(size if paths else 0, -np.inf, dtype=np.float64)
        ex = np.zeros((size, nbp), dtype=np.int32)
        if level == start_level:
            lmin[start_rank] = lmax[start_rank] = 0
            if paths:
                lp[start_rank] = 0.0
        if nbp and lm.dsum.size and int(lm.dsum.max()) > weight_bound:
            raise RuntimeError(f"a total move weight exceeds the a-priori bound {weight_bound}")
        keep = np.zeros(lm.other.size, dtype=np.bool_)
        for which, src_level in gather_passes(lm.drop, max_drop, level, live, merge):
            _pull(pool, threads, which, live.get(src_level, empty), lmin, lmax, lp, ex, lm,
                  keep, spf, pidx, end_ex, stats)
        reached = lmin != UNREACHED
        ends = np.flatnonzero(reached & (lm.dsum == 0))
        if paths and ends.size:
            lps = lp[ends]
            top = lps.max()
            term_lp = np.logaddexp2(term_lp, top + np.log2(np.exp2(lps - top).sum()))
        inc = compress_incoming(lm, keep) if keep_moves else None
        if inc is not None and size:
            max_in = max(max_in, int(np.diff(inc.ptr).max()))
        win = np.where(reached, lmax - lmin + 1, 0).astype(np.int32)
        max_window = max(max_window, int(win.max(initial=0)))
        yield SweptLayer(level=level, lmin=np.where(reached, lmin, 0).astype(np.int32),
                         win=win, dsum=lm.dsum, ends=ends, incoming=inc)
        live[level] = (lmin, lmax, lp, ex)
        drop_stale(live, level, max_drop)
    if totals is not None:
        m = 1
        for b, p in enumerate(factor_primes):
            if end_ex[b]:
                m *= int(p) ** int(end_ex[b])
        totals.update(
            start_level=start_level, start_rank=start_rank, denominator=m,
            states=int(stats[0]), transitions=int(stats[1]), terminals=int(stats[2]),
            shortest=int(stats[3]), longest=int(stats[4]), max_weight=int(stats[5]),
            max_indegree=max_in, max_drop=max_drop, max_window=max_window,
            terminal_paths_log2=float(term_lp),
        )


@dataclass(frozen=True, eq=False)
class Windows:
    """Result of the first sweep.

    lmin[level], win[level]: int32 arrays over the layer's ranks; win 0 marks an unreachable
    state.  terminal_ranks[level]: reachable states without moves.  `incoming` holds every
    layer's `Incoming` moves, or is None when they did not fit the budget.
    `terminal_paths_log2` estimates log2(total number of games); `count_bits` is a bit bound
    on every count of games of one length (see `bits_bound`).
    """

    lmin: dict[int, np.ndarray]
    win: dict[int, np.ndarray]
    terminal_ranks: dict[int, np.ndarray]
    incoming: dict[int, Incoming] | None
    states: int
    transitions: int
    terminals: int
    shortest: int
    longest: int
    terminal_paths_log2: float
    max_window: int

    @property
    def count_bits(self) -> int:
        return bits_bound(self.terminal_paths_log2, self.longest)


def moves_into(space: StateSpace, windows: Windows, level: int
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(ptr, drop, source rank) of the moves into the states of `level`: the first sweep's
    kept `Incoming` when it kept them, else listed again (`listing.moves_in`); the later
    sweeps of a count (`counting.spectrum`, `counting.points`) read them this way."""
    if windows.incoming is not None:
        inc = windows.incoming[level]
        return inc.ptr, inc.drop, inc.src
    lm = moves_in(space, level)
    return lm.ptr, lm.drop, lm.other


def bits_bound(paths_log2: float, depth: int) -> int:
    """Bits that surely hold the total number of games, from its float log2 estimate.

    Every log-add in `pull_windows` is off by a few units in the last place of its result,
    i.e. by less than 8 * 2**-52 * (|log2 count| + 1) in log2; a count is built by at most
    `depth` of them along any chain.  For counts below 2**2**20 and depth below 2**20 the
    total drift stays far below one bit, so floor(estimate) + 2 bits always suffice; the
    extra check prime of the exact sweep confirms it independently.
    """
    if depth >= 2**20 or paths_log2 >= 2**20:
        raise ValueError("size bound out of the range where the float estimate is proved")
    return max(1, math.floor(paths_log2) + 2)


def length_bound(spec: GameSpec) -> int | None:
    """A proven bound on the number of moves of any game of `spec`, or None when the only
    one known is the number of states.

    The standard game: a game lasts at most ((3 + sqrt 5) / 2) n - IZ(n) - ((1 + sqrt 5) /
    2) Z(n) < 2.6181 n moves ("Bounds on Zeckendorf Games", 2020, arXiv:2009.09510).  A
    game whose moves all lower the level lasts at most the start's level moves.
    """
    from zeckenum.rules.model import STANDARD

    if spec.rules.content_hash() == STANDARD.content_hash():
        return math.floor(2.6181 * spec.n) + 1
    if spec.mv_drop.size == 0 or int(spec.mv_drop.min()) >= 1:
        return int(spec.start_level)
    return None


def window_bound(spec: GameSpec) -> int | None:
    """A proven bound on every state's length window (lmax - lmin + 1), or None.

    The standard game: every combine lowers the token count by one and a split keeps it,
    so all paths from the start to a state with t tokens hold n - t combines and differ
    only in their splits; a whole game holds n - Z(n) combines, so at most
    `length_bound` - (n - Z(n)) splits, and Z(n) <= bins.  A game whose moves all lower
    the level: the start's level + 1.
    """
    from zeckenum.rules.model import STANDARD

    bound = length_bound(spec)
    if bound is None:
        return None
    if spec.rules.content_hash() == STANDARD.content_hash():
        return bound - spec.n + spec.nbins + 1
    return bound + 1


def incoming_bytes_estimate(space: StateSpace) -> int:
    """Bytes of all layers' `Incoming` lists if every move into every state were kept (an
    upper bound: only moves from reachable states are): int64 ptr per state, int8 drop and
    int32 source per move (counted exactly by `StateSpace.moves_by_level`)."""
    moves = float(space.moves_by_level(-1).sum())
    return 8 * (space.total_states() + len(space.levels)) + math.ceil(5 * moves)


def sweep_windows(
    space: StateSpace, keep_incoming: bool = True, threads: int = 1
) -> Windows:
    """Reachable states, transitions, length windows and the size bound of one game: the
    first sweep (`swept_layers`) with path estimates, collected for a count."""
    totals: dict = {}
    lmin: dict[int, np.ndarray] = {}
    win: dict[int, np.ndarray] = {}
    ends: dict[int, np.ndarray] = {}
    incoming: dict[int, Incoming] | None = {} if keep_incoming else None
    for layer in swept_layers(space, paths=True, keep_moves=keep_incoming, threads=threads,
                              totals=totals):
        lmin[layer.level] = layer.lmin
        win[layer.level] = layer.win
        ends[layer.level] = layer.ends
        if incoming is not None and layer.incoming is not None:
            incoming[layer.level] = layer.incoming
    return Windows(
        lmin=lmin, win=win, terminal_ranks=ends, incoming=incoming,
        states=totals["states"], transitions=totals["transitions"],
        terminals=totals["terminals"], shortest=totals["shortest"],
        longest=totals["longest"], terminal_paths_log2=totals["terminal_paths_log2"],
        max_window=totals["max_window"],
    )
