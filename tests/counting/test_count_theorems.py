"""zeckenum.count against published theorems on the Zeckendorf game, n up to 150.

Sources:
* shortest game = n - Z(n): "The Zeckendorf Game" (2018), arXiv:1809.04881.
* longest game <= phi^2 n - IZ(n) - phi Z(n), phi = (1 + sqrt 5)/2:
  "Bounds on Zeckendorf Games" (2020), arXiv:2009.09510.
* every length between the shortest and the longest occurs: published result on the
  lengths of Zeckendorf games (as stated in the issue; checked here for n <= 150).
Z(n) is the number of Zeckendorf terms and IZ(n) the sum of their indices (F1 = 1, F2 = 2,
F3 = 3, ...), both computed by tests/support/bruteforce.py, independently of the engine.

count(n) for n <= FAST_MAX runs in a few seconds; FAST_MAX < n <= 150 is @slow (minutes).
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest
import sympy as sp
import zeckenum
from bruteforce import IZ, Z, zeckendorf_state
from zeckenum.core.listing import moves_out
from zeckenum.core.statespace import build_space
from zeckenum.rules.model import STANDARD

FAST_MAX = 80
THEOREM_MAX = 150
FAST = range(1, FAST_MAX + 1)
SLOW = [pytest.param(n, marks=pytest.mark.slow) for n in range(FAST_MAX + 1, THEOREM_MAX + 1)]
ALL_N = list(FAST) + SLOW


@cache
def engine(n: int) -> zeckenum.CountResult:
    return zeckenum.count(n)


def longest_bound_holds(longest: int, n: int) -> bool:
    """Exact test of longest <= phi^2 n - IZ(n) - phi Z(n), phi = (1 + sqrt 5)/2.

    With phi^2 = (3 + sqrt5)/2, doubling gives  A <= sqrt5 * B  where
    A = 2 longest - 3n + 2 IZ + Z  and  B = n - Z >= 0, decided in integers:
    true if A <= 0, else A^2 <= 5 B^2.  No floating point.
    """
    z, iz = Z(n), IZ(n)
    a = 2 * longest - 3 * n + 2 * iz + z
    b = n - z
    assert b >= 0
    return a <= 0 or a * a <= 5 * b * b


def test_longest_bound_helper_against_sympy() -> None:
    # The integer rewrite agrees with sympy's exact comparison around the bound.
    phi = (1 + sp.sqrt(5)) / 2
    for n in (1, 2, 7, 10, 33, 89, 150):
        bound = phi**2 * n - IZ(n) - phi * Z(n)
        for longest in range(max(0, int(sp.floor(bound)) - 3), int(sp.floor(bound)) + 4):
            assert longest_bound_holds(longest, n) == bool(sp.Integer(longest) <= bound)


def test_z_and_iz_small_values() -> None:
    # 10 = 8 + 2 = F5 + F2; 12 = 8 + 3 + 1 = F5 + F3 + F1; 13 = F6.
    assert (Z(10), IZ(10)) == (2, 7)
    assert (Z(12), IZ(12)) == (3, 9)
    assert (Z(13), IZ(13)) == (1, 6)


@pytest.mark.parametrize("n", ALL_N)
def test_shortest_is_n_minus_z(n: int) -> None:
    # "The Zeckendorf Game" (2018), arXiv:1809.04881
    assert engine(n).shortest == n - Z(n)


@pytest.mark.parametrize("n", ALL_N)
def test_longest_upper_bound(n: int) -> None:
    # "Bounds on Zeckendorf Games" (2020), arXiv:2009.09510
    res = engine(n)
    assert longest_bound_holds(res.longest, n), (n, res.longest, Z(n), IZ(n))


@pytest.mark.parametrize("n", ALL_N)
def test_every_length_in_between_occurs(n: int) -> None:
    res = engine(n)
    assert list(res.length_counts) == list(range(res.shortest, res.longest + 1))
    assert all(c > 0 for c in res.length_counts.values())


@pytest.mark.parametrize("n", ALL_N)
def test_result_is_self_consistent(n: int) -> None:
    res = engine(n)
    assert sum(res.length_counts.values()) == res.games
    assert res.shortest_games == res.length_counts[res.shortest]
    assert res.longest_games == res.length_counts[res.longest]
    assert res.transitions >= res.states - 1  # every non-start state has a predecessor
    assert res.n == n and res.rules == "standard"
    # the primes' product bounds the number of games (common practice for the CRT)
    product = 1
    for p in res.primes:
        product *= p
    assert res.games < product
    assert res.check_prime not in res.primes


@pytest.mark.parametrize("n", range(1, 61))
def test_unique_terminal_is_zeckendorf(n: int) -> None:
    # Zeckendorf's theorem: no move applies exactly at the Zeckendorf decomposition, and
    # the game always ends there ("The Zeckendorf Game" (2018), arXiv:1809.04881).
    space = build_space(STANDARD.instantiate(n))
    terminals = []
    for level in space.levels:
        lm = moves_out(space, level)
        states = space.states(level)
        for i in np.flatnonzero(lm.ptr[1:] == lm.ptr[:-1]):
            terminals.append(tuple(int(c) for c in states[i]))
    assert terminals == [zeckendorf_state(n)]
    assert sum(space.layer_size(level) for level in space.levels) == engine(n).states


@pytest.mark.slow
def test_spectrum_200_with_disjoint_prime_sets() -> None:
    first = zeckenum.count(200)
    offset = len(first.primes) + 2
    second = zeckenum.count(200, prime_offset=offset)
    used_first = set(first.primes) | {first.check_prime}
    used_second = set(second.primes) | {second.check_prime}
    assert not used_first & used_second
    assert first.length_counts == second.length_counts
    assert first.games == second.games
    assert first.shortest == second.shortest == 200 - Z(200)
    assert longest_bound_holds(first.longest, 200)
