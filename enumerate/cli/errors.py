"""The one error handler of the command line.

Every way a command can end goes through `exit_for`: a `ZeckenumError` becomes
`zeckenum: error: <message>` on stderr and the error's exit status (2 bad input, 3 memory
refused, 5 a check failed, 6 output not written, ...; see `zeckenum.errors`); click's usage
errors exit 2 with one line (no usage block); Ctrl-C exits 130; a bug exits 70 with one
line (`ZECKENUM_DEBUG=1` shows the traceback).  No traceback reaches the user.

`OneLineGroup` (the `zeckenum` group) and `OneLineCommand` (every command, so that a
command run on its own, in tests or notebooks, behaves as under the group) both run click
with `standalone_mode=False` and hand whatever escapes to `exit_for`.  Invariant: this
module imports only click and `zeckenum.errors` (the `zeckenum --version` start-up path).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from typing import Any, NoReturn

import click
from zeckenum.errors import INTERNAL_ERROR_EXIT, MemoryRefused, ZeckenumError

ABORTED_EXIT = 130
"""Exit status of a run stopped by Ctrl-C (common practice: 128 + SIGINT)."""


def fail(exc: ZeckenumError) -> NoReturn:
    """Print a ZeckenumError as one line and exit with its status."""
    click.echo(f"zeckenum: error: {exc}", err=True)
    sys.exit(exc.exit_code)


def exit_for(exc: BaseException) -> NoReturn:
    """The one translation of anything that escapes a command into one line and a status."""
    if isinstance(exc, click.exceptions.NoArgsIsHelpError):
        click.echo(exc.ctx.get_help())
        sys.exit(0)
    if isinstance(exc, click.UsageError):
        click.echo(f"zeckenum: error: {exc.format_message()}", err=True)
        sys.exit(2)
    if isinstance(exc, click.exceptions.Abort):
        click.echo("zeckenum: aborted", err=True)
        sys.exit(ABORTED_EXIT)
    if isinstance(exc, click.exceptions.Exit):
        sys.exit(exc.exit_code)
    if isinstance(exc, ZeckenumError):
        fail(exc)
    if isinstance(exc, MemoryError):
        click.echo("zeckenum: error: the machine ran out of memory (the forecast was too "
                   "low; lower --max-memory or n)", err=True)
        sys.exit(MemoryRefused.exit_code)
    if not isinstance(exc, Exception) or os.environ.get("ZECKENUM_DEBUG"):
        raise exc  # SystemExit, KeyboardInterrupt, or a bug shown in full on request
    click.echo(f"zeckenum: internal error: {exc.__class__.__name__}: {exc} "
               "(a bug; ZECKENUM_DEBUG=1 shows the traceback)", err=True)
    sys.exit(INTERNAL_ERROR_EXIT)


def run_one_line(main: Callable[..., Any], args: tuple, kwargs: dict) -> NoReturn:
    """Run click's `main` without its own error printing and exit through `exit_for`;
    a non-zero int returned by the command is the exit status."""
    try:
        rv = main(*args, standalone_mode=False, **kwargs)
    except BaseException as exc:  # noqa: BLE001 - exit_for re-raises what it does not own
        exit_for(exc)
    sys.exit(rv if isinstance(rv, int) and not isinstance(rv, bool) and rv else 0)


class OneLineCommand(click.Command):
    """A command whose errors print one line `zeckenum: error: ...` also when it is run on
    its own (tests, notebooks), as under the `zeckenum` group.  `standalone_mode=False`
    is honoured (exceptions propagate to the caller)."""

    def main(self, *args, **kwargs):  # noqa: ANN002, ANN003, ANN201 - click's signature
        if not kwargs.pop("standalone_mode", True):
            return super().main(*args, standalone_mode=False, **kwargs)
        run_one_line(super().main, args, kwargs)


class OneLineGroup(click.Group):
    """A group with the same one-line errors (always: the `zeckenum` entry point).

    `lazy` maps a command name to "module:attribute": the module is imported only when the
    command runs or help lists it, so `zeckenum --version` imports no engine."""

    command_class = OneLineCommand

    def __init__(self, *args, lazy: dict[str, str] | None = None, **kwargs) -> None:  # noqa: ANN002, ANN003
        super().__init__(*args, **kwargs)
        self.lazy = dict(lazy or {})

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(super().list_commands(ctx)) | set(self.lazy))

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in self.commands and name in self.lazy:
            import importlib

            module, attr = self.lazy[name].split(":")
            self.add_command(getattr(importlib.import_module(module), attr), name)
        return super().get_command(ctx, name)

    def main(self, *args, **kwargs):  # noqa: ANN002, ANN003, ANN201 - click's signature
        kwargs.pop("standalone_mode", None)
        run_one_line(super().main, args, kwargs)

