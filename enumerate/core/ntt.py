"""Evaluation points shared by the exact sweeps: NTT-friendly primes, roots of unity, the
inverse transform and point blocks.

A polynomial of degree below N = 2**m is known modulo a prime p = 1 (mod N) from its
values at the N-th roots of unity w**k (w of order N, `root_of_unity`): its coefficients
are N**-1 * sum_k value_k * w**(-k j) (the inverse number-theoretic transform,
`counts_from_values`).  The primes lie between MUL_PRIME_FLOOR = 2**13 and
MUL_PRIME_CEILING = 2**50, the range of the mul arithmetic of `core.modular` (so random
play's `check_mul_primes` holds for them), taken largest first (`ntt_primes`,
`ntt_primes_for_bits`: the fewest whose product exceeds 2**bits, then one check prime).

The engines' evaluation-point routes (`counting.points`, `randomplay.points`) sweep the
values; this module holds only what both need and the layer contract lets both import.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from itertools import islice

from zeckenum.core.modular import (
    MUL_PRIME_CEILING,
    MUL_PRIME_FLOOR,
    primes_covering,
    primes_stepping_down,
)


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


def root_of_unity(p: int, order: int) -> int:
    """An element of multiplicative order exactly `order` (a power of two) mod p."""
    if order == 1:
        return 1
    for g in range(2, 1000):
        w = pow(g, (p - 1) // order, p)
        if pow(w, order // 2, p) != 1:
            return w
    raise ValueError(f"no root of unity of order {order} found mod {p}")


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


def transform_size(degree: int) -> int:
    """N = the least number of the form 2**k or 3 * 2**k above `degree` (a polynomial of
    that degree is known from N values; the factor 3 wastes at most a third of the
    points, a power of two alone up to half)."""
    two = 1 << max(0, int(degree)).bit_length()
    three = 3 * two // 4
    return three if three > degree and three % 3 == 0 else two


def root_of_order(p: int, order: int) -> int:
    """An element of multiplicative order exactly `order` = 2**k or 3 * 2**k mod p
    (p = 1 mod order)."""
    if order == 1:
        return 1
    factors = [r for r in (2, 3) if order % r == 0]
    for g in range(2, 1000):
        w = pow(g, (p - 1) // order, p)
        if all(pow(w, order // r, p) != 1 for r in factors):
            return w
    raise ValueError(f"no root of unity of order {order} found mod {p}")


def coefficients_from_values(values: Sequence[int], p: int, w: int) -> list[int]:
    """coefficient_j mod p for j = 0 .. N-1 from values[k] = G(w**k) mod p, w of order
    N = len(values) = 2**k or 3 * 2**k.

    For N = 3 M: c_j = 3**-1 * sum_{b < 3} w**(-j b) C_b[j mod M], where C_b are the
    coefficients of the values at the indices b, b + 3, ... (an M-point transform with the
    root w**3, `counts_from_values`, which already divides by M)."""
    n = len(values)
    if n & (n - 1) == 0:
        return counts_from_values(values, p, w)
    if n % 3 or (n // 3) & (n // 3 - 1):
        raise ValueError(f"transform sizes are 2**k or 3 * 2**k, got {n}")
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
