"""Independent reference for random play: plain Python, fractions.Fraction, no engine code.

The game is rewritten here from its definition: Fibonacci bins 1, 2, 3, 5, 8, ...; moves
2F1 -> F2, F(k-1) + F(k) -> F(k+1), 2F2 -> F1 + F3, 2F(k) -> F(k-2) + F(k+1) (k >= 3).
Two references:
  all_games(n, model)     walks every game one by one (depth-first) and adds up each game's
                          probability by its length;
  length_law(n, model)    the same law by memoised recursion on states (for larger n).
"""

from __future__ import annotations

from fractions import Fraction
from functools import cache


def fib_bins(n: int) -> list[int]:
    bins = [1, 2]
    while bins[-1] + bins[-2] <= n:
        bins.append(bins[-1] + bins[-2])
    return [b for b in bins if b <= n]


def legal_moves(state: tuple[int, ...], model: str) -> list[tuple[tuple[int, ...], int]]:
    """[(next state, weight)] for every legal move of a state (bins 0-based here)."""
    a = list(state)
    nb = len(a)
    out = []

    def put(changes: dict[int, int], weight: int) -> None:
        b = a[:]
        for k, d in changes.items():
            b[k] += d
        out.append((tuple(b), weight))

    def pair_weight_two(k: int) -> int:
        return a[k] * (a[k] - 1) // 2 if model == "pairs" else 1

    if a[0] >= 2 and nb >= 2:
        put({0: -2, 1: 1}, pair_weight_two(0))
    for k in range(1, nb - 1):  # F(k) + F(k+1) -> F(k+2), 0-based k-1, k -> k+1
        if a[k - 1] >= 1 and a[k] >= 1:
            put({k - 1: -1, k: -1, k + 1: 1}, a[k - 1] * a[k] if model == "pairs" else 1)
    if nb >= 3 and a[1] >= 2:
        put({1: -2, 0: 1, 2: 1}, pair_weight_two(1))
    for k in range(2, nb - 1):
        if a[k] >= 2:
            put({k: -2, k - 2: 1, k + 1: 1}, pair_weight_two(k))
    return out


def start_state(n: int) -> tuple[int, ...]:
    return (n,) + (0,) * (len(fib_bins(n)) - 1)


def all_games(n: int, model: str) -> dict[int, Fraction]:
    """{length: probability} by enumerating every game (exponential: small n only)."""
    law: dict[int, Fraction] = {}
    stack = [(start_state(n), 0, Fraction(1))]
    while stack:
        s, length, pr = stack.pop()
        mv = legal_moves(s, model)
        if not mv:
            law[length] = law.get(length, Fraction(0)) + pr
            continue
        tot = sum(w for _, w in mv)
        for t, w in mv:
            stack.append((t, length + 1, pr * Fraction(w, tot)))
    return dict(sorted(law.items()))


def padded(position: tuple[int, ...] | list[int]) -> tuple[int, ...]:
    """A position (counts per bin, bin 1 first) over every bin of value <= its value."""
    value = sum(c * v for c, v in zip(position, fib_bins(10**18), strict=False))
    nb = len(fib_bins(value))
    assert len(position) <= nb
    return tuple(position) + (0,) * (nb - len(position))


def length_law(n: int, model: str, start: tuple[int, ...] | None = None,
               ) -> dict[int, Fraction]:
    """{length: probability} by memoised recursion over states (same law as all_games),
    from n tokens in F1 or from the state `start` (over the bins of value <= n, `padded`)."""

    @cache
    def rest(s: tuple[int, ...]) -> tuple[tuple[int, Fraction], ...]:
        mv = legal_moves(s, model)
        if not mv:
            return ((0, Fraction(1)),)
        tot = sum(w for _, w in mv)
        acc: dict[int, Fraction] = {}
        for t, w in mv:
            for k, p in rest(t):
                acc[k + 1] = acc.get(k + 1, Fraction(0)) + p * Fraction(w, tot)
        return tuple(sorted(acc.items()))

    return dict(rest(start_state(n) if start is None else start))


def win_law(law: dict[int, Fraction], players: int) -> dict[int, Fraction]:
    """{player: probability}: player i wins when (length - 1) mod players == i - 1."""
    out = {i: Fraction(0) for i in range(1, players + 1)}
    for k, p in law.items():
        out[(k - 1) % players + 1] += p
    return out
