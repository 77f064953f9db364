"""The layer walk: one layer's states in descending rank without listing them.

States of a layer (value n, one level) are ranked co-lexicographically (`core.statespace`).
The walk visits them in descending rank like an odometer (`_walk_start`, `_step_down`: the
lowest bin whose count can drop drops, the bins below refill with their largest feasible
counts, feasibility read off the rank table), and its users compute the neighbours' ranks
on the fly with the one ranking step (`core.listing.neighbour_rank`) from suffix sums of
the co-lexicographic ranking: a move changes only the rank terms of the bins between its
lowest and highest touched bin (`core.listing.move_spans`, `move_dense`), and a step of the
walk only those of the bins it changed (`_terms` keeps the suffix rows of the moves out of
every drop up to date as the walk moves; `core.listing._suffix_in` those of the moves in).
Two users: optimal play's classification kernels (`optimal.classify`, `optimal.waves`:
successors) and the listing of the moves into a layer (`core.listing.list_moves_in`:
sources).  Each state's recomputed rank is checked against the walk's position by every
kernel that uses the walk.

For a state taken from a listed layer (the reachability kernel `classify.reach_layer` walks
`StateSpace.states`) the same sums come from `core.listing.rank_prefix` /
`shifted_suffix`, exactly as in the states-based listing `core.listing.list_moves`.  Every
function here is a numba kernel or an inlined kernel helper; `walk_layer` exists for checks
and tests.

Relation to the state space's own primitives.  The ranks are those of
`statespace.rank_of` (the walk checks every state's rank against its position), and
`_legal_moves` is `statespace.move_applies` for moves out of a state, minus its level-range
test (a legal move's successor is a count vector, so its level lies in 0 .. level).  The
walk keeps its own versions because they are faster where solve spends its time, measured
in one process, alternating, on a shared two-core machine (min of 5-9 runs):
`move_applies` in the classification kernels made `layer_classes` 14% slower at the
standard game n = 220 (4.00 s against 3.51 s) and 9% slower at twos n = 80, and the
reachability sweep 44% slower at twos n = 80; `rank_of` per move (O(bins)) instead of
`neighbour_rank` (O(bins the move spans) after an O(bins) `rank_prefix` per state) made the
reachability kernel 21% slower at twos n = 90 (1.86 s against 1.54 s), 5% faster at
reversed n = 160 and equal at tribonacci n = 200.
"""

from __future__ import annotations

import numpy as np
from zeckenum.core.jit import kernel


@kernel(inline=True)
def _tab(tab: np.ndarray, k: int, v: int, t: int) -> int:
    """tab[k, v, t], or 0 outside the table (negative value or level)."""
    if v < 0 or t < 0:
        return 0
    return tab[k, v, t]


@kernel(inline=True)
def _n_ge(tab: np.ndarray, values: np.ndarray, weights: np.ndarray, j: int, rv: int, rt: int,
          cc: int) -> int:
    """Vectors over bins 0..j of value rv and level rt with at least cc tokens in bin j."""
    return _tab(tab, j + 1, rv - cc * values[j], rt - cc * weights[j])


@kernel(inline=True)
def _largest_count(tab: np.ndarray, values: np.ndarray, weights: np.ndarray, j: int, rv: int,
                   rt: int, hi_c: int, floor: int) -> int:
    """Largest cc in [0, hi_c] with _n_ge(cc) > floor, or -1 (_n_ge falls as cc grows).

    With floor = _n_ge(c + 1) for the answer c, bin j can hold exactly c tokens."""
    if hi_c < 0 or _n_ge(tab, values, weights, j, rv, rt, 0) <= floor:
        return -1
    if _n_ge(tab, values, weights, j, rv, rt, hi_c) > floor:
        return hi_c
    lo_c = 0  # invariant: _n_ge(lo_c) > floor >= _n_ge(hi_c)
    while hi_c - lo_c > 1:
        mid = (lo_c + hi_c) // 2
        if _n_ge(tab, values, weights, j, rv, rt, mid) > floor:
            lo_c = mid
        else:
            hi_c = mid
    return lo_c


@kernel(inline=True)
def _fill(j_top: int, c: np.ndarray, lowv: np.ndarray, lowt: np.ndarray, tab: np.ndarray,
          values: np.ndarray, weights: np.ndarray, unit: bool) -> None:
    """Give bins j_top..0 their largest feasible counts, highest bin first (the first state
    in descending rank below fixed higher bins); lowv/lowt[j_top + 1] must be set.  `unit`:
    every weight is 1 (level = token count), which gives a tighter first guess."""
    for j in range(j_top, -1, -1):
        rv = lowv[j + 1]
        rt = lowt[j + 1]
        hi_c = rv // values[j]
        if weights[j] > 0:
            hi_c = min(hi_c, rt // weights[j])
        if unit and j > 0:
            # token layering: the rt - cc tokens left below bin j are worth at least
            # values[0] each (exact for j = 1 in the standard game)
            hi_c = min(hi_c, (rv - rt * values[0]) // (values[j] - values[0]))
        cc = _largest_count(tab, values, weights, j, rv, rt, hi_c, 0)
        c[j] = cc
        lowv[j] = rv - cc * values[j]
        lowt[j] = rt - cc * weights[j]


@kernel(inline=True)
def _step_down(c: np.ndarray, lowv: np.ndarray, lowt: np.ndarray, tab: np.ndarray,
               values: np.ndarray, weights: np.ndarray, unit: bool) -> int:
    """Move to the next state in descending rank; returns the highest changed bin, or -1
    after the last state.  The lowest bin whose count can drop drops to its next feasible
    count; the bins below it are refilled largest first."""
    for j in range(1, values.size):
        rv = lowv[j + 1]
        rt = lowt[j + 1]
        floor = _n_ge(tab, values, weights, j, rv, rt, c[j])
        cc = _largest_count(tab, values, weights, j, rv, rt, c[j] - 1, floor)
        if cc >= 0:
            c[j] = cc
            lowv[j] = rv - cc * values[j]
            lowt[j] = rt - cc * weights[j]
            _fill(j - 1, c, lowv, lowt, tab, values, weights, unit)
            return j
    return -1


@kernel(inline=True)
def _terms(j_top: int, lowv: np.ndarray, lowt: np.ndarray, tab: np.ndarray,
           suf: np.ndarray) -> None:
    """Recompute suf[d, j] for j <= j_top (bins above j_top unchanged; see `_prepare`)."""
    for d in range(suf.shape[0]):
        for k in range(j_top, -1, -1):
            suf[d, k] = (
                suf[d, k + 1]
                + _tab(tab, k + 1, lowv[k + 1], lowt[k + 1] - d)
                - _tab(tab, k + 1, lowv[k], lowt[k] - d)
            )


@kernel(inline=True)
def _walk_start(n: int, level: int, c: np.ndarray, lowv: np.ndarray, lowt: np.ndarray,
                tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
                suf: np.ndarray, unit: bool) -> None:
    """The highest-ranked state of the layer, with its suffix sums."""
    nb_ = values.size
    lowv[nb_] = n
    lowt[nb_] = level
    suf[:, nb_] = 0
    _fill(nb_ - 1, c, lowv, lowt, tab, values, weights, unit)
    _terms(nb_ - 1, lowv, lowt, tab, suf)


@kernel(inline=True)
def is_unit_game(values: np.ndarray, weights: np.ndarray) -> bool:
    """Whether bin 1 has value 1 and every level weight is 1 (the walk's fast case)."""
    unit = values[0] == 1
    for k in range(values.size):
        unit = unit and weights[k] == 1
    return unit


@kernel
def walk_layer(n: int, level: int, size: int, tab: np.ndarray, values: np.ndarray,
               weights: np.ndarray) -> np.ndarray:
    """The layer's states in descending rank as produced by the walk (for checks and tests:
    row q is the state of rank size - 1 - q)."""
    nbins = values.size
    out = np.zeros((size, nbins), dtype=np.int64)
    c = np.zeros(nbins, dtype=np.int64)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    suf = np.zeros((1, nbins + 1), dtype=np.int64)
    unit = is_unit_game(values, weights)
    _walk_start(n, level, c, lowv, lowt, tab, values, weights, suf, unit)
    for q in range(size):
        if q > 0 and _step_down(c, lowv, lowt, tab, values, weights, unit) < 0:
            break
        out[q] = c
    return out


@kernel(inline=True)
def _legal_moves(c: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray,
                 out: np.ndarray) -> int:
    """Write the indices of the moves legal at c into out[:k]; returns k."""
    k = 0
    for m in range(mv_bins.shape[0]):
        if _legal(c, m, mv_bins, mv_delta):
            out[k] = m
            k += 1
    return k


@kernel(inline=True)
def _legal(c: np.ndarray, m: int, mv_bins: np.ndarray, mv_delta: np.ndarray) -> bool:
    for j in range(mv_bins.shape[1]):
        if c[mv_bins[m, j]] + mv_delta[m, j] < 0:
            return False
    return True

