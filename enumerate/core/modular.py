"""Exact integers of any size from word-size residues: primes, plans and the CRT.

Counts of games are computed modulo several primes just below 2**62 (int64 lanes: a sum of
two residues stays below 2**63, so a modular add is add, compare, subtract, and vectorises).
The primes' product must exceed every count, which the first sweep bounds a priori; one
extra prime, never used in the reconstruction, checks it.  Python integers appear only
here, after the kernels are done, once per reconstructed number.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import lru_cache

from zeckenum.errors import CheckPrimeMismatch

PRIME_CEILING = 2**62
# Miller-Rabin with these bases is deterministic for every n < 3.3 * 10**24 (common practice).
_MR_BASES = (2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41)


def is_prime(n: int) -> bool:
    """Deterministic primality for n < 3.3e24 (Miller-Rabin with the first 13 prime bases)."""
    if n < 2:
        return False
    for p in _MR_BASES:
        if n % p == 0:
            return n == p
    d, s = n - 1, 0
    while d % 2 == 0:
        d //= 2
        s += 1
    for a in _MR_BASES:
        x = pow(a, d, n)
        if x in (1, n - 1):
            continue
        for _ in range(s - 1):
            x = x * x % n
            if x == n - 1:
                break
        else:
            return False
    return True


@lru_cache(maxsize=16)
def descending_primes(ceiling: int, count: int) -> tuple[int, ...]:
    """The `count` largest primes below `ceiling` (odd ceiling - 1 downward), largest first."""
    out: list[int] = []
    c = ceiling - 1 if ceiling % 2 == 0 else ceiling - 2
    while len(out) < count:
        if is_prime(c):
            out.append(c)
        c -= 2
    return tuple(out)


def primes_below_ceiling(count: int, offset: int = 0) -> list[int]:
    """The primes number offset .. offset+count-1 counted downward from 2**62 (all odd)."""
    return list(descending_primes(PRIME_CEILING, offset + count)[offset:])


def primes_for_bits(bits: int, offset: int = 0) -> tuple[list[int], int]:
    """(reconstruction primes whose product exceeds 2**bits, one extra check prime).

    `offset` skips that many primes from the top, so two runs with offsets apart by more
    than the number used work with disjoint prime sets.
    """
    count = 1
    while True:
        primes = primes_below_ceiling(count + 1, offset)
        product = 1
        for p in primes[:count]:
            product *= p
        if product.bit_length() > bits:
            return primes[:count], primes[count]
        count += 1


def crt(residues: Sequence[int], moduli: Sequence[int]) -> int:
    """The unique x in [0, prod(moduli)) with x = residues[i] mod moduli[i] (Garner's method)."""
    x = 0
    m = 1
    for r, p in zip(residues, moduli, strict=True):
        # find t with x + m*t = r (mod p)
        t = ((int(r) - x) % p) * pow(m, -1, p) % p
        x += m * t
        m *= p
    return x


def reconstruct(
    residues: Sequence[Sequence[int]], primes: Sequence[int], check_prime: int,
    check_residues: Sequence[int], what: str = "value",
) -> list[int]:
    """Rebuild each value from residues[i][q] (prime q) and test it against the check prime.

    Raises CheckPrimeMismatch when any rebuilt value disagrees with its residue modulo the
    check prime: the size bound was wrong or a residue was corrupted.
    """
    out = []
    for i, row in enumerate(residues):
        x = crt(row, primes)
        if x % check_prime != int(check_residues[i]) % check_prime:
            raise CheckPrimeMismatch(
                f"check prime {check_prime} disagrees with the reconstructed {what} #{i}: "
                "the result is not trusted (size bound or residues are wrong)"
            )
        out.append(x)
    return out
