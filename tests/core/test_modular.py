"""zeckenum.core.modular against sympy: CRT, primality, prime plans and the check prime."""

from __future__ import annotations

import random
from fractions import Fraction

import pytest
from sympy import isprime, prevprime, randprime
from sympy.ntheory.modular import crt as sympy_crt
from zeckenum.core.modular import (
    MUL_PRIME_CEILING,
    MUL_PRIME_FLOOR,
    crt,
    is_prime,
    mul_primes_exceeding,
    primes_for_bits,
    reconstruct,
    reconstruct_fractions,
)
from zeckenum.errors import CheckPrimeMismatch


def _product(values: list[int]) -> int:
    out = 1
    for v in values:
        out *= v
    return out


@pytest.mark.parametrize("seed", range(20))
def test_crt_matches_sympy_random(seed: int) -> None:
    rng = random.Random(seed)
    k = rng.randint(1, 6)
    bits = rng.choice([8, 20, 40, 62])
    moduli: list[int] = []
    while len(moduli) < k:
        p = randprime(2 ** (bits - 1), 2**bits) if bits > 8 else randprime(3, 256)
        if p not in moduli:
            moduli.append(p)
    residues = [rng.randrange(p) for p in moduli]
    want, modulus = sympy_crt(moduli, residues, symmetric=False)
    assert modulus == _product(moduli)
    assert crt(residues, moduli) == int(want)


def test_crt_matches_sympy_on_engine_primes() -> None:
    rng = random.Random(12345)
    primes, _ = primes_for_bits(600)
    for _ in range(50):
        residues = [rng.randrange(p) for p in primes]
        want, _ = sympy_crt(primes, residues, symmetric=False)
        assert crt(residues, primes) == int(want)


def test_crt_recovers_a_known_integer() -> None:
    rng = random.Random(7)
    primes, _ = primes_for_bits(300)
    for _ in range(50):
        x = rng.randrange(2**300)
        assert crt([x % p for p in primes], primes) == x


def test_is_prime_near_2_62() -> None:
    lo = 2**62 - 3000
    hi = 2**62 + 3000
    mismatches = [m for m in range(lo, hi) if is_prime(m) != isprime(m)]
    assert mismatches == []
    assert any(is_prime(m) for m in range(lo, 2**62))  # the range is not trivially composite


def test_is_prime_small_range() -> None:
    assert [m for m in range(-5, 20000) if is_prime(m) != isprime(m)] == []


@pytest.mark.parametrize("bits", [16, 32, 48, 62, 64, 70, 80])
def test_is_prime_random(bits: int) -> None:
    # the deterministic Miller-Rabin bases are valid below 3.3e24 > 2**81 (common practice)
    rng = random.Random(bits)
    samples = [rng.randrange(2, 2**bits) | 1 for _ in range(3000)]
    samples += [randprime(2 ** (bits - 1), 2**bits) for _ in range(20)]
    assert [m for m in samples if is_prime(m) != isprime(m)] == []


def test_is_prime_known_pseudoprimes() -> None:
    # Carmichael numbers and strong pseudoprimes to small base sets; sympy is the judge.
    hard = [561, 1105, 1729, 2047, 1373653, 25326001, 3215031751, 2152302898747,
            3474749660383, 341550071728321, 3825123056546413051,
            318665857834031151167461]
    for m in hard:
        assert is_prime(m) == isprime(m), m


@pytest.mark.parametrize("bits", [1, 61, 62, 63, 124, 125, 500, 2000])
def test_primes_for_bits(bits: int) -> None:
    primes, check = primes_for_bits(bits)
    assert _product(primes) > 2**bits
    assert len(set(primes)) == len(primes)
    assert check not in primes
    assert all(isprime(p) and p < 2**62 for p in primes + [check])
    # minimal: dropping the last prime would not be enough
    assert _product(primes[:-1]) <= 2**bits
    # they are the largest primes below 2**62, in descending order, check prime next
    expected = [prevprime(2**62)]
    while len(expected) < len(primes) + 1:
        expected.append(prevprime(expected[-1]))
    assert primes + [check] == expected


def test_primes_for_bits_offset_gives_disjoint_sets() -> None:
    primes, check = primes_for_bits(400)
    primes2, check2 = primes_for_bits(400, len(primes) + 1)
    assert not (set(primes) | {check}) & (set(primes2) | {check2})
    assert _product(primes2) > 2**400


def _residue_table(values: list[int], primes: list[int], check: int):
    return [[v % p for p in primes] for v in values], [v % check for v in values]


def test_reconstruct_round_trip() -> None:
    rng = random.Random(3)
    primes, check = primes_for_bits(256)
    values = [rng.randrange(2**256) for _ in range(20)] + [0, 1, 2**256 - 1]
    table, checks = _residue_table(values, primes, check)
    assert reconstruct(table, primes, check, checks) == values


@pytest.mark.parametrize("which", range(4))
def test_reconstruct_detects_corrupted_residue(which: int) -> None:
    rng = random.Random(100 + which)
    primes, check = primes_for_bits(256)
    values = [rng.randrange(2**256) for _ in range(8)]
    table, checks = _residue_table(values, primes, check)
    i = rng.randrange(len(values))
    q = rng.randrange(len(primes))
    table[i][q] = (table[i][q] + rng.randrange(1, primes[q])) % primes[q]
    with pytest.raises(CheckPrimeMismatch):
        reconstruct(table, primes, check, checks)


def test_reconstruct_detects_corrupted_check_residue() -> None:
    primes, check = primes_for_bits(128)
    values = [2**127 + 12345]
    table, checks = _residue_table(values, primes, check)
    checks[0] = (checks[0] + 1) % check
    with pytest.raises(CheckPrimeMismatch):
        reconstruct(table, primes, check, checks)


def test_reconstruct_detects_value_too_large_for_primes() -> None:
    # a value beyond the primes' product wraps around; the check prime must notice
    primes, check = primes_for_bits(124)
    value = _product(primes) * 3 + 987654321
    table, checks = _residue_table([value], primes, check)
    with pytest.raises(CheckPrimeMismatch):
        reconstruct(table, primes, check, checks)


# Source: Python's Fraction arithmetic: residues of P = N / M (P * M^-1 mod q, as the random
# sweep computes them) give back N / M exactly, and the checks refuse what is not a law.
def _law_residues(law: list[Fraction], primes: list[int]) -> list[list[int]]:
    return [[f.numerator * pow(f.denominator, -1, p) % p for p in primes] for f in law]


def _random_law(seed: int) -> tuple[list[Fraction], int]:
    rng = random.Random(seed)
    m = rng.randrange(2, 10**40)
    cuts = sorted(rng.randrange(m + 1) for _ in range(rng.randint(0, 6)))
    nums = [b - a for a, b in zip([0, *cuts], [*cuts, m], strict=True)]
    return [Fraction(x, m) for x in nums], m


@pytest.mark.parametrize("seed", range(8))
def test_reconstruct_fractions_round_trip(seed: int) -> None:
    law, m = _random_law(seed)
    primes, check = mul_primes_exceeding(m, offset=seed)
    rows = _law_residues(law, primes)
    checks = [r[0] for r in _law_residues(law, [check])]
    assert reconstruct_fractions(rows, primes, check, checks, m) == law
    assert all(MUL_PRIME_FLOOR < p < MUL_PRIME_CEILING and isprime(p) for p in [*primes, check])


def test_reconstruct_fractions_refuses_bad_residues() -> None:
    law, m = _random_law(99)
    primes, check = mul_primes_exceeding(m)
    rows = _law_residues(law, primes)
    checks = [r[0] for r in _law_residues(law, [check])]
    bad = [list(r) for r in rows]
    bad[0][0] = (bad[0][0] + 1) % primes[0]
    with pytest.raises(CheckPrimeMismatch):
        reconstruct_fractions(bad, primes, check, checks, m)
    third = [Fraction(1, 3)]  # exact residues, but not a whole law: it does not sum to 1
    with pytest.raises(CheckPrimeMismatch, match="sum to 1"):
        reconstruct_fractions(_law_residues(third, primes), primes, check,
                              [r[0] for r in _law_residues(third, [check])], 3)
