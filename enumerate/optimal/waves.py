"""One layer of optimal play on several threads: blocks of a high prefix, run as a DAG.

The serial kernels (`classify.classify_layer_2p` / `classify_layer_multi`) walk a layer in
descending rank, because a state may move to a *higher*-ranked state of its own layer (a
move of drop 0, e.g. a split of the standard game).  This module cuts a layer into blocks
that several threads classify at once, keeping one bit per state.

Blocks.  Fix a cut bin h (1 <= h <= bins).  A *block* is the set of states of the layer
with the same counts in the bins h .. bins-1 (the *prefix*).  Ranks are co-lexicographic
(`core.statespace`: the largest bin is the most significant digit), so a block is a
contiguous range of ranks, and the blocks partition the layer.  A drop-0 move that changes
no count at a bin >= h keeps its state in its block; one that changes such a count leads
to another block, whose prefix is the old prefix plus the move's change on those bins.
`cut_blocks` lists the blocks in descending rank and, for every block B and every drop-0
move that changes a bin >= h, the block B' of prefix(B) + change when that block exists and
ranks higher: an *edge* B -> B' (B waits for B').  The edges are taken from the prefix
alone (the low counts are ignored, so an edge is listed even when no state of B can make
the move): a superset of the real dependencies between blocks.

Claim.  If every block is walked by one thread in descending rank, and starts only after
every block it has an edge to has finished, then every successor's bit is read after it
is final.  Proof: a move of drop d >= 1 leads to a lower layer, finished before this one.
A drop-0 move s -> t raises the rank (checked per state: the rule set is refused
otherwise), so if t lies in s's block, t was classified earlier by the same walk
(descending rank); if t lies in another block B', the move changes a bin >= h, so B -> B'
is one of the listed edges and B' finished before B started.  (A real move into a
lower-ranked block breaks the rank order, which the per-state check reports.)  The edges
point to higher ranks only, so they form a DAG and the schedule never deadlocks.

Schedule (`layer_blocks`).  `threads` Python threads take batches of ready blocks (all of
whose edges lead to finished blocks) under one lock, run the kernel on the batch without
the GIL, and mark them finished under the lock, which releases the blocks waiting for
them.  No thread waits while a ready block exists, so a thread descheduled by a busy
machine delays the others only when the DAG leaves nothing else to do.  The lock orders
every write of a finished block before every read by a block started after it.

No data race.  A byte of the layer's bits that holds ranks of one block only (a *private*
byte) is written only by the walk of that block.  The at most two bytes of a block that
it shares with its neighbours (its first and last byte, when the block does not start or
end on a byte boundary) are never written during the layer: the block's bits there go to
its own two *edge* bytes (`edges[block, 0..1]`, per plane), and are read from there by
its own walk and by later blocks; after every block has finished, one thread ORs the edge
bytes into the layer's bits.  So no byte is written by two threads, and no byte is read
by one thread while another writes it.  Memory: the layer's one bit per state per plane,
plus the plan of the layer being classified (bounded by `plan_bytes`).

Choice of h (`block_plan`).  Larger h: fewer, larger blocks (less overhead, less
parallelism); smaller h: more, smaller blocks.  For each h from bins down (while the blocks
stay within `max_blocks`) the plan's cost is max(critical path, states / threads) +
BLOCK_COST x blocks / threads, where the critical path is the heaviest chain of edges,
each block weighing its states; the cheapest h wins.  Layers below PARALLEL_MIN_STATES
states (and every layer with one thread) run the serial kernels.

Values per state.  The same blocks and schedule run the sweep with one value per state
(`classify.grade_layer_2p`: remoteness, Grundy values; kernel `grade_blocks_2p`, wrapper
`layer_grades`).  The claim above holds unchanged (it is about the order of reads and
writes, not their width), and since every state owns its own array element there are no
shared bytes: blocks write the layer's arrays directly and nothing is merged.

Kernels: `cross_moves` (the moves that leave a block), `cut_blocks` (blocks, edges and
critical path for one h), `classify_blocks_2p` / `classify_blocks_multi` /
`grade_blocks_2p` (one batch of blocks), `release_blocks` (the blocks a finished batch
frees), `merge_edges`.  Wrappers: `block_plan` (the plan of one layer), `layer_blocks`
(run one layer's bits on threads), `layer_grades` (its values); both schedule through
`_run_schedule`.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.listing import move_dense, move_spans, neighbour_rank
from zeckenum.core.statespace import StateSpace
from zeckenum.core.walk import (
    _largest_count,
    _legal_moves,
    _n_ge,
    _step_down,
    _tab,
    _terms,
    is_unit_game,
)

PARALLEL_MIN_STATES = 1 << 15
"""Layers with fewer states run the serial kernel (too little work to share)."""

BLOCK_COST = 256
"""Cost of one block in states: its unranking and suffix sums, and above all the Python
bookkeeping of the schedule (a lock, a release, about 50 microseconds)."""

BATCH_STATES = 1 << 14
"""A thread takes ready blocks until it holds this many states (or its share of the ready
states, whichever is less; at least one block)."""

ERR_WALK = 1
"""Error flag of a batch: the walk of a block lost step with the ranks."""


def max_blocks(size: int) -> int:
    """Most blocks a plan of a layer of `size` states may have."""
    return max(4096, size >> 12)


def plan_bytes(size: int, moves: int, planes: int = 1) -> int:
    """Upper bound of a plan and its schedule for a layer of `size` states (`block_plan`,
    `layer_blocks`) in a game of `moves` moves: per block its rank, size, critical path,
    pending count, dependants' pointer and a place in the ready list (96 bytes) and its
    edge bytes (2 per plane); per possible edge (blocks x moves) its source, target and
    their sorted copies (32 bytes).  At most max_blocks(size) + 1 blocks: an upper bound
    of about 13 MiB for the largest layer of n = 500 (66 million states, 23 moves), held
    for one layer at a time; the plans actually chosen are far smaller."""
    cap = max_blocks(size) + 1
    return cap * (96 + 2 * planes + 32 * max(1, moves))


# ----------------------------------------------------------------------------- plan


@kernel(inline=True)
def _prefix_rank(q: np.ndarray, h: int, n: int, level: int, tab: np.ndarray,
                 values: np.ndarray, weights: np.ndarray) -> tuple[int, int]:
    """(lowest rank, states) of the block whose counts at bins >= h are q[h:]; (0, 0) when
    no state of the layer has that prefix."""
    v = n
    t = level
    r = 0
    for k in range(values.size - 1, h - 1, -1):
        c = q[k]
        v2 = v - c * values[k]
        t2 = t - c * weights[k]
        if c < 0 or v2 < 0 or t2 < 0:
            return 0, 0
        r += tab[k + 1, v, t] - tab[k + 1, v2, t2]
        v = v2
        t = t2
    size = tab[h, v, t]
    if size <= 0:
        return 0, 0
    return r, size


@kernel(inline=True)
def _fill_prefix(j_top: int, h: int, c: np.ndarray, lowv: np.ndarray, lowt: np.ndarray,
                 tab: np.ndarray, values: np.ndarray, weights: np.ndarray) -> None:
    """Give bins j_top..h their largest counts that leave a completion below h."""
    for j in range(j_top, h - 1, -1):
        rv = lowv[j + 1]
        rt = lowt[j + 1]
        hi_c = rv // values[j]
        if weights[j] > 0:
            hi_c = min(hi_c, rt // weights[j])
        cc = _largest_count(tab, values, weights, j, rv, rt, hi_c, 0)
        c[j] = cc
        lowv[j] = rv - cc * values[j]
        lowt[j] = rt - cc * weights[j]


@kernel
def cross_moves(h: int, mv_bins: np.ndarray, mv_delta: np.ndarray,
                mv_drop: np.ndarray) -> np.ndarray:
    """Whether each move has drop 0 and changes a bin >= h (leads to another block)."""
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    nmoves = mv_bins.shape[0]
    cross = np.zeros(nmoves, dtype=np.bool_)
    for m in range(nmoves):
        if mv_drop[m] == 0:
            for k in range(max(lo[m], h), hi[m] + 1):
                if dd[m, k - lo[m]] != 0:
                    cross[m] = True
    return cross


@kernel
def cut_blocks(
    n: int, level: int, h: int, cap: int, tab: np.ndarray, values: np.ndarray,
    weights: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, int, int]:
    """Blocks of cut bin h in descending rank: (lowest rank per block, edge sources, edge
    targets, critical path per block, count, error).

    count is -1 when the layer has more than `cap` blocks.  The walk over prefixes is the
    layer walk of `walk` restricted to the bins >= h (a prefix is kept when some
    completion below h exists, read off the rank table).  Edges as in the module
    docstring (block indices; a target always has a smaller index); a prefix edge to a
    lower-ranked block is skipped.  The critical path of a block is its states plus the
    largest critical path among its targets.  error is 1 when an edge's block was not
    listed (an internal error).
    """
    nbins = values.size
    start = np.zeros(cap + 1, dtype=np.int64)
    crit = np.zeros(cap + 1, dtype=np.int64)
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    cross = cross_moves(h, mv_bins, mv_delta, mv_drop)
    ncross = 0
    for m in range(cross.size):
        ncross += cross[m]
    src = np.zeros((cap + 1) * max(1, ncross), dtype=np.int64)
    dst = np.zeros((cap + 1) * max(1, ncross), dtype=np.int64)
    layer = tab[nbins, n, level]
    if layer <= 0:
        return start[:0], src[:0], dst[:0], crit[:0], 0, 0
    c = np.zeros(nbins, dtype=np.int64)
    q = np.zeros(nbins, dtype=np.int64)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    lowv[nbins] = n
    lowt[nbins] = level
    _fill_prefix(nbins - 1, h, c, lowv, lowt, tab, values, weights)
    count = 0
    nedges = 0
    while True:
        if count == cap:
            return start[:0], src[:0], dst[:0], crit[:0], -1, 0
        own, own_size = _prefix_rank(c, h, n, level, tab, values, weights)
        start[count] = own
        longest = 0
        for m in range(cross.size):
            if not cross[m]:
                continue
            for k in range(h, nbins):
                q[k] = c[k]
            for k in range(max(lo[m], h), hi[m] + 1):
                q[k] += dd[m, k - lo[m]]
            r, size = _prefix_rank(q, h, n, level, tab, values, weights)
            if size == 0 or r <= own:
                continue
            # the block of lowest rank r among blocks 0 .. count-1 (descending ranks)
            a = 0
            b = count - 1
            while a < b:
                mid = (a + b) // 2
                if start[mid] > r:
                    a = mid + 1
                else:
                    b = mid
            if count == 0 or start[a] != r:
                return start[:0], src[:0], dst[:0], crit[:0], 0, 1
            src[nedges] = count
            dst[nedges] = a
            nedges += 1
            longest = max(longest, crit[a])
        crit[count] = own_size + longest
        count += 1
        # the next prefix in descending rank: the lowest bin >= h that can drop drops
        moved = False
        for j in range(h, nbins):
            rv = lowv[j + 1]
            rt = lowt[j + 1]
            floor = _n_ge(tab, values, weights, j, rv, rt, c[j])
            cc = _largest_count(tab, values, weights, j, rv, rt, c[j] - 1, floor)
            if cc >= 0:
                c[j] = cc
                lowv[j] = rv - cc * values[j]
                lowt[j] = rt - cc * weights[j]
                _fill_prefix(j - 1, h, c, lowv, lowt, tab, values, weights)
                moved = True
                break
        if not moved:
            break
    return start[:count], src[:nedges], dst[:nedges], crit[:count], count, 0


@dataclass(frozen=True)
class BlockPlan:
    """The parallel plan of one layer (`block_plan`): blocks of cut bin `h` in descending
    rank (`start`, `size`), edges `src[e]` waits for `dst[e]`, and the critical path."""

    h: int
    start: np.ndarray
    size: np.ndarray
    src: np.ndarray
    dst: np.ndarray
    critical_states: int

    @property
    def blocks(self) -> int:
        return int(self.start.size)


def parallel_layer(size: int, threads: int) -> bool:
    """Whether a layer of `size` states runs on several threads (`layer_blocks`)."""
    return threads >= 2 and size >= PARALLEL_MIN_STATES


def block_plan(space: StateSpace, level: int, threads: int, cut: int | None = None
               ) -> BlockPlan:
    """The cheapest plan (module docstring) of one layer for `threads` threads.

    Tries the cut bins from bins (one block) down while the blocks stay within
    `max_blocks`; cost = max(critical path, states / threads) + BLOCK_COST x blocks /
    threads.  `cut`: that cut bin only (for checks).  RuntimeError (an internal error) if
    a plan is inconsistent.
    """
    spec = space.spec
    size = space.layer_size(level)
    cap = max_blocks(size)
    best: tuple[float, BlockPlan] | None = None
    for h in range(spec.nbins, 0, -1) if cut is None else (cut,):
        start, src, dst, crit, count, err = cut_blocks(
            spec.n, level, h, cap, space.tab, spec.values, spec.weights, spec.mv_bins,
            spec.mv_delta, spec.mv_drop,
        )
        if err:
            raise RuntimeError(f"block plan of level {level}: an edge left the layer")
        if count < 0:
            break
        sizes = np.diff(np.concatenate(([size], start)))
        sizes = -sizes
        if int(sizes.sum()) != size or (count and int(sizes.min()) <= 0):
            raise RuntimeError(f"block plan of level {level}: blocks do not cover the layer")
        critical = int(crit.max()) if count else 0
        cost = max(critical, size / threads) + BLOCK_COST * count / threads
        if best is None or cost < best[0]:
            best = (cost, BlockPlan(h, start, sizes, src, dst, critical))
    if best is None:
        raise RuntimeError(f"block plan of level {level}: no cut fits")
    return best[1]


# ----------------------------------------------------------------------------- classify


@kernel(inline=True)
def _unrank(rank: int, n: int, level: int, c: np.ndarray, lowv: np.ndarray,
            lowt: np.ndarray, tab: np.ndarray, values: np.ndarray,
            weights: np.ndarray) -> None:
    """The state of a rank in its layer (c, with lowv/lowt as the walk keeps them)."""
    nbins = values.size
    lowv[nbins] = n
    lowt[nbins] = level
    rest = rank
    for k in range(nbins - 1, -1, -1):
        v = lowv[k + 1]
        t = lowt[k + 1]
        total = _tab(tab, k + 1, v, t)
        hi_c = v // values[k]
        if weights[k] > 0:
            hi_c = min(hi_c, t // weights[k])
        # states with this bin below cc: total - n_ge(cc); take the largest cc with
        # total - n_ge(cc) <= rest, i.e. n_ge(cc) > total - rest - 1
        cc = _largest_count(tab, values, weights, k, v, t, hi_c, total - rest - 1)
        rest -= total - _n_ge(tab, values, weights, k, v, t, cc)
        c[k] = cc
        lowv[k] = v - cc * values[k]
        lowt[k] = t - cc * weights[k]


@kernel(inline=True)
def _edge_slot(x: int, blk: int, start: np.ndarray, size: np.ndarray, layer: int) -> int:
    """-1 when byte x of block blk is private (all its ranks in the layer lie in the
    block), else the block's edge slot of that byte (0: its first byte, 1: its last)."""
    first = start[blk]
    end = first + size[blk]
    if x * 8 >= first and min(x * 8 + 8, layer) <= end:
        return -1
    return 0 if x == first >> 3 else 1


@kernel(inline=True)
def _block_of(r: int, start: np.ndarray) -> int:
    """Index of the block holding rank r (blocks in descending rank)."""
    a = 0
    b = start.size - 1
    while a < b:
        mid = (a + b) // 2
        if start[mid] > r:
            a = mid + 1
        else:
            b = mid
    return a


@kernel
def classify_blocks_2p(
    n: int, level: int, layer: int, tab: np.ndarray, values: np.ndarray,
    weights: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray,
    max_drop: int, bits: np.ndarray, base: np.ndarray, edges: np.ndarray,
    reach: np.ndarray, use_reach: bool, batch: np.ndarray, start: np.ndarray,
    size: np.ndarray,
) -> tuple[int, int, int, int]:
    """A batch of ready blocks (two players): (P-positions, moves examined, bad, error).

    Each block is walked from its highest rank down, exactly as `classify_layer_2p` walks
    a layer.  A bit of this layer at rank r lives in `bits` (layer at byte base[0]) when
    its byte is private to r's block, else in that block's edge byte `edges[block, slot]`
    (module docstring).  bad: -1 or the least rank of a state with a drop-0 move that does
    not raise its rank; error: 0 or ERR_WALK.
    """
    nbins = values.size
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    c = np.zeros(nbins, dtype=np.int64)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    suf = np.zeros((max_drop + 1, nbins + 1), dtype=np.int64)
    cand = np.zeros(mv_bins.shape[0], dtype=np.int64)
    unit = is_unit_game(values, weights)
    b0 = base[0]
    p_count = 0
    examined = 0
    bad = -1
    for q in range(batch.size):
        blk = batch[q]
        first = start[blk]
        top = first + size[blk] - 1
        _unrank(top, n, level, c, lowv, lowt, tab, values, weights)
        suf[:, nbins] = 0
        _terms(nbins - 1, lowv, lowt, tab, suf)
        for i in range(top, first - 1, -1):
            if i < top:
                j = _step_down(c, lowv, lowt, tab, values, weights, unit)
                if j < 0:
                    return p_count, examined, bad, ERR_WALK
                _terms(j, lowv, lowt, tab, suf)
            if suf[0, 0] != i:
                return p_count, examined, bad, ERR_WALK
            if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
                continue
            win = False
            nl = _legal_moves(c, mv_bins, mv_delta, cand)
            for z in range(nl):
                m = cand[z]
                d = mv_drop[m]
                r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                                   i - suf[0, lo[m]], suf[d, hi[m] + 1])
                examined += 1
                if d == 0:
                    if r <= i:
                        bad = i if bad < 0 else min(bad, i)
                        break
                    owner = blk if r <= top else _block_of(r, start)
                    slot = _edge_slot(r >> 3, owner, start, size, layer)
                    x = bits[b0 + (r >> 3)] if slot < 0 else edges[owner, slot]
                else:
                    x = bits[base[d] + (r >> 3)]
                if (x >> (r & 7)) & 1 == 0:
                    win = True
                    break
            if win:
                slot = _edge_slot(i >> 3, blk, start, size, layer)
                if slot < 0:
                    bits[b0 + (i >> 3)] |= np.uint8(1 << (i & 7))
                else:
                    edges[blk, slot] |= np.uint8(1 << (i & 7))
            else:
                p_count += 1
    return p_count, examined, bad, 0


@kernel
def classify_blocks_multi(
    n: int, level: int, layer: int, tab: np.ndarray, values: np.ndarray,
    weights: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray,
    max_drop: int, players: int, planes: np.ndarray, base: np.ndarray, edges: np.ndarray,
    reach: np.ndarray, use_reach: bool, batch: np.ndarray, start: np.ndarray,
    size: np.ndarray,
) -> tuple[int, int, int]:
    """A batch of ready blocks (P players): (moves examined, bad, error); the coalition
    bits of `classify.classify_layer_multi`, stored as in `classify_blocks_2p` with one
    plane per offset (`edges[block, players * slot + plane]`)."""
    nbins = values.size
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    c = np.zeros(nbins, dtype=np.int64)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    suf = np.zeros((max_drop + 1, nbins + 1), dtype=np.int64)
    cand = np.zeros(mv_bins.shape[0], dtype=np.int64)
    unit = is_unit_game(values, weights)
    full = np.uint64(0xFFFFFFFFFFFFFFFF) >> np.uint64(64 - players)
    b0 = base[0]
    examined = 0
    bad = -1
    for q in range(batch.size):
        blk = batch[q]
        first = start[blk]
        top = first + size[blk] - 1
        _unrank(top, n, level, c, lowv, lowt, tab, values, weights)
        suf[:, nbins] = 0
        _terms(nbins - 1, lowv, lowt, tab, suf)
        for i in range(top, first - 1, -1):
            if i < top:
                j = _step_down(c, lowv, lowt, tab, values, weights, unit)
                if j < 0:
                    return examined, bad, ERR_WALK
                _terms(j, lowv, lowt, tab, suf)
            if suf[0, 0] != i:
                return examined, bad, ERR_WALK
            if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
                continue
            any0 = False
            allr = full
            nl = _legal_moves(c, mv_bins, mv_delta, cand)
            moved = nl > 0
            for z in range(nl):
                m = cand[z]
                d = mv_drop[m]
                r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                                   i - suf[0, lo[m]], suf[d, hi[m] + 1])
                examined += 1
                owner = -1
                slot = -1
                if d == 0:
                    if r <= i:
                        bad = i if bad < 0 else min(bad, i)
                    owner = blk if i < r <= top else _block_of(r, start)
                    slot = _edge_slot(r >> 3, owner, start, size, layer)
                sh = r & 7
                for p in range(players):
                    if slot >= 0:
                        x = edges[owner, players * slot + p]
                    else:
                        x = planes[p, base[d] + (r >> 3)]
                    if (x >> sh) & 1 == 0:
                        o = p - 1 if p > 0 else players - 1
                        allr &= ~(np.uint64(1) << np.uint64(o))
                    elif p == 1:
                        any0 = True
                if any0 and (allr & ~np.uint64(1)) == 0:
                    break
            if moved:
                mask = allr & ~np.uint64(1)
                if any0:
                    mask |= np.uint64(1)
            else:
                mask = np.uint64(2)
            slot = _edge_slot(i >> 3, blk, start, size, layer)
            for p in range(players):
                if (mask >> np.uint64(p)) & np.uint64(1):
                    if slot < 0:
                        planes[p, b0 + (i >> 3)] |= np.uint8(1 << (i & 7))
                    else:
                        edges[blk, players * slot + p] |= np.uint8(1 << (i & 7))
    return examined, bad, 0


@kernel
def grade_blocks_2p(
    n: int, level: int, tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
    mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray, max_drop: int,
    rem: np.ndarray, gru: np.ndarray, base: np.ndarray, want_grundy: bool, misere: bool,
    reach: np.ndarray, use_reach: bool, batch: np.ndarray, start: np.ndarray,
    size: np.ndarray,
) -> tuple[int, int, int, int, int]:
    """A batch of ready blocks with one value per state: (P-positions, moves examined,
    bad, error, largest Grundy value or -1).

    The values of `classify.grade_layer_2p` (remoteness, whose parity is the class, and
    with `want_grundy` the Grundy values), each block walked from its highest rank down.
    Every state owns its own element of `rem` and `gru`, so blocks write the layer's
    arrays directly (no edge bytes): a block writes only its own states' elements and reads
    another block's only after that block finished (module docstring).  bad: -1, -2 (a
    remoteness above `classify.REMOTENESS_MAX`, stored saturated) or the least rank of a
    state with a drop-0 move that does not raise its rank; error: 0 or ERR_WALK.
    """
    nbins = values.size
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    c = np.zeros(nbins, dtype=np.int64)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    suf = np.zeros((max_drop + 1, nbins + 1), dtype=np.int64)
    nmoves = mv_bins.shape[0]
    cand = np.zeros(nmoves, dtype=np.int64)
    stamp = np.full(nmoves + 2, -1, dtype=np.int64)
    unit = is_unit_game(values, weights)
    lose = 1 if misere else 0
    top_value = 0xFFFF
    b0 = base[0]
    p_count = 0
    examined = 0
    bad = -1
    gmax = -1
    for q in range(batch.size):
        blk = batch[q]
        first = start[blk]
        top = first + size[blk] - 1
        _unrank(top, n, level, c, lowv, lowt, tab, values, weights)
        suf[:, nbins] = 0
        _terms(nbins - 1, lowv, lowt, tab, suf)
        for i in range(top, first - 1, -1):
            if i < top:
                j = _step_down(c, lowv, lowt, tab, values, weights, unit)
                if j < 0:
                    return p_count, examined, bad, ERR_WALK, gmax
                _terms(j, lowv, lowt, tab, suf)
            if suf[0, 0] != i:
                return p_count, examined, bad, ERR_WALK, gmax
            if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
                continue
            best = top_value + 1
            worst = -1
            nl = _legal_moves(c, mv_bins, mv_delta, cand)
            for z in range(nl):
                m = cand[z]
                d = mv_drop[m]
                r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                                   i - suf[0, lo[m]], suf[d, hi[m] + 1])
                examined += 1
                if d == 0 and r <= i:
                    bad = i if bad < 0 else min(bad, i)
                    break
                x = np.int64(rem[base[d] + r])
                if x & 1 == lose and x < best:
                    best = x
                if x > worst:
                    worst = x
                if want_grundy:
                    g = np.int64(gru[base[d] + r])
                    if g <= nmoves:
                        stamp[g] = i
            if best <= top_value:
                v = best + 1
            elif nl == 0:
                v = 0
            else:
                v = worst + 1
            if v > top_value:
                v = top_value
                bad = -2 if bad == -1 else bad
            rem[b0 + i] = v
            if v & 1 == lose:
                p_count += 1
            if want_grundy:
                g = 0
                while stamp[g] == i:
                    g += 1
                gru[b0 + i] = g
                if g > gmax:
                    gmax = g
    return p_count, examined, bad, 0, gmax


@kernel
def release_blocks(batch: np.ndarray, dptr: np.ndarray, dependants: np.ndarray,
                   pending: np.ndarray, size: np.ndarray) -> tuple[np.ndarray, int]:
    """Mark a batch finished: every block waiting for one of them waits for one block less;
    returns (the blocks that wait for nothing now, their states).  Called under the
    schedule's lock."""
    total = 0
    for q in range(batch.size):
        b = batch[q]
        total += dptr[b + 1] - dptr[b]
    fresh = np.zeros(total, dtype=np.int64)
    k = 0
    states = 0
    for q in range(batch.size):
        b = batch[q]
        for e in range(dptr[b], dptr[b + 1]):
            d = dependants[e]
            pending[d] -= 1
            if pending[d] == 0:
                fresh[k] = d
                k += 1
                states += size[d]
    return fresh[:k], states


@kernel
def merge_edges(planes: np.ndarray, b0: int, edges: np.ndarray, start: np.ndarray,
                size: np.ndarray, layer: int) -> None:
    """OR every block's edge bytes into the layer's bits (after every block finished)."""
    nplanes = planes.shape[0]
    for blk in range(start.size):
        first = start[blk] >> 3
        last = (start[blk] + size[blk] - 1) >> 3
        for x in (first, last):
            slot = _edge_slot(x, blk, start, size, layer)
            if slot >= 0:
                for p in range(nplanes):
                    planes[p, b0 + x] |= edges[blk, nplanes * slot + p]


def _run_schedule(plan: BlockPlan, threads: int, pool: ThreadPoolExecutor, level: int,
                  run_batch: Callable[[np.ndarray], tuple[int, int, int, int, int]]
                  ) -> dict:
    """Run every block of `plan` on `threads` threads of `pool` (module docstring,
    "Schedule"); `run_batch(batch)` classifies a batch of ready blocks and returns
    (P-positions, moves examined, bad, error, largest Grundy value or -1).  Returns the
    sums: {"pc", "ex", "bad" (least bad rank, -2 for a saturated value, else -1),
    "gmax"}.  RuntimeError on an internal error."""
    nblk = plan.blocks
    order = np.argsort(plan.dst, kind="stable")
    dependants = plan.src[order]
    dptr = np.searchsorted(plan.dst[order], np.arange(nblk + 1))
    pending = np.bincount(plan.src, minlength=nblk).astype(np.int64)
    ready = [int(b) for b in np.flatnonzero(pending == 0)]
    state = {"done": 0, "pc": 0, "ex": 0, "bad": -1, "err": 0, "ready_states": 0,
             "running": 0, "gmax": -1}
    state["ready_states"] = int(plan.size[ready].sum()) if ready else 0
    cond = threading.Condition()

    def take() -> np.ndarray | None:
        """A batch of ready blocks (under the lock), or None when the layer is done."""
        while not ready and state["done"] < nblk and not state["err"]:
            if state["running"] == 0:  # nothing ready, nothing running: cannot happen
                state["err"] |= ERR_WALK
                cond.notify_all()
                break
            cond.wait()
        if state["done"] >= nblk or state["err"]:
            return None
        state["running"] += 1
        share = min(BATCH_STATES, max(1, state["ready_states"] // threads))
        got: list[int] = []
        held = 0
        while ready and (not got or held < share):
            b = ready.pop()
            got.append(b)
            held += int(plan.size[b])
        state["ready_states"] -= held
        return np.array(got, dtype=np.int64)

    def work() -> None:
        try:
            run()
        except BaseException:
            with cond:
                state["err"] |= ERR_WALK
                cond.notify_all()
            raise

    def run() -> None:
        while True:
            with cond:
                batch = take()
            if batch is None:
                return
            pc, ex, bad, err, gmax = run_batch(batch)
            with cond:
                state["pc"] += int(pc)
                state["ex"] += int(ex)
                if bad >= 0 and (state["bad"] < 0 or bad < state["bad"]):
                    state["bad"] = int(bad)
                elif bad == -2 and state["bad"] == -1:
                    state["bad"] = -2
                state["gmax"] = max(state["gmax"], int(gmax))
                state["err"] |= int(err)
                state["done"] += batch.size
                state["running"] -= 1
                fresh, states = release_blocks(batch, dptr, dependants, pending, plan.size)
                if fresh.size:
                    ready.extend(fresh.tolist())
                    state["ready_states"] += int(states)
                cond.notify_all()

    futures = [pool.submit(work) for _ in range(threads)]
    for f in futures:
        f.result()
    if state["err"] or state["done"] != nblk:
        raise RuntimeError(f"the parallel walk of level {level} lost step with the ranks")
    return state


def layer_blocks(
    space: StateSpace, level: int, players: int, buf: np.ndarray, base: np.ndarray,
    reach: np.ndarray, use_reach: bool, threads: int, pool: ThreadPoolExecutor,
) -> tuple[int, int, int]:
    """Classify one layer into `buf` (planes x bytes, as `classify._flight` lays it out)
    with `threads` threads of `pool`; returns (P-positions (two players; else 0), moves
    examined, bad) as the serial kernels count them.  RuntimeError on an internal error."""
    spec = space.spec
    layer = space.layer_size(level)
    plan = block_plan(space, level, threads)
    planes = buf.shape[0]
    edges = np.zeros((plan.blocks, 2 * planes), dtype=np.uint8)
    args = (spec.n, level, layer, space.tab, spec.values, spec.weights, spec.mv_bins,
            spec.mv_delta, spec.mv_drop, space.max_drop)

    def run_batch(batch: np.ndarray) -> tuple[int, int, int, int, int]:
        if players == 2:
            pc, ex, bad, err = classify_blocks_2p(
                *args, buf[0], base, edges, reach, use_reach, batch, plan.start, plan.size)
            return pc, ex, bad, err, -1
        ex, bad, err = classify_blocks_multi(
            *args, players, buf, base, edges, reach, use_reach, batch, plan.start,
            plan.size)
        return 0, ex, bad, err, -1

    state = _run_schedule(plan, threads, pool, level, run_batch)
    merge_edges(buf, int(base[0]), edges, plan.start, plan.size, layer)
    return state["pc"], state["ex"], state["bad"]


def layer_grades(
    space: StateSpace, level: int, rem: np.ndarray, gru: np.ndarray, base: np.ndarray,
    grundy: bool, misere: bool, reach: np.ndarray, use_reach: bool, threads: int,
    pool: ThreadPoolExecutor,
) -> tuple[int, int, int, int]:
    """The values of `classify.grade_layer_2p` for one layer (`rem`, `gru` laid out as
    `classify._value_flight` lays them out) on `threads` threads of `pool`, scheduled as
    `layer_blocks` schedules the bits; returns (P-positions, moves examined, bad, largest
    Grundy value or -1) as the serial kernel gives them.  RuntimeError on an internal
    error."""
    spec = space.spec
    plan = block_plan(space, level, threads)
    args = (spec.n, level, space.tab, spec.values, spec.weights, spec.mv_bins,
            spec.mv_delta, spec.mv_drop, space.max_drop, rem, gru, base, grundy, misere,
            reach, use_reach)

    def run_batch(batch: np.ndarray) -> tuple[int, int, int, int, int]:
        return grade_blocks_2p(*args, batch, plan.start, plan.size)

    state = _run_schedule(plan, threads, pool, level, run_batch)
    return state["pc"], state["ex"], state["bad"], state["gmax"]
