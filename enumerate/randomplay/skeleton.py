"""Random play's first sweep: the skeleton every exact sweep re-reads, and its sizes.

`random_skeleton(space, model)` collects the layers of the one first sweep shared with
counting (`core.sweep.swept_layers`, moves listed by `core.listing`) into a `Skeleton`:
per layer the reachable states' length windows, their total move weight D (`dsum`), the
moves into them whose source is reachable (`core.sweep.Incoming`, with their "pairs"
weights), and the exponents of the denominator M = lcm over games of prod D(s) (see
`randomplay.exact`).  `skeleton_bytes_bound` and `random_space` forecast its memory before
the state space is swept (the memory rule: arithmetic first, arrays later);
`skeleton_nbytes` measures a built one.  Float random play (`randomplay.floating`), the
cluster's facts task (`cluster.random_tasks`) and the exact sweeps all start from here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from zeckenum.core.checks import check_model, thread_count
from zeckenum.core.memory import refuse_if_over
from zeckenum.core.modular import (
    small_primes_upto,
)
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.core.sweep import Incoming, swept_layers
from zeckenum.rules.model import GameSpec


def take_arrays(spec: GameSpec) -> tuple[np.ndarray, np.ndarray]:
    """(tk_bins, tk_cnt): per move, the bins it takes tokens from and how many (0-padded)."""
    tk_cnt = np.where(spec.mv_delta < 0, -spec.mv_delta, 0).astype(np.int64)
    return spec.mv_bins.astype(np.int64), tk_cnt


def max_weight_bound(spec: GameSpec, model: str) -> int:
    """An a-priori bound on D(s) over all states of the game.

    Model "moves": the number of move types.  Model "pairs": a move taking k tokens (c_b
    from bin b) has weight prod_b binomial(a(b), c_b), the number of k-token subsets of the
    state that it can take, so D(s) <= mu * sum over the take sizes k of binomial(T, k),
    with mu the largest number of move types taking the same tokens (same bins and counts)
    and T a bound on the tokens of any state: the start's tokens when no move gives more
    tokens than it takes, else value // smallest bin value.  For the standard game this is
    binomial(n, 2).
    """
    if model == "moves":
        return len(spec.move_names)
    takes: dict[tuple, int] = {}
    sizes: set[int] = set()
    grows = False
    for m in range(spec.mv_bins.shape[0]):
        dl = [int(d) for d in spec.mv_delta[m]]
        take = tuple(sorted((int(b), -d) for b, d in zip(spec.mv_bins[m], dl, strict=True)
                            if d < 0))
        takes[take] = takes.get(take, 0) + 1
        sizes.add(sum(c for _b, c in take))
        grows = grows or sum(dl) > 0
    tokens = int(spec.start.sum())
    if grows:
        tokens = max(tokens, int(spec.n) // int(spec.values.min()))
    mu = max(takes.values(), default=1)
    return max(1, mu * sum(math.comb(tokens, k) for k in sizes))


@dataclass(frozen=True, eq=False)
class Skeleton:
    """Result of the first sweep: reachable states, windows, weights and the denominator.

    Per level (sweep order `levels`, from the start's level down): lmin/win int32 per rank
    (win 0: unreachable), dsum int64 = D(s) (0: no move), incoming = `Incoming`.
    denominator M = lcm over games of prod D(s), with M * P(any event) an integer (1 when
    the sweep ran without exponents).
    """

    levels: list[int]
    start_level: int
    start_rank: int
    lmin: dict[int, np.ndarray]
    win: dict[int, np.ndarray]
    dsum: dict[int, np.ndarray]
    incoming: dict[int, Incoming]
    denominator: int
    states: int
    transitions: int
    terminals: int
    shortest: int
    longest: int
    max_weight: int
    max_indegree: int
    max_drop: int = 1


def random_skeleton(
    space: StateSpace, model: str, exponents: bool = True, threads: int | None = None
) -> Skeleton:
    """The first sweep of random play (`core.sweep.swept_layers`) collected: reachability,
    length windows, D(s), the moves in with their weights, and (with `exponents`) the exact
    lcm denominator M of one game and model."""
    check_model(model)
    factor_primes, bound = None, 0
    if exponents:
        bound = max_weight_bound(space.spec, model)
        factor_primes = small_primes_upto(bound)
    totals: dict = {}
    levels: list[int] = []
    lmin: dict[int, np.ndarray] = {}
    win: dict[int, np.ndarray] = {}
    dsum: dict[int, np.ndarray] = {}
    incoming: dict[int, Incoming] = {}
    for layer in swept_layers(space, pairs=model == "pairs", factor_primes=factor_primes,
                              weight_bound=bound, threads=thread_count(threads), totals=totals):
        levels.append(layer.level)
        lmin[layer.level] = layer.lmin
        win[layer.level] = layer.win
        dsum[layer.level] = layer.dsum
        assert layer.incoming is not None
        incoming[layer.level] = layer.incoming
    keys = ("start_level", "start_rank", "denominator", "states", "transitions", "terminals",
            "shortest", "longest", "max_weight", "max_indegree", "max_drop")
    return Skeleton(levels=levels, lmin=lmin, win=win, dsum=dsum, incoming=incoming,
                    **{k: totals[k] for k in keys})


def weight_bound(space: StateSpace, skel: Skeleton, model: str) -> int:
    """The largest total move weight D(s) the exact sweep may have to invert: the largest
    one the first sweep met, or the a-priori bound `max_weight_bound` if that is larger."""
    return max(skel.max_weight, max_weight_bound(space.spec, model))


SKELETON_PER_STATE = 24
"""Bytes the first sweep keeps for every state of the space whatever its moves: lmin and
win (int32), D(s) (int64) and the incoming row pointer (int64)."""


def _exponent_primes(spec: GameSpec, model: str, exponents: bool) -> tuple[int, int]:
    """(bound on D(s), number of primes up to it) of the first sweep's exponent arrays."""
    if not exponents:
        return 0, 0
    dbound = max_weight_bound(spec, model)
    # pi(x) < 1.26 x / ln x for x > 1 (Rosser and Schoenfeld, 1962)
    return dbound, (int(1.26 * dbound / math.log(dbound)) + 1) if dbound > 1 else 0


def skeleton_bytes_bound(space: StateSpace, model: str, exponents: bool = True,
                         threads: int | None = None) -> int:
    """Forecast peak bytes of random play's first sweep (`random_skeleton`: the layers of
    `core.sweep.swept_layers` kept as a `Skeleton`), an upper bound.

    Counts: the rank table; for every state of the space SKELETON_PER_STATE bytes, and for
    every move into a state (counted exactly by `StateSpace.moves_by_level`; only those
    from reachable states are kept) int8 drop, int32 source, and in the model "pairs" an
    int64 weight; for the layers in flight (max_drop + 1 live ones: lmin, lmax int32 and
    one int32 exponent per prime up to the bound on D(s); threads + 2 listings of the
    largest layer: states int64 per bin, ptr and D int64, reached flag, per move drop,
    source (int64), move (int32), weight (int64), keep flag and its compacted copy); the
    smallest-prime-factor tables.
    """
    spec = space.spec
    per_move = 5 + (8 if model == "pairs" else 0)
    dbound, nbp = _exponent_primes(spec, model, exponents)
    largest = space.largest_layer()
    moves_in = float(space.moves_by_level(-1).sum())
    kept = space.total_states() * SKELETON_PER_STATE + math.ceil(moves_in * per_move)
    live = (space.max_drop + 1) * largest * (8 + 4 * nbp)
    # the listing walks its layer: no int64 rows of states
    listing = space.listing_peak(16 + 1, 8 + 8 + 4 + 8 + 1 + 8 + 8)
    return int(space.tab.nbytes) + kept + live + (thread_count(threads) + 2) * listing + 16 * (
        dbound + 1)


def skeleton_nbytes(skel: Skeleton) -> int:
    """Bytes a finished `Skeleton` holds (its arrays' nbytes)."""
    total = 0
    for lv in skel.levels:
        inc = skel.incoming[lv]
        total += skel.lmin[lv].nbytes + skel.win[lv].nbytes + skel.dsum[lv].nbytes
        total += inc.ptr.nbytes + inc.drop.nbytes + inc.src.nbytes + inc.w.nbytes
    return int(total)


def random_space(spec: GameSpec, model: str, limit: int, what: str, exponents: bool = True,
                 threads: int | None = None) -> StateSpace:
    """The state space of random play after its up-front refusals.

    First, without allocating anything, the rank table's exact size plus
    SKELETON_PER_STATE bytes for each of up to `statespace.states_upper_bound` states
    (`refuse_space`); then the rank table; then the first sweep's forecast from the exact
    layer sizes (`skeleton_bytes_bound`).  MemoryRefused when any exceeds `limit`.
    """
    refuse_space(spec, limit, what, per_state=SKELETON_PER_STATE)
    space = build_space(spec, limit)
    refuse_if_over(skeleton_bytes_bound(space, model, exponents, threads), limit,
                   f"{what} (first sweep)")
    return space
