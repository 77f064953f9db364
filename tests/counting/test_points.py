"""The evaluation-point count (`counting.points`) against references outside the engine.

* the plain-Python brute forces of tests/support (bruteforce.census for the standard game,
  rules_bruteforce.Game.spectrum for every shipped rule set): the spectrum must be equal
  for every shard shape (points per shard 1, 2, 3, 5 and all);
* networkx: the games of each length by a DP over the topological order of the explicit
  move graph (n up to 40, shards of 1, 7 and all points);
* sympy for primality and for the inverse transform: a polynomial with random
  coefficients, evaluated at the roots of unity with plain Python ints, must come back
  coefficient by coefficient (common practice: the number-theoretic transform is the
  discrete Fourier transform over Z/pZ);
* `zeckenum.count` (the windowed sweep, itself checked against the brute forces) for
  larger n, where the brute force is too slow.
"""

from __future__ import annotations

import random
from collections import Counter

import networkx as nx
import pytest
import rules_bruteforce as rbf
import sympy as sp
import zeckenum
from bruteforce import census, move_graph, start_state
from zeckenum.core.ntt import (
    counts_from_values,
    lengths_from_values,
    ntt_primes,
    ntt_primes_for_bits,
    root_of_order,
    transform_size,
)
from zeckenum.counting.points import count_points
from zeckenum.errors import CheckPrimeMismatch


@pytest.mark.parametrize("order", [1, 2, 3, 8, 64, 437, 653, 1024])
def test_ntt_primes_are_primes_one_mod_the_order_below_2_50(order: int) -> None:
    ps = ntt_primes(order, 4)
    assert ps == sorted(ps, reverse=True) and len(set(ps)) == 4
    for p in ps:
        assert sp.isprime(p) and (p - 1) % order == 0 and 2**13 < p < 2**50
        w = root_of_order(p, order)
        assert pow(w, order, p) == 1
        assert sp.n_order(w, p) == order  # exact order, by sympy


def test_ntt_primes_for_bits_cover_the_bound() -> None:
    for bits in (1, 49, 50, 51, 200, 1000):
        ps, check = ntt_primes_for_bits(bits, 256)
        prod = 1
        for p in ps:
            prod *= p
        assert prod.bit_length() > bits and check not in ps and check % 256 == 1


@pytest.mark.parametrize("order", [1, 2, 4, 16, 128])
def test_inverse_transform_recovers_a_random_polynomial(order: int) -> None:
    rng = random.Random(order)
    p = ntt_primes(order, 1)[0]
    w = root_of_order(p, order)
    coeffs = [rng.randrange(p) for _ in range(order)]
    values = [sum(c * pow(w, k * j, p) for j, c in enumerate(coeffs)) % p
              for k in range(order)]
    assert counts_from_values(values, p, w) == coeffs


def test_transform_size_is_the_fewest_points_plus_one_check() -> None:
    # common practice (Lagrange): a polynomial of degree <= span is fixed by span + 1
    # values; one more gives a coefficient that must vanish
    for span in range(0, 70):
        assert transform_size(span) == span + 2


@pytest.mark.parametrize(("shortest", "longest"),
                         [(0, 0), (0, 7), (5, 5), (9, 20), (40, 71), (3, 95), (300, 735)])
def test_lengths_from_values_rebuild_a_shifted_polynomial(shortest: int, longest: int) -> None:
    # common practice: evaluate sum c_L x^L (support shortest..longest) at the N-th roots
    # of unity by the definition, then interpolate
    rng = random.Random(shortest * 100 + longest)
    order = transform_size(longest - shortest)
    p = ntt_primes(order, 1)[0]
    w = root_of_order(p, order)
    coeffs = [0] * shortest + [rng.randrange(p) for _ in range(longest - shortest + 1)]
    values = [sum(c * pow(w, k * j, p) for j, c in enumerate(coeffs)) % p
              for k in range(order)]
    assert lengths_from_values(values, p, w, shortest, longest, "G") == coeffs
    # a term outside the lengths (degree longest + 1) is caught
    bad = [(v + pow(w, k * (longest + 1), p)) % p for k, v in enumerate(values)]
    with pytest.raises(CheckPrimeMismatch, match="G mod .* outside the lengths"):
        lengths_from_values(bad, p, w, shortest, longest, "G")


@pytest.mark.parametrize("n", [1, 2, 3, 6, 11, 17])
@pytest.mark.parametrize("per_shard", [1, 2, 3, 5, None])
def test_standard_spectrum_equals_the_brute_force_for_every_shard_shape(
        n: int, per_shard: int | None) -> None:
    ref = census(n)
    res = count_points(n, points_per_shard=per_shard, threads=2)
    assert res.length_counts == ref["length_counts"]
    assert (res.games, res.shortest, res.longest) == (ref["games"], ref["shortest"],
                                                      ref["longest"])
    assert res.states == ref["states"] and res.transitions == ref["transitions"]


@pytest.mark.parametrize("name", ["reversed", "tribonacci", "twos"])
@pytest.mark.parametrize("n", [2, 7, 12])
@pytest.mark.parametrize("per_shard", [1, 4, None])
def test_variant_spectra_equal_the_rule_set_brute_force(name: str, n: int,
                                                        per_shard: int | None) -> None:
    ref = rbf.Game(rbf.DESCRIPTIONS[name], n).spectrum()
    res = count_points(n, name, points_per_shard=per_shard, threads=2)
    assert res.length_counts == dict(sorted(ref.items()))


def _networkx_length_counts(n: int) -> dict[int, int]:
    """Games of each length by a DP over networkx's topological order of the move graph."""
    g = move_graph(n)
    start = start_state(n)
    by_len: dict[tuple[int, ...], Counter[int]] = {v: Counter() for v in g.nodes}
    by_len[start][0] = 1
    for v in nx.topological_sort(g):
        for w in g.successors(v):
            for length, c in by_len[v].items():
                by_len[w][length + 1] += c
    (end,) = [v for v in g.nodes if g.out_degree(v) == 0]
    return dict(sorted(by_len[end].items()))


@pytest.mark.parametrize("n", [18, 25, 33, 40])
@pytest.mark.parametrize("per_shard", [1, 7, None])
def test_spectrum_equals_networkx_path_counts_for_every_shard_shape(
        n: int, per_shard: int | None) -> None:
    res = count_points(n, points_per_shard=per_shard, threads=2)
    assert res.length_counts == _networkx_length_counts(n)


@pytest.mark.slow
@pytest.mark.parametrize("n", [120, 150])
def test_large_n_equal_the_windowed_count(n: int) -> None:
    ref = zeckenum.count(n)
    res = count_points(n, points_per_shard=64, threads=2)
    assert res.length_counts == ref.length_counts and res.games == ref.games


@pytest.mark.parametrize("n", [40, 75])
def test_larger_n_equal_the_windowed_count_with_a_disjoint_prime_set(n: int) -> None:
    # the windowed count uses primes below 2**62, this path primes below 2**50 that are
    # 1 mod N: two independent modular computations of the same integers
    ref = zeckenum.count(n)
    res = count_points(n, points_per_shard=37, threads=2)
    assert res.length_counts == ref.length_counts
    assert not set(res.primes) & set(ref.primes)
    assert res.stats["shards"] == (len(res.primes) + 1) * -(-res.stats["points"] // 37)


def test_command_line_counts_by_points_and_refuses_what_it_cannot_do() -> None:
    import json

    from click.testing import CliRunner
    from zeckenum.cli.group import main

    runner = CliRunner()
    res = runner.invoke(main, ["count", "9", "--points-per-shard", "3", "--json"])
    assert res.exit_code == 0, res.output
    got = json.loads(res.output)
    ref = census(9)  # source: plain-Python brute force
    assert {int(k): int(v) for k, v in got["length_counts"].items()} == ref["length_counts"]
    assert got["stats"]["method"] == "points"
    for bad in (["--points-per-shard", "0"], ["--points-per-shard", "x"],
                ["--points-per-shard", "-1"]):
        res = runner.invoke(main, ["count", "9", *bad])
        assert res.exit_code == 2, (bad, res.output)
        lines = res.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), res.output
