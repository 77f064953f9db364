"""Optimal play: outcome classes, winners, coalition wins, the layer walk and strategy
extraction (strategy files and their checker: test_strategyfile.py).

Sources of the expected values:
- tests/support/minimax.py: plain-Python memoised minimax written from the game's definition,
  sharing no code with zeckenum ("brute force" below).
- "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 has a winning strategy for
  every n > 2 (the proof is non-constructive); at n = 2 the only move is player 1's.
- The 2020 paper on the Zeckendorf game with three or more players (cited from memory; its
  exact title and arXiv id are not checked here): with three players no player can force a
  win for n >= 5 when the others may cooperate.
"""

from __future__ import annotations

import json

import minimax
import numpy as np
import pytest
from click.testing import CliRunner
from zeckenum.cli.optimal import solve_command
from zeckenum.core.statespace import build_space
from zeckenum.errors import InputError
from zeckenum.optimal.solve import solve
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.rules.model import STANDARD


def _classes_by_counts(n: int) -> dict[tuple[int, ...], bool]:
    """Solver's class (True: N-position) of every state, keyed by its count tuple."""
    res = solve(n, keep_classes=True)
    space = build_space(STANDARD.instantiate(n))
    out = {}
    for level, cls in res.classes.items():
        states = space.states(level)
        assert states.shape[0] == cls.size
        for row, is_n in zip(states, cls, strict=True):
            out[tuple(int(x) for x in row)] = bool(is_n)
    return out


# --- two players against brute force -------------------------------------------------


@pytest.mark.parametrize("n", range(1, 17))
def test_every_state_class_matches_minimax(n: int) -> None:
    """Source: brute force (tests/support/minimax.py). Every reachable state, both directions."""
    ours = _classes_by_counts(n)
    reach = minimax.reachable(n)
    assert set(ours) == reach  # all states of value n are reachable, and no others solved
    for state in reach:
        assert ours[state] == minimax.mover_wins(state), state


@pytest.mark.parametrize("n", range(1, 17))
def test_summary_matches_minimax(n: int) -> None:
    """Source: brute force. Winner, P-position count and the start's winning moves."""
    res = solve(n)
    reach = minimax.reachable(n)
    start = minimax.start_state(n)
    assert res.states == len(reach)
    assert res.p_positions == sum(not minimax.mover_wins(s) for s in reach)
    assert res.winner == (1 if minimax.mover_wins(start) else 2)
    expect = {name: not minimax.mover_wins(t) for name, t in minimax.moves_of(start)}
    assert res.start_moves == expect
    assert res.forced_win == {"1": res.winner == 1, "2": res.winner == 2}


# --- published results ------------------------------------------------------------------


def test_player_one_wins_at_two() -> None:
    """Source: "The Zeckendorf Game" (2018), arXiv:1809.04881 (n = 2: one move, player 1's)."""
    res = solve(2)
    assert res.winner == 1
    assert res.winning_moves == ["combine-ones@1"]


@pytest.mark.parametrize("n", range(3, 101))
def test_player_two_wins(n: int) -> None:
    """Source: "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins for n > 2."""
    res = solve(n)
    assert res.winner == 2
    assert res.winning_moves == []
    assert not any(res.start_moves.values())


@pytest.mark.slow
def test_player_two_wins_up_to_200() -> None:
    """Source: "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins for n > 2."""
    losers = [n for n in range(101, 201) if solve(n).winner != 2]
    assert losers == []


# --- three or more players ----------------------------------------------------------------


@pytest.mark.parametrize("players", [3, 4])
@pytest.mark.parametrize("n", range(1, 15))
def test_forced_win_matches_minimax(players: int, n: int) -> None:
    """Source: brute force (tests/support/minimax.py, coalition minimax on (state, turn))."""
    res = solve(n, players=players)
    expect = minimax.coalition_wins(n, players)
    assert res.forced_win == {str(x): w for x, w in expect.items()}
    winners = [x for x, w in expect.items() if w]
    assert res.winner == (winners[0] if winners else None)
    assert res.p_positions is None


def test_three_players_nobody_forces_a_win() -> None:
    """Source: 2020 paper on the multi-player Zeckendorf game (from memory, see the module
    docstring): with 3 players nobody can force a win for n >= 5."""
    forcing = {n: solve(n, players=3).forced_win for n in range(5, 61)}
    assert all(not any(fw.values()) for fw in forcing.values()), {
        n: fw for n, fw in forcing.items() if any(fw.values())
    }


def test_two_players_coalition_view_is_consistent() -> None:
    """Common practice: with two players exactly one player can force the win."""
    for n in range(1, 40):
        fw = solve(n).forced_win
        assert sorted(fw.values()) == [False, True]


def test_bad_players() -> None:
    with pytest.raises(InputError):
        solve(5, players=1)
    with pytest.raises(InputError):
        solve(5, players=65)


# --- strategies -----------------------------------------------------------------------------


@pytest.mark.parametrize("n", range(1, 17))
def test_strategy_moves_reach_p_positions(n: int) -> None:
    """Source: brute force. Every listed move leads to a P-position, and every position the
    winner can face is listed exactly once."""
    strat, res = winning_strategy(n)
    table = dict(zip(strat.positions, strat.moves, strict=True))
    assert len(table) == strat.size
    for pos, move in table.items():
        assert minimax.mover_wins(pos)
        nxt = dict(minimax.moves_of(pos))[move]
        assert not minimax.mover_wins(nxt)
    # positions the winner can face, by brute force
    start = minimax.start_state(n)
    faced: set[tuple[int, ...]] = set()
    todo = [start] if res.winner == 1 else [t for _, t in minimax.moves_of(start)]
    while todo:
        w = todo.pop()
        if w in faced or not minimax.moves_of(w):
            continue
        faced.add(w)
        u = dict(minimax.moves_of(w))[table[w]]
        todo.extend(t for _, t in minimax.moves_of(u))
    assert faced == set(table)


# --- command line ---------------------------------------------------------------------------


def test_cli_json_keys() -> None:
    """Source: brute force for the P-position count."""
    res = CliRunner().invoke(solve_command, ["14", "--json"])
    assert res.exit_code == 0
    out = json.loads(res.output)
    for key in ("rules", "n", "players", "winner", "p_positions", "forced_win"):
        assert key in out
    reach = minimax.reachable(14)
    assert out["p_positions"] == sum(not minimax.mover_wins(s) for s in reach)
    assert out["winner"] == 2


def test_cli_players_json_null_winner() -> None:
    res = CliRunner().invoke(solve_command, ["9", "--players", "3", "--json"])
    assert res.exit_code == 0
    out = json.loads(res.output)
    assert out["winner"] is None
    assert out["forced_win"] == {"1": False, "2": False, "3": False}


def test_cli_table_mentions_moves() -> None:
    res = CliRunner().invoke(solve_command, ["2"])
    assert res.exit_code == 0
    assert "combine-ones@1" in res.output and "player 1" in res.output


@pytest.mark.parametrize(
    "args",
    [["0"], ["5", "--players", "1"], ["5", "--rules", "nosuch"],
     ["5", "--players", "3", "--strategy", "x.zst", "--shards", "2"]],
)
def test_cli_bad_input_one_line(args: list[str]) -> None:
    res = CliRunner().invoke(solve_command, args)
    assert res.exit_code == 2
    assert res.output.startswith("zeckenum: error: ")
    assert len(res.output.strip().splitlines()) == 1



def test_layers_dropped_when_not_kept() -> None:
    """Common practice: without keep_classes no per-state classes are returned."""
    res = solve(100)
    assert res.classes is None
    assert res.peak_bits_bytes < np.ceil(res.states / 8)


# --- other rule sets (reachability pass) ----------------------------------------------------


@pytest.mark.parametrize("name", ["reversed", "tribonacci", "twos"])
@pytest.mark.parametrize("n", [1, 2, 3, 5, 8, 11])
def test_variants_match_template_minimax(name: str, n: int) -> None:
    """Source: brute force (tests/minimax.TemplateGame, from the rule set's definition).
    Reachable states, P-positions among them, and the winner."""
    from zeckenum.rules.catalogue import get_rules

    rules = get_rules(name)
    game = minimax.TemplateGame(rules, n)
    reach = game.reachable()
    res = solve(n, rules)
    assert res.states == len(reach)
    assert res.p_positions == sum(not game.mover_wins(s) for s in reach)
    assert res.winner == (1 if game.mover_wins(game.start) else 2)


@pytest.mark.parametrize("n", [2, 5, 9, 13])
def test_reach_pass_on_standard_changes_nothing(n: int) -> None:
    """Common practice: forcing the reachability pass on the standard game (where every
    state is reachable) gives the same answer."""
    a, b = solve(n), solve(n, reach=True)
    assert (a.states, a.p_positions, a.winner) == (b.states, b.p_positions, b.winner)



@pytest.mark.parametrize("players", [3, 4, 5])
@pytest.mark.parametrize("n", [4, 9, 13])
def test_every_state_coalition_bits_match_minimax(players: int, n: int) -> None:
    """Source: brute force (tests/minimax.coalition_table). Every state, every turn offset."""
    res = solve(n, players=players, keep_classes=True)
    space = build_space(STANDARD.instantiate(n))
    table = minimax.coalition_table(n, players)
    seen = 0
    for level, bits in res.classes.items():
        for row, wins in zip(space.states(level), bits, strict=True):
            state = tuple(int(x) for x in row)
            for r in range(players):
                assert bool(wins[r]) == table[(state, r)], (state, r)
                seen += 1
    assert seen == len(table)


@pytest.mark.parametrize(("name", "n"), [("standard", 30), ("reversed", 18), ("twos", 9),
                                         ("tribonacci", 20)])
def test_layer_walk_lists_the_layer_in_descending_rank(name: str, n: int) -> None:
    """Common practice: the solver's odometer walk visits exactly the engine's layer
    listing, in reverse (the engine lists ascending rank)."""
    from zeckenum.core.walk import walk_layer
    from zeckenum.rules.catalogue import get_rules

    spec = get_rules(name).instantiate(n)
    space = build_space(spec)
    for level in range(spec.start_level + 1):
        size = space.layer_size(level)
        if size == 0:
            continue
        walked = walk_layer(spec.n, level, size, space.tab, spec.values, spec.weights)
        assert np.array_equal(walked, space.states(level)[::-1]), level
