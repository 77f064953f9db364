"""Games started at any position (`--position`, `api.*(position=...)`, rule files).

References, none sharing code with the engine:
* the brute forces of tests/support/ (`bruteforce`: census by memoised recursion and the
  move graph as a networkx DAG; `fraction_bruteforce`: the random-play law in exact
  fractions; `minimax`: normal-play win/loss; `rules_bruteforce`: any described game),
  each started at the position;
* networkx (a general-purpose graph library): the games from a state of the standard game
  at n are the paths from it to the terminal state in the move graph of n;
* common practice: a game at a terminal position has one game, of length 0, and the player
  to move loses (normal play); the value of a position is sum(count * bin value).
"""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

import bruteforce
import fraction_bruteforce
import minimax
import networkx as nx
import numpy as np
import pytest
import rules_bruteforce
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from zeckenum import api
from zeckenum.cli.group import main
from zeckenum.errors import InputError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.rulefile import format_rules, parse_rules

FIB = bruteforce.fibonacci_upto(10**6)


def value(pos: list[int] | tuple[int, ...]) -> int:
    """sum(count * Fibonacci value), written here from the definition (common practice)."""
    return sum(c * f for c, f in zip(pos, FIB, strict=False))


def text(pos: list[int] | tuple[int, ...]) -> str:
    """The count vector as the command line takes it (README "Positions")."""
    c = list(pos)
    while c and c[-1] == 0:
        c.pop()
    return ",".join(map(str, c))


# small positions of the standard game: up to 5 bins, value 1..14
POSITIONS = st.lists(st.integers(0, 4), min_size=1, max_size=5).filter(
    lambda p: 1 <= value(p) <= 14)
FEW = settings(max_examples=20, deadline=None, derandomize=True,
               suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow])


@FEW
@given(POSITIONS)
def test_count_from_a_position_equals_brute_force(pos: list[int]) -> None:
    # source: tests/support/bruteforce.py census started at the position
    ref = bruteforce.census_from(bruteforce.padded(pos))
    res = api.count(position=pos)
    assert res.n == value(pos)
    assert res.position == text(pos)
    assert {L: c for L, c in res.length_counts.items()} == ref["length_counts"]
    assert (res.states, res.transitions) == (ref["states"], ref["transitions"])
    # the evaluation-point route from the same position (a second route, same counts)
    pts = api.count(value(pos), position=text(pos), points_per_shard=2)
    assert pts.length_counts == res.length_counts


@FEW
@given(POSITIONS)
def test_random_play_from_a_position_equals_fractions(pos: list[int]) -> None:
    # source: tests/support/fraction_bruteforce.py (exact fractions) from the position
    start = fraction_bruteforce.padded(pos)
    law = fraction_bruteforce.length_law(value(pos), "moves", start)
    res = api.random_play(position=pos)
    assert res.length_probability == law
    assert res.win_probability == fraction_bruteforce.win_law(law, 2)
    pairs = fraction_bruteforce.length_law(value(pos), "pairs", start)
    assert api.random_play(position=pos, model="pairs").length_probability == pairs
    flt = api.random_float(position=pos)
    for L, p in law.items():
        assert abs(flt.length_probability[L] - float(p)) <= flt.length_error[L] + 1e-15


@FEW
@given(POSITIONS)
def test_solve_from_a_position_equals_minimax(pos: list[int]) -> None:
    # source: tests/support/minimax.py (normal play: the player who cannot move loses)
    start = bruteforce.padded(pos)
    res = api.solve(position=pos)
    assert res.winner == (1 if minimax.mover_wins(start) else 2)
    want = {name: not minimax.mover_wins(t) for name, t in minimax.moves_of(start)}
    assert res.start_moves == want
    assert res.states == len(bruteforce.reachable_from(start))
    assert api.solve(position=pos, threads=2).winner == res.winner
    assert api.solve(position=pos, players=3).states == res.states


@pytest.mark.parametrize("pos", [[6, 3, 1], [2, 2, 2, 1], [9, 0, 0, 2], [0, 4, 0, 0, 1]])
def test_threaded_waves_from_a_position_equal_minimax(
        pos: list[int], monkeypatch: pytest.MonkeyPatch) -> None:
    # source: tests/support/minimax.py; every layer goes through the block schedule
    from zeckenum.optimal import waves

    monkeypatch.setattr(waves, "PARALLEL_MIN_STATES", 0)
    start = bruteforce.padded(pos)
    res = api.solve(position=pos, threads=2)
    assert res.stats["parallel_layers"] > 0
    assert res.winner == (1 if minimax.mover_wins(start) else 2)
    assert res.start_moves == {name: not minimax.mover_wins(t)
                               for name, t in minimax.moves_of(start)}
    assert res.p_positions == sum(not minimax.mover_wins(t)
                                  for t in bruteforce.reachable_from(start))


@FEW
@given(POSITIONS)
def test_games_and_move_stats_from_a_position(pos: list[int]) -> None:
    # source: tests/support/bruteforce.py (census and successors from the position)
    start = bruteforce.padded(pos)
    ref = bruteforce.census_from(start)
    rep = api.games(position=pos)
    for game, length in ((rep.shortest, ref["shortest"]), (rep.longest, ref["longest"])):
        assert game.length == length
        state = tuple(int(c) for c in game.start)
        assert state == start
        for step in game.steps:  # every move is legal in the brute force's own rules
            after = tuple(int(c) for c in step.after)
            assert after in bruteforce.successors(state)
            state = after
        assert not bruteforce.successors(state)
    stats = api.move_stats(position=pos, random=False)
    assert stats.totals.games == ref["games"]
    assert not stats.failures


def test_reachable_positions_give_the_sub_results_of_the_full_sweep() -> None:
    # source: networkx on the brute force's move graph of n = 12: the games from a state
    # are the paths from it to the terminal state; and the full solve's class of the state
    n = 12
    g = bruteforce.move_graph(n)
    terminal = bruteforce.zeckendorf_state(n)
    assert nx.is_directed_acyclic_graph(g)
    from zeckenum.core.statespace import build_space
    from zeckenum.optimal.solve import solve as engine_solve

    full = engine_solve(n, keep_classes=True)
    space = build_space(get_rules("standard").instantiate(n))
    states = sorted(g.nodes)
    for s in states[:: max(1, len(states) // 12)]:
        lengths: dict[int, int] = {}
        for path in nx.all_simple_paths(g, s, terminal) if s != terminal else [[s]]:
            lengths[len(path) - 1] = lengths.get(len(path) - 1, 0) + 1
        res = api.count(n, position=s)
        assert res.length_counts == dict(sorted(lengths.items())), s
        assert res.states == len(nx.descendants(g, s)) + 1
        level, rank = space.rank(np.array(s))
        n_position = bool(full.classes[level][rank])
        assert api.solve(n, position=s).winner == (1 if n_position else 2), s


@pytest.mark.parametrize("name", ["reversed", "tribonacci", "twos"])
def test_other_rule_sets_from_a_position(name: str) -> None:
    # source: tests/support/rules_bruteforce.py, the game described from its definition
    desc = rules_bruteforce.DESCRIPTIONS[name]
    bins = desc["bins"](10**6)
    for pos in ([2, 1, 1], [0, 3], [1, 0, 0, 1], [4]):
        v = sum(c * b for c, b in zip(pos, bins, strict=False))
        ref = rules_bruteforce.Game({**desc, "start": {"position": pos}}, v)
        res = api.count(position=pos, rules=name)
        assert res.n == v
        assert res.length_counts == dict(sorted(ref.spectrum().items())), (name, pos)
        assert api.solve(position=pos, rules=name).winner == (
            1 if ref.first_player_wins() else 2)
        assert api.random_play(position=pos, rules=name).length_probability == \
            ref.length_distribution()


@pytest.mark.parametrize("pos", ["0,0,1", "0,1,0,1", "1,0,1"])
def test_terminal_position_is_a_game_of_length_zero(pos: str) -> None:
    # common practice: no move is legal (Zeckendorf decompositions), one game of length 0;
    # the player to move (player 1) cannot move and loses under normal play
    counts = [int(x) for x in pos.split(",")]
    assert not bruteforce.successors(bruteforce.padded(counts))
    res = api.count(position=pos)
    assert (res.games, res.shortest, res.longest, res.states) == (1, 0, 0, 1)
    law = api.random_play(position=pos)
    assert law.length_probability == {0: Fraction(1)}
    assert api.simulate(None, 50, position=pos).length_counts == {0: 50}
    sol = api.solve(position=pos)
    assert (sol.winner, sol.start_moves, sol.states) == (2, {}, 1)
    rep = api.games(position=pos)
    assert rep.shortest.length == rep.longest.length == 0
    assert api.move_stats(position=pos).totals.games == 1


def test_n_must_be_the_value_of_the_position() -> None:
    # common practice: 3*1 + 1*2 + 2*5 = 15
    assert api.count(15, position="3,1,0,2").n == 15
    with pytest.raises(InputError, match="has value 15, not N=16"):
        api.count(16, position="3,1,0,2")
    with pytest.raises(InputError, match="give N, or a start position"):
        api.count()


def run(args: list[str]):  # noqa: ANN201
    return CliRunner().invoke(main, args)


def one_line(args: list[str], needle: str) -> None:
    res = run(args)
    assert res.exit_code == 2, (args, res.output)
    lines = [x for x in res.output.splitlines() if x.strip()]
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), (args, res.output)
    assert needle in lines[0], (args, lines[0])
    assert "Traceback" not in res.output


BAD = [
    (["count", "--position", "3,-1"], "bin 2 count '-1' is not a non-negative integer"),
    (["count", "--position", "3,x,1"], "bin 2 count 'x'"),
    (["count", "--position", ""], "expected counts per bin"),
    (["count", "--position", "0,0"], "position 0 is empty"),
    (["count", "--position", "99999999999999999999"], "exceeds"),
    (["count", "--position", "0," * 91 + "1"], "above the limit 2^62"),
    (["count", "16", "--position", "3,1,0,2"], "has value 15, not N=16"),
    (["random", "16", "--position", "3,1,0,2"], "has value 15, not N=16"),
    (["random", "--range", "2", "5", "--position", "1"], "--range A B: not with --position"),
    (["solve", "3", "--position", "1,2"], "has value 5, not N=3"),
    (["games", "4", "--position", "1,2"], "has value 5, not N=4"),
    (["move-stats", "6", "--position", "1,2"], "has value 5, not N=6"),
    (["count"], "give N, or a start position"),
]


@pytest.mark.parametrize(("args", "needle"), BAD)
def test_bad_positions_are_one_line_and_exit_2(args: list[str], needle: str) -> None:
    # common practice: bad input is one line, exit status 2 (zeckenum.errors InputError)
    one_line(args, needle)


def test_too_many_bins_for_a_listed_rule_set(tmp_path: Path) -> None:
    # common practice: a rule set with 4 listed bins has no bin 5
    rules = tmp_path / "four.toml"
    rules.write_text('name = "four"\n[bins]\nvalues = [1, 2, 3, 5]\n[[move]]\nname = "c"\n'
                     'at = 1\ntake = [1, 1]\ngive = [2]\n')
    one_line(["count", "--rules", str(rules), "--position", "0,0,0,0,1"],
             "bin 5 is not empty but")
    bad = tmp_path / "bad.toml"
    bad.write_text(rules.read_text().replace('[bins]', 'start = { position = "1,-2" }\n[bins]'))
    one_line(["rules", "check", str(bad)], "start position")


def test_position_keeps_the_termination_proof(tmp_path: Path) -> None:
    # common practice: a move and its inverse cycle from any position holding two ones
    rules = tmp_path / "cyc.toml"
    rules.write_text('name = "cyc"\n[bins]\ninitial = [1, 2]\nrecurrence = [1, 1]\n'
                     '[[move]]\nname = "up"\nat = 1\ntake = [1, 1]\ngive = [2]\n'
                     '[[move]]\nname = "down"\nat = 1\ntake = [2]\ngive = [1, 1]\n')
    one_line(["count", "--rules", str(rules), "--position", "2,1"], "does not terminate")
    # from a position where neither move fires the game ends at once
    assert api.count(position="1,0,1", rules=str(rules)).games == 1


def test_cli_outputs_name_the_position() -> None:
    # common practice: 3*1 + 1*2 + 2*5 = 15, the display form of README "Positions"
    res = run(["count", "--position", "3,1,0,2"])
    assert res.exit_code == 0, res.output
    assert "from position 3,1,0,2 (3*1 + 1*2 + 2*5 = 15)" in res.output
    js = json.loads(run(["count", "--position", "3,1,0,2", "--json"]).output)
    assert (js["n"], js["position"]) == (15, "3,1,0,2")
    ref = bruteforce.census_from(bruteforce.padded([3, 1, 0, 2]))
    assert int(js["games"]) == ref["games"]
    js = json.loads(run(["solve", "--position", "3,1,0,2", "--json"]).output)
    assert js["position"] == "3,1,0,2"
    assert js["winner"] == (1 if minimax.mover_wins(bruteforce.padded([3, 1, 0, 2])) else 2)
    # without a position the JSON has no "position" key (unchanged outputs)
    assert "position" not in json.loads(run(["count", "8", "--json"]).output)


def test_rule_file_position_round_trip_and_commands(tmp_path: Path) -> None:
    # source: tests/support/bruteforce.py census from the same position
    src = format_rules(get_rules("standard")).replace('start = "ones"',
                                                      'start = { position = "3,1,0,2" }')
    rules = parse_rules(src)
    assert rules.position == (3, 1, 0, 2)
    assert parse_rules(format_rules(rules)).content_hash() == rules.content_hash()
    assert rules.content_hash() != get_rules("standard").content_hash()
    path = tmp_path / "at.toml"
    path.write_text(src)
    ref = bruteforce.census_from(bruteforce.padded([3, 1, 0, 2]))
    assert api.count(rules=str(path)).games == ref["games"]
    assert api.count(15, rules=str(path)).games == ref["games"]
    assert api.count(15, rules=str(path)).position == "3,1,0,2"
    show = run(["rules", "show", str(path)])
    assert "start: position 3,1,0,2 (3*1 + 1*2 + 2*5 = 15)" in show.output
    # a --position replaces the rule file's start
    one = bruteforce.census_from(bruteforce.padded([1, 1]))
    assert api.count(rules=str(path), position="1,1").games == one["games"]


def test_checkpoint_refuses_another_position(tmp_path: Path) -> None:
    # common practice: a resumed run must be the same game; the shards are the cluster twins
    ck = tmp_path / "ck"
    first = api.count(position="3,1,0,2", checkpoint=ck)
    ref = bruteforce.census_from(bruteforce.padded([3, 1, 0, 2]))
    assert first.length_counts == ref["length_counts"]
    one_line(["count", "--position", "1,2,0,2", "--checkpoint", str(ck)],
             "written for the game from position 3,1,0,2, not from position 1,2,0,2")
    one_line(["count", "15", "--checkpoint", str(ck)], "not from the rule set's own start")
    again = api.count(position="3,1,0,2", checkpoint=ck)
    assert again.length_counts == first.length_counts
    solved = api.solve(position="3,1,0,2", checkpoint=tmp_path / "sk", shards=2)
    assert solved.winner == (1 if minimax.mover_wins(bruteforce.padded([3, 1, 0, 2])) else 2)
    one_line(["solve", "--position", "1,2,0,2", "--checkpoint", str(tmp_path / "sk")],
             "not from position 1,2,0,2")


def test_table_records_and_checks_the_position(tmp_path: Path) -> None:
    # source: tests/support/bruteforce.py census and minimax from the position
    from zeckenum.cluster.errors import TableCheckFailed

    out = tmp_path / "t"
    built = api.build_table(None, None, "count,solve", out, position="3,1,0,2")
    assert built.manifest["parameters"]["position"] == "3,1,0,2"
    t = api.load_table(out)
    ref = bruteforce.census_from(bruteforce.padded([3, 1, 0, 2]))
    assert t.ns == [15] and t.spectra[15] == ref["length_counts"]
    win = 1 if minimax.mover_wins(bruteforce.padded([3, 1, 0, 2])) else 2
    assert t.solve[15]["winner"] == str(win)
    assert api.verify_table(out).recomputed == [15]
    manifest = json.loads((out / "manifest.json").read_text())
    manifest["parameters"]["position"] = "1,2,0,2"
    (out / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(TableCheckFailed, match="records position"):
        api.load_table(out)
    one_line(["table", "--position", "3,1,0,2", "--from", "1", "--to", "15", "--out",
              str(tmp_path / "u")], "the one row n = 15")


def test_strategy_from_a_position_passes_the_independent_checker(tmp_path: Path) -> None:
    # source: the strategy file's own checker rebuilds the game from the rule text alone
    path = tmp_path / "s.zstrat"
    res = run(["solve", "--position", "3,1,0,2", "--strategy", str(path)])
    assert res.exit_code == 0, res.output
    chk = run(["check-strategy", str(path)])
    assert chk.exit_code == 0 and "OK" in chk.output, chk.output
    body = path.read_text()
    assert "n=15" in body


@pytest.mark.slow
def test_cluster_workers_rebuild_the_position(tmp_path: Path) -> None:
    # source: tests/support/bruteforce.py, fraction_bruteforce.py and minimax.py from the
    # position; the twins on the Dask workers rebuild the game from (rules, n) alone
    pos = [3, 1, 0, 2]
    start = bruteforce.padded(pos)
    ref = bruteforce.census_from(start)
    assert api.count(position=pos, workers=1).length_counts == ref["length_counts"]
    law = fraction_bruteforce.length_law(value(pos), "moves", fraction_bruteforce.padded(pos))
    assert api.random_play(position=pos, workers=1).length_probability == law
    assert api.solve(position=pos, workers=1).winner == (
        1 if minimax.mover_wins(start) else 2)


def test_rules_show_at_a_position_lists_the_brute_force_ends() -> None:
    # source: tests/support/rules_bruteforce.py (the reversed game from its definition)
    desc = rules_bruteforce.DESCRIPTIONS["reversed"]
    ref = rules_bruteforce.Game({**desc, "start": {"position": [0, 0, 0, 3]}}, 15)
    res = run(["rules", "show", "reversed", "--position", "0,0,0,3"])
    assert res.exit_code == 0, res.output
    assert "start: position 0,0,0,3 (3*5 = 15)" in res.output
    shown = res.output.split("end positions at n=15:", 1)[1].splitlines()[1:]
    got = {tuple(int(c) for c in line.split()[0].split(",")) for line in shown if line.strip()}
    assert got == {tuple(int(c) for c in text(t).split(",")) for t in ref.terminals()}
    one_line(["rules", "show", "reversed", "--position", "0,0,0,3", "--n", "14"],
             "has value 15, not N=14")
