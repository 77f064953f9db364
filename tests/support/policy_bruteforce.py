"""Plain-Python reference for testing policies in the standard game (no zeckenum code).

A policy here is a Python function policy(state, options) -> index into options, where
options are `minimax.moves_of(state)` (name 'kind@k', next state) in the game's move order.
Everything is memoised dict recursion over count tuples: no ranks, no layers, no numba.

    lose_distance(state, me)  None when the policy player (to move iff `me`) wins against
                              every reply, else the fewest moves to the policy player's
                              defeat (the opponent minimises, the policy is fixed)
    census(n, player, policy) the positions where the policy player moves that are
                              reachable under the policy, how many are N-positions, and
                              at how many the policy's move leads to a P-position
"""

from __future__ import annotations

from collections.abc import Callable

from minimax import mover_wins, moves_of, start_state

Options = list[tuple[str, tuple[int, ...]]]
PolicyFn = Callable[[tuple[int, ...], Options], int]


def k_of(name: str) -> int:
    return int(name.split("@")[1])


def kind_of(name: str) -> str:
    return "combine" if name.startswith("combine") else "split"


def prefer(state: tuple[int, ...], options: Options,
           rules: list[tuple[str, str, Callable[[tuple[int, ...], int], bool]]]) -> int:
    """Ordered preferences written out by hand: (kind, 'highest'|'lowest', test(state, k));
    the first rule with a legal move of its kind passing the test picks by k; else 0."""
    for kind, pick, test in rules:
        cands = [(k_of(nm), i) for i, (nm, _) in enumerate(options)
                 if kind_of(nm) == kind and test(state, k_of(nm))]
        if cands:
            k = max(c[0] for c in cands) if pick == "highest" else min(c[0] for c in cands)
            return min(i for kk, i in cands if kk == k)
    return 0


def lose_distance(policy: PolicyFn) -> Callable[[tuple[int, ...], bool], int | None]:
    memo: dict[tuple[tuple[int, ...], bool], int | None] = {}

    def dist(state: tuple[int, ...], me: bool) -> int | None:
        key = (state, me)
        if key in memo:
            return memo[key]
        opts = moves_of(state)
        if not opts:
            res = 0 if me else None
        elif me:
            d = dist(opts[policy(state, opts)][1], False)
            res = None if d is None else d + 1
        else:
            ds = [d for _, t in opts if (d := dist(t, True)) is not None]
            res = min(ds) + 1 if ds else None
        memo[key] = res
        return res

    return dist


def verdict(n: int, player: int, policy: PolicyFn) -> int | None:
    """None when the policy player wins at n, else the shortest refutation's length."""
    return lose_distance(policy)(start_state(n), player == 1)


def census(n: int, player: int, policy: PolicyFn) -> tuple[int, int, int]:
    """(positions, N-positions among them, winning choices): see the module docstring."""
    seen: set[tuple[tuple[int, ...], bool]] = set()
    stack = [(start_state(n), player == 1)]
    positions = n_pos = good = 0
    while stack:
        key = stack.pop()
        if key in seen:
            continue
        seen.add(key)
        state, me = key
        opts = moves_of(state)
        if not opts:
            continue
        if me:
            t = opts[policy(state, opts)][1]
            positions += 1
            n_pos += mover_wins(state)
            good += not mover_wins(t)
            stack.append((t, False))
        else:
            stack.extend((t, True) for _, t in opts)
    return positions, n_pos, good


def replay(n: int, player: int, policy: PolicyFn,
           line: list[tuple[int, str, tuple[int, ...]]]) -> str | None:
    """Check a claimed refuting line (player, move name, position after): legal moves,
    alternating from player 1, the policy player playing the policy's move, ending with
    the policy player to move and no move left.  Returns None when valid, else why not."""
    state = start_state(n)
    mover = 1
    for who, name, after in line:
        if who != mover:
            return f"player {who} moved out of turn"
        opts = moves_of(state)
        names = [o[0] for o in opts]
        if name not in names:
            return f"{name} is not legal at {state}"
        if who == player and names[policy(state, opts)] != name:
            return f"the policy does not play {name} at {state}"
        nxt = opts[names.index(name)][1]
        if tuple(nxt[: len(after)]) != tuple(after) or any(nxt[len(after):]):
            return f"{name} at {state} does not lead to {after}"
        state, mover = nxt, 3 - mover
    if mover != player or moves_of(state):
        return "the line does not end with the policy player unable to move"
    return None
