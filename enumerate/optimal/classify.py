"""Classification of every layer: the upward sweep's kernels and the wrappers that run them.

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
N bit and win(s, 1) its negation.

Memory: one bit per state (two players) or one bit per state per offset (P players),
bit-packed per layer.  The sweep goes from level 0 up to the start's level and inside a
layer in descending rank, so every successor is classified first (moves lower the level or
keep it and raise the rank, see `core.statespace`).  Only the layers a move can still reach
are held, `max_drop + 1` at a time (`_flight`).

Values per state (two players).  Remoteness, misère play and Grundy values need more than
one bit per state: `grade_layer_2p` walks a layer the same way and stores one uint16
remoteness per state (its parity is the class, under normal or misère play) and, when
asked, one Grundy value (uint8 while the game has at most 255 moves: a Grundy value is
the mex of at most as many values as the state has moves).  The layers in flight hold
one element per state, `max_drop + 1` layers at a time (`_value_flight`).

Kernels (verbs): `classify_layer_2p`, `classify_layer_multi` (walk a layer with `walk`, stop
at the first move to a P-position with two players), `grade_layer_2p` (every move of every
state: remoteness and Grundy values), `reach_layer` (push reachability along a listed
layer's moves).  Wrappers (named for what they return): `layer_classes` (the packed
outcome bits of the sweep, whole or one level range of it; cluster twin
`cluster.solve_tasks.layer_classes_task`), `layer_values` (the per-state values; in-process
only, no cluster twin) and `reachable_bits` (per level, the states reachable from the
start: the sweep every rule set but the standard game needs first).
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.listing import (
    move_dense,
    move_spans,
    neighbour_rank,
    rank_prefix,
    refuse_order,
    shifted_suffix,
)
from zeckenum.core.statespace import StateSpace
from zeckenum.core.walk import (
    _legal_moves,
    _step_down,
    _terms,
    _walk_start,
    is_unit_game,
)
from zeckenum.optimal.waves import layer_blocks, layer_grades, parallel_layer


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
    unit = is_unit_game(values, weights)
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
            r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                               i - suf[0, lo[m]], suf[d, hi[m] + 1])
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
    unit = is_unit_game(values, weights)
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
            r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                               i - suf[0, lo[m]], suf[d, hi[m] + 1])
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


REMOTENESS_MAX = 0xFFFF
"""Largest remoteness the per-state values hold (uint16); a larger one stops the sweep.

A remoteness is the length of one game, so at most the longest game's.  For the standard
game that is below ((3 + sqrt 5) / 2) n ("Bounds on Zeckendorf Games", 2020,
arXiv:2009.09510), so every n below 25,000 fits, far beyond any n whose states can be
swept; other rule sets are checked as they run (`grade_layer_2p` reports the overflow).
Measured: the largest remoteness at n = 220 is 407."""


@kernel
def grade_layer_2p(
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
    rem: np.ndarray,
    gru: np.ndarray,
    base: np.ndarray,
    want_grundy: bool,
    misere: bool,
    reach: np.ndarray,
    use_reach: bool,
) -> tuple[int, int, int, int]:
    """Remoteness (and Grundy values) of one layer, two players; returns (P-positions,
    moves examined, bad, largest Grundy value or -1).

    `rem` (uint16) and `gru` (uint8 or wider) hold one value per state of the layers in
    flight: the layer d levels below starts at *element* base[d] of both.  The layer is
    walked in descending rank exactly as in `classify_layer_2p`; every legal move is
    examined (no early stop: the extremes need all successors).

    Remoteness (module docstring of `optimal.solve`): a terminal state has 0; a state with a
    move to a P-position has 1 + the least remoteness among its P-successors (N-position);
    any other state has 1 + the largest remoteness among its successors (P-position).  A
    state's class is the parity of its remoteness: normal play, P exactly when even;
    misère (`misere`: a terminal state is an N-position, the player unable to move having
    not made the last move), P exactly when odd.  A value above `REMOTENESS_MAX` is
    stored as REMOTENESS_MAX and reported as bad = -2 (the caller refuses the run).

    With `want_grundy` (normal play), gru gets the mex of the successors' Grundy values;
    the mex of k values is at most k, so every value is at most the number of moves
    (`mv_bins.shape[0]`), which the caller keeps within gru's dtype.

    Unreachable states (`use_reach`, bit clear) are skipped and keep 0.  `bad` as in
    `classify_layer_2p` (-1: none).

    The per-state body is repeated in `waves.grade_blocks_2p` on purpose: as one inlined
    helper shared by both kernels (returning the value, the Grundy value, the moves
    examined and a flag), `solve 220 --remoteness --grundy` took 6.24 s instead of 5.04 s
    on one thread and 6.32 s instead of 4.99 s on two (best of 3, same machine, back to
    back), as the bit kernels' walk step did before.
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
    lose = 1 if misere else 0  # parity of a P-position's remoteness
    b0 = base[0]
    p_count = 0
    examined = 0
    bad = -1
    gmax = -1
    _walk_start(n, level, c, lowv, lowt, tab, values, weights, suf, unit)
    for i in range(size - 1, -1, -1):
        if i < size - 1:
            j = _step_down(c, lowv, lowt, tab, values, weights, unit)
            if j < 0:
                raise RuntimeError("layer walk ended early")
            _terms(j, lowv, lowt, tab, suf)
        if suf[0, 0] != i:
            raise RuntimeError("layer walk out of step with the ranks")
        if use_reach and (reach[i >> 3] >> (i & 7)) & 1 == 0:
            continue
        best = REMOTENESS_MAX + 1  # least remoteness of a P-successor
        worst = -1  # largest remoteness of any successor
        nl = _legal_moves(c, mv_bins, mv_delta, cand)
        for q in range(nl):
            m = cand[q]
            d = mv_drop[m]
            r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                               i - suf[0, lo[m]], suf[d, hi[m] + 1])
            examined += 1
            if d == 0 and r <= i:
                bad = i
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
        if best <= REMOTENESS_MAX:
            v = best + 1
        elif nl == 0:
            v = 0
        else:
            v = worst + 1
        if v > REMOTENESS_MAX:
            v = REMOTENESS_MAX
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
    return p_count, examined, bad, gmax


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
        rank_prefix(c, tab, values, weights, lowv, lowt, pre, suf, ready)
        nl = _legal_moves(c, mv_bins, mv_delta, cand)
        for q in range(nl):
            m = cand[q]
            d = mv_drop[m]
            if not ready[d]:
                shifted_suffix(-d, tab, lowv, lowt, suf[d])
                ready[d] = True
            r = neighbour_rank(c, m, 1, lo, hi, dd, tab, values, weights, lowv, lowt,
                               i - suf[0, lo[m]], suf[d, hi[m] + 1])
            moves += 1
            if d == 0 and r <= i:
                bad = i
            bits[base[d] + (r >> 3)] |= np.uint8(1 << (r & 7))
    return reached, moves, bad


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


def reachable_bits(space: StateSpace) -> tuple[dict[int, np.ndarray], dict]:
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
            refuse_order(space.spec, level, int(bad))
        done[level] = flat[:nb0].copy()
        live.pop(level, None)
        for d in range(1, span + 1):
            if level - d >= 0 and space.layer_size(level - d) > 0:
                live[level - d] = flat[base[d] : base[d] + (space.layer_size(level - d) + 7)
                                       // 8].copy()
        stats["states"] += int(reached)
        stats["transitions"] += int(moves)
    return done, stats


def layer_classes(
    space: StateSpace,
    players: int = 2,
    keep: bool = False,
    reach: dict[int, np.ndarray] | None = None,
    levels: range | None = None,
    held: dict[int, np.ndarray] | None = None,
    on_layer: Callable[[int], None] | None = None,
    threads: int = 1,
) -> tuple[dict[int, np.ndarray], dict]:
    """Run the upward sweep; returns (packed bits of the retained layers, statistics).

    Two players: each retained layer is a uint8 array of ceil(size / 8) bytes (bit set:
    N-position).  P players: a (P, ceil(size / 8)) array of bit planes.  Without `keep`
    only the top `max_drop + 1` layers survive (enough to judge the start's moves).  With
    `reach` (from `reachable_bits`), unreachable states are skipped and not counted; without
    it every state of the layers is classified and counted.

    The sweep may run in pieces: `levels` (ascending, default 0 .. start level) are the
    levels this call classifies and `held` the bits returned by the call that swept the
    levels just below them.  Pieces chained this way return exactly the bits of one whole
    sweep; their statistics add up to its statistics (the peak is a maximum).
    `on_layer(states)` is called after each layer with its number of states (progress).

    `threads` >= 2: every layer of at least `waves.PARALLEL_MIN_STATES` states is cut into
    blocks that `threads` threads classify as their dependencies finish
    (`optimal.waves.layer_blocks`, whose docstring proves the decomposition); the bits,
    P-positions, moves examined and `peak_bits_bytes` are those of the serial kernels.
    `stats["parallel_layers"]` counts the layers run that way.  `stats["p_by_level"]`
    maps each level swept (two players) to its number of P-positions.
    """
    spec = space.spec
    top = spec.start_level
    span = space.max_drop
    planes = 1 if players == 2 else players
    held = {} if held is None else dict(held)
    stats = {"states": 0, "p_positions": 0, "moves_examined": 0, "peak_bits_bytes": 0,
             "layers": 0, "parallel_layers": 0, "p_by_level": {}}
    no_reach = np.zeros(1, dtype=np.uint8)
    with ThreadPoolExecutor(threads) if threads >= 2 else nullcontext() as pool:
        for level in range(0, top + 1) if levels is None else levels:
            _sweep_level(space, level, players, span, planes, held, reach, no_reach, keep,
                         threads, pool, stats, on_layer)
    return held, stats


def _sweep_level(
    space: StateSpace, level: int, players: int, span: int, planes: int,
    held: dict[int, np.ndarray], reach: dict[int, np.ndarray] | None, no_reach: np.ndarray,
    keep: bool, threads: int, pool: ThreadPoolExecutor | None, stats: dict,
    on_layer: Callable[[int], None] | None,
) -> None:
    """One level of `layer_classes`: classify it into `held`, update `stats`."""
    spec = space.spec
    size = space.layer_size(level)
    if size == 0:
        return
    buf, base, nb0 = _flight(space, level, span, held, planes)
    lay_reach = no_reach if reach is None else reach[level]
    if pool is not None and parallel_layer(size, threads):
        pc, ex, bad = layer_blocks(space, level, players, buf, base, lay_reach,
                                   reach is not None, threads, pool)
        stats["p_positions"] += int(pc)
        stats["moves_examined"] += int(ex)
        stats["parallel_layers"] += 1
        if players == 2:
            stats["p_by_level"][level] = int(pc)
        cur = buf[0, :nb0].copy() if players == 2 else buf[:, :nb0].copy()
    elif players == 2:
        flat = buf[0]
        pc, ex, bad = classify_layer_2p(
            spec.n, level, size, space.tab, spec.values, spec.weights, spec.mv_bins,
            spec.mv_delta, spec.mv_drop, span, flat, base, lay_reach, reach is not None,
        )
        stats["p_positions"] += int(pc)
        stats["p_by_level"][level] = int(pc)
        stats["moves_examined"] += int(ex)
        cur = flat[:nb0].copy()
    else:
        ex, bad = classify_layer_multi(
            spec.n, level, size, space.tab, spec.values, spec.weights, spec.mv_bins,
            spec.mv_delta, spec.mv_drop, span, players, buf, base, lay_reach, reach is not None,
        )
        stats["moves_examined"] += int(ex)
        cur = buf[:, :nb0].copy()
    if bad >= 0:
        refuse_order(space.spec, level, int(bad))
    held_bytes = sum(a.nbytes for a in held.values()) + buf.nbytes + cur.nbytes
    stats["peak_bits_bytes"] = max(stats["peak_bits_bytes"], held_bytes)
    del buf
    held[level] = cur
    if reach is None:
        stats["states"] += size
    else:
        stats["states"] += int(np.bitwise_count(reach[level]).sum())
    stats["layers"] += 1
    if on_layer is not None:
        on_layer(size)
    if not keep:
        for old in [lv for lv in held if lv < level - span]:
            del held[old]


def grundy_dtype(moves: int) -> np.dtype:
    """The narrowest unsigned dtype of the Grundy values of a game with `moves` moves: a
    Grundy value is the mex of at most `moves` successor values, so at most `moves`."""
    return np.dtype(np.uint8) if moves <= 0xFF else np.dtype(np.uint16)


def _value_flight(
    space: StateSpace, level: int, span: int, held: dict[int, np.ndarray], dtype: np.dtype
) -> tuple[np.ndarray, np.ndarray]:
    """Buffer of one value per state of the layers level, level-1, .., level-span:
    (buf, base); layer level-d starts at element base[d].  Layers in `held` are copied in,
    the rest start at 0."""
    sizes = [space.layer_size(level - d) if level - d >= 0 else 0 for d in range(span + 1)]
    base = np.zeros(span + 1, dtype=np.int64)
    for d in range(1, span + 1):
        base[d] = base[d - 1] + sizes[d - 1]
    buf = np.zeros(int(base[-1] + sizes[-1]), dtype=dtype)
    for d in range(span + 1):
        if level - d in held:
            buf[base[d] : base[d] + sizes[d]] = held[level - d]
    return buf, base


def layer_values(
    space: StateSpace,
    misere: bool = False,
    grundy: bool = False,
    keep: bool = False,
    reach: dict[int, np.ndarray] | None = None,
    on_layer: Callable[[int], None] | None = None,
    threads: int = 1,
) -> tuple[dict[int, np.ndarray], dict[int, np.ndarray] | None, dict]:
    """The upward sweep with one value per state (two players): (remoteness per retained
    level, Grundy values per retained level or None, statistics).

    Each retained level is an array over the layer's ranks: uint16 remoteness
    (`grade_layer_2p`; its parity is the class) and, with `grundy` (normal play only),
    the Grundy values (`grundy_dtype`).  Without `keep` only the top `max_drop + 1` layers
    survive; `reach` as in `layer_classes` (unreachable states hold 0 and are not counted).
    Statistics as `layer_classes` gives them, plus "p_by_level" (level -> P-positions),
    "remoteness_max" and "grundy_max".  `threads` >= 2 runs each large layer on several
    threads (`optimal.waves.layer_grades`), with the values of the serial kernel.
    RuntimeError on an internal error; the caller refuses a remoteness above
    REMOTENESS_MAX (stats["overflow"]).
    """
    if grundy and misere:
        raise ValueError("Grundy values are a normal-play notion")
    spec = space.spec
    top = spec.start_level
    span = space.max_drop
    gdt = grundy_dtype(int(spec.mv_bins.shape[0]))
    rems: dict[int, np.ndarray] = {}
    grus: dict[int, np.ndarray] = {}
    stats: dict = {"states": 0, "p_positions": 0, "moves_examined": 0, "peak_bits_bytes": 0,
                   "layers": 0, "parallel_layers": 0, "p_by_level": {}, "remoteness_max": 0,
                   "grundy_max": 0 if grundy else None, "overflow": False}
    no_reach = np.zeros(1, dtype=np.uint8)
    dummy = np.zeros(1, dtype=gdt)
    with ThreadPoolExecutor(threads) if threads >= 2 else nullcontext() as pool:
        for level in range(0, top + 1):
            size = space.layer_size(level)
            if size == 0:
                continue
            rbuf, base = _value_flight(space, level, span, rems, np.dtype(np.uint16))
            gbuf = _value_flight(space, level, span, grus, gdt)[0] if grundy else dummy
            lay_reach = no_reach if reach is None else reach[level]
            if pool is not None and parallel_layer(size, threads):
                pc, ex, bad, gmax = layer_grades(space, level, rbuf, gbuf, base, grundy, misere,
                                                 lay_reach, reach is not None, threads, pool)
                stats["parallel_layers"] += 1
            else:
                pc, ex, bad, gmax = grade_layer_2p(
                    spec.n, level, size, space.tab, spec.values, spec.weights, spec.mv_bins,
                    spec.mv_delta, spec.mv_drop, span, rbuf, gbuf, base, grundy, misere,
                    lay_reach, reach is not None,
                )
            if bad >= 0:
                refuse_order(space.spec, level, int(bad))
            cur = rbuf[:size].copy()
            rems[level] = cur
            if grundy:
                grus[level] = gbuf[:size].copy()
                stats["grundy_max"] = max(stats["grundy_max"], int(gmax))
            held_bytes = (sum(a.nbytes for a in rems.values()) + rbuf.nbytes
                          + sum(a.nbytes for a in grus.values())
                          + (gbuf.nbytes if grundy else 0))
            stats["peak_bits_bytes"] = max(stats["peak_bits_bytes"], held_bytes)
            del rbuf, gbuf
            stats["p_positions"] += int(pc)
            stats["p_by_level"][level] = int(pc)
            stats["moves_examined"] += int(ex)
            stats["remoteness_max"] = max(stats["remoteness_max"], int(cur.max()))
            if reach is None:
                stats["states"] += size
            else:
                stats["states"] += int(np.bitwise_count(reach[level]).sum())
            stats["layers"] += 1
            if bad == -2:
                stats["overflow"] = True
                break
            if on_layer is not None:
                on_layer(size)
            if not keep:
                for old in [lv for lv in rems if lv < level - span]:
                    del rems[old]
                    grus.pop(old, None)
    return rems, (grus if grundy else None), stats
