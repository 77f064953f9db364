"""The ranked state space against independent enumeration (plain Python, no engine code)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from zeckenum.core.listing import moves_in, moves_out
from zeckenum.core.statespace import build_space
from zeckenum.rules.model import STANDARD


def fib_bins(n: int) -> list[int]:
    """1, 2, 3, 5, ... up to n (computed here, independently of the engine)."""
    out = [1, 2]
    while out[-1] + out[-2] <= n:
        out.append(out[-1] + out[-2])
    return [v for v in out if v <= n]


def all_vectors(n: int) -> list[tuple[int, ...]]:
    """Every count vector of value n over the bins, by exhaustive product (small n only)."""
    vals = fib_bins(n)
    ranges = [range(n // v + 1) for v in vals]
    return [
        a for a in itertools.product(*ranges)
        if sum(c * v for c, v in zip(a, vals, strict=True)) == n
    ]


@pytest.mark.parametrize("n", [1, 2, 5, 9, 13, 17])
def test_layers_hold_every_vector_once_in_colex_order(n: int) -> None:
    """Layers partition the exhaustive set; ranks run 0..size-1 in co-lex order.

    Common practice: the exhaustive product is the definition of the state set.
    """
    space = build_space(STANDARD.instantiate(n))
    expected = sorted(all_vectors(n), key=lambda a: (sum(a), tuple(reversed(a))))
    seen = []
    for level in sorted(space.levels):
        states = space.states(level)
        rows = [tuple(int(x) for x in r) for r in states]
        assert all(sum(r) == level for r in rows)
        assert rows == sorted(rows, key=lambda a: tuple(reversed(a)))
        for i, r in enumerate(rows):
            assert space.rank(np.array(r)) == (level, i)
        seen += rows
    assert seen == expected


@pytest.mark.parametrize("n", [6, 11, 16])
def test_moves_in_and_out_are_transposes(n: int) -> None:
    """Every move out of s into t is listed as a move into t from s, and nothing else."""
    space = build_space(STANDARD.instantiate(n))
    out_edges, in_edges = set(), set()
    for level in space.levels:
        lm = moves_out(space, level)
        for i in range(lm.size):
            for e in range(lm.ptr[i], lm.ptr[i + 1]):
                out_edges.add(((level, i), (level - int(lm.drop[e]), int(lm.other[e]))))
        inc = moves_in(space, level)
        for j in range(inc.size):
            for e in range(inc.ptr[j], inc.ptr[j + 1]):
                in_edges.add(((level + int(inc.drop[e]), int(inc.other[e])), (level, j)))
    assert out_edges == in_edges
    assert out_edges


# Source: common practice (a move that keeps the level and lowers the co-lexicographic rank
# breaks the in-layer order every sweep relies on; the one listing must refuse it, both
# directions, with the one error, never list it).
def test_listing_refuses_a_move_against_the_rank_order() -> None:
    import dataclasses

    from zeckenum.errors import InputError

    spec = STANDARD.instantiate(6)
    splits = spec.mv_drop == 0
    assert splits.any()
    delta = spec.mv_delta.copy()
    delta[splits] = -delta[splits]  # F(k-2) + F(k+1) -> 2 F(k): same level, lower rank
    bad = dataclasses.replace(spec, mv_delta=delta)
    space = build_space(bad)
    for listing in (moves_in, moves_out):
        refused = 0
        for level in space.levels:
            try:
                listing(space, level)
            except InputError as exc:
                assert "not in topological order" in str(exc)
                refused += 1
        assert refused > 0, listing.__name__
