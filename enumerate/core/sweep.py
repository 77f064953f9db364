"""First sweep: reachability, per-state length windows, and the a-priori size bound.

For every state s reachable from the start, the sweep finds the shortest and the longest
number of moves of a path start -> s (its *length window* [lmin, lmin + win - 1]) and an
upper estimate of log2(number of such paths).  The windows size the exact sweep (each state
stores one residue per length in its window and per prime); the path-count estimate at the
terminal states bounds every length count and so fixes how many primes are needed.

The sweep *pulls*: layers are visited from the start's level downward, and each state
gathers from its predecessors (moves into it), inside a layer in ascending rank, which is
topological (see `statespace`).  The moves into each layer, restricted to reachable
sources, are kept (`Incoming`) when they fit the memory budget, so that the exact sweep's
prime blocks re-read them instead of re-deriving them.  Each finished layer keeps two int32
arrays (lmin, win); only the layers a move can still reach are held as working arrays.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.statespace import LayerMoves, StateSpace
from zeckenum.rules.model import GameSpec

UNREACHED = np.iinfo(np.int32).max


@kernel
def pull_windows(
    dst_lmin: np.ndarray,
    dst_lmax: np.ndarray,
    dst_lp: np.ndarray,
    ptr: np.ndarray,
    drop: np.ndarray,
    src: np.ndarray,
    which_drop: int,
    src_lmin: np.ndarray,
    src_lmax: np.ndarray,
    src_lp: np.ndarray,
    keep: np.ndarray,
) -> None:
    """Gather windows and log2 path counts along the moves into one layer from `which_drop` up.

    lmin/lmax are path lengths in moves; lp is log2 of the number of paths (-inf: none).
    keep[e] is set for every move whose source is reachable.  With which_drop == 0 the
    source arrays are the destination arrays, finished in ascending rank.
    """
    for j in range(dst_lmin.size):
        for e in range(ptr[j], ptr[j + 1]):
            if drop[e] != which_drop:
                continue
            i = src[e]
            if src_lmin[i] == UNREACHED:
                continue
            keep[e] = True
            a = src_lmin[i] + 1
            b = src_lmax[i] + 1
            if a < dst_lmin[j]:
                dst_lmin[j] = a
            if b > dst_lmax[j]:
                dst_lmax[j] = b
            x = src_lp[i]
            y = dst_lp[j]
            if y == -np.inf:
                dst_lp[j] = x
            elif x >= y:
                dst_lp[j] = x + np.log2(1.0 + np.exp2(y - x))
            else:
                dst_lp[j] = y + np.log2(1.0 + np.exp2(x - y))


@dataclass(frozen=True, eq=False)
class Incoming:
    """Moves into the states of one layer whose source is reachable (compressed rows).

    Rows of state j: ptr[j]..ptr[j+1]-1; move e comes from rank src[e] of the layer
    drop[e] levels above.
    """

    ptr: np.ndarray
    drop: np.ndarray
    src: np.ndarray

    @property
    def nbytes(self) -> int:
        return self.ptr.nbytes + self.drop.nbytes + self.src.nbytes


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


def prefetch_listings(
    space: StateSpace, levels: list[int], threads: int
) -> Iterator[tuple[np.ndarray, LayerMoves, np.ndarray]]:
    """(states, moves into them, terminal ranks) of each level in turn, derived ahead.

    Deriving a layer's moves needs no values, so up to `threads` layers are derived in
    parallel (the kernels release the GIL) while the caller sweeps the current one.
    """

    def derive(level: int) -> tuple[np.ndarray, LayerMoves, np.ndarray]:
        states = space.states(level)
        return states, space.predecessors(level, states), space.terminals(level, states)

    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        pending: deque[Future] = deque()
        queue = iter(levels)
        for level in queue:
            pending.append(pool.submit(derive, level))
            if len(pending) > threads:
                break
        while pending:
            yield pending.popleft().result()
            nxt = next(queue, None)
            if nxt is not None:
                pending.append(pool.submit(derive, nxt))


def sweep_windows(
    space: StateSpace, keep_incoming: bool = True, threads: int = 1
) -> Windows:
    """Reachable states, transitions, length windows and the size bound of one game."""
    spec = space.spec
    start_level, start_rank = space.rank(spec.start)
    live: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    incoming: dict[int, Incoming] | None = {} if keep_incoming else None

    out_lmin: dict[int, np.ndarray] = {}
    out_win: dict[int, np.ndarray] = {}
    out_term: dict[int, np.ndarray] = {}
    states = transitions = terminals = 0
    shortest, longest = UNREACHED, -1
    term_lp = -np.inf
    max_window = 0
    levels = [lv for lv in space.levels if lv <= start_level]
    listings = prefetch_listings(space, levels, threads)
    for level in levels:
        size = space.layer_size(level)
        lmin = np.full(size, UNREACHED, dtype=np.int32)
        lmax = np.full(size, -1, dtype=np.int32)
        lp = np.full(size, -np.inf, dtype=np.float64)
        if level == start_level:
            lmin[start_rank] = lmax[start_rank] = 0
            lp[start_rank] = 0.0
        live[level] = (lmin, lmax, lp)
        layer, inc, ends = next(listings)
        keep = np.zeros(inc.dest.size, dtype=np.bool_)
        for d in gather_order(inc.drop):
            if level + d in live:
                pull_windows(lmin, lmax, lp, inc.ptr, inc.drop, inc.dest, d, *live[level + d],
                             keep)
        reached = lmin != UNREACHED
        states += int(reached.sum())
        transitions += int(keep.sum())
        ends = ends[reached[ends]]
        out_term[level] = ends
        if ends.size:
            terminals += int(ends.size)
            shortest = min(shortest, int(lmin[ends].min()))
            longest = max(longest, int(lmax[ends].max()))
            lps = lp[ends]
            top = lps.max()
            term_lp = np.logaddexp2(term_lp, top + np.log2(np.exp2(lps - top).sum()))
        win = np.where(reached, lmax - lmin + 1, 0).astype(np.int32)
        max_window = max(max_window, int(win.max(initial=0)))
        out_lmin[level] = np.where(reached, lmin, 0).astype(np.int32)
        out_win[level] = win
        if incoming is not None:
            incoming[level] = compress_incoming(inc.ptr, inc.drop, inc.dest, keep)
        for stale in [lv for lv in live if lv > level + space.max_drop - 1]:
            del live[stale]
    return Windows(
        lmin=out_lmin,
        win=out_win,
        terminal_ranks=out_term,
        incoming=incoming,
        states=states,
        transitions=transitions,
        terminals=terminals,
        shortest=int(shortest),
        longest=int(longest),
        terminal_paths_log2=float(term_lp),
        max_window=max_window,
    )


def gather_order(drop: np.ndarray) -> list[int]:
    """The distinct drops of a layer's incoming moves, 0 last.

    Layers above are final before a layer starts; the moves inside it (drop 0) must come
    after, in ascending rank, so each state is complete before another state reads it.
    """
    present = np.flatnonzero(np.bincount(drop)) if drop.size else np.zeros(0, dtype=np.int64)
    return sorted((int(x) for x in present), key=lambda d: (d == 0, d))


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


def compress_incoming(
    ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, keep: np.ndarray
) -> Incoming:
    """The rows restricted to kept moves, in compact dtypes (int32 ranks, int8 drops)."""
    if src.size and int(src.max()) >= 2**31:
        raise ValueError("a layer with 2**31 states or more does not fit int32 ranks")
    new_ptr, new_drop, new_src, _ = compact_rows(ptr, drop, src, np.zeros(0, np.int64), keep)
    return Incoming(new_ptr, new_drop, new_src)
