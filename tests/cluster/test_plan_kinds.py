"""`zeckenum plan random` and `plan solve`: the forecast's exact numbers against real runs.

References: tests/support/bruteforce.py (plain Python census of the standard game: reachable
states and transitions) and tests/support/rules_bruteforce.py (reachable states of other rule
sets), both sharing no code with zeckenum; the layer sizes of the standard game computed
here from their definition (partitions of n into Fibonacci parts by number of parts, OEIS
A003107 summed over the parts, from memory); sympy.isprime (reference library) for the
primes.  Beside them, the forecast must equal what the runs it forecasts report
(`run_random`, `random_play`, `solve`, `run_solve`).  Probes are kept small (n = 20) so
the tests stay fast; no test looks at the forecast times' values.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import pytest
import sympy
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))
import rules_bruteforce as rbf  # noqa: E402
from bruteforce import census, fibonacci_upto  # noqa: E402
from zeckenum.cli.group import main  # noqa: E402
from zeckenum.cluster import predict, run_random, run_solve  # noqa: E402
from zeckenum.cluster.predict import predict_random, predict_solve  # noqa: E402
from zeckenum.errors import InputError  # noqa: E402
from zeckenum.optimal.solve import solve  # noqa: E402
from zeckenum.randomplay.exact import random_play  # noqa: E402

PROBE = 20


def layer_sizes(n: int) -> dict[int, int]:
    """{k: partitions of n into k Fibonacci parts 1, 2, 3, 5, ...} (k >= 1, or k = 0 for
    n = 0); in the standard game a state is such a partition and its level is k."""
    parts = fibonacci_upto(n)
    # ways[v][k]: partitions of v into k parts from the parts seen so far
    ways = [[0] * (n + 1) for _ in range(n + 1)]
    ways[0][0] = 1
    for f in parts:
        for v in range(f, n + 1):
            for k in range(1, n + 1):
                ways[v][k] += ways[v - f][k - 1]
    return {k: c for k, c in enumerate(ways[n]) if c}


def standard_max_drop() -> int:
    """Most tokens one move of the standard game removes (its level is the token count)."""
    n = 30
    game = rbf.Game(rbf.STANDARD, n)
    return max(sum(take.values()) - sum(give.values()) for take, give in game.moves)


def in_flight_reference(n: int, planes: int) -> int:
    """Bytes of the largest window of max_drop + 1 consecutive layers, one bit per state
    per plane, packed per layer (common practice: ceil(bits / 8) bytes)."""
    sizes = layer_sizes(n)
    span = standard_max_drop()
    return planes * max(sum((sizes.get(k - d, 0) + 7) // 8 for d in range(span + 1))
                        for k in sizes)


# ----------------------------------------------------------------------------- random play


# Source: bruteforce.census (states, transitions); the runs run_random / random_play (the
# forecast must equal them); sympy.isprime; the CRT needs a prime product above M (common
# practice).
@pytest.mark.parametrize("n,model,players,winners_only,workers", [
    (40, "moves", 2, False, 2),
    (30, "pairs", 3, True, 3),
    (36, "pairs", 2, False, 1),
])
def test_random_forecast_equals_the_run(n: int, model: str, players: int,
                                        winners_only: bool, workers: int) -> None:
    p = predict_random(n, workers=workers, model=model, players=players,
                       winners_only=winners_only, probe_n=PROBE)
    run = run_random(n, "standard", players, model, winners_only=winners_only,
                     threads=workers)
    ref = random_play(n, "standard", players, model, winners_only=winners_only)
    want = census(n)
    assert p["reachable_states"] == run.states == ref.states == want["states"]
    assert p["transitions"] == run.transitions == ref.transitions == want["transitions"]
    assert p["denominator_bits"] == run.stats["denominator_bits"] \
        == ref.denominator.bit_length()
    primes = [int(x) for x in p["crt_primes"]]
    assert primes == list(run.primes) == list(ref.primes)
    assert int(p["check_prime"]) == run.check_prime == ref.check_prime
    assert p["primes"] == len(primes) + 1
    assert math.prod(primes) > ref.denominator
    assert all(sympy.isprime(q) for q in [*primes, int(p["check_prime"])])
    assert p["shards"] == run.stats["shards_total"]
    assert p["word_updates"] == run.stats["word_updates"]
    assert p["word_updates"] == p["word_updates_per_prime"] * p["primes"]
    assert p["states_in_space"] == sum(layer_sizes(n).values())
    assert p["memory_per_worker_bytes"] > p["skeleton_bytes"] > 0
    # the forecast follows its documented formula: first sweep + the busiest worker's
    # updates / rate (common practice: arithmetic on the forecast's own printed numbers)
    busiest = p["word_updates_per_prime"] * min(
        p["primes"], math.ceil(p["shards"] / workers) * p["primes_per_shard"])
    formula = p["seconds_first_sweep"] + busiest / p["updates_per_second"]
    assert p["workers"] == workers
    assert p["predicted_seconds"] == pytest.approx(formula, abs=0.051)


# Source: run_random with the same explicit block count (the forecast reuses its planner).
def test_random_forecast_follows_explicit_blocks() -> None:
    p = predict_random(40, blocks=5, probe_n=PROBE)
    run = run_random(40, blocks=5, threads=1)
    assert p["shards"] == run.stats["shards_total"] == 5
    assert p["primes_per_shard"] == math.ceil(p["primes"] / 5)


@pytest.mark.parametrize("kwargs", [
    dict(n=0), dict(n=40, model="bogus"), dict(n=40, players=1), dict(n=40, workers=0),
])
def test_random_forecast_refuses_bad_input(kwargs: dict) -> None:
    n = kwargs.pop("n")
    with pytest.raises(InputError):
        predict_random(n, probe_n=PROBE, **kwargs)


# ----------------------------------------------------------------------------- solve


# Source: layer sizes from the partition definition above, bruteforce.census (reachable
# states: all of them in the standard game), `solve` (states, peak bits).  Documented
# bounds: in-flight <= peak <= 3 x in-flight.
@pytest.mark.parametrize("n,players", [(1, 2), (2, 3), (40, 2), (60, 2), (40, 3)])
def test_solve_forecast_equals_the_run(n: int, players: int) -> None:
    p = predict_solve(n, players=players, probe_n=PROBE)
    res = solve(n, players=players)
    total = sum(layer_sizes(n).values())
    assert p["states"] == p["states_in_space"] == res.states == total == census(n)["states"]
    assert p["states_exact"] is True and p["reach_pass"] is False
    planes = 1 if players == 2 else players
    flight = in_flight_reference(n, planes)
    assert p["in_flight_bits_bytes"] == flight
    assert flight <= res.peak_bits_bytes <= 3 * flight
    assert p["peak_bits_bytes"] == res.peak_bits_bytes
    assert p["levels"] == len(layer_sizes(n))
    assert "one level range at a time" in p["parallel"]
    # the forecast is states of the space / the probe's rate (its documented formula)
    formula = p["states_in_space"] / p["states_per_second"]
    assert p["predicted_seconds"] == pytest.approx(formula, abs=0.051)


# Source: run_solve (shards_total, peak bits) with the same --shards; the ranges must cover
# the levels 0 .. n once, in order (common practice for a chain), holding every state.
@pytest.mark.parametrize("shards", [None, 1, 3, 7])
def test_solve_forecast_shards_equal_the_chain(shards: int | None) -> None:
    n = 50
    p = predict_solve(n, shards=shards, probe_n=PROBE)
    res = run_solve(n, shards=shards)
    assert p["shards"] == res.stats["shards_total"] == len(p["level_ranges"])
    if shards is not None:
        assert p["shards"] == shards
    ranges = p["level_ranges"]
    assert ranges[0][0] == 0 and ranges[-1][1] == n
    assert all(b[0] == a[1] + 1 for a, b in zip(ranges, ranges[1:], strict=False))
    assert sum(p["range_states"]) == sum(layer_sizes(n).values()) == res.states
    assert p["peak_bits_bytes"] == res.peak_bits_bytes


# Source: rules_bruteforce.Game.reachable (independent enumeration of the `twos` game, n
# tokens worth 2, whose start does not reach every state of its space).
def test_solve_forecast_of_another_rule_set() -> None:
    n = 20
    reachable = len(rbf.Game(rbf.DESCRIPTIONS["twos"], n).reachable())
    res = solve(n, "twos")
    bound = predict_solve(n, "twos", probe_n=PROBE)
    assert bound["reach_pass"] is True and bound["states_exact"] is False
    assert bound["states"] == bound["states_in_space"] > reachable
    assert bound["reach_bits_bytes"] > 0
    assert bound["peak_bits_bytes"] == res.peak_bits_bytes
    exact = predict_solve(n, "twos", reach=True, probe_n=PROBE)
    assert exact["states_exact"] is True
    assert exact["states"] == reachable == res.states
    assert exact["states_in_space"] == bound["states_in_space"]


@pytest.mark.parametrize("kwargs", [
    dict(n=0), dict(n=40, players=1), dict(n=40, shards=0), dict(n=40, workers=0),
])
def test_solve_forecast_refuses_bad_input(kwargs: dict) -> None:
    n = kwargs.pop("n")
    with pytest.raises(InputError):
        predict_solve(n, probe_n=PROBE, **kwargs)


# ----------------------------------------------------------------------------- CLI


@pytest.fixture
def small_probes(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(predict, "PROBE_RANDOM_N", PROBE)
    monkeypatch.setattr(predict, "PROBE_SOLVE_N", PROBE)


RANDOM_KEYS = {"kind", "rules", "n", "model", "players", "winners_only", "states_in_space",
               "reachable_states", "transitions", "denominator_bits", "crt_primes",
               "check_prime", "primes", "shards", "primes_per_shard", "workers",
               "word_updates_per_prime", "word_updates", "memory_per_worker_bytes",
               "memory_per_worker", "seconds_first_sweep", "updates_per_second", "probe",
               "predicted_seconds", "predicted_seconds_one_worker"}
SOLVE_KEYS = {"kind", "rules", "n", "players", "workers", "states_in_space", "states",
              "states_exact", "levels", "max_drop", "shards", "level_ranges",
              "peak_bits_bytes", "in_flight_bits_bytes", "memory_per_worker_bytes",
              "memory_per_worker", "states_per_second", "probe", "predicted_seconds",
              "parallel"}
COUNT_KEYS = ["rules", "n", "states_in_space", "reachable_states", "transitions",
              "count_bits", "primes", "shards", "primes_per_shard", "workers",
              "word_updates", "memory_per_worker_bytes", "memory_per_worker",
              "seconds_first_sweep", "updates_per_second", "probe", "predicted_seconds",
              "predicted_seconds_one_worker"]


# Source: bruteforce.census (states, transitions at n = 40).
def test_cli_plan_random_and_solve_json(small_probes: None) -> None:
    runner = CliRunner()
    want = census(40)
    r = runner.invoke(main, ["plan", "random", "40", "--json"])
    assert r.exit_code == 0, r.output
    p = json.loads(r.stdout)
    assert RANDOM_KEYS <= set(p) and p["kind"] == "random"
    assert (p["reachable_states"], p["transitions"]) == (want["states"], want["transitions"])
    r = runner.invoke(main, ["plan", "solve", "40", "--json"])
    assert r.exit_code == 0, r.output
    p = json.loads(r.stdout)
    assert SOLVE_KEYS <= set(p) and p["kind"] == "solve"
    assert p["states"] == want["states"]


# Source: bruteforce.census; the text forms say what the JSON says.
def test_cli_plan_text_forms(small_probes: None) -> None:
    runner = CliRunner()
    r = runner.invoke(main, ["plan", "random", "30", "--model", "pairs", "--players", "3",
                             "--winners-only", "--workers", "2"])
    assert r.exit_code == 0, r.output
    assert r.stdout.startswith("zeckenum plan random  rules=standard  n=30  model=pairs")
    assert f"{census(30)['transitions']:,}" in r.stdout
    r = runner.invoke(main, ["plan", "solve", "30", "--shards", "3", "--workers", "4"])
    assert r.exit_code == 0, r.output
    assert "level ranges (shards)" in r.stdout and " 3 (up to " in r.stdout
    assert "one level range at a time" in r.stdout
    assert f"{census(30)['states']:,} (exact" in r.stdout


# Source: the JSON keys of `plan count` as they were before random and solve were added
# (common practice: a published JSON form keeps its keys and order).
def test_cli_plan_count_json_keeps_its_keys() -> None:
    r = CliRunner().invoke(main, ["plan", "count", "30", "--json", "--probe", "20"])
    assert r.exit_code == 0, r.output
    p = json.loads(r.stdout)
    assert list(p) == COUNT_KEYS
    assert (p["reachable_states"], p["transitions"]) == (census(30)["states"],
                                                         census(30)["transitions"])


@pytest.mark.parametrize("args", [
    ["plan", "random", "0"],
    ["plan", "random", "40", "--model", "bogus"],
    ["plan", "random", "40", "--players", "1"],
    ["plan", "random", "40", "--workers", "0"],
    ["plan", "random", "40", "--probe", "0"],
    ["plan", "solve", "0"],
    ["plan", "solve", "40", "--players", "1"],
    ["plan", "solve", "40", "--players", "65"],
    ["plan", "solve", "40", "--shards", "0"],
    ["plan", "solve", "forty"],
    ["plan", "census", "40"],
])
def test_cli_plan_bad_input_is_one_line(args: list[str], small_probes: None) -> None:
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 2, (r.stdout, r.stderr)
    assert not isinstance(r.exception, Exception) or isinstance(r.exception, SystemExit)
    assert "Traceback" not in r.stdout + r.stderr
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), r.stderr
    assert r.stdout == ""
