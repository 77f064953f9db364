"""Exact random play: the probability of every game length and of every player winning.

Two random models (``model=``):

``"moves"``  The player to move picks uniformly among the legal moves of the state, a move
             being a move type applied to a bin (tokens are indistinguishable).  A state
             with d legal moves sends probability 1/d along each of them.
``"pairs"``  The player picks uniformly among the unordered pairs of distinct tokens that can
             move together.  A move that takes one token from each of two bins (a combine
             F(k-1) + F(k) -> F(k+1)) has weight a(k-1) * a(k); a move that takes two tokens
             of one bin (2 F1 -> F2, a split) has weight a(k) * (a(k) - 1) / 2, where a(k)
             is the number of tokens in bin k.  In general a move's weight is the product over
             the bins it takes from of binomial(a(bin), tokens taken).  A state sends
             probability weight / (sum of the weights of its moves) along each move.

The probability of a game is the product of these transition probabilities; the probability
of length L is the sum over the games of L moves.  Player i (1-based) of P wins a game of
length L when (L - 1) mod P == i - 1; a game with no move at all (n = 1) is a "win" for
player P by this convention.

Exactness.  Let D(s) be the total move weight of a non-terminal state s.  Every game's
probability is an integer over the product of D(s) along it, so every length probability
times M = lcm over games of prod D(s) is an integer in [0, M].  M = prod_p p**e_p with
e_p = max over games of sum v_p(D(s)), which a first sweep computes exactly (max-plus
dynamic programming over the states, one exponent per prime p <= max D).  The second sweep
computes every probability modulo word primes q (inverses of D(s) mod q from a table);
the integer N = P * M is rebuilt by the Chinese remainder theorem from primes whose product
exceeds M, and one extra prime checks it (CheckPrimeMismatch on disagreement).  The
residues also satisfy sum N == M, which is checked.

Word primes are below 3037000499 = floor(sqrt(2**63 - 1)), so a product of two residues
fits in int64; reductions use a float64 estimate of the quotient corrected by one step
(`mulmod`).  A destination accumulates unreduced products (at most #move-types incoming
moves, each < q * max weight) and is reduced once, when the sweep reaches it.

The winner-only path keeps per state the P residues of length mod P instead of a window of
lengths; it costs O(P) per move instead of O(window).
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from fractions import Fraction

import numba as nb
import numpy as np

from .errors import CheckPrimeMismatch, InputError
from .modular import crt, is_prime
from .rules import GameSpec, get_rules
from .statespace import StateSpace, build_space

MODELS = ("moves", "pairs")
WORD_PRIME_CEILING = 3037000499  # floor(sqrt(2**63 - 1)): (q - 1)**2 fits in int64


# ----------------------------------------------------------------------------- primes


def word_primes(count: int, offset: int = 0) -> list[int]:
    """The primes number offset .. offset+count-1 counted downward from WORD_PRIME_CEILING."""
    out: list[int] = []
    c = WORD_PRIME_CEILING if WORD_PRIME_CEILING % 2 else WORD_PRIME_CEILING - 1
    skipped = 0
    while len(out) < count:
        if is_prime(c):
            if skipped < offset:
                skipped += 1
            else:
                out.append(c)
        c -= 2
    return out


def primes_exceeding(bound: int, offset: int = 0) -> tuple[list[int], int]:
    """(word primes whose product exceeds `bound`, one extra check prime)."""
    need = max(1, math.ceil((bound.bit_length() + 1) / 31.4))
    while True:
        ps = word_primes(need + 1, offset)
        prod = math.prod(ps[:need])
        if prod > bound:
            return ps[:need], ps[need]
        need += 1


def small_primes_upto(m: int) -> np.ndarray:
    """All primes <= m (int64, ascending; sieve of Eratosthenes)."""
    if m < 2:
        return np.zeros(0, dtype=np.int64)
    sieve = np.ones(m + 1, dtype=bool)
    sieve[:2] = False
    for p in range(2, math.isqrt(m) + 1):
        if sieve[p]:
            sieve[p * p :: p] = False
    return np.nonzero(sieve)[0].astype(np.int64)


def inverse_table(primes: list[int], dmax: int) -> np.ndarray:
    """inv[q, d] = d**-1 mod primes[q] for 1 <= d <= dmax (inv[q, 0] = 0), int64."""
    inv = np.zeros((len(primes), dmax + 1), dtype=np.int64)
    for qi, p in enumerate(primes):
        _fill_inverses(inv[qi], p, dmax)
    return inv


@nb.njit(cache=True, nogil=True)
def _fill_inverses(row: np.ndarray, p: int, dmax: int) -> None:
    """row[d] = d**-1 mod p by inv(d) = -(p // d) * inv(p mod d) (valid for d < p)."""
    if dmax >= 1:
        row[1] = 1
    for d in range(2, dmax + 1):
        row[d] = (p - (p // d) * row[p % d] % p) % p


# ----------------------------------------------------------------------------- kernels


@nb.njit(cache=True, nogil=True, inline="always")
def mulmod(a: int, b: int, p: int, pinv: float) -> int:
    """a * b mod p for 0 <= a, b < p < 3037000500 (float64 quotient estimate, one correction)."""
    q = np.int64(float(a) * float(b) * pinv)
    r = a * b - q * p  # the estimate is off by at most one: r in [-p, 2p)
    r += (r >> 63) & p
    r -= p * np.int64(r >= p)
    return r


@nb.njit(cache=True, nogil=True, inline="always")
def reduce63(x: int, p: int, pinv: float) -> int:
    """x mod p for 0 <= x < 2**63 (float64 quotient estimate, corrected)."""
    q = np.int64(float(x) * pinv)
    r = x - q * p  # x / p < 2**32: the estimate is off by at most one, r in [-p, 2p)
    r += (r >> 63) & p
    r -= p * np.int64(r >= p)
    return r


@nb.njit(cache=True, nogil=True)
def move_weights(
    states: np.ndarray, ptr: np.ndarray, move: np.ndarray, tk_bins: np.ndarray,
    tk_cnt: np.ndarray, pairs: bool,
):
    """(w[e], D[i]): weight of every move and total move weight of every state of a layer.

    Model "moves": every move has weight 1.  Model "pairs": prod over taken bins of
    binomial(count in bin, tokens taken).  D is 0 exactly for states without moves.
    """
    size = states.shape[0]
    w = np.ones(ptr[size], dtype=np.int64)
    dsum = np.zeros(size, dtype=np.int64)
    for i in range(size):
        tot = 0
        for e in range(ptr[i], ptr[i + 1]):
            x = 1
            if pairs:
                m = move[e]
                for j in range(tk_bins.shape[1]):
                    c = tk_cnt[m, j]
                    if c > 0:
                        a = states[i, tk_bins[m, j]]
                        b = 1
                        for t in range(c):
                            b = b * (a - t) // (t + 1)
                        x *= b
            w[e] = x
            tot += x
        dsum[i] = tot
    return w, dsum


@nb.njit(cache=True, nogil=True)
def first_pass_layer(
    reach: np.ndarray, lmin: np.ndarray, lmax: np.ndarray, ex: np.ndarray, dsum: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, dest: np.ndarray,
    n_reach: np.ndarray, n_lmin: np.ndarray, n_lmax: np.ndarray, n_ex: np.ndarray,
    spf: np.ndarray, pidx: np.ndarray, end_ex: np.ndarray, stats: np.ndarray,
) -> None:
    """Reachability, length windows and lcm exponents, pushed along one layer's moves.

    ex[i, b] = max over paths start -> i of sum v_{p_b}(D(s)) over the states s left on the
    path; drop-0 moves write into this layer (ascending rank is topological), drop-1 moves
    into the n_* arrays of the next layer.  Terminal states fold into end_ex (max) and
    stats = [states, moves, terminals, shortest, longest, max D].
    """
    nb_ = ex.shape[1]
    cand = np.zeros(nb_, dtype=ex.dtype)
    for i in range(reach.size):
        if not reach[i]:
            continue
        stats[0] += 1
        deg = ptr[i + 1] - ptr[i]
        stats[1] += deg
        if deg == 0:
            stats[2] += 1
            if lmin[i] < stats[3]:
                stats[3] = lmin[i]
            if lmax[i] > stats[4]:
                stats[4] = lmax[i]
            for b in range(nb_):
                if ex[i, b] > end_ex[b]:
                    end_ex[b] = ex[i, b]
            continue
        d = dsum[i]
        if d > stats[5]:
            stats[5] = d
        for b in range(nb_):
            cand[b] = ex[i, b]
        while d > 1:
            p = spf[d]
            cand[pidx[p]] += 1
            d //= p
        a = lmin[i] + 1
        z = lmax[i] + 1
        for e in range(ptr[i], ptr[i + 1]):
            j = dest[e]
            if drop[e] == 0:
                tr, tmn, tmx, tex = reach, lmin, lmax, ex
            else:
                tr, tmn, tmx, tex = n_reach, n_lmin, n_lmax, n_ex
            if not tr[j]:
                tr[j] = True
                tmn[j] = a
                tmx[j] = z
            else:
                if a < tmn[j]:
                    tmn[j] = a
                if z > tmx[j]:
                    tmx[j] = z
            for b in range(nb_):
                if cand[b] > tex[j, b]:
                    tex[j, b] = cand[b]


@nb.njit(cache=True, nogil=True)
def push_mod_windows(
    vals: np.ndarray, off: np.ndarray, lmin: np.ndarray, win: np.ndarray, dsum: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, dest: np.ndarray, w: np.ndarray,
    n_vals: np.ndarray, n_off: np.ndarray, n_lmin: np.ndarray, n_win: np.ndarray,
    primes: np.ndarray, inv: np.ndarray, unit: bool, out: np.ndarray,
) -> None:
    """One layer of the exact sweep over length windows, for one block of primes.

    State i owns words off[i] .. off[i+1]-1 laid out [length in its window][prime], so a
    move adds one contiguous block.  When the sweep reaches i its words are reduced mod q
    and multiplied by D(i)^-1 (inv[D, q]); then for every move e, w[e] times the block is
    added (unreduced) into the destination's block shifted by one length.  Blocks of
    terminal states are reduced and added into out[length, q].
    """
    nq = primes.size
    pinv = np.empty(nq)
    for q in range(nq):
        pinv[q] = 1.0 / primes[q]
    for i in range(win.size):
        wi = win[i]
        if wi == 0:
            continue
        s0 = off[i]
        d = dsum[i]
        for t in range(wi):
            base = s0 + t * nq
            if d == 0:
                row = lmin[i] + t
                for q in range(nq):
                    p = primes[q]
                    x = reduce63(vals[base + q], p, pinv[q]) + out[row, q]
                    if x >= p:
                        x -= p
                    out[row, q] = x
            else:
                for q in range(nq):
                    p = primes[q]
                    vals[base + q] = mulmod(
                        reduce63(vals[base + q], p, pinv[q]), inv[d, q], p, pinv[q]
                    )
        if d == 0:
            continue
        span = wi * nq
        for e in range(ptr[i], ptr[i + 1]):
            j = dest[e]
            if drop[e] == 0:
                tv, toff, tmn = vals, off, lmin
            else:
                tv, toff, tmn = n_vals, n_off, n_lmin
            d0 = toff[j] + (lmin[i] + 1 - tmn[j]) * nq
            a = tv[d0 : d0 + span]  # views: lets LLVM vectorise the block add
            b = vals[s0 : s0 + span]
            if unit:
                for k in range(span):
                    a[k] += b[k]
            else:
                we = w[e]
                for k in range(span):
                    a[k] += b[k] * we


@nb.njit(cache=True, nogil=True)
def push_mod_residues(
    vals: np.ndarray, reach: np.ndarray, dsum: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, dest: np.ndarray, w: np.ndarray,
    n_vals: np.ndarray, primes: np.ndarray, inv: np.ndarray, unit: bool, out: np.ndarray,
) -> None:
    """One layer of the winner-only sweep: vals[i, r, q] = P(reach i, length = r mod P).

    Same reduction scheme as `push_mod_windows`; a move sends residue r to residue r + 1.
    Terminal rows are added into out[r, q].
    """
    nq = primes.size
    npl = vals.shape[1]
    pinv = np.empty(nq)
    for q in range(nq):
        pinv[q] = 1.0 / primes[q]
    for i in range(reach.size):
        if not reach[i]:
            continue
        d = dsum[i]
        for r in range(npl):
            if d == 0:
                for q in range(nq):
                    p = primes[q]
                    x = reduce63(vals[i, r, q], p, pinv[q]) + out[r, q]
                    if x >= p:
                        x -= p
                    out[r, q] = x
            else:
                for q in range(nq):
                    p = primes[q]
                    vals[i, r, q] = mulmod(
                        reduce63(vals[i, r, q], p, pinv[q]), inv[d, q], p, pinv[q]
                    )
        if d == 0:
            continue
        for e in range(ptr[i], ptr[i + 1]):
            j = dest[e]
            tv = vals if drop[e] == 0 else n_vals
            we = w[e]
            for r in range(npl):
                r1 = r + 1 if r + 1 < npl else 0
                a = tv[j, r1]
                b = vals[i, r]
                if unit:
                    for q in range(nq):
                        a[q] += b[q]
                else:
                    for q in range(nq):
                        a[q] += b[q] * we


# ----------------------------------------------------------------------------- drivers


def take_arrays(spec: GameSpec) -> tuple[np.ndarray, np.ndarray]:
    """(tk_bins, tk_cnt): per move, the bins it takes tokens from and how many (0-padded)."""
    tk_cnt = np.where(spec.mv_delta < 0, -spec.mv_delta, 0).astype(np.int64)
    return spec.mv_bins.astype(np.int64), tk_cnt


def check_model(model: str) -> None:
    if model not in MODELS:
        raise InputError(f"unknown random model {model!r} (use one of: {', '.join(MODELS)})")


def max_weight_bound(spec: GameSpec, model: str) -> int:
    """An a-priori bound on D(s) over all states: #move types, or C(n, 2) for pairs."""
    if model == "moves":
        return len(spec.move_names)
    tokens = int(spec.start.sum())
    return max(1, tokens * (tokens - 1) // 2)


@dataclass(frozen=True, eq=False)
class Skeleton:
    """Result of the first sweep: reachable states, windows and the common denominator.

    reach[level] bool per rank; lmin/win[level] int32 (win 0: unreachable);
    denominator M = lcm over games of prod D(s), with M * P(any event) an integer.
    """

    reach: dict[int, np.ndarray]
    lmin: dict[int, np.ndarray]
    win: dict[int, np.ndarray]
    denominator: int
    states: int
    transitions: int
    shortest: int
    longest: int
    max_weight: int


def layer_data(space: StateSpace, level: int, model: str):
    """(LayerMoves, w, D) of one layer under a random model."""
    lm = space.moves(level)
    tk_bins, tk_cnt = take_arrays(space.spec)
    w, dsum = move_weights(lm.states, lm.ptr, lm.move, tk_bins, tk_cnt, model == "pairs")
    return lm, w, dsum


def first_sweep(space: StateSpace, model: str) -> Skeleton:
    """Reachability, length windows and the exact lcm denominator M of one game and model."""
    check_model(model)
    spec = space.spec
    if space.max_drop > 1:
        raise InputError("random play supports rule sets whose moves drop the level by <= 1")
    dbound = max_weight_bound(spec, model)
    plist = small_primes_upto(dbound)
    spf = np.zeros(dbound + 1, dtype=np.int64)
    for p in plist[::-1]:
        spf[p::p] = p
    pidx = np.zeros(dbound + 1, dtype=np.int64)
    pidx[plist] = np.arange(plist.size)
    nbp = max(1, plist.size)
    exdt = np.int32
    start_level, start_rank = space.rank(spec.start)

    def fresh(level: int):
        size = space.layer_size(level)
        return (
            np.zeros(size, dtype=np.bool_),
            np.zeros(size, dtype=np.int32),
            np.zeros(size, dtype=np.int32),
            np.zeros((size, nbp), dtype=exdt),
        )

    def fresh_empty():
        z = np.zeros(0, np.int32)
        return np.zeros(0, np.bool_), z, z.copy(), np.zeros((0, nbp), dtype=exdt)

    cur = fresh(start_level)
    cur[0][start_rank] = True
    end_ex = np.zeros(nbp, dtype=exdt)
    stats = np.array([0, 0, 0, np.iinfo(np.int64).max, -1, 0], dtype=np.int64)
    reach_d: dict[int, np.ndarray] = {}
    lmin_d: dict[int, np.ndarray] = {}
    win_d: dict[int, np.ndarray] = {}
    for level in range(start_level, -1, -1):
        if space.layer_size(level) == 0:
            continue
        lm, _w, dsum = layer_data(space, level, model)
        nxt = fresh(level - 1) if level >= 1 else fresh_empty()
        first_pass_layer(
            cur[0], cur[1], cur[2], cur[3], dsum, lm.ptr, lm.drop, lm.dest,
            nxt[0], nxt[1], nxt[2], nxt[3], spf, pidx, end_ex, stats,
        )
        reach, lmin, lmax = cur[0], cur[1], cur[2]
        reach_d[level] = reach
        lmin_d[level] = np.where(reach, lmin, 0).astype(np.int32)
        win_d[level] = np.where(reach, lmax - lmin + 1, 0).astype(np.int32)
        cur = nxt
    m = 1
    for b, p in enumerate(plist):
        if end_ex[b]:
            m *= int(p) ** int(end_ex[b])
    return Skeleton(
        reach=reach_d, lmin=lmin_d, win=win_d, denominator=m, states=int(stats[0]),
        transitions=int(stats[1]), shortest=int(stats[3]), longest=int(stats[4]),
        max_weight=int(stats[5]),
    )


def _check_accumulation(space: StateSpace, model: str, primes: list[int]) -> None:
    """Refuse a run whose unreduced accumulation could overflow int64 (see module doc)."""
    spec = space.spec
    wmax = 1 if model == "moves" else max_weight_bound(spec, model)
    if len(spec.move_names) * (max(primes) - 1) * wmax >= 2**63:
        raise InputError("n too large for the exact random sweep's int64 accumulation")


def _rebuild(rows: list[list[int]], check: list[int], primes: list[int], check_prime: int,
             m: int, what: str) -> list[Fraction]:
    """Fractions N / M from the residues of P * (primes) -- N rebuilt by CRT, then checked."""
    out = []
    for i, row in enumerate(rows):
        r = [x * (m % p) % p for x, p in zip(row, primes, strict=True)]
        num = crt(r, primes)
        if num % check_prime != check[i] * (m % check_prime) % check_prime:
            raise CheckPrimeMismatch(
                f"check prime {check_prime} disagrees with the rebuilt {what} #{i}"
            )
        if num > m:
            raise CheckPrimeMismatch(f"rebuilt {what} #{i} exceeds 1: residues are wrong")
        out.append(Fraction(num, m))
    if sum(f.numerator * (m // f.denominator) for f in out) != m:
        raise CheckPrimeMismatch(f"rebuilt {what} probabilities do not sum to 1")
    return out


def _prime_blocks(allp: list[int], threads: int | None) -> list[np.ndarray]:
    """Split the primes into one contiguous block per worker thread."""
    k = max(1, min(threads or os.cpu_count() or 1, len(allp)))
    return [np.array(b, dtype=np.int64) for b in np.array_split(np.array(allp), k) if b.size]


def _levels_down(space: StateSpace) -> list[int]:
    start_level = space.spec.start_level
    return [lv for lv in range(start_level, -1, -1) if space.layer_size(lv) > 0]


def exact_length_distribution(
    space: StateSpace, skel: Skeleton, model: str, prime_offset: int = 0,
    threads: int | None = None,
) -> tuple[dict[int, Fraction], list[int], int]:
    """({length: exact probability} for lengths of positive probability, primes, check)."""
    primes, check_prime = primes_exceeding(skel.denominator, prime_offset)
    allp = primes + [check_prime]
    _check_accumulation(space, model, allp)
    blocks = _prime_blocks(allp, threads)
    invs = [np.ascontiguousarray(inverse_table(list(b), max(skel.max_weight, 1)).T)
            for b in blocks]
    outs = [np.zeros((skel.longest + 1, b.size), dtype=np.int64) for b in blocks]
    start_level, start_rank = space.rank(space.spec.start)

    def alloc(level: int, nq: int):
        if level not in skel.win:
            z = np.zeros(0, np.int32)
            return np.zeros(0, np.int64), np.zeros(1, np.int64), z, z
        win = skel.win[level]
        off = np.zeros(win.size + 1, dtype=np.int64)
        np.cumsum(win.astype(np.int64) * nq, out=off[1:])
        return np.zeros(int(off[-1]), dtype=np.int64), off, skel.lmin[level], win

    curs = [alloc(start_level, b.size) for b in blocks]
    for c in curs:
        c[0][c[1][start_rank] : c[1][start_rank + 1]] = 1
    with ThreadPoolExecutor(len(blocks)) as pool:
        for level in _levels_down(space):
            lm, w, dsum = layer_data(space, level, model)
            nxts = [alloc(level - 1, b.size) for b in blocks]

            def run(k: int, lm=lm, w=w, dsum=dsum, nxts=nxts, curs=curs) -> None:
                cur, nxt = curs[k], nxts[k]
                push_mod_windows(
                    cur[0], cur[1], cur[2], cur[3], dsum, lm.ptr, lm.drop, lm.dest, w,
                    nxt[0], nxt[1], nxt[2], nxt[3], blocks[k], invs[k], model == "moves",
                    outs[k],
                )

            list(pool.map(run, range(len(blocks))))
            curs = nxts
    out = np.concatenate(outs, axis=1)
    lengths = [L for L in range(out.shape[0]) if out[L].any()]
    rows = [[int(x) for x in out[L, : len(primes)]] for L in lengths]
    check = [int(out[L, len(primes)]) for L in lengths]
    fr = _rebuild(rows, check, primes, check_prime, skel.denominator, "length probability")
    return dict(zip(lengths, fr, strict=True)), primes, check_prime


def exact_win_residues(
    space: StateSpace, skel: Skeleton, model: str, players: int, prime_offset: int = 0,
    threads: int | None = None,
) -> tuple[dict[int, Fraction], list[int], int]:
    """({r: P(length = r mod players)}, primes, check) without any length window."""
    primes, check_prime = primes_exceeding(skel.denominator, prime_offset)
    allp = primes + [check_prime]
    _check_accumulation(space, model, allp)
    blocks = _prime_blocks(allp, threads)
    invs = [np.ascontiguousarray(inverse_table(list(b), max(skel.max_weight, 1)).T)
            for b in blocks]
    outs = [np.zeros((players, b.size), dtype=np.int64) for b in blocks]
    start_level, start_rank = space.rank(space.spec.start)

    def alloc(level: int, nq: int):
        if level not in skel.reach:
            return np.zeros((0, players, nq), np.int64), np.zeros(0, np.bool_)
        r = skel.reach[level]
        return np.zeros((r.size, players, nq), dtype=np.int64), r

    curs = [alloc(start_level, b.size) for b in blocks]
    for c in curs:
        c[0][start_rank, 0, :] = 1
    with ThreadPoolExecutor(len(blocks)) as pool:
        for level in _levels_down(space):
            lm, w, dsum = layer_data(space, level, model)
            nxts = [alloc(level - 1, b.size) for b in blocks]

            def run(k: int, lm=lm, w=w, dsum=dsum, nxts=nxts, curs=curs) -> None:
                push_mod_residues(
                    curs[k][0], curs[k][1], dsum, lm.ptr, lm.drop, lm.dest, w, nxts[k][0],
                    blocks[k], invs[k], model == "moves", outs[k],
                )

            list(pool.map(run, range(len(blocks))))
            curs = nxts
    out = np.concatenate(outs, axis=1)
    rows = [[int(x) for x in out[r, : len(primes)]] for r in range(players)]
    check = [int(out[r, len(primes)]) for r in range(players)]
    fr = _rebuild(rows, check, primes, check_prime, skel.denominator, "residue probability")
    return dict(enumerate(fr)), primes, check_prime


# ----------------------------------------------------------------------------- API


def winner_of_length(length: int, players: int) -> int:
    """1-based player who made the last move of a game of `length` moves (P if length 0)."""
    return (length - 1) % players + 1


def wins_from_lengths(dist: dict[int, Fraction], players: int) -> dict[int, Fraction]:
    """{player: probability of winning} from a length distribution."""
    out = {i: Fraction(0) for i in range(1, players + 1)}
    for length, pr in dist.items():
        out[winner_of_length(length, players)] += pr
    return out


@dataclass(frozen=True)
class RandomResult:
    """Exact random play at one n.

    length_probability {length: Fraction} (None on the winner-only path);
    win_probability {player (1-based): Fraction}; moments from `zeckenum.moments.exact_moments`
    (empty on the winner-only path); denominator = M (every probability times M is an integer).
    """

    rules: str
    n: int
    players: int
    model: str
    win_probability: dict[int, Fraction]
    length_probability: dict[int, Fraction] | None
    moments: dict = field(default_factory=dict)
    gaussian: dict = field(default_factory=dict)
    denominator: int = 1
    primes: tuple[int, ...] = ()
    check_prime: int = 0
    states: int = 0
    transitions: int = 0
    stats: dict = field(default_factory=dict, compare=False)

    @property
    def mean_length(self) -> Fraction | None:
        return self.moments.get("mean")

    @property
    def variance(self) -> Fraction | None:
        return self.moments.get("variance")

    def to_dict(self) -> dict:
        """JSON-ready form: rationals as reduced "num/den" strings, lengths/players as keys."""
        from .moments import moments_to_dict

        d = {
            "rules": self.rules,
            "n": self.n,
            "players": self.players,
            "model": self.model,
            "mode": "exact",
            "no_move_convention": "a game of length 0 counts as a win for the last player",
            "win_probability": {str(k): frac_str(v) for k, v in self.win_probability.items()},
            "win_probability_decimal": {
                str(k): float(v) for k, v in self.win_probability.items()
            },
        }
        if self.length_probability is not None:
            d["length_probability"] = {
                str(k): frac_str(v) for k, v in self.length_probability.items()
            }
            d.update(moments_to_dict(self.moments))
            d["gaussian"] = self.gaussian
        d.update(
            {
                "denominator_bits": self.denominator.bit_length(),
                "states": self.states,
                "transitions": self.transitions,
                "primes": [str(p) for p in self.primes],
                "check_prime": str(self.check_prime),
                "stats": self.stats,
            }
        )
        return d


def frac_str(x: Fraction) -> str:
    """A reduced rational as "num/den" (Fraction is always reduced)."""
    return f"{x.numerator}/{x.denominator}"


def validate(n: int, players: int, model: str) -> None:
    if not isinstance(n, int) or n < 1:
        raise InputError(f"n must be a positive integer, got {n}")
    if not isinstance(players, int) or players < 2:
        raise InputError(f"the number of players must be at least 2, got {players}")
    check_model(model)


def random_play(
    n: int, rules: str = "standard", players: int = 2, model: str = "moves", *,
    winners_only: bool = False, prime_offset: int = 0, threads: int | None = None,
) -> RandomResult:
    """Exact random play at n: the length distribution (unless `winners_only`) and the
    probability that each of `players` players wins, under random model `model`."""
    import time

    from .moments import exact_moments, gaussian_diagnostics

    validate(n, players, model)
    rs = get_rules(rules)
    t0 = time.perf_counter()
    space = build_space(rs.instantiate(n))
    skel = first_sweep(space, model)
    t1 = time.perf_counter()
    moments: dict = {}
    gauss: dict = {}
    if winners_only:
        res, primes, check = exact_win_residues(
            space, skel, model, players, prime_offset, threads
        )
        wins = {winner_of_length(r, players): v for r, v in res.items()}
        wins = dict(sorted(wins.items()))
        dist = None
    else:
        dist, primes, check = exact_length_distribution(
            space, skel, model, prime_offset, threads
        )
        wins = wins_from_lengths(dist, players)
        moments = exact_moments(dist)
        gauss = gaussian_diagnostics({k: float(v) for k, v in dist.items()})
    t2 = time.perf_counter()
    return RandomResult(
        rules=rs.name, n=n, players=players, model=model, win_probability=wins,
        length_probability=dist, moments=moments, gaussian=gauss,
        denominator=skel.denominator, primes=tuple(primes), check_prime=check,
        states=skel.states, transitions=skel.transitions,
        stats={"first_sweep_s": round(t1 - t0, 3), "exact_sweep_s": round(t2 - t1, 3)},
    )
