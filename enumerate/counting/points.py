"""The length spectrum by evaluation points: a shard is (prime, block of points), of any size.

For a game, let G(x) = sum over games of x ** (number of moves) = sum_L count_L x^L, a
polynomial of degree `longest`.  Per state s, V(s) = sum over paths start -> s of
x ** (path length) satisfies V(start) = 1 and V(s) = x * sum of V over the predecessors of
s (every move is one move of the game), and G(x) is the sum of V over the terminal states.
So one sweep over the states, carrying per state one residue per evaluation point instead
of a window of lengths (`counting.spectrum`), evaluates G at those points modulo a prime.

Choosing the points.  Every game has between `shortest` and `longest` moves, so
G(x) = x**shortest * Q(x) with Q of degree span = longest - shortest.  With N = span + 2
(`core.ntt.transform_size`) and a prime p = 1 (mod N) below 2**50 (`ntt_primes`), the
N-th roots of unity w**k (w of order N, `root_of_order`) are distinct nonzero points mod
p; Q(w**k) = G(w**k) * w**(-k shortest), and q_j mod p = N**-1 * sum_k Q(w**k) w**(-k j)
(the inverse transform), count_L = q_(L - shortest) (`core.ntt.lengths_from_values`).
The coefficient of degree span + 1 must come out 0: a built-in check of every prime's
values.  N is the fewest points that determine Q plus that one: at n = 300, 437 points
(a power of two above the span would be 512; above `longest`, 1024).
Counts of any size follow by the CRT over primes whose product exceeds the first sweep's
size bound 2**count_bits, and one more prime checks them (`core.modular.reconstruct`,
`CheckPrimeMismatch`).

Cost.  Per state and point: one add per incoming move (mod p) and one product by x
(`core.modular.mulmod_by`).  A window of lengths costs per state its window width (an
average of a few tens to a few hundred at n = 100..300) instead of the N points, so this
path does more word updates than the windowed one; what it buys is shards of any size:
every (prime, point block) pair is independent, the memory of a shard is its block of
points times the layers in flight, and a block can be one point.

Kernel `pull_points`, wrapper `spectrum_points(space, windows, prime, points)`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from zeckenum.core.blocks import run_blocks
from zeckenum.core.jit import kernel
from zeckenum.core.modular import mulmod_by, quotient_factors
from zeckenum.core.ntt import (
    lengths_from_values,
    ntt_primes_for_bits,
    point_blocks,
    root_of_order,
)
from zeckenum.core.statespace import StateSpace
from zeckenum.core.sweep import Windows, drop_stale, moves_into
from zeckenum.counting.count import count
from zeckenum.counting.result import CountResult
from zeckenum.rules.model import RuleSet

MAX_POINTS_PER_SHARD = 1 << 20
"""Points per shard that means "all N" (N stays far below it: spans below 2**20)."""


@kernel
def pull_points(
    dst: np.ndarray, ptr: np.ndarray, drop: np.ndarray, src_rank: np.ndarray,
    which_drop: int, src: np.ndarray, npts: int, p: int, xs: np.ndarray, xq: np.ndarray,
    finish: bool, skip: int,
) -> int:
    """Add into every state's row (npts residues mod p) the rows of its predecessors
    `which_drop` levels up; with `finish`, then multiply each state's row by the points
    `xs` (its value is complete: x times the sum over its predecessors), except the state
    of rank `skip` (the start, whose value is 1); `xq` = fl(xs / p), `mulmod_by`'s factors.

    The pass with `finish` is the drop-0 pass, in ascending rank: a predecessor inside the
    layer has a lower rank, so it is finished before it is read.  Returns word updates.
    """
    updates = 0
    for j in range(ptr.size - 1):
        d0 = j * npts
        dv = dst[d0 : d0 + npts]
        for e in range(ptr[j], ptr[j + 1]):
            if drop[e] != which_drop:
                continue
            s0 = src_rank[e] * npts
            sv = src[s0 : s0 + npts]
            for t in range(npts):
                x = dv[t] + sv[t]
                dv[t] = x - p if x >= p else x
            updates += npts
        if finish and j != skip:
            for t in range(npts):
                dv[t] = mulmod_by(dv[t], xs[t], xq[t], p)
            updates += npts
    return updates


@kernel
def collect_points(vals: np.ndarray, ends: np.ndarray, npts: int, p: int,
                   out: np.ndarray) -> None:
    """out[t] += the rows of the terminal states `ends` (ranks), mod p."""
    for i in ends:
        s0 = i * npts
        for t in range(npts):
            x = out[t] + vals[s0 + t]
            out[t] = x - p if x >= p else x


def points_peak_words(space: StateSpace, npts: int) -> int:
    """int64 words of one shard's buffers: max_drop + 1 layers of npts words per state."""
    largest = max(space.layer_size(lv) for lv in space.levels)
    return (space.max_drop + 1) * largest * npts


def spectrum_points(
    space: StateSpace, windows: Windows, prime: int, points: Sequence[int] | np.ndarray,
) -> tuple[np.ndarray, int]:
    """(values, word updates): values[t] = G(points[t]) mod prime, G the length polynomial.

    The local form of one shard of the evaluation-point count: a pure function of the game,
    its first sweep (reachability, terminal states, kept incoming moves), a prime below
    2**50 and a block of points in [0, prime).
    """
    p = int(prime)
    xs = np.asarray(points, dtype=np.int64)
    npts = xs.size
    xq = quotient_factors(xs, p)
    out = np.zeros(npts, dtype=np.int64)
    start_level, start_rank = space.rank(space.spec.start)
    levels = [lv for lv in space.levels if lv <= start_level]
    span = min(space.max_drop + 1, len(levels))
    cap = max(space.layer_size(lv) for lv in levels) * npts
    ring = [np.empty(cap, dtype=np.int64) for _ in range(span)]
    live: dict[int, np.ndarray] = {}
    updates = 0
    for k, level in enumerate(levels):
        size = space.layer_size(level)
        vals = ring[k % span][: size * npts]
        vals[:] = 0
        skip = -1
        if level == start_level:
            vals[start_rank * npts : (start_rank + 1) * npts] = 1
            skip = start_rank
        live[level] = vals
        ptr, drop, src = moves_into(space, windows, level)
        for d in range(1, space.max_drop + 1):
            if level + d in live:
                updates += pull_points(vals, ptr, drop, src, d, live[level + d], npts, p, xs,
                                       xq, False, skip)
        updates += pull_points(vals, ptr, drop, src, 0, vals, npts, p, xs, xq, True, skip)
        collect_points(vals, windows.terminal_ranks[level], npts, p, out)
        drop_stale(live, level, space.max_drop)
    return out, updates


def points_residues(
    space: StateSpace, windows: Windows, order: int, per_shard: int, threads: int,
    prime_offset: int = 0,
) -> tuple[list[int], int, np.ndarray, int]:
    """(primes, check prime, residues [prime][length], word updates) of the count by
    evaluation points after its first sweep: every (prime = 1 mod `order`, block of at most
    `per_shard` of the `order` points) is one shard, `threads` at a time; each prime's values
    are interpolated (`core.ntt.lengths_from_values`).  The rows are in the order primes + [check],
    as `count.assemble_count` reads them."""
    primes, check_prime = ntt_primes_for_bits(windows.count_bits, order, prime_offset)
    all_primes = [*primes, check_prime]
    shards = [(q, lo, hi) for q in all_primes for lo, hi in point_blocks(order, per_shard)]
    roots = {q: root_of_order(q, order) for q in all_primes}

    def run(shard: tuple[int, int, int]) -> tuple[np.ndarray, int]:
        q, lo, hi = shard
        w = roots[q]
        pts = [pow(w, k, q) for k in range(lo, hi)]
        return spectrum_points(space, windows, q, pts)

    parts = run_blocks(shards, run, threads)
    values: dict[int, list[int]] = {q: [0] * order for q in all_primes}
    for (q, lo, _hi), (vals, _u) in zip(shards, parts, strict=True):
        values[q][lo : lo + vals.size] = [int(v) for v in vals]
    residues = np.zeros((len(all_primes), windows.longest + 1), dtype=np.int64)
    for row, q in enumerate(all_primes):
        residues[row, :] = lengths_from_values(values[q], q, roots[q], windows.shortest,
                                               windows.longest, "the length polynomial")
    return primes, check_prime, residues, int(sum(u for _v, u in parts))


def count_points(
    n: int, rules: str | RuleSet = "standard", *, points_per_shard: int | None = None,
    threads: int | None = None, prime_offset: int = 0, max_memory: int | None = None,
) -> CountResult:
    """The exact census of `counting.count.count`, computed by evaluation points.

    `count` forced onto the points route: every (prime, block of at most
    `points_per_shard` points; default all N) is one shard, run in threads here.  The
    result equals the windowed one (the tests check it for every shard shape); its stats
    name the method, N and the shards; a limit too small for `threads` such shards is
    refused naming the smallest that works.
    """
    per = MAX_POINTS_PER_SHARD if points_per_shard is None else points_per_shard
    return count(n, rules, threads=threads, prime_offset=prime_offset,
                 max_memory=max_memory, points_per_shard=per)
