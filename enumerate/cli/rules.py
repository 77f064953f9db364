"""`zeckenum rules ...`: list the shipped rule sets, check a rule file, show a rule set.

    zeckenum rules list                    built-in names, one line each
    zeckenum rules check FILE [--n N]      syntax, value of every move, layering at n
    zeckenum rules show NAME|FILE [--n N]  bins, moves, start, potential, end positions at n

Errors are one line on stderr with the error's exit status (2 for bad input), through the
one handler (`cli.errors.exit_for`), also when the group runs on its own.
"""

from __future__ import annotations

from pathlib import Path

import click
from zeckenum.analysis.describe import (
    bins_text,
    describe_template,
    layering_report,
    start_text,
    terminal_positions,
)
from zeckenum.cli.errors import OneLineGroup
from zeckenum.cli.options import position_option
from zeckenum.core.text import plural
from zeckenum.rules.catalogue import BUILTIN, get_rules
from zeckenum.rules.model import RuleSet
from zeckenum.rules.notation import annotate_position
from zeckenum.rules.rulefile import read_rule_file

SHOW_TERMINALS = 12
"""At most this many end positions are printed by `rules show`."""


def resolve(name_or_file: str) -> RuleSet:
    """A built-in name, or a rule file (any existing path, or a name ending in .toml)."""
    if name_or_file not in BUILTIN and Path(name_or_file).is_file():
        return read_rule_file(name_or_file)
    return get_rules(name_or_file)


def layering_lines(rules: RuleSet, n: int) -> list[str]:
    rep = layering_report(rules, n)
    return [
        f"layering at n={n} (value {rep.value}): {rep.method}",
        f"  weights {list(rep.weights)}, start level {rep.start_level}, "
        f"{plural(rep.moves, 'move')}, "
        f"{plural(rep.states, 'ranked state')}, rank table {plural(rep.table_bytes, 'byte')}",
    ]


@click.group("rules", cls=OneLineGroup)
def rules_group() -> None:
    """Rule sets: list the built-in ones, check a rule file, show a rule set.

    \b
    Examples:
      zeckenum rules list
      zeckenum rules show reversed --n 12
      zeckenum rules check my-variant.toml --n 30
    """


def _default_n(rules: RuleSet, n: int | None, default: int) -> int:
    """--n, or by default `default` (the value of the start position when there is one)."""
    if n is not None:
        return n
    return default if rules.position is None else rules.position_value(rules.position)


@rules_group.command("list")
def list_command() -> None:
    """Built-in rule sets, one line each.

    \b
    Example:
      zeckenum rules list
    """
    width = max(len(name) for name in BUILTIN)
    for name in sorted(BUILTIN):
        click.echo(f"{name:<{width}}  {BUILTIN[name].description}")


@rules_group.command("check")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--n", "n", type=click.IntRange(min=1), default=None,
              help="n at which termination and layering are checked (default 20; for a rule "
                   "set that starts at a position, its value)")
def check_command(file: str, n: int) -> None:
    """Check a rule file: syntax, the value of every move, and termination at n.

    \b
    Example:
      zeckenum rules check my-variant.toml --n 30
    """
    rules = read_rule_file(file)
    n = _default_n(rules, n, 20)
    click.echo(f"{file}: rule set {rules.name!r} ({rules.content_hash()})")
    click.echo("value: every move keeps the value for every index "
               f"({plural(len(rules.templates), 'template')})")
    for line in layering_lines(rules, n):
        click.echo(line)
    click.echo("ok")


@rules_group.command("show")
@click.argument("name_or_file")
@click.option("--n", "n", type=click.IntRange(min=1), default=None,
              help="n for the layering and the end positions (default 10; for a rule set "
                   "that starts at a position, its value)")
@position_option("Show the game started at this position (counts per bin, bin 1 first, "
                 "e.g. 3,1,0,2; README \"Positions\"): its level, layering and end "
                 "positions; --n, if given, must be its value.")
def show_command(name_or_file: str, n: int | None, position: str | None) -> None:
    """Show a rule set: bins, start, moves, level weights and end positions at n.

    \b
    Examples:
      zeckenum rules show standard
      zeckenum rules show enumerate/rules/rulesets/tribonacci.toml --n 20
      zeckenum rules show standard --position 3,1,0,2
    """
    rules = resolve(name_or_file)
    if position is not None:
        from zeckenum import api

        n, rules = api.game_at(n, rules, position)
    n = _default_n(rules, n, 10)
    click.echo(f"rule set {rules.name!r}  hash {rules.content_hash()}")
    if rules.description:
        click.echo(f"about: {rules.description}")
    click.echo(f"bins: {bins_text(rules)}")
    click.echo(f"start: {start_text(rules)}")
    click.echo("moves (B(k) is bin k):")
    for tpl in rules.templates:
        click.echo(f"  {describe_template(tpl)}")
    for line in layering_lines(rules, n):
        click.echo(line)
    ends = terminal_positions(rules, n)
    values = rules.bins_by_count(max((len(s) for s in ends), default=0))
    click.echo(f"end positions at n={n}: {len(ends)}")
    for s in ends[:SHOW_TERMINALS]:
        click.echo(f"  {annotate_position(s, values)}")
    if len(ends) > SHOW_TERMINALS:
        click.echo(f"  ... {len(ends) - SHOW_TERMINALS} more")
