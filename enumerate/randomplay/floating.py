"""Random play in float64 with a rigorous bound on the accumulated rounding error.

Same pulling sweep as the exact one (`zeckenum.randomplay.exact`, any level drop of the moves),
with one double per (state, length) instead of residues: each state gathers its
predecessors' finished rows.  In the model "moves" a finished row is scaled once by
c = fl(1 / D(s)) and the moves add it; in the model "pairs" each move multiplies the
source's row by c = fl(w / D(s)).  The first sweep (`core.sweep.swept_layers`, shared
with counting and exact random play) runs in a background thread, a layer or two ahead
(its kernels release the GIL).
Error analysis (standard model of floating-point arithmetic, u = 2**-53, every quantity
non-negative so no cancellation can occur):

* a move's factor c carries one rounding; the term fl(v * c) one more;
* a destination slot is a sum of its m incoming terms, added one after the other in any
  order: each term suffers at most m - 1 further roundings;
* so if every value of state s is v_exact * (1 + theta) with |theta| <= gamma(K(s)),
  gamma(k) = k u / (1 - k u), then every value of t has |theta| <= gamma(K(t)) with
  K(t) = max over moves s -> t of (K(s) + 2) + (number of moves into t) - 1, K(start) = 0;
* underflow: a product may add an absolute error eta <= 2**-1075 (sums of subnormals are
  exact); such an error is then only multiplied by probabilities and rounded up by at most
  (1 + gamma(K)) < 2, so all of them together add at most (number of products) * 2**-1074
  to the probability of any event.

The printed bound for the probability of length L is
    gamma(K_end) * (p_L + eta_total) / (1 - gamma(K_end)) + eta_total,
with p_L the computed value, K_end the largest K of a terminal state (plus the number of
terminal states, for summing them), and eta_total the underflow term above; the bound for a
sum of several probabilities (a player's win, the total) is the sum of their bounds.  The
bound is evaluated in exact rational arithmetic and rounded upward.
"""

from __future__ import annotations

import math
import queue
import threading
import time
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np
from zeckenum.core.checks import check_random_args, check_threads, thread_count
from zeckenum.core.jit import kernel
from zeckenum.core.memory import human, refuse_if_over, resolve_limit
from zeckenum.core.moments import float_moments, gaussian_diagnostics
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.core.sweep import SweptLayer, drop_stale, gather_passes, swept_layers, window_bound
from zeckenum.errors import MemoryRefused
from zeckenum.randomplay.exact import winner_of_length
from zeckenum.randomplay.skeleton import SKELETON_PER_STATE
from zeckenum.rules.catalogue import get_rules

U = Fraction(1, 2**53)
ETA = Fraction(1, 2**1074)


@kernel(inline=True)
def _gather_float(dv: np.ndarray, sv: np.ndarray, c: float, unit: bool) -> None:
    """dv += sv (unit) or dv += sv * c, element by element (a vectorised loop)."""
    if unit:
        for t in range(sv.size):
            dv[t] += sv[t]
    else:
        for t in range(sv.size):
            dv[t] += sv[t] * c


@kernel
def pull_float_windows(
    vals: np.ndarray, off: np.ndarray, lmin: np.ndarray, win: np.ndarray, kfin: np.ndarray,
    up_vals: np.ndarray, up_off: np.ndarray, up_lmin: np.ndarray, up_win: np.ndarray,
    up_kfin: np.ndarray, up_dsum: np.ndarray, dsum: np.ndarray, ptr: np.ndarray,
    drop: np.ndarray, src: np.ndarray, w: np.ndarray, unit: bool, acc: np.ndarray,
    which: int = -1,
) -> None:
    """One layer of the float sweep, in ascending rank (see the module docstring).

    vals: state j's probabilities for lengths lmin[j] .. lmin[j] + win[j] - 1 at
    off[j] .. off[j+1]-1.  State j gathers its predecessors' finished rows (times
    fl(w / D(source)) unless `unit`); then kfin[j] = K(j) + (moves in) - 1, and with
    `unit` a non-terminal row is scaled by fl(1 / D(j)).  acc[2] counts the products done.
    `which` selects the moves gathered (`core.sweep.gather_passes`): -1 all (drops 0 and
    1, up_* one level up), d >= 1 those of drop d (up_* d levels up) leaving the states
    unfinished, with kfin[j] holding the running max of K(source) + 2; 0 the drop-0 moves,
    then finishing.  kfin must start at 0.
    """
    for j in range(win.size):
        wj = win[j]
        if wj == 0:
            continue
        kin = kfin[j]
        for e in range(ptr[j], ptr[j + 1]):
            # two written-out branches: selecting an array per move would cost reference
            # counting on every move
            i = src[e]
            if which >= 0 and drop[e] != which:
                continue
            if drop[e] == 0:
                sw = win[i]
                d0 = off[j] + lmin[i] + 1 - lmin[j]
                c = 1.0 if unit else w[e] / dsum[i]
                _gather_float(vals[d0 : d0 + sw], vals[off[i] : off[i] + sw], c, unit)
                ks = kfin[i]
            else:
                sw = up_win[i]
                d0 = off[j] + up_lmin[i] + 1 - lmin[j]
                c = 1.0 if unit else w[e] / up_dsum[i]
                _gather_float(vals[d0 : d0 + sw], up_vals[up_off[i] : up_off[i] + sw], c, unit)
                ks = up_kfin[i]
            if not unit:
                acc[2] += sw
            if ks + 2 > kin:
                kin = ks + 2
        if which > 0:
            kfin[j] = kin
            continue
        kfin[j] = kin + max(ptr[j + 1] - ptr[j] - 1, 0)
        d = dsum[j]
        if unit and d > 0:
            row = vals[off[j] : off[j] + wj]
            c = 1.0 / d
            for t in range(wj):
                row[t] = row[t] * c
            acc[2] += wj


@kernel
def collect_float_terminals(
    vals: np.ndarray, off: np.ndarray, lmin: np.ndarray, win: np.ndarray, kfin: np.ndarray,
    dsum: np.ndarray, out: np.ndarray, acc: np.ndarray,
) -> None:
    """Add the rows of the reached terminal states into out[length], in ascending rank;
    acc[0] = largest terminal K, acc[1] += terminal states."""
    for j in range(win.size):
        wj = win[j]
        if wj == 0 or dsum[j] != 0:
            continue
        o = out[lmin[j] : lmin[j] + wj]
        row = vals[off[j] : off[j] + wj]
        for t in range(wj):
            o[t] += row[t]
        if kfin[j] > acc[0]:
            acc[0] = kfin[j]
        acc[1] += 1


@dataclass(frozen=True)
class FloatResult:
    """Float random play at one n, with rigorous absolute error bounds.

    length_probability {length: float}; length_error {length: bound on |computed - exact|};
    win_probability / win_error per player (1-based); total = sum of all probabilities
    (exactly 1 up to total_error).
    """

    rules: str
    n: int
    players: int
    model: str
    length_probability: dict[int, float]
    length_error: dict[int, float]
    win_probability: dict[int, float]
    win_error: dict[int, float]
    total: float
    total_error: float
    max_error: float
    moments: dict = field(default_factory=dict)
    gaussian: dict = field(default_factory=dict)
    stats: dict = field(default_factory=dict, compare=False)
    position: str = ""  # the start position (README "Positions") when not the rule set's

    def to_dict(self) -> dict:
        return {
            "rules": self.rules, "n": self.n,
            **({"position": self.position} if self.position else {}),
            "players": self.players, "model": self.model,
            "mode": "float",
            "no_move_convention": "a game of length 0 counts as a win for the last player",
            "length_probability": {str(k): v for k, v in self.length_probability.items()},
            "length_error_bound": {str(k): v for k, v in self.length_error.items()},
            "win_probability": {str(k): v for k, v in self.win_probability.items()},
            "win_error_bound": {str(k): v for k, v in self.win_error.items()},
            "total_probability": self.total,
            "total_error_bound": self.total_error,
            "max_error_bound": self.max_error,
            "mean_length": self.moments.get("mean"),
            "variance": self.moments.get("variance"),
            "skewness": self.moments.get("skewness"),
            "excess_kurtosis": self.moments.get("excess_kurtosis"),
            "gaussian": self.gaussian,
            "stats": self.stats,
        }


def _round_up(x: Fraction) -> float:
    f = float(x)
    return f if Fraction(f) >= x else math.nextafter(f, math.inf)


def _producer(layers: Iterator[SweptLayer], out_q: queue.Queue) -> None:
    """Run the first sweep into a queue (a background thread): layers, then None."""
    try:
        for layer in layers:
            out_q.put(layer)
        out_q.put(None)
    except BaseException as exc:  # noqa: BLE001 - handed to the consumer
        out_q.put(exc)


def _queued(out_q: queue.Queue) -> Iterator[SweptLayer]:
    while True:
        item = out_q.get()
        if item is None:
            return
        if isinstance(item, BaseException):
            raise item
        yield item


RING_GROWTH = 1.25
"""A ring buffer too small for a layer is replaced by one at least this much larger."""


def float_sweep_bytes(space: StateSpace, model: str, threads: int) -> tuple[int, int]:
    """(forecast peak bytes of `float_play`, the part of it in value buffers).

    An upper bound when the game has a proven window bound (`core.sweep.window_bound`: the
    standard game, or every move lowering the level), else a bound on everything but the
    value buffers, which `float_sweep` then
    checks layer by layer before it allocates them.

    Counts: the rank table; the first sweep's layers in flight without exponents (live
    lmin, lmax int32; threads + 2 listings of the largest layer); the finished layers
    queued between the two threads and held live by the float sweep (max_drop + 4 of the
    largest: SKELETON_PER_STATE bytes per state and the kept moves in, counted by
    `StateSpace.moves_by_level`, plus kfin int64); and the float sweep's ring of
    max_drop + 1 value buffers, each up to RING_GROWTH x (largest layer x window bound)
    doubles.
    """
    spec = space.spec
    per_move = 5 + (8 if model == "pairs" else 0)
    largest = space.largest_layer()
    # the listing walks its layer: no int64 rows of states
    listing = space.listing_peak(16 + 1, 8 + 8 + 4 + 8 + 1 + 8 + 8)
    first = (space.max_drop + 1) * largest * 8 + (threads + 2) * listing
    layers = (space.max_drop + 4) * space.listing_peak(SKELETON_PER_STATE + 8, per_move)
    window = window_bound(spec) or 1
    ring = (space.max_drop + 1) * math.ceil(RING_GROWTH * largest * window) * 8
    return int(space.tab.nbytes) + first + layers + ring, ring


def float_sweep(
    layers: Iterable[SweptLayer], start_level: int, start_rank: int, unit: bool,
    max_drop: int = 1, budget: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """(out, acc): out[L] = computed probability of length L, acc = [largest terminal K,
    terminal states, products done].

    `max_drop` bounds the level drop of every move: the layers level + 1 .. level +
    max_drop stay live, in a ring of max_drop + 1 reused buffers (the layers still read are
    among the max_drop swept just before the current one, so none shares its slot).
    Memory traffic bounds this sweep (every move streams its source's window), so it runs
    in one thread; `float_play` overlaps it with the first sweep instead.  `budget`: most
    bytes the ring may hold; a layer whose buffer would exceed it is refused
    (MemoryRefused) before the buffer is allocated.
    """
    out = np.zeros(64, dtype=np.float64)
    acc = np.zeros(3, dtype=np.int64)
    span = max(max_drop, 1) + 1
    ring = [np.empty(0) for _ in range(span)]
    z64 = np.zeros(1, dtype=np.int64)
    z32 = np.zeros(0, dtype=np.int32)
    empty = (np.zeros(0), z64, z32, z32, z64[:0], z64[:0])
    live: dict[int, tuple] = {}
    for k, layer in enumerate(layers):
        level, lmin, win, dsum, inc = (layer.level, layer.lmin, layer.win, layer.dsum,
                                       layer.incoming)
        off = np.zeros(win.size + 1, dtype=np.int64)
        np.cumsum(win.astype(np.int64), out=off[1:])
        need = int(off[-1])
        if ring[k % span].size < need:
            grown = max(need, int(RING_GROWTH * ring[k % span].size))
            held = 8 * (sum(r.size for r in ring) - ring[k % span].size + grown)
            if budget is not None and held > budget:
                raise MemoryRefused(
                    f"the float sweep needs {human(held)} for its layers in flight at level "
                    f"{level} but {human(budget)} is left under the limit; raise it with "
                    "--max-memory SIZE if the machine really has more"
                )
            ring[k % span] = np.empty(grown)
        vals = ring[k % span][:need]
        vals[:] = 0.0
        if level == start_level:
            vals[off[start_rank]] = 1.0
        top = int((lmin + win).max(initial=0))
        if top > out.size:
            out = np.concatenate([out, np.zeros(max(top, 2 * out.size) - out.size)])
        kfin = np.zeros(win.size, dtype=np.int64)
        for which, src_level in gather_passes(inc.drop, max_drop, level, live):
            pull_float_windows(vals, off, lmin, win, kfin, *live.get(src_level, empty), dsum,
                               inc.ptr, inc.drop, inc.src, inc.w, unit, acc, which)
        collect_float_terminals(vals, off, lmin, win, kfin, dsum, out, acc)
        live[level] = (vals, off, lmin, win, kfin, dsum)
        drop_stale(live, level, max_drop)
    return out, acc


def float_play(
    n: int, rules: str = "standard", players: int = 2, model: str = "moves",
    threads: int | None = None, max_memory: int | None = None,
) -> FloatResult:
    """The length distribution and win probabilities in float64, with error bounds.

    The first sweep runs one or two layers ahead in a background thread (kernels release
    the GIL), so the two sweeps overlap.  Memory (`max_memory`, default what the machine
    has available): refused up front from the rank table's size, then from
    `float_sweep_bytes`; the value buffers are checked again as each layer arrives.
    """
    check_random_args(n, players, model)
    threads = check_threads(threads)
    rs = get_rules(rules)
    limit = resolve_limit(max_memory)
    t0 = time.perf_counter()
    spec = rs.instantiate(n)
    refuse_space(spec, limit, f"float random play at n={n}")
    space = build_space(spec, limit)
    nthreads = thread_count(threads)
    forecast, ring_bytes = float_sweep_bytes(space, model, nthreads)
    refuse_if_over(forecast, limit, f"float random play at n={n}")
    start_level, start_rank = space.rank(space.spec.start)
    layers = swept_layers(space, pairs=model == "pairs", threads=nthreads)
    q: queue.Queue = queue.Queue(maxsize=2)
    th = threading.Thread(target=_producer, args=(layers, q), daemon=True)
    th.start()
    budget = limit - (forecast - ring_bytes) if window_bound(spec) is None else None
    out, acc = float_sweep(_queued(q), start_level, start_rank, model == "moves",
                           space.max_drop, budget)
    th.join()
    t1 = time.perf_counter()
    lengths = [int(L) for L in np.nonzero(out)[0]]
    k_end = int(acc[0]) + int(acc[1])
    gamma = k_end * U / (1 - k_end * U)
    eta_total = int(acc[2]) * ETA
    dist = {L: float(out[L]) for L in lengths}
    err = {L: _round_up(gamma * (Fraction(out[L]) + eta_total) / (1 - gamma) + eta_total)
           for L in lengths}
    wins = {i: 0.0 for i in range(1, players + 1)}
    werr = {i: Fraction(0) for i in range(1, players + 1)}
    for L in lengths:
        wins[winner_of_length(L, players)] += dist[L]
        werr[winner_of_length(L, players)] += Fraction(err[L])
    # the float sums above add their own rounding: at most (terms) * u relative
    werr_f = {i: _round_up(e + len(lengths) * U * Fraction(wins[i]) * 2) for i, e in werr.items()}
    total = math.fsum(dist.values())
    total_err = _round_up(sum((Fraction(e) for e in err.values()), Fraction(0)))
    ks = np.array(lengths, dtype=np.float64)
    ps = np.array([dist[L] for L in lengths])
    return FloatResult(
        rules=rs.name, n=n, players=players, model=model, length_probability=dist,
        length_error=err, win_probability=wins, win_error=werr_f, total=total,
        total_error=total_err, max_error=max(err.values()),
        moments=float_moments(ks, ps), gaussian=gaussian_diagnostics(dist),
        stats={"sweep_s": round(t1 - t0, 3),
               "k_end": k_end, "products": int(acc[2]), "forecast_peak_bytes": forecast},
    )
