"""Optimal play: outcome classes of every state, the winner, and winning strategies.

Two players, normal play (the last player to move wins).  A state is a *P-position* when
the player to move loses against best play and an *N-position* when that player wins.  A
state is N exactly when some move leads to a P-position; a state without moves is P.

Three or more players (`players=P`).  For a target player x the others act as one
coalition.  A state is paired with the *turn offset* r = (player to move - x) mod P, and
win(s, r) says whether x can force being the last to move from s with offset r:

    s terminal:     win(s, r) = (r == 1)          (the last move was x's)
    r == 0:         win(s, 0) = OR  over moves s -> t of win(t, 1)
    r != 0:         win(s, r) = AND over moves s -> t of win(t, r + 1 mod P)

Player x (1-based) faces offset (1 - x) mod P at the start.  With P = 2, win(s, 0) is the
N bit and win(s, 1) its negation.  At n = 1 the start has no move: with two players the
first player, unable to move, loses; with P >= 3 nobody moved, so nobody wins.

Memory: one bit per state (two players) or one bit per state per offset (P players),
bit-packed per layer.  The sweep goes from level 0 up to the start's level and inside a
layer in descending rank, so every successor is classified first (moves lower the level or
keep it and raise the rank, see `statespace`).  Only the layers a move can still reach are
held, `max_drop + 1` at a time.

The kernels list neither states nor moves.  They walk each layer in descending rank like an
odometer (the lowest bin whose count can drop drops, the bins below refill with their
largest feasible counts, feasibility read off the rank table), and compute the successors'
ranks on the fly from suffix sums of the co-lexicographic ranking: a move changes only the
rank terms of the bins between its lowest and highest touched bin, and a step of the walk
only those of the bins it changed.  The two-player kernel stops at the first move to a
P-position.  Each state's recomputed rank is checked against the walk's position.

Reachability.  For the standard game every state of value n is reachable from the start:
build its tokens one at a time from ones, a token F(j) (j >= 3) by building F(j-2), then
F(j-1), then combining them.  So there "every state of the layers" and "every reachable
state" coincide (tests confirm it against a brute-force search).  Any other rule set first
gets a reachability sweep (`sweep_reach`, one bit per state, all layers kept) and only
reachable states are solved and counted.

At most one player can force the last move (two such strategies played against each
other would both succeed), so `winner` is well defined for any number of players.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.listing import moves_out
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.errors import InputError
from zeckenum.rules.model import STANDARD, GameSpec, RuleSet, get_rules

MAX_PLAYERS = 64


@kernel
def move_spans(mv_bins: np.ndarray, mv_delta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(lo, hi): lowest and highest 0-based bin each move changes (padding entries ignored)."""
    nm = mv_bins.shape[0]
    lo = np.zeros(nm, dtype=np.int64)
    hi = np.zeros(nm, dtype=np.int64)
    for m in range(nm):
        a = 1 << 30
        b = -1
        for j in range(mv_bins.shape[1]):
            if mv_delta[m, j] != 0:
                a = min(a, mv_bins[m, j])
                b = max(b, mv_bins[m, j])
        lo[m] = a
        hi[m] = b
    return lo, hi


@kernel(inline=True)
def _tab(tab: np.ndarray, k: int, v: int, t: int) -> int:
    """tab[k, v, t], or 0 outside the table (negative value or level)."""
    if v < 0 or t < 0:
        return 0
    return tab[k, v, t]


@kernel(inline=True)
def _prepare(
    c: np.ndarray, tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
    lowv: np.ndarray, lowt: np.ndarray, pre: np.ndarray, suf: np.ndarray,
    ready: np.ndarray,
) -> None:
    """Prefix data of one state for `_succ_rank`.

    lowv[k], lowt[k]: value and level of bins 0..k-1.  The co-lexicographic rank is
    sum_k tab[k+1, lowv[k+1], lowt[k+1]] - tab[k+1, lowv[k], lowt[k]]; pre[k] sums the terms
    of bins below k, suf[d, k] the terms of bins k and above with every level lowered by d
    (the terms above a move's highest bin, in the layer d lower).  suf[0] follows from pre;
    suf[d > 0] is filled on first use (`_suffix`), ready[d] tells whether it is.
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


@kernel(inline=True)
def _suffix(
    d: int, tab: np.ndarray, lowv: np.ndarray, lowt: np.ndarray, suf: np.ndarray,
) -> None:
    """Fill suf[d, :] (see `_prepare`)."""
    nb_ = lowv.size - 1
    suf[d, nb_] = 0
    for k in range(nb_ - 1, -1, -1):
        suf[d, k] = (
            suf[d, k + 1]
            + _tab(tab, k + 1, lowv[k + 1], lowt[k + 1] - d)
            - _tab(tab, k + 1, lowv[k], lowt[k] - d)
        )


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


@kernel(inline=True)
def _succ_rank(
    c: np.ndarray, m: int, tab: np.ndarray, values: np.ndarray, weights: np.ndarray,
    dd: np.ndarray, lo: np.ndarray, hi: np.ndarray, d: int,
    lowv: np.ndarray, lowt: np.ndarray, rank: int, suf: np.ndarray,
) -> int:
    """Rank (in its layer, d levels lower) of the state reached from c (of rank `rank`) by
    legal move m.

    Only the terms of bins lo[m] .. hi[m] change (see `_prepare`): the terms below lo[m]
    sum to rank - suf[0, lo[m]]; dd is `move_dense`.
    """
    a = lo[m]
    r = rank - suf[0, a] + suf[d, hi[m] + 1]
    v = lowv[a]
    t = lowt[a]
    for k in range(a, hi[m] + 1):
        ck = c[k] + dd[m, k - a]
        v2 = v + ck * values[k]
        t2 = t + ck * weights[k]
        r += tab[k + 1, v2, t2] - tab[k + 1, v, t]
        v = v2
        t = t2
    return r


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
def unit_game(values: np.ndarray, weights: np.ndarray) -> bool:
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
    unit = unit_game(values, weights)
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


@kernel
def classify_layer_2p(
    n: int,
    level: int,
    size: int,
    tab: np.ndarray,
    values: np.ndarray,
    weights: np.ndarray,
    mv_bins: np.ndarray,
    mv_delta: np.ndarray,
    mv_drop: np.ndarray,
    max_drop: int,
    bits: np.ndarray,
    base: np.ndarray,
    reach: np.ndarray,
    use_reach: bool,
) -> tuple[int, int, int]:
    """Outcome bits of one layer (two players); returns (P-positions, moves examined, bad).

    The layer (states of value n at `level`, `size` of them) is walked in descending rank
    without being listed (`_walk_start`, `_step_down`), keeping the rank's suffix sums up
    to date for the bins that changed.  `bits` holds the layers in flight, bit-packed: the
    layer d levels below the current one starts at byte base[d]; a set bit marks an
    N-position.  A state is N as soon as one move reaches a P-position.  With `use_reach`,
    states whose bit in `reach` (this layer, packed) is clear are skipped and left 0.
    `bad` is -1, or the rank of a state with a move inside the layer that does not raise
    the rank (the sweep order would then be wrong; the caller refuses the rule set).
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
    unit = unit_game(values, weights)
    b0 = base[0]
    p_count = 0
    examined = 0
    bad = -1
    _walk_start(n, level, c, lowv, lowt, tab, values, weights, suf, unit)
    for i in range(size - 1, -1, -1):
        # one walk step (kept inline here: as an inlined helper it ran ~15% slower)
        if i < size - 1:
            j = _step_down(c, lowv, lowt, tab, values, weights, unit)
            if j < 0:
                raise RuntimeError("layer walk ended early")
            _terms(j, lowv, lowt, tab, suf)
        if suf[0, 0] != i:
            raise RuntimeError("layer walk out of step with the ranks")
        if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
            continue
        win = False
        # legal moves first, then their successors (this split also compiles to much
        # faster code than one fused loop)
        nl = _legal_moves(c, mv_bins, mv_delta, cand)
        for q in range(nl):
            m = cand[q]
            d = mv_drop[m]
            r = _succ_rank(c, m, tab, values, weights, dd, lo, hi, d, lowv, lowt, i, suf)
            examined += 1
            if d == 0 and r <= i:
                bad = i
                break
            if (bits[base[d] + (r >> 3)] >> (r & 7)) & 1 == 0:
                win = True
                break
        if win:
            bits[b0 + (i >> 3)] |= np.uint8(1 << (i & 7))
        else:
            p_count += 1
    return p_count, examined, bad


@kernel
def classify_layer_multi(
    n: int,
    level: int,
    size: int,
    tab: np.ndarray,
    values: np.ndarray,
    weights: np.ndarray,
    mv_bins: np.ndarray,
    mv_delta: np.ndarray,
    mv_drop: np.ndarray,
    max_drop: int,
    players: int,
    planes: np.ndarray,
    base: np.ndarray,
    reach: np.ndarray,
    use_reach: bool,
) -> tuple[int, int]:
    """Coalition bits win(s, r) of one layer for `players` players; (moves examined, bad).

    planes[r] is the bit plane of offset r over the layers in flight (layer d lower starts
    at byte base[d]); bit r of a state is win(s, r) of the module docstring.  The layer
    walk, `reach`, `use_reach` and `bad` as in `classify_layer_2p`.
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
    unit = unit_game(values, weights)
    full = np.uint64(0xFFFFFFFFFFFFFFFF) >> np.uint64(64 - players)
    b0 = base[0]
    examined = 0
    bad = -1
    _walk_start(n, level, c, lowv, lowt, tab, values, weights, suf, unit)
    for i in range(size - 1, -1, -1):
        # one walk step (kept inline here: as an inlined helper it ran ~15% slower)
        if i < size - 1:
            j = _step_down(c, lowv, lowt, tab, values, weights, unit)
            if j < 0:
                raise RuntimeError("layer walk ended early")
            _terms(j, lowv, lowt, tab, suf)
        if suf[0, 0] != i:
            raise RuntimeError("layer walk out of step with the ranks")
        if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
            continue
        any0 = False  # offset 0: OR of win(t, 1)
        allr = full  # offsets r >= 1: AND of win(t, r + 1)
        nl = _legal_moves(c, mv_bins, mv_delta, cand)
        moved = nl > 0
        for q in range(nl):
            m = cand[q]
            d = mv_drop[m]
            r = _succ_rank(
                c, m, tab, values, weights, dd, lo, hi, d, lowv, lowt, i, suf,
            )
            examined += 1
            if d == 0 and r <= i:
                bad = i
            byte = base[d] + (r >> 3)
            sh = r & 7
            for q in range(players):
                if (planes[q, byte] >> sh) & 1 == 0:
                    # win(t, q) false: offset q - 1 loses its AND (offset 0 is an OR)
                    p = q - 1 if q > 0 else players - 1
                    allr &= ~(np.uint64(1) << np.uint64(p))
                elif q == 1:
                    any0 = True
            if any0 and (allr & ~np.uint64(1)) == 0:
                break  # every offset is decided: offset 0 won, offsets r >= 1 lost
        if moved:
            mask = allr & ~np.uint64(1)
            if any0:
                mask |= np.uint64(1)
        else:
            mask = np.uint64(2)
        for q in range(players):
            if (mask >> np.uint64(q)) & np.uint64(1):
                planes[q, b0 + (i >> 3)] |= np.uint8(1 << (i & 7))
    return examined, bad


@kernel
def reach_layer(
    states: np.ndarray,
    tab: np.ndarray,
    values: np.ndarray,
    weights: np.ndarray,
    mv_bins: np.ndarray,
    mv_delta: np.ndarray,
    mv_drop: np.ndarray,
    max_drop: int,
    bits: np.ndarray,
    base: np.ndarray,
) -> tuple[int, int, int]:
    """Push reachability along every move of one layer; (reached states, moves, bad).

    `bits` holds the layers in flight as in `classify_layer_2p` (a set bit: reachable from
    the start); the current layer is walked in ascending rank, so its own bits are final
    before they are read.  `bad` as in `classify_layer_2p`.
    """
    nbins = values.size
    lo, hi = move_spans(mv_bins, mv_delta)
    dd = move_dense(mv_bins, mv_delta, lo, hi)
    lowv = np.zeros(nbins + 1, dtype=np.int64)
    lowt = np.zeros(nbins + 1, dtype=np.int64)
    pre = np.zeros(nbins + 1, dtype=np.int64)
    suf = np.zeros((max_drop + 1, nbins + 1), dtype=np.int64)
    ready = np.zeros(max_drop + 1, dtype=np.bool_)
    cand = np.zeros(mv_bins.shape[0], dtype=np.int64)
    b0 = base[0]
    reached = 0
    moves = 0
    bad = -1
    for i in range(states.shape[0]):
        if (bits[b0 + (i >> 3)] >> (i & 7)) & 1 == 0:
            continue
        reached += 1
        c = states[i]
        _prepare(c, tab, values, weights, lowv, lowt, pre, suf, ready)
        nl = _legal_moves(c, mv_bins, mv_delta, cand)
        for q in range(nl):
            m = cand[q]
            d = mv_drop[m]
            if not ready[d]:
                _suffix(d, tab, lowv, lowt, suf)
                ready[d] = True
            r = _succ_rank(
                c, m, tab, values, weights, dd, lo, hi, d, lowv, lowt, i, suf,
            )
            moves += 1
            if d == 0 and r <= i:
                bad = i
            bits[base[d] + (r >> 3)] |= np.uint8(1 << (r & 7))
    return reached, moves, bad


@dataclass(frozen=True)
class SolveResult:
    """Outcome of optimal play for one game.

    winner       1 or 2 (two players); for P >= 3 the player who can force the last move,
                 None when nobody can
    states       number of states reachable from the start (all solved)
    p_positions  number of P-positions among them (two players; None for P >= 3)
    forced_win   player (1-based, as a string) -> whether that player can force the last
                 move against the coalition of all others
    start_moves  move name -> True when it wins for the player to move at the start (two
                 players; with P >= 3: when it keeps player 1's forced win)
    classes      only with keep_classes=True: per level, two players: bool array over
                 ranks, True for an N-position; P players: bool array (ranks, P), entry
                 [i, r] = win(state i, offset r) (module docstring)
    """

    rules: str
    rules_hash: str
    n: int
    players: int
    states: int
    winner: int | None
    p_positions: int | None
    forced_win: dict[str, bool]
    start_moves: dict[str, bool]
    moves_examined: int
    seconds: float
    peak_bits_bytes: int
    classes: dict[int, np.ndarray] | None = field(default=None, repr=False, compare=False)
    stats: dict = field(default_factory=dict, compare=False)

    @property
    def winning_moves(self) -> list[str]:
        return [m for m, w in self.start_moves.items() if w]

    @property
    def states_per_second(self) -> float:
        return self.states / self.seconds if self.seconds > 0 else math.inf

    def to_dict(self) -> dict:
        """JSON-ready form (no per-state classes)."""
        return {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            "players": self.players,
            "winner": self.winner,
            "p_positions": self.p_positions,
            "states": self.states,
            "forced_win": dict(self.forced_win),
            "start_moves": dict(self.start_moves),
            "winning_moves": self.winning_moves,
            "moves_examined": self.moves_examined,
            "seconds": round(self.seconds, 6),
            "states_per_second": round(self.states_per_second, 1),
            "peak_bits_bytes": self.peak_bits_bytes,
            "stats": self.stats,
        }


def check_players(players: int) -> None:
    if not isinstance(players, int) or players < 2 or players > MAX_PLAYERS:
        raise InputError(f"players must be an integer from 2 to {MAX_PLAYERS}, got {players}")


def unpack_bits(packed: np.ndarray, size: int) -> np.ndarray:
    """Bool array of length `size` from a little-endian bit-packed uint8 array."""
    return np.unpackbits(packed, bitorder="little", count=size).astype(bool)


def _refuse_order(space: StateSpace, level: int, rank: int) -> None:
    raise InputError(
        f"rule set {space.spec.rules.name!r}: a move inside level {level} (from rank {rank}) "
        "does not raise the state's rank, so the layers are not in topological order"
    )


def _flight(
    space: StateSpace, level: int, span: int, held: dict[int, np.ndarray], planes: int
) -> tuple[np.ndarray, np.ndarray, int]:
    """Buffer of the layers level, level-1, .., level-span: (buf, base, bytes of level).

    buf is (planes, total bytes); layer level-d starts at byte base[d].  Layers found in
    `held` are copied in, the rest (including `level` itself unless held) start at 0.
    """
    nbytes = [(space.layer_size(level - d) + 7) // 8 if level - d >= 0 else 0
              for d in range(span + 1)]
    base = np.zeros(span + 1, dtype=np.int64)
    for d in range(1, span + 1):
        base[d] = base[d - 1] + nbytes[d - 1]
    buf = np.zeros((planes, int(base[-1] + nbytes[-1])), dtype=np.uint8)
    for d in range(span + 1):
        if level - d in held:
            buf[:, base[d] : base[d] + nbytes[d]] = held[level - d].reshape(planes, -1)
    return buf, base, nbytes[0]


def sweep_reach(space: StateSpace) -> tuple[dict[int, np.ndarray], dict]:
    """Reachability from the start: per level, packed bits (set: reachable), and counts.

    Sweeps from the start's level down, each layer in ascending rank; every layer's bits are
    kept (one bit per state in all).
    """
    spec = space.spec
    span = space.max_drop
    s_level, s_rank = space.rank(spec.start)
    done: dict[int, np.ndarray] = {}
    live: dict[int, np.ndarray] = {}
    first = np.zeros((space.layer_size(s_level) + 7) // 8, dtype=np.uint8)
    first[s_rank >> 3] |= np.uint8(1 << (s_rank & 7))
    live[s_level] = first
    stats = {"states": 0, "transitions": 0}
    for level in range(s_level, -1, -1):
        size = space.layer_size(level)
        if size == 0:
            continue
        buf, base, nb0 = _flight(space, level, span, live, 1)
        flat = buf[0]
        states = space.states(level)
        reached, moves, bad = reach_layer(
            states, space.tab, spec.values, spec.weights, spec.mv_bins, spec.mv_delta,
            spec.mv_drop, span, flat, base,
        )
        if bad >= 0:
            _refuse_order(space, level, int(bad))
        done[level] = flat[:nb0].copy()
        live.pop(level, None)
        for d in range(1, span + 1):
            if level - d >= 0 and space.layer_size(level - d) > 0:
                live[level - d] = flat[base[d] : base[d] + (space.layer_size(level - d) + 7)
                                       // 8].copy()
        stats["states"] += int(reached)
        stats["transitions"] += int(moves)
    return done, stats


def sweep_classes(
    space: StateSpace,
    players: int = 2,
    keep: bool = False,
    reach: dict[int, np.ndarray] | None = None,
    levels: range | None = None,
    held: dict[int, np.ndarray] | None = None,
    on_layer: Callable[[int], None] | None = None,
) -> tuple[dict[int, np.ndarray], dict]:
    """Run the upward sweep; returns (packed bits of the retained layers, statistics).

    Two players: each retained layer is a uint8 array of ceil(size / 8) bytes (bit set:
    N-position).  P players: a (P, ceil(size / 8)) array of bit planes.  Without `keep`
    only the top `max_drop + 1` layers survive (enough to judge the start's moves).  With
    `reach` (from `sweep_reach`), unreachable states are skipped and not counted; without
    it every state of the layers is classified and counted.

    The sweep may run in pieces: `levels` (ascending, default 0 .. start level) are the
    levels this call classifies and `held` the bits returned by the call that swept the
    levels just below them.  Pieces chained this way return exactly the bits of one whole
    sweep; their statistics add up to its statistics (the peak is a maximum).
    `on_layer(states)` is called after each layer with its number of states (progress).
    """
    spec = space.spec
    top = spec.start_level
    span = space.max_drop
    planes = 1 if players == 2 else players
    held = {} if held is None else dict(held)
    stats = {"states": 0, "p_positions": 0, "moves_examined": 0, "peak_bits_bytes": 0,
             "layers": 0}
    no_reach = np.zeros(1, dtype=np.uint8)
    for level in range(0, top + 1) if levels is None else levels:
        size = space.layer_size(level)
        if size == 0:
            continue
        buf, base, nb0 = _flight(space, level, span, held, planes)
        lay_reach = no_reach if reach is None else reach[level]
        if players == 2:
            flat = buf[0]
            pc, ex, bad = classify_layer_2p(
                spec.n, level, size, space.tab, spec.values, spec.weights, spec.mv_bins,
                spec.mv_delta, spec.mv_drop, span, flat, base, lay_reach, reach is not None,
            )
            stats["p_positions"] += int(pc)
            cur = flat[:nb0].copy()
        else:
            ex, bad = classify_layer_multi(
                spec.n, level, size, space.tab, spec.values, spec.weights, spec.mv_bins,
                spec.mv_delta, spec.mv_drop, span, players, buf, base, lay_reach, reach is not None,
            )
            cur = buf[:, :nb0].copy()
        if bad >= 0:
            _refuse_order(space, level, int(bad))
        held_bytes = sum(a.nbytes for a in held.values()) + buf.nbytes + cur.nbytes
        stats["peak_bits_bytes"] = max(stats["peak_bits_bytes"], held_bytes)
        del buf
        held[level] = cur
        if reach is None:
            stats["states"] += size
        else:
            stats["states"] += int(np.bitwise_count(reach[level]).sum())
        stats["moves_examined"] += int(ex)
        stats["layers"] += 1
        if on_layer is not None:
            on_layer(size)
        if not keep:
            for old in [lv for lv in held if lv < level - span]:
                del held[old]
    return held, stats


def _bit(held: dict[int, np.ndarray], level: int, rank: int, plane: int = 0) -> bool:
    arr = held[level]
    if arr.ndim == 2:
        arr = arr[plane]
    return bool((arr[rank >> 3] >> (rank & 7)) & 1)


def successors(spec: GameSpec, counts: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """(move index, successor counts) for every legal move of one state."""
    out = []
    for m in range(spec.mv_bins.shape[0]):
        nxt = counts.copy()
        for b, dlt in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            nxt[b] += dlt
        if (nxt >= 0).all():
            out.append((m, nxt))
    return out


def layer_bytes(space: StateSpace, level: int) -> int:
    """Bytes of one bit plane of a layer (one bit per state, packed); 0 outside 0..top."""
    if level < 0 or level > space.top:
        return 0
    return (space.layer_size(level) + 7) // 8


def solve_peak_bits(space: StateSpace, players: int = 2) -> int:
    """Peak bytes of outcome bits `sweep_classes` reports (`peak_bits_bytes`), from the
    layer sizes alone.

    Replays the sweep's accounting, level by level upward: the layers it holds from the
    levels below (the last max_drop + 1 swept), the flight buffer of the level's window
    (itself and the max_drop levels below) and the copy of the finished layer, each one
    bit per state per plane.  The chain (`cluster.solve_chain.run_solve`) holds the same
    layers at every level, so its peak is the same.
    """
    planes = 1 if players == 2 else players
    span = space.max_drop
    held: list[int] = []
    peak = 0
    for level in sorted(space.levels):
        window = sum(layer_bytes(space, level - d) for d in range(span + 1))
        held_bytes = sum(layer_bytes(space, lv) for lv in held)
        peak = max(peak, planes * (held_bytes + window + layer_bytes(space, level)))
        held = [lv for lv in (*held, level) if lv >= level - span]
    return peak


def solve_bytes(space: StateSpace, players: int, reach: bool, keep_classes: bool) -> int:
    """Forecast peak bytes of `solve`, an upper bound up to the kernels' O(bins) scratch.

    Counts the rank table, the outcome bits (`solve_peak_bits`), and with `reach` the
    reachability sweep: one bit per state kept for the whole solve, the largest layer's
    states (int64 per bin) and its flight buffer; with `keep_classes` every layer's bits
    (per plane) and their unpacked bool copies.
    """
    planes = 1 if players == 2 else players
    total_bits = sum(layer_bytes(space, lv) for lv in space.levels)
    need = int(space.tab.nbytes) + solve_peak_bits(space, players)
    if reach:
        largest = space.largest_layer()
        need += total_bits + largest * 8 * space.spec.nbins + 2 * solve_peak_bits(space, 2)
    if keep_classes:
        need += planes * total_bits + space.total_states()
    return need


def solve_space(spec: GameSpec, limit: int, players: int, reach: bool, keep_classes: bool,
                what: str) -> StateSpace:
    """The state space of a solve after its refusals: the rank table's exact size before
    it is allocated (`statespace.refuse_space`), then `solve_bytes` from the layer sizes."""
    refuse_space(spec, limit, what, per_state=1 / 8 if (reach or keep_classes) else 0.0)
    space = build_space(spec, limit)
    refuse_if_over(solve_bytes(space, players, reach, keep_classes), limit, what)
    return space


def solve(
    n: int,
    rules: str | RuleSet = "standard",
    players: int = 2,
    *,
    keep_classes: bool = False,
    reach: bool | None = None,
    max_memory: int | None = None,
    progress: bool = False,
) -> SolveResult:
    """Solve the game for n: outcome classes (two players) or coalition wins (P players).

    `keep_classes` keeps every layer's bits (two players: `classes[level]` is a bool array
    over ranks, True for N; unreachable states read False) - memory grows with the whole
    state space, for small n only.  `reach`: first find the states reachable from the start
    (`sweep_reach`) and solve only those; None (default) does so for every rule set except
    the standard game, whose states of value n are all reachable (module docstring).
    `max_memory` (default: what the machine has available): the run is refused up front
    when `solve_bytes` exceeds it (`solve_space`).  `progress`: a bar of the states
    classified on stderr.
    """
    from zeckenum.counting.count import check_n

    check_n(n)
    check_players(players)
    rs = get_rules(rules)
    reach = needs_reach(rs) if reach is None else reach
    space = solve_space(rs.instantiate(n), resolve_limit(max_memory), players, reach,
                        keep_classes, f"solving n={n}")
    t0 = time.perf_counter()
    reach_bits = sweep_reach(space)[0] if reach else None
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=space.total_states(), unit="state", unit_scale=True,
                   desc=f"solve n={n}")
    try:
        held, stats = sweep_classes(space, players, keep=keep_classes, reach=reach_bits,
                                    on_layer=bar.update if bar is not None else None)
    finally:
        if bar is not None:
            bar.close()
    stats["reach_pass"] = bool(reach)
    stats["forecast_peak_bytes"] = solve_bytes(space, players, reach, keep_classes)
    return solve_result(n, space, players, held, stats, time.perf_counter() - t0,
                        keep_classes=keep_classes)


def needs_reach(rules: RuleSet) -> bool:
    """Whether solving needs the reachability sweep first (every rule set but the standard
    game, whose states of value n are all reachable: module docstring)."""
    return rules.content_hash() != STANDARD.content_hash()


def solve_result(
    n: int, space: StateSpace, players: int, held: dict[int, np.ndarray], stats: dict,
    seconds: float, keep_classes: bool = False,
) -> SolveResult:
    """The `SolveResult` at n of a finished upward sweep (`sweep_classes`, whole or in
    pieces) of the game `space`.

    `held` must hold the start's level and the max_drop levels below it; `stats` the
    sweep's summed statistics plus "reach_pass".
    """
    spec = space.spec
    rs = spec.rules
    start_level, start_rank = space.rank(spec.start)
    start_moves: dict[str, bool] = {}
    if players == 2:
        start_n = _bit(held, start_level, start_rank)
        winner = 1 if start_n else 2
        forced = {"1": winner == 1, "2": winner == 2}
        for m, nxt in successors(spec, spec.start):
            lv, rk = space.rank(nxt)
            start_moves[spec.move_names[m]] = not _bit(held, lv, rk)
        p_positions = stats["p_positions"]
    else:
        terminal = not successors(spec, spec.start)
        forced = {}
        for x in range(1, players + 1):
            r = (1 - x) % players
            forced[str(x)] = (not terminal) and _bit(held, start_level, start_rank, r)
        winners = [int(x) for x, w in forced.items() if w]
        winner = winners[0] if winners else None
        for m, nxt in successors(spec, spec.start):
            lv, rk = space.rank(nxt)
            start_moves[spec.move_names[m]] = _bit(held, lv, rk, 1)
        p_positions = None
    classes = None
    if keep_classes and players == 2:
        classes = {lv: unpack_bits(a, space.layer_size(lv)) for lv, a in held.items()}
    elif keep_classes:
        classes = {
            lv: np.stack([unpack_bits(a[q], space.layer_size(lv)) for q in range(players)],
                         axis=1)
            for lv, a in held.items()
        }
    return SolveResult(
        rules=rs.name,
        rules_hash=rs.content_hash(),
        n=n,
        players=players,
        states=stats["states"],
        winner=winner,
        p_positions=p_positions,
        forced_win=forced,
        start_moves=start_moves,
        moves_examined=stats["moves_examined"],
        seconds=seconds,
        peak_bits_bytes=stats["peak_bits_bytes"],
        classes=classes,
        stats={"layers": stats["layers"], "reach_pass": bool(stats.get("reach_pass")),
               **({"forecast_peak_bytes": stats["forecast_peak_bytes"]}
                  if "forecast_peak_bytes" in stats else {})},
    )


# ---------------------------------------------------------------------------------------
# Winning strategies (two players): the whole move graph of a small game, held globally.

STRATEGY_MAX_STATES = 6_000_000


@kernel
def strategy_costs(order: np.ndarray, ptr: np.ndarray, dest: np.ndarray,
                   is_n: np.ndarray, depth: bool) -> np.ndarray:
    """Size estimate of a small strategy below each state, used to rank winning moves.

    Visits states in `order` (successors first).  A terminal state costs 0; an N-position
    costs 1 plus the cheapest move to a P-position.  A P-position (the loser may play any
    move) costs the sum over its moves ("tree": the strategy's size if no position were
    shared; float64, saturating to inf) or, with `depth`, 1 plus the maximum (the longest
    remaining game).
    """
    cost = np.zeros(is_n.size, dtype=np.float64)
    for u in order:
        if ptr[u] == ptr[u + 1]:
            continue
        if is_n[u]:
            best = np.inf
            for e in range(ptr[u], ptr[u + 1]):
                v = dest[e]
                if not is_n[v] and cost[v] < best:
                    best = cost[v]
            cost[u] = 1.0 + best
        elif depth:
            s = 0.0
            for e in range(ptr[u], ptr[u + 1]):
                s = max(s, cost[dest[e]])
            cost[u] = 1.0 + s
        else:
            s = 0.0
            for e in range(ptr[u], ptr[u + 1]):
                s += cost[dest[e]]
            cost[u] = s
    return cost


@kernel
def strategy_choices(order: np.ndarray, ptr: np.ndarray, dest: np.ndarray,
                     is_n: np.ndarray, cost: np.ndarray, start: int,
                     prefer_shared: bool) -> np.ndarray:
    """Move (edge index) the winner plays at each position it can face; -1 elsewhere.

    Visits states in `order` (predecessors first) from the start.  At an N-position the
    winner plays a move to a P-position: one whose target the strategy already reaches if
    `prefer_shared` (it adds no position), else the one of least `cost`.  At a P-position
    every move of the loser is followed.
    """
    reached = np.zeros(is_n.size, dtype=np.bool_)
    choice = np.full(is_n.size, -1, dtype=np.int64)
    reached[start] = True
    for u in order:
        if not reached[u]:
            continue
        if is_n[u]:
            best = -1
            best_key = np.inf
            for e in range(ptr[u], ptr[u + 1]):
                v = dest[e]
                if is_n[v]:
                    continue
                key = cost[v]
                if prefer_shared and reached[v]:
                    key = -1.0
                if best < 0 or key < best_key:
                    best = e
                    best_key = key
            choice[u] = best
            reached[dest[best]] = True
        else:
            for e in range(ptr[u], ptr[u + 1]):
                reached[dest[e]] = True
    return choice


@dataclass(frozen=True)
class Strategy:
    """A winning strategy of a two-player game: what the winner plays at each position.

    positions[i] is a count vector (bins 1..nbins, as a tuple) and moves[i] the name of the
    move the winner plays there; listed in play order (levels descending, then ranks).
    `heuristic` names the move ranking that gave the smallest strategy ("tree" or "depth",
    see `strategy_costs`).
    """

    rules: str
    rules_hash: str
    n: int
    winner: int
    nbins: int
    positions: tuple[tuple[int, ...], ...]
    moves: tuple[str, ...]
    heuristic: str = ""

    @property
    def size(self) -> int:
        return len(self.positions)


def move_graph(space: StateSpace, classes: dict[int, np.ndarray]) -> dict[str, np.ndarray]:
    """The whole move graph with global state ids (small games only).

    A state's id is offset[level] + rank, levels ascending.  Returns ptr/dest/move (CSR:
    moves of u are ptr[u]..ptr[u+1]-1, to dest[e], by move index move[e]), is_n (class),
    counts (count vectors by id), offset (dict level -> first id) and order (ids with
    successors first: levels ascending, ranks descending).
    """
    spec = space.spec
    levels = [lv for lv in range(spec.start_level + 1) if space.layer_size(lv) > 0]
    offset: dict[int, int] = {}
    total = 0
    for lv in levels:
        offset[lv] = total
        total += space.layer_size(lv)
    is_n = np.zeros(total, dtype=np.bool_)
    ptrs, dests, movs, states = [], [], [], []
    edge_base = 0
    for lv in levels:
        lm = moves_out(space, lv)
        is_n[offset[lv] : offset[lv] + lm.size] = classes[lv]
        lv_off = np.array([offset.get(lv - int(d), 0) for d in range(space.max_drop + 1)],
                          dtype=np.int64)
        ptrs.append(lm.ptr[:-1] + edge_base)
        dests.append(lv_off[lm.drop] + lm.other)
        movs.append(lm.move)
        states.append(lm.states)
        edge_base += int(lm.ptr[-1])
    ptr = np.concatenate([*ptrs, np.array([edge_base], dtype=np.int64)])
    dest = np.concatenate(dests)
    move = np.concatenate(movs)
    counts = np.concatenate(states)
    order = np.concatenate(
        [offset[lv] + np.arange(space.layer_size(lv) - 1, -1, -1) for lv in levels]
    ).astype(np.int64)
    return {"order": order, "ptr": ptr, "dest": dest, "move": move, "is_n": is_n,
            "counts": counts, "offset": offset}


def winning_strategy(
    n: int, rules: str | RuleSet = "standard", *, prefer_shared: bool = True,
    max_memory: int | None = None,
) -> tuple[Strategy, SolveResult]:
    """Solve a small game and extract a compact winning strategy for its winner.

    Builds the strategy twice, ranking the winning moves by each estimate of
    `strategy_costs` (and, with `prefer_shared`, first by whether the target is already in
    the strategy), and keeps the one listing fewer positions.

    The move graph of the whole game is held (about 20 bytes per move), so n is limited to
    games of at most STRATEGY_MAX_STATES states.
    """
    from zeckenum.counting.count import check_n

    rs = get_rules(rules)
    spec = rs.instantiate(check_n(n))
    space = build_space(spec, max_memory)
    if space.total_states() > STRATEGY_MAX_STATES:
        raise InputError(
            f"strategy export holds the whole move graph: n={n} has {space.total_states()} "
            f"states, the limit is {STRATEGY_MAX_STATES}"
        )
    result = solve(n, rs, 2, keep_classes=True, max_memory=max_memory)
    g = move_graph(space, result.classes)
    order, ptr, dest, move, is_n, counts = (
        g["order"], g["ptr"], g["dest"], g["move"], g["is_n"], g["counts"]
    )
    s_level, s_rank = space.rank(spec.start)
    start = g["offset"][s_level] + s_rank
    choice = None
    heuristic = ""
    forward = order[::-1].copy()
    for name, depth in (("tree", False), ("depth", True)):
        cost = strategy_costs(order, ptr, dest, is_n, depth)
        ch = strategy_choices(forward, ptr, dest, is_n, cost, start, prefer_shared)
        if choice is None or (ch >= 0).sum() < (choice >= 0).sum():
            choice, heuristic = ch, name
    picked = [int(u) for u in forward if choice[u] >= 0]
    strategy = Strategy(
        rules=rs.name,
        rules_hash=rs.content_hash(),
        n=n,
        winner=int(result.winner),
        nbins=spec.nbins,
        positions=tuple(tuple(int(x) for x in counts[u]) for u in picked),
        moves=tuple(spec.move_names[int(move[choice[u]])] for u in picked),
        heuristic=heuristic,
    )
    return strategy, result
