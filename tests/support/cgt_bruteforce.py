"""Brute-force combinatorial game theory on any finite game given by a successor function
(shares no code with zeckenum).

Every function takes `succ`, a function state -> iterable of successor states (one entry
per legal move), and a state; results are memoised in plain dicts keyed by the state.
The definitions are the textbook ones ("Winning Ways for your Mathematical Plays",
Berlekamp, Conway and Guy, 1982, for outcome classes, misère play, remoteness and the
Sprague–Grundy values), written out directly:

* normal play: a position is N (the player to move wins) when some move leads to a
  P-position; a position without a move is P;
* misère play: the same, except that a position without a move is N (the player who made
  the last move loses);
* remoteness: 0 without a move; an N-position's is 1 + the least remoteness among its
  P-successors; a P-position's is 1 + the largest remoteness among its successors;
* Grundy value: the least non-negative integer that is not the value of a successor (mex);
* a sum of games: a move is a move in exactly one component; its Grundy value is computed
  here by mex over the product game, not by the XOR rule it is used to check.

Iterative post-order traversals keep deep games off the Python stack.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Iterable

Succ = Callable[[Hashable], Iterable[Hashable]]


def _post_order(succ: Succ, root: Hashable, memo: dict, value: Callable) -> object:
    """memo[root], computing value(state, successor list) once every successor is in memo."""
    stack = [root]
    kids_of: dict = {}
    while stack:
        u = stack[-1]
        if u in memo:
            stack.pop()
            continue
        kids = kids_of.get(u)
        if kids is None:
            kids = kids_of[u] = list(succ(u))
        todo = [t for t in kids if t not in memo]
        if todo:
            stack.extend(todo)
            continue
        memo[u] = value(u, kids)
        stack.pop()
        del kids_of[u]
    return memo[root]


class Analysis:
    """Memoised outcome, remoteness and Grundy value of one game under one convention."""

    def __init__(self, succ: Succ, misere: bool = False) -> None:
        self.succ = succ
        self.misere = misere
        self._win: dict = {}
        self._rem: dict = {}
        self._gr: dict = {}

    def mover_wins(self, s: Hashable) -> bool:
        """True at an N-position."""

        def value(_u: Hashable, kids: list) -> bool:
            if not kids:
                return self.misere
            return any(not self._win[t] for t in kids)

        return _post_order(self.succ, s, self._win, value)

    def remoteness(self, s: Hashable) -> int:
        def value(u: Hashable, kids: list) -> int:
            if not kids:
                return 0
            for t in kids:
                self.mover_wins(t)
            losing = [self._rem[t] for t in kids if not self._win[t]]
            if losing:
                return 1 + min(losing)
            return 1 + max(self._rem[t] for t in kids)

        return _post_order(self.succ, s, self._rem, value)

    def grundy(self, s: Hashable) -> int:
        if self.misere:
            raise ValueError("Grundy values here are normal-play values")

        def value(_u: Hashable, kids: list) -> int:
            seen = {self._gr[t] for t in kids}
            g = 0
            while g in seen:
                g += 1
            return g

        return _post_order(self.succ, s, self._gr, value)


def sum_successors(succs: list[Succ]) -> Succ:
    """The successor function of the sum of games: a state is a tuple of component states,
    a move changes exactly one component by one of its moves."""

    def succ(state: tuple) -> list[tuple]:
        out = []
        for k, f in enumerate(succs):
            for t in f(state[k]):
                out.append(state[:k] + (t,) + state[k + 1:])
        return out

    return succ


def reachable(succ: Succ, start: Hashable) -> set:
    seen = {start}
    todo = [start]
    while todo:
        for t in succ(todo.pop()):
            if t not in seen:
                seen.add(t)
                todo.append(t)
    return seen
