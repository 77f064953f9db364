"""The count's route and shape under a memory limit (`counting.route`) against the run.

* word updates: the forecast equals the run's `stats["word_updates"]` on both routes, and
  both equal a count made here from the brute-force move graph (tests/support/bruteforce,
  networkx): one update per (move, length of its source's window) and prime on the
  windowed route; one per move and per state but the start, per (prime, point), on the
  points route, N = longest - shortest + 2 (span + 1 unknowns and one check; common practice:
  what an evaluation of G at N points costs by the recurrence V(s) = x * sum V(pred));
* memory: the ring buffers a shard allocates (measured with tracemalloc, which sees numpy's
  allocations) are at least the forecast ring words and at most the forecast shard bytes
  plus the shard's small output;
* limits chosen from the exact sizes force each route (and keep or recompute); the
  spectrum is the brute force's (bruteforce.census) for n <= 14, and the forecast peak
  stays under the limit;
* a limit below the smallest working one is refused before the exact sweep with one line
  naming it, and rerunning with the named limit succeeds.
"""

from __future__ import annotations

import json
import re
import tracemalloc
from dataclasses import replace

import networkx as nx
import pytest
from bruteforce import census, move_graph, start_state
from click.testing import CliRunner
from zeckenum.cli.group import main
from zeckenum.core.memory import parse_size
from zeckenum.counting.count import count, count_space, count_windows
from zeckenum.counting.points import spectrum_points
from zeckenum.counting.route import (
    CountSizes,
    choose_count_route,
    count_sizes,
    keep_floor,
    smallest_limit,
)
from zeckenum.counting.spectrum import spectrum_residues
from zeckenum.errors import MemoryRefused
from zeckenum.rules.catalogue import get_rules

BIG = 2**34
SLACK = 16384
"""Bytes of Python objects around a shard's arrays (headers, small index arrays): a
constant, whatever the size of the game (common practice)."""


def sized(n: int, rules: str = "standard", limit: int = BIG, threads: int = 1):  # noqa: ANN201
    """(space, windows, sizes) of a count as `count` sees them at `limit`."""
    space = count_space(get_rules(rules).instantiate(n), limit)
    windows, _ = count_windows(space, n, limit, threads)
    return space, windows, count_sizes(space, windows, threads)


def unkept(sizes: CountSizes) -> CountSizes:
    """The sizes a first sweep that did not keep the moves reports."""
    return replace(sizes, kept=False, kept_bytes=sizes.kept_estimate)


def graph_updates(n: int) -> tuple[int, int]:
    """(windowed updates per prime, points updates per (prime, point)) from the brute-force
    move graph: windows by longest/shortest path lengths in the DAG."""
    g = move_graph(n)
    s = start_state(n)
    lo = {s: 0}
    hi = {s: 0}
    for v in nx.topological_sort(g):
        for u in g.predecessors(v):
            lo[v] = min(lo.get(v, 10**9), lo[u] + 1)
            hi[v] = max(hi.get(v, -1), hi[u] + 1)
    windows = sum(hi[u] - lo[u] + 1 for u, _v in g.edges)
    return windows, g.number_of_edges() + g.number_of_nodes() - 1


@pytest.mark.parametrize("n", [5, 12, 25])
def test_word_updates_forecast_equals_the_run_and_the_move_graph(n: int) -> None:
    _space, _windows, sizes = sized(n)
    per_prime, per_point = graph_updates(n)
    assert (sizes.window_updates, sizes.point_updates) == (per_prime, per_point)
    res = count(n, threads=1)
    plan = choose_count_route(sizes, BIG, 1)
    assert plan.route == "windows" and res.stats["route"] == "windows"
    assert res.stats["word_updates"] == plan.word_updates == per_prime * (len(res.primes) + 1)
    pts = count(n, threads=1, points_per_shard=3)
    forced = choose_count_route(sizes, BIG, 1, points_per_shard=3)
    order = census(n)["longest"] - census(n)["shortest"] + 2  # span + 1 points and a check
    assert pts.stats["points"] == order
    assert pts.stats["word_updates"] == forced.word_updates == (
        per_point * order * (len(pts.primes) + 1))
    assert pts.stats["shards"] == forced.shards == (len(pts.primes) + 1) * -(-order // 3)


@pytest.mark.parametrize("rules", ["reversed", "tribonacci", "twos"])
def test_word_updates_forecast_equals_the_run_on_other_rule_sets(rules: str) -> None:
    _space, _windows, sizes = sized(14, rules)
    for kw in ({}, {"points_per_shard": 4}):
        res = count(14, rules, threads=1, **kw)
        assert res.stats["word_updates"] == choose_count_route(sizes, BIG, 1, **kw).word_updates


def _peak(fn) -> int:  # noqa: ANN001
    """Peak bytes numpy allocates during fn(), measured on its second call (the first loads
    the kernels, which allocates)."""
    fn()
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        fn()
        return tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("n", [30, 60])
def test_a_shard_allocates_what_the_plan_forecasts(n: int) -> None:
    space, windows, sizes = sized(n)
    fit = choose_count_route(sizes, BIG, 1)  # kept moves: the shard holds no listing
    primes = [2**61 - 1, 2**61 - 31, 2**60 - 93][: fit.primes_per_shard]
    measured = _peak(lambda: spectrum_residues(space, windows, primes))
    ring = 8 * sizes.window_words * len(primes)
    output = 8 * len(primes) * (windows.longest + 1)
    assert ring <= measured <= fit.shard_bytes + output + SLACK
    k = 5
    pts = choose_count_route(sizes, BIG, 1, points_per_shard=k)
    measured = _peak(lambda: spectrum_points(space, windows, 998244353, list(range(1, k + 1))))
    assert pts.keep_moves
    assert 8 * sizes.point_words * k <= measured <= pts.shard_bytes + 8 * k + SLACK


def _limits(n: int) -> dict[str, int]:
    """Limits that force each variant, from the exact sizes of n (one thread)."""
    _space, _windows, sizes = sized(n)
    low = unkept(sizes)
    floor = keep_floor(sizes)
    points = smallest_limit(low, 1, "points")
    windows = smallest_limit(low, 1, "windows")
    assert points < windows < floor  # the game is large enough to separate the routes
    return {"points": points, "windows": windows, "keep": max(floor, BIG // 4)}


@pytest.mark.parametrize("n", [10, 14])
def test_each_route_under_its_limit_gives_the_brute_force_spectrum(n: int) -> None:
    ref = census(n)  # source: plain-Python brute force
    limits = _limits(n)
    want = {"points": ("points", False), "windows": ("windows", False),
            "keep": ("windows", True)}
    for name, limit in limits.items():
        res = count(n, threads=1, max_memory=limit)
        assert (res.stats["route"], res.stats["keep_moves"]) == want[name], name
        assert res.length_counts == ref["length_counts"], name
        assert res.stats["forecast_peak_bytes"] <= limit
    # between the two: points with more than one point per shard
    mid = (limits["points"] + limits["windows"]) // 2
    res = count(n, threads=1, max_memory=mid)
    assert res.stats["route"] == "points" and res.length_counts == ref["length_counts"]


def test_points_block_is_the_largest_that_fits() -> None:
    _space, _windows, sizes = sized(14)
    low = unkept(sizes)
    limit = (smallest_limit(low, 2, "points") + smallest_limit(low, 2, "windows")) // 2
    plan = choose_count_route(low, limit, 2)
    k = plan.points_per_shard
    assert plan.route == "points" and plan.threads == 2 and plan.peak_bytes <= limit
    bigger = choose_count_route(low, 10 * limit, 2, points_per_shard=k + 1)
    assert bigger.peak_bytes > limit or k == sizes.points


def test_a_limit_too_small_is_refused_with_the_smallest_that_works() -> None:
    _space, _windows, sizes = sized(14)
    need = smallest_limit(unkept(sizes), 1)
    with pytest.raises(MemoryRefused, match=r"needs at least .* --max-memory \d+K or more"):
        count(14, threads=1, max_memory=need - 1)
    runner = CliRunner()
    res = runner.invoke(main, ["count", "14", "--threads", "1", "--max-memory",
                               str(need - 1)])
    assert res.exit_code == 3
    line = res.output.strip()
    assert line.startswith("zeckenum: error: ") and "\n" not in line
    named = re.search(r"--max-memory (\S+) or more", line).group(1)
    assert parse_size(named) >= need
    ok = runner.invoke(main, ["count", "14", "--threads", "1", "--max-memory", named,
                              "--json"])
    assert ok.exit_code == 0, ok.output
    got = json.loads(ok.output)
    assert {int(k): int(v) for k, v in got["length_counts"].items()} == census(14)[
        "length_counts"]


def test_a_limit_below_the_first_sweep_is_refused_before_it() -> None:
    res = CliRunner().invoke(main, ["count", "40", "--threads", "1", "--max-memory", "150K"])
    assert res.exit_code == 3
    assert "needs at least" in res.output and "--max-memory" in res.output


def test_points_per_shard_forces_the_points_route_and_is_refused_when_too_big() -> None:
    _space, _windows, sizes = sized(14)
    low = unkept(sizes)
    limit = smallest_limit(low, 1, "windows")  # the windowed route would fit
    res = count(14, threads=1, max_memory=limit, points_per_shard=1)
    assert res.stats["route"] == "points" and res.stats["points_per_shard"] == 1
    need = smallest_limit(low, 1, "points", per_shard=sizes.points)
    with pytest.raises(MemoryRefused, match="needs at least"):
        count(14, threads=1, max_memory=min(need, keep_floor(sizes)) - 1,
              points_per_shard=sizes.points)


def test_threads_not_given_shrink_to_the_memory_given_fail_over_it() -> None:
    import os

    if (os.cpu_count() or 1) < 2:
        pytest.skip("needs two cores to run fewer threads than cores")
    _space, _windows, sizes = sized(14)
    limit = smallest_limit(unkept(sizes), 1, "points")
    res = count(14, max_memory=limit)  # threads: all cores, fewer when short
    assert res.stats["threads"] == 1 and res.length_counts == census(14)["length_counts"]
    with pytest.raises(MemoryRefused, match="needs at least"):
        count(14, threads=2, max_memory=limit)
