"""Option types and options shared by the commands: bounded numbers, memory sizes,
--max-memory, --progress/--no-progress and --scheduler.

Every numeric option is bounded where it is declared, so a value beyond what a run can use
(n beyond 2^62, a 20-digit --simulate, --threads 10^20) is one line `zeckenum: error: ...`
and exit status 2 from click, before any work starts.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import Any

import click
from zeckenum.core.checks import MAX_N, MAX_PRIME_OFFSET, MAX_THREADS
from zeckenum.core.memory import parse_size
from zeckenum.errors import ZeckenumError

MAX_WORKERS = 4096
"""Most workers a command starts or plans for."""
MAX_SHARDS = 10**6
"""Most level ranges of a chained solve."""


class OneLineCommand(click.Command):
    """A command whose usage errors print one line `zeckenum: error: ...` and exit 2 also
    when it is run on its own (tests, notebooks), as under the `zeckenum` group."""

    def main(self, *args, **kwargs):  # noqa: ANN002, ANN003, ANN201
        if not kwargs.pop("standalone_mode", True):
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            rv = super().main(*args, standalone_mode=False, **kwargs)
        except click.UsageError as exc:
            click.echo(f"zeckenum: error: {exc.format_message()}", err=True)
            sys.exit(2)
        except click.exceptions.Abort:
            click.echo("zeckenum: aborted", err=True)
            sys.exit(130)
        if isinstance(rv, int) and not isinstance(rv, bool) and rv:
            sys.exit(rv)
        sys.exit(0)


class PositiveInt(click.ParamType):
    """A whole number from 1 to `most` (rejects 2.5, abc, 0, negatives and n > 2^62)."""

    name = "N"

    def __init__(self, most: int = MAX_N, what: str = "n") -> None:
        self.most = most
        self.what = what

    def convert(self, value, param, ctx):  # noqa: ANN001 - click's signature
        if isinstance(value, int) and not isinstance(value, bool):
            n = value
        else:
            text = str(value).strip()
            digits = text.lstrip("+-")
            if not digits.isdigit() or not digits.isascii() or len(digits) > 40:
                self.fail(f"{value!r} is not a whole number", param, ctx)
            n = int(text)
        if n < 1:
            self.fail(f"{self.what} must be at least 1, got {n}", param, ctx)
        if n > self.most:
            self.fail(f"{self.what} must be at most {self.most:,}, got {n}", param, ctx)
        return n


POSITIVE = PositiveInt()


class MemorySize(click.ParamType):
    """A memory size such as 800M, 4G, 1.5T (binary units)."""

    name = "SIZE"

    def convert(self, value, param, ctx):  # noqa: ANN001
        if isinstance(value, int) and not isinstance(value, bool):
            return value
        try:
            return parse_size(str(value))
        except ZeckenumError as exc:
            self.fail(str(exc), param, ctx)


def bounded(lo: int, hi: int) -> click.IntRange:
    """An integer option type from lo to hi inclusive."""
    return click.IntRange(min=lo, max=hi)


THREADS = bounded(1, MAX_THREADS)
WORKERS = bounded(1, MAX_WORKERS)
PRIME_OFFSET = bounded(0, MAX_PRIME_OFFSET)
SHARDS = bounded(1, MAX_SHARDS)


def max_memory_option(func: Callable[..., Any]) -> Callable[..., Any]:
    """--max-memory SIZE (default: what the machine has available)."""
    return click.option(
        "--max-memory", type=MemorySize(), default=None, metavar="SIZE",
        help="Memory limit, e.g. 4G (default: what the machine has available). A run whose "
             "forecast exceeds it is refused before it starts (exit status 3).",
    )(func)


def progress_option(what: str = "Show a progress bar on stderr") -> Callable[..., Any]:
    """--progress/--no-progress with default None: on when stderr is a terminal."""
    return click.option(
        "--progress/--no-progress", default=None,
        help=f"{what} (default: on when stderr is a terminal).",
    )


def resolve_progress(flag: bool | None) -> bool:
    """The --progress flag, or by default whether stderr is a terminal."""
    if flag is not None:
        return bool(flag)
    try:
        return bool(sys.stderr.isatty())
    except (AttributeError, ValueError):
        return False


def _check_scheduler(ctx, param, value):  # noqa: ANN001, ANN202 - click callback
    if value is None:
        return None
    from zeckenum.errors import InputError

    try:
        from zeckenum.cluster.backend import check_scheduler_address

        return check_scheduler_address(value)
    except InputError as exc:
        raise click.BadParameter(str(exc), ctx, param) from None


def scheduler_option(help_text: str) -> Callable[..., Any]:
    """--scheduler ADDRESS, checked (scheme, host:port) before anything connects."""
    return click.option("--scheduler", default=None, metavar="ADDRESS", help=help_text,
                        callback=_check_scheduler)
