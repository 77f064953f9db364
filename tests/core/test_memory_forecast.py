"""Memory forecasts: exact sizes against independent counts, forecasts against measured peaks,
and refusals that happen before anything large is allocated.

Sources: the number of states of the standard game at n is the number of partitions of n
into Fibonacci parts, OEIS A003107 (from memory: 1, 1, 2, 3, 4, 6, 8, 10, 14, 17, 22, ...),
recomputed here by a brute force that shares no code with the engine; a count vector's
legal moves are counted by the brute force of tests/support/bruteforce.py.  Measured peaks are the
growth of a fresh process's resident-set high-water mark (VmHWM of /proc/self/status, reset
after the kernels are loaded; unlike getrusage it does not inherit the forking parent's
size; common practice).
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import subprocess
import sys
import textwrap
from itertools import product

import numpy as np
import pytest
import zeckenum
from bruteforce import fibonacci_upto, successors
from zeckenum.core.statespace import build_space, rank_table
from zeckenum.errors import MemoryRefused
from zeckenum.rules.catalogue import get_rules


def _new(name: str):  # noqa: ANN202 - a helper of the module under test
    """`zeckenum.core.statespace.<name>` (looked up at call time)."""
    import zeckenum.core.statespace

    return getattr(zeckenum.core.statespace, name)

MiB = 2**20

# OEIS A003107, n = 0..20 (from memory)
A003107 = [1, 1, 2, 3, 4, 6, 8, 10, 14, 17, 22, 27, 33, 41, 49, 59, 71, 83, 99, 115, 134]


def vectors_of_value(values: list[int], n: int) -> list[tuple[int, ...]]:
    """Every count vector over `values` of value n (brute force, no engine code)."""
    ranges = [range(n // v + 1) for v in values]
    return [c for c in product(*ranges)
            if sum(a * v for a, v in zip(c, values, strict=True)) == n]


@pytest.mark.parametrize("n", [1, 2, 7, 12, 20])
def test_states_bound_is_the_partition_count_for_the_standard_game(n: int) -> None:
    spec = get_rules("standard").instantiate(n)
    brute = len(vectors_of_value(fibonacci_upto(n), n))
    assert brute == A003107[n]
    bound = _new("states_upper_bound")(spec.values, n)
    # an upper bound, and exact up to its rounding margin (+1, then rounded up)
    assert brute <= bound <= brute + 2
    assert build_space(spec).total_states() == brute


@pytest.mark.parametrize("rules,n", [("tribonacci", 15), ("twos", 12), ("reversed", 14)])
def test_states_bound_holds_for_other_rule_sets(rules: str, n: int) -> None:
    spec = get_rules(rules).instantiate(n)
    values = [int(v) for v in spec.values]
    brute = len(vectors_of_value(values, spec.n))
    assert brute <= _new("states_upper_bound")(values, spec.n) <= brute + 2
    assert build_space(spec).total_states() <= brute


@pytest.mark.parametrize("n", [5, 12, 21])
def test_rank_table_bytes_is_exact(n: int) -> None:
    spec = get_rules("standard").instantiate(n)
    space = build_space(spec)
    assert _new("rank_table_bytes")(spec.nbins, spec.n, spec.start_level) == space.tab.nbytes


@pytest.mark.parametrize("n", [6, 11, 16])
def test_move_counts_per_level_match_a_brute_force(n: int) -> None:
    """moves_by_level(+1) counts every legal move out of every count vector of value n, by
    its token count (the standard game's level); the brute force lists them."""
    spec = get_rules("standard").instantiate(n)
    space = build_space(spec)
    want = [0] * (n + 1)
    for c in vectors_of_value(fibonacci_upto(n), n):
        want[sum(c)] += len(successors(c))
    got = space.moves_by_level(+1)
    assert [int(x) for x in got] == want
    # every move out of one layer goes into another: the same total
    assert int(space.moves_by_level(-1).sum()) == sum(want)


def test_rank_table_marks_overflow_instead_of_wrapping() -> None:
    """Forty bins of value 1: tab[k, v, v] = C(v + k - 1, k - 1) (stars and bars, common
    practice), beyond 2**63 for large v and k.  Entries that fit must be exact, the others
    OVERFLOW (-1), never a wrapped-around positive number."""
    k, n = 40, 60
    ones = np.ones(k, dtype=np.int64)
    tab = rank_table(ones, ones, n, n)
    for kk in range(1, k + 1):
        for v in range(n + 1):
            want = math.comb(v + kk - 1, kk - 1)
            got = int(tab[kk, v, v])
            if want < 2**63:
                assert got == want, (kk, v)
            else:
                assert got == -1, (kk, v)  # OVERFLOW
    assert (tab == -1).any()


def test_space_with_too_many_states_is_refused() -> None:
    spec = get_rules("standard").instantiate(60)
    ones = np.ones(40, dtype=np.int64)
    wide = dataclasses.replace(spec, values=ones, weights=ones,
                               start=np.r_[60, np.zeros(39, dtype=np.int64)])
    with pytest.raises(MemoryRefused, match="2\\^63"):
        build_space(wide)


def test_max_memory_refuses_each_api_call() -> None:
    from zeckenum.analysis.extremal import extremal_games
    from zeckenum.analysis.movestats import move_totals
    from zeckenum.optimal.solve import solve
    from zeckenum.randomplay.exact import random_play
    from zeckenum.randomplay.floating import float_play
    from zeckenum.randomplay.simulate import simulate

    calls = [
        lambda: zeckenum.count(40, max_memory=4096),
        lambda: random_play(40, max_memory=4096),
        lambda: random_play(40, winners_only=True, max_memory=4096),
        lambda: float_play(40, max_memory=4096),
        lambda: simulate(10, 10**6, max_memory=4096),
        lambda: solve(40, max_memory=4096),
        lambda: extremal_games(40, max_memory=4096),
        lambda: move_totals(20, max_memory=4096),
    ]
    for call in calls:
        with pytest.raises(MemoryRefused, match="limit is 4.0 KiB"):
            call()


# ------------------------------------------------------------ forecasts against peaks

MEASURE = textwrap.dedent("""
    import json, sys, tempfile
    import psutil
    import zeckenum
    from zeckenum.randomplay.floating import float_play
    from zeckenum.randomplay.exact import random_play
    from zeckenum.optimal.solve import solve
    kind, n = sys.argv[1], int(sys.argv[2])
    call = {
        "count": lambda n: zeckenum.count(n, threads=2),
        "law": lambda n: random_play(n, threads=2),
        "wins": lambda n: random_play(n, winners_only=True, threads=2),
        "pairs": lambda n: random_play(n, model="pairs", threads=2),
        "float": lambda n: float_play(n, threads=2),
        "solve": lambda n: solve(n),
        "points": lambda n: zeckenum.count(n, threads=2, points_per_shard=64),
        "values": lambda n: solve(n, remoteness=True, grundy=True, threads=2),
        "export": lambda n: solve(n, grundy=True, threads=2,
                                  export=tempfile.mkdtemp() + "/e.npz"),
    }[kind]
    # load the kernels outside the measurement; solve's layers of at least
    # waves.PARALLEL_MIN_STATES states (n >= 170) take kernels that n = 8 never calls, and
    # compiling them in the measured call (cold cache) adds about 60 MB
    call(170 if kind in ("solve", "values", "export") else 8)
    open("/proc/self/clear_refs", "w").write("5")  # restart the high-water mark here
    base = psutil.Process().memory_info().rss
    res = call(n)
    peak = [int(x.split()[1]) * 1024 for x in open("/proc/self/status")
            if x.startswith("VmHWM")][0]
    print(json.dumps({"forecast": res.stats["forecast_peak_bytes"], "measured": peak - base}))
""")


def measured_peak(kind: str, n: int) -> tuple[int, int]:
    """(forecast, measured growth of the peak resident set) of one call in a fresh process."""
    out = subprocess.run([sys.executable, "-c", MEASURE, kind, str(n)], capture_output=True,
                         text=True, timeout=600, env=dict(os.environ), check=True)
    d = json.loads(out.stdout.strip().splitlines()[-1])
    return int(d["forecast"]), int(d["measured"])


@pytest.mark.parametrize("kind,n", [("count", 130), ("law", 100), ("float", 130),
                                    ("points", 130), ("export", 150)])
def test_forecast_is_not_below_the_measured_peak(kind: str, n: int) -> None:
    forecast, measured = measured_peak(kind, n)
    assert measured > 16 * MiB, "the run is too small to measure"
    # never below the peak by more than a small margin (5% + 4 MiB of allocator noise)
    assert forecast >= 0.95 * measured - 4 * MiB, (forecast, measured)
    # and not so far above that it refuses runs that fit
    assert forecast <= 4 * measured + 64 * MiB, (forecast, measured)


@pytest.mark.slow
@pytest.mark.parametrize("kind,n", [("count", 160), ("wins", 160), ("pairs", 80),
                                    ("float", 180), ("solve", 300), ("values", 280)])
def test_forecast_is_not_below_the_measured_peak_larger(kind: str, n: int) -> None:
    forecast, measured = measured_peak(kind, n)
    assert forecast >= 0.95 * measured - 4 * MiB, (forecast, measured)
    assert forecast <= 4 * measured + 64 * MiB, (forecast, measured)


# ------------------------------------------------------- refusals that allocate nothing

REFUSE = textwrap.dedent("""
    import sys
    import psutil
    import zeckenum
    from zeckenum.errors import MemoryRefused
    from zeckenum.randomplay.exact import random_play
    from zeckenum.optimal.solve import solve
    zeckenum.count(5)
    random_play(5)
    solve(5)
    open("/proc/self/clear_refs", "w").write("5")  # restart the high-water mark here
    base = psutil.Process().memory_info().rss
    kind, n = sys.argv[1], int(sys.argv[2])
    call = {"count": zeckenum.count, "random": random_play, "solve": solve}[kind]
    try:
        call(n, max_memory=16 * 2**30)
    except MemoryRefused as exc:
        peak = [int(x.split()[1]) * 1024 for x in open("/proc/self/status")
                if x.startswith("VmHWM")][0]
        print(peak - base, exc)
    else:
        print("not refused")
""")


@pytest.mark.parametrize("kind,n", [("count", 3000), ("count", 20000), ("random", 1000),
                                    ("random", 400), ("solve", 60000)])
def test_refusal_allocates_almost_nothing(kind: str, n: int) -> None:
    """A refused run stops before the rank table or any sweep array exists: the process
    grows by less than 64 MiB (before the forecast, count 3000 built a 1.2 GiB rank table
    just to refuse, random 400 grew to 19.9 GiB)."""
    out = subprocess.run([sys.executable, "-c", REFUSE, kind, str(n)], capture_output=True,
                         text=True, timeout=120, check=True)
    line = out.stdout.strip().splitlines()[-1]
    assert line != "not refused"
    grown = int(line.split()[0])
    assert grown < 64 * MiB, line
    assert "limit is 16.0 GiB" in line


def test_forecast_arrays_are_plain_nbytes() -> None:
    """The first sweep's held bytes (`count.windows_bytes`) are its arrays' nbytes."""
    from zeckenum.core.sweep import sweep_windows
    from zeckenum.counting.count import windows_bytes

    space = build_space(get_rules("standard").instantiate(40))
    w = sweep_windows(space)
    arrays = [*w.lmin.values(), *w.win.values(), *w.terminal_ranks.values()]
    inc = sum(i.ptr.nbytes + i.drop.nbytes + i.src.nbytes for i in w.incoming.values())
    assert windows_bytes(space, w) == space.tab.nbytes + sum(a.nbytes for a in arrays) + inc
    assert all(isinstance(a, np.ndarray) for a in arrays)
