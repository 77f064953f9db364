"""Plain-Python replay of a P-player certificate (no zeckenum code; rules read as data).

`named_moves(rules, n)` rebuilds the moves "<template>@<k>" from a rule set's fields (bin
recurrence, templates as offsets, start); `replay(...)` follows every game where the winner
plays the certificate's move and the others play anything, and says why it fails (None
when the winner makes the last move of every game); `forced_winner` is the coalition
minimax (memoised recursion on (position, turn offset)).
"""

from __future__ import annotations

from minimax import TemplateGame


def named_moves(rules, n: int) -> tuple[tuple[int, ...], dict[str, dict[int, int]]]:  # noqa: ANN001
    game = TemplateGame(rules, n)
    return game.start, game.named


def _apply(s: tuple[int, ...], ch: dict[int, int]) -> tuple[int, ...] | None:
    t = list(s)
    for b, d in ch.items():
        t[b] += d
    return tuple(t) if min(t) >= 0 else None


def _key(s: tuple[int, ...]) -> tuple[int, ...]:
    t = list(s)
    while t and t[-1] == 0:
        t.pop()
    return tuple(t)


def replay(rules, n: int, players: int, winner: int,  # noqa: ANN001
           table: dict[tuple[int, ...], str]) -> str | None:
    start, moves = named_moves(rules, n)
    seen: set[tuple[tuple[int, ...], int]] = set()
    stack = [(start, (1 - winner) % players)]
    if not any(_apply(start, ch) for ch in moves.values()):
        return "no move at the start"
    while stack:
        s, r = stack.pop()
        if (s, r) in seen:
            continue
        seen.add((s, r))
        nxt = [t for ch in moves.values() if (t := _apply(s, ch)) is not None]
        if not nxt:
            if r != 1:
                return f"the game ends at {s} after a move that was not the winner's"
            continue
        if r == 0:
            name = table.get(_key(s))
            if name is None or name not in moves or _apply(s, moves[name]) is None:
                return f"no legal listed move at {s}"
            stack.append((_apply(s, moves[name]), 1 % players))
        else:
            stack.extend((t, (r + 1) % players) for t in nxt)
    return None


def forced_winner(rules, n: int, players: int) -> int | None:  # noqa: ANN001
    start, moves = named_moves(rules, n)
    memo: dict[tuple[tuple[int, ...], int], bool] = {}

    def win(s: tuple[int, ...], r: int) -> bool:
        if (s, r) not in memo:
            nxt = [t for ch in moves.values() if (t := _apply(s, ch)) is not None]
            if not nxt:
                memo[(s, r)] = r == 1
            elif r == 0:
                memo[(s, r)] = any(win(t, 1) for t in nxt)
            else:
                memo[(s, r)] = all(win(t, (r + 1) % players) for t in nxt)
        return memo[(s, r)]

    if not any(_apply(start, ch) for ch in moves.values()):
        return None
    ws = [x for x in range(1, players + 1) if win(start, (1 - x) % players)]
    return ws[0] if ws else None
