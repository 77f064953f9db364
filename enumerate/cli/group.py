"""The `zeckenum` click group: every command, loaded on first use.

Commands live in the modules `LAZY` names and are imported only when they run (or when
`--help` lists them), so `zeckenum --version` imports no engine, numba, Dask or matplotlib.
Errors of every command go through the one handler (`cli.errors.exit_for`): one line
`zeckenum: error: ...` on stderr and the error's exit status.
"""

from __future__ import annotations

import click
from zeckenum import __version__
from zeckenum.cli.errors import OneLineGroup

LAZY = {
    "count": "zeckenum.cli.count:count_command",
    "random": "zeckenum.cli.randomplay:random_command",
    "solve": "zeckenum.cli.optimal:solve_command",
    "check-strategy": "zeckenum.cli.optimal:check_strategy_command",
    "test-policy": "zeckenum.cli.policy:test_policy_command",
    "games": "zeckenum.cli.view:games_command",
    "move-stats": "zeckenum.cli.view:movestats_command",
    "plot": "zeckenum.cli.view:plot_command",
    "report": "zeckenum.cli.view:report_command",
    "rules": "zeckenum.cli.rules:rules_group",
    "table": "zeckenum.cli.tables:table_command",
    "verify": "zeckenum.cli.tables:verify_command",
    "plan": "zeckenum.cli.tables:plan_command",
}
"""Command name -> "module:attribute" of its click command."""


@click.group(cls=OneLineGroup, lazy=LAZY,
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, "--version", prog_name="zeckenum")
def main() -> None:
    """Exact enumeration of the Zeckendorf game and its relatives.

    \b
    Examples:
      zeckenum count 100             all games at n = 100, by length
      zeckenum count 60 --json       the same as one JSON object
    """


if __name__ == "__main__":  # pragma: no cover
    main()
