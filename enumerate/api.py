"""The public Python API: one function per job, each returning a result with `to_dict()`.

    count(n)          -> CountResult      exact census: games of every length
    random_play(n)    -> RandomResult     exact random play: length law, win probabilities
    random_float(n)   -> FloatResult      the same in float64 with rigorous error bounds
    simulate(n, k)    -> SimulationResult Monte Carlo estimates from k random games
    gaussian(lo, hi)  -> GaussianTable    normal-law diagnostics of random play per n
    solve(n)          -> SolveResult      optimal play: who wins, P-positions, remoteness,
                                          misère play, Grundy values, position export
    solve_sum(ns)     -> SumResult        a sum of games from the Grundy values
    policy_verdicts(policy, lo, hi) -> PolicyReport  does a strategy conjecture win at each n
    games(n)          -> GamesReport      an explicit shortest and longest game
    move_stats(n)     -> MoveStats        move totals, expected counts, linear invariants
    collect(lo, hi)   -> RunData          census, random and optimal play over a range
    build_table(...)  -> TableBuild       publish exact tables into a directory
    load_table(dir)   -> LoadedTable      read a table back, every check short of recomputing
    read_table(dir)   -> RunData          a table as the data behind figures and reports
    verify_table(dir) -> TableCheck       a table checked, sample rows recomputed

This module is also the ONE place that chooses where a run goes.  `count`, `random_play`,
`solve` and `build_table` take `workers` (a local Dask cluster of K processes started and
closed for the run), `scheduler` (an existing cluster), `cluster` (workers as batch jobs of
SLURM, PBS, SGE or LSF through dask-jobqueue, `zeckenum.cluster.batch`) and `checkpoint` (a
folder of finished shards a rerun resumes from); with none of them the run stays in this process
(`random_play` with `progress=True` and `solve` with `shards` use the sharded drivers
in-process, which are the ones that show progress by shard).  The engines never import
`zeckenum.cluster`; only this module (and what it calls: tables, the cluster drivers) does.

Positions: `count`, `random_play`, `random_float`, `simulate`, `solve`, `games`,
`move_stats` and `build_table` take `position` (a count vector, bin 1 first: a sequence of
ints or its text "3,1,0,2", README "Positions").  The game then starts at that position
instead of the rule set's start (`RuleSet.at_position`; a rule file may also start at
one); its value is the game's n, so `n` may be None, and an n given must equal it (one
line otherwise).  Every engine and the cluster get the position inside the rule set they
rebuild from, so no engine has a special case; results carry it as `position` (their
`to_dict()` gains the key "position" only then).

Every import of an engine is inside the function that needs it, so `import zeckenum` loads
neither numba, Dask nor matplotlib; the first call pays for what it uses.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover - types only
    from zeckenum.analysis.extremal import GamesReport
    from zeckenum.analysis.movestats import MoveStats
    from zeckenum.analysis.rundata import RunData
    from zeckenum.cluster.batch import BatchSpec
    from zeckenum.counting.result import CountResult
    from zeckenum.optimal.policy import PolicyReport
    from zeckenum.optimal.solve import SolveResult, SumResult
    from zeckenum.randomplay.exact import RandomResult
    from zeckenum.randomplay.floating import FloatResult
    from zeckenum.randomplay.simulate import SimulationResult
    from zeckenum.rules.model import RuleSet
    from zeckenum.tables.format import Table

Position = str | Sequence[int] | None
"""A start position: None (the rule set's own start), "3,1,0,2" or a sequence of counts."""


def game_at(n: int | None, rules: str | RuleSet, position: Position = None,
            ) -> tuple[int, str | RuleSet]:
    """(n, rules) of the game to run: with a `position` (or a rule set that starts at one),
    the rule set started there and n = the position's value; `n` None is allowed then, and
    an n that differs from the value is refused (InputError, one line).  Without a position
    `n` is required and both are passed through unchanged."""
    from zeckenum.core.checks import check_n
    from zeckenum.errors import InputError
    from zeckenum.rules.catalogue import get_rules
    from zeckenum.rules.notation import format_position, parse_position, shown

    if position is None and n is not None and isinstance(rules, str) \
            and not rules.endswith(".toml"):
        return n, rules  # a built-in rule set: none starts at a position
    rs = get_rules(rules)
    if position is not None:
        counts = parse_position(position) if isinstance(position, str) else tuple(position)
        rs = rs.at_position(counts)
    if rs.position is None:
        if n is None:
            raise InputError("give N, or a start position (--position COUNTS, e.g. 3,1,0,2)")
        return n, rs
    value = rs.position_value(rs.position)
    if n is not None and n != value:
        raise InputError(f"position {shown(format_position(rs.position))} has value {value}, not "
                         f"N={n} (give N = {value} or leave N out)")
    return check_n(value), rs


def start_label(rules: str | RuleSet) -> str:
    """The display form of the start position `3,1,0,2 (3*1 + 1*2 + 2*5 = 15)` of a rule
    set from `game_at`, or "" when it starts at its own start."""
    return "" if isinstance(rules, str) else rules.start_label()


def tagged(result, rules: str | RuleSet):  # noqa: ANN001, ANN201 - any result dataclass
    """`result` with its `position` field set when `rules` starts at a position."""
    pos = getattr(rules, "position", None)
    if pos is None:
        return result
    from zeckenum.rules.notation import format_position

    return replace(result, position=format_position(pos))


def _sharded(workers: int | None, scheduler: str | None, checkpoint: str | Path | None,
             cluster: str | BatchSpec | None = None) -> bool:
    """Whether a run leaves the plain in-process engine for a cluster driver."""
    return bool(workers or scheduler or checkpoint or cluster)


def _where(workers: int | None, scheduler: str | None, cluster: str | BatchSpec | None,
           forecast: Callable[[], int] | None = None) -> str | BatchSpec | None:
    """What the cluster drivers get as `scheduler`: the address of a running scheduler, a
    `zeckenum.cluster.batch.BatchSpec` (workers as batch jobs: `cluster` given as a kind
    such as "slurm" or as a spec; `forecast()`, the run's forecast bytes per worker, sets
    the memory per job when neither the spec nor the Dask config gives it), or None.
    InputError when more than one of workers / scheduler / cluster is given."""
    if cluster is None:
        return scheduler
    from zeckenum.cluster.batch import batch_spec, with_forecast
    from zeckenum.errors import InputError

    if workers is not None or scheduler is not None:
        raise InputError("give one of --workers, --scheduler and --cluster")
    spec = batch_spec(cluster)
    return spec if forecast is None else with_forecast(spec, forecast)


def _forecast(kind: str, n: int, rules: str | RuleSet, players: int = 2,
              model: str = "moves", max_memory: int | None = None) -> Callable[[], int]:
    """The bytes per worker of a sharded run of n: `max_memory` when given (it is the
    limit of each worker), else the forecast (`cluster.batch.run_forecast`), computed
    only when called."""
    def forecast() -> int:
        from zeckenum.cluster.batch import run_forecast

        if max_memory is not None:
            return max_memory

        return run_forecast(kind, n, rules, players, model)

    return forecast


def count(
    n: int | None = None, rules: str | RuleSet = "standard", *, position: Position = None,
    threads: int | None = None,
    prime_offset: int = 0, max_memory: int | None = None, progress: bool = False,
    workers: int | None = None, scheduler: str | None = None,
    checkpoint: str | Path | None = None, points_per_shard: int | None = None,
    cluster: str | BatchSpec | None = None,
) -> CountResult:
    """Exact census of all games at n (`zeckenum.counting.count.count`), or the same
    result computed shard by shard on a cluster and/or checkpointed
    (`zeckenum.cluster.run.run_count`) when `workers`, `scheduler` or `checkpoint` is given:
    blocks of primes, or blocks of evaluation points when those do not fit a worker's
    memory (`max_memory`, else the workers' own limit).

    With `points_per_shard` the census is computed by evaluation points
    (`zeckenum.counting.points.count_points`: shards of (prime, block of points), the same
    result with more work and less memory per shard), in-process or, with `workers`,
    `scheduler` or `checkpoint`, through the same sharded driver (the same result).
    With `position` the games start there (module docstring).

    `cluster`: the workers are batch jobs ("slurm", "pbs", "sge", "lsf", or a
    `zeckenum.cluster.batch.BatchSpec` with jobs, cores, memory, walltime, queue,
    account), started and cancelled for the run; what the spec leaves out comes from the
    Dask config (`jobqueue.<kind>.*`), the memory else from this run's forecast."""
    n, rules = game_at(n, rules, position)
    return tagged(_count(n, rules, threads=threads, prime_offset=prime_offset,
                         max_memory=max_memory, progress=progress, workers=workers,
                         scheduler=scheduler, checkpoint=checkpoint,
                         points_per_shard=points_per_shard, cluster=cluster), rules)


def _count(
    n: int, rules: str | RuleSet, *, threads: int | None, prime_offset: int,
    max_memory: int | None, progress: bool, workers: int | None, scheduler: str | None,
    checkpoint: str | Path | None, points_per_shard: int | None,
    cluster: str | BatchSpec | None,
) -> CountResult:
    if _sharded(workers, scheduler, checkpoint, cluster):
        from zeckenum.cluster.run import run_count

        scheduler = _where(workers, scheduler, cluster,
                           _forecast("count", n, rules, max_memory=max_memory))
        return run_count(n, rules, workers=workers, scheduler=scheduler,
                         checkpoint_dir=checkpoint, progress=progress,
                         prime_offset=prime_offset, threads=threads, max_memory=max_memory,
                         points_per_shard=points_per_shard)
    if points_per_shard is not None:
        from zeckenum.counting.points import count_points

        return count_points(n, rules, points_per_shard=points_per_shard, threads=threads,
                            prime_offset=prime_offset, max_memory=max_memory)
    from zeckenum.counting import count as engine

    return engine.count(n, rules, threads=threads, prime_offset=prime_offset,
                        max_memory=max_memory, progress=progress)


def random_play(
    n: int | None = None, rules: str | RuleSet = "standard", players: int = 2,
    model: str = "moves", *, position: Position = None, winners_only: bool = False,
    prime_offset: int = 0, threads: int | None = None,
    max_memory: int | None = None, progress: bool = False, workers: int | None = None,
    scheduler: str | None = None, checkpoint: str | Path | None = None,
    points_per_shard: int | None = None, cluster: str | BatchSpec | None = None,
) -> RandomResult:
    """Exact random play at n: every length's probability and each player's chance to win
    (`zeckenum.randomplay.exact.random_play`).  With `progress`, `workers`, `scheduler`
    or `checkpoint` the prime blocks run through the sharded driver
    (`zeckenum.cluster.run.run_random`; in-process threads without workers/scheduler).

    With `points_per_shard` the law is computed by evaluation points
    (`zeckenum.randomplay.points.random_play_points`: shards of (prime, block of points),
    the same result with other primes, more work and less memory per shard; in-process
    only for now, `progress` is ignored).  With `position` the games start there.
    `cluster`: batch jobs, as in `count`."""
    n, rules = game_at(n, rules, position)
    return tagged(_random_play(n, rules, players, model, winners_only=winners_only,
                               prime_offset=prime_offset, threads=threads,
                               max_memory=max_memory, progress=progress, workers=workers,
                               scheduler=scheduler, checkpoint=checkpoint,
                               points_per_shard=points_per_shard, cluster=cluster),
                  rules)


def _random_play(
    n: int, rules: str | RuleSet, players: int, model: str, *, winners_only: bool,
    prime_offset: int, threads: int | None, max_memory: int | None, progress: bool,
    workers: int | None, scheduler: str | None, checkpoint: str | Path | None,
    points_per_shard: int | None, cluster: str | BatchSpec | None,
) -> RandomResult:
    if points_per_shard is not None:
        if _sharded(workers, scheduler, checkpoint, cluster):
            from zeckenum.errors import InputError

            raise InputError("--points-per-shard runs in this process only: it cannot be "
                             "combined with --workers, --scheduler, --cluster or "
                             "--checkpoint yet")
        from zeckenum.randomplay.points import random_play_points

        return random_play_points(n, rules, players, model, winners_only=winners_only,
                                  points_per_shard=points_per_shard,
                                  prime_offset=prime_offset, threads=threads,
                                  max_memory=max_memory)
    if progress or _sharded(workers, scheduler, checkpoint, cluster):
        from zeckenum.cluster.run import run_random

        scheduler = _where(workers, scheduler, cluster,
                           _forecast("random", n, rules, players, model, max_memory))
        return run_random(n, rules, players, model, winners_only=winners_only,
                          workers=workers, scheduler=scheduler, checkpoint_dir=checkpoint,
                          progress=progress, prime_offset=prime_offset, threads=threads,
                          max_memory=max_memory)
    from zeckenum.randomplay import exact

    return exact.random_play(n, rules, players, model, winners_only=winners_only,
                             prime_offset=prime_offset, threads=threads,
                             max_memory=max_memory)


def random_float(
    n: int | None = None, rules: str | RuleSet = "standard", players: int = 2,
    model: str = "moves", *, position: Position = None, threads: int | None = None,
    max_memory: int | None = None,
) -> FloatResult:
    """Random play in float64 with a rigorous bound on the rounding error (from `position`
    when given)."""
    from zeckenum.randomplay.floating import float_play

    n, rules = game_at(n, rules, position)
    return tagged(float_play(n, rules, players, model, threads=threads,
                             max_memory=max_memory), rules)


def simulate(
    n: int | None, games: int, seed: int = 0, rules: str | RuleSet = "standard",
    players: int = 2, model: str = "moves", *, position: Position = None,
    max_memory: int | None = None,
) -> SimulationResult:
    """Monte Carlo: `games` random games at n (from `position` when given), deterministic
    in `seed`."""
    from zeckenum.randomplay import simulate as engine

    n, rules = game_at(n, rules, position)
    return tagged(engine.simulate(n, games, seed, rules, players, model,
                                  max_memory=max_memory), rules)


@dataclass(frozen=True)
class GaussianTable:
    """Normal-law diagnostics of random play's length law, one row per n (`gaussian`).

    rows[i] = {"n", "mean", "variance", "skewness", "excess_kurtosis", "kolmogorov",
    "total_variation"} (floats from the exact law, or from the float64 law in mode
    "float")."""

    rules: str
    model: str
    mode: str
    rows: list[dict]

    def to_dict(self) -> dict:
        """JSON-ready form; the keys `zeckenum random --range A B --json` prints."""
        return {"rules": self.rules, "model": self.model, "mode": self.mode,
                "gaussian": [dict(r) for r in self.rows]}


def gaussian(
    lo: int, hi: int, rules: str | RuleSet = "standard", model: str = "moves", *,
    use_float: bool = False, max_memory: int | None = None,
) -> GaussianTable:
    """Diagnostics of random play (two players) for every n in lo..hi.  The largest n's
    memory forecast is checked before any n runs (the forecasts grow with n), so a range
    that cannot finish is refused up front."""
    from zeckenum.errors import InputError
    from zeckenum.randomplay.exact import random_play as exact_play
    from zeckenum.randomplay.exact import refuse_random
    from zeckenum.randomplay.floating import float_play

    if lo < 1 or hi < lo:
        raise InputError(f"--range needs 1 <= A <= B, got {lo} {hi}")
    if not use_float:
        refuse_random(hi, rules, 2, model, max_memory=max_memory)
    rows = []
    for n in range(lo, hi + 1):
        if use_float:
            g = float_play(n, rules, 2, model, max_memory=max_memory).gaussian
        else:
            g = exact_play(n, rules, 2, model, max_memory=max_memory).gaussian
        rows.append({"n": n, **g})
    name = rules if isinstance(rules, str) else rules.name
    return GaussianTable(rules=name, model=model, mode="float" if use_float else "exact",
                         rows=rows)


def solve(
    n: int | None = None, rules: str | RuleSet = "standard", players: int = 2, *,
    position: Position = None, max_memory: int | None = None, progress: bool = False,
    workers: int | None = None,
    scheduler: str | None = None, checkpoint: str | Path | None = None,
    shards: int | None = None, threads: int | None = None, misere: bool = False,
    remoteness: bool = False, grundy: bool = False, export: str | Path | None = None,
    export_fields: str | tuple[str, ...] | None = None,
    cluster: str | BatchSpec | None = None,
) -> SolveResult:
    """Optimal play at n (`zeckenum.optimal.solve.solve`, each large layer on `threads`
    threads, default every core), or the same as a chain of level-range shards
    (`zeckenum.cluster.solve_chain.run_solve`) when `workers`, `scheduler`, `checkpoint` or
    `shards` is given; the chain's ranges run on one thread each, so `threads` is refused
    with it.  A chain on this machine (no `scheduler`) or with `max_memory` is refused up
    front as the in-process solve would be, before any worker starts.  `misere`,
    `remoteness`, `grundy` and `export` (two players; see the engine's docstring) run
    in-process only: the chain refuses them.  With `position` the game starts there.
    `cluster`: batch jobs, as in `count`."""
    from zeckenum.core.checks import check_threads
    from zeckenum.errors import InputError
    from zeckenum.rules.catalogue import get_rules

    n, rules = game_at(n, rules, position)
    threads = check_threads(threads)
    rs = get_rules(rules)
    valued = [name for name, on in (("--misere", misere), ("--remoteness", remoteness),
                                    ("--grundy", grundy), ("--export", export is not None))
              if on]
    if _sharded(workers, scheduler, checkpoint, cluster) or shards:
        if valued:
            raise InputError(f"{valued[0]} runs the in-process solve only; a chain of level "
                             "ranges (--workers, --scheduler, --cluster, --checkpoint, --shards) "
                             "keeps one bit per state")
        if threads is not None:
            raise InputError("--threads runs the in-process solve; a chain of level ranges "
                             "(--workers, --scheduler, --cluster, --checkpoint, --shards) "
                             "runs each range on one thread")
        scheduler = _where(workers, scheduler, cluster,
                           _forecast("solve", n, rs, players, max_memory=max_memory))
        from zeckenum.cluster.solve_chain import run_solve
        from zeckenum.core.memory import resolve_limit
        from zeckenum.optimal.solve import needs_reach, solve_space

        if max_memory is not None or scheduler is None:
            solve_space(rs.instantiate(n), resolve_limit(max_memory), players,
                        needs_reach(rs), False, f"solving n={n}")
        return tagged(run_solve(n, rs, players, workers=workers, scheduler=scheduler,
                                checkpoint_dir=checkpoint, shards=shards,
                                progress=progress), rs)
    from zeckenum.optimal import solve as engine

    return tagged(engine.solve(n, rs, players, max_memory=max_memory, progress=progress,
                               threads=threads, misere=misere, remoteness=remoteness,
                               grundy=grundy, export=None if export is None else str(export),
                               export_fields=export_fields), rs)


def solve_sum(parts: Sequence[int | Sequence[int] | str], rules: str | RuleSet = "standard",
              *, max_memory: int | None = None, progress: bool = False,
              threads: int | None = None) -> SumResult:
    """The sum of games of one rule set under normal play, from the Sprague-Grundy values
    of their starts (`zeckenum.optimal.solve.solve_sum`): who wins and every winning first
    move.  Each part is an n or a start position (a count vector or its text "3,1,0,2")."""
    from zeckenum.core.checks import check_threads
    from zeckenum.optimal.solve import solve_sum as engine
    from zeckenum.rules.notation import parse_position

    games = [p if isinstance(p, int) else parse_position(p) if isinstance(p, str)
             else tuple(p) for p in parts]
    return engine(games, rules, max_memory=max_memory, progress=progress,
                  threads=check_threads(threads))


def policy_verdicts(
    policy: str | Path, lo: int, hi: int, rules: str | RuleSet = "standard", player: int = 2,
    *, max_memory: int | None = None, threads: int | None = 1,
) -> PolicyReport:
    """Whether the policy player (1 or 2) following `policy` wins against every reply at
    each n in lo..hi, the shortest refuting line where not, and the fraction of the
    policy's choices that are winning moves (`zeckenum.optimal.policy`).  `policy`: a
    policy file (`zpolicy/1` TOML, `zeckenum.optimal.policyfile`) or a Python hook
    `file.py` / `file.py:function` (`choose(position, moves)`, run outside the kernels)."""
    from zeckenum.optimal.policy import policy_verdicts as run

    return run(policy, lo, hi, rules, player, max_memory=max_memory, threads=threads)


def games(n: int | None = None, rules: str | RuleSet = "standard", near: int = 3, *,
          position: Position = None, max_memory: int | None = None) -> GamesReport:
    """An explicit shortest and longest game at n (from `position` when given), the number
    of games at the `near` lengths next to each extreme, and (standard game from n tokens
    in F1) the greedy longest game."""
    from zeckenum.analysis.extremal import games_report

    n, rules = game_at(n, rules, position)
    return tagged(games_report(n, rules, near, max_memory=max_memory), rules)


def move_stats(n: int | None = None, rules: str | RuleSet = "standard", *,
               position: Position = None, move: str | None = None,
               model: str = "moves", random: bool = True,
               max_memory: int | None = None) -> MoveStats:
    """Every move's total over all games and expected count under random play, the linear
    invariants of the move counts checked on both, and `move`'s count distribution (from
    `position` when given)."""
    from zeckenum.analysis.movestats import move_stats as report

    n, rules = game_at(n, rules, position)
    return tagged(report(n, rules, move=move, model=model, random=random,
                         max_memory=max_memory), rules)


def collect(lo: int, hi: int, rules: str | RuleSet = "standard",
            random_upto: int | None = None, threads: int | None = None,
            solve_upto: int | None = None, grundy: bool = False) -> RunData:
    """Census at every n in lo..hi, random play at every n <= random_upto and optimal play
    (winner, P-positions; the start's Grundy value with `grundy`) at every n <= solve_upto
    (both default hi): the data behind `zeckenum.present` figures and reports."""
    from zeckenum.analysis.rundata import collect as run

    return run(lo, hi, rules, random_upto=random_upto, threads=threads,
               solve_upto=solve_upto, grundy=grundy)


def read_table(folder: str | Path, random_upto: int | None = None) -> RunData:
    """A table directory as figure data (checked as `load_table` checks it), with the
    random-play laws computed for every n <= random_upto the table lacks (none when
    None)."""
    from zeckenum.analysis.rundata import add_random
    from zeckenum.present.plots import read_table as read

    data = read(folder)
    return data if random_upto is None else add_random(data, random_upto)


# ------------------------------------------------------------------------------ tables


@dataclass(frozen=True)
class TableBuild:
    """A table published by `build_table`: its folder, the kinds it holds and its manifest
    (files with SHA-256, rule file and hash, parameters)."""

    folder: Path
    kinds: tuple[str, ...]
    manifest: dict

    def to_dict(self) -> dict:
        return {"folder": str(self.folder), "kinds": list(self.kinds),
                "manifest": self.manifest}


@dataclass(frozen=True)
class TableCheck:
    """The report of `verify_table`: range, kinds, checksums and rows checked, the n
    recomputed and the seed that repeats the sample."""

    folder: Path
    report: dict

    @property
    def recomputed(self) -> list[int]:
        return list(self.report["recomputed"])

    def to_dict(self) -> dict:
        return {"folder": str(self.folder), **self.report}


def _refuse_table(hi: int, kinds: tuple[str, ...] | list[str], rules: str | RuleSet,
                 max_memory: int | None) -> None:
    """The up-front refusals of a table's largest n for each kind it computes (the
    forecasts grow with n): a table that cannot reach its last n does not start."""
    from zeckenum.core.memory import resolve_limit
    from zeckenum.counting.count import refuse_count
    from zeckenum.optimal.solve import needs_reach, solve_space
    from zeckenum.randomplay.exact import refuse_random
    from zeckenum.rules.catalogue import get_rules

    ruleset = get_rules(rules)
    for kind in kinds:
        if kind == "count":
            refuse_count(hi, ruleset, max_memory=max_memory)
        elif kind == "random":
            refuse_random(hi, ruleset, max_memory=max_memory)
        elif kind == "solve":
            solve_space(ruleset.instantiate(hi), resolve_limit(max_memory), 2,
                        needs_reach(ruleset), False, f"solving n={hi}")


def build_table(
    lo: int | None, hi: int | None, what: str | tuple[str, ...], out: str | Path,
    rules: str | RuleSet = "standard", *, position: Position = None,
    workers: int | None = None, scheduler: str | None = None,
    checkpoint: str | Path | None = None, progress: bool = False,
    max_memory: int | None = None, cluster: str | BatchSpec | None = None,
) -> TableBuild:
    """Compute and publish exact tables for lo <= n <= hi into `out` (what: comma-separated
    count, solve, random).  On this machine (no `scheduler`) or with `max_memory`, the
    largest n is refused up front when it cannot run.  With `position` (or a rule set
    starting at one) the table has the one row n = the position's value: `lo` and `hi`
    may be None, and any other n is refused; the manifest records the position.
    `cluster`: batch jobs, as in `count` (memory from the forecast of the largest n of
    every kind)."""
    from zeckenum.errors import InputError
    from zeckenum.rules.catalogue import get_rules
    from zeckenum.tables.build import build_table as build
    from zeckenum.tables.format import parse_what

    kinds = parse_what(what) if isinstance(what, str) else tuple(what)
    if position is not None or get_rules(rules).position is not None:
        value, rules = game_at(None, rules, position)
        lo = value if lo is None else lo
        hi = value if hi is None else hi
        if (lo, hi) != (value, value):
            raise InputError(f"a table from a position has the one row n = {value} (the "
                             f"position's value), not --from {lo} --to {hi}")
    if lo is None or hi is None:
        raise InputError("give --from and --to, or a start position (--position)")
    if hi < lo:
        raise InputError(f"--to must be at least --from, got --from {lo} --to {hi}")
    scheduler = _where(workers, scheduler, cluster,
                       lambda: max(_forecast(k, hi, rules, max_memory=max_memory)()
                                   for k in kinds))
    if max_memory is not None or scheduler is None:
        _refuse_table(hi, kinds, rules, max_memory)
    manifest = build(lo, hi, kinds, out, rules, workers=workers, scheduler=scheduler,
                     checkpoint_dir=checkpoint, progress=progress)
    return TableBuild(folder=Path(out), kinds=tuple(kinds), manifest=manifest)


def load_table(folder: str | Path) -> Table:
    """A published table read back as untrusted input, with every check of `verify_table`
    short of recomputing (checksums, file list, canonical rows, row invariants)."""
    from zeckenum.tables.format import load_table as load

    return load(folder)


def verify_table(folder: str | Path, sample: int = 3, seed: int | None = None, *,
                 full: bool = False, workers: int | None = None,
                 scheduler: str | None = None,
                 cluster: str | BatchSpec | None = None) -> TableCheck:
    """Check a published table and recompute `sample` n drawn with `seed` (plus the largest
    n; every n with `full`); raises TableCheckFailed (exit 5) on any mismatch.  `cluster`:
    batch jobs, as in `count` (memory from the forecast of the table's largest n)."""
    from zeckenum.tables.verify import verify_table as verify

    if cluster is not None:
        from zeckenum.tables.format import load_table as load

        table = load(folder)
        scheduler = _where(workers, scheduler, cluster,
                           lambda: max(_forecast(k, max(table.ns), table.ruleset)()
                                       for k in table.kinds))

    rep = verify(folder, sample, seed, full=full, workers=workers, scheduler=scheduler)
    return TableCheck(folder=Path(folder), report=rep)


__all__ = [
    "GaussianTable", "TableBuild", "TableCheck", "build_table", "collect", "count", "games",
    "gaussian", "load_table", "move_stats", "random_float", "random_play", "read_table",
    "simulate", "solve", "verify_table",
]
