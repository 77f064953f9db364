"""zeckenum.count against references outside the engine.

* an independent brute force in plain Python (tests/support/bruteforce.py);
* networkx on the explicit move graph (path counting, longest path, shortest path);
* OEIS A003107 (partitions of n into Fibonacci parts 1, 2, 3, 5, 8, ...) for the number of
  states, cross-checked against its generating function prod 1/(1 - x^F) (plain integer
  arithmetic and sympy polynomials);
* OEIS A007895 (number of terms of the Zeckendorf representation of n).
"""

from __future__ import annotations

from functools import cache

import networkx as nx
import pytest
import sympy as sp
import zeckenum
from bruteforce import (
    Z,
    census,
    fibonacci_upto,
    move_graph,
    start_state,
    zeckendorf,
    zeckendorf_state,
)

# OEIS A003107, n = 0..31, from memory (partitions of n into Fibonacci parts, one part 1).
A003107_FROM_MEMORY = [
    1, 1, 2, 3, 4, 6, 8, 10, 14, 17, 22, 27, 33, 41, 49, 59, 71, 83, 99, 115, 134,
    157, 180, 208, 239, 272, 312, 353, 400, 453, 509, 573,
]
A003107_AT_100 = 97075  # OEIS A003107(100), from memory

# OEIS A007895, n = 0..60, from memory (number of terms in the Zeckendorf representation).
A007895_FROM_MEMORY = [
    0, 1, 1, 1, 2, 1, 2, 2, 1, 2, 2, 2, 3, 1, 2, 2, 2, 3, 2, 3, 3,
    1, 2, 2, 2, 3, 2, 3, 3, 2, 3, 3, 3, 4,
    1, 2, 2, 2, 3, 2, 3, 3, 2, 3, 3, 3, 4, 2, 3, 3, 3, 4, 3, 4, 4,
    1, 2, 2, 2, 3, 2,
]


@cache
def engine(n: int) -> zeckenum.CountResult:
    return zeckenum.count(n)


def fibonacci_partitions_plain(limit: int) -> list[int]:
    """Coefficients 0..limit of prod over Fibonacci F <= limit of 1/(1 - x^F) (integers)."""
    c = [1] + [0] * limit
    for f in fibonacci_upto(limit):
        for k in range(f, limit + 1):
            c[k] += c[k - f]
    return c


def fibonacci_partitions_sympy(limit: int) -> list[int]:
    """The same coefficients with sympy: product of truncated geometric series."""
    x = sp.symbols("x")
    prod = sp.Poly(1, x)
    for f in fibonacci_upto(limit):
        geometric = sp.Poly(sum(x ** (k * f) for k in range(limit // f + 1)), x)
        prod = prod * geometric
    return [int(prod.coeff_monomial(x**k)) for k in range(limit + 1)]


# ---------------------------------------------------------------- brute force, n = 1..14


@pytest.mark.parametrize("n", range(1, 15))
def test_engine_matches_bruteforce(n: int) -> None:
    want = census(n)
    got = engine(n)
    assert got.n == n
    assert got.length_counts == want["length_counts"]
    assert list(got.length_counts) == sorted(got.length_counts)
    assert got.games == want["games"]
    assert got.shortest == want["shortest"]
    assert got.longest == want["longest"]
    assert got.states == want["states"]
    assert got.transitions == want["transitions"]


def test_bruteforce_small_values_by_hand() -> None:
    # Enumerated by hand: n = 4 has two games, 1111 -> 112 -> 13 and 1111 -> 112 -> 22 -> 13.
    assert census(1)["length_counts"] == {0: 1}
    assert census(2)["length_counts"] == {1: 1}
    assert census(3)["length_counts"] == {2: 1}
    assert census(4)["length_counts"] == {2: 1, 3: 1}


# ---------------------------------------------------------------- networkx, n = 1..40


def _networkx_checks(n: int) -> None:
    g = move_graph(n)
    start = start_state(n)
    assert nx.is_directed_acyclic_graph(g)
    sinks = [v for v in g.nodes if g.out_degree(v) == 0]
    assert sinks == [zeckendorf_state(n)]
    end = sinks[0]
    # number of start -> end paths by a DP over networkx's topological order
    paths = dict.fromkeys(g.nodes, 0)
    paths[start] = 1
    for v in nx.topological_sort(g):
        for w in g.successors(v):
            paths[w] += paths[v]
    res = engine(n)
    assert res.games == paths[end]
    assert res.longest == nx.dag_longest_path_length(g)
    assert res.shortest == nx.shortest_path_length(g, start, end)
    assert res.states == g.number_of_nodes()
    assert res.transitions == g.number_of_edges()
    if 2 <= n <= 10:
        assert res.games == sum(1 for _ in nx.all_simple_paths(g, start, end))


@pytest.mark.parametrize("n", range(1, 41))
def test_engine_matches_networkx(n: int) -> None:
    _networkx_checks(n)


@pytest.mark.slow
@pytest.mark.parametrize("n", range(41, 61))
def test_engine_matches_networkx_slow(n: int) -> None:
    _networkx_checks(n)


# ---------------------------------------------------------------- OEIS A003107


def test_a003107_memory_matches_generating_function() -> None:
    plain = fibonacci_partitions_plain(100)
    assert plain == fibonacci_partitions_sympy(100)
    assert plain[: len(A003107_FROM_MEMORY)] == A003107_FROM_MEMORY
    assert plain[100] == A003107_AT_100


@pytest.mark.parametrize("n", range(1, 61))
def test_states_equal_a003107(n: int) -> None:
    # every partition of n into Fibonacci parts is reachable from n ones
    want = fibonacci_partitions_plain(60)[n]
    if n < len(A003107_FROM_MEMORY):
        assert want == A003107_FROM_MEMORY[n]
    assert engine(n).states == want


@pytest.mark.slow
def test_states_equal_a003107_at_100() -> None:
    assert engine(100).states == A003107_AT_100


# ---------------------------------------------------------------- OEIS A007895


def test_z_equals_a007895() -> None:
    assert [Z(n) for n in range(61)] == A007895_FROM_MEMORY


def test_zeckendorf_is_the_unique_nonconsecutive_decomposition() -> None:
    # Zeckendorf's theorem: every n >= 1 is uniquely a sum of distinct, non-consecutive
    # Fibonacci numbers (F1 = 1, F2 = 2, ...).  Enumerate all such sums by brute force.
    fibs = fibonacci_upto(200)
    sums: dict[int, list[tuple[int, ...]]] = {}

    def walk(i: int, total: int, parts: tuple[int, ...]) -> None:
        if total > 200:
            return
        sums.setdefault(total, []).append(parts)
        for j in range(i, len(fibs)):
            walk(j + 2, total + fibs[j], (fibs[j],) + parts)

    walk(0, 0, ())
    for n in range(1, 201):
        assert len(sums[n]) == 1, n
        assert list(sums[n][0]) == zeckendorf(n)
