"""Command line: a thin click layer over the Python API.

Every command turns `ZeckenumError`s (bad input, memory refusals, failed checks) into one
line on stderr and the error's exit status; click's own usage errors exit with status 2.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import click
from zeckenum import __version__
from zeckenum.cli.errors import fail
from zeckenum.cli.optimal import check_strategy_command, solve_command
from zeckenum.cli.options import (
    POSITIVE,
    PRIME_OFFSET,
    THREADS,
    WORKERS,
    MemorySize,  # noqa: F401 - part of this module's interface
    OneLineCommand,
    PositiveInt,  # noqa: F401 - part of this module's interface
    max_memory_option,
    progress_option,
    resolve_progress,
    scheduler_option,
)
from zeckenum.cli.randomplay import random_command
from zeckenum.cli.rules import rules_group
from zeckenum.cli.tables import plan_command, table_command, verify_command
from zeckenum.cli.view import games_command, movestats_command, plot_command, report_command
from zeckenum.core.text import deliver_result, plural
from zeckenum.counting.count import count
from zeckenum.counting.result import OUT_SUFFIXES, CountResult
from zeckenum.errors import (
    INTERNAL_ERROR_EXIT,
    InputError,
    MemoryRefused,
    OutputError,
    ZeckenumError,
)
from zeckenum.safeio import check_output_file

RULES_OPTION = click.option(
    "--rules", default="standard", show_default=True, metavar="NAME|FILE",
    help="Rule set: a built-in name (see `zeckenum rules list`) or a .toml rule file.",
)




class OneLineGroup(click.Group):
    """Group whose usage errors print a single line (no usage block) and exit 2."""

    def main(self, *args, **kwargs):  # noqa: ANN002, ANN003
        kwargs.setdefault("standalone_mode", True)
        try:
            return super().main(*args, standalone_mode=False, **{
                k: v for k, v in kwargs.items() if k != "standalone_mode"
            })
        except click.exceptions.NoArgsIsHelpError as exc:
            click.echo(exc.ctx.get_help())
            sys.exit(0)
        except click.UsageError as exc:
            click.echo(f"zeckenum: error: {exc.format_message()}", err=True)
            sys.exit(2)
        except click.exceptions.Abort:
            click.echo("zeckenum: aborted", err=True)
            sys.exit(130)
        except click.exceptions.Exit as exc:
            sys.exit(exc.exit_code)
        except ZeckenumError as exc:
            fail(exc)
        except MemoryError:
            click.echo("zeckenum: error: the machine ran out of memory (the forecast was too "
                       "low; lower --max-memory or n)", err=True)
            sys.exit(MemoryRefused.exit_code)
        except Exception as exc:  # noqa: BLE001 - the one place a bug becomes one line
            if os.environ.get("ZECKENUM_DEBUG"):
                raise
            click.echo(f"zeckenum: internal error: {exc.__class__.__name__}: {exc} "
                       "(a bug; ZECKENUM_DEBUG=1 shows the traceback)", err=True)
            sys.exit(INTERNAL_ERROR_EXIT)


@click.group(cls=OneLineGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="zeckenum")
def main() -> None:
    """Exact enumeration of the Zeckendorf game and its relatives.

    \b
    Examples:
      zeckenum count 100             all games at n = 100, by length
      zeckenum count 60 --json       the same as one JSON object
    """


def format_count(res: CountResult) -> str:
    """Readable census table for the terminal."""
    s = res.stats
    lines = [
        f"zeckenum count  rules={res.rules}  n={res.n}",
        "",
        f"  reachable states     {res.states:,}",
        f"  transitions (moves)  {res.transitions:,}",
        f"  games                {res.games}",
        f"  shortest game        {plural(res.shortest, 'move')} "
        f"({plural(res.shortest_games, 'game')})",
        f"  longest game         {plural(res.longest, 'move')} "
        f"({plural(res.longest_games, 'game')})",
        "",
        "  length  games",
    ]
    width = len(str(res.longest))
    for length, c in res.length_counts.items():
        lines.append(f"  {length:>{max(6, width)}}  {c}")
    lines += [
        "",
        f"  exact via {plural(len(res.primes), 'prime')} < 2^62 "
        f"+ 1 check prime, CRT; "
        f"{s.get('word_updates', 0):,} word updates in {s.get('seconds_total', 0):.2f} s",
    ]
    return "\n".join(lines)


def check_out_path(out: str) -> Path:
    """Refuse a `--out` FILE before any computation: a suffix other than .csv or .json
    (InputError, exit 2), or a path that cannot be written (OutputError, exit 6)."""
    path = Path(out)
    if path.suffix.lower() not in OUT_SUFFIXES:
        raise InputError(f"--out {out}: use a .csv or .json file name")
    return check_output_file(path, "--out file")


@main.command("count", cls=OneLineCommand)
@click.argument("n", type=POSITIVE)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of a table.")
@click.option(
    "--out", type=click.Path(dir_okay=False), default=None,
    help="Also write the spectrum to FILE: .csv (n,length,count) or .json (checked before "
         "counting; if the write fails the result goes to a rescue file, exit 6).",
)
@click.option("--threads", type=THREADS, default=None,
              help="Threads for the exact sweep (default: all cores).")
@click.option("--prime-offset", type=PRIME_OFFSET, default=0, show_default=True,
              help="Skip this many primes below 2^62 (use another prime set to re-check).")
@max_memory_option
@progress_option()
@RULES_OPTION
@click.option("--workers", type=WORKERS, default=None,
              help="Run the prime blocks on a local Dask cluster of K worker processes.")
@scheduler_option("Run the prime blocks on an existing Dask cluster (e.g. tcp://host:8786).")
@click.option("--checkpoint", "checkpoint_dir", type=click.Path(file_okay=False), default=None,
              help="Keep each finished block in DIR; rerunning resumes from it.")
def count_command(
    n, as_json, out, threads, prime_offset, max_memory, progress, rules, workers, scheduler,
    checkpoint_dir,
) -> None:
    """Count every game started from N (by default: the standard game, N tokens in F1).

    Prints reachable states, transitions, the exact number of games, the shortest and
    longest lengths and the number of games of each length.

    \b
    Examples:
      zeckenum count 30
      zeckenum count 200 --json --out spectrum200.csv
      zeckenum count 40 --rules reversed
      zeckenum count 180 --workers 2 --checkpoint ckpt180
    """
    lost: OutputError | None = None
    progress = resolve_progress(progress)
    try:
        out_path = check_out_path(out) if out else None
        if workers or scheduler or checkpoint_dir:
            from zeckenum.cluster.run import run_count

            res = run_count(
                n, rules, workers=workers, scheduler=scheduler, checkpoint_dir=checkpoint_dir,
                progress=progress, prime_offset=prime_offset, threads=threads,
                max_memory=max_memory,
            )
        else:
            res = count(
                n, rules, threads=threads, prime_offset=prime_offset, max_memory=max_memory,
                progress=progress,
            )
        if out_path is not None:
            try:
                deliver_result(out_path, res.file_text(out_path), "the spectrum")
            except OutputError as exc:  # rescued; still print the result, then exit 6
                lost = exc
    except ZeckenumError as exc:
        fail(exc)
    if as_json:
        click.echo(json.dumps(res.to_dict()))
    else:
        click.echo(format_count(res))
    if lost is not None:
        fail(lost)


main.add_command(rules_group)
main.add_command(random_command)
main.add_command(solve_command)
main.add_command(check_strategy_command)
main.add_command(games_command)
main.add_command(movestats_command)
main.add_command(plot_command)
main.add_command(report_command)
main.add_command(table_command)
main.add_command(verify_command)
main.add_command(plan_command)


if __name__ == "__main__":  # pragma: no cover
    main()
