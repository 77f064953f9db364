"""Command-line front ends for seeing results: `games`, `move-stats`, `plot`, `report`.

Thin click layers over `zeckenum.api` (games, move statistics, the data of figures) and
`zeckenum.present` (figures, the HTML report), which only draws.  Errors a user can
cause come out as one line on stderr with the error's exit code (2 for bad input).
"""

from __future__ import annotations

import json
import sys
from fractions import Fraction
from pathlib import Path
from typing import TYPE_CHECKING

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand
from zeckenum.cli.options import (
    json_option,
    max_memory_option,
    model_option,
    n_argument,
    position_option,
    rules_option,
)
from zeckenum.core.text import plural
from zeckenum.errors import CheckFailed, InputError

if TYPE_CHECKING:  # pragma: no cover - types only
    from zeckenum.analysis.rundata import RunData


@click.command("games", cls=OneLineCommand)
@n_argument(required=False)
@position_option()
@rules_option()
@click.option("--near", default=3, show_default=True, type=click.IntRange(1, 100),
              help="How many lengths next to each extreme to list with their game counts.")
@json_option("One JSON object instead of text.")
@max_memory_option
def games_command(n: int | None, position: str | None, rules: str, near: int, as_json: bool,
                  max_memory: int | None) -> None:
    """An explicit shortest and longest game at N, as move lists with the state after each
    move; the number of games at the lengths near the extremes; and (standard game) the
    greedy rule "split whenever possible, otherwise combine the smallest pair".

    \b
    Examples:
      zeckenum games 10
      zeckenum games 40 --near 5 --json
      zeckenum games --position 3,1,0,2
    """
    from zeckenum.analysis.extremal import format_game

    n, rules = api.game_at(n, rules, position)
    rep = api.games(n, rules, near, max_memory=max_memory)
    if as_json:
        click.echo(json.dumps(rep.to_dict(), indent=1))
        return
    short, long, ext, greedy = rep.shortest, rep.longest, rep.near, rep.greedy
    start = api.start_label(rules)
    click.echo(f"zeckenum games  rules={rep.rules}  n={n}"
               + (f"  from position {start}" if start else "") + "\n")
    click.echo(format_game(short) + "\n")
    click.echo(format_game(long) + "\n")
    click.echo("games at the lengths near the extremes")
    for label, items in (("shortest", ext["shortest"]), ("longest", ext["longest"])):
        click.echo(f"  {label}: " + ", ".join(f"{plural(k, 'move')}: {v}" for k, v in items))
    if greedy is not None:
        verdict = "equals" if greedy.length == long.length else "DIFFERS FROM"
        click.echo(
            f"\ngreedy rule (split whenever possible, else combine the smallest pair; "
            f"\"Bounds on Zeckendorf Games\", 2020, arXiv:2009.09510): "
            f"{plural(greedy.length, 'move')}, "
            f"{verdict} the longest ({long.length})")


@click.command("move-stats", cls=OneLineCommand)
@n_argument(required=False)
@position_option()
@rules_option()
@click.option("--move", "chosen", default=None,
              help="Also print the distribution of this move's count (a move such as "
                   "combine@2, a move type such as split: all its bins, or a "
                   "prefix ending in * such as 'combine*').")
@model_option("Random model for the expected counts.")
@click.option("--no-random", is_flag=True, help="Skip the random-play expected counts.")
@json_option("One JSON object instead of text.")
@max_memory_option
def movestats_command(n: int | None, position: str | None, rules: str, chosen: str | None,
                      model: str, no_random: bool,
                      as_json: bool, max_memory: int | None) -> None:
    """For every move at N: its total number of occurrences over all games and its exact
    expected count in a random game; the linear invariants of the move counts, derived from
    the moves' effect vectors and verified on the exact totals.

    \b
    Examples:
      zeckenum move-stats 20
      zeckenum move-stats 30 --move split --model pairs
      zeckenum move-stats --position 3,1,0,2
    """
    from zeckenum.analysis.movestats import format_invariants

    n, rules = api.game_at(n, rules, position)
    rep = api.move_stats(n, rules, move=chosen, model=model, random=not no_random,
                         max_memory=max_memory)
    if as_json:
        click.echo(json.dumps(rep.to_dict(), indent=1))
        if rep.failures:
            sys.exit(CheckFailed.exit_code)
        return
    totals, expected, inv, bad = rep.totals, rep.expected, rep.invariants, rep.failures
    dist, rdist = rep.distribution, rep.random_distribution
    start = api.start_label(rules)
    click.echo(f"zeckenum move-stats  rules={rep.rules}  n={n}  games={totals.games}"
               + (f"  from position {start}" if start else "") + "\n")
    w = max((len(m) for m in totals.move_names), default=4)
    click.echo(f"  {'move'.ljust(w)}  {'total over all games':>26}  {'per game':>10}"
               + ("" if expected is None else f"  {'expected (' + model + ')':>18}"))
    for m, t in totals.as_dict().items():
        line = f"  {m.ljust(w)}  {t:>26}  {float(Fraction(t, totals.games)):>10.4f}"
        if expected is not None:
            line += f"  {float(expected[m]):>18.4f}"
        click.echo(line)
    click.echo("\n" + format_invariants(inv))
    click.echo("  verified on the exact totals" + ("" if expected is None else
                                                    " and the expected counts")
               + (": all hold" if not bad else ": FAILED\n    " + "\n    ".join(bad)))
    if dist is not None:
        click.echo(f"\ndistribution of #{chosen} over all games"
                   + ("" if rdist is None else f" and under random play ({model})"))
        for k, v in dist.items():
            extra = "" if rdist is None else f"  {float(rdist.get(k, 0)):.6f}"
            click.echo(f"  {k:>4}  {v}{extra}")
    if bad:
        sys.exit(CheckFailed.exit_code)


def _load_data(table: str | None, lo_hi: tuple[int, int] | None, rules: str,
               random_upto: int, solve_upto: int = 0, grundy: bool = False) -> RunData:
    """The data of a figure or report: a table read back (random play added up to
    `random_upto`, optimal play up to `solve_upto`) or a fresh computation over A..B."""
    from zeckenum.analysis.rundata import add_optimal, add_random
    from zeckenum.present.plots import read_table
    from zeckenum.tables.format import is_table

    if table and lo_hi:
        raise InputError("give either --table DIR or --range A B, not both")
    if table:
        if not is_table(table):
            raise InputError(f"{table}: no manifest.json and summary.csv (not a zeckenum table)")
        data = add_random(read_table(table), random_upto)
        return add_optimal(data, solve_upto, grundy) if solve_upto else data
    if lo_hi:
        return api.collect(lo_hi[0], lo_hi[1], rules, random_upto=random_upto,
                           solve_upto=solve_upto, grundy=grundy)
    raise InputError("give --table DIR (a directory from `zeckenum table`) or --range A B")


@click.command("plot", cls=OneLineCommand)
@click.argument("kind", type=click.Choice(["distribution", "shape", "wins", "moments",
                                           "gaussian"]))
@click.option("--table", "table", type=click.Path(), default=None,
              help="Read the numbers from this table directory (`zeckenum table --out`).")
@click.option("--range", "lo_hi", type=(int, int), default=None,
              help="Compute the numbers afresh for A <= n <= B.")
@click.option("--n", "n", type=int, default=None,
              help="The n of the 'distribution' plot (default: the largest).")
@click.option("--source", type=click.Choice(["games", "random"]), default="games",
              show_default=True, help="Law of the 'shape' plot: all games or random play.")
@rules_option(help_text="Built-in rule set name or a .toml rule file (with --range).")
@click.option("--random-upto", type=int, default=80, show_default=True,
              help="Compute random-play laws only for n up to this.")
@click.option("--out", "out", default=None,
              help="Output prefix: writes PREFIX.png and PREFIX.svg (default: KIND).")
def plot_command(kind: str, table: str | None, lo_hi: tuple[int, int] | None, n: int | None,
                 source: str, rules: str, random_upto: int, out: str | None) -> None:
    """Draw one figure (PNG and SVG) from a table directory or a fresh computation.

    \b
    KIND: distribution (length law of all games and of random play at one n, each with the
    normal curve), shape (standardised laws for several n), wins (player 1's win chance),
    moments (mean and variance with fitted leading terms), gaussian (distances to the
    normal law, skewness, kurtosis).
    \b
    Examples:
      zeckenum plot distribution --range 1 40 --n 40
      zeckenum plot moments --table tables/std --out figs/moments
    """
    from zeckenum.present.plots import figure_paths, make_figure, save_figure
    from zeckenum.safeio import check_output_dir, check_output_file

    for path in figure_paths(out or kind):  # before computing: a typo costs nothing
        check_output_dir(path.parent, "figure folder")
        check_output_file(path, "figure")
    data = _load_data(table, lo_hi, rules, random_upto)
    fig = make_figure(kind, data, n=n, source=source)
    for path in save_figure(fig, out or kind):
        click.echo(str(path))


@click.command("report", cls=OneLineCommand)
@click.argument("folder", type=click.Path())
@click.option("--range", "lo_hi", type=(int, int), default=None,
              help="No table in FOLDER: compute A <= n <= B afresh and write the page there.")
@rules_option(help_text="Built-in rule set name or a .toml rule file (with --range; a "
                        "table carries its own rule file).")
@click.option("--random-upto", type=int, default=80, show_default=True,
              help="Compute random-play laws only for n up to this.")
@click.option("--detail", "detail_n", type=int, default=None,
              help="The n of the extremal games and move statistics (default: the largest "
                   "n <= 60).")
@click.option("--solve-upto", type=click.IntRange(0, 10**6), default=150, show_default=True,
              help="Solve optimal play (winner, P-positions) for n up to this (0: only what "
                   "a table holds).")
@click.option("--grundy", is_flag=True,
              help="Also show the Sprague-Grundy value of each start (asks the solver).")
def report_command(folder: str, lo_hi: tuple[int, int] | None, rules: str, random_upto: int,
                   detail_n: int | None, solve_upto: int, grundy: bool) -> None:
    """Write FOLDER/report.html, one self-contained page (figures, tables, provenance, how
    to reproduce), from the table in FOLDER or from a fresh computation; prints its path.

    A table is checked as `verify` does short of recomputing (exit 5 when it fails) and
    its rule set is rebuilt from the rule file in its manifest.  The output is checked
    before computing and written atomically; exit 6 when it cannot be written (a page
    already rendered is printed on standard output instead).

    \b
    Examples:
      zeckenum report tables/std
      zeckenum report runs/small --range 1 40
    """
    from zeckenum.analysis.rundata import run_detail
    from zeckenum.present.report import REPORT_NAME, write_report
    from zeckenum.safeio import check_output_dir, check_output_file
    from zeckenum.tables.format import is_table

    table = folder if is_table(folder) else None
    if table is None and lo_hi is None:
        raise InputError(f"{folder}: not a zeckenum table; give --range A B to compute afresh")
    # before computing: the page must be writable where it goes
    if table is None:
        check_output_dir(folder, "report folder")
    check_output_file(Path(folder) / REPORT_NAME, "report")
    data = _load_data(table, None if table else lo_hi, rules, random_upto, solve_upto, grundy)
    detail = run_detail(data, detail_n)
    click.echo(str(write_report(data, Path(folder), detail)))
