"""The first sweep on several threads: its passes from the layers above split by ranges of
states (`core.sweep._pull`) give the windows the move graph implies and the very arrays of
one thread.

References: the explicit move graph built by brute force in tests/support (networkx for
the shortest and longest path to every state), and, for the random-play exponents and the
path estimate, the single-threaded sweep (the split must not change one bit).
"""

from __future__ import annotations

from collections.abc import Iterator

import networkx as nx
import numpy as np
import pytest
from bruteforce import move_graph, padded, start_state
from zeckenum.core import sweep
from zeckenum.core.statespace import build_space
from zeckenum.core.sweep import sweep_windows
from zeckenum.randomplay.skeleton import random_skeleton
from zeckenum.rules.catalogue import get_rules


@pytest.fixture
def split_every_pass(monkeypatch: pytest.MonkeyPatch) -> Iterator[None]:
    """Split every pass over the threads, however few its moves (small n)."""
    monkeypatch.setattr(sweep, "PULL_SPLIT_MIN_MOVES", 0)
    monkeypatch.setattr(sweep, "PULL_SPLIT_MIN_THREADS", 2)
    yield


def _space(n: int, rules: str = "standard"):  # noqa: ANN202
    return build_space(get_rules(rules).instantiate(n))


@pytest.mark.parametrize("n", [9, 17, 26])
def test_threaded_windows_are_the_move_graph_paths(n: int, split_every_pass: None) -> None:
    g = move_graph(n)
    start = start_state(n)
    shortest = nx.single_source_shortest_path_length(g, start)
    longest = {start: 0}
    for s in nx.topological_sort(g):
        for t in g.successors(s):
            longest[t] = max(longest.get(t, 0), longest[s] + 1)
    space = _space(n)
    win = sweep_windows(space, keep_incoming=True, threads=3)
    assert win.states == g.number_of_nodes()
    assert win.transitions == g.number_of_edges()
    seen = 0
    for s in g.nodes:
        level, rank = space.rank(np.array(padded(s)))
        assert win.lmin[level][rank] == shortest[s]
        assert win.lmin[level][rank] + win.win[level][rank] - 1 == longest[s]
        seen += 1
    assert sum(int((w > 0).sum()) for w in win.win.values()) == seen


@pytest.mark.parametrize("n", [30, 45])
@pytest.mark.parametrize("threads", [2, 3, 5])
def test_threaded_first_sweep_equals_one_thread(n: int, threads: int,
                                                split_every_pass: None) -> None:
    space = _space(n)
    one = sweep_windows(space, keep_incoming=True, threads=1)
    many = sweep_windows(space, keep_incoming=True, threads=threads)
    # the path estimate is a float sum: the split keeps each state's order of terms
    assert many.terminal_paths_log2 == one.terminal_paths_log2
    for key in ("states", "transitions", "terminals", "shortest", "longest", "max_window"):
        assert getattr(many, key) == getattr(one, key), key
    for level in one.lmin:
        assert np.array_equal(many.lmin[level], one.lmin[level])
        assert np.array_equal(many.win[level], one.win[level])
        assert np.array_equal(many.terminal_ranks[level], one.terminal_ranks[level])
        a, b = many.incoming[level], one.incoming[level]
        assert np.array_equal(a.ptr, b.ptr) and np.array_equal(a.src, b.src)
        assert np.array_equal(a.drop, b.drop)


@pytest.mark.parametrize("rules", ["standard", "reversed", "tribonacci", "twos"])
@pytest.mark.parametrize("model", ["moves", "pairs"])
def test_threaded_random_skeleton_equals_one_thread(rules: str, model: str,
                                                    split_every_pass: None) -> None:
    """Random play's first sweep gathers drop by drop on threads (one merged pass on one):
    the same reachability, weights and lcm denominator either way."""
    space = _space(28, rules)
    one = random_skeleton(space, model, threads=1)
    many = random_skeleton(space, model, threads=3)
    for key in ("denominator", "states", "transitions", "terminals", "shortest", "longest",
                "max_weight", "max_indegree"):
        assert getattr(many, key) == getattr(one, key), key
    for level in one.levels:
        assert np.array_equal(many.lmin[level], one.lmin[level])
        assert np.array_equal(many.win[level], one.win[level])
        assert np.array_equal(many.incoming[level].w, one.incoming[level].w)
        assert np.array_equal(many.incoming[level].src, one.incoming[level].src)


def test_sweep_threads_keeps_the_moves_as_one_thread_and_fits_the_cap() -> None:
    """The cluster's shared first sweep takes more listing threads only while the memory
    forecast allows them, and never changes whether the moves are kept (what the host
    cache then holds, and how fast the shards run)."""
    from zeckenum.counting.count import incoming_bytes_estimate, sweep_threads, windows_pass_bytes

    space = _space(90)
    kept = incoming_bytes_estimate(space)
    one = windows_pass_bytes(space, 1)
    step = windows_pass_bytes(space, 2) - one
    assert step > 0
    keeps = 4 * (one + kept + 3 * step)  # room for 4 threads with the moves kept
    assert sweep_threads(space, keeps, 16) == 4
    assert sweep_threads(space, keeps, 3) == 3
    assert sweep_threads(space, keeps, 16, cap=one + kept + step) == 2
    assert sweep_threads(space, keeps, 16, cap=one) == 1
    # without kept moves (they do not fit a quarter), threads up to the whole limit
    drops = one + 5 * step
    assert 4 * (one + kept) > drops
    assert sweep_threads(space, drops, 16) == 6
    assert sweep_threads(space, drops, 16, cap=one + step) == 2
    assert sweep_threads(space, one - 1, 16) == 1
