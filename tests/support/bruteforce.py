"""Independent brute force for the standard Zeckendorf game (shares no code with zeckenum).

A state is a tuple of token counts; position i (0-based) holds the tokens worth the
Fibonacci number F(i+1) with F1 = 1, F2 = 2, F3 = 3, F4 = 5, ...  The start for n is
(n, 0, ..., 0) over every Fibonacci number <= n.  Moves (1-based bin k):

    combine  2 F1 -> F2,  F(k-1) + F(k) -> F(k+1) (k >= 2)
    split    2 F2 -> F1 + F3,  2 F(k) -> F(k-2) + F(k+1) (k >= 3)

Everything here is plain Python on tuples with memoised recursion: slow but obviously right,
so the tests can hold the engine against it.
"""

from __future__ import annotations

from collections import Counter
from functools import cache

import networkx as nx


def fibonacci_upto(n: int) -> list[int]:
    """Fibonacci numbers 1, 2, 3, 5, 8, ... that are <= n (empty for n < 1)."""
    out: list[int] = []
    a, b = 1, 2
    while a <= n:
        out.append(a)
        a, b = b, a + b
    return out


def start_state(n: int) -> tuple[int, ...]:
    """n tokens in F1, zero elsewhere, over the bins with value <= n."""
    nb = len(fibonacci_upto(n))
    return (n,) + (0,) * (nb - 1)


def state_value(state: tuple[int, ...]) -> int:
    """sum(count * Fibonacci value) of a state; every move preserves it."""
    return sum(c * f for c, f in zip(state, fibonacci_upto(10**18), strict=False))


def successors(state: tuple[int, ...]) -> list[tuple[int, ...]]:
    """All states one legal move away from `state` (one entry per move; all distinct)."""
    a = list(state)
    nb = len(a)
    out: list[tuple[int, ...]] = []

    def apply(changes: dict[int, int]) -> None:
        b = a.copy()
        for i, d in changes.items():
            assert 0 <= i < nb, "a move left the bins with value <= n"
            b[i] += d
        out.append(tuple(b))

    # combine two ones: 2 F1 -> F2
    if nb >= 2 and a[0] >= 2:
        apply({0: -2, 1: +1})
    # combine neighbours: F(k-1) + F(k) -> F(k+1), 0-based i = k - 1 >= 1
    for i in range(1, nb - 1):
        if a[i - 1] >= 1 and a[i] >= 1:
            apply({i - 1: -1, i: -1, i + 1: +1})
    # split twos: 2 F2 -> F1 + F3
    if nb >= 3 and a[1] >= 2:
        apply({1: -2, 0: +1, 2: +1})
    # split: 2 F(k) -> F(k-2) + F(k+1), k >= 3, 0-based i = k - 1 >= 2
    for i in range(2, nb - 1):
        if a[i] >= 2:
            apply({i: -2, i - 2: +1, i + 1: +1})
    return out


@cache
def _lengths_to_end(state: tuple[int, ...]) -> tuple[tuple[int, int], ...]:
    nxt = successors(state)
    if not nxt:
        return ((0, 1),)
    acc: Counter[int] = Counter()
    for t in nxt:
        for length, c in _lengths_to_end(t):
            acc[length + 1] += c
    return tuple(sorted(acc.items()))


def lengths_to_end(state: tuple[int, ...]) -> Counter[int]:
    """Counter {L: number of games of exactly L moves from `state` to a terminal state}."""
    return Counter(dict(_lengths_to_end(state)))


def reachable(n: int) -> set[tuple[int, ...]]:
    """Every state reachable from the start for n (start and terminal included)."""
    return reachable_from(start_state(n))


def census(n: int) -> dict:
    """Brute-force census for n: spectrum, games, shortest, longest, states, transitions, ends.

    Keys: length_counts (dict L -> games, ascending), games, shortest, longest, states,
    transitions (number of (state, move) pairs over reachable states), terminals (set).
    """
    states = reachable(n)
    transitions = sum(len(successors(s)) for s in states)
    terminals = {s for s in states if not successors(s)}
    spec = lengths_to_end(start_state(n))
    return {
        "length_counts": dict(sorted(spec.items())),
        "games": sum(spec.values()),
        "shortest": min(spec),
        "longest": max(spec),
        "states": len(states),
        "transitions": transitions,
        "terminals": terminals,
    }


def move_graph(n: int) -> nx.DiGraph:
    """The explicit move graph for n: nodes are reachable state tuples, edges are moves."""
    g = nx.DiGraph()
    for s in reachable(n):
        g.add_node(s)
        for t in successors(s):
            g.add_edge(s, t)
    return g


def zeckendorf(n: int) -> list[int]:
    """Greedy Zeckendorf decomposition of n >= 0: Fibonacci parts, largest first."""
    parts: list[int] = []
    for f in reversed(fibonacci_upto(n)):
        if f <= n:
            parts.append(f)
            n -= f
    return parts


def zeckendorf_indices(n: int) -> list[int]:
    """1-based Fibonacci indices of the Zeckendorf parts of n (F1 = 1, F2 = 2, F3 = 3, ...)."""
    fibs = fibonacci_upto(max(n, 1))
    return [fibs.index(f) + 1 for f in zeckendorf(n)]


def Z(n: int) -> int:  # noqa: N802 - the usual name of this function
    """Number of terms in the Zeckendorf decomposition of n."""
    return len(zeckendorf(n))


def IZ(n: int) -> int:  # noqa: N802 - the usual name of this function
    """Sum of the 1-based indices of the Zeckendorf terms of n (F1 = 1, F2 = 2, F3 = 3, ...)."""
    return sum(zeckendorf_indices(n))


def zeckendorf_state(n: int) -> tuple[int, ...]:
    """The Zeckendorf decomposition of n as a state tuple over the bins with value <= n."""
    fibs = fibonacci_upto(n)
    counts = [0] * len(fibs)
    for f in zeckendorf(n):
        counts[fibs.index(f)] += 1
    return tuple(counts)


def padded(position: tuple[int, ...] | list[int]) -> tuple[int, ...]:
    """A position (counts per bin, bin 1 first) over every bin of value <= its value, the
    state space of its game."""
    nb = len(fibonacci_upto(state_value(tuple(position))))
    assert len(position) <= nb or not any(position[nb:])
    return tuple(position[:nb]) + (0,) * (nb - len(position))


def reachable_from(start: tuple[int, ...]) -> set[tuple[int, ...]]:
    """Every state reachable from the state `start` (itself and the terminals included)."""
    seen = {start}
    stack = [start]
    while stack:
        s = stack.pop()
        for t in successors(s):
            if t not in seen:
                seen.add(t)
                stack.append(t)
    return seen


def census_from(start: tuple[int, ...]) -> dict:
    """`census` of the game started at the state `start` (over the bins of value <= its
    value: `padded`)."""
    states = reachable_from(start)
    spec = lengths_to_end(start)
    return {
        "length_counts": dict(sorted(spec.items())),
        "games": sum(spec.values()),
        "shortest": min(spec),
        "longest": max(spec),
        "states": len(states),
        "transitions": sum(len(successors(s)) for s in states),
        "terminals": {s for s in states if not successors(s)},
    }
