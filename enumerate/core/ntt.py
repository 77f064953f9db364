"""Evaluation points shared by the exact sweeps: NTT-friendly primes, roots of unity, the
inverse transform and point blocks.

A polynomial of degree below N is known modulo a prime p = 1 (mod N) from its values at
the N-th roots of unity w**k (w of order N, `root_of_order`): its coefficients are
N**-1 * sum_k value_k * w**(-k j) (the inverse discrete Fourier transform over Z/pZ,
`coefficients_from_values`; O(N log N) when N is 2**k or 3 * 2**k, else the O(N**2)
definition in a kernel, a few milliseconds at N = 1000).  The primes lie between
MUL_PRIME_FLOOR = 2**13 and MUL_PRIME_CEILING = 2**50, the range of the mul arithmetic of
`core.modular` (so random play's `check_mul_primes` holds for them), taken largest first
(`ntt_primes`, `ntt_primes_for_bits`: the fewest whose product exceeds 2**bits, then one
check prime).

Both evaluation-point routes (`counting.points`, `randomplay.points`) evaluate a length
polynomial x**shortest * Q(x), Q of degree span = longest - shortest, at N = span + 2
points (`transform_size`): every point costs a whole sweep, so N is the fewest points
that determine Q, plus one whose coefficient must come out 0 (`lengths_from_values`, a
check of every prime's values).  This module holds only what both need and the layer
contract lets both import.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from itertools import islice

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.modular import (
    MUL_PRIME_CEILING,
    MUL_PRIME_FLOOR,
    mulmod,
    primes_covering,
    primes_stepping_down,
)
from zeckenum.errors import CheckPrimeMismatch


def _ntt_candidates(order: int, offset: int) -> Iterator[int]:
    """The primes below 2**50 and above 2**13 that are 1 mod `order` (so that their
    multiplicative group has elements of order `order`), largest first, skipping `offset`."""
    start = (MUL_PRIME_CEILING - 2) // order * order + 1
    return islice(primes_stepping_down(start, order, MUL_PRIME_FLOOR), offset, None)


def ntt_primes(order: int, count: int, offset: int = 0) -> list[int]:
    """The primes number offset .. offset+count-1 of `_ntt_candidates`."""
    out = list(islice(_ntt_candidates(order, offset), count))
    if len(out) < count:
        raise ValueError(f"fewer than {offset + count} primes = 1 mod {order} below 2**50")
    return out


def ntt_primes_for_bits(bits: int, order: int, offset: int = 0) -> tuple[list[int], int]:
    """(primes = 1 mod order whose product exceeds 2**bits, one more check prime)."""
    return primes_covering(_ntt_candidates(order, offset), 2**bits - 1)


def counts_from_values(values: Sequence[int], p: int, w: int) -> list[int]:
    """coefficient_j mod p for j = 0 .. N-1 from values[k] = G(w**k) mod p (N = len(values),
    w of order N): the inverse number-theoretic transform (iterative, O(N log N), Python
    ints)."""
    n = len(values)
    a = [int(v) % p for v in values]
    j = 0
    for i in range(1, n):  # bit-reversal permutation
        bit = n >> 1
        while j & bit:
            j ^= bit
            bit >>= 1
        j |= bit
        if i < j:
            a[i], a[j] = a[j], a[i]
    winv = pow(w, p - 2, p)
    length = 2
    while length <= n:
        step = pow(winv, n // length, p)
        for s in range(0, n, length):
            f = 1
            half = length // 2
            for t in range(s, s + half):
                u, v = a[t], a[t + half] * f % p
                a[t], a[t + half] = (u + v) % p, (u - v) % p
                f = f * step % p
        length <<= 1
    ninv = pow(n, p - 2, p)
    return [x * ninv % p for x in a]


def transform_size(span: int) -> int:
    """N = span + 2 evaluation points for a length polynomial x**shortest * Q(x) with
    span = longest - shortest >= 0: N - 1 points determine Q (degree <= span), and the
    one more gives a coefficient that must be 0 (`lengths_from_values`).  A power of two
    above the span (the fast transform's own size) would cost up to twice the sweeps:
    at n = 400 of the standard game (lengths 397..987), 1024 points instead of 592."""
    return max(0, int(span)) + 2


def _prime_factors(m: int) -> list[int]:
    """The distinct prime factors of m >= 1 (trial division: N stays below 2**20)."""
    out, d = [], 2
    while d * d <= m:
        if m % d == 0:
            out.append(d)
            while m % d == 0:
                m //= d
        d += 1
    return out + ([m] if m > 1 else [])


def root_of_order(p: int, order: int) -> int:
    """An element of multiplicative order exactly `order` mod p (p prime, p = 1 mod order):
    w = g**((p - 1) / order) has order dividing `order`, and exactly `order` when
    w**(order / r) != 1 for every prime r dividing `order`."""
    if order < 1 or (p - 1) % order:
        raise ValueError(f"no element of order {order} mod {p}")
    if order == 1:
        return 1
    factors = _prime_factors(order)
    for g in range(2, 1000):
        w = pow(g, (p - 1) // order, p)
        if all(pow(w, order // r, p) != 1 for r in factors):
            return w
    raise ValueError(f"no root of unity of order {order} found mod {p}")


@kernel
def inverse_dft(values: np.ndarray, p: int, winv: int) -> np.ndarray:
    """out[j] = sum_k values[k] * winv**(j k) mod p (values in [0, p), p < 2**50): the
    transform by its definition, each sum by Horner's rule at y = winv**j.  N**2 products."""
    pinv = 1.0 / p
    n = values.size
    out = np.zeros(n, dtype=np.int64)
    y = 1
    for j in range(n):
        acc = 0
        for k in range(n - 1, -1, -1):
            acc = mulmod(acc, y, p, pinv) + values[k]
            if acc >= p:
                acc -= p
        out[j] = acc
        y = mulmod(y, winv, p, pinv)
    return out


def coefficients_from_values(values: Sequence[int], p: int, w: int) -> list[int]:
    """coefficient_j mod p for j = 0 .. N-1 from values[k] = G(w**k) mod p, w of order
    N = len(values) (p = 1 mod N, p < 2**50).

    N = 2**k: the radix-2 transform (`counts_from_values`).  N = 3 M, M = 2**k:
    c_j = 3**-1 * sum_{b < 3} w**(-j b) C_b[j mod M], where C_b are the coefficients of the
    values at the indices b, b + 3, ... (an M-point transform with the root w**3,
    `counts_from_values`, which already divides by M).  Any other N: the definition
    (`inverse_dft`), then the factor N**-1."""
    n = len(values)
    if n & (n - 1) == 0:
        return counts_from_values(values, p, w)
    if n % 3 or (n // 3) & (n // 3 - 1):
        raw = inverse_dft(np.asarray([int(v) % p for v in values], dtype=np.int64), int(p),
                          pow(w, p - 2, p))
        ninv = pow(n, p - 2, p)
        return [int(x) * ninv % p for x in raw]
    m = n // 3
    w3 = pow(w, 3, p)
    parts = [counts_from_values(list(values[b::3]), p, w3) for b in range(3)]
    winv = pow(w, p - 2, p)
    third = pow(3, p - 2, p)
    out, f = [], 1  # f = w**(-j)
    for j in range(n):
        r = j % m
        out.append((parts[0][r] + f * (parts[1][r] + f * parts[2][r])) % p * third % p)
        f = f * winv % p
    return out


def point_blocks(order: int, per_shard: int) -> list[tuple[int, int]]:
    """[lo, hi) index ranges of the N points cut into blocks of at most `per_shard`."""
    return [(lo, min(order, lo + per_shard)) for lo in range(0, order, per_shard)]


def lengths_from_values(values: Sequence[int], p: int, w: int, shortest: int, longest: int,
                        what: str) -> list[int]:
    """c_L mod p for L = 0 .. longest from values[k] = G(w**k) mod p, k < N = len(values),
    where G(x) = sum_L c_L x**L has its terms within shortest..longest and w has order
    N > longest - shortest: Q(w**k) = G(w**k) w**(-k shortest), the inverse transform,
    shift by `shortest`.  Raises CheckPrimeMismatch when Q has a term above the span (the
    values are then not those of such a G; `what` names G in the message)."""
    n = len(values)
    span = longest - shortest
    if not 0 <= shortest <= longest or n <= span:
        raise ValueError(f"{n} points cannot interpolate lengths {shortest}..{longest}")
    unshift = pow(pow(w, shortest, p), p - 2, p)
    q_values, f = [], 1
    for v in values:
        q_values.append(int(v) * f % p)
        f = f * unshift % p
    coeffs = coefficients_from_values(q_values, p, w)
    if any(coeffs[span + 1 :]):
        raise CheckPrimeMismatch(
            f"{what} mod {p} has a term outside the lengths {shortest}..{longest}: "
            "the evaluations are not trusted")
    return [0] * shortest + coeffs[: span + 1]
