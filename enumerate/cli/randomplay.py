"""The `random` command: exact, float and Monte Carlo random play, and Gaussian diagnostics.

Exact results are printed as decimals of `clifmt.DIGITS` (12) significant digits, each the
exact rational correctly rounded (computed in integers, never through a float); `--exact`
adds the exact reduced fractions, which `--json` always carries.
"""

from __future__ import annotations

import json
import math
from fractions import Fraction

import click
from zeckenum.cli.errors import fail
from zeckenum.cli.options import (
    WORKERS,
    OneLineCommand,
    PositiveInt,
    bounded,
    max_memory_option,
    progress_option,
    resolve_progress,
    scheduler_option,
)
from zeckenum.core.checks import RANDOM_MAX_PLAYERS, RANDOM_MODELS
from zeckenum.core.text import DIGITS, decimal, plural
from zeckenum.errors import InputError, ZeckenumError
from zeckenum.randomplay.exact import frac_str
from zeckenum.randomplay.simulate import MAX_GAMES

CONVENTION = "a game with no move (n = 1) counts as a win for player P (the last player)"


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


def gaussian_table(lo: int, hi: int, rules: str, model: str, use_float: bool,
                   max_memory: int | None = None) -> list[dict]:
    """One row of Gaussian diagnostics per n in lo..hi (exact or float distribution).

    The largest n's memory forecast is checked before any n runs (the forecasts grow with
    n), so a range that cannot finish is refused up front."""
    from zeckenum.randomplay.exact import random_play, refuse_random
    from zeckenum.randomplay.floating import float_play

    if not use_float:
        refuse_random(hi, rules, 2, model, max_memory=max_memory)
    rows = []
    for n in range(lo, hi + 1):
        if use_float:
            g = float_play(n, rules, 2, model, max_memory=max_memory).gaussian
        else:
            g = random_play(n, rules, 2, model, max_memory=max_memory).gaussian
        rows.append({"n": n, **g})
    return rows


SHARD_OPTIONS = {"workers": "--workers", "scheduler": "--scheduler",
                 "checkpoint_dir": "--checkpoint", "progress": "--progress"}
"""Exact mode only: with any of them (or the default --progress on a terminal) the prime
blocks run through the sharded driver (`cluster.run.run_random`), which shows a progress
bar; an explicit --progress is refused in the other modes."""


def _refuse_sharding(sharded: dict, mode: str) -> None:
    """InputError when an exact-mode sharding option is given with another mode."""
    given = [flag for key, flag in SHARD_OPTIONS.items() if sharded.get(key)]
    if given:
        raise InputError(f"{', '.join(given)}: exact mode only, not with {mode}")


@click.command("random", cls=OneLineCommand)
@click.argument("n", type=PositiveInt(), required=False)
@click.option("--players", "-p", type=bounded(2, RANDOM_MAX_PLAYERS), default=2, show_default=True,
              help=f"Number of players P (2..{RANDOM_MAX_PLAYERS}).")
@click.option("--model", type=click.Choice(RANDOM_MODELS), default="moves", show_default=True,
              help="moves: uniform over legal moves; pairs: uniform over movable token pairs.")
@click.option("--rules", default="standard", show_default=True, help="Rule set name.")
@click.option("--winners-only", is_flag=True,
              help="Exact win probabilities only (residues of the length mod P; much faster).")
@click.option("--float", "use_float", is_flag=True,
              help="float64 sweep with a rigorous rounding-error bound.")
@click.option("--simulate", "games", type=bounded(1, MAX_GAMES), default=None, metavar="K",
              help="Monte Carlo: play K random games.")
@click.option("--seed", type=bounded(0, 2**63 - 1), default=0, show_default=True,
              help="Seed for --simulate.")
@click.option("--range", "nrange", type=PositiveInt(), nargs=2, default=None, metavar="A B",
              help="Gaussian diagnostics table for n = A..B.")
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object (exact fractions as \"num/den\" strings).")
@click.option("--exact", "show_exact", is_flag=True,
              help="Exact mode: print the exact fractions after the 12-digit decimals.")
@click.option("--workers", type=WORKERS, default=None,
              help="Exact mode: run the prime blocks on a local Dask cluster of K worker "
                   "processes.")
@scheduler_option("Exact mode: run the prime blocks on an existing Dask cluster "
                  "(e.g. tcp://host:8786).")
@click.option("--checkpoint", "checkpoint_dir", type=click.Path(file_okay=False), default=None,
              help="Exact mode: keep each finished block in DIR; rerunning resumes from it.")
@progress_option("Sharded exact mode: show a progress bar of the prime blocks on stderr")
@max_memory_option
def random_command(n, players, model, rules, winners_only, use_float, games, seed, nrange,
                   as_json, show_exact, workers, scheduler, checkpoint_dir, progress,
                   max_memory) -> None:
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
    """
    sharded = {"workers": workers, "scheduler": scheduler, "checkpoint_dir": checkpoint_dir,
               "progress": progress is True}
    try:
        _run(n, players, model, rules, winners_only, use_float, games, seed, nrange, as_json,
             sharded, show_exact, max_memory=max_memory,
             progress=resolve_progress(progress))
    except ZeckenumError as exc:
        fail(exc)


def _run(n, players, model, rules, winners_only, use_float, games, seed, nrange,
         as_json, sharded: dict | None = None, show_exact: bool = False, *,
         max_memory: int | None = None, progress: bool = False) -> None:
    sharded = sharded or {}
    if show_exact and (nrange is not None or use_float or games is not None):
        raise InputError("--exact: exact mode only, not with --range, --float or --simulate")
    if nrange is not None:
        _refuse_sharding(sharded, "--range")
        lo, hi = nrange
        if lo < 1 or hi < lo:
            raise InputError(f"--range needs 1 <= A <= B, got {lo} {hi}")
        rows = gaussian_table(lo, hi, rules, model, use_float, max_memory)
        if as_json:
            click.echo(json.dumps({"rules": rules, "model": model,
                                   "mode": "float" if use_float else "exact",
                                   "gaussian": rows}))
            return
        click.echo(f"{'n':>5} {'mean':>12} {'variance':>12} {'skewness':>10} "
                   f"{'ex.kurt':>10} {'Kolmogorov':>11} {'TV':>11}")
        for r in rows:
            click.echo(f"{r['n']:5d} {r['mean']:12.5f} {r['variance']:12.5f} "
                       f"{r['skewness']:10.5f} {r['excess_kurtosis']:10.5f} "
                       f"{r['kolmogorov']:11.3e} {r['total_variation']:11.3e}")
        return
    if n is None:
        raise InputError("give N (or --range A B)")
    if sum([use_float, games is not None, winners_only]) > 1:
        raise InputError("choose at most one of --float, --simulate, --winners-only")
    if games is not None:
        _refuse_sharding(sharded, "--simulate")
        from zeckenum.randomplay.simulate import simulate

        res = simulate(n, games, seed, rules, players, model, max_memory=max_memory)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_sim(res)
    elif use_float:
        _refuse_sharding(sharded, "--float")
        from zeckenum.randomplay.floating import float_play

        res = float_play(n, rules, players, model, max_memory=max_memory)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_float(res)
    elif progress or any(sharded.values()):
        # the sharded driver (in-process threads without --workers/--scheduler) is the one
        # that shows a progress bar of the prime blocks
        from zeckenum.cluster.run import run_random

        opts = {k: v for k, v in sharded.items() if k != "progress"}
        res = run_random(n, rules, players, model, winners_only=winners_only,
                         max_memory=max_memory, progress=progress, **opts)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_exact(res, winners_only,
                                                                            show_exact)
    else:
        from zeckenum.randomplay.exact import random_play

        res = random_play(n, rules, players, model, winners_only=winners_only,
                          max_memory=max_memory)
        click.echo(json.dumps(res.to_dict())) if as_json else _print_exact(res, winners_only,
                                                                            show_exact)
