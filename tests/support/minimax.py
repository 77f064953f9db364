"""Plain-Python brute force for the standard Zeckendorf game (shares no code with zeckenum).

The game is written out again from its definition: bins F1 = 1, F2 = 2, F(k+1) = F(k) +
F(k-1); moves 2F1 -> F2, F(k-1) + F(k) -> F(k+1) (k >= 2), 2F2 -> F1 + F3 and
2F(k) -> F(k-2) + F(k+1) (k >= 3).  States are tuples of counts, results are memoised in
dicts; no ranks, no layers, no numba.
"""

from __future__ import annotations

import sys
from functools import cache

sys.setrecursionlimit(100_000)


def fib_bins(n: int) -> tuple[int, ...]:
    """Values 1, 2, 3, 5, ... up to n."""
    vals = [1, 2]
    while vals[-1] + vals[-2] <= n:
        vals.append(vals[-1] + vals[-2])
    return tuple(v for v in vals if v <= n)


def moves_of(state: tuple[int, ...]) -> list[tuple[str, tuple[int, ...]]]:
    """(name, next state) for every legal move; names as 'kind@bin' with 1-based bins."""
    k_max = len(state)
    out = []

    def apply(name: str, changes: dict[int, int]) -> None:
        if any(b < 0 or b >= k_max for b in changes):
            return
        nxt = list(state)
        for b, d in changes.items():
            nxt[b] += d
        if min(nxt) >= 0:
            out.append((name, tuple(nxt)))

    apply("combine-ones@1", {0: -2, 1: 1})
    for k in range(2, k_max + 1):  # 1-based k: F(k-1) + F(k) -> F(k+1)
        apply(f"combine@{k}", {k - 2: -1, k - 1: -1, k: 1})
    apply("split-twos@2", {1: -2, 0: 1, 2: 1})
    for k in range(3, k_max + 1):  # 2F(k) -> F(k-2) + F(k+1)
        apply(f"split@{k}", {k - 1: -2, k - 3: 1, k: 1})
    return out


def start_state(n: int) -> tuple[int, ...]:
    bins = fib_bins(n)
    return (n,) + (0,) * (len(bins) - 1)


def reachable(n: int) -> set[tuple[int, ...]]:
    """Every state reachable from n tokens in F1 (depth-first search)."""
    seen = {start_state(n)}
    stack = [start_state(n)]
    while stack:
        s = stack.pop()
        for _, t in moves_of(s):
            if t not in seen:
                seen.add(t)
                stack.append(t)
    return seen


@cache
def mover_wins(state: tuple[int, ...]) -> bool:
    """Two players, normal play: True when the player to move wins (N-position)."""
    return any(not mover_wins(t) for _, t in moves_of(state))


def coalition_wins(n: int, players: int) -> dict[int, bool]:
    """Player x (1-based) -> can x force making the last move against all others together."""
    memo: dict[tuple[tuple[int, ...], int], bool] = {}

    def win(state: tuple[int, ...], turn: int, target: int, moved: bool) -> bool:
        # turn: 0-based player to move; moved: whether any move was made yet
        key = (state, (turn - target) % players, moved)
        if key in memo:
            return memo[key]
        nxt = moves_of(state)
        if not nxt:
            last = (turn - 1) % players
            res = moved and last == target
        elif turn == target:
            res = any(win(t, (turn + 1) % players, target, True) for _, t in nxt)
        else:
            res = all(win(t, (turn + 1) % players, target, True) for _, t in nxt)
        memo[key] = res
        return res

    return {x + 1: win(start_state(n), 0, x, False) for x in range(players)}


class TemplateGame:
    """Any rule set, rebuilt from its definition data only (bins, templates, start).

    Reads the RuleSet fields (initial values, recurrence, move templates as offsets,
    start) and nothing else of zeckenum; plain dict-memoised minimax on tuples.
    """

    def __init__(self, rules, n: int):
        first = list(rules.initial)
        while rules.recurrence and len(first) < 64:
            first.append(sum(c * first[-1 - i] for i, c in enumerate(rules.recurrence)))
        if isinstance(rules.start, tuple):
            value = n * sum(c * v for c, v in zip(rules.start, first, strict=False))
        else:
            value = n
        self.values = [v for v in first if v <= value]
        nb = len(self.values)
        self.moves = []
        self.named: dict[str, dict[int, int]] = {}  # "<template>@<k>" -> bin changes
        for tpl in rules.templates:
            last = nb if tpl.last is None else min(tpl.last, nb)
            for k in range(tpl.first, last + 1):
                ch: dict[int, int] = {}
                for off, c in tpl.takes:
                    ch[k + off - 1] = ch.get(k + off - 1, 0) - c
                for off, c in tpl.gives:
                    ch[k + off - 1] = ch.get(k + off - 1, 0) + c
                if all(0 <= b < nb for b in ch):
                    self.moves.append(ch)
                    self.named[f"{tpl.name}@{k}"] = ch
        start = [0] * nb
        if rules.start == "ones":
            start[0] = value // self.values[0]
        elif rules.start == "greedy":
            rest = value
            for k in range(nb - 1, -1, -1):
                start[k], rest = divmod(rest, self.values[k])
        else:
            for k, c in enumerate(rules.start):
                start[k] = n * c
        self.start = tuple(start)
        self.memo: dict[tuple[int, ...], bool] = {}

    def next_states(self, s: tuple[int, ...]) -> list[tuple[int, ...]]:
        out = []
        for ch in self.moves:
            t = list(s)
            for b, d in ch.items():
                t[b] += d
            if min(t) >= 0:
                out.append(tuple(t))
        return out

    def reachable(self) -> set[tuple[int, ...]]:
        seen, stack = {self.start}, [self.start]
        while stack:
            for t in self.next_states(stack.pop()):
                if t not in seen:
                    seen.add(t)
                    stack.append(t)
        return seen

    def mover_wins(self, s: tuple[int, ...]) -> bool:
        # iterative post-order, so long games do not exhaust the stack
        stack = [s]
        while stack:
            u = stack[-1]
            if u in self.memo:
                stack.pop()
                continue
            kids = self.next_states(u)
            todo = [t for t in kids if t not in self.memo]
            if todo:
                stack.extend(todo)
                continue
            self.memo[u] = any(not self.memo[t] for t in kids)
            stack.pop()
        return self.memo[s]


def coalition_table(n: int, players: int) -> dict[tuple[tuple[int, ...], int], bool]:
    """(state, r) -> can the target force the last move, r = (mover - target) mod players,
    for every reachable state, counting the position as reached after at least one move
    (so a terminal state is a win exactly when r == 1)."""
    memo: dict[tuple[tuple[int, ...], int], bool] = {}

    def win(state: tuple[int, ...], r: int) -> bool:
        key = (state, r)
        if key not in memo:
            nxt = [t for _, t in moves_of(state)]
            if not nxt:
                memo[key] = r == 1
            elif r == 0:
                memo[key] = any(win(t, 1) for t in nxt)
            else:
                memo[key] = all(win(t, (r + 1) % players) for t in nxt)
        return memo[key]

    return {(s, r): win(s, r) for s in reachable(n) for r in range(players)}
