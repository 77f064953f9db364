"""Optimal play of one game: the API `solve`, its result, and its memory forecast.

`solve(n, rules, players)` builds the ranked state space (`core.statespace`), runs the
reachability sweep when the rule set needs it (`classify.reachable_bits`), classifies every
layer from level 0 up to the start's (`classify.layer_classes`: two players, the outcome
class of every state; P players, the coalition bits win(s, r) of the `classify` docstring)
and reads the winner and the winning first moves off the start's layer (`solve_result`).
The refusal before any large allocation is `solve_space` (`solve_bytes`, from the layer
sizes alone).  At n = 1 the start has no move: with two players the first player, unable to
move, loses; with P >= 3 nobody moved, so nobody wins.

Reachability.  For the standard game every state of value n is reachable from the start:
build its tokens one at a time from ones, a token F(j) (j >= 3) by building F(j-2), then
F(j-1), then combining them.  So there "every state of the layers" and "every reachable
state" coincide (tests confirm it against a brute-force search).  Any other rule set first
gets a reachability sweep (one bit per state, all layers kept) and only reachable states are
solved and counted (`needs_reach`).

At most one player can force the last move (two such strategies played against each
other would both succeed), so `winner` is well defined for any number of players.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
from zeckenum.core.checks import check_n, check_players, check_threads, thread_count
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.optimal.classify import layer_classes, reachable_bits
from zeckenum.optimal.waves import parallel_layer, plan_bytes
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import STANDARD, GameSpec, RuleSet


@dataclass(frozen=True)
class SolveResult:
    """Outcome of optimal play for one game.

    winner       1 or 2 (two players); for P >= 3 the player who can force the last move,
                 None when nobody can
    states       number of states reachable from the start (all solved)
    p_positions  number of P-positions among them (two players; None for P >= 3)
    forced_win   player (1-based, as a string) -> whether that player can force the last
                 move against the coalition of all others
    start_moves  move name -> True when it wins for the player to move at the start (two
                 players; with P >= 3: when it keeps player 1's forced win)
    classes      only with keep_classes=True: per level, two players: bool array over
                 ranks, True for an N-position; P players: bool array (ranks, P), entry
                 [i, r] = win(state i, offset r) (module docstring)
    """

    rules: str
    rules_hash: str
    n: int
    players: int
    states: int
    winner: int | None
    p_positions: int | None
    forced_win: dict[str, bool]
    start_moves: dict[str, bool]
    moves_examined: int
    seconds: float
    peak_bits_bytes: int
    classes: dict[int, np.ndarray] | None = field(default=None, repr=False, compare=False)
    stats: dict = field(default_factory=dict, compare=False)
    position: str = ""  # the start position (README "Positions") when not the rule set's

    @property
    def winning_moves(self) -> list[str]:
        return [m for m, w in self.start_moves.items() if w]

    @property
    def states_per_second(self) -> float:
        return self.states / self.seconds if self.seconds > 0 else math.inf

    def to_dict(self) -> dict:
        """JSON-ready form (no per-state classes)."""
        return {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            **({"position": self.position} if self.position else {}),
            "players": self.players,
            "winner": self.winner,
            "p_positions": self.p_positions,
            "states": self.states,
            "forced_win": dict(self.forced_win),
            "start_moves": dict(self.start_moves),
            "winning_moves": self.winning_moves,
            "moves_examined": self.moves_examined,
            "seconds": round(self.seconds, 6),
            "states_per_second": round(self.states_per_second, 1),
            "peak_bits_bytes": self.peak_bits_bytes,
            "stats": self.stats,
        }


def unpack_bits(packed: np.ndarray, size: int) -> np.ndarray:
    """Bool array of length `size` from a little-endian bit-packed uint8 array."""
    return np.unpackbits(packed, bitorder="little", count=size).astype(bool)


def _bit(held: dict[int, np.ndarray], level: int, rank: int, plane: int = 0) -> bool:
    arr = held[level]
    if arr.ndim == 2:
        arr = arr[plane]
    return bool((arr[rank >> 3] >> (rank & 7)) & 1)


def successors(spec: GameSpec, counts: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """(move index, successor counts) for every legal move of one state."""
    out = []
    for m in range(spec.mv_bins.shape[0]):
        nxt = counts.copy()
        for b, dlt in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            nxt[b] += dlt
        if (nxt >= 0).all():
            out.append((m, nxt))
    return out


def layer_bytes(space: StateSpace, level: int) -> int:
    """Bytes of one bit plane of a layer (one bit per state, packed); 0 outside 0..top."""
    if level < 0 or level > space.top:
        return 0
    return (space.layer_size(level) + 7) // 8


def window_bytes(space: StateSpace, level: int) -> int:
    """Bytes of one bit plane of the layers a sweep holds in flight at `level`: itself and
    the max_drop levels below (`classify._flight`)."""
    return sum(layer_bytes(space, level - d) for d in range(space.max_drop + 1))


def all_layers_bytes(space: StateSpace) -> int:
    """Bytes of one bit plane over every layer of the space (one bit per state): what the
    reachability sweep keeps for the whole solve, and what `keep_classes` keeps per plane."""
    return sum(layer_bytes(space, lv) for lv in space.levels)


def solve_peak_bits(space: StateSpace, players: int = 2) -> int:
    """Peak bytes of outcome bits `layer_classes` reports (`peak_bits_bytes`), from the
    layer sizes alone.

    Replays the sweep's accounting, level by level upward: the layers it holds from the
    levels below (the last max_drop + 1 swept), the flight buffer of the level's window
    (itself and the max_drop levels below) and the copy of the finished layer, each one
    bit per state per plane.  The chain (`cluster.solve_chain.run_solve`) holds the same
    layers at every level, so its peak is the same.
    """
    planes = 1 if players == 2 else players
    span = space.max_drop
    held: list[int] = []
    peak = 0
    for level in sorted(space.levels):
        window = window_bytes(space, level)
        held_bytes = sum(layer_bytes(space, lv) for lv in held)
        peak = max(peak, planes * (held_bytes + window + layer_bytes(space, level)))
        held = [lv for lv in (*held, level) if lv >= level - span]
    return peak


def wave_plan_bytes(space: StateSpace, threads: int, players: int = 2) -> int:
    """Bytes of the largest parallel plan (`optimal.waves.plan_bytes`) among the layers that
    run on several threads (0 with one thread); their bits are those of `solve_peak_bits`."""
    sizes = [space.layer_size(lv) for lv in space.levels]
    moves = int(space.spec.mv_bins.shape[0])
    planes = 1 if players == 2 else players
    return max((plan_bytes(s, moves, planes) for s in sizes if parallel_layer(s, threads)),
               default=0)


def solve_bytes(space: StateSpace, players: int, reach: bool, keep_classes: bool,
                threads: int = 1) -> int:
    """Forecast peak bytes of `solve`, an upper bound up to the kernels' O(bins) scratch.

    Counts the rank table, the outcome bits (`solve_peak_bits`), the plan of the largest
    layer run on several threads (`wave_plan_bytes`), and with `reach` the
    reachability sweep: one bit per state kept for the whole solve, the largest layer's
    states (int64 per bin) and its flight buffer; with `keep_classes` every layer's bits
    (per plane) and their unpacked bool copies.
    """
    planes = 1 if players == 2 else players
    total_bits = all_layers_bytes(space)
    need = (int(space.tab.nbytes) + solve_peak_bits(space, players)
            + wave_plan_bytes(space, threads, players))
    if reach:
        largest = space.largest_layer()
        need += total_bits + largest * 8 * space.spec.nbins + 2 * solve_peak_bits(space, 2)
    if keep_classes:
        need += planes * total_bits + space.total_states()
    return need


def solve_space(spec: GameSpec, limit: int, players: int, reach: bool, keep_classes: bool,
                what: str, threads: int = 1) -> StateSpace:
    """The state space of a solve after its refusals: the rank table's exact size before
    it is allocated (`statespace.refuse_space`), then `solve_bytes` from the layer sizes."""
    refuse_space(spec, limit, what, per_state=1 / 8 if (reach or keep_classes) else 0.0)
    space = build_space(spec, limit)
    refuse_if_over(solve_bytes(space, players, reach, keep_classes, threads), limit, what)
    return space


def solve(
    n: int,
    rules: str | RuleSet = "standard",
    players: int = 2,
    *,
    keep_classes: bool = False,
    reach: bool | None = None,
    max_memory: int | None = None,
    progress: bool = False,
    threads: int | None = None,
) -> SolveResult:
    """Solve the game for n: outcome classes (two players) or coalition wins (P players).

    `keep_classes` keeps every layer's bits (two players: `classes[level]` is a bool array
    over ranks, True for N; unreachable states read False) - memory grows with the whole
    state space, for small n only.  `reach`: first find the states reachable from the start
    (`reachable_bits`) and solve only those; None (default) does so for every rule set except
    the standard game, whose states of value n are all reachable (module docstring).
    `max_memory` (default: what the machine has available): the run is refused up front
    when `solve_bytes` exceeds it (`solve_space`).  `progress`: a bar of the states
    classified on stderr.  `threads` (default: every core) classify each large layer in
    parallel waves (`classify.layer_classes`, `optimal.waves`): the result is the same bit
    for bit, whatever the threads; the reachability sweep runs on one thread.
    """
    check_n(n)
    check_players(players)
    threads = thread_count(check_threads(threads))
    rs = get_rules(rules)
    reach = needs_reach(rs) if reach is None else reach
    space = solve_space(rs.instantiate(n), resolve_limit(max_memory), players, reach,
                        keep_classes, f"solving n={n}", threads)
    t0 = time.perf_counter()
    reach_bits = reachable_bits(space)[0] if reach else None
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=space.total_states(), unit="state", unit_scale=True,
                   desc=f"solve n={n}")
    try:
        held, stats = layer_classes(space, players, keep=keep_classes, reach=reach_bits,
                                    on_layer=bar.update if bar is not None else None,
                                    threads=threads)
    finally:
        if bar is not None:
            bar.close()
    stats["reach_pass"] = bool(reach)
    stats["forecast_peak_bytes"] = solve_bytes(space, players, reach, keep_classes, threads)
    stats["threads"] = threads
    return solve_result(n, space, players, held, stats, time.perf_counter() - t0,
                        keep_classes=keep_classes)


def needs_reach(rules: RuleSet) -> bool:
    """Whether solving needs the reachability sweep first (every rule set but the standard
    game, whose states of value n are all reachable: module docstring)."""
    return rules.content_hash() != STANDARD.content_hash()


def solve_result(
    n: int, space: StateSpace, players: int, held: dict[int, np.ndarray], stats: dict,
    seconds: float, keep_classes: bool = False,
) -> SolveResult:
    """The `SolveResult` at n of a finished upward sweep (`layer_classes`, whole or in
    pieces) of the game `space`.

    `held` must hold the start's level and the max_drop levels below it; `stats` the
    sweep's summed statistics plus "reach_pass".
    """
    spec = space.spec
    rs = spec.rules
    start_level, start_rank = space.rank(spec.start)
    start_moves: dict[str, bool] = {}
    if players == 2:
        start_n = _bit(held, start_level, start_rank)
        winner = 1 if start_n else 2
        forced = {"1": winner == 1, "2": winner == 2}
        for m, nxt in successors(spec, spec.start):
            lv, rk = space.rank(nxt)
            start_moves[spec.move_names[m]] = not _bit(held, lv, rk)
        p_positions = stats["p_positions"]
    else:
        terminal = not successors(spec, spec.start)
        forced = {}
        for x in range(1, players + 1):
            r = (1 - x) % players
            forced[str(x)] = (not terminal) and _bit(held, start_level, start_rank, r)
        winners = [int(x) for x, w in forced.items() if w]
        winner = winners[0] if winners else None
        for m, nxt in successors(spec, spec.start):
            lv, rk = space.rank(nxt)
            start_moves[spec.move_names[m]] = _bit(held, lv, rk, 1)
        p_positions = None
    classes = None
    if keep_classes and players == 2:
        classes = {lv: unpack_bits(a, space.layer_size(lv)) for lv, a in held.items()}
    elif keep_classes:
        classes = {
            lv: np.stack([unpack_bits(a[q], space.layer_size(lv)) for q in range(players)],
                         axis=1)
            for lv, a in held.items()
        }
    return SolveResult(
        rules=rs.name,
        rules_hash=rs.content_hash(),
        n=n,
        players=players,
        states=stats["states"],
        winner=winner,
        p_positions=p_positions,
        forced_win=forced,
        start_moves=start_moves,
        moves_examined=stats["moves_examined"],
        seconds=seconds,
        peak_bits_bytes=stats["peak_bits_bytes"],
        classes=classes,
        stats={"layers": stats["layers"], "reach_pass": bool(stats.get("reach_pass")),
               **({"forecast_peak_bytes": stats["forecast_peak_bytes"]}
                  if "forecast_peak_bytes" in stats else {}),
               **{k: stats[k] for k in ("threads", "parallel_layers") if k in stats}},
    )

