"""Exact integers of any size from word-size residues: two prime families, one CRT.

Two families of word-size primes, each with the arithmetic its kernels need:

* Add primes, just below PRIME_CEILING = 2**62 (`primes_for_bits`, by `primes_stepping_down`
  and `primes_covering`): counts of games only add residues (int64 lanes: a sum of two
  residues stays below 2**63, so a modular add is add, compare, subtract, and vectorises).
  Used by the count.
* Mul primes, between MUL_PRIME_FLOOR = 2**13 and MUL_PRIME_CEILING = 2**50 (`mul_primes`,
  `mul_primes_exceeding`): random play also multiplies residues, by move weights and by
  inverses of total weights (`inverse_table`).  Products use a float64 estimate of the
  quotient and an exact wrapping remainder (`mulmod`); a row accumulates up to 2**62 before
  one reduction (`reduce62`); `check_mul_primes` refuses primes outside these proved ranges.

In both, the primes' product must exceed every value, which the first sweep bounds a
priori; one extra prime, never used in the reconstruction, checks it.  The one CRT is
`crt` (Garner); `reconstruct` rebuilds integers and `reconstruct_fractions` probabilities
N / M with a known denominator M, both checked against the check prime
(CheckPrimeMismatch).  Python integers appear only there, after the kernels are done, once
per reconstructed number.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator, Sequence
from fractions import Fraction
from functools import lru_cache
from itertools import islice

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.errors import CheckPrimeMismatch, InputError

PRIME_CEILING = 2**62  # every add prime lies below it
MUL_PRIME_CEILING = 2**50  # every mul prime lies below it (see `mulmod`)
MUL_PRIME_FLOOR = 2**13  # and above it (see `reduce62`)
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


def primes_stepping_down(start: int, step: int, floor: int = 2) -> Iterator[int]:
    """The primes among start, start - step, start - 2 step, ... above `floor`, largest
    first (step 2 from an odd start: every odd number; step N from c N + 1: the primes
    that are 1 mod N)."""
    c = start
    while c > floor:
        if is_prime(c):
            yield c
        c -= step


def primes_covering(candidates: Iterable[int], bound: int) -> tuple[list[int], int]:
    """(the fewest leading primes of `candidates`, at least one, whose product exceeds
    `bound`; the next one, the check prime)."""
    primes: list[int] = []
    product = 1
    for p in candidates:
        if primes and product > bound:
            return primes, p
        primes.append(p)
        product *= p
    raise ValueError(f"too few primes for a product above a {bound.bit_length()}-bit bound")


def primes_for_bits(bits: int, offset: int = 0) -> tuple[list[int], int]:
    """(reconstruction primes whose product exceeds 2**bits, one extra check prime).

    `offset` skips that many primes from the top, so two runs with offsets apart by more
    than the number used work with disjoint prime sets.
    """
    return primes_covering(islice(primes_stepping_down(PRIME_CEILING - 1, 2), offset, None),
                           2**bits - 1)


def mul_primes(count: int, offset: int = 0) -> list[int]:
    """The primes number offset .. offset+count-1 counted downward from MUL_PRIME_CEILING."""
    return list(descending_primes(MUL_PRIME_CEILING, offset + count)[offset:])


def mul_primes_exceeding(bound: int, offset: int = 0) -> tuple[list[int], int]:
    """(mul primes below MUL_PRIME_CEILING whose product exceeds `bound`, one extra check prime)."""
    need = max(1, math.ceil((bound.bit_length() + 1) / 49.99))
    while True:
        ps = mul_primes(need + 1, offset)
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


def check_mul_primes(primes: list[int], max_indegree: int, max_weight: int) -> None:
    """Refuse residue primes outside the proved ranges of `mulmod` and `reduce62` (see their
    docstrings), for a game with at most `max_indegree` moves into one state and
    total move weights at most `max_weight` (random play: `randomplay.skeleton.weight_bound`)."""
    if max(primes) >= MUL_PRIME_CEILING or min(primes) <= MUL_PRIME_FLOOR:
        raise InputError("residue primes must lie between 2**13 and 2**50")
    if (max_indegree + 1) * max(primes) >= 2**62:
        raise InputError("too many moves into one state for the exact sweep's accumulation")
    if max_weight >= min(primes):
        raise InputError("move weights too large for the exact random sweep")


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


def reconstruct_fractions(
    residues: Sequence[Sequence[int]], primes: Sequence[int], check_prime: int,
    check_residues: Sequence[int], denominator: int, what: str = "probability",
) -> list[Fraction]:
    """Probabilities N / M with M = `denominator` from residues[i][q] = P * M^-1 mod primes[q].

    Each row times M mod its prime gives N = P * M mod that prime; `reconstruct` rebuilds N
    and checks it (and the check prime's residue, also times M) against the check prime.
    CheckPrimeMismatch also when some N exceeds M or the N do not sum to M (the rows are
    the probabilities of a complete law).
    """
    m = denominator
    rows = [[int(x) * (m % p) % p for x, p in zip(row, primes, strict=True)]
            for row in residues]
    check = [int(c) * (m % check_prime) % check_prime for c in check_residues]
    nums = reconstruct(rows, primes, check_prime, check, what)
    out = []
    for i, num in enumerate(nums):
        if num > m:
            raise CheckPrimeMismatch(f"rebuilt {what} #{i} exceeds 1: residues are wrong")
        out.append(Fraction(num, m))
    if sum(f.numerator * (m // f.denominator) for f in out) != m:
        raise CheckPrimeMismatch(f"rebuilt {what} probabilities do not sum to 1")
    return out


# ----------------------------------------------------------------------------- mul arithmetic


def inverse_table(primes: list[int] | np.ndarray, dmax: int) -> np.ndarray:
    """inv[d, q] = d**-1 mod primes[q] for 1 <= d <= dmax (inv[0, q] = 0), int64.

    Requires dmax < min(primes)."""
    ps = np.asarray(primes, dtype=np.int64)
    inv = np.zeros((dmax + 1, ps.size), dtype=np.int64)
    for qi in range(ps.size):
        col = np.zeros(dmax + 1, dtype=np.int64)
        _fill_inverses(col, int(ps[qi]), dmax)
        inv[:, qi] = col
    return inv


@kernel
def _fill_inverses(row: np.ndarray, p: int, dmax: int) -> None:
    """row[d] = d**-1 mod p by inv(d) = -(p // d) * inv(p mod d) (valid for d < p)."""
    pinv = 1.0 / p
    if dmax >= 1:
        row[1] = 1
    for d in range(2, dmax + 1):
        x = mulmod(p // d, row[p % d], p, pinv)
        row[d] = p - x if x else 0


@kernel(inline=True)
def _remainder(a: int, b: int, q: int, p: int) -> int:
    """a * b mod p from q = floor(a b / p) + {-1, 0, 1} (0 <= a, b < p < 2**50): the
    remainder a b - q p in [-p, 2p) in wrapping uint64 arithmetic, read as int64, then one
    conditional add and one conditional subtract (the last steps of `mulmod`'s proof)."""
    r = np.int64(np.uint64(a) * np.uint64(b) - np.uint64(q) * np.uint64(p))
    if r < 0:
        r += p
    if r >= p:
        r -= p
    return r


@kernel(inline=True)
def mulmod(a: int, b: int, p: int, pinv: float) -> int:
    """a * b mod p for 0 <= a, b < p < 2**50, with pinv = fl(1 / p).

    Proof.  With u = 2**-53, float(a) and float(b) are exact (< 2**53) and
    y = fl(fl(a * b) * pinv) = (a b / p)(1 + e1)(1 + e2)(1 + e3), |ei| <= u, so
    |y - a b / p| <= (a b / p)((1 + u)**3 - 1) < p * 3.0001 u < 2**50 * 3.0001 * 2**-53 < 0.38.
    Hence q = trunc(y) = floor(y) (y >= 0) is floor(a b / p) + {-1, 0, 1} and the true
    remainder r = a b - q p lies in [-p, 2p), inside (-2**63, 2**63).  It is computed in
    uint64, whose multiplication and subtraction wrap (are exact mod 2**64), so reading the
    result as int64 gives r exactly; one conditional add and one conditional subtract of p
    bring it into [0, p).  (Signed int64 products are avoided: numba marks them `nsw`,
    which makes an overflow undefined.)
    """
    q = np.int64(float(a) * float(b) * pinv)
    return _remainder(a, b, q, p)


@kernel(inline=True)
def mulmod_by(a: int, b: int, bq: float, p: int) -> int:
    """a * b mod p for 0 <= a, b < p < 2**50, with bq = fl(fl(b) * fl(1 / p)) computed once
    for a multiplier b used many times (one int-to-float conversion and one product less
    than `mulmod`).

    Proof.  bq = (b / p)(1 + e1)(1 + e2) and y = fl(fl(a) * bq) = (a b / p)(1 + e1)(1 + e2)
    (1 + e3), |ei| <= u = 2**-53, the same three rounding errors as in `mulmod`, so its
    argument holds word for word: q = trunc(y) = floor(a b / p) + {-1, 0, 1}, r = a b - q p
    in [-p, 2p) exact in wrapping uint64 arithmetic, then one conditional add and one
    conditional subtract.
    """
    q = np.int64(float(a) * bq)
    return _remainder(a, b, q, p)


def quotient_factors(b: np.ndarray, p: int) -> np.ndarray:
    """bq = fl(fl(b) * fl(1 / p)) for every multiplier b (int64, below p < 2**50): the
    factors `mulmod_by` assumes, made once per array of multipliers."""
    return np.asarray(b, dtype=np.int64).astype(np.float64) * (1.0 / p)


@kernel(inline=True)
def reduce62(x: int, p: int, pinv: float) -> int:
    """x mod p for 0 <= x < 2**62 and 2**13 < p < 2**50, with pinv = fl(1 / p).

    Proof.  y = fl(float(x) * pinv) = (x / p)(1 + e), |e| <= 3.0001 u; x / p < 2**49, so
    |y - x / p| < 0.38 and q = trunc(y) = floor(x / p) + {-1, 0, 1}.  Then
    0 <= q p <= x + p < 2**63, and r = x - q p in [-p, 2p) is exact in int64.
    """
    q = np.int64(float(x) * pinv)
    r = x - q * p
    if r < 0:
        r += p
    if r >= p:
        r -= p
    return r


@kernel
def finish_row(row: np.ndarray, primes: np.ndarray, pinv: np.ndarray, iv: np.ndarray) -> None:
    """row[q] = (row[q] mod primes[q]) * iv[q] mod primes[q], for 0 <= row[q] < 2**62.

    A separate small loop, so that LLVM vectorises it (AVX-512 has the int64 <-> float64
    conversions and the int64 products it needs)."""
    for q in range(row.size):
        row[q] = mulmod(reduce62(row[q], primes[q], pinv[q]), iv[q], primes[q], pinv[q])


@kernel
def add_row_mod(acc: np.ndarray, row: np.ndarray, primes: np.ndarray, pinv: np.ndarray) -> None:
    """acc[q] = (acc[q] + row[q]) mod primes[q] for 0 <= acc[q] < primes[q], row[q] < 2**62."""
    for q in range(row.size):
        x = reduce62(row[q], primes[q], pinv[q]) + acc[q]
        acc[q] = x - primes[q] if x >= primes[q] else x
