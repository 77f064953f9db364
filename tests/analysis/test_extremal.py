"""Extremal games: explicit shortest and longest games, counts near the extremes, greedy rule.

Outside references:
* the brute force in tests/support/bruteforce.py (no engine code): legal successors, the
  Zeckendorf decomposition, the census of all games for small n;
* shortest game = n - Z(n): "The Zeckendorf Game" (2018), arXiv:1809.04881;
* splitting whenever possible and otherwise combining the smallest pair gives a longest
  game: "Bounds on Zeckendorf Games" (2020), arXiv:2009.09510.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))

from bruteforce import Z, census, start_state, successors, zeckendorf_state  # noqa: E402
from zeckenum.analysis.extremal import (  # noqa: E402
    extremal_games,
    format_game,
    greedy_longest_game,
    lengths_near_extremes,
)
from zeckenum.cli.view import games_command  # noqa: E402
from zeckenum.core.statespace import build_space  # noqa: E402
from zeckenum.core.sweep import sweep_windows  # noqa: E402
from zeckenum.rules.model import STANDARD  # noqa: E402


def assert_replays(game, n: int) -> None:  # noqa: ANN001
    """Every step is a legal move of the brute force; the game ends at the Zeckendorf
    decomposition with no move left."""
    assert game.start == start_state(n)
    state = game.start
    for step in game.steps:
        assert step.after in successors(state), (n, step.move, state, step.after)
        # the stated effect is the difference of consecutive states (1-based bins)
        diff = {k + 1: b - a for k, (a, b) in enumerate(zip(state, step.after, strict=True))
                if b != a}
        assert diff == step.effect
        state = step.after
    assert state == zeckendorf_state(n)
    assert successors(state) == []


@pytest.mark.parametrize("n", range(1, 15))
def test_extremal_games_against_brute_force(n: int) -> None:
    short, long = extremal_games(n)
    ref = census(n)
    assert_replays(short, n)
    assert_replays(long, n)
    assert short.length == ref["shortest"]
    assert long.length == ref["longest"]
    # "The Zeckendorf Game" (2018), arXiv:1809.04881: shortest = n - Z(n)
    assert short.length == n - Z(n)


@pytest.mark.parametrize("n", range(1, 15))
def test_greedy_is_longest_small(n: int) -> None:
    # "Bounds on Zeckendorf Games" (2020), arXiv:2009.09510, against the brute force
    g = greedy_longest_game(n)
    assert_replays(g, n)
    assert g.length == census(n)["longest"]


@pytest.mark.parametrize("n", [30, 55, 89])
def test_extremal_games_replay_medium(n: int) -> None:
    short, long = extremal_games(n)
    assert_replays(short, n)
    assert_replays(long, n)
    assert short.length == n - Z(n)  # arXiv:1809.04881
    assert long.length == greedy_longest_game(n).length  # arXiv:2009.09510


@pytest.mark.slow
def test_greedy_equals_computed_longest_up_to_150() -> None:
    # "Bounds on Zeckendorf Games" (2020), arXiv:2009.09510: the greedy rule is longest
    bad = []
    for n in range(1, 151):
        space = build_space(STANDARD.instantiate(n))
        longest = sweep_windows(space, keep_incoming=False).longest
        g = greedy_longest_game(n)
        if g.length != longest:
            bad.append((n, g.length, longest))
    assert not bad


@pytest.mark.slow
@pytest.mark.parametrize("n", [120, 150])
def test_extremal_games_replay_large(n: int) -> None:
    short, long = extremal_games(n)
    assert_replays(short, n)
    assert_replays(long, n)
    assert short.length == n - Z(n)
    assert long.length == greedy_longest_game(n).length


def test_lengths_near_extremes_match_census() -> None:
    ref = census(12)["length_counts"]
    near = lengths_near_extremes(ref, 2)
    lengths = sorted(ref)
    assert near["shortest"] == [(lengths[0], ref[lengths[0]]), (lengths[1], ref[lengths[1]])]
    assert near["longest"] == [(lengths[-1], ref[lengths[-1]]), (lengths[-2], ref[lengths[-2]])]


def test_format_game_lists_every_move() -> None:
    short, long = extremal_games(10)
    text = format_game(long)
    assert text.count("\n") == long.length + 1
    # 10 = 2 + 8 (Zeckendorf), in the one position notation: bins 2 and 5 hold one token
    assert text.splitlines()[-1].endswith("-> 0,1,0,0,1 (1*2 + 1*8 = 10)")


def test_games_cli_text_and_json() -> None:
    runner = CliRunner()
    res = runner.invoke(games_command, ["12", "--json", "--near", "2"])
    assert res.exit_code == 0, res.output
    d = json.loads(res.output)
    ref = census(12)
    assert d["shortest_game"]["length"] == ref["shortest"]
    assert d["longest_game"]["length"] == ref["longest"]
    assert d["near_longest"] == {str(k): str(ref["length_counts"][k])
                                 for k in sorted(ref["length_counts"])[-2:]}
    assert d["greedy_longest"]["equals_longest"] is True
    res = runner.invoke(games_command, ["9"])
    assert res.exit_code == 0 and "greedy rule" in res.output and "longest game" in res.output


def test_games_cli_bad_input() -> None:
    res = CliRunner().invoke(games_command, ["0"])
    assert res.exit_code == 2
    assert res.output.strip().startswith("zeckenum: error:") and "Traceback" not in res.output
