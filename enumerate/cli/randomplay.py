"""The `random` command: exact, float and Monte Carlo random play, and Gaussian diagnostics.

Exact results are printed as decimals of `core.text.DIGITS` (12) significant digits, each the
exact rational correctly rounded (computed in integers, never through a float); `--exact`
adds the exact reduced fractions, which `--json` always carries.
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import click
from zeckenum import api
from zeckenum.cli.errors import OneLineCommand
from zeckenum.cli.options import (
    POSITIVE,
    SEED,
    backend_options,
    bounded,
    json_option,
    max_memory_option,
    model_option,
    n_argument,
    players_option,
    position_option,
    progress_option,
    resolve_progress,
    rules_option,
)
from zeckenum.core.checks import RANDOM_MAX_PLAYERS
from zeckenum.core.text import DIGITS, decimal, frac_str, plural
from zeckenum.errors import InputError
from zeckenum.randomplay.simulate import MAX_GAMES

CONVENTION = ("a game with no move (n = 1, or a terminal start position) counts as a win "
              "for player P (the last player)")


def sqrt_decimal(x: Fraction, digits: int = DIGITS) -> str:
    """sqrt(x) for a rational x >= 0 to `digits` significant digits (integer square root of
    x scaled far enough that the truncation lies below the last printed digit)."""
    if x <= 0:
        return "0"
    e = (x.numerator.bit_length() - x.denominator.bit_length()) * 30103 // 100000
    k = digits + 4 - e // 2
    scaled = x * Fraction(10) ** (2 * k)
    root = math.isqrt(scaled.numerator // scaled.denominator)
    return decimal(Fraction(root, 10**k), digits)


def _value(x: Fraction | None, exact: bool) -> str:
    """Decimal of an exact rational, with the reduced fraction after it when `exact`."""
    if x is None:
        return "undefined (variance 0)"
    return f"{decimal(x)}    {frac_str(x)}" if exact else decimal(x)


def _echo_start(start: str, as_json: bool) -> None:
    """The start position's line above a text result (nothing in JSON: the key "position"
    holds it there)."""
    if start and not as_json:
        click.echo(f"from position {start}")


def _print_exact(res, winners_only: bool, exact: bool = False) -> None:
    click.echo(f"random play, rules {res.rules}, n = {res.n}, model {res.model}, "
               f"{plural(res.players, 'player')} (exact)")
    click.echo(f"convention: {CONVENTION}")
    how = ("decimals to 12 significant digits, then the exact fraction" if exact else
           "decimals to 12 significant digits; --exact or --json give the exact fractions")
    click.echo(f"values: {how}")
    for i, p in res.win_probability.items():
        click.echo(f"P(player {i} wins) = {_value(p, exact)}")
    if winners_only:
        return
    m = res.moments
    sq = m.get("skewness_sq")
    if sq is None:
        skew = "undefined (variance 0)"
    else:
        skew = ("-" if m["mu3"] < 0 else "") + sqrt_decimal(sq)
    rows = [
        ("mean length", _value(m["mean"], exact)),
        ("variance", _value(m["variance"], exact)),
        ("third central moment", _value(m["mu3"], exact)),
        ("fourth central moment", _value(m["mu4"], exact)),
        ("skewness", skew + ("    (irrational in general; its square is exact)"
                             if exact and sq is not None else "")),
        ("skewness squared", _value(sq, exact)),
        ("excess kurtosis", _value(m.get("excess_kurtosis"), exact)),
    ]
    width = max(len(k) for k, _ in rows)
    for key, val in rows:
        click.echo(f"{key.ljust(width)} = {val}")
    click.echo("length  probability")
    for L, p in res.length_probability.items():
        click.echo(f"{L:6d}  {_value(p, exact)}")


def _print_float(res) -> None:
    click.echo(f"random play, rules {res.rules}, n = {res.n}, model {res.model}, "
               f"{plural(res.players, 'player')} (float64)")
    click.echo(f"convention: {CONVENTION}")
    click.echo(f"rounding error bound: every length probability within {res.max_error:.3e}; "
               f"all together within {res.total_error:.3e}")
    for i, p in res.win_probability.items():
        click.echo(f"P(player {i} wins) = {p:.17g} +- {res.win_error[i]:.3e}")
    m = res.moments
    click.echo(f"mean length = {m['mean']:.15g}  variance = {m['variance']:.15g}  "
               f"skewness = {m['skewness']:.6g}  excess kurtosis = {m['excess_kurtosis']:.6g}")
    click.echo("length  probability  error-bound")
    for L, p in res.length_probability.items():
        click.echo(f"{L:6d}  {p:.17g}  {res.length_error[L]:.3e}")


def _print_sim(res) -> None:
    click.echo(f"random play, rules {res.rules}, n = {res.n}, model {res.model}, "
               f"{plural(res.players, 'player')} (Monte Carlo, {plural(res.games, 'game')}, "
               f"seed {res.seed})")
    click.echo(f"convention: {CONVENTION}; intervals are 95% (normal approximation)")
    for i, (p, lo, hi) in res.win_probability.items():
        click.echo(f"P(player {i} wins) ~ {p:.6f}  [{lo:.6f}, {hi:.6f}]")
    click.echo(f"mean length ~ {res.mean[0]:.6f}  [{res.mean[1]:.6f}, {res.mean[2]:.6f}]")
    click.echo(f"variance    ~ {res.variance[0]:.6f}  [{res.variance[1]:.6f}, "
               f"{res.variance[2]:.6f}]")


SHARD_OPTIONS = {"workers": "--workers", "scheduler": "--scheduler", "cluster": "--cluster",
                 "checkpoint_dir": "--checkpoint", "progress": "--progress",
                 "points_per_shard": "--points-per-shard"}
"""Exact mode only: with any of them (or the default --progress on a terminal) the prime
blocks run through the sharded driver (`zeckenum.api.random_play` picks it), which shows a
progress bar; an explicit --progress is refused in the other modes."""


def _refuse_sharding(sharded: dict, mode: str) -> None:
    """InputError when an exact-mode sharding option is given with another mode."""
    given = [flag for key, flag in SHARD_OPTIONS.items() if sharded.get(key)]
    if given:
        raise InputError(f"{', '.join(given)}: exact mode only, not with {mode}")


@click.command("random", cls=OneLineCommand)
@n_argument(required=False)
@position_option()
@players_option(RANDOM_MAX_PLAYERS)
@model_option()
@rules_option()
@click.option("--winners-only", is_flag=True,
              help="Exact win probabilities only (residues of the length mod P; much faster).")
@click.option("--float", "use_float", is_flag=True,
              help="float64 sweep with a rigorous rounding-error bound.")
@click.option("--simulate", "games", type=bounded(1, MAX_GAMES), default=None, metavar="K",
              help="Monte Carlo: play K random games.")
@click.option("--seed", type=SEED, default=0, show_default=True, help="Seed for --simulate.")
@click.option("--range", "nrange", type=POSITIVE, nargs=2, default=None, metavar="A B",
              help="Gaussian diagnostics table for n = A..B.")
@json_option("Print one JSON object (exact fractions as \"num/den\" strings).")
@click.option("--exact", "show_exact", is_flag=True,
              help="Exact mode: print the exact fractions after the 12-digit decimals.")
@backend_options(
    workers="Exact mode: run the prime blocks on a local Dask cluster of K worker processes.",
    scheduler="Exact mode: run the prime blocks on an existing Dask cluster "
              "(e.g. tcp://host:8786).",
    checkpoint="Exact mode: keep each finished block in DIR; rerunning resumes from it.",
)
@progress_option("Sharded exact mode: show a progress bar of the prime blocks on stderr")
@click.option("--points-per-shard", "points_per_shard", type=bounded(1, 1 << 20),
              default=None, metavar="K",
              help="Exact mode: compute by evaluation points instead of length windows; "
                   "every (prime, block of at most K points) is one shard (more work, less "
                   "memory per shard; in-process only for now).")
@max_memory_option
def random_command(n, position, players, model, rules, winners_only, use_float, games, seed, nrange,  # noqa: ANN001
                   as_json, show_exact, workers, scheduler, cluster, checkpoint_dir,  # noqa: ANN001
                   progress,  # noqa: ANN001
                   points_per_shard, max_memory) -> None:  # noqa: ANN001
    """Random play at N: exact probability of every length and of each player winning.

    \b
    Examples:
      zeckenum random 40
      zeckenum random 40 --exact
      zeckenum random 200 --winners-only --players 3
      zeckenum random 80 --model pairs --json
      zeckenum random 250 --float
      zeckenum random 200 --simulate 100000 --seed 7
      zeckenum random --range 10 60
      zeckenum random 300 --workers 2 --checkpoint ckpt-random300
      zeckenum random 200 --points-per-shard 64
      zeckenum random --position 3,1,0,2 --exact
    """
    sharded = {"workers": workers, "scheduler": scheduler, "cluster": cluster,
               "checkpoint_dir": checkpoint_dir,
               "progress": progress is True, "points_per_shard": points_per_shard}
    if show_exact and (nrange is not None or use_float or games is not None):
        raise InputError("--exact: exact mode only, not with --range, --float or --simulate")
    if nrange is not None:
        if position is not None:
            raise InputError("--range A B: not with --position (a position is one game)")
        _refuse_sharding(sharded, "--range")
        table = api.gaussian(nrange[0], nrange[1], rules, model, use_float=use_float,
                             max_memory=max_memory)
        if as_json:
            click.echo(json.dumps(table.to_dict()))
            return
        click.echo(f"{'n':>5} {'mean':>12} {'variance':>12} {'skewness':>10} "
                   f"{'ex.kurt':>10} {'Kolmogorov':>11} {'TV':>11}")
        for r in table.rows:
            click.echo(f"{r['n']:5d} {r['mean']:12.5f} {r['variance']:12.5f} "
                       f"{r['skewness']:10.5f} {r['excess_kurtosis']:10.5f} "
                       f"{r['kolmogorov']:11.3e} {r['total_variation']:11.3e}")
        return
    if n is None and position is None:
        raise InputError("give N (or --position COUNTS, or --range A B)")
    n, rules = api.game_at(n, rules, position)
    start = api.start_label(rules)
    if sum([use_float, games is not None, winners_only]) > 1:
        raise InputError("choose at most one of --float, --simulate, --winners-only")
    if games is not None:
        _refuse_sharding(sharded, "--simulate")
        res = api.simulate(n, games, seed, rules, players, model, max_memory=max_memory)
        _echo_start(start, as_json)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_sim(res)
    elif use_float:
        _refuse_sharding(sharded, "--float")
        res = api.random_float(n, rules, players, model, max_memory=max_memory)
        _echo_start(start, as_json)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_float(res)
    else:
        if points_per_shard is not None and progress is True:
            raise InputError("--progress: not with --points-per-shard (in-process shards)")
        res = api.random_play(n, rules, players, model, winners_only=winners_only,
                              max_memory=max_memory, progress=resolve_progress(progress),
                              workers=workers, scheduler=scheduler, checkpoint=checkpoint_dir,
                              points_per_shard=points_per_shard, cluster=cluster)
        _echo_start(start, as_json)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_exact(res, winners_only,
                                                                            show_exact)
