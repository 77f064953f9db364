"""Extremal games: an explicit shortest and longest game, and the greedy longest rule.

`extremal_games(n)` runs the first sweep (`core.sweep.sweep_windows`), which gives every
reachable state its window [lmin, lmax] of path lengths from the start, then walks back
from the end position: a state reached by a shortest (longest) game of length L has a
predecessor whose lmin (lmax) is exactly L - 1, found by undoing each move type and ranking
the source (`StateSpace.rank`).  Among such predecessors the lowest move index is taken, so
the games are deterministic.  The walk is replayed forward and checked move by move.

`greedy_longest_game(n)` plays the rule "split whenever possible (the split on the smallest
bin), otherwise combine the smallest pair" from the start; the paper "Bounds on Zeckendorf
Games" (2020, arXiv:2009.09510) proves that splitting whenever possible and otherwise
combining the smallest pair reaches the longest possible length.

A game is a plain `PlayedGame`: the start counts and one `Step` per move (move name,
1-based bins it changes, counts after the move).  Counts are over bins 1, 2, 3, 5, 8, ...
(the bins with value <= n), printed as "bin:count" pairs of the non-empty bins.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from zeckenum.core.checks import check_n
from zeckenum.core.statespace import StateSpace
from zeckenum.core.sweep import Windows, sweep_windows
from zeckenum.core.text import plural
from zeckenum.errors import InputError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import STANDARD, GameSpec, RuleSet
from zeckenum.rules.notation import annotate_position, format_position, shown


@dataclass(frozen=True)
class Step:
    """One move: its name ("combine@3"), its effect {1-based bin: change}, and the counts
    after it (one entry per bin, bins with value <= n, smallest first)."""

    move: str
    effect: dict[int, int]
    after: tuple[int, ...]


@dataclass(frozen=True)
class PlayedGame:
    """A game as a move list: `start` counts and the steps; `length` = number of moves."""

    rules: str
    n: int
    kind: str
    values: tuple[int, ...]
    start: tuple[int, ...]
    steps: tuple[Step, ...]

    @property
    def length(self) -> int:
        return len(self.steps)

    @property
    def end(self) -> tuple[int, ...]:
        return self.steps[-1].after if self.steps else self.start

    def move_counts(self) -> dict[str, int]:
        """How often each move name occurs in the game."""
        out: dict[str, int] = {}
        for s in self.steps:
            out[s.move] = out.get(s.move, 0) + 1
        return out

    def to_dict(self) -> dict:
        return {
            "rules": self.rules, "n": self.n, "kind": self.kind, "length": self.length,
            "bin_values": list(self.values), "start": list(self.start),
            "moves": [{"move": s.move, "after": list(s.after)} for s in self.steps],
        }


def format_game(game: PlayedGame) -> str:
    """A readable move list: one numbered line per move with the position after it, in the
    display form of the one position notation (`notation.annotate_position`)."""
    lines = [f"{game.kind} game, n={game.n}, {plural(game.length, 'move')}",
             f"  start  {annotate_position(game.start, game.values)}"]
    width = len(str(game.length))
    for i, s in enumerate(game.steps, 1):
        lines.append(f"  {i:>{width}}. {s.move:<16} -> "
                     f"{annotate_position(s.after, game.values)}")
    return "\n".join(lines)


def move_effects(spec: GameSpec) -> list[dict[int, int]]:
    """Per move index, its net effect {1-based bin: change}."""
    out = []
    for m in range(len(spec.move_names)):
        eff: dict[int, int] = {}
        for j in range(spec.mv_bins.shape[1]):
            d = int(spec.mv_delta[m, j])
            if d:
                b = int(spec.mv_bins[m, j]) + 1
                eff[b] = eff.get(b, 0) + d
        out.append({b: d for b, d in sorted(eff.items()) if d})
    return out


def legal(counts: np.ndarray, spec: GameSpec, m: int) -> bool:
    """Whether move m applies to `counts` (no bin goes negative)."""
    for j in range(spec.mv_bins.shape[1]):
        if counts[spec.mv_bins[m, j]] + spec.mv_delta[m, j] < 0:
            return False
    return True


def apply_move(counts: np.ndarray, spec: GameSpec, m: int) -> np.ndarray:
    """The counts after move m (a new array); InputError if the move is illegal."""
    if not legal(counts, spec, m):
        raise InputError(f"move {spec.move_names[m]} is illegal at position "
                         f"{shown(format_position(counts.tolist()))}")
    out = counts.copy()
    for j in range(spec.mv_bins.shape[1]):
        out[spec.mv_bins[m, j]] += spec.mv_delta[m, j]
    return out


def replay(spec: GameSpec, moves: list[int], kind: str) -> PlayedGame:
    """Play the move indices from the start, checking each move's legality."""
    effects = move_effects(spec)
    c = spec.start.copy()
    steps = []
    for m in moves:
        c = apply_move(c, spec, m)
        steps.append(Step(spec.move_names[m], effects[m], tuple(int(x) for x in c)))
    return PlayedGame(
        rules=spec.rules.name, n=spec.n, kind=kind,
        values=tuple(int(v) for v in spec.values),
        start=tuple(int(x) for x in spec.start), steps=tuple(steps),
    )


def is_terminal(counts: np.ndarray, spec: GameSpec) -> bool:
    return not any(legal(counts, spec, m) for m in range(len(spec.move_names)))


def _window(windows: Windows, level: int, rank: int) -> tuple[int, int] | None:
    """(lmin, lmax) of a state, None when unreachable or outside the swept levels."""
    if level not in windows.win:
        return None
    w = int(windows.win[level][rank])
    if w == 0:
        return None
    lo = int(windows.lmin[level][rank])
    return lo, lo + w - 1


def walk_back(space: StateSpace, windows: Windows, end: np.ndarray, length: int,
              longest: bool) -> list[int]:
    """Move indices of a game start -> `end` of exactly `length` moves that is extremal:
    every prefix is a shortest (or, with `longest`, a longest) path to its state."""
    spec = space.spec
    moves: list[int] = []
    c = end.copy()
    target = length
    while target > 0:
        level = int((c * spec.weights).sum())
        for m in range(len(spec.move_names)):
            src = c.copy()
            for j in range(spec.mv_bins.shape[1]):
                src[spec.mv_bins[m, j]] -= spec.mv_delta[m, j]
            if (src < 0).any():
                continue
            slevel = level + int(spec.mv_drop[m])
            if slevel > space.top:
                continue
            win = _window(windows, *space.rank(src))
            if win is not None and win[1 if longest else 0] == target - 1:
                moves.append(m)
                c = src
                target -= 1
                break
        else:  # pragma: no cover - the windows guarantee a predecessor
            raise RuntimeError("no extremal predecessor found: inconsistent windows")
    if not np.array_equal(c, spec.start):  # pragma: no cover
        raise RuntimeError("walk back did not reach the start")
    return moves[::-1]


def terminal_states(space: StateSpace, windows: Windows) -> list[tuple[np.ndarray, int, int]]:
    """(counts, lmin, lmax) of every reachable terminal state."""
    out = []
    for level, ranks in windows.terminal_ranks.items():
        if ranks.size == 0:
            continue
        states = space.states(level)
        for r in ranks:
            lo, hi = _window(windows, level, int(r))
            out.append((states[int(r)].copy(), lo, hi))
    return out


def extremal_games(
    n: int, rules: str | RuleSet = "standard", *, max_memory: int | None = None
) -> tuple[PlayedGame, PlayedGame]:
    """(a shortest game, a longest game) of the game for n, as checked move lists.

    Memory: the first sweep of a count without kept moves, refused up front as `count`
    refuses it (`count.count_space`, then `count.windows_pass_bytes`) against `max_memory`
    (default: what the machine has available)."""
    from zeckenum.core.memory import refuse_if_over, resolve_limit
    from zeckenum.counting.count import count_space, windows_pass_bytes

    n = check_n(n)
    limit = resolve_limit(max_memory)
    spec = get_rules(rules).instantiate(n)
    space = count_space(spec, limit)
    refuse_if_over(windows_pass_bytes(space), limit, f"the extremal games of n={n}")
    windows = sweep_windows(space, keep_incoming=False)
    ends = terminal_states(space, windows)
    short_end = min(ends, key=lambda t: t[1])
    long_end = max(ends, key=lambda t: t[2])
    short = replay(spec, walk_back(space, windows, short_end[0], short_end[1], False),
                   "shortest")
    long = replay(spec, walk_back(space, windows, long_end[0], long_end[2], True), "longest")
    for g, want in ((short, windows.shortest), (long, windows.longest)):
        if g.length != want or not is_terminal(np.array(g.end, dtype=np.int64), spec):
            raise RuntimeError(f"the {g.kind} game does not replay to an end in {want} moves")
    return short, long


def _template_and_bin(name: str) -> tuple[str, int]:
    tpl, _, k = name.partition("@")
    return tpl, int(k)


def greedy_longest_game(n: int) -> PlayedGame:
    """The standard game played by: split whenever a split is legal (the one on the smallest
    bin), otherwise combine the smallest pair (the combine on the smallest bins).

    "Bounds on Zeckendorf Games" (2020, arXiv:2009.09510) proves this rule reaches the
    longest possible game."""
    n = check_n(n)
    spec = STANDARD.instantiate(n)
    parsed = [_template_and_bin(x) for x in spec.move_names]
    splits = sorted((k, m) for m, (t, k) in enumerate(parsed) if t.startswith("split"))
    combines = sorted((k, m) for m, (t, k) in enumerate(parsed) if t.startswith("combine"))
    c = spec.start.copy()
    moves: list[int] = []
    while True:
        choice = next((m for _, m in splits if legal(c, spec, m)), None)
        if choice is None:
            choice = next((m for _, m in combines if legal(c, spec, m)), None)
        if choice is None:
            break
        c = apply_move(c, spec, choice)
        moves.append(choice)
    return replay(spec, moves, "greedy longest")


def lengths_near_extremes(length_counts: dict[int, int], k: int = 3) -> dict[str, list]:
    """[(length, games)] for the k shortest and the k longest lengths that occur."""
    items = sorted(length_counts.items())
    return {"shortest": items[:k], "longest": items[-k:][::-1]}


def zeckendorf(n: int) -> list[int]:
    """The Zeckendorf decomposition of n (greedy, largest Fibonacci number first)."""
    fib = [1, 2]
    while fib[-1] <= n:
        fib.append(fib[-1] + fib[-2])
    out = []
    for f in reversed(fib):
        if f <= n:
            out.append(f)
            n -= f
    return out


@dataclass(frozen=True)
class GamesReport:
    """What `zeckenum games` shows at n: an explicit shortest and longest game, the number
    of games at the `near` lengths next to each extreme, and (standard game only) the game
    played by the greedy rule.

    Invariant: `near["shortest"]` / `near["longest"]` are [(length, games)] taken from the
    exact census `count(n)`, the extremes first."""

    rules: str
    n: int
    shortest: PlayedGame
    longest: PlayedGame
    near: dict[str, list]
    greedy: PlayedGame | None
    position: str = ""  # the start position (README "Positions") when not the rule set's

    def to_dict(self) -> dict:
        """JSON-ready form; the keys `zeckenum games --json` prints."""
        out = {"rules": self.rules, "n": self.n,
            **({"position": self.position} if self.position else {}),
               "shortest_game": self.shortest.to_dict(),
               "longest_game": self.longest.to_dict(),
               "near_shortest": {str(k): str(v) for k, v in self.near["shortest"]},
               "near_longest": {str(k): str(v) for k, v in self.near["longest"]}}
        if self.greedy is not None:
            out["greedy_longest"] = {"length": self.greedy.length,
                                     "equals_longest": self.greedy.length == self.longest.length,
                                     "moves": [s.move for s in self.greedy.steps]}
        return out


def games_report(n: int, rules: str | RuleSet = "standard", near: int = 3, *,
                 max_memory: int | None = None) -> GamesReport:
    """The extremal games at n, the game counts near the extremes (`count`) and, for the
    rule set named "standard" started from n tokens in F1, the greedy longest game."""
    from zeckenum.counting.count import count

    rs = get_rules(rules)
    short, long = extremal_games(n, rs, max_memory=max_memory)
    res = count(n, rs, max_memory=max_memory)
    greedy = (greedy_longest_game(n) if rs.name == "standard" and rs.position is None
              else None)
    return GamesReport(rules=rs.name, n=n, shortest=short, longest=long,
                       near=lengths_near_extremes(res.length_counts, near), greedy=greedy)
