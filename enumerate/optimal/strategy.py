"""Winning strategies: the whole move graph of a small game, held globally.

`winning_strategy(n, rules)` solves the game keeping every layer's classes
(`solve.solve(..., keep_classes=True)`), builds its move graph with global state ids
(`move_graph`, from `StateSpace.moves`), sizes a strategy below every state
(`estimate_strategy_costs`) and picks the winner's move at every position it can face
(`choose_strategy_moves`).  The result is a `Strategy`; its text file format, writer, reader and
independent checker live in `strategyfile`.

Three or more players (`coalition_strategy`): the winner x is the player who can force the
last move against the coalition of all others (`solve`'s coalition bits win(s, r), r the
turn offset of the mover from x, `classify` docstring).  The certificate lists, at every
position where x is to move and which x can face when following it against any moves of the
others, one move keeping the win: from (s, 0) a move to t with win(t, 1)
(`choose_coalition_moves`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from zeckenum.core.checks import check_n
from zeckenum.core.jit import kernel
from zeckenum.core.listing import moves_out
from zeckenum.core.statespace import StateSpace, build_space
from zeckenum.errors import InputError, ZeckenumError
from zeckenum.optimal.solve import SolveResult, solve
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

STRATEGY_MAX_STATES = 6_000_000


@kernel
def estimate_strategy_costs(order: np.ndarray, ptr: np.ndarray, dest: np.ndarray,
                   is_n: np.ndarray, depth: bool) -> np.ndarray:
    """Size estimate of a small strategy below each state, used to rank winning moves.

    Visits states in `order` (successors first).  A terminal state costs 0; an N-position
    costs 1 plus the cheapest move to a P-position.  A P-position (the loser may play any
    move) costs the sum over its moves ("tree": the strategy's size if no position were
    shared; float64, saturating to inf) or, with `depth`, 1 plus the maximum (the longest
    remaining game).
    """
    cost = np.zeros(is_n.size, dtype=np.float64)
    for u in order:
        if ptr[u] == ptr[u + 1]:
            continue
        if is_n[u]:
            best = np.inf
            for e in range(ptr[u], ptr[u + 1]):
                v = dest[e]
                if not is_n[v] and cost[v] < best:
                    best = cost[v]
            cost[u] = 1.0 + best
        elif depth:
            s = 0.0
            for e in range(ptr[u], ptr[u + 1]):
                s = max(s, cost[dest[e]])
            cost[u] = 1.0 + s
        else:
            s = 0.0
            for e in range(ptr[u], ptr[u + 1]):
                s += cost[dest[e]]
            cost[u] = s
    return cost


@kernel
def choose_strategy_moves(order: np.ndarray, ptr: np.ndarray, dest: np.ndarray,
                     is_n: np.ndarray, cost: np.ndarray, start: int,
                     prefer_shared: bool) -> np.ndarray:
    """Move (edge index) the winner plays at each position it can face; -1 elsewhere.

    Visits states in `order` (predecessors first) from the start.  At an N-position the
    winner plays a move to a P-position: one whose target the strategy already reaches if
    `prefer_shared` (it adds no position), else the one of least `cost`.  At a P-position
    every move of the loser is followed.
    """
    reached = np.zeros(is_n.size, dtype=np.bool_)
    choice = np.full(is_n.size, -1, dtype=np.int64)
    reached[start] = True
    for u in order:
        if not reached[u]:
            continue
        if is_n[u]:
            best = -1
            best_key = np.inf
            for e in range(ptr[u], ptr[u + 1]):
                v = dest[e]
                if is_n[v]:
                    continue
                key = cost[v]
                if prefer_shared and reached[v]:
                    key = -1.0
                if best < 0 or key < best_key:
                    best = e
                    best_key = key
            choice[u] = best
            reached[dest[best]] = True
        else:
            for e in range(ptr[u], ptr[u + 1]):
                reached[dest[e]] = True
    return choice


@kernel
def choose_coalition_moves(order: np.ndarray, ptr: np.ndarray, dest: np.ndarray,
                           win: np.ndarray, start: int, r0: int) -> np.ndarray:
    """Move (edge index) the winner x plays at each position it can face; -1 elsewhere.

    win[u, r] is the coalition bit of state u at turn offset r (P = win.shape[1] players).
    Visits states in `order` (predecessors first) from (start, r0).  At a reached (u, 0) the
    winner plays a move to some t with win[t, 1] (one already reached at offset 1 when
    there is one, else the first); at a reached (u, r), r != 0, every move is followed to
    offset r + 1 mod P.  Positions whose bits say the winner cannot keep the win are left
    -1 (the caller refuses: that cannot happen when win[start, r0] holds).
    """
    players = win.shape[1]
    reached = np.zeros(win.shape, dtype=np.bool_)
    choice = np.full(win.shape[0], -1, dtype=np.int64)
    reached[start, r0] = True
    for u in order:
        if ptr[u] == ptr[u + 1]:
            continue
        for r in range(players):
            if not reached[u, r]:
                continue
            if r == 0:
                best = -1
                for e in range(ptr[u], ptr[u + 1]):
                    v = dest[e]
                    if win[v, 1 % players]:
                        if best < 0:
                            best = e
                        if reached[v, 1 % players]:
                            best = e
                            break
                choice[u] = best
                if best >= 0:
                    reached[dest[best], 1 % players] = True
            else:
                for e in range(ptr[u], ptr[u + 1]):
                    reached[dest[e], (r + 1) % players] = True
    return choice


@dataclass(frozen=True)
class Strategy:
    """A winning strategy of a two-player game: what the winner plays at each position.

    positions[i] is a count vector (bins 1..nbins, as a tuple) and moves[i] the name of the
    move the winner plays there; listed in play order (levels descending, then ranks).
    `heuristic` names the move ranking that gave the smallest strategy ("tree" or "depth",
    see `estimate_strategy_costs`; "coalition" for P >= 3).  `players` >= 3: a certificate
    that `winner` forces the last move against the coalition of the others.
    """

    rules: str
    rules_hash: str
    n: int
    winner: int
    nbins: int
    positions: tuple[tuple[int, ...], ...]
    moves: tuple[str, ...]
    heuristic: str = ""
    players: int = 2

    @property
    def size(self) -> int:
        return len(self.positions)


def move_graph(space: StateSpace, classes: dict[int, np.ndarray]) -> dict[str, np.ndarray]:
    """The whole move graph with global state ids (small games only).

    A state's id is offset[level] + rank, levels ascending.  Returns ptr/dest/move (CSR:
    moves of u are ptr[u]..ptr[u+1]-1, to dest[e], by move index move[e]), is_n (class),
    counts (count vectors by id), offset (dict level -> first id) and order (ids with
    successors first: levels ascending, ranks descending).  With P-player classes
    ((ranks, P) per level) the "is_n" entry holds the coalition bits, shape (states, P).
    """
    spec = space.spec
    levels = [lv for lv in range(spec.start_level + 1) if space.layer_size(lv) > 0]
    offset: dict[int, int] = {}
    total = 0
    for lv in levels:
        offset[lv] = total
        total += space.layer_size(lv)
    first = next(iter(classes.values()))
    is_n = np.zeros((total, *first.shape[1:]), dtype=np.bool_)
    ptrs, dests, movs, states = [], [], [], []
    edge_base = 0
    for lv in levels:
        lm = moves_out(space, lv)
        is_n[offset[lv] : offset[lv] + lm.size] = classes[lv]
        lv_off = np.array([offset.get(lv - int(d), 0) for d in range(space.max_drop + 1)],
                          dtype=np.int64)
        ptrs.append(lm.ptr[:-1] + edge_base)
        dests.append(lv_off[lm.drop] + lm.other)
        movs.append(lm.move)
        states.append(lm.states)
        edge_base += int(lm.ptr[-1])
    ptr = np.concatenate([*ptrs, np.array([edge_base], dtype=np.int64)])
    dest = np.concatenate(dests)
    move = np.concatenate(movs)
    counts = np.concatenate(states)
    order = np.concatenate(
        [offset[lv] + np.arange(space.layer_size(lv) - 1, -1, -1) for lv in levels]
    ).astype(np.int64)
    return {"order": order, "ptr": ptr, "dest": dest, "move": move, "is_n": is_n,
            "counts": counts, "offset": offset}


def winning_strategy(
    n: int, rules: str | RuleSet = "standard", *, prefer_shared: bool = True,
    max_memory: int | None = None, threads: int | None = None, players: int = 2,
) -> tuple[Strategy, SolveResult]:
    """Solve a small game and extract a compact winning strategy for its winner.

    Builds the strategy twice, ranking the winning moves by each estimate of
    `estimate_strategy_costs` (and, with `prefer_shared`, first by whether the target is already in
    the strategy), and keeps the one listing fewer positions.

    The move graph of the whole game is held (about 20 bytes per move), so n is limited to
    games of at most STRATEGY_MAX_STATES states.  `threads` as in `solve.solve` (the
    classes, hence the strategy, are the same whatever the threads).  `players` >= 3: the
    certificate of `coalition_strategy`.
    """
    rs = get_rules(rules)
    spec = rs.instantiate(check_n(n))
    space = build_space(spec, max_memory)
    if space.total_states() > STRATEGY_MAX_STATES:
        raise InputError(
            f"strategy export holds the whole move graph: n={n} has {space.total_states()} "
            f"states, the limit is {STRATEGY_MAX_STATES}"
        )
    if players != 2:
        return coalition_strategy(n, space, rs, players, max_memory=max_memory,
                                  threads=threads)
    result = solve(n, rs, 2, keep_classes=True, max_memory=max_memory, threads=threads)
    g = move_graph(space, result.classes)
    order, ptr, dest, move, is_n, counts = (
        g["order"], g["ptr"], g["dest"], g["move"], g["is_n"], g["counts"]
    )
    s_level, s_rank = space.rank(spec.start)
    start = g["offset"][s_level] + s_rank
    choice = None
    heuristic = ""
    forward = order[::-1].copy()
    for name, depth in (("tree", False), ("depth", True)):
        cost = estimate_strategy_costs(order, ptr, dest, is_n, depth)
        ch = choose_strategy_moves(forward, ptr, dest, is_n, cost, start, prefer_shared)
        if choice is None or (ch >= 0).sum() < (choice >= 0).sum():
            choice, heuristic = ch, name
    picked = [int(u) for u in forward if choice[u] >= 0]
    strategy = Strategy(
        rules=rs.name,
        rules_hash=rs.content_hash(),
        n=n,
        winner=int(result.winner),
        nbins=spec.nbins,
        positions=tuple(tuple(int(x) for x in counts[u]) for u in picked),
        moves=tuple(spec.move_names[int(move[choice[u]])] for u in picked),
        heuristic=heuristic,
    )
    return strategy, result


def coalition_strategy(
    n: int, space: StateSpace, rules: RuleSet, players: int, *, max_memory: int | None = None,
    threads: int | None = None,
) -> tuple[Strategy, SolveResult]:
    """The certificate of the player who forces the last move against the coalition of
    the others (module docstring), for `players` >= 3; ZeckenumError when nobody can."""
    spec = space.spec
    result = solve(n, rules, players, keep_classes=True,
                   max_memory=max_memory, threads=threads)
    if result.winner is None:
        raise ZeckenumError(
            f"n={result.n}, {players} players: no player can force the last move against the "
            "coalition of the others, so there is no winning certificate to write")
    g = move_graph(space, result.classes)
    s_level, s_rank = space.rank(spec.start)
    start = g["offset"][s_level] + s_rank
    r0 = (1 - int(result.winner)) % players
    choice = choose_coalition_moves(g["order"][::-1].copy(), g["ptr"], g["dest"], g["is_n"],
                                    start, r0)
    forward = g["order"][::-1]
    picked = [int(u) for u in forward if choice[u] >= 0]
    return Strategy(
        rules=rules.name, rules_hash=rules.content_hash(), n=result.n,
        winner=int(result.winner), nbins=spec.nbins,
        positions=tuple(tuple(int(x) for x in g["counts"][u]) for u in picked),
        moves=tuple(spec.move_names[int(g["move"][choice[u]])] for u in picked),
        heuristic="coalition", players=players,
    ), result
