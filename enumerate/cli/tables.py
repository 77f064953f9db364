"""Tables and forecasts: `table`, `verify` and the `plan` group (`plan count`,
`plan random`, `plan solve`).

`table` and `verify` are thin layers over `zeckenum.api` (which picks the backend); the
forecasts call `zeckenum.cluster.predict`.  Errors go through the one handler
(`cli.errors.exit_for`).
"""

from __future__ import annotations

import json

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand, OneLineGroup
from zeckenum.cli.options import (
    DURATION,
    POSITIVE,
    SEED,
    SHARDS,
    THREADS,
    backend_options,
    bounded,
    cluster_options,
    json_option,
    max_memory_option,
    model_option,
    n_argument,
    players_option,
    position_option,
    probe_option,
    progress_option,
    resolve_progress,
    rules_option,
    workers_option,
)
from zeckenum.core.checks import RANDOM_MAX_PLAYERS, SOLVE_MAX_PLAYERS
from zeckenum.core.text import plural
from zeckenum.errors import InputError

_backend_help = {
    "workers": "Start a local Dask cluster of K worker processes (127.0.0.1).",
    "scheduler": "Use an existing Dask cluster at this scheduler address.",
}
_plan_workers = "Workers the run would use."


@click.command("table", cls=OneLineCommand)
@click.option("--from", "lo", type=POSITIVE, default=None, help="First n.")
@click.option("--to", "hi", type=POSITIVE, default=None, help="Last n (inclusive).")
@position_option("Tabulate the game from this position (counts per bin, bin 1 first, e.g. "
                 "3,1,0,2; README \"Positions\"): the one row n = its value (--from/--to "
                 "may be left out), recorded in the manifest.")
@click.option("--what", default="count", show_default=True,
              help="Comma-separated: count, solve, random.")
@click.option("--out", type=click.Path(file_okay=False), required=True,
              help="Directory to publish: new, empty, or a partial/complete table of the "
                   "same rules and kinds, which is resumed.")
@rules_option()
@backend_options(workers=_backend_help["workers"], scheduler=_backend_help["scheduler"],
                 checkpoint="Keep finished shards here; a rerun resumes from them.")
@progress_option()
@max_memory_option
def table_command(lo, hi, position, what, out, rules, workers, scheduler, cluster,  # noqa: ANN001
                  checkpoint_dir, progress,  # noqa: ANN001
                  max_memory) -> None:  # noqa: ANN001
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
      zeckenum table --position 3,1,0,2 --what count,solve --out table-3102
    """
    built = api.build_table(lo, hi, what, out, rules, position=position, workers=workers,
                            scheduler=scheduler,
                            checkpoint=checkpoint_dir, progress=resolve_progress(progress),
                            max_memory=max_memory, cluster=cluster)
    params = built.manifest["parameters"]
    lo, hi = params["from"], params["to"]
    click.echo(f"zeckenum table: n={lo}..{hi} ({', '.join(built.kinds)}) -> {out}: "
               f"{plural(len(built.manifest['files']), 'file')} + manifest.json")


@click.command("verify", cls=OneLineCommand)
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--sample", type=click.IntRange(min=0), default=3, show_default=True,
              help="How many n, drawn at random, to recompute (the largest n always is).")
@click.option("--seed", type=SEED, default=None,
              help="Seed of the sample, to repeat a run (default: a fresh one, printed).")
@click.option("--full", is_flag=True, help="Recompute every n of the table.")
@backend_options(workers=_backend_help["workers"], scheduler=_backend_help["scheduler"])
def verify_command(folder, sample, seed, full, workers, scheduler, cluster) -> None:  # noqa: ANN001
    """Check a published table: checksums, file list, row invariants, and recomputed rows.

    \b
    The rule set is rebuilt from the rule file embedded in the manifest (checked against
    its hash); the range and kinds are read from the files and must match the manifest.
    Recomputation (counts with a disjoint prime set, random play with other primes,
    optimal play afresh) covers --sample n drawn with a fresh seed, printed so that
    --seed S repeats the run, plus the largest n; --full covers every n.
    Exit 0: the table passed; 5: a check failed; 2: not a readable table (one line).
    """
    rep = api.verify_table(folder, sample, seed, full=full, workers=workers,
                           scheduler=scheduler, cluster=cluster).report
    ns = ", ".join(str(n) for n in rep["recomputed"]) or "none"
    lo, hi = rep["n_range"]
    how = "--full" if rep["full"] else f"--seed {rep['seed']}"
    click.echo(f"zeckenum verify: {folder} OK: n = {lo}..{hi} ({', '.join(rep['kinds'])}), "
               f"{plural(rep['files'], 'checksum')}, {plural(rep['rows'], 'row')} consistent; "
               f"recomputed "
               f"n = {ns} ({how})")


@click.group("plan", cls=OneLineGroup)
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


def _echo_prediction(p: dict, as_json: bool, cluster=None) -> None:  # noqa: ANN001
    """Print a forecast; with a `cluster` (a BatchSpec), the job request the run would
    make, its memory per job from the forecast's memory per worker unless given or
    configured (key "job_request" in JSON)."""
    from zeckenum.cluster.predict import format_prediction

    if cluster is not None:
        from zeckenum.cluster.batch import job_request

        p["job_request"] = job_request(cluster, p["memory_per_worker_bytes"])
    if as_json:
        click.echo(json.dumps(p))
        return
    text = format_prediction(p)
    if cluster is not None:
        from zeckenum.cluster.batch import format_request

        text += "\n\n  job request  " + format_request(p["job_request"])
    click.echo(text)


def _cluster_workers(workers: int, cluster) -> int:  # noqa: ANN001
    """Workers a forecast assumes: --workers, or with --cluster the most jobs x cores per
    job (the job request resolved from the options and the Dask config)."""
    if cluster is None:
        return workers
    from zeckenum.cluster.batch import job_request

    req = job_request(cluster, 0)
    return req["jobs_max"] * req["processes"]


@plan_command.command("count", cls=OneLineCommand)
@n_argument(required=False)
@workers_option(_plan_workers, default=1)
@click.option("--cores-per-worker", "cores", type=bounded(1, 1024), default=None,
              help="Shards each worker runs at once (default 1); with --max-memory per "
                   "worker they share its memory.")
@click.option("--budget", type=DURATION, default=None,
              help="Instead of N: print the largest n whose forecast fits this time "
                   "(e.g. 30m, 1h, 90s, 3600) on --workers of --max-memory each.")
@rules_option()
@probe_option("n of the calibration count on this machine (20..400).", 90)
@json_option("Print one JSON object.")
@max_memory_option
@cluster_options
def plan_count_command(n, workers, cores, budget, rules, probe_n, as_json,  # noqa: ANN001
                       max_memory, cluster) -> None:  # noqa: ANN001
    """Forecast an exact count: sizes, shards, memory, time.

    Runs the first sweep of N (exact sizes and word updates) and a small calibration count.
    With --max-memory (per worker) the route and shard shape are the ones the run would
    choose under it: windowed prime blocks when they fit, else blocks of evaluation
    points; a limit too small for any shape is refused naming the smallest that works.
    With --budget T (and no N): the largest n whose forecast fits T.

    \b
    Examples:
      zeckenum plan count 250 --workers 8
      zeckenum plan count 300 --max-memory 2G --json
      zeckenum plan count --budget 30m --workers 100 --cores-per-worker 32 --max-memory 64G
      zeckenum plan count 250 --cluster slurm --jobs 1:10 --job-cores 4

    With --cluster, the workers are the most jobs x cores per job, and the job request the
    run would make is printed (memory per job: --job-memory, the Dask config, or this
    forecast's memory per worker x cores plus 256M each).
    """
    workers = _cluster_workers(workers, cluster)
    if budget is not None:
        if cluster is not None:
            raise InputError("plan count --budget does not take --cluster; give --workers "
                             "and --max-memory")
        if n is not None:
            raise InputError("plan count takes either N or --budget, not both")
        from zeckenum.cluster.budget import format_budget, largest_n_within

        p = largest_n_within(budget, rules, workers, cores or 1, max_memory,
                             probe_n=probe_n)
        click.echo(json.dumps(p) if as_json else format_budget(p))
        return
    if n is None:
        raise InputError("plan count needs N (or --budget T)")
    from zeckenum.cluster.predict import predict_count

    p = predict_count(n, rules, workers, probe_n=probe_n, max_memory=max_memory,
                      cores_per_worker=cores)
    _echo_prediction(p, as_json, cluster)


@plan_command.command("random", cls=OneLineCommand)
@n_argument()
@model_option("Random model: uniform over legal moves, or over token pairs.")
@players_option(RANDOM_MAX_PLAYERS)
@click.option("--winners-only", is_flag=True,
              help="Forecast the win probabilities only (no length law).")
@workers_option(_plan_workers, default=1)
@rules_option()
@probe_option("n of the calibration run on this machine (20..400, default 100).", None)
@json_option("Print one JSON object.")
@max_memory_option
@cluster_options
def plan_random_command(n, model, players, winners_only, workers, rules, probe_n,  # noqa: ANN001
                        as_json, max_memory, cluster) -> None:  # noqa: ANN001
    """Forecast exact random play: sizes, primes, shards, memory, time.

    Runs random play's first sweep of N (exact states, transitions, denominator, primes,
    shards and word updates) and a small calibration shard.

    \b
    Example:
      zeckenum plan random 150 --model pairs --workers 4
    """
    from zeckenum.cluster.predict import predict_random

    _check_probe(probe_n)
    p = predict_random(n, rules, _cluster_workers(workers, cluster), model=model,
                       players=players, winners_only=winners_only, probe_n=probe_n,
                       max_memory=max_memory)
    _echo_prediction(p, as_json, cluster)


@plan_command.command("solve", cls=OneLineCommand)
@n_argument()
@players_option(SOLVE_MAX_PLAYERS)
@workers_option("Workers the run would use (the chain runs one range at a time).", default=1)
@click.option("--shards", type=SHARDS, default=None,
              help="Level ranges of the chain (default: one per 2e7 states).")
@click.option("--reach", is_flag=True,
              help="Run the reachability sweep for an exact state count (rule sets other "
                   "than the standard game; else the count is an upper bound).")
@rules_option()
@probe_option("n of the calibration solve on this machine (20..400, default 160).", None)
@click.option("--threads", type=THREADS, default=None,
              help="Threads of the in-process solve (default: all cores).")
@json_option("Print one JSON object.")
@max_memory_option
@cluster_options
def plan_solve_command(n, players, workers, shards, reach, rules, probe_n,  # noqa: ANN001
                       threads, as_json, max_memory, cluster) -> None:  # noqa: ANN001
    """Forecast optimal play: states, level ranges, bit memory, time.

    Reads the exact sizes off the rank table and times a small calibration solve.  The
    chain runs one level range at a time: workers do not speed up one n.

    \b
    Example:
      zeckenum plan solve 400 --shards 20
    """
    from zeckenum.cluster.predict import predict_solve

    _check_probe(probe_n)
    p = predict_solve(n, rules, _cluster_workers(workers, cluster), players=players,
                      shards=shards, reach=reach, probe_n=probe_n, max_memory=max_memory,
                      threads=threads)
    _echo_prediction(p, as_json, cluster)


def _check_probe(probe_n: int | None) -> None:
    if probe_n is not None and probe_n < 1:
        raise InputError(f"the probe's n must be a positive integer, got {probe_n}")
