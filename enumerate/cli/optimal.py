"""Command-line front ends of optimal play: `solve` and `check-strategy` (click commands).

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
    progress_option,
    resolve_progress,
    rules_option,
)
from zeckenum.core.checks import SOLVE_MAX_PLAYERS
from zeckenum.core.text import plural
from zeckenum.errors import InputError, OutputError
from zeckenum.optimal.solve import SolveResult
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.optimal.strategyfile import check_strategy, read_strategy, write_strategy
from zeckenum.rules.catalogue import get_rules
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
        ("players", str(res.players)),
        ("states", f"{res.states:,}"),
    ]
    if res.players == 2:
        rows.append(("winner", f"player {res.winner}"))
        rows.append(("P-positions", f"{res.p_positions:,}"))
        rows.append(("N-positions", f"{res.states - res.p_positions:,}"))
        if res.winning_moves:
            rows.append(("start", "N-position: player 1 wins by " + ", ".join(res.winning_moves)))
        elif res.start_moves:
            rows.append(("start", "P-position: every move loses ("
                         + ", ".join(res.start_moves) + ")"))
        else:
            rows.append(("start", "no move: player 1 cannot move and loses"))
    else:
        for x, w in res.forced_win.items():
            rows.append((f"player {x}", "can force the last move" if w else "cannot force a win"))
        rows.append(("winner", f"player {res.winner}" if res.winner else "nobody can force a win"))
    rows.append(("time", f"{res.seconds:.3f} s ({res.states_per_second:,.0f} states/s)"))
    rows.append(("bit arrays", f"{res.peak_bits_bytes:,} bytes at peak"))
    if strategy_info:
        rows.append(("strategy", f"{strategy_info['file']}: "
                     f"{plural(strategy_info['positions'], 'position', sep=True)}, "
                     f"{plural(strategy_info['bytes'], 'byte', sep=True)}"))
    return _table(rows)


@click.command("solve", cls=OneLineCommand)
@n_argument()
@rules_option("rules_name")
@players_option(SOLVE_MAX_PLAYERS, short=False,
                extra="; with 3 or more, each player against the coalition of all others")
@click.option("--strategy", "strategy_path", type=click.Path(dir_okay=False), default=None,
              help="Write a winning strategy for the winner to this file (two players; "
                   "gzip-compressed when the name ends in .gz).")
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
@progress_option("Show a progress bar of the states (or level ranges) on stderr")
@max_memory_option
def solve_command(n: int, rules_name: str, players: int, strategy_path: str | None,
                  as_json: bool, workers: int | None, scheduler: str | None,
                  cluster: BatchSpec | None, checkpoint_dir: str | None,
                  shards: int | None, threads: int | None,
                  progress: bool | None, max_memory: int | None) -> None:
    """Who wins the game for N under optimal play (the last player to move wins).

    \b
    Examples:
      zeckenum solve 100
      zeckenum solve 400 --threads 2
      zeckenum solve 60 --players 3 --json
      zeckenum solve 80 --strategy n80.zstrat.gz
      zeckenum solve 500 --checkpoint ckpt-solve500 --progress
    """
    rules = get_rules(rules_name)
    info = None
    lost: OutputError | None = None
    chained = workers or scheduler or cluster or checkpoint_dir or shards
    if strategy_path is not None:
        if players != 2:
            raise InputError("--strategy is defined for two players only")
        if chained or progress:
            raise InputError("--strategy runs in-process; it does not take --workers, "
                             "--scheduler, --cluster, --checkpoint, --shards or --progress")
        check_output_file(strategy_path, "strategy file")
        strat, res = winning_strategy(n, rules, max_memory=max_memory, threads=threads)
        try:
            nbytes = write_strategy(strategy_path, strat, rules.bin_values(n), rules)
        except OutputError as exc:  # the strategy went to a rescue file; still report
            lost, nbytes = exc, 0
        info = {"file": strategy_path, "positions": strat.size, "bytes": nbytes}
    else:
        res = api.solve(n, rules, players, max_memory=max_memory,
                        progress=resolve_progress(progress), workers=workers,
                        scheduler=scheduler, checkpoint=checkpoint_dir, shards=shards,
                        threads=threads, cluster=cluster)
    if as_json:
        out = res.to_dict()
        if info is not None:
            out["strategy"] = info
        click.echo(json.dumps(out, indent=2))
    else:
        click.echo(solve_table(res, info))
    if lost is not None:
        fail(lost)


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
        ("result", f"OK: player {rep.winner} wins at n={rep.n} by following the strategy"),
        ("winner positions", f"{rep.winner_positions:,}"),
        ("loser positions", f"{rep.loser_positions:,}"),
        ("longest game", plural(rep.longest_game, "move")),
        ("unused lines", str(rep.unused_lines)),
    ]))
