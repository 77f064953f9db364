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

Values per state (two players; `remoteness`, `misere`, `grundy`, `export`).  These run the
sweep with one value per state instead of one bit (`classify.layer_values`):

* Remoteness (the usual notion of combinatorial game theory: the winner ends the game as
  fast as possible, the loser delays it): a terminal position has remoteness 0; an
  N-position 1 + the least remoteness of its P-successors; a P-position 1 + the largest
  remoteness of its successors.  Under optimal play it is the number of moves left.
* Misère play (`misere`): the player who makes the last move loses, so a position without
  a move is an N-position (at n = 1 player 1 cannot move and wins).  Classes and
  remoteness follow the same rules from that base; the parity of the remoteness is the
  class (normal play: even exactly at P-positions; misère: odd exactly at P-positions).
* Sprague–Grundy values (`grundy`, normal play only): the mex of the successors' values;
  0 exactly at P-positions.  The value of a sum of games is the XOR of the parts' values
  (`solve_sum`).  No value exceeds the number of moves (`classify.grundy_dtype`).

Each costs one uint16 (remoteness) and one uint8 (Grundy) per state of the layers held,
forecast by `value_peak_bytes` and refused up front.  These are two-player notions: with
P >= 3 players they are refused (`check_value_options`).  `export` writes every reachable
position with its values (`optimal.export`).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
from zeckenum.core.checks import check_n, check_players, check_threads, thread_count
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.statespace import StateSpace, build_space, refuse_space
from zeckenum.errors import InputError, OutputError
from zeckenum.optimal.classify import (
    REMOTENESS_MAX,
    grundy_dtype,
    layer_classes,
    layer_values,
    reachable_bits,
)
from zeckenum.optimal.export import export_arrays, export_bytes, parse_fields, write_export
from zeckenum.optimal.waves import parallel_layer, plan_bytes
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import STANDARD, GameSpec, RuleSet
from zeckenum.rules.notation import format_position
from zeckenum.safeio import check_output_file


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
    convention   "normal" (the last player to move wins) or "misere" (two players)
    remoteness   the start's remoteness (module docstring), when asked; else None
    grundy       the start's Sprague-Grundy value, when asked; else None
    start_position  the start's count vector (`rules.notation.format_position`)
    start_detail one dict per legal move at the start: "move", "position" (where it
                 leads) and, with two players, that position's "class" ("P": the move
                 wins) and, when computed, its "remoteness" and "grundy"
    p_positions_by_level  level -> P-positions among the reachable states of that level
                 (two players, in-process solves; None otherwise)
    values       only with keep_classes=True and per-state values: {"remoteness": {level:
                 uint16 array over ranks}, "grundy": {level: array} or absent}
    export       the position export written (`optimal.export`): file, fields, positions,
                 bytes; None without one
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
    convention: str = "normal"
    remoteness: int | None = None
    grundy: int | None = None
    start_position: str = ""
    start_detail: tuple[dict, ...] = ()
    p_positions_by_level: dict[int, int] | None = None
    values: dict | None = field(default=None, repr=False, compare=False)
    export: dict | None = field(default=None, compare=False)

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
            "convention": self.convention,
            "remoteness": self.remoteness,
            "grundy": self.grundy,
            "start": {"position": self.start_position,
                      **({"class": "P" if self.winner == 2 else "N"}
                         if self.players == 2 else {}),
                      "moves": [dict(d) for d in self.start_detail]},
            "p_positions_by_level": (None if self.p_positions_by_level is None else
                                     {str(k): v for k, v in
                                      sorted(self.p_positions_by_level.items())}),
            **({"export": dict(self.export)} if self.export is not None else {}),
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


def value_peak_bytes(space: StateSpace, grundy: bool, keep: bool) -> int:
    """Peak bytes of the per-state values `classify.layer_values` reports
    (`peak_bits_bytes`), from the layer sizes alone: its accounting replayed level by
    level upward (the layers held, the flight buffer of the level's window, the finished
    layer's copy), 2 bytes of remoteness per state plus, with `grundy`, one Grundy value
    (`classify.grundy_dtype`); with `keep` every layer stays held."""
    per = 2 + (grundy_dtype(int(space.spec.mv_bins.shape[0])).itemsize if grundy else 0)
    span = space.max_drop
    held: list[int] = []
    peak = 0
    for level in sorted(space.levels):
        window = sum(space.layer_size(level - d) for d in range(span + 1) if level - d >= 0)
        held_states = sum(space.layer_size(lv) for lv in held) + space.layer_size(level)
        peak = max(peak, per * (held_states + window))
        held = [*held, level] if keep else [lv for lv in (*held, level) if lv >= level - span]
    return peak


def valued_bytes(space: StateSpace, reach: bool, grundy: bool, keep: bool, threads: int = 1,
                 export_fields: tuple[str, ...] | None = None) -> int:
    """Forecast peak bytes of a solve with per-state values: the rank table, the values
    (`value_peak_bytes`), the largest parallel plan, the reachability sweep as in
    `solve_bytes`, with `keep` the unpacked classes, and the export (`export.export_bytes`)."""
    need = (int(space.tab.nbytes) + value_peak_bytes(space, grundy, keep or bool(export_fields))
            + wave_plan_bytes(space, threads, 2))
    if reach:
        largest = space.largest_layer()
        need += (all_layers_bytes(space) + largest * 8 * space.spec.nbins
                 + 2 * solve_peak_bits(space, 2))
    if keep:
        need += space.total_states()
    if export_fields:
        need += export_bytes(space, export_fields)
    return need


def solve_space(spec: GameSpec, limit: int, players: int, reach: bool, keep_classes: bool,
                what: str, threads: int = 1, valued: dict | None = None) -> StateSpace:
    """The state space of a solve after its refusals: the rank table's exact size before
    it is allocated (`statespace.refuse_space`), then `solve_bytes` (or, with `valued`,
    the keyword arguments of `valued_bytes`) from the layer sizes."""
    per_state = 1 / 8 if (reach or keep_classes) else 0.0
    if valued is not None and (keep_classes or valued.get("export_fields")):
        per_state += 2.0  # every state's remoteness is kept (a lower bound of the peak)
    refuse_space(spec, limit, what, per_state=per_state)
    space = build_space(spec, limit)
    if valued is None:
        need = solve_bytes(space, players, reach, keep_classes, threads)
    else:
        need = valued_bytes(space, reach, keep=keep_classes, threads=threads, **valued)
    refuse_if_over(need, limit, what)
    return space


def check_value_options(players: int, misere: bool, remoteness: bool, grundy: bool,
                        export: object, export_fields: object) -> tuple[str, ...] | None:
    """Refuse combinations without a sound definition (one line, InputError); returns the
    export's fields (`export.parse_fields`; default class and remoteness, plus grundy with
    `grundy`) or None without an export."""
    asked = [name for name, on in (("--misere", misere), ("--remoteness", remoteness),
                                   ("--grundy", grundy), ("--export", export is not None))
             if on]
    if players != 2 and asked:
        raise InputError(f"{asked[0]} is a two-player notion (outcome classes, remoteness, "
                         f"misère play, Sprague-Grundy values); it is not defined for "
                         f"{players} players")
    fields = None
    if export is not None:
        fields = parse_fields(export_fields if export_fields is not None else
                              ("class", "remoteness", *(("grundy",) if grundy else ())))
    if misere and (grundy or (fields and "grundy" in fields)):
        raise InputError("Sprague-Grundy values add up under normal play only; --grundy "
                         "does not take --misere")
    return fields


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
    misere: bool = False,
    remoteness: bool = False,
    grundy: bool = False,
    export: str | None = None,
    export_fields: str | tuple[str, ...] | None = None,
) -> SolveResult:
    """Solve the game for n: outcome classes (two players) or coalition wins (P players).

    Two players only (module docstring, "Values per state"): `misere` solves misère play;
    `remoteness` reports the start's remoteness (and its moves'); `grundy` the
    Sprague-Grundy values; `export` writes every reachable position to that file
    (`optimal.export`, checked writable before anything runs) with `export_fields`
    ("class", "remoteness", "grundy"; default class and remoteness, and grundy with
    `grundy`).  Any of them runs the sweep with per-state values (`layer_values`);
    `keep_classes` then also keeps them (`SolveResult.values`).

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
    fields = check_value_options(players, misere, remoteness, grundy, export, export_fields)
    if export is not None:
        check_output_file(export, "position export")
    rs = get_rules(rules)
    reach = needs_reach(rs) if reach is None else reach
    spec = rs.instantiate(n)
    if misere or remoteness or grundy or fields:
        want_grundy = grundy or bool(fields and "grundy" in fields)
        return _solve_values(n, spec, reach, keep_classes, max_memory, progress, threads,
                             misere, want_grundy, export, fields)
    space = solve_space(spec, resolve_limit(max_memory), players, reach,
                        keep_classes, f"solving n={n}", threads)
    t0 = time.perf_counter()
    reach_bits = reachable_bits(space)[0] if reach else None
    bar = _state_bar(space, n) if progress else None
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


def _state_bar(space: StateSpace, n: int):  # noqa: ANN202 - a tqdm bar
    """The progress bar of a solve: states of every layer, closed by the caller."""
    from tqdm import tqdm

    return tqdm(total=space.total_states(), unit="state", unit_scale=True,
                desc=f"solve n={n}")


def _solve_values(
    n: int, spec: GameSpec, reach: bool, keep: bool, max_memory: int | None, progress: bool,
    threads: int, misere: bool, grundy: bool, export: str | None,
    fields: tuple[str, ...] | None,
) -> SolveResult:
    """`solve` with per-state values (two players) of the game `spec` (from its
    `spec.start`): forecast, sweep, result, export."""
    valued = {"grundy": grundy, "export_fields": fields}
    space = solve_space(spec, resolve_limit(max_memory), 2, reach, keep,
                        f"solving n={n}", threads, valued=valued)
    t0 = time.perf_counter()
    reach_bits = reachable_bits(space)[0] if reach else None
    bar = _state_bar(space, n) if progress else None
    try:
        rems, grus, stats = layer_values(
            space, misere=misere, grundy=grundy, keep=keep or fields is not None,
            reach=reach_bits, on_layer=bar.update if bar is not None else None,
            threads=threads)
    finally:
        if bar is not None:
            bar.close()
    if stats["overflow"]:
        raise InputError(f"solving n={n}: a remoteness exceeds {REMOTENESS_MAX}, more than "
                         "the per-state values hold")
    stats["reach_pass"] = bool(reach)
    stats["forecast_peak_bytes"] = valued_bytes(space, reach, grundy, keep, threads, fields)
    stats["threads"] = threads
    seconds = time.perf_counter() - t0
    info = None
    if fields is not None:
        arrays = export_arrays(space, n, misere, fields, rems, grus, reach_bits)
        positions = int(arrays["cls"].size)
        info = {"file": str(export), "format": "zpositions/1", "fields": list(fields),
                "positions": positions}
        try:
            info["bytes"] = write_export(export, arrays)
        except OutputError as exc:  # the archive went to a rescue file; keep the result
            del arrays
            exc.result = solve_result(  # type: ignore[attr-defined]
                n, space, 2, {}, stats, seconds, keep_classes=keep, values=(rems, grus),
                misere=misere, export={**info, "error": str(exc)})
            raise
        del arrays
    return solve_result(n, space, 2, {}, stats, seconds, keep_classes=keep,
                        values=(rems, grus), misere=misere, export=info)


def needs_reach(rules: RuleSet) -> bool:
    """Whether solving needs the reachability sweep first (every rule set but the standard
    game, whose states of value n are all reachable: module docstring)."""
    return rules.content_hash() != STANDARD.content_hash()


def solve_result(
    n: int, space: StateSpace, players: int, held: dict[int, np.ndarray], stats: dict,
    seconds: float, keep_classes: bool = False,
    values: tuple[dict[int, np.ndarray], dict[int, np.ndarray] | None] | None = None,
    misere: bool = False, export: dict | None = None,
) -> SolveResult:
    """The `SolveResult` at n of a finished upward sweep (`layer_classes`, whole or in
    pieces, or with `values` = (remoteness, Grundy values) per level: `layer_values`) of
    the game `space`.

    `held` (or the arrays of `values`) must hold the start's level and the max_drop levels
    below it; `stats` the sweep's summed statistics plus "reach_pass".
    """
    spec = space.spec
    rs = spec.rules
    start_level, start_rank = space.rank(spec.start)
    start_moves: dict[str, bool] = {}
    detail: list[dict] = []
    rem_start = gru_start = None
    if values is not None:
        rems, grus = values
        lose = 1 if misere else 0

        def is_n(lv: int, rk: int) -> bool:
            return int(rems[lv][rk]) & 1 != lose

        rem_start = int(rems[start_level][start_rank])
        gru_start = None if grus is None else int(grus[start_level][start_rank])
    else:
        def is_n(lv: int, rk: int) -> bool:
            return _bit(held, lv, rk)
    if players == 2:
        start_n = is_n(start_level, start_rank)
        winner = 1 if start_n else 2
        forced = {"1": winner == 1, "2": winner == 2}
        for m, nxt in successors(spec, spec.start):
            lv, rk = space.rank(nxt)
            wins = not is_n(lv, rk)
            start_moves[spec.move_names[m]] = wins
            d = {"move": spec.move_names[m], "position": format_position(nxt),
                 "class": "P" if wins else "N"}
            if values is not None:
                d["remoteness"] = int(rems[lv][rk])
                if grus is not None:
                    d["grundy"] = int(grus[lv][rk])
            detail.append(d)
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
            detail.append({"move": spec.move_names[m], "position": format_position(nxt)})
        p_positions = None
    classes = None
    kept_values = None
    if keep_classes and values is not None:
        classes = {lv: (a & 1) != lose for lv, a in rems.items()}
        kept_values = {"remoteness": dict(rems),
                       **({"grundy": dict(grus)} if grus is not None else {})}
    elif keep_classes and players == 2:
        classes = {lv: unpack_bits(a, space.layer_size(lv)) for lv, a in held.items()}
    elif keep_classes:
        classes = {
            lv: np.stack([unpack_bits(a[q], space.layer_size(lv)) for q in range(players)],
                         axis=1)
            for lv, a in held.items()
        }
    by_level = stats.get("p_by_level") if players == 2 else None
    extra = {k: stats[k] for k in ("remoteness_max", "grundy_max") if stats.get(k) is not None}
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
               **{k: stats[k] for k in ("threads", "parallel_layers") if k in stats},
               **extra},
        convention="misere" if misere else "normal",
        remoteness=rem_start,
        grundy=gru_start,
        start_position=format_position(spec.start),
        start_detail=tuple(detail),
        p_positions_by_level=None if by_level is None else dict(by_level),
        values=kept_values,
        export=export,
    )


MAX_SUM_PARTS = 64
"""Most games in one sum (`solve_sum`)."""


@dataclass(frozen=True)
class SumResult:
    """A sum of games of one rule set under normal play (`solve_sum`).

    parts          one dict per game: "n", "position" (its start), "grundy" (its start's
                   Sprague-Grundy value), "states"
    nimber         the XOR of the parts' values: the sum's Sprague-Grundy value
    winner         1 when the nimber is non-zero (the sum is an N-position), else 2
    winning_moves  every winning first move: "part" (1-based), "n", "move", "position"
                   (where that part goes); each leads to a part value g with
                   g == grundy(part) XOR nimber, leaving a sum of nimber 0
    """

    rules: str
    rules_hash: str
    parts: tuple[dict, ...]
    nimber: int
    winner: int
    winning_moves: tuple[dict, ...]
    seconds: float

    def to_dict(self) -> dict:
        return {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "convention": "normal",
            "parts": [dict(p) for p in self.parts],
            "grundy": self.nimber,
            "winner": self.winner,
            "start": {"class": "N" if self.nimber else "P"},
            "winning_moves": [dict(m) for m in self.winning_moves],
            "seconds": round(self.seconds, 6),
        }


def solve_sum(
    parts: list[int | tuple[int, ...]] | tuple[int | tuple[int, ...], ...],
    rules: str | RuleSet = "standard", *,
    max_memory: int | None = None, progress: bool = False, threads: int | None = None,
) -> SumResult:
    """The sum of games of one rule set under normal play, from the Sprague-Grundy values
    of their starts: each part is an n (the rule set's start for n) or a position (a count
    vector, bin 1 first: the game started there, `RuleSet.at_position`).  The sum is a
    P-position exactly when the XOR of the values is 0 (Sprague-Grundy theorem), and a
    winning move is a move of one part to a position whose value is that part's value XOR
    the nimber.  Each part is solved with `solve(..., grundy=True)` (forecast and refused
    one at a time)."""
    if isinstance(parts, (str, bytes)) or not 2 <= len(parts) <= MAX_SUM_PARTS:
        raise InputError(f"a sum takes 2 to {MAX_SUM_PARTS} games, got {parts!r}")
    base = get_rules(rules)
    games: list[tuple[int, RuleSet]] = []
    for part in parts:
        if isinstance(part, int):
            games.append((check_n(part), base))
        else:
            rs = base.at_position(tuple(part))
            games.append((rs.position_value(rs.position), rs))
    rs = base
    t0 = time.perf_counter()
    results = [solve(x, g, grundy=True, max_memory=max_memory, progress=progress,
                     threads=threads) for x, g in games]
    nimber = 0
    for r in results:
        nimber ^= int(r.grundy)
    parts = tuple({"n": r.n, "position": r.start_position, "grundy": r.grundy,
                   "states": r.states} for r in results)
    moves = []
    if nimber:
        for k, r in enumerate(results, 1):
            want = int(r.grundy) ^ nimber
            for d in r.start_detail:
                if d["grundy"] == want:
                    moves.append({"part": k, "n": r.n, "move": d["move"],
                                  "position": d["position"]})
    return SumResult(rules=rs.name, rules_hash=rs.content_hash(), parts=parts, nimber=nimber,
                     winner=1 if nimber else 2, winning_moves=tuple(moves),
                     seconds=time.perf_counter() - t0)
