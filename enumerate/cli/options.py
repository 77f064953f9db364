"""Every option and argument the commands share, declared once: types (one `POSITIVE`,
bounded integers, memory sizes) and decorators (`n_argument`, `position_option`,
`rules_option`, `backend_options`, `cluster_options`, `players_option`, `model_option`,
`json_option`, `max_memory_option`, `progress_option`, `probe_option`).

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


BATCH_KINDS = ("slurm", "pbs", "sge", "lsf")
"""`--cluster` kinds: `zeckenum.cluster.batch.BATCH_KINDS`, repeated here because importing
`zeckenum.cluster` loads the engines (numba) and `--help` must not (a test holds the two
equal)."""


class Walltime(click.ParamType):
    """A job's walltime: HH:MM:SS, HH:MM, or a duration such as 90m, 2h, 1d."""

    name = "TIME"

    def convert(self, value, param, ctx):  # noqa: ANN001, ANN201
        import re

        m = re.fullmatch(r"\s*(\d{1,5}):([0-5]\d)(?::([0-5]\d))?\s*", str(value))
        if m:
            seconds = int(m.group(1)) * 3600 + int(m.group(2)) * 60 + int(m.group(3) or 0)
            if seconds > 0:
                return float(seconds)
            self.fail("a walltime must be longer than 0", param, ctx)
        try:
            return parse_duration(value)
        except ZeckenumError as exc:
            self.fail(str(exc), param, ctx)


class JobCount(click.ParamType):
    """--jobs K (a fixed number of jobs) or MIN:MAX (adaptive), as (least, most); the
    rule of `zeckenum.cluster.batch.parse_jobs` (MAX_WORKERS = its MAX_JOBS)."""

    name = "K|MIN:MAX"

    def convert(self, value, param, ctx):  # noqa: ANN001, ANN201
        if isinstance(value, tuple):
            return value
        import re

        m = re.fullmatch(r"\s*(\d{1,5})\s*(?::\s*(\d{1,5})\s*)?", str(value))
        if not m:
            self.fail(f"{value!r}: give a number of jobs K, or MIN:MAX for adaptive "
                      "scaling (e.g. 2 or 1:10)", param, ctx)
        lo = int(m.group(1))
        hi = int(m.group(2)) if m.group(2) is not None else lo
        if not 1 <= lo <= hi <= MAX_WORKERS:
            self.fail(f"{value!r}: need 1 <= MIN <= MAX <= {MAX_WORKERS}", param, ctx)
        return lo, hi


_BATCH_OPTIONS = ("cluster_kind", "jobs", "job_cores", "job_memory", "walltime", "queue",
                  "account", "pending_timeout")


def cluster_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """--cluster slurm|pbs|sge|lsf and the job request (--jobs, --job-cores, --job-memory,
    --walltime, --queue, --account, --pending-timeout), folded into one keyword `cluster`
    of the command: a `zeckenum.cluster.batch.BatchSpec`, or None without --cluster.
    What is not given comes from the Dask config (dask-jobqueue's `jobqueue.<kind>.*`)."""
    import functools

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        values = {k: kwargs.pop(k) for k in _BATCH_OPTIONS}
        kwargs["cluster"] = batch_from_options(**values)
        return func(*args, **kwargs)

    decorators = [
        click.option("--cluster", "cluster_kind", type=click.Choice(BATCH_KINDS),
                     default=None,
                     help="Run the workers as batch jobs of this scheduler (dask-jobqueue); "
                          "job settings not given below come from the Dask config "
                          "(jobqueue.<kind>.cores, memory, walltime, queue, account)."),
        click.option("--jobs", type=JobCount(), default=None,
                     help="With --cluster: K jobs, or MIN:MAX to scale between MIN and MAX "
                          "jobs with the work waiting (default 1)."),
        click.option("--job-cores", type=bounded(1, 1024), default=None,
                     help="With --cluster: cores per job, one worker process each."),
        click.option("--job-memory", type=MemorySize(), default=None, metavar="SIZE",
                     help="With --cluster: memory per job (default: the Dask config, else "
                          "--max-memory, or the run's forecast, per worker x cores plus "
                          "256M each)."),
        click.option("--walltime", type=Walltime(), default=None,
                     help="With --cluster: walltime per job, HH:MM:SS or e.g. 2h."),
        click.option("--queue", default=None, metavar="NAME",
                     help="With --cluster: queue (SLURM partition) of the jobs."),
        click.option("--account", default=None, metavar="NAME",
                     help="With --cluster: account (SGE project) the jobs are charged to."),
        click.option("--pending-timeout", type=DURATION, default=None,
                     help="With --cluster: stop (exit 7) when no job has started after this "
                          "long, e.g. 30m (default: the stall timeout, 600s)."),
    ]
    for deco in reversed(decorators):
        wrapper = deco(wrapper)
    return wrapper


def batch_from_options(cluster_kind: str | None, jobs: tuple[int, int] | None,
                       job_cores: int | None, job_memory: int | None,
                       walltime: float | None, queue: str | None, account: str | None,
                       pending_timeout: float | None):  # noqa: ANN201 - a BatchSpec or None
    """The BatchSpec of --cluster and its job options (None without --cluster; a job
    option without --cluster is a usage error)."""
    given = [name for name, v in (("--jobs", jobs), ("--job-cores", job_cores),
                                  ("--job-memory", job_memory), ("--walltime", walltime),
                                  ("--queue", queue), ("--account", account),
                                  ("--pending-timeout", pending_timeout)) if v is not None]
    if cluster_kind is None:
        if given:
            raise click.UsageError(f"{', '.join(given)} only apply with --cluster "
                                   "slurm|pbs|sge|lsf")
        return None
    from zeckenum.cluster.batch import BatchSpec

    lo, hi = jobs if jobs is not None else (None, None)
    try:
        return BatchSpec(cluster_kind, jobs=lo, max_jobs=hi, cores=job_cores,
                         memory=job_memory, walltime=walltime, queue=queue,
                         account=account, pending_timeout=pending_timeout)
    except ZeckenumError as exc:
        raise click.UsageError(str(exc)) from None


def backend_options(workers: str, scheduler: str, checkpoint: str | None = None) -> Decorator:
    """--workers K, --scheduler ADDRESS, --cluster KIND with its job options
    (`cluster_options`, destination `cluster`) and (with a help text) --checkpoint DIR:
    where a run goes (`zeckenum.api` picks the backend from them)."""
    decorators = [workers_option(workers), scheduler_option(scheduler), cluster_options]
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
