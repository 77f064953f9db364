"""The public Python API (`zeckenum.<job>`): every job a notebook needs, each result with a
JSON-ready `to_dict()` carrying the keys the command line's --json prints.

Expected numbers come from the brute forces in tests/support (bruteforce.py: census by
plain recursion; fraction_bruteforce.py: random-play laws in Fractions; minimax.py: optimal
play), which share no code with zeckenum.
"""

from __future__ import annotations

import json
from fractions import Fraction
from pathlib import Path

import pytest
import zeckenum
from bruteforce import Z, census
from click.testing import CliRunner
from fraction_bruteforce import length_law, win_law
from minimax import mover_wins, start_state
from zeckenum.cli.group import main

VOLATILE = {"stats", "seconds", "states_per_second"}
"""Keys that measure the run, not the game (common practice: left out of comparisons)."""


def cli_json(*args: str) -> dict:
    """The command line's --json output as a dict (exit status 0 required)."""
    res = CliRunner().invoke(main, [*args, "--json"])
    assert res.exit_code == 0, res.output
    return json.loads(res.output)


def as_json(result: object) -> dict:
    """`result.to_dict()` through a JSON round trip (fails unless it is JSON-ready)."""
    return json.loads(json.dumps(result.to_dict()))


def stable(d: dict) -> dict:
    return {k: v for k, v in d.items() if k not in VOLATILE}


def test_public_names_resolve_and_internals_stay_private() -> None:
    for name in zeckenum.__all__:
        assert getattr(zeckenum, name) is not None, name
    for internal in ("run_count", "run_random", "StateSpace", "sweep_windows", "api",
                     "refuse_table", "_refuse_table", "exact_moments"):
        assert internal not in zeckenum.__all__
    with pytest.raises(AttributeError):
        zeckenum.run_count  # noqa: B018 - the attribute access is the test


def test_count_matches_brute_force_and_cli_json() -> None:
    n = 11
    res = zeckenum.count(n)
    ref = census(n)
    assert res.length_counts == ref["length_counts"]
    assert (res.states, res.transitions) == (ref["states"], ref["transitions"])
    assert stable(as_json(res)) == stable(cli_json("count", str(n)))


def test_count_through_the_sharded_driver_with_a_checkpoint(tmp_path: Path) -> None:
    """`checkpoint=` sends the count through the block driver (in-process threads); the
    census is the brute force's, and a rerun resumes from the stored blocks."""
    n = 13
    first = zeckenum.count(n, checkpoint=tmp_path / "ckpt")
    again = zeckenum.count(n, checkpoint=tmp_path / "ckpt")
    assert first.length_counts == again.length_counts == census(n)["length_counts"]
    assert any((tmp_path / "ckpt").iterdir())


@pytest.mark.parametrize("model", ["moves", "pairs"])
def test_random_play_matches_fraction_brute_force(model: str) -> None:
    n = 9
    res = zeckenum.random_play(n, model=model)
    law = length_law(n, model)
    assert res.length_probability == law
    assert res.win_probability == win_law(law, 2)
    assert stable(as_json(res)) == stable(cli_json("random", str(n), "--model", model))


def test_random_play_sharded_equals_brute_force(tmp_path: Path) -> None:
    n = 10
    res = zeckenum.random_play(n, players=3, checkpoint=tmp_path / "ck")
    assert res.win_probability == win_law(length_law(n, "moves"), 3)


def test_random_float_and_simulation_agree_with_the_exact_law() -> None:
    n = 10
    law = length_law(n, "moves")
    f = zeckenum.random_float(n)
    for length, p in law.items():
        assert abs(f.length_probability[length] - float(p)) <= f.length_error[length] + 1e-15
    json.dumps(f.to_dict())
    sim = zeckenum.simulate(n, 4000, seed=3)
    mean = float(sum(k * p for k, p in law.items()))
    lo, hi = sim.mean[1], sim.mean[2]
    assert lo - 0.5 < mean < hi + 0.5  # a 95% interval widened by half a move
    json.dumps(sim.to_dict())


def test_gaussian_rows_carry_the_exact_means() -> None:
    table = zeckenum.gaussian(6, 8)
    assert [r["n"] for r in table.rows] == [6, 7, 8]
    for r in table.rows:
        law = length_law(r["n"], "moves")
        assert r["mean"] == pytest.approx(float(sum(k * p for k, p in law.items())), rel=1e-12)
    assert as_json(table) == cli_json("random", "--range", "6", "8")


@pytest.mark.parametrize("n", [7, 12])
def test_solve_matches_minimax(n: int) -> None:
    res = zeckenum.solve(n)
    assert res.winner == (1 if mover_wins(start_state(n)) else 2)
    assert stable(as_json(res)) == stable(cli_json("solve", str(n)))


def test_games_lengths_are_the_census_extremes() -> None:
    n = 10
    rep = zeckenum.games(n)
    ref = census(n)
    assert (rep.shortest.length, rep.longest.length) == (ref["shortest"], ref["longest"])
    # "Bounds on Zeckendorf Games" (2020, arXiv:2009.09510): the greedy rule is longest
    assert rep.greedy is not None and rep.greedy.length == ref["longest"]
    assert as_json(rep) == cli_json("games", str(n))


def test_move_stats_totals_sum_to_all_moves_of_all_games() -> None:
    n = 8
    rep = zeckenum.move_stats(n)
    ref = census(n)
    assert rep.totals.games == ref["games"]
    assert sum(rep.totals.totals) == sum(k * c for k, c in ref["length_counts"].items())
    # combines remove one token, splits keep the count: n - Z(n) combines per game
    # ("The Zeckendorf Game", 2018, arXiv:1809.04881)
    combines = sum(t for m, t in rep.totals.as_dict().items() if m.startswith("combine"))
    assert combines == ref["games"] * (n - Z(n))
    assert not rep.failures
    assert as_json(rep) == cli_json("move-stats", str(n))


def test_collect_and_rundata_to_dict() -> None:
    data = zeckenum.collect(2, 6, random_upto=5)
    for n in range(2, 7):
        assert data.spectra[n] == census(n)["length_counts"]
    assert sorted(data.random) == [2, 3, 4, 5]
    assert data.wins[5] == win_law(length_law(5, "moves"), 2)[1]
    d = as_json(data)
    assert d["spectra"]["6"] == {str(k): str(v) for k, v in census(6)["length_counts"].items()}
    assert Fraction(d["player1_wins"]["5"]) == data.wins[5]


def test_tables_build_load_read_verify(tmp_path: Path) -> None:
    out = tmp_path / "table"
    built = zeckenum.build_table(1, 8, "count,random", out)
    assert built.kinds == ("count", "random")
    assert (out / "manifest.json").is_file()
    json.dumps(built.to_dict())
    t = zeckenum.load_table(out)
    for n in range(1, 9):
        assert t.spectra[n] == census(n)["length_counts"]
        assert t.laws[n] == length_law(n, "moves")
    d = as_json(t)
    assert d["spectra"]["8"] == {str(k): str(v) for k, v in census(8)["length_counts"].items()}
    data = zeckenum.read_table(out)
    assert data.spectra[8] == census(8)["length_counts"]
    check = zeckenum.verify_table(out, sample=1, seed=5)
    assert 8 in check.recomputed
    assert as_json(check)["n_range"] == [1, 8]
