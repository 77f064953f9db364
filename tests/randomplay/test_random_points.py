"""Exact random play by evaluation points (`randomplay.points`) against references outside it.

* tests/support/fraction_bruteforce.py (plain Python, fractions.Fraction, no engine code):
  the length law and the win probabilities must be equal for every shard shape (points per
  shard 1, 2, several and all), both models, 2 and 3 players, n <= 14;
* the windowed route (`randomplay.exact.random_play`, itself checked against the brute force
  in test_random.py) for larger n, computed with a disjoint prime set (primes below 2**50
  that are 1 mod N here, the largest primes below 2**50 there): two independent modular
  computations of the same rationals;
* sympy for the primes' properties (primality, exact order of the root of unity);
* corrupted shard values (a monkeypatched wrapper) must be caught: by the degree check of
  the inverse transform, or by the check prime when the corruption is a polynomial of
  admissible degree (common practice: a redundant residue detects a wrong CRT input).
"""

from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

import pytest
import sympy as sp
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))
import zeckenum.randomplay.points as rpp  # noqa: E402
from fraction_bruteforce import length_law, win_law  # noqa: E402
from zeckenum.cli.group import main  # noqa: E402
from zeckenum.core.ntt import (  # noqa: E402
    coefficients_from_values,
    ntt_primes,
    ntt_primes_for_bits,
    root_of_order,
)
from zeckenum.errors import CheckPrimeMismatch, InputError, MemoryRefused  # noqa: E402
from zeckenum.randomplay.exact import random_play  # noqa: E402
from zeckenum.randomplay.points import law_order, random_play_points  # noqa: E402

MODELS = ("moves", "pairs")


def _same_but_primes(a, b) -> None:  # noqa: ANN001
    """a equals b in every compared field except the primes (each route has its own)."""
    assert dataclasses.replace(a, primes=b.primes, check_prime=b.check_prime) == b
    assert a.length_probability == b.length_probability
    assert a.win_probability == b.win_probability and a.denominator == b.denominator


# Source: fractions.Fraction brute force (memoised over states), n <= 14, P = 2 and 3.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n", [1, 2, 3, 7, 12, 14])
@pytest.mark.parametrize("per_shard", [1, 2, 5, None])
def test_law_equals_the_brute_force_for_every_shard_shape(n: int, model: str,
                                                          per_shard: int | None) -> None:
    ref = length_law(n, model)
    for players in (2, 3):
        res = random_play_points(n, model=model, players=players, points_per_shard=per_shard,
                                 threads=2)
        assert res.length_probability == ref
        assert res.win_probability == win_law(ref, players)
        assert res.stats["method"] == "points"
        per = res.stats["points"] if per_shard is None else min(per_shard, res.stats["points"])
        assert res.stats["shards"] == (len(res.primes) + 1) * -(-res.stats["points"] // per)


# Source: fractions.Fraction brute force; winners-only mode sums the law by length mod P.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n", [1, 6, 13])
@pytest.mark.parametrize("players", [2, 3, 5])
def test_winners_only_equals_the_brute_force(n: int, model: str, players: int) -> None:
    ref = win_law(length_law(n, model), players)
    res = random_play_points(n, model=model, players=players, winners_only=True,
                             points_per_shard=3, threads=2)
    assert res.win_probability == ref and res.length_probability is None


# Source: fractions.Fraction brute force; the standard game layered by a potential (moves
# that drop several levels) has the standard game's law.
@pytest.mark.parametrize("model", MODELS)
def test_multi_level_drops_equal_the_brute_force(model: str) -> None:
    from zeckenum.core.statespace import build_space
    from zeckenum.rules.catalogue import RULESETS_DIR
    from zeckenum.rules.rulefile import parse_rules

    text = (RULESETS_DIR / "standard.toml").read_text()
    rs = parse_rules(text.replace('layering = "tokens"', 'layering = "potential"'))
    assert build_space(rs.instantiate(13)).max_drop >= 2
    ref = length_law(13, model)
    for per in (1, 4, None):
        res = random_play_points(13, rs, players=3, model=model, points_per_shard=per)
        assert res.length_probability == ref and res.win_probability == win_law(ref, 3)


def _ntt_primes_down_to(low: int, order: int) -> int:
    """How many primes = 1 mod `order` lie in [low, 2**50) (sympy's primality test)."""
    top = (2**50 - 2) // order * order + 1
    return sum(1 for c in range(top, low - 1, -order) if sp.isprime(c))


# Source: the windowed route (checked against the brute force in test_random.py), computed
# modulo a disjoint set of primes.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n", [30, 60])
def test_equals_the_windowed_route(n: int, model: str) -> None:
    ref = random_play(n, model=model, players=3, threads=2)
    # the points route skips every prime = 1 mod N at or above the windowed route's smallest
    order = law_order(min(ref.length_probability), max(ref.length_probability))
    offset = _ntt_primes_down_to(min(*ref.primes, ref.check_prime), order)
    res = random_play_points(n, model=model, players=3, points_per_shard=37, threads=2,
                             prime_offset=offset)
    assert res.stats["points"] == order
    _same_but_primes(res, ref)
    assert not {*res.primes, res.check_prime} & {*ref.primes, ref.check_prime}
    fast = random_play(n, model=model, players=3, winners_only=True, threads=2)
    got = random_play_points(n, model=model, players=3, winners_only=True, threads=2)
    _same_but_primes(got, fast)


@pytest.mark.slow
def test_equals_the_windowed_route_n120() -> None:
    # model "moves" only: "pairs" needs about 20 times the primes (minutes per route)
    ref = random_play(120, threads=2, players=3)
    res = random_play_points(120, points_per_shard=100, threads=2, players=3)
    _same_but_primes(res, ref)


# Source: sympy (primality, multiplicative order); the primes must lie in the proved ranges
# of the mul arithmetic and be 1 mod N so that the points are N distinct roots of unity.
def test_primes_are_ntt_friendly_and_cover_the_denominator() -> None:
    res = random_play_points(40, model="pairs", points_per_shard=64)
    order = res.stats["points"]
    assert order == law_order(min(res.length_probability), max(res.length_probability))
    prod = 1
    for q in (*res.primes, res.check_prime):
        assert sp.isprime(q) and q % order == 1 and 2**13 < q < 2**50
        assert sp.n_order(root_of_order(q, order), q) == order
    for q in res.primes:
        prod *= q
    assert prod > res.denominator and res.check_prime not in res.primes
    again, check = ntt_primes_for_bits(res.denominator.bit_length(), order)
    assert (again, check) == (list(res.primes), res.check_prime)


# Source: a naive sum of the powers (every size: the fast transforms for 2**k and 3 * 2**k,
# the kernel of the definition for the others), and sympy's number-theoretic transform
# (sympy.discrete.transforms.ntt, powers of two only) on random coefficients.
@pytest.mark.parametrize("order", [1, 2, 3, 4, 5, 6, 7, 8, 12, 30, 48, 64, 384, 437])
def test_inverse_transform_recovers_random_polynomials(order: int) -> None:
    import random

    from sympy.discrete.transforms import ntt

    rng = random.Random(order)
    p = ntt_primes(order, 1)[0]
    w = root_of_order(p, order)
    assert sp.n_order(w, p) == order
    coeffs = [rng.randrange(p) for _ in range(order)]
    values = [sum(c * pow(w, k * j, p) for j, c in enumerate(coeffs)) % p
              for k in range(order)]
    assert coefficients_from_values(values, p, w) == coeffs
    if order & (order - 1) == 0:
        # sympy's forward transform uses the root g**((p-1)/N) of its primitive root g
        ws = pow(sp.primitive_root(p), (p - 1) // order, p)
        values = [int(x) for x in ntt(coeffs, p)]
        assert coefficients_from_values(values, p, ws) == coeffs


def _corrupt(monkeypatch: pytest.MonkeyPatch, how: str) -> None:
    """Make the wrapper return wrong values for the first reconstruction prime."""
    real = rpp.random_law_points
    first: list[int] = []

    def bad(skel, prime, points, unit):  # noqa: ANN001, ANN202
        vals, upd = real(skel, prime, points, unit)
        first.append(prime) if not first else None
        if prime == first[0]:
            vals = vals.copy()
            if how == "one point":
                vals[0] = (vals[0] + 1) % prime
            else:  # add 1 * x**shortest at every point: Q gains 1 in its constant term
                for t, x in enumerate(points):
                    vals[t] = (int(vals[t]) + pow(int(x), skel.shortest, prime)) % prime
        return vals, upd

    monkeypatch.setattr(rpp, "random_law_points", bad)


@pytest.mark.parametrize("how", ["one point", "a polynomial"])
def test_corrupted_values_are_caught(monkeypatch: pytest.MonkeyPatch, how: str) -> None:
    _corrupt(monkeypatch, how)
    with pytest.raises(CheckPrimeMismatch):
        random_play_points(20, points_per_shard=4, threads=1)
    with pytest.raises(CheckPrimeMismatch):
        random_play_points(20, winners_only=True, threads=1)


def test_corruption_exits_4_on_the_command_line(monkeypatch: pytest.MonkeyPatch) -> None:
    _corrupt(monkeypatch, "a polynomial")
    res = CliRunner().invoke(main, ["random", "20", "--points-per-shard", "8"])
    assert res.exit_code == 4, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), res.output


def test_command_line_runs_by_points_and_refuses_bad_input() -> None:
    runner = CliRunner()
    res = runner.invoke(main, ["random", "11", "--points-per-shard", "3", "--json",
                               "--players", "3"])
    assert res.exit_code == 0, res.output
    got = json.loads(res.output)
    ref = length_law(11, "moves")  # source: fractions.Fraction brute force
    assert {int(k): v for k, v in got["length_probability"].items()} == {
        k: f"{p.numerator}/{p.denominator}" for k, p in ref.items()}
    assert got["stats"]["method"] == "points"
    for bad in (["--points-per-shard", "0"], ["--points-per-shard", "-3"],
                ["--points-per-shard", "x"], ["--points-per-shard", "2", "--checkpoint", "d"],
                ["--points-per-shard", "2", "--workers", "2"],
                ["--points-per-shard", "2", "--float"],
                ["--points-per-shard", "2", "--progress"]):
        res = runner.invoke(main, ["random", "9", *bad])
        assert res.exit_code == 2, (bad, res.output)
        lines = res.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), res.output


def test_api_checks_its_arguments() -> None:
    import zeckenum

    for bad in (0, -3, "x", True, 2.5):
        with pytest.raises(InputError):
            zeckenum.random_play(9, points_per_shard=bad)
    with pytest.raises(InputError):
        zeckenum.random_play(9, points_per_shard=2, checkpoint="somewhere")


# Source: common practice (a run that cannot fit is refused before it allocates).
def test_memory_is_refused_before_the_shards_allocate() -> None:
    ok = random_play_points(40, points_per_shard=16, threads=2)
    need = ok.stats["forecast_peak_bytes"]
    assert need >= 2 * ok.stats["shard_peak_bytes"]
    with pytest.raises(MemoryRefused, match="evaluation points"):
        random_play_points(40, points_per_shard=16, threads=2, max_memory=need - 1)
    again = random_play_points(40, points_per_shard=16, threads=2, max_memory=need)
    assert again.length_probability == ok.length_probability


# Source: the operating system's peak resident size of a fresh process (Linux VmHWM, reset
# after the kernels are loaded): the forecast must bound what the run adds.
def test_memory_forecast_bounds_the_measured_growth() -> None:
    import subprocess

    code = (
        "import json\n"
        "from zeckenum.randomplay.points import random_play_points\n"
        "random_play_points(8, points_per_shard=2)\n"
        "def rss(key):\n"
        "    return [int(x.split()[1]) * 1024 for x in open('/proc/self/status')\n"
        "            if x.startswith(key)][0]\n"
        "open('/proc/self/clear_refs', 'w').write('5')  # restart the high-water mark\n"
        "base = rss('VmRSS')\n"
        "res = random_play_points(100, threads=2, points_per_shard=48)\n"
        "peak = rss('VmHWM')\n"
        "print(json.dumps([peak - base, res.stats['forecast_peak_bytes']]))\n")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True)
    grew, forecast = json.loads(out.stdout.strip().splitlines()[-1])
    assert 0 < grew <= forecast, (grew, forecast)
