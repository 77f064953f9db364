"""Independent brute force for chip games given by a small description (no zeckenum code).

A description is a plain dict, written here from each game's definition::

    {
        "bins": function limit -> all bin values <= limit, smallest first,
        "start": "ones" (n tokens in bin 1) | "greedy" (greedy decomposition of n)
                 | [c1, c2, ...] (n * c_i tokens in bin i)
                 | {"position": [c1, c2, ...]} (exactly c_i tokens in bin i; n must be
                   the position's value),
        "moves": [(function k -> (take, give), first, last), ...],
    }

A move family maps an index k in [first, last] (last None: as far as the bins go) to
`take` and `give`, dicts {1-based bin: tokens}.  States are tuples of counts; every
analysis is memoised plain Python over them: slow but obviously right.
"""

from __future__ import annotations

from collections import Counter
from fractions import Fraction
from functools import lru_cache


def linear_recurrence_upto(initial: list[int], coeffs: list[int], limit: int) -> list[int]:
    """initial, then x(k) = sum coeffs[i] * x(k-1-i), every term <= limit."""
    seq = list(initial)
    while True:
        nxt = sum(c * seq[-1 - i] for i, c in enumerate(coeffs))
        if nxt > limit:
            break
        seq.append(nxt)
    return [x for x in seq if x <= limit]


def fib_bins(limit: int) -> list[int]:
    return linear_recurrence_upto([1, 2], [1, 1], limit)


def trib_bins(limit: int) -> list[int]:
    return linear_recurrence_upto([1, 2, 4], [1, 1, 1], limit)


# Moves as (function k -> (take, give) over absolute 1-based bins, first, last).
STANDARD = {
    "bins": fib_bins,
    "start": "ones",
    "moves": [
        (lambda k: ({1: 2}, {2: 1}), 1, 1),
        (lambda k: ({k - 1: 1, k: 1}, {k + 1: 1}), 2, None),
        (lambda k: ({2: 2}, {1: 1, 3: 1}), 2, 2),
        (lambda k: ({k: 2}, {k - 2: 1, k + 1: 1}), 3, None),
    ],
}

REVERSED = {
    "bins": fib_bins,
    "start": "greedy",
    "moves": [
        (lambda k: ({2: 1}, {1: 2}), 1, 1),
        (lambda k: ({k + 1: 1}, {k - 1: 1, k: 1}), 2, None),
        (lambda k: ({1: 1, 3: 1}, {2: 2}), 2, 2),
        (lambda k: ({k - 2: 1, k + 1: 1}, {k: 2}), 3, None),
    ],
}

TRIBONACCI = {
    "bins": trib_bins,
    "start": "ones",
    "moves": [
        (lambda k: ({1: 2}, {2: 1}), 1, 1),
        (lambda k: ({2: 2}, {3: 1}), 2, 2),
        (lambda k: ({k - 2: 1, k - 1: 1, k: 1}, {k + 1: 1}), 3, None),
        (lambda k: ({3: 2}, {1: 1, 4: 1}), 3, 3),
        (lambda k: ({k: 2}, {k - 3: 1, k + 1: 1}), 4, None),
    ],
}

TWOS = {**STANDARD, "start": [0, 1]}

DESCRIPTIONS = {
    "standard": STANDARD,
    "reversed": REVERSED,
    "tribonacci": TRIBONACCI,
    "twos": TWOS,
}


class Game:
    """One described game at one n: its bins, start, moves and memoised analyses."""

    def __init__(self, desc: dict, n: int) -> None:
        start = desc["start"]
        if isinstance(start, dict):
            pos = list(start["position"])
            vals = desc["bins"](10**12)
            self.value = sum(c * v for c, v in zip(pos, vals, strict=False))
            assert self.value == n, "a position's game has n = its value"
        elif isinstance(start, list):
            vals = desc["bins"](10**12)
            self.value = n * sum(c * v for c, v in zip(start, vals, strict=False))
        else:
            self.value = n
        self.bins = desc["bins"](self.value)
        nb = len(self.bins)
        s = [0] * nb
        if isinstance(start, dict):
            for i, c in enumerate(pos):
                s[i] = c
        elif start == "ones":
            s[0] = n
        elif start == "greedy":
            rest = n
            for i in range(nb - 1, -1, -1):
                s[i], rest = divmod(rest, self.bins[i])
            assert rest == 0
        else:
            for i, c in enumerate(start):
                s[i] = n * c
        self.start = tuple(s)
        self.moves: list[tuple[dict[int, int], dict[int, int]]] = []
        for fn, first, last in desc["moves"]:
            k = first
            while last is None or k <= last:
                take, give = fn(k)
                bins_used = list(take) + list(give)
                if max(bins_used) > nb:
                    if last is None:
                        break
                    k += 1
                    continue
                assert min(bins_used) >= 1
                tv = sum(c * self.bins[b - 1] for b, c in take.items())
                gv = sum(c * self.bins[b - 1] for b, c in give.items())
                assert tv == gv, "a described move changes the value"
                self.moves.append((take, give))
                k += 1
        self._succ = lru_cache(maxsize=None)(self._successors)
        self._spec = lru_cache(maxsize=None)(self._spectrum)
        self._dist = lru_cache(maxsize=None)(self._distribution)
        self._win = lru_cache(maxsize=None)(self._wins)

    def _successors(self, state: tuple[int, ...]) -> tuple[tuple[int, ...], ...]:
        out = []
        for take, give in self.moves:
            if all(state[b - 1] >= c for b, c in take.items()):
                s = list(state)
                for b, c in take.items():
                    s[b - 1] -= c
                for b, c in give.items():
                    s[b - 1] += c
                out.append(tuple(s))
        return tuple(out)

    def successors(self, state: tuple[int, ...]) -> tuple[tuple[int, ...], ...]:
        """One successor per legal move (a move is a template at one index)."""
        return self._succ(state)

    def _spectrum(self, state: tuple[int, ...]) -> Counter:
        nxt = self.successors(state)
        if not nxt:
            return Counter({0: 1})
        out: Counter = Counter()
        for s in nxt:
            for length, c in self._spec(s).items():
                out[length + 1] += c
        return out

    def spectrum(self) -> Counter:
        """{game length: number of games} from the start."""
        return self._spec(self.start)

    def _distribution(self, state: tuple[int, ...]) -> dict[int, Fraction]:
        nxt = self.successors(state)
        if not nxt:
            return {0: Fraction(1)}
        out: dict[int, Fraction] = {}
        p = Fraction(1, len(nxt))
        for s in nxt:
            for length, q in self._dist(s).items():
                out[length + 1] = out.get(length + 1, Fraction(0)) + p * q
        return out

    def length_distribution(self) -> dict[int, Fraction]:
        """Length probabilities when each player picks a legal move uniformly at random."""
        return self._dist(self.start)

    def _wins(self, state: tuple[int, ...]) -> bool:
        return any(not self._win(s) for s in self.successors(state))

    def first_player_wins(self) -> bool:
        """Normal play, two players: the player to move at the start wins."""
        return self._win(self.start)

    def reachable(self) -> set[tuple[int, ...]]:
        seen = {self.start}
        todo = [self.start]
        while todo:
            s = todo.pop()
            for t in self.successors(s):
                if t not in seen:
                    seen.add(t)
                    todo.append(t)
        return seen

    def terminals(self) -> set[tuple[int, ...]]:
        """Reachable states without a legal move."""
        return {s for s in self.reachable() if not self.successors(s)}
