"""The `count` command: the exact census of all games at N, as a table or one JSON object,
optionally also written to a .csv/.json file (`--out`, checked before counting)."""

from __future__ import annotations

import json
from pathlib import Path

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand, fail
from zeckenum.cli.options import (
    PRIME_OFFSET,
    THREADS,
    backend_options,
    bounded,
    json_option,
    max_memory_option,
    n_argument,
    position_option,
    progress_option,
    resolve_progress,
    rules_option,
)
from zeckenum.core.text import deliver_result, plural
from zeckenum.counting.result import OUT_SUFFIXES, CountResult
from zeckenum.errors import InputError, OutputError
from zeckenum.safeio import check_output_file


def format_count(res: CountResult, start: str = "") -> str:
    """Readable census table for the terminal (`start`: the start position's display form,
    when the games start at one)."""
    s = res.stats
    lines = [
        f"zeckenum count  rules={res.rules}  n={res.n}",
        *([f"  from position {start}"] if start else []),
        "",
        f"  reachable states     {res.states:,}",
        f"  transitions (moves)  {res.transitions:,}",
        f"  games                {res.games}",
        f"  shortest game        {plural(res.shortest, 'move')} "
        f"({plural(res.shortest_games, 'game')})",
        f"  longest game         {plural(res.longest, 'move')} "
        f"({plural(res.longest_games, 'game')})",
        "",
        "  length  games",
    ]
    width = len(str(res.longest))
    for length, c in res.length_counts.items():
        lines.append(f"  {length:>{max(6, width)}}  {c}")
    if s.get("method") == "points":
        how = (f"{plural(len(res.primes), 'prime')} < 2^50 + 1 check prime, each at "
               f"{s['points']} points ({plural(s['shards'], 'shard')}), CRT")
    else:
        how = f"{plural(len(res.primes), 'prime')} < 2^62 + 1 check prime, CRT"
    lines += [
        "",
        f"  exact via {how}; "
        f"{s.get('word_updates', 0):,} word updates in {s.get('seconds_total', 0):.2f} s",
    ]
    return "\n".join(lines)


def check_out_path(out: str) -> Path:
    """Refuse a `--out` FILE before any computation: a suffix other than .csv or .json
    (InputError, exit 2), or a path that cannot be written (OutputError, exit 6)."""
    path = Path(out)
    if path.suffix.lower() not in OUT_SUFFIXES:
        raise InputError(f"--out {out}: use a .csv or .json file name")
    return check_output_file(path, "--out file")


@click.command("count", cls=OneLineCommand)
@n_argument(required=False)
@position_option()
@json_option()
@click.option(
    "--out", type=click.Path(dir_okay=False), default=None,
    help="Also write the spectrum to FILE: .csv (n,length,count) or .json (checked before "
         "counting; if the write fails the result goes to a rescue file, exit 6).",
)
@click.option("--threads", type=THREADS, default=None,
              help="Threads for the exact sweep (default: all cores).")
@click.option("--prime-offset", type=PRIME_OFFSET, default=0, show_default=True,
              help="Skip this many primes below 2^62 (use another prime set to re-check).")
@click.option("--points-per-shard", "points_per_shard", type=bounded(1, 1 << 20), default=None,
              help="Count by evaluation points instead of length windows: every (prime, "
                   "block of at most K points) is one shard (more work, less memory per "
                   "shard); with --workers/--scheduler/--checkpoint, shards of the cluster.")
@max_memory_option
@progress_option()
@rules_option()
@backend_options(
    workers="Run the prime blocks on a local Dask cluster of K worker processes.",
    scheduler="Run the prime blocks on an existing Dask cluster (e.g. tcp://host:8786).",
    checkpoint="Keep each finished block in DIR; rerunning resumes from it.",
)
def count_command(
    n, position, as_json, out, threads, prime_offset, points_per_shard, max_memory, progress, rules,  # noqa: ANN001
    workers, scheduler, checkpoint_dir, cluster,  # noqa: ANN001
) -> None:
    """Count every game started from N (by default: the standard game, N tokens in F1),
    or from --position COUNTS (N is then its value and may be left out).

    Prints reachable states, transitions, the exact number of games, the shortest and
    longest lengths and the number of games of each length.  --max-memory chooses the
    route and its shards: blocks of primes over length windows when they fit, else
    blocks of evaluation points as large as fit (a limit too small for any shape is
    refused naming the smallest that works).

    \b
    Examples:
      zeckenum count 30
      zeckenum count 200 --json --out spectrum200.csv
      zeckenum count 40 --rules reversed
      zeckenum count 200 --max-memory 300M
      zeckenum count 180 --workers 2 --checkpoint ckpt180
      zeckenum count --position 3,1,0,2
      zeckenum count 300 --cluster slurm --jobs 1:20 --job-cores 8 --checkpoint ckpt300
    """
    lost: OutputError | None = None
    out_path = check_out_path(out) if out else None
    n, rules = api.game_at(n, rules, position)
    res = api.count(n, rules, threads=threads, prime_offset=prime_offset,
                    max_memory=max_memory, progress=resolve_progress(progress),
                    workers=workers, scheduler=scheduler, checkpoint=checkpoint_dir,
                    points_per_shard=points_per_shard, cluster=cluster)
    if out_path is not None:
        try:
            deliver_result(out_path, res.file_text(out_path), "the spectrum")
        except OutputError as exc:  # rescued; still print the result, then exit 6
            lost = exc
    click.echo(json.dumps(res.to_dict()) if as_json
               else format_count(res, api.start_label(rules)))
    if lost is not None:
        fail(lost)
