"""Random play in float64 with a rigorous bound on the accumulated rounding error.

Same sweep as the exact one (`zeckenum.randomplay`), with one double per (state, length)
instead of residues.  Error analysis (standard model of floating-point arithmetic,
u = 2**-53, every quantity non-negative so no cancellation can occur):

* a move's factor c = fl(w / D) carries one rounding; the term fl(v * c) one more;
* a destination slot is the recursive sum of its m incoming terms: each term suffers at
  most m - 1 further roundings;
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
from dataclasses import dataclass, field
from fractions import Fraction

import numba as nb
import numpy as np

from .moments import float_moments, gaussian_diagnostics
from .randomplay import layer_data, validate, winner_of_length
from .rules import get_rules
from .statespace import build_space

UNREACHED = np.iinfo(np.int32).max
U = Fraction(1, 2**53)
ETA = Fraction(1, 2**1074)


@nb.njit(cache=True, nogil=True)
def relax_layer_windows(
    lmin: np.ndarray, lmax: np.ndarray, ptr: np.ndarray, drop: np.ndarray, dest: np.ndarray,
    n_lmin: np.ndarray, n_lmax: np.ndarray,
) -> None:
    """Shortest/longest path lengths pushed along one layer's moves (UNREACHED: no path).

    Drop-0 moves stay in the layer (ascending rank is topological), drop-1 moves go to n_*.
    """
    for i in range(lmin.size):
        if lmin[i] == UNREACHED:
            continue
        a = lmin[i] + 1
        b = lmax[i] + 1
        for e in range(ptr[i], ptr[i + 1]):
            j = dest[e]
            if drop[e] == 0:
                tmn, tmx = lmin, lmax
            else:
                tmn, tmx = n_lmin, n_lmax
            if a < tmn[j]:
                tmn[j] = a
            if b > tmx[j]:
                tmx[j] = b


@nb.njit(cache=True, nogil=True)
def push_float_windows(
    vals: np.ndarray, off: np.ndarray, lmin: np.ndarray, win: np.ndarray, kin: np.ndarray,
    cnt: np.ndarray, dsum: np.ndarray, ptr: np.ndarray, drop: np.ndarray, dest: np.ndarray,
    w: np.ndarray, n_vals: np.ndarray, n_off: np.ndarray, n_lmin: np.ndarray,
    n_kin: np.ndarray, n_cnt: np.ndarray, unit: bool, out: np.ndarray, acc: np.ndarray,
) -> None:
    """One layer of the float sweep (see the module docstring for K, kin and cnt).

    vals: state i's probabilities for lengths lmin[i] .. lmin[i] + win[i] - 1 at
    off[i] .. off[i+1]-1.  acc = [largest terminal K, terminal states, products done].
    Terminal rows are added into out[length].
    """
    for i in range(win.size):
        wi = win[i]
        if wi == 0:
            continue
        k_i = kin[i] + max(cnt[i] - 1, 0)
        s0 = off[i]
        d = dsum[i]
        if d == 0:
            for t in range(wi):
                out[lmin[i] + t] += vals[s0 + t]
            if k_i > acc[0]:
                acc[0] = k_i
            acc[1] += 1
            continue
        b = vals[s0 : s0 + wi]
        if unit:
            c = 1.0 / d
            for t in range(wi):
                b[t] = b[t] * c
            acc[2] += wi
        for e in range(ptr[i], ptr[i + 1]):
            j = dest[e]
            if drop[e] == 0:
                tv, toff, tmn, tk, tc = vals, off, lmin, kin, cnt
            else:
                tv, toff, tmn, tk, tc = n_vals, n_off, n_lmin, n_kin, n_cnt
            d0 = toff[j] + (lmin[i] + 1 - tmn[j])
            a = tv[d0 : d0 + wi]
            if unit:
                for t in range(wi):
                    a[t] += b[t]
            else:
                ce = w[e] / d
                for t in range(wi):
                    a[t] += b[t] * ce
                acc[2] += wi
            if k_i + 2 > tk[j]:
                tk[j] = k_i + 2
            tc[j] += 1


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

    def to_dict(self) -> dict:
        return {
            "rules": self.rules, "n": self.n, "players": self.players, "model": self.model,
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


def _windows_producer(space, out_q: queue.Queue, model: str) -> None:
    """Reachability and windows layer by layer (background thread), with each layer's moves.

    Puts (level, LayerMoves, w, D, lmin, win) once the level's windows are final."""
    try:
        start_level, start_rank = space.rank(space.spec.start)
        empty = np.zeros(0, dtype=np.int32)

        def fresh(level):
            size = space.layer_size(level) if level >= 0 else 0
            return np.full(size, UNREACHED, np.int32), np.full(size, -1, np.int32)

        cur = fresh(start_level)
        cur[0][start_rank] = 0
        cur[1][start_rank] = 0
        for level in range(start_level, -1, -1):
            if space.layer_size(level) == 0:
                continue
            lm, w, dsum = layer_data(space, level, model)
            nxt = fresh(level - 1) if level >= 1 else (empty, empty)
            relax_layer_windows(cur[0], cur[1], lm.ptr, lm.drop, lm.dest, nxt[0], nxt[1])
            lmin, lmax = cur
            reached = lmin != UNREACHED
            win = np.where(reached, lmax - lmin + 1, 0).astype(np.int32)
            out_q.put((level, lm, w, dsum, np.where(reached, lmin, 0).astype(np.int32), win))
            cur = nxt
        out_q.put(None)
    except BaseException as exc:  # pragma: no cover - handed to the consumer
        out_q.put(exc)


def float_play(
    n: int, rules: str = "standard", players: int = 2, model: str = "moves"
) -> FloatResult:
    """The length distribution and win probabilities in float64, with error bounds.

    The windows sweep runs one layer ahead in a background thread (kernels release the
    GIL), so the two sweeps overlap.
    """
    validate(n, players, model)
    rs = get_rules(rules)
    t0 = time.perf_counter()
    space = build_space(rs.instantiate(n))
    if space.max_drop > 1:
        from .errors import InputError

        raise InputError("random play supports rule sets whose moves drop the level by <= 1")
    q: queue.Queue = queue.Queue(maxsize=3)
    th = threading.Thread(target=_windows_producer, args=(space, q, model), daemon=True)
    th.start()

    def take():
        item = q.get()
        if isinstance(item, BaseException):
            raise item
        return item

    start_level, start_rank = space.rank(space.spec.start)
    out = np.zeros(8 * n + 64, dtype=np.float64)
    acc = np.zeros(3, dtype=np.int64)

    def alloc(item):
        if item is None:
            z = np.zeros(0, np.int32)
            e = np.zeros(0, np.int64)
            return np.zeros(0), np.zeros(1, np.int64), z, z, e, e.copy()
        _lv, _lm, _w, _d, lmin, win = item
        off = np.zeros(win.size + 1, dtype=np.int64)
        np.cumsum(win.astype(np.int64), out=off[1:])
        size = win.size
        return (np.zeros(int(off[-1])), off, lmin, win, np.zeros(size, np.int64),
                np.zeros(size, np.int64))

    item = take()
    cur = alloc(item)
    cur[0][cur[1][start_rank]] = 1.0
    while item is not None:
        nxt_item = take()
        if nxt_item is not None and nxt_item[0] != item[0] - 1:  # pragma: no cover
            raise RuntimeError("levels are not consecutive")
        nxt = alloc(nxt_item)
        _lv, lm, w, dsum, _lmin, _win = item
        if int(cur[3].max(initial=0)) + int(cur[2].max(initial=0)) + 2 > out.size:
            out = np.concatenate([out, np.zeros(out.size)])
        push_float_windows(
            cur[0], cur[1], cur[2], cur[3], cur[4], cur[5], dsum, lm.ptr, lm.drop, lm.dest, w,
            nxt[0], nxt[1], nxt[2], nxt[4], nxt[5], model == "moves", out, acc,
        )
        item, cur = nxt_item, nxt
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
        stats={"sweep_s": round(t1 - t0, 3), "k_end": k_end, "products": int(acc[2])},
    )
