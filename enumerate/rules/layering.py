"""The engine's level weights for one instantiated game, and the proof that it ends.

The contract of `core.statespace`: every move lowers the level sum(weights * counts) or keeps
it and goes to a higher co-lexicographic rank.  A move *raises the rank* when it gains tokens
in the largest bin it changes: then, at equal value and level, it leads to a
co-lexicographically larger state whatever the state.  Tried in this order, on the moves that
can apply at this value:

1. token count: weights all 1 work when no move raises the token count and every move that
   keeps it raises the rank;
2. strict potential: non-negative integer weights w with delta . w <= -1 for every move,
   found by integer linear programming (scipy.optimize.milp, HiGHS) with the smallest
   start level, then the smallest sum of weights; the solution is re-checked in exact
   integers;
3. otherwise a depth-first search over the states reachable from the start for this n
   (`find_cycle`, plain Python on count vectors: it needs no state space) either finds a
   cycle (the game need not end: error listing the cycle's states) or shows the reachable
   graph is acyclic.  Then only the moves that fire somewhere in that graph matter: 2 is
   tried again on them alone, and the game is instantiated with just those moves (it is the
   same game for this n).  If even they have no strict potential, the error says so (the
   engine's layering needs one).

Allowing moves that raise the rank to keep the level (delta . w <= 0 for them) would not
widen case 2: by Farkas' lemma a strict potential fails to exist only when a non-negative,
non-zero combination y of moves has y . delta >= 0 in every bin, hence = 0 (the moves keep
the value and bin values are positive); the largest bin any move of y changes would then
only gain if all of y's moves raised the rank, so y holds a move that does not, and that
move blocks the relaxed program too.

Every way through 1-3 proves the game ends: along every move (level, rank) strictly
increases in the lexicographic order the engine sweeps, over a finite set of states.

Invariant of the module: it works on plain move effects ({1-based bin: change}) and count
vectors, and imports nothing of zeckenum but `errors` and `notation` (states in messages
are written in the one position notation); `rules.model` calls it from
`RuleSet.instantiate`, never the other way round.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from zeckenum.errors import InputError
from zeckenum.rules.notation import format_position

CYCLE_SEARCH_LIMIT = 2_000_000
"""Most reachable states the cycle search visits before giving up (with an error)."""

WEIGHT_BOUND = 2**40
"""Upper bound on each potential weight handed to the integer program."""


def token_violation(effects: Sequence[dict[int, int]]) -> tuple[int, str] | None:
    """The first move that breaks the token-count layering (index, reason), or None."""
    for m, eff in enumerate(effects):
        change = sum(eff.values())
        if change > 0:
            return m, f"raises the token count by {change}"
        if change == 0:
            top = max(eff)
            if eff[top] < 0:
                return m, f"keeps the token count but takes from its largest bin {top}"
    return None


def effect_matrix(effects: Sequence[dict[int, int]], nbins: int) -> np.ndarray:
    """Integer matrix A[m, b] = change of bin b (0-based) under move m."""
    a = np.zeros((len(effects), nbins), dtype=np.int64)
    for m, eff in enumerate(effects):
        for b, d in eff.items():
            a[m, b - 1] = d
    return a


def strict_potential(a: np.ndarray, start: np.ndarray) -> np.ndarray | None:
    """Non-negative integer weights w with a @ w <= -1 and the least start . w, or None.

    Ties are broken by the least sum of weights.  The result is verified in exact integers.
    """
    from scipy.optimize import Bounds, LinearConstraint, milp

    nmoves, nbins = a.shape
    if nmoves == 0:
        return np.zeros(nbins, dtype=np.int64)
    cons = [LinearConstraint(a.astype(float), -np.inf, -1.0)]
    bounds = Bounds(0, WEIGHT_BOUND)
    integ = np.ones(nbins)
    first = milp(start.astype(float), constraints=cons, integrality=integ, bounds=bounds)
    if first.status != 0 or first.x is None:
        return None
    best = round(float(first.fun))
    cons.append(LinearConstraint(start.astype(float)[None, :], -np.inf, best + 0.5))
    second = milp(np.ones(nbins), constraints=cons, integrality=integ, bounds=bounds)
    x = second.x if second.status == 0 and second.x is not None else first.x
    w = [round(float(v)) for v in x]
    rows = [sum(int(d) * wb for d, wb in zip(row, w, strict=True)) for row in a.tolist()]
    if min(w) < 0 or max(rows) > -1:  # pragma: no cover - solver tolerance gone wrong
        return None
    return np.array(w, dtype=np.int64)


def find_cycle(
    effects: Sequence[dict[int, int]], start: Sequence[int], limit: int = CYCLE_SEARCH_LIMIT
) -> tuple[list[tuple[int, ...]] | None, int, set[int]]:
    """(a cycle of states reachable from `start` or None, states visited, moves that fired).

    Iterative depth-first search; the cycle is listed from its first state back to it.
    Without a cycle, `fired` holds the index of every move that applies to some reachable
    state.  InputError when more than `limit` states are reachable.
    """
    moves = [sorted((b - 1, d) for b, d in eff.items()) for eff in effects]
    s0 = tuple(int(c) for c in start)
    colour: dict[tuple[int, ...], int] = {s0: 1}  # 1: on the stack, 2: finished
    fired: set[int] = set()
    path = [s0]
    stack = [iter(_successors(s0, moves))]
    while stack:
        step = next(stack[-1], None)
        if step is None:
            colour[path.pop()] = 2
            stack.pop()
            continue
        m, nxt = step
        fired.add(m)
        c = colour.get(nxt)
        if c == 1:
            return path[path.index(nxt):] + [nxt], len(colour), fired
        if c is None:
            if len(colour) >= limit:
                raise InputError(
                    f"could not decide termination: more than {limit} reachable states"
                )
            colour[nxt] = 1
            path.append(nxt)
            stack.append(iter(_successors(nxt, moves)))
    return None, len(colour), fired


def _successors(state: tuple[int, ...], moves: list[list[tuple[int, int]]]):
    for m, mv in enumerate(moves):
        if all(state[b] + d >= 0 for b, d in mv):
            nxt = list(state)
            for b, d in mv:
                nxt[b] += d
            yield m, tuple(nxt)


TOKENS = "token count"
STRICT = "strict potential (integer LP)"


def layering_weights(
    name: str,
    mode: str,
    values: Sequence[int],
    effects: list[dict[int, int]],
    names: list[str],
    start: np.ndarray,
) -> tuple[np.ndarray, list[int] | None, str]:
    """(level weights, kept move indices or None for all, method) for one instantiated game.

    `name` is the rule set's name (for messages), `mode` its `level_weights` ("tokens",
    "auto" or "potential"), `values` the bin values, `effects`/`names` the moves and `start`
    the start counts.  See the module docstring for cases 1-3; raises InputError with one
    line when the layering is impossible (the game may not end, or it ends but has no
    potential).
    """
    nbins = len(values)
    if mode not in ("tokens", "auto", "potential"):
        raise InputError(
            f"rule set {name!r}: unknown layering {mode!r} (tokens, auto, potential)"
        )
    if mode in ("tokens", "auto"):
        bad = token_violation(effects)
        if bad is None:
            return np.ones(nbins, dtype=np.int64), None, TOKENS
        if mode == "tokens":
            m, why = bad
            raise InputError(
                f"rule set {name!r}: move {names[m]} {why}, so the token-count layering "
                "does not apply (use layering = \"auto\")"
            )
    value = int(sum(int(c) * v for c, v in zip(start.tolist(), values, strict=True)))
    keep = [
        m for m, eff in enumerate(effects)
        if sum(-d * values[b - 1] for b, d in eff.items() if d < 0) <= value
    ]
    w = _cached_potential([effects[m] for m in keep], nbins, start)
    if w is not None:
        return w, keep, STRICT
    cycle, seen, fired = find_cycle([effects[m] for m in keep], start)
    if cycle is not None:
        shown = " -> ".join(format_position(s) for s in cycle)
        raise InputError(
            f"rule set {name!r} does not terminate at value {value}: cycle {shown}"
        )
    keep = [keep[j] for j in sorted(fired)]
    w = _cached_potential([effects[m] for m in keep], nbins, start)
    if w is not None:
        return w, keep, f"{STRICT} of the {len(keep)} moves that fire at value {value}"
    raise InputError(
        f"rule set {name!r}: every game ends at value {value} (the {seen} reachable "
        "states form an acyclic graph), but even the moves that fire there have no strict "
        "linear potential, and the engine's layering needs one"
    )


_POTENTIALS: dict[tuple, np.ndarray | None] = {}


def _cached_potential(
    effects: list[dict[int, int]], nbins: int, start: np.ndarray
) -> np.ndarray | None:
    """`strict_potential` of these moves from `start`, memoised per process."""
    key = (tuple(tuple(sorted(e.items())) for e in effects), nbins, tuple(start.tolist()))
    if key not in _POTENTIALS:
        a = effect_matrix(effects, nbins)
        _POTENTIALS[key] = strict_potential(a, np.array(start, dtype=np.int64))
    w = _POTENTIALS[key]
    return None if w is None else w.copy()
