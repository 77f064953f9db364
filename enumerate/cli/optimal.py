"""Command-line front ends of optimal play: `solve` and `check-strategy` (click commands).

`solve` also reports the per-state values of `zeckenum.optimal.solve` (--remoteness,
--misere, --grundy, --export) and sums of games (--sum N1,N2, instead of N).

Both print a readable table on the terminal, or one JSON object with --json.  Errors a user
can cause come out as one line on stderr with the error's exit code (2 for bad input, 5 for
a strategy that does not win, 6 for a strategy file that could not be written), never as a
traceback.  `solve --strategy FILE` checks FILE can be written before solving; a write that
still fails afterwards puts the strategy in a rescue file it names (exit 6).
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand, fail
from zeckenum.cli.options import (
    SHARDS,
    THREADS,
    backend_options,
    json_option,
    max_memory_option,
    n_argument,
    players_option,
    position_option,
    progress_option,
    resolve_progress,
    rules_option,
)
from zeckenum.core.checks import SOLVE_MAX_PLAYERS
from zeckenum.core.text import plural
from zeckenum.errors import InputError, OutputError
from zeckenum.optimal.solve import SolveResult, SumResult
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.optimal.strategyfile import check_strategy, read_strategy, write_strategy
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.notation import parse_position, shown
from zeckenum.safeio import check_output_file

if TYPE_CHECKING:  # pragma: no cover - types only
    from zeckenum.cluster.batch import BatchSpec


def _table(rows: list[tuple[str, str]]) -> str:
    width = max(len(k) for k, _ in rows)
    return "\n".join(f"{k.ljust(width)}  {v}" for k, v in rows)


def solve_table(res: SolveResult, strategy_info: dict | None = None) -> str:
    """Human-readable summary of a SolveResult."""
    rows = [
        ("rules", res.rules),
        ("n", str(res.n)),
        *([("position", res.position)] if res.position else []),
        ("players", str(res.players)),
        ("states", f"{res.states:,}"),
    ]
    if res.players == 2:
        if res.convention == "misere":
            rows.append(("convention", "misère (the player who makes the last move loses)"))
        rows.append(("winner", f"player {res.winner}"))
        rows.append(("P-positions", f"{res.p_positions:,}"))
        rows.append(("N-positions", f"{res.states - res.p_positions:,}"))
        moves = [f"{d['move']} -> {d['position']}" for d in res.start_detail]
        wins = [m for m, d in zip(moves, res.start_detail, strict=True) if d["class"] == "P"]
        where = f"{res.start_position}: "
        if wins:
            rows.append(("start", where + "N-position: player 1 wins by " + ", ".join(wins)))
        elif moves:
            rows.append(("start", where + "P-position: every move loses (" + ", ".join(moves)
                         + ")"))
        elif res.convention == "misere":
            rows.append(("start", where + "no move: player 1 cannot move and wins"))
        else:
            rows.append(("start", where + "no move: player 1 cannot move and loses"))
        if res.remoteness is not None:
            rows.append(("remoteness", f"{res.remoteness} (moves left under optimal play)"))
        if res.grundy is not None:
            rows.append(("Grundy value", str(res.grundy)))
    else:
        for x, w in res.forced_win.items():
            rows.append((f"player {x}", "can force the last move" if w else "cannot force a win"))
        rows.append(("winner", f"player {res.winner}" if res.winner else "nobody can force a win"))
    rows.append(("time", f"{res.seconds:.3f} s ({res.states_per_second:,.0f} states/s)"))
    rows.append(("value arrays" if res.remoteness is not None else "bit arrays",
                 f"{res.peak_bits_bytes:,} bytes at peak"))
    if res.export is not None and "bytes" in res.export:
        rows.append(("export", f"{res.export['file']}: "
                     f"{plural(res.export['positions'], 'position', sep=True)}, "
                     f"{plural(res.export['bytes'], 'byte', sep=True)} "
                     f"({', '.join(res.export['fields'])})"))
    if strategy_info:
        rows.append(("strategy", f"{strategy_info['file']}: "
                     f"{plural(strategy_info['positions'], 'position', sep=True)}, "
                     f"{plural(strategy_info['bytes'], 'byte', sep=True)}"))
    return _table(rows)


def sum_table(res: SumResult) -> str:
    """Human-readable summary of a SumResult."""
    rows = [("rules", res.rules), ("convention", "normal (the last player to move wins)")]
    for k, p in enumerate(res.parts, 1):
        rows.append((f"game {k}", f"n={p['n']}, start {p['position']}, Grundy value "
                     f"{p['grundy']}"))
    rows.append(("Grundy value", f"{res.nimber} (XOR of the games' values)"))
    if res.nimber:
        rows.append(("winner", "player 1"))
        rows.append(("winning moves", ", ".join(
            f"game {m['part']}: {m['move']} -> {m['position']}" for m in res.winning_moves)))
    else:
        rows.append(("winner", "player 2 (the sum is a P-position: every move loses)"))
    rows.append(("time", f"{res.seconds:.3f} s"))
    return _table(rows)


def _sum_parts(text: str) -> list[int | tuple[int, ...]]:
    """The parts of `--sum`: "n1,n2[,...]" (games at these n), or parts joined by "+",
    each an n or a position ("3,1,0,2 + 0,4 + 7"); InputError otherwise."""
    if "+" in text:
        parts: list[int | tuple[int, ...]] = []
        for piece in (p.strip() for p in text.split("+")):
            if piece.isascii() and piece.isdigit():
                parts.append(int(piece))
            else:
                parts.append(parse_position(piece))
        if len(parts) < 2:
            raise InputError(f"--sum {shown(text)!r}: expected two or more games")
        return parts
    pieces = [p.strip() for p in text.split(",")]
    if len(pieces) < 2 or not all(p.isascii() and p.isdigit() for p in pieces):
        raise InputError(f"--sum {shown(text)!r}: expected two or more positive integers "
                         "(5,8) or games joined by + (3,1,0,2 + 0,4 + 7)")
    return [int(p) for p in pieces]


@click.command("solve", cls=OneLineCommand)
@n_argument(required=False)
@position_option()
@rules_option("rules_name")
@players_option(SOLVE_MAX_PLAYERS, short=False,
                extra="; with 3 or more, each player against the coalition of all others")
@click.option("--strategy", "strategy_path", type=click.Path(dir_okay=False), default=None,
              help="Write a winning strategy for the winner to this file (with 3 or more "
                   "players: a certificate that the winner forces the last move against the "
                   "coalition of the others; gzip-compressed when the name ends in .gz).")
@json_option("Print one JSON object.")
@backend_options(
    workers="Run the level-range shards on a local Dask cluster of K worker processes "
            "(one shard at a time: they form a chain).",
    scheduler="Run the level-range shards on an existing Dask cluster.",
    checkpoint="Keep each finished level range in DIR; rerunning resumes from it.",
)
@click.option("--shards", type=SHARDS, default=None,
              help="Cut the levels into this many ranges (default: about 2e7 states each).")
@click.option("--threads", type=THREADS, default=None,
              help="Threads that classify each large layer together (default: all cores; "
                   "the result is the same whatever the threads).")
@click.option("--misere", is_flag=True,
              help="Misère play: the player who makes the last move loses (two players).")
@click.option("--remoteness", is_flag=True,
              help="Report the remoteness of the start and of its moves: the moves left "
                   "when the winner hastens and the loser delays (two players).")
@click.option("--grundy", is_flag=True,
              help="Report Sprague-Grundy values (normal play, two players).")
@click.option("--export", "export_path", type=click.Path(dir_okay=False), default=None,
              help="Write every reachable position and its values to this .npz file "
                   "(load it with numpy.load; format in the README).")
@click.option("--export-fields", default=None, metavar="LIST",
              help="Values in the export, from class,remoteness,grundy (default: "
                   "class,remoteness, and grundy with --grundy).")
@click.option("--sum", "sum_text", default=None, metavar="N1,N2[,...] | G1 + G2 [+ ...]",
              help="Solve the sum of these games (normal play) from their Grundy values, "
                   "instead of N: games at N1, N2, ..., or games joined by + each an n "
                   "or a start position (3,1,0,2 + 0,4).")
@progress_option("Show a progress bar of the states (or level ranges) on stderr")
@max_memory_option
def solve_command(n: int | None, position: str | None, rules_name: str, players: int,
                  strategy_path: str | None,
                  misere: bool, remoteness: bool, grundy: bool, export_path: str | None,
                  export_fields: str | None, sum_text: str | None,
                  as_json: bool, workers: int | None, scheduler: str | None,
                  cluster: BatchSpec | None, checkpoint_dir: str | None,
                  shards: int | None, threads: int | None,
                  progress: bool | None, max_memory: int | None) -> None:
    """Who wins the game for N under optimal play (the last player to move wins; with
    --misere, loses).

    \b
    Examples:
      zeckenum solve 100
      zeckenum solve 400 --threads 2
      zeckenum solve 60 --players 3 --json
      zeckenum solve 80 --strategy n80.zstrat.gz
      zeckenum solve 500 --checkpoint ckpt-solve500 --progress
      zeckenum solve --position 3,1,0,2
      zeckenum solve 40 --remoteness --grundy
      zeckenum solve 40 --misere
      zeckenum solve 60 --export n60.npz --export-fields class,remoteness,grundy
      zeckenum solve --sum 7,12
    """
    info = None
    lost: OutputError | None = None
    chained = workers or scheduler or cluster or checkpoint_dir or shards
    if sum_text is not None:
        if remoteness or export_fields is not None or position is not None:
            raise InputError("--sum reports the sum's Sprague-Grundy value and winning "
                             "moves; it does not take --position, --remoteness or "
                             "--export-fields")
        _solve_sum(n, sum_text, get_rules(rules_name), players, strategy_path, misere,
                   export_path, chained, as_json, threads, progress, max_memory)
        return
    if n is None and position is None:
        raise InputError("solve needs N, a start position (--position COUNTS) or --sum N1,N2")
    n, rules = api.game_at(n, get_rules(rules_name), position)
    if export_fields is not None and export_path is None:
        raise InputError("--export-fields needs --export FILE")
    if strategy_path is not None:
        if misere or remoteness or grundy or export_path is not None:
            raise InputError("--strategy writes a normal-play strategy; it does not take "
                             "--misere, --remoteness, --grundy or --export")
        if chained or progress:
            raise InputError("--strategy runs in-process; it does not take --workers, "
                             "--scheduler, --cluster, --checkpoint, --shards or --progress")
        check_output_file(strategy_path, "strategy file")
        strat, res = winning_strategy(n, rules, max_memory=max_memory, threads=threads,
                                      players=players)
        res = api.tagged(res, rules)
        try:
            nbytes = write_strategy(strategy_path, strat, rules.bin_values(n), rules)
        except OutputError as exc:  # the strategy went to a rescue file; still report
            lost, nbytes = exc, 0
        info = {"file": strategy_path, "positions": strat.size, "bytes": nbytes}
    else:
        try:
            res = api.solve(n, rules, players, max_memory=max_memory,
                            progress=resolve_progress(progress), workers=workers,
                            scheduler=scheduler, checkpoint=checkpoint_dir, shards=shards,
                            threads=threads, cluster=cluster, misere=misere,
                            remoteness=remoteness, grundy=grundy, export=export_path,
                            export_fields=export_fields)
        except OutputError as exc:  # the export went to a rescue file; still report
            if getattr(exc, "result", None) is None:
                raise
            lost, res = exc, exc.result
    if as_json:
        out = res.to_dict()
        if info is not None:
            out["strategy"] = info
        click.echo(json.dumps(out, indent=2))
    else:
        click.echo(solve_table(res, info))
    if lost is not None:
        fail(lost)


def _solve_sum(n: int | None, sum_text: str, rules: object, players: int,
               strategy_path: str | None, misere: bool, export_path: str | None,
               chained: object, as_json: bool, threads: int | None, progress: bool | None,
               max_memory: int | None) -> None:
    """`solve --sum`: refuse what a sum does not take, solve, print."""
    if n is not None:
        raise InputError("--sum takes the games' n itself: give N1,N2 and no N")
    if players != 2 or misere:
        raise InputError("--sum adds Sprague-Grundy values: two players, normal play only "
                         "(no --players, no --misere)")
    if strategy_path is not None or export_path is not None or chained:
        raise InputError("--sum runs in-process and writes no file: no --strategy, "
                         "--export, --workers, --scheduler, --cluster, --checkpoint or "
                         "--shards")
    res = api.solve_sum(_sum_parts(sum_text), rules, max_memory=max_memory,
                        progress=resolve_progress(progress), threads=threads)
    click.echo(json.dumps(res.to_dict(), indent=2) if as_json else sum_table(res))


@click.command("check-strategy", cls=OneLineCommand)
@click.argument("file", type=click.Path(dir_okay=False))
@rules_option("rules_name", default=None,
              help_text="Rule set name or .toml rule file (default: the rule file embedded in "
                        "FILE, else the built-in rule set its header names).")
@json_option("Print one JSON object.")
def check_strategy_command(file: str, rules_name: str | None, as_json: bool) -> None:
    """Confirm that the strategy in FILE wins against every answer of the loser.

    \b
    Example:
      zeckenum check-strategy n80.zstrat.gz

    The check rebuilds the game's bins and moves from the rule set's definition (the
    rule file embedded in FILE, checked against its recorded hash) and replays every game;
    it does not use the solver.  Exit status 5 when the strategy does not win.
    """
    rep = check_strategy(read_strategy(file), rules_name)
    if as_json:
        click.echo(json.dumps({"file": file, "ok": True, **rep.__dict__}, indent=2))
        return
    click.echo(_table([
        ("file", file),
        ("result", f"OK: player {rep.winner} wins at n={rep.n} by following the strategy"
                   + (f" against the coalition of the other {rep.players - 1} players"
                      if rep.players > 2 else "")),
        ("winner positions", f"{rep.winner_positions:,}"),
        ("loser positions", f"{rep.loser_positions:,}"),
        ("longest game", plural(rep.longest_game, "move")),
        ("unused lines", str(rep.unused_lines)),
    ]))
