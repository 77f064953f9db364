"""Command-line front end of strategy conjectures: `test-policy` (a click command).

Prints, for each n of the range, whether the policy player following the policy wins
against every reply, the length of the shortest refuting line where not, and the share of
the policy's choices that are winning moves; then the first failing n with its refuting
line (positions in the count-vector notation, `rules.notation`).  With --json, one JSON
object (`PolicyReport.to_dict`).  Malformed policy files and hooks: one line, exit 2.
"""

from __future__ import annotations

import json

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand
from zeckenum.cli.options import (
    POSITIVE,
    THREADS,
    json_option,
    max_memory_option,
    rules_option,
)
from zeckenum.core.text import plural
from zeckenum.errors import InputError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.notation import annotate_position


def _pct(x: float | None) -> str:
    return "-" if x is None else f"{100 * x:.1f}%"


def policy_table(rep, values: list[int]) -> str:  # noqa: ANN001 - a PolicyReport
    """The readable form of a `PolicyReport`: one row per n, then the first refutation."""
    lines = [f"policy {rep.policy} for player {rep.player}, rules {rep.rules}",
             "counted: positions where the policy player is to move and has a move, "
             "reachable when the policy is followed (opponent: any move)",
             f"{'n':>5}  {'verdict':<8} {'refuted in':>10}  {'counted':>8} {'N-pos':>8} "
             f"{'winning':>8} {'share':>7} {'of N':>7}"]
    for r in rep.rows:
        verdict = "wins" if r.wins else ("FAILS" if r.winnable else "lost*")
        ref = "" if r.wins else str(len(r.refutation))
        of_n = r.winning_choices / r.n_positions if r.n_positions else None
        lines.append(f"{r.n:>5}  {verdict:<8} {ref:>10}  {r.positions:>8} {r.n_positions:>8} "
                     f"{r.winning_choices:>8} {_pct(r.fraction):>7} {_pct(of_n):>7}")
    if any(not r.winnable for r in rep.rows):
        lines.append(f"lost*: player {rep.player} loses this n under optimal play, so every "
                     "policy fails there")
    first = rep.first_failure
    if first is None:
        lines.append(f"the policy wins at every n of {rep.rows[0].n}..{rep.rows[-1].n}")
    else:
        lines.append(f"first failure: n={first.n}; shortest refuting line "
                     f"({plural(len(first.refutation), 'move')}):")
        lines.append(f"  start            {annotate_position(first.start, values)}")
        for i, s in enumerate(first.refutation, 1):
            who = "policy" if s.player == rep.player else "opponent"
            lines.append(f"  {i:>3}. player {s.player} ({who:<8}) {s.move:<16} -> "
                         f"{annotate_position(s.after, values)}")
    return "\n".join(lines)


@click.command("test-policy", cls=OneLineCommand)
@click.argument("policy_file", metavar="FILE")
@click.option("--player", type=click.IntRange(1, 2), default=2, show_default=True,
              help="The player who follows the policy (1 moves first).")
@click.option("--from", "lo", type=POSITIVE, required=True, help="First n.")
@click.option("--to", "hi", type=POSITIVE, required=True, help="Last n.")
@rules_option("rules_name")
@click.option("--threads", type=THREADS, default=1, show_default=True,
              help="Threads of the classification behind the winning-move judgement.")
@json_option("Print one JSON object.")
@max_memory_option
def test_policy_command(policy_file: str, player: int, lo: int, hi: int, rules_name: str,
                        threads: int, as_json: bool, max_memory: int | None) -> None:
    """Does the policy in FILE win for its player against every reply, at each n?

    FILE is a policy file (zpolicy/1 TOML: ordered move preferences, see the README) or a
    Python file with a function choose(position, moves) (FILE.py, or FILE.py:NAME for
    another function name), which runs outside the compiled kernels (slow; small n).

    \b
    Examples:
      zeckenum test-policy examples/policies/split-high.toml --from 3 --to 150
      zeckenum test-policy mypolicy.py:choose --player 2 --from 3 --to 30 --json
    """
    if hi < lo:
        raise InputError(f"--to {hi} is below --from {lo}")
    rules = get_rules(rules_name)
    rep = api.policy_verdicts(policy_file, lo, hi, rules, player, max_memory=max_memory,
                              threads=threads)
    if as_json:
        click.echo(json.dumps(rep.to_dict(), indent=2))
    else:
        values = rules.bin_values(rules.game_value(hi))
        click.echo(policy_table(rep, values))
