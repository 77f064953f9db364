"""Optimal play on several threads (`optimal.waves`) against the one-thread solve.

Sources of the expected values:
- the one-thread solve (`threads=1`, the serial kernels `classify_layer_2p` /
  `classify_layer_multi`), itself checked against brute force in test_solve.py; a threaded
  solve must give the same bits, counts and winner (the decomposition's docstring claims
  equality, so equality is the check);
- tests/support/minimax.py (brute force sharing no code with zeckenum) for the P-positions
  and winners of small games, solved here with every layer forced onto threads;
- an enumeration of a layer written in this file (count vectors in co-lexicographic order,
  a block = equal counts at the bins >= h, the moves applied by hand) for the blocks and
  edges the plan lists: every move between two blocks must be one of the plan's edges
  (the premise of the decomposition's proof);
- the independent strategy checker (`check-strategy`, which replays every game without
  the solver) for strategy files built from a threaded solve.
"""

from __future__ import annotations

import itertools
import json

import minimax
import numpy as np
import pytest
from click.testing import CliRunner
from zeckenum import api
from zeckenum.cli.optimal import check_strategy_command, solve_command
from zeckenum.core.statespace import build_space
from zeckenum.errors import InputError
from zeckenum.optimal import classify, waves
from zeckenum.optimal.solve import solve
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.optimal.strategyfile import check_strategy, read_strategy, write_strategy
from zeckenum.rules.catalogue import BUILTIN, get_rules

SHIPPED = sorted(BUILTIN)
THREADS = (2, 3, 7)


@pytest.fixture
def every_layer_threaded(monkeypatch: pytest.MonkeyPatch) -> None:
    """Run every layer (not only the large ones) through the block schedule."""
    monkeypatch.setattr(waves, "PARALLEL_MIN_STATES", 0)


def _same(a: object, b: object) -> None:
    """Two SolveResults agree bit for bit: every kept layer, the counts and the winner."""
    assert a.winner == b.winner
    assert a.p_positions == b.p_positions
    assert a.states == b.states
    assert a.forced_win == b.forced_win
    assert a.start_moves == b.start_moves
    assert a.moves_examined == b.moves_examined
    assert a.peak_bits_bytes == b.peak_bits_bytes
    assert sorted(a.classes) == sorted(b.classes)
    for level in a.classes:
        assert np.array_equal(a.classes[level], b.classes[level]), level


# --- threaded equals one thread ------------------------------------------------------------


@pytest.mark.parametrize("threads", THREADS)
@pytest.mark.parametrize("players", [2, 3])
@pytest.mark.parametrize("name", SHIPPED)
def test_every_rule_set_threaded_equals_one_thread(every_layer_threaded: None, name: str,
                                                   players: int, threads: int) -> None:
    """Source: the one-thread solve (module docstring), on every shipped rule set."""
    n = {"standard": 60, "reversed": 40, "tribonacci": 60, "twos": 26}[name]
    one = solve(n, name, players, keep_classes=True, threads=1)
    many = solve(n, name, players, keep_classes=True, threads=threads)
    _same(one, many)
    assert one.stats["parallel_layers"] == 0
    assert many.stats["parallel_layers"] == many.stats["layers"]


@pytest.mark.parametrize("threads", THREADS)
def test_every_cut_gives_the_same_bits(every_layer_threaded: None,
                                       monkeypatch: pytest.MonkeyPatch, threads: int) -> None:
    """Source: the one-thread solve.  Every cut bin h, from one block per layer down to
    blocks of one state, so that small blocks share bytes and depend on each other."""
    n = 45
    one = solve(n, keep_classes=True, threads=1)
    plan = waves.block_plan
    nbins = len(get_rules("standard").bin_values(n))
    for h in range(1, nbins + 1):
        monkeypatch.setattr(waves, "block_plan",
                            lambda space, level, k, cut=None, h=h: plan(space, level, k, h))
        _same(one, solve(n, keep_classes=True, threads=threads))


@pytest.mark.parametrize("n", [40, 100, 150])
def test_default_threshold_threaded_equals_one_thread(n: int) -> None:
    """Source: the one-thread solve; the default threshold keeps small layers serial."""
    one = solve(n, keep_classes=True, threads=1)
    two = solve(n, keep_classes=True, threads=2)
    _same(one, two)


@pytest.mark.slow
@pytest.mark.parametrize("threads", [2, 3, 7])
@pytest.mark.parametrize("players", [2, 3])
def test_n200_threaded_equals_one_thread(players: int, threads: int) -> None:
    """Source: the one-thread solve at n = 200 (layers of up to 93,265 states, so the
    large ones run on threads with the default threshold)."""
    one = solve(200, players=players, keep_classes=True, threads=1)
    many = solve(200, players=players, keep_classes=True, threads=threads)
    _same(one, many)
    assert many.stats["parallel_layers"] > 0


@pytest.mark.parametrize("threads", THREADS)
@pytest.mark.parametrize("n", range(1, 15))
def test_threaded_matches_minimax(every_layer_threaded: None, n: int, threads: int) -> None:
    """Source: brute force (tests/support/minimax.py): P-positions and the winner."""
    res = solve(n, threads=threads)
    reach = minimax.reachable(n)
    assert res.states == len(reach)
    assert res.p_positions == sum(not minimax.mover_wins(s) for s in reach)
    assert res.winner == (1 if minimax.mover_wins(minimax.start_state(n)) else 2)


@pytest.mark.parametrize("name", ["reversed", "tribonacci", "twos"])
@pytest.mark.parametrize("n", [5, 8, 11])
def test_threaded_variants_match_template_minimax(every_layer_threaded: None, name: str,
                                                  n: int) -> None:
    """Source: brute force (minimax.TemplateGame, from the rule set's definition)."""
    rules = get_rules(name)
    game = minimax.TemplateGame(rules, n)
    reach = game.reachable()
    res = solve(n, rules, threads=3)
    assert res.states == len(reach)
    assert res.p_positions == sum(not game.mover_wins(s) for s in reach)
    assert res.winner == (1 if game.mover_wins(game.start) else 2)


# --- the plan: blocks and edges against an enumeration in this file ------------------------


def _layer_by_hand(values: list[int], weights: list[int], n: int, level: int
                   ) -> list[tuple[int, ...]]:
    """Every count vector of value n and this level, in co-lexicographic order (largest
    bin most significant), by plain enumeration."""
    out = []
    ranges = [range(n // v + 1) for v in values]
    for c in itertools.product(*ranges):
        if sum(x * v for x, v in zip(c, values, strict=True)) == n and \
                sum(x * w for x, w in zip(c, weights, strict=True)) == level:
            out.append(c)
    return sorted(out, key=lambda c: tuple(reversed(c)))


@pytest.mark.parametrize(("name", "n"), [("standard", 24), ("tribonacci", 26), ("twos", 11)])
def test_plan_lists_every_move_between_blocks(name: str, n: int) -> None:
    """Source: the enumeration above.  For every level and cut bin: the blocks are the
    runs of equal prefix in rank order, and every drop-0 move from a state of one block
    to a state of another is an edge of the plan, towards a higher block."""
    spec = get_rules(name).instantiate(n)
    space = build_space(spec)
    values = [int(v) for v in spec.values]
    weights = [int(w) for w in spec.weights]
    moves = []
    for m in range(spec.mv_bins.shape[0]):
        change = [0] * len(values)
        for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            change[int(b)] += int(d)
        moves.append(change)
    checked = 0
    for level in space.levels:
        states = _layer_by_hand(values, weights, int(spec.n), level)
        rank = {c: i for i, c in enumerate(states)}
        for h in range(1, len(values) + 1):
            plan = waves.block_plan(space, level, 2, h)
            edges = set(zip(plan.src.tolist(), plan.dst.tolist(), strict=True))
            # blocks: descending rank, each a run of one prefix
            prefixes = []
            for c in reversed(states):
                if not prefixes or prefixes[-1] != c[h:]:
                    prefixes.append(c[h:])
            assert plan.blocks == len(prefixes)
            block = {}
            for b, p in enumerate(prefixes):
                members = [i for i, c in enumerate(states) if c[h:] == p]
                assert int(plan.start[b]) == min(members)
                assert int(plan.size[b]) == len(members)
                for i in members:
                    block[i] = b
            for c in states:
                for change in moves:
                    t = tuple(x + d for x, d in zip(c, change, strict=True))
                    if min(t) < 0 or t not in rank:
                        continue  # not a move of this layer (illegal or another level)
                    assert rank[t] > rank[c]
                    s_b, t_b = block[rank[c]], block[rank[t]]
                    if s_b != t_b:
                        assert (s_b, t_b) in edges
                        assert t_b < s_b  # the target block ranks higher
                        checked += 1
    assert checked > 0  # the check saw moves between blocks


# --- strategy files from a threaded solve ---------------------------------------------------


@pytest.mark.parametrize("threads", [2, 7])
def test_threaded_strategy_is_the_same_and_checks(every_layer_threaded: None, tmp_path,
                                                  threads: int) -> None:
    """Source: the independent checker (`check_strategy`, no solver) and the one-thread
    strategy."""
    n = 40
    one, _ = winning_strategy(n, threads=1)
    many, res = winning_strategy(n, threads=threads)
    assert many == one
    assert res.stats["parallel_layers"] > 0
    path = tmp_path / "s.zst"
    write_strategy(path, many, get_rules("standard").bin_values(n), get_rules("standard"))
    rep = check_strategy(read_strategy(path))
    assert rep.winner == 2 and rep.n == n


def test_cli_threaded_strategy_passes_check_strategy(tmp_path) -> None:
    """Source: `check-strategy` (replays every game independently)."""
    path = str(tmp_path / "s.zst")
    res = CliRunner().invoke(solve_command, ["30", "--threads", "3", "--strategy", path])
    assert res.exit_code == 0, res.output
    chk = CliRunner().invoke(check_strategy_command, [path, "--json"])
    assert chk.exit_code == 0, chk.output
    assert json.loads(chk.output)["ok"] is True


# --- input --------------------------------------------------------------------------------


@pytest.mark.parametrize("bad", ["0", "-1", "x", "5000", "100000000000000000000", "1.5"])
def test_cli_bad_threads_one_line(bad: str) -> None:
    """Common practice: a bad --threads is one line and exit status 2."""
    res = CliRunner().invoke(solve_command, ["20", "--threads", bad])
    assert res.exit_code == 2
    assert res.output.startswith("zeckenum: error: ")
    assert len(res.output.strip().splitlines()) == 1


@pytest.mark.parametrize("bad", [0, -1, "x", 5000, True, 2.0])
def test_api_bad_threads(bad: object) -> None:
    with pytest.raises(InputError):
        solve(10, threads=bad)
    with pytest.raises(InputError):
        api.solve(10, threads=bad)


def test_threads_with_a_chain_is_refused(tmp_path) -> None:
    """A chain of level ranges runs each range on one thread: --threads is refused."""
    res = CliRunner().invoke(solve_command, ["20", "--threads", "2", "--shards", "2"])
    assert res.exit_code == 2
    assert res.output.startswith("zeckenum: error: ")


def test_cli_threads_json_same_as_one_thread() -> None:
    """Source: the one-thread run of the same command."""
    out = {}
    for t in ("1", "2"):
        res = CliRunner().invoke(solve_command, ["90", "--threads", t, "--json"])
        assert res.exit_code == 0, res.output
        out[t] = json.loads(res.output)
    for key in ("winner", "p_positions", "states", "moves_examined", "start_moves"):
        assert out["1"][key] == out["2"][key]
    assert out["2"]["stats"]["threads"] == 2


def test_layer_classes_default_is_one_thread() -> None:
    """The cluster twin calls layer_classes without threads: it stays serial."""
    space = build_space(get_rules("standard").instantiate(30))
    _, stats = classify.layer_classes(space)
    assert stats["parallel_layers"] == 0


# --- the forecast ------------------------------------------------------------------------


def test_plan_forecast_with_threads(every_layer_threaded: None) -> None:
    """Source: the layer sizes (rank table) and the plan's documented bound: a threaded
    layer walks at least its states / threads and at most all of them; one thread walks
    every state; the chain forecast (shards) ignores threads."""
    from zeckenum.cluster.predict import predict_solve, solve_critical_states

    space = build_space(get_rules("standard").instantiate(80))
    total = space.total_states()
    assert solve_critical_states(space, 1) == total
    two = solve_critical_states(space, 2)
    assert sum(-(-space.layer_size(lv) // 2) for lv in space.levels) <= two <= total
    p = predict_solve(80, threads=2, probe_n=40)
    assert p["threads"] == 2 and p["states"] == total
    q = predict_solve(80, threads=2, shards=2, probe_n=40)
    assert q["threads"] == 1
    with pytest.raises(InputError):
        predict_solve(80, threads=0, probe_n=40)
