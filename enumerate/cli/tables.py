"""Command line of the Dask layer: `table`, `verify` and the `plan` group (`plan count`,
`plan random`, `plan solve`), registered by `cli.main`.

Each command is a thin layer over `zeckenum.cluster`; `ZeckenumError`s become one line on
stderr and the error's exit status (`cli.fail`).
"""

from __future__ import annotations

import json

import click
from zeckenum.cli.errors import fail
from zeckenum.cli.options import (
    POSITIVE,
    WORKERS,
    OneLineCommand,
    bounded,
    max_memory_option,
    progress_option,
    resolve_progress,
    scheduler_option,
)
from zeckenum.core.text import plural
from zeckenum.errors import InputError, ZeckenumError
from zeckenum.optimal.solve import MAX_PLAYERS as SOLVE_MAX_PLAYERS
from zeckenum.randomplay.exact import MAX_PLAYERS, MODELS

# No import from `cli` at module level: `cli` imports this module to register the commands.
PROBE = bounded(20, 400)
"""A probe's n (`cluster.predict.check_probe`): enough work to time, about a second."""



_backend_help = {
    "workers": "Start a local Dask cluster of K worker processes (127.0.0.1).",
    "scheduler": "Use an existing Dask cluster at this scheduler address.",
}


@click.command("table", cls=OneLineCommand)
@click.option("--from", "lo", type=POSITIVE, required=True, help="First n.")
@click.option("--to", "hi", type=POSITIVE, required=True, help="Last n (inclusive).")
@click.option("--what", default="count", show_default=True,
              help="Comma-separated: count, solve, random.")
@click.option("--out", type=click.Path(file_okay=False), required=True,
              help="Directory to publish: new, empty, or a partial/complete table of the "
                   "same rules and kinds, which is resumed.")
@click.option("--rules", default="standard", show_default=True, help="Rule set name or file.")
@click.option("--workers", type=WORKERS, default=None,
              help=_backend_help["workers"])
@scheduler_option(_backend_help["scheduler"])
@click.option("--checkpoint", "checkpoint_dir", type=click.Path(file_okay=False), default=None,
              help="Keep finished shards here; a rerun resumes from them.")
@progress_option()
@max_memory_option
def table_command(lo, hi, what, out, rules, workers, scheduler, checkpoint_dir, progress,  # noqa: ANN001
                  max_memory):
    """Publish exact tables for every n from --from to --to into a directory.

    \b
    Writes summary.csv, spectra.csv (n,length,count), one "n value" .seq file per column,
    and manifest.json (the rule file itself and its hash, version, parameters, date,
    SHA-256 of each file).  --out is checked before anything is computed (exit 6 when it
    cannot be written); finished rows are kept in DIR/.rows, so a rerun after a crash, or
    with a larger range, computes only what is missing.  A directory written for other
    rules or kinds is refused (exit 2).
    Example:
      zeckenum table --from 1 --to 80 --what count --out table80 --workers 2
    """
    from zeckenum.tables.build import build_table, parse_what

    try:
        kinds = parse_what(what)
        if hi < lo:
            raise InputError(f"--to must be at least --from, got --from {lo} --to {hi}")
        if max_memory is not None or scheduler is None:
            refuse_table(hi, kinds, rules, max_memory)
        manifest = build_table(lo, hi, kinds, out, rules, workers=workers,
                               scheduler=scheduler, checkpoint_dir=checkpoint_dir,
                               progress=resolve_progress(progress))
    except ZeckenumError as exc:
        fail(exc)
    click.echo(f"zeckenum table: n={lo}..{hi} ({', '.join(kinds)}) -> {out}: "
               f"{plural(len(manifest['files']), 'file')} + manifest.json")


def refuse_table(hi: int, kinds: list[str], rules: str, max_memory: int | None) -> None:
    """The up-front refusals of the largest n of a table, for each kind it computes (the
    forecasts grow with n): a table that cannot reach its last n does not start."""
    from zeckenum.core.memory import resolve_limit
    from zeckenum.counting.count import refuse_count
    from zeckenum.optimal.solve import needs_reach, solve_space
    from zeckenum.randomplay.exact import refuse_random
    from zeckenum.rules.model import get_rules

    ruleset = get_rules(rules)
    for kind in kinds:
        if kind == "count":
            refuse_count(hi, ruleset, max_memory=max_memory)
        elif kind == "random":
            refuse_random(hi, ruleset, max_memory=max_memory)
        elif kind == "solve":
            solve_space(ruleset.instantiate(hi), resolve_limit(max_memory), 2,
                        needs_reach(ruleset), False, f"solving n={hi}")


@click.command("verify", cls=OneLineCommand)
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--sample", type=click.IntRange(min=0), default=3, show_default=True,
              help="How many n, drawn at random, to recompute (the largest n always is).")
@click.option("--seed", type=bounded(0, 2**63 - 1), default=None,
              help="Seed of the sample, to repeat a run (default: a fresh one, printed).")
@click.option("--full", is_flag=True, help="Recompute every n of the table.")
@click.option("--workers", type=WORKERS, default=None,
              help=_backend_help["workers"])
@scheduler_option(_backend_help["scheduler"])
def verify_command(folder, sample, seed, full, workers, scheduler):  # noqa: ANN001
    """Check a published table: checksums, file list, row invariants, and recomputed rows.

    \b
    The rule set is rebuilt from the rule file embedded in the manifest (checked against
    its hash); the range and kinds are read from the files and must match the manifest.
    Recomputation (counts with a disjoint prime set, random play with other primes,
    optimal play afresh) covers --sample n drawn with a fresh seed, printed so that
    --seed S repeats the run, plus the largest n; --full covers every n.
    Exit 0: the table passed; 5: a check failed; 2: not a readable table (one line).
    """
    from zeckenum.tables.verify import verify_table

    try:
        rep = verify_table(folder, sample, seed, full=full, workers=workers,
                           scheduler=scheduler)
    except ZeckenumError as exc:
        fail(exc)
    ns = ", ".join(str(n) for n in rep["recomputed"]) or "none"
    lo, hi = rep["n_range"]
    how = "--full" if rep["full"] else f"--seed {rep['seed']}"
    click.echo(f"zeckenum verify: {folder} OK: n = {lo}..{hi} ({', '.join(rep['kinds'])}), "
               f"{plural(rep['files'], 'checksum')}, {plural(rep['rows'], 'row')} consistent; "
               f"recomputed "
               f"n = {ns} ({how})")


@click.group("plan")
def plan_command() -> None:
    """Forecast a run before starting it: exact sizes, shards, memory and time.

    \b
    Each forecast runs the cheap exact part of N (first sweep or rank table) and a small
    calibration run of the same kind on this machine.
    Examples:
      zeckenum plan count 250 --workers 8
      zeckenum plan random 150 --model pairs --workers 4
      zeckenum plan solve 400 --shards 20
    """


def _echo_prediction(p: dict, as_json: bool) -> None:
    from zeckenum.cluster.predict import format_prediction

    click.echo(json.dumps(p) if as_json else format_prediction(p))


@plan_command.command("count", cls=OneLineCommand)
@click.argument("n", type=POSITIVE)
@click.option("--workers", type=WORKERS, default=1, show_default=True,
              help="Workers the run would use.")
@click.option("--rules", default="standard", show_default=True, help="Rule set name or file.")
@click.option("--probe", "probe_n", type=PROBE, default=90, show_default=True,
              help="n of the calibration count on this machine (20..400).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
@max_memory_option
def plan_count_command(n, workers, rules, probe_n, as_json, max_memory):  # noqa: ANN001
    """Forecast an exact count: sizes, shards, memory, time.

    Runs the first sweep of N (exact sizes and word updates) and a small calibration count.

    \b
    Example:
      zeckenum plan count 250 --workers 8
    """
    from zeckenum.cluster.predict import predict_count

    try:
        p = predict_count(n, rules, workers, probe_n=probe_n, max_memory=max_memory)
    except ZeckenumError as exc:
        fail(exc)
    _echo_prediction(p, as_json)


@plan_command.command("random", cls=OneLineCommand)
@click.argument("n", type=POSITIVE)
@click.option("--model", type=click.Choice(MODELS), default="moves", show_default=True,
              help="Random model: uniform over legal moves, or over token pairs.")
@click.option("--players", "-p", type=bounded(2, MAX_PLAYERS), default=2, show_default=True,
              help=f"Number of players P (2..{MAX_PLAYERS}).")
@click.option("--winners-only", is_flag=True,
              help="Forecast the win probabilities only (no length law).")
@click.option("--workers", type=WORKERS, default=1, show_default=True,
              help="Workers the run would use.")
@click.option("--rules", default="standard", show_default=True, help="Rule set name or file.")
@click.option("--probe", "probe_n", type=PROBE, default=None,
              help="n of the calibration run on this machine (20..400, default 100).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
@max_memory_option
def plan_random_command(n, model, players, winners_only, workers, rules, probe_n,  # noqa: ANN001
                        as_json, max_memory):
    """Forecast exact random play: sizes, primes, shards, memory, time.

    Runs random play's first sweep of N (exact states, transitions, denominator, primes,
    shards and word updates) and a small calibration shard.

    \b
    Example:
      zeckenum plan random 150 --model pairs --workers 4
    """
    from zeckenum.cluster.predict import predict_random

    try:
        _check_probe(probe_n)
        p = predict_random(n, rules, workers, model=model, players=players,
                           winners_only=winners_only, probe_n=probe_n, max_memory=max_memory)
    except ZeckenumError as exc:
        fail(exc)
    _echo_prediction(p, as_json)


@plan_command.command("solve", cls=OneLineCommand)
@click.argument("n", type=POSITIVE)
@click.option("--players", "-p", type=bounded(2, SOLVE_MAX_PLAYERS), default=2,
              show_default=True, help=f"Number of players P (2..{SOLVE_MAX_PLAYERS}).")
@click.option("--workers", type=WORKERS, default=1, show_default=True,
              help="Workers the run would use (the chain runs one range at a time).")
@click.option("--shards", type=bounded(1, 10**6), default=None,
              help="Level ranges of the chain (default: one per 2e7 states).")
@click.option("--reach", is_flag=True,
              help="Run the reachability sweep for an exact state count (rule sets other "
                   "than the standard game; else the count is an upper bound).")
@click.option("--rules", default="standard", show_default=True, help="Rule set name or file.")
@click.option("--probe", "probe_n", type=PROBE, default=None,
              help="n of the calibration solve on this machine (20..400, default 160).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
@max_memory_option
def plan_solve_command(n, players, workers, shards, reach, rules, probe_n,  # noqa: ANN001
                       as_json, max_memory):
    """Forecast optimal play: states, level ranges, bit memory, time.

    Reads the exact sizes off the rank table and times a small calibration solve.  The
    chain runs one level range at a time: workers do not speed up one n.

    \b
    Example:
      zeckenum plan solve 400 --shards 20
    """
    from zeckenum.cluster.predict import predict_solve

    try:
        _check_probe(probe_n)
        p = predict_solve(n, rules, workers, players=players, shards=shards, reach=reach,
                          probe_n=probe_n, max_memory=max_memory)
    except ZeckenumError as exc:
        fail(exc)
    _echo_prediction(p, as_json)


def _check_probe(probe_n: int | None) -> None:
    if probe_n is not None and probe_n < 1:
        raise InputError(f"the probe's n must be a positive integer, got {probe_n}")
