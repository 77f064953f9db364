"""Exact random play by evaluation points: a shard is (prime, block of points), of any size.

For a game let G(x) = sum over games of P(game) * x ** (number of moves) = sum_L P_L x^L
(`randomplay.exact` defines the models and P).  Per state s, let V(s) = sum over paths
start -> s of P(path) x ** (path length); then V(start) = 1 and

    V(s) = x * sum over moves e into s of V(src) * weight(e) * D(src)**-1,

and G(x) is the sum of V over the terminal states.  One sweep over the states carrying,
per state, one residue per evaluation point (instead of a window of lengths, as
`randomplay.exact` does) evaluates G at those points modulo a prime q.  Each state keeps
U(s) = V(s) * D(s)**-1 (its value is complete once its predecessors are), so the
per-state factor x_t * D(s)**-1 is applied once per (state, point) from a small table
(`fill_factors`); a move then adds its source's row (model "moves": every weight is 1, a
pure vectorised add) or the row times its weight (model "pairs").

Points and the transform.  G(x) = x**shortest * Q(x) with Q of degree longest - shortest
(every game has between `shortest` and `longest` moves).  With N = longest - shortest + 2
(`law_order`, the rule of both point routes, `core.ntt.transform_size`) and q = 1
(mod N), the points are the N-th roots of unity w**k; Q(w**k) = G(w**k) * w**(-k
shortest), and the inverse transform (`core.ntt.lengths_from_values`) gives the
coefficients P_(shortest+j) mod q for j < N.  The coefficient above longest - shortest
must be 0: a built-in check of every prime's values (CheckPrimeMismatch).  The primes
are NTT-friendly (1 mod N) and lie in the proved ranges of the mul arithmetic
(`core.modular.check_mul_primes`); their product exceeds the denominator M, one more
prime checks the CRT (`randomplay.exact.assemble_random`, shared with the windowed route,
so both give equal results).  Winners-only mode sums the law's residues by length mod P
before the same assembly.

Arithmetic.  Residues are below q < 2**50; a row accumulates at most max_indegree
residues before one reduction (`core.modular.reduce62`), products by `core.modular.mulmod_by`
(each multiplier's quotient factor made once).

Cost.  Per state and point: one add (or mulmod) per incoming move and one reduce + mulmod
to finish; N is at least the width of every state's length window, so this route does
more word updates than the windowed one, but its memory per shard is (max_drop + 1)
layers times the block of points, and every (prime, point block) pair is independent.

Kernel `pull_law_points`, wrapper `random_law_points(skel, prime, points, unit)`, driver
`random_play_points`.
"""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np
from zeckenum.core.blocks import run_blocks
from zeckenum.core.checks import (
    check_random_args,
    thread_count,
)
from zeckenum.core.jit import kernel
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.modular import (
    check_mul_primes,
    inverse_table,
    mulmod,
    mulmod_by,
    quotient_factors,
    reduce62,
)
from zeckenum.core.ntt import (
    lengths_from_values,
    ntt_primes_for_bits,
    point_blocks,
    root_of_order,
    transform_size,
)
from zeckenum.core.sweep import drop_stale, gather_passes
from zeckenum.errors import InputError
from zeckenum.randomplay.exact import RandomResult, assemble_random, checked_first_sweep
from zeckenum.randomplay.skeleton import (
    Skeleton,
    skeleton_bytes_bound,
    skeleton_nbytes,
    weight_bound,
)
from zeckenum.rules.model import RuleSet

MAX_POINTS_PER_SHARD = 1 << 20
"""Largest accepted --points-per-shard (a block is capped at N points anyway)."""


def law_order(shortest: int, longest: int) -> int:
    """N = longest - shortest + 2, the number of points (`core.ntt.transform_size`)."""
    return transform_size(max(0, int(longest) - int(shortest)))


def check_points_per_shard(value: object) -> int:
    """`value` as an int in 1..MAX_POINTS_PER_SHARD, else InputError."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not (
        1 <= value <= MAX_POINTS_PER_SHARD
    ):
        raise InputError(f"points per shard must be an integer from 1 to "
                         f"{MAX_POINTS_PER_SHARD}, got {value!r}")
    return int(value)


@kernel
def fill_factors(fac: np.ndarray, inv: np.ndarray, xs: np.ndarray, p: int) -> None:
    """fac[d * npts + t] = xs[t] * inv[d] mod p for d >= 1, and xs[t] for d = 0 (a
    terminal state: its value is complete with the factor x alone)."""
    pinv = 1.0 / p
    npts = xs.size
    for t in range(npts):
        fac[t] = xs[t]
    for d in range(1, inv.size):
        for t in range(npts):
            fac[d * npts + t] = mulmod(xs[t], inv[d], p, pinv)


@kernel
def pull_law_points(
    vals: np.ndarray, up_vals: np.ndarray, npts: int, win: np.ndarray, dsum: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, w: np.ndarray, unit: bool,
    which: int, p: int, fac: np.ndarray, facq: np.ndarray, out: np.ndarray, skip: int,
) -> int:
    """One layer of the evaluation-point sweep of random play, for one prime p and a block
    of npts points.  Returns the word updates.

    State j (reachable: win[j] > 0) owns vals[j*npts : (j+1)*npts].  It gathers the rows of
    its predecessors (times the move's weight unless `unit`; drop 0 from `vals`, else from
    `up_vals`); `which` selects the moves and whether states are finished, as in
    `core.sweep.gather_passes`.  Finishing reduces the row and multiplies it by
    fac[D(j)] = x * D(j)**-1 (`core.modular.mulmod_by`, with facq = fl(fac / p), and
    each weight's factor made once per move); a terminal row (D = 0) times x is added into
    out.  The state of rank `skip` (the start) is preset by the caller and only, when
    terminal, added.
    Invariant on entry: every row holds residues < p; between the passes a row holds a sum
    of at most max_indegree residues (< 2**62, `core.modular.check_mul_primes`).
    """
    pinv = 1.0 / p
    updates = 0
    for j in range(win.size):
        if win[j] == 0:
            continue
        d0 = j * npts
        dv = vals[d0 : d0 + npts]
        for e in range(ptr[j], ptr[j + 1]):
            if which >= 0 and drop[e] != which:
                continue
            s0 = src[e] * npts
            if drop[e] == 0:
                sv = vals[s0 : s0 + npts]
            else:
                sv = up_vals[s0 : s0 + npts]
            if unit:
                for t in range(npts):
                    dv[t] += sv[t]
            else:
                we = w[e]
                weq = float(we) * pinv
                for t in range(npts):
                    dv[t] += mulmod_by(sv[t], we, weq, p)
            updates += npts
        if which > 0:
            continue
        d = dsum[j]
        if j == skip:
            if d == 0:
                for t in range(npts):
                    x = out[t] + dv[t]
                    out[t] = x - p if x >= p else x
            continue
        f0 = d * npts
        if d == 0:
            for t in range(npts):
                x = out[t] + mulmod_by(reduce62(dv[t], p, pinv), fac[t], facq[t], p)
                out[t] = x - p if x >= p else x
        else:
            for t in range(npts):
                dv[t] = mulmod_by(reduce62(dv[t], p, pinv), fac[f0 + t], facq[f0 + t], p)
        updates += npts
    return updates


def law_points_words(skel: Skeleton, npts: int) -> int:
    """int64 words of one shard of `npts` points at its peak: the ring of max_drop + 1
    layers of npts words per state, the factor table and its quotient factors, the inverse
    column, points and out."""
    span = max(1, min(skel.max_drop + 1, len(skel.levels)))
    largest = max(skel.win[lv].size for lv in skel.levels)
    dmax = max(skel.max_weight, 1)
    return span * largest * npts + (dmax + 1) * (2 * npts + 1) + 2 * npts


def random_law_points(
    skel: Skeleton, prime: int, points: Sequence[int] | np.ndarray, unit: bool,
) -> tuple[np.ndarray, int]:
    """(values, word updates): values[t] = G(points[t]) mod prime, where G(x) = sum over
    games of P(game) x ** length (so M * values[t] = sum of (M P(game)) x ** length, M the
    skeleton's denominator).

    One shard of the evaluation-point law: a pure function of the first sweep (`skel`), a
    prime between 2**13 and 2**50 above every total move weight (`check_mul_primes`), a
    block of points in [0, prime) and `unit` (model "moves": every move weight is 1).
    Kernel: `pull_law_points`.
    """
    p = int(prime)
    xs = np.ascontiguousarray(np.asarray(points, dtype=np.int64))
    npts = xs.size
    dmax = max(skel.max_weight, 1)
    inv = np.ascontiguousarray(inverse_table([p], dmax)[:, 0])
    fac = np.empty((dmax + 1) * npts, dtype=np.int64)
    fill_factors(fac, inv, xs, p)
    facq = quotient_factors(fac, p)
    out = np.zeros(npts, dtype=np.int64)
    span = max(1, min(skel.max_drop + 1, len(skel.levels)))
    cap = max(skel.win[lv].size for lv in skel.levels) * npts
    # a ring of max_drop + 1 reused buffers, as in `randomplay.exact.random_law_residues`
    ring = [np.empty(cap, dtype=np.int64) for _ in range(span)]
    empty = np.zeros(0, dtype=np.int64)
    live: dict[int, np.ndarray] = {}
    updates = 0
    for k, level in enumerate(skel.levels):
        size = skel.win[level].size
        vals = ring[k % span][: size * npts]
        vals[:] = 0
        skip = -1
        if level == skel.start_level:
            skip = skel.start_rank
            d = int(skel.dsum[level][skip])
            vals[skip * npts : (skip + 1) * npts] = int(inv[d]) if d else 1
        inc = skel.incoming[level]
        for which, src_level in gather_passes(inc.drop, skel.max_drop, level, live):
            updates += pull_law_points(vals, live.get(src_level, empty), npts, skel.win[level],
                                       skel.dsum[level], inc.ptr, inc.drop, inc.src, inc.w,
                                       unit, which, p, fac, facq, out, skip)
        live[level] = vals
        drop_stale(live, level, skel.max_drop)
    return out, updates


def random_play_points(
    n: int, rules: str | RuleSet = "standard", players: int = 2, model: str = "moves", *,
    winners_only: bool = False, points_per_shard: int | None = None, prime_offset: int = 0,
    threads: int | None = None, max_memory: int | None = None,
) -> RandomResult:
    """Exact random play at n (the result of `randomplay.exact.random_play`, primes aside),
    computed by evaluation points.

    Every (prime, block of at most `points_per_shard` points; default all N) is one shard,
    run in threads here.  Memory: the first sweep is refused up front as in the windowed
    route (`random_space`), then the first sweep's forecast plus `threads` shards is
    refused (MemoryRefused) before any shard allocates.  With `winners_only` the win
    probabilities are summed from the law (by length mod players) before the CRT.
    """
    check_random_args(n, players, model)
    per_req = None if points_per_shard is None else check_points_per_shard(points_per_shard)
    rs, space, skel, threads, t0 = checked_first_sweep(n, rules, players, model, prime_offset,
                                                       threads, max_memory)
    limit = resolve_limit(max_memory)
    nthreads = thread_count(threads)
    t1 = time.perf_counter()
    order = law_order(skel.shortest, skel.longest)
    per = order if per_req is None else min(per_req, order)
    primes, check_prime = ntt_primes_for_bits(skel.denominator.bit_length(), order,
                                              prime_offset)
    allp = [*primes, check_prime]
    check_mul_primes(allp, skel.max_indegree, weight_bound(space, skel, model))
    first = max(skeleton_bytes_bound(space, model, True, threads), skeleton_nbytes(skel))
    shard_bytes = 8 * law_points_words(skel, per)
    running = min(nthreads, len(allp) * len(point_blocks(order, per)))
    forecast = first + running * shard_bytes
    refuse_if_over(forecast, limit, f"the exact length law by evaluation points at n={n} "
                                    f"({running} shards of {per} points at once)")
    roots = {q: root_of_order(q, order) for q in allp}
    shards = [(q, lo, hi) for q in allp for lo, hi in point_blocks(order, per)]
    unit = model == "moves"

    def run(shard: tuple[int, int, int]) -> tuple[np.ndarray, int]:
        q, lo, hi = shard
        w = roots[q]
        return random_law_points(skel, q, [pow(w, k, q) for k in range(lo, hi)], unit)

    parts = run_blocks(shards, run, running)
    t2 = time.perf_counter()
    values: dict[int, list[int]] = {q: [0] * order for q in allp}
    for (q, lo, _hi), (vals, _u) in zip(shards, parts, strict=True):
        values[q][lo : lo + vals.size] = [int(v) for v in vals]
    rows = [lengths_from_values(values[q], q, roots[q], skel.shortest, skel.longest,
                                "the length law")
            for q in allp]
    if winners_only:
        rows = [[sum(row[r::players]) % q for r in range(players)]
                for row, q in zip(rows, allp, strict=True)]
    residues = np.array(rows, dtype=np.int64)
    stats: dict = {
        "method": "points",
        "first_sweep_s": round(t1 - t0, 3),
        "points": order,
        "points_per_shard": per,
        "shards": len(shards),
        "threads": running,
        "shard_peak_bytes": int(shard_bytes),
        "forecast_peak_bytes": int(forecast),
        "word_updates": int(sum(u for _v, u in parts)),
    }
    res = assemble_random(
        rules=rs.name, rules_hash=rs.content_hash(), n=n, players=players, model=model,
        winners_only=winners_only, denominator=skel.denominator, states=skel.states,
        transitions=skel.transitions, primes=primes, check_prime=check_prime,
        residues=residues, stats=stats,
    )
    stats["exact_sweep_s"] = round(time.perf_counter() - t1, 3)
    stats["points_sweep_s"] = round(t2 - t1, 3)
    return res
