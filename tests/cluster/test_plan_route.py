"""`plan count --max-memory` (route and shape under a limit), `plan count --budget` and
`plan random --max-memory`, against the runs they forecast.

The forecasts must equal what the run then does (shards, shape, memory, word updates:
read from the run's stats) and the run must give the brute force's spectrum
(tests/support/bruteforce.census); n = 300 is never planned here (about 1.5 minutes):
small n with limits chosen from their exact sizes stand in for it.
"""

from __future__ import annotations

import json
from dataclasses import replace

import pytest
from bruteforce import census
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from zeckenum.cli.group import main
from zeckenum.cluster.budget import fit, largest_n_within
from zeckenum.core.checks import parse_duration
from zeckenum.counting.count import count, count_space, count_windows
from zeckenum.counting.route import count_sizes, keep_floor, smallest_limit
from zeckenum.errors import InputError
from zeckenum.rules.catalogue import get_rules


def _unkept_limits(n: int) -> tuple[int, int, int]:
    """(smallest points limit, smallest windows limit, keep floor) of n on one core."""
    space = count_space(get_rules("standard").instantiate(n), 2**34)
    windows, _ = count_windows(space, n, 2**34, 1)
    sizes = count_sizes(space, windows, 1)
    low = replace(sizes, kept=False, kept_bytes=sizes.kept_estimate)
    return (smallest_limit(low, 1, "points"), smallest_limit(low, 1, "windows"),
            keep_floor(sizes))


def _plan(args: list[str]) -> dict:
    res = CliRunner().invoke(main, ["plan", "count", *args, "--probe", "20", "--json"])
    assert res.exit_code == 0, res.output
    return json.loads(res.output)


@pytest.mark.parametrize("n", [14, 40])
def test_plan_count_under_a_limit_is_what_the_count_then_does(n: int) -> None:
    points, windows, floor = _unkept_limits(n)
    assert points < windows < floor
    for limit, route in ((points, "points"), ((points + windows) // 2, "points"),
                         (windows, "windows")):
        p = _plan([str(n), "--max-memory", str(limit)])
        assert p["route"] == route and p["memory_per_worker_bytes"] <= limit
        assert p["memory_per_shard"].endswith("iB") or p["memory_per_shard"].endswith(" B")
        res = count(n, threads=1, max_memory=limit)
        s = res.stats
        assert (s["route"], s["shards"], s["memory_per_shard_bytes"]) == (
            p["route"], p["shards"], p["memory_per_shard_bytes"])
        assert s["word_updates"] == p["word_updates"]
        key = "points_per_shard" if route == "points" else "primes_per_shard"
        assert s[key] == p[key]
        assert res.length_counts == census(n)["length_counts"] if n <= 14 else True
    for key in ("route", "shards", "memory_per_shard", "memory_per_shard_bytes",
                "memory_per_worker", "memory_per_worker_bytes", "word_updates",
                "predicted_seconds"):
        assert key in p


def test_plan_count_refuses_a_limit_too_small_naming_the_smallest() -> None:
    points, _windows, _floor = _unkept_limits(14)
    res = CliRunner().invoke(main, ["plan", "count", "14", "--probe", "20",
                                    "--max-memory", str(points - 1)])
    assert res.exit_code == 3
    line = res.output.strip()
    assert "\n" not in line and "needs at least" in line and "--max-memory" in line


def test_plan_count_without_a_limit_keeps_its_output() -> None:
    # the default forecast (the golden outputs) has no route keys
    res = CliRunner().invoke(main, ["plan", "count", "30", "--probe", "20", "--json"])
    assert res.exit_code == 0
    assert "route" not in json.loads(res.output)


def test_plan_random_under_a_limit_shrinks_its_blocks() -> None:
    def plan(*extra: str) -> dict:
        res = CliRunner().invoke(main, ["plan", "random", "60", "--probe", "20", "--json",
                                        *extra])
        assert res.exit_code == 0, res.output
        return json.loads(res.output)

    free = plan()
    tight = plan("--max-memory", str(free["memory_per_worker_bytes"] - 1))
    assert tight["memory_per_worker_bytes"] < free["memory_per_worker_bytes"]
    assert tight["primes_per_shard"] < free["primes_per_shard"]
    assert tight["primes"] == free["primes"] and tight["word_updates"] == free["word_updates"]


# ------------------------------------------------------------------------ budget


def test_fit_recovers_a_line_and_reports_its_errors() -> None:
    # common practice: least squares through exact points has no residual
    f = fit("y", "1,n", [10, 20, 30, 40], [5.0 + 2.0 * n for n in (10, 20, 30, 40)])
    assert f(100) == pytest.approx(205.0)
    assert f.max_rel_error < 1e-9 and f.holdout_rel_error < 1e-9


def test_budget_search_is_monotone_and_confirmed() -> None:
    small = largest_n_within(2.0, samples=[30, 40, 50, 60, 70], probe_n=20,
                             confirm_states=10**6)
    large = largest_n_within(20.0, samples=[30, 40, 50, 60, 70], probe_n=20,
                             confirm_states=10**6)
    assert 1 <= small["largest_n"] <= large["largest_n"]
    f = large["forecast"]
    assert f["predicted_seconds"] <= 20.0
    assert large["next_n"] is None or large["next_n"]["predicted_seconds"] > 20.0
    assert set(large["model"]["fits"]) >= {"count_bits", "longest", "mean_window"}
    assert large["confirmed"] is not None and large["assumptions"]


def test_budget_on_the_command_line() -> None:
    res = CliRunner().invoke(main, ["plan", "count", "--budget", "3s", "--probe", "20",
                                    "--max-memory", "1G"])
    assert res.exit_code == 0, res.output
    assert "largest n" in res.output and "model (measured n" in res.output
    assert "assumptions" in res.output


@pytest.mark.parametrize("bad", ["0", "-1", "abc", "3 fortnights", "0s", "1e9", "", "nan",
                                 "inf", "2y", "10000000000000000h"])
def test_bad_budgets_are_one_line_exit_2(bad: str) -> None:
    res = CliRunner().invoke(main, ["plan", "count", "--budget", bad])
    assert res.exit_code == 2, (bad, res.output)
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), res.output


def test_budget_and_n_together_or_neither_are_refused() -> None:
    for args in (["30", "--budget", "1m"], []):
        res = CliRunner().invoke(main, ["plan", "count", *args])
        assert res.exit_code == 2 and res.output.count("\n") == 1, res.output


@settings(max_examples=200, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(st.text(max_size=30))
def test_any_text_is_a_positive_duration_or_one_input_error(text: str) -> None:
    try:
        seconds = parse_duration(text)
    except InputError as exc:
        assert "\n" not in str(exc)
        return
    assert 0 < seconds <= 366 * 86400


@pytest.mark.parametrize(("text", "seconds"), [("90", 90), ("90s", 90), ("30m", 1800),
                                               ("1h", 3600), ("1.5h", 5400), ("2d", 172800),
                                               (" 45 M ", 2700)])
def test_durations_read_as_documented(text: str, seconds: float) -> None:
    assert parse_duration(text) == seconds
