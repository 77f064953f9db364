"""Move listing: every move into or out of every state of one layer, with ranks and weights.

This is the one place where moves are listed and their other end is ranked.  Counting and
random play list the moves *into* each layer (`moves_in`, through the prefetcher
`prefetch_listings` of the first sweep, and again per shard when the moves are not kept);
the small-game tools (move statistics, strategies) list the moves *out of* it
(`moves_out`).  Both return a `LayerMoves`.  `moves_out` lists the layer's states
(`StateSpace.states`) and runs the kernel `list_moves` on them; `moves_in`, the hot one,
runs `list_moves_in`, which walks the layer instead (`core.walk`) and gives the same rows
as `list_moves` with sign -1 (`benchmarks/bench_listing.py`: 1.66 times faster over every
layer of n = 300, 37.6 against 62.4 ns per move on one core).

Ranking the other end incrementally.  With the co-lexicographic rank of
`statespace.rank_of`, the rank of a count vector c is the sum over bins k of

    term_k = tab[k+1, lowv[k+1], lowt[k+1]] - tab[k+1, lowv[k], lowt[k]],

lowv[k] / lowt[k] the value / level of bins 0..k-1.  A move m changes only the bins
lo[m] .. hi[m] (`move_spans`).  The state at its other end has the same counts elsewhere,
the same value, and a level differing by its drop d: below lo[m] its terms are c's terms,
and above hi[m] they are c's terms with every level shifted by d.  So per state the prefix
sums of its terms (`rank_prefix`) and, once per drop met, the suffix sums at that shift
(`shifted_suffix`) are computed, then each move costs O(hi[m] - lo[m] + 1) table reads
(`neighbour_rank`).  These three inline kernels are the core ranking primitive; any kernel
that walks states and needs the ranks of their neighbours can use them the same way (see
`list_moves`).  Walking the layer (`list_moves_in`), the prefix sums come from the walk's
own suffix rows (pre[k] = rank - suf[0, k]) and the shifted rows change only below the
highest bin a step changed (`_suffix_in`).

Topological order.  Inside a layer, ascending rank must be a topological order (see
`statespace`): every move inside a layer must lead to a higher rank.  `list_moves` and
`list_moves_in` report the first state breaking it, and `refuse_order` is the one error every
sweep raises for it.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import NoReturn

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.statespace import StateSpace, move_applies
from zeckenum.core.walk import _fill, _step_down, is_unit_game
from zeckenum.errors import InputError
from zeckenum.rules.model import GameSpec

# ----------------------------------------------------------------------------- move shapes


@kernel
def move_spans(mv_bins: np.ndarray, mv_delta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(lo, hi): per move, the lowest and highest bin whose count it changes (0-padded slots
    ignored); (0, -1) for a move that changes nothing."""
    nm = mv_bins.shape[0]
    lo = np.zeros(nm, dtype=np.int64)
    hi = np.full(nm, -1, dtype=np.int64)
    for m in range(nm):
        first = True
        for j in range(mv_bins.shape[1]):
            if mv_delta[m, j] != 0:
                b = mv_bins[m, j]
                if first or b < lo[m]:
                    lo[m] = b
                if first or b > hi[m]:
                    hi[m] = b
                first = False
    return lo, hi


@kernel
def move_dense(mv_bins: np.ndarray, mv_delta: np.ndarray, lo: np.ndarray,
               hi: np.ndarray) -> np.ndarray:
    """dd[m, j]: change of bin lo[m] + j under move m, for j = 0 .. hi[m] - lo[m]."""
    nm = mv_bins.shape[0]
    width = 1
    for m in range(nm):
        width = max(width, hi[m] - lo[m] + 1)
    dd = np.zeros((nm, width), dtype=np.int64)
    for m in range(nm):
        for j in range(mv_bins.shape[1]):
            if mv_delta[m, j] != 0:
                dd[m, mv_bins[m, j] - lo[m]] += mv_delta[m, j]
    return dd


# ----------------------------------------------------------------------------- ranking


@kernel(inline=True)
def rank_prefix(
    c: np.ndarray, tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
    lowv: np.ndarray, lowt: np.ndarray, pre: np.ndarray, suf: np.ndarray, ready: np.ndarray,
) -> int:
    """Prefix data of the count vector c for `neighbour_rank`; returns c's rank.

    lowv[k], lowt[k]: value and level of bins 0..k-1; pre[k]: sum of c's rank terms of the
    bins below k (module docstring).  suf[0, k] = sum of the terms of bins k and above
    (drop 0); the rows suf[d > 0] are filled on first use (`shifted_suffix`), ready[d]
    tells whether they are (all cleared here).
    """
    nb_ = values.size
    lowv[0] = 0
    lowt[0] = 0
    pre[0] = 0
    for k in range(nb_):
        lowv[k + 1] = lowv[k] + c[k] * values[k]
        lowt[k + 1] = lowt[k] + c[k] * weights[k]
        pre[k + 1] = pre[k] + tab[k + 1, lowv[k + 1], lowt[k + 1]] - tab[k + 1, lowv[k], lowt[k]]
    total = pre[nb_]
    for k in range(nb_ + 1):
        suf[0, k] = total - pre[k]
    ready[0] = True
    for d in range(1, ready.size):
        ready[d] = False
    return total


@kernel(inline=True)
def _tab(tab: np.ndarray, k: int, v: int, t: int) -> int:
    """tab[k, v, t], or 0 for a level outside the table (a negative level holds no vector;
    above the top only for moves that do not apply, whose ranks are never used)."""
    if t < 0 or t >= tab.shape[2]:
        return 0
    return tab[k, v, t]


@kernel(inline=True)
def shifted_suffix(
    shift: int, tab: np.ndarray, lowv: np.ndarray, lowt: np.ndarray, row: np.ndarray,
) -> None:
    """row[k] = sum of the rank terms of bins k and above with every level moved by `shift`
    (the other end's level minus this state's: +d for a move in of drop d, -d for a move
    out), from `rank_prefix`'s lowv / lowt."""
    nb_ = lowv.size - 1
    row[nb_] = 0
    for k in range(nb_ - 1, -1, -1):
        row[k] = (row[k + 1] + _tab(tab, k + 1, lowv[k + 1], lowt[k + 1] + shift)
                  - _tab(tab, k + 1, lowv[k], lowt[k] + shift))


@kernel(inline=True)
def neighbour_rank(
    c: np.ndarray, m: int, sign: int, lo: np.ndarray, hi: np.ndarray, dd: np.ndarray,
    tab: np.ndarray, values: np.ndarray, weights: np.ndarray, lowv: np.ndarray,
    lowt: np.ndarray, below: int, above: int,
) -> int:
    """Rank, in its own layer, of c + sign * (move m's change): the destination of move m
    out of c (sign +1) or the source of move m into c (sign -1).  The move must apply.

    Only the terms of bins lo[m] .. hi[m] are recomputed; the others come in as two sums:
    `below`, the terms of c's bins under lo[m] (pre[lo[m]] from `rank_prefix`, or c's rank
    minus suf[0, lo[m]]), and `above`, the terms of the bins over hi[m] at the other end's
    level (row[hi[m] + 1] of the suffix row at the move's level shift: suf[0] for drop 0,
    else `shifted_suffix(-sign * drop)`).  lowv, lowt from `rank_prefix` (or the solver's
    walk, which keeps them); dd from `move_dense`.  The one ranking step of the listing
    (`list_moves`) and of optimal play's classification kernels (`optimal.classify`).
    """
    a = lo[m]
    r = below + above
    v = lowv[a]
    t = lowt[a]
    for k in range(a, hi[m] + 1):
        ck = c[k] + sign * dd[m, k - a]
        v2 = v + ck * values[k]
        t2 = t + ck * weights[k]
        r += tab[k + 1, v2, t2] - tab[k + 1, v, t]
        v = v2
        t = t2
    return r


# ----------------------------------------------------------------------------- weights


@kernel(inline=True)
def move_weight(
    c: np.ndarray, m: int, back: bool, mv_bins: np.ndarray, mv_delta: np.ndarray,
) -> int:
    """Weight (random model "pairs") of move m out of the state of counts c, or, with
    `back`, of move m out of the source of the move m into c: the product over the bins it
    takes from of binomial(count, tokens taken)."""
    x = 1
    for j in range(mv_bins.shape[1]):
        dl = mv_delta[m, j]
        if dl < 0:
            a = c[mv_bins[m, j]]
            if back:
                a -= dl
            b = 1
            for t in range(-dl):
                b = b * (a - t) // (t + 1)
            x *= b
    return x


# ----------------------------------------------------------------------------- listing


@kernel(inline=True)
def _largest_drop(mv_drop: np.ndarray) -> int:
    """The largest drop of any move (0 with no moves): one suffix row per drop 0..it."""
    maxd = 0
    for m in range(mv_drop.size):
        if mv_drop[m] > maxd:
            maxd = mv_drop[m]
    return maxd


@kernel
def list_moves(
    states: np.ndarray, level: int, tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
    mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray, lo: np.ndarray,
    hi: np.ndarray, dd: np.ndarray, sign: int, pairs: bool,
):
    """Every legal move into (sign -1) or out of (sign +1) every state of one layer.

    Returns (ptr, drop int8, other int64, move int32, w int64, dsum int64, bad).  The rows
    of state i are ptr[i]..ptr[i+1]-1, in ascending move index; move e is move[e] of the
    rule set, and the state at its other end has rank other[e] in layer
    level - sign * drop[e] (every count vector of value n is a state; whether it is
    reachable is the sweeps' business).  A move in from above the top of the table is not
    listed.  dsum[i] = D(i), the total weight of the moves out of state i (0 exactly when
    none).  Weights are those of the random model "pairs" (`move_weight`) when `pairs`,
    else 1 (then w is empty); w[e] is move e's weight as a move out of its source.  `bad`
    is -1, or the first state with a move inside the layer that breaks ascending-rank order.
    """
    size = states.shape[0]
    nb_ = values.size
    nmoves = mv_bins.shape[0]
    max_level = tab.shape[2] - 1
    maxd = _largest_drop(mv_drop)
    ptr = np.zeros(size + 1, dtype=np.int64)
    dsum = np.zeros(size, dtype=np.int64)
    for i in range(size):
        deg = 0
        tot = 0
        for m in range(nmoves):
            out = move_applies(states, i, m, 1, level, max_level, mv_bins, mv_delta, mv_drop)
            if sign > 0:
                if out:
                    deg += 1
            elif move_applies(states, i, m, -1, level, max_level, mv_bins, mv_delta,
                              mv_drop):
                deg += 1
            if out:
                if pairs:
                    tot += move_weight(states[i], m, False, mv_bins, mv_delta)
                else:
                    tot += 1
        ptr[i + 1] = ptr[i] + deg
        dsum[i] = tot
    total = ptr[size]
    drop = np.empty(total, dtype=np.int8)
    other = np.empty(total, dtype=np.int64)
    move = np.empty(total, dtype=np.int32)
    w = np.empty(total if pairs else 0, dtype=np.int64)
    lowv = np.zeros(nb_ + 1, dtype=np.int64)
    lowt = np.zeros(nb_ + 1, dtype=np.int64)
    pre = np.zeros(nb_ + 1, dtype=np.int64)
    suf = np.zeros((maxd + 1, nb_ + 1), dtype=np.int64)
    ready = np.zeros(maxd + 1, dtype=np.bool_)
    bad = -1
    for i in range(size):
        if ptr[i + 1] == ptr[i]:
            continue
        c = states[i]
        rank_prefix(c, tab, values, weights, lowv, lowt, pre, suf, ready)
        e = ptr[i]
        for m in range(nmoves):
            if not move_applies(states, i, m, sign, level, max_level, mv_bins, mv_delta,
                                mv_drop):
                continue
            d = mv_drop[m]
            if not ready[d]:
                shifted_suffix(-sign * d, tab, lowv, lowt, suf[d])
                ready[d] = True
            r = neighbour_rank(c, m, sign, lo, hi, dd, tab, values, weights, lowv, lowt,
                               pre[lo[m]], suf[d, hi[m] + 1])
            if d == 0 and sign * (r - i) <= 0 and bad < 0:
                bad = i
            drop[e] = d
            other[e] = r
            move[e] = m
            if pairs:
                w[e] = move_weight(states[i], m, sign < 0, mv_bins, mv_delta)
            e += 1
    return ptr, drop, other, move, w, dsum, bad


@kernel(inline=True)
def _suffix_in(j_top: int, lowv: np.ndarray, lowt: np.ndarray, tab: np.ndarray,
               suf: np.ndarray) -> None:
    """suf[d, k] for k <= j_top as `shifted_suffix(+d)` makes it (the suffix rows of the
    moves in of drop d), after a step of the walk changed the bins up to j_top; the rows
    above j_top are unchanged.  The walk's own `walk._terms` shifts the other way (moves
    out)."""
    for d in range(suf.shape[0]):
        for k in range(j_top, -1, -1):
            suf[d, k] = (suf[d, k + 1] + _tab(tab, k + 1, lowv[k + 1], lowt[k + 1] + d)
                         - _tab(tab, k + 1, lowv[k], lowt[k] + d))


ERR_LISTED = 1
"""Error flag of `list_moves_in`: the walk lost step with the ranks, or the moves listed
differ from the count the rank table gives (an internal error, never a result)."""


@kernel
def list_moves_in(
    n: int, level: int, size: int, total: int, tab: np.ndarray, values: np.ndarray,
    weights: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray,
    lo: np.ndarray, hi: np.ndarray, dd: np.ndarray, pairs: bool,
):
    """`list_moves` with sign -1 (every legal move into every state of one layer), without
    the layer's states: the layer is walked in descending rank (`walk._walk_start`,
    `walk._step_down`) and each state's suffix rows follow the walk (`_suffix_in`: only the
    bins a step changed), so no state is listed and no rank prefix is recomputed.

    `total` is the number of moves listed into the layer (`StateSpace.moves_at`, from the
    rank table); row i is written just below row i + 1, so the rows end exactly at 0 when the
    count is right.  Returns (ptr, drop, other, move, w, dsum, bad, error), the first seven
    exactly as `list_moves` returns them; error is ERR_LISTED when a state's rank from its
    suffix rows is not its place in the walk, or the rows do not fill [0, total) exactly.
    """
    nb_ = values.size
    nmoves = mv_bins.shape[0]
    max_level = tab.shape[2] - 1
    maxd = _largest_drop(mv_drop)
    ptr = np.zeros(size + 1, dtype=np.int64)
    dsum = np.zeros(size, dtype=np.int64)
    drop = np.empty(total, dtype=np.int8)
    other = np.empty(total, dtype=np.int64)
    move = np.empty(total, dtype=np.int32)
    w = np.empty(total if pairs else 0, dtype=np.int64)
    if size == 0:
        return ptr, drop, other, move, w, dsum, -1, ERR_LISTED if total else 0
    c = np.zeros(nb_, dtype=np.int64)
    lowv = np.zeros(nb_ + 1, dtype=np.int64)
    lowt = np.zeros(nb_ + 1, dtype=np.int64)
    suf = np.zeros((maxd + 1, nb_ + 1), dtype=np.int64)
    cand = np.zeros(nmoves, dtype=np.int64)
    # the level tests of `move_applies`, the same for every state of the layer
    in_level = np.zeros(nmoves, dtype=np.bool_)
    out_level = np.zeros(nmoves, dtype=np.bool_)
    for m in range(nmoves):
        in_level[m] = level + mv_drop[m] <= max_level
        out_level[m] = level - mv_drop[m] >= 0
    unit = is_unit_game(values, weights)
    lowv[nb_] = n
    lowt[nb_] = level
    _fill(nb_ - 1, c, lowv, lowt, tab, values, weights, unit)
    _suffix_in(nb_ - 1, lowv, lowt, tab, suf)
    end = total
    bad = -1
    for i in range(size - 1, -1, -1):
        if i < size - 1:
            j = _step_down(c, lowv, lowt, tab, values, weights, unit)
            if j < 0:
                return ptr, drop, other, move, w, dsum, bad, ERR_LISTED
            _suffix_in(j, lowv, lowt, tab, suf)
        if suf[0, 0] != i:
            return ptr, drop, other, move, w, dsum, bad, ERR_LISTED
        deg = 0
        tot = 0
        for m in range(nmoves):
            into = in_level[m]
            out = out_level[m]
            for s in range(mv_bins.shape[1]):
                x = c[mv_bins[m, s]]
                dl = mv_delta[m, s]
                if x + dl < 0:
                    out = False
                if x - dl < 0:
                    into = False
            if out:
                tot += move_weight(c, m, False, mv_bins, mv_delta) if pairs else 1
            if into:
                cand[deg] = m
                deg += 1
        dsum[i] = tot
        first = end - deg
        if first < 0:
            return ptr, drop, other, move, w, dsum, bad, ERR_LISTED
        ptr[i + 1] = end
        for z in range(deg):
            m = cand[z]
            d = mv_drop[m]
            r = neighbour_rank(c, m, -1, lo, hi, dd, tab, values, weights, lowv, lowt,
                               i - suf[0, lo[m]], suf[d, hi[m] + 1])
            if d == 0 and r >= i:
                bad = i  # the walk descends: the last one found is the least
            e = first + z
            drop[e] = d
            other[e] = r
            move[e] = m
            if pairs:
                w[e] = move_weight(c, m, True, mv_bins, mv_delta)
        end = first
    return ptr, drop, other, move, w, dsum, bad, ERR_LISTED if end != 0 else 0


@dataclass(frozen=True, eq=False)
class LayerMoves:
    """The moves in (sign -1) or out (sign +1) of every state of one layer.

    Compressed rows (see `list_moves`): the moves of state i are ptr[i]..ptr[i+1]-1; move
    e is move[e] of the rule set and links state i with the state of rank other[e] in layer
    level - sign * drop[e] (its source for moves in, its destination for moves out).  dsum
    is D per state (total weight of its moves out; 0 exactly for an end position), w the
    weight of each move ("pairs"; empty when every weight is 1).  `states` holds the
    layer's count vectors for moves out; moves in (`moves_in`) walk the layer without
    listing them and leave it with no rows.
    """

    level: int
    sign: int
    states: np.ndarray
    ptr: np.ndarray
    drop: np.ndarray
    other: np.ndarray
    move: np.ndarray
    w: np.ndarray
    dsum: np.ndarray

    @property
    def size(self) -> int:
        return int(self.ptr.size) - 1

    def terminals(self) -> np.ndarray:
        """Ranks of the states without any legal move (int64, ascending)."""
        return np.flatnonzero(self.dsum == 0)


def refuse_order(spec: GameSpec, level: int, rank: int) -> NoReturn:
    """The one error of a rule set whose moves inside a layer do not raise the rank (the
    layers are then not in topological order); every sweep raises it (InputError)."""
    raise InputError(
        f"rule set {spec.rules.name!r}: a move inside level {level} (at the state of rank "
        f"{rank}) does not raise the state's rank, so the layers are not in topological order"
    )


def layer_moves(
    space: StateSpace, level: int, sign: int, states: np.ndarray | None = None,
    pairs: bool = False,
) -> LayerMoves:
    """The moves into (sign -1) or out of (sign +1) every state of one layer, ranked
    (`list_moves`); refuses a rule set breaking the topological order (`refuse_order`)."""
    s = space.spec
    if states is None:
        states = space.states(level)
    lo, hi = move_spans(s.mv_bins, s.mv_delta)
    dd = move_dense(s.mv_bins, s.mv_delta, lo, hi)
    ptr, drop, other, move, w, dsum, bad = list_moves(
        states, level, space.tab, s.values, s.weights, s.mv_bins, s.mv_delta, s.mv_drop, lo,
        hi, dd, sign, pairs,
    )
    if bad >= 0:
        refuse_order(s, level, int(bad))
    return LayerMoves(level, sign, states, ptr, drop, other, move, w, dsum)


def moves_in(space: StateSpace, level: int, pairs: bool = False) -> LayerMoves:
    """Moves into every state of one layer; `other` holds each move's source rank.

    The layer is walked, not listed (`list_moves_in`: the same rows as `list_moves` with
    sign -1, about 1.7 times faster at n = 300 and without the states' int64 rows);
    refuses a rule set breaking the topological order (`refuse_order`)."""
    s = space.spec
    lo, hi = move_spans(s.mv_bins, s.mv_delta)
    dd = move_dense(s.mv_bins, s.mv_delta, lo, hi)
    ptr, drop, other, move, w, dsum, bad, err = list_moves_in(
        s.n, level, space.layer_size(level), space.moves_at(level, -1), space.tab, s.values,
        s.weights, s.mv_bins, s.mv_delta, s.mv_drop, lo, hi, dd, pairs,
    )
    if err:
        raise RuntimeError(f"the move listing of level {level} lost step with the ranks")
    if bad >= 0:
        refuse_order(s, level, int(bad))
    return LayerMoves(level, -1, np.zeros((0, s.nbins), dtype=np.int64), ptr, drop, other,
                      move, w, dsum)


def moves_out(space: StateSpace, level: int, states: np.ndarray | None = None,
              pairs: bool = False) -> LayerMoves:
    """Moves out of every state of one layer; `other` holds each move's destination rank."""
    return layer_moves(space, level, +1, states, pairs)


def prefetch_listings(
    space: StateSpace, levels: list[int], threads: int, pairs: bool = False
) -> Iterator[LayerMoves]:
    """`moves_in` of each level in turn, derived ahead.

    Listing a layer's moves needs no values, so up to `threads` layers are listed in
    parallel (the kernels release the GIL) while the caller sweeps the current one.
    """
    threads = max(1, threads)
    with ThreadPoolExecutor(max_workers=threads) as pool:
        pending: deque[Future] = deque()
        queue = iter(levels)
        for level in queue:
            pending.append(pool.submit(moves_in, space, level, pairs))
            if len(pending) > threads:
                break
        while pending:
            yield pending.popleft().result()
            nxt = next(queue, None)
            if nxt is not None:
                pending.append(pool.submit(moves_in, space, nxt, pairs))
