"""Every option and argument the commands share, declared once: types (one `POSITIVE`,
bounded integers, memory sizes) and decorators (`n_argument`, `position_option`,
`rules_option`,
`backend_options`, `players_option`, `model_option`, `json_option`, `max_memory_option`,
`progress_option`, `probe_option`).

Every numeric option is bounded where it is declared, so a value beyond what a run can use
(n beyond 2^62, a 20-digit --simulate, --threads 10^20) is one line `zeckenum: error: ...`
and exit status 2 from click, before any work starts.  A command passes its own help text
where the meaning differs ("Exact mode: ..."); name, type, default and destination are
fixed here.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import Any

import click
from zeckenum.core.checks import (
    MAX_N,
    MAX_PRIME_OFFSET,
    MAX_THREADS,
    RANDOM_MODELS,
    parse_duration,
)
from zeckenum.core.memory import parse_size
from zeckenum.errors import ZeckenumError

Decorator = Callable[[Callable[..., Any]], Callable[..., Any]]

MAX_WORKERS = 4096
"""Most workers a command starts or plans for."""
MAX_SHARDS = 10**6
"""Most level ranges of a chained solve."""


class PositiveInt(click.ParamType):
    """A whole number from 1 to `most` (rejects 2.5, abc, 0, negatives and n > 2^62)."""

    name = "N"

    def __init__(self, most: int = MAX_N, what: str = "n") -> None:
        self.most = most
        self.what = what

    def convert(self, value, param, ctx):  # noqa: ANN001, ANN201 - click's signature
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
"""The one type of every n (argument N, --from, --to, --range A B of `random`)."""


class MemorySize(click.ParamType):
    """A memory size such as 800M, 4G, 1.5T (binary units)."""

    name = "SIZE"

    def convert(self, value, param, ctx):  # noqa: ANN001, ANN201
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
SEED = bounded(0, 2**63 - 1)
PROBE = bounded(20, 400)


class Duration(click.ParamType):
    """A time budget such as 90s, 30m, 1h, 2d or plain seconds (`core.checks.parse_duration`)."""

    name = "TIME"

    def convert(self, value, param, ctx):  # noqa: ANN001, ANN201
        try:
            return parse_duration(value)
        except ZeckenumError as exc:
            self.fail(str(exc), param, ctx)


DURATION = Duration()
"""A probe's n (`cluster.predict.check_probe`): enough work to time, about a second."""


def n_argument(required: bool = True) -> Decorator:
    """The argument N (a `POSITIVE`)."""
    return click.argument("n", type=POSITIVE, required=required)


POSITION_HELP = (
    "Start at this position instead of the rule set's start: counts per bin, bin 1 first, "
    "e.g. 3,1,0,2 (README \"Positions\"). N may then be left out; if given it must equal "
    "the position's value.")


def position_option(help_text: str = POSITION_HELP) -> Decorator:
    """--position COUNTS (destination `position`; parsed and checked by `api.game_at`, so
    a bad position is one line and exit status 2 like every other bad input)."""
    return click.option("--position", "position", default=None, metavar="COUNTS",
                        help=help_text)


RULES_HELP = "Rule set: a built-in name (see `zeckenum rules list`) or a .toml rule file."


def rules_option(dest: str = "rules", default: str | None = "standard",
                 help_text: str = RULES_HELP) -> Decorator:
    """--rules NAME|FILE (default: the standard game)."""
    return click.option("--rules", dest, default=default, show_default=default is not None,
                        metavar="NAME|FILE", help=help_text)


def json_option(help_text: str = "Print one JSON object instead of a table.") -> Decorator:
    """--json (destination `as_json`)."""
    return click.option("--json", "as_json", is_flag=True, help=help_text)


def players_option(most: int, short: bool = True, extra: str = "") -> Decorator:
    """--players P (2..most, default 2); `-p` too where `short`."""
    names = ("--players", "-p") if short else ("--players",)
    return click.option(*names, type=bounded(2, most), default=2, show_default=True,
                        help=f"Number of players P (2..{most}){extra}.")


def model_option(help_text: str = "moves: uniform over legal moves; pairs: uniform over "
                                  "movable token pairs.") -> Decorator:
    """--model moves|pairs (default moves)."""
    return click.option("--model", type=click.Choice(RANDOM_MODELS), default="moves",
                        show_default=True, help=help_text)


def max_memory_option(func: Callable[..., Any]) -> Callable[..., Any]:
    """--max-memory SIZE (default: what the machine has available)."""
    return click.option(
        "--max-memory", type=MemorySize(), default=None, metavar="SIZE",
        help="Memory limit, e.g. 4G (default: what the machine has available). A run whose "
             "forecast exceeds it is refused before it starts (exit status 3).",
    )(func)


def progress_option(what: str = "Show a progress bar on stderr") -> Decorator:
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


def scheduler_option(help_text: str) -> Decorator:
    """--scheduler ADDRESS, checked (scheme, host:port) before anything connects."""
    return click.option("--scheduler", default=None, metavar="ADDRESS", help=help_text,
                        callback=_check_scheduler)


def workers_option(help_text: str, default: int | None = None) -> Decorator:
    """--workers K (1..MAX_WORKERS)."""
    return click.option("--workers", type=WORKERS, default=default,
                        show_default=default is not None, help=help_text)


def checkpoint_option(help_text: str) -> Decorator:
    """--checkpoint DIR (destination `checkpoint_dir`)."""
    return click.option("--checkpoint", "checkpoint_dir", type=click.Path(file_okay=False),
                        default=None, help=help_text)


def backend_options(workers: str, scheduler: str, checkpoint: str | None = None) -> Decorator:
    """--workers K, --scheduler ADDRESS and (with a help text) --checkpoint DIR: where a run
    goes (`zeckenum.api` picks the backend from them)."""
    decorators = [workers_option(workers), scheduler_option(scheduler)]
    if checkpoint is not None:
        decorators.append(checkpoint_option(checkpoint))

    def apply(func: Callable[..., Any]) -> Callable[..., Any]:
        for deco in reversed(decorators):
            func = deco(func)
        return func

    return apply


def probe_option(what: str, default: int | None) -> Decorator:
    """--probe N of a forecast's calibration run (20..400)."""
    return click.option("--probe", "probe_n", type=PROBE, default=default,
                        show_default=default is not None, help=what)
