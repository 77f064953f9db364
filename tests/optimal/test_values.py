"""Per-state values of optimal play: remoteness, misère play, Sprague–Grundy values, sums of
games, P-positions per level and the position export.

Sources of the expected values:
- tests/support/cgt_bruteforce.py: outcome classes (normal and misère), remoteness and
  Grundy values (mex) by plain memoised search, and the Grundy value of a sum of games by
  mex over the product game; written from the textbook definitions and sharing no code
  with zeckenum ("brute force" below), on the games of tests/support/rules_bruteforce.py
  (every shipped rule set rewritten from its definition);
- "Winning Ways for your Mathematical Plays" (Berlekamp, Conway, Guy, 1982): the
  Sprague–Grundy value is 0 exactly at P-positions, and the value of a sum of games is
  the XOR of the parts' values;
- "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins the standard game for
  every n > 2, so its start is a P-position (Grundy value 0);
- the one-bit solve (`solve` without values, checked against brute force in
  test_solve.py) for the classes and P-position counts, and the one-thread solve for the
  threaded values (the schedule's docstring claims equality).
"""

from __future__ import annotations

import json
from pathlib import Path

import cgt_bruteforce as cgt
import numpy as np
import pytest
import rules_bruteforce as rb
from click.testing import CliRunner
from zeckenum import api
from zeckenum.cli.optimal import solve_command
from zeckenum.errors import InputError, MemoryRefused
from zeckenum.optimal import waves
from zeckenum.optimal.solve import solve, solve_sum
from zeckenum.rules.catalogue import BUILTIN

SHIPPED = sorted(BUILTIN)
assert set(SHIPPED) == set(rb.DESCRIPTIONS), "every shipped rule set needs a brute force"


def _strip(counts: object) -> tuple[int, ...]:
    out = [int(x) for x in counts]
    while out and out[-1] == 0:
        out.pop()
    return tuple(out)


def _text(counts: tuple[int, ...]) -> str:
    """A count vector as the brute force writes it (bin 1 first, commas)."""
    c = _strip(counts)
    return ",".join(str(x) for x in c) if c else "0"


def _game(name: str, n: int) -> rb.Game:
    return rb.Game(rb.DESCRIPTIONS[name], n)


def _rows(path: Path) -> dict[tuple[int, ...], dict]:
    """The export read back with numpy alone: count vector -> its values."""
    z = np.load(path)
    out = {}
    for k in range(z["counts"].shape[0]):
        key = _strip(z["counts"][k])
        assert key not in out, f"position {key} exported twice"
        out[key] = {f: int(z[f][k]) for f in ("cls", "remoteness", "grundy", "level")
                    if f in z.files}
    return out


# --- every state against brute force (via the export) --------------------------------------


@pytest.mark.parametrize("n", range(1, 17))
@pytest.mark.parametrize("name", SHIPPED)
def test_normal_play_values_match_bruteforce(tmp_path: Path, name: str, n: int) -> None:
    """Source: brute force (tests/support/cgt_bruteforce.py) for the class, remoteness and
    Grundy value of every reachable position, read back from the export file."""
    path = tmp_path / "pos.npz"
    res = solve(n, name, remoteness=True, grundy=True, export=str(path),
                export_fields="class,remoteness,grundy", threads=1)
    g = _game(name, n)
    bf = cgt.Analysis(g.successors)
    rows = _rows(path)
    reach = {_strip(s): s for s in cgt.reachable(g.successors, g.start)}
    assert set(rows) == set(reach)
    for key, s in reach.items():
        got = rows[key]
        assert got["cls"] == int(bf.mover_wins(s)), key
        assert got["remoteness"] == bf.remoteness(s), key
        assert got["grundy"] == bf.grundy(s), key
    z = np.load(path)
    assert str(z["convention"]) == "normal" and int(z["n"]) == n and str(z["rules"]) == name
    assert (z["counts"].astype(np.int64) @ z["bin_values"] == int(z["value"])).all()
    assert (z["counts"].astype(np.int64) @ z["weights"] == z["level"]).all()
    assert _strip(z["start"]) == _strip(g.start)
    # the start and its moves
    assert res.winner == (1 if bf.mover_wins(g.start) else 2)
    assert res.remoteness == bf.remoteness(g.start)
    assert res.grundy == bf.grundy(g.start)
    expect = sorted((_text(t), bf.remoteness(t), bf.grundy(t), not bf.mover_wins(t))
                    for t in g.successors(g.start))
    got = sorted((d["position"], d["remoteness"], d["grundy"], d["class"] == "P")
                 for d in res.start_detail)
    assert got == expect
    assert res.p_positions == sum(not bf.mover_wins(s) for s in reach.values())


@pytest.mark.parametrize("n", range(1, 17))
@pytest.mark.parametrize("name", SHIPPED)
def test_misere_values_match_bruteforce(tmp_path: Path, name: str, n: int) -> None:
    """Source: brute force misère minimax and remoteness (tests/support/cgt_bruteforce.py)."""
    path = tmp_path / "mis.npz"
    res = solve(n, name, misere=True, export=str(path), threads=1)
    g = _game(name, n)
    bf = cgt.Analysis(g.successors, misere=True)
    rows = _rows(path)
    reach = {_strip(s): s for s in cgt.reachable(g.successors, g.start)}
    assert set(rows) == set(reach)
    for key, s in reach.items():
        assert rows[key]["cls"] == int(bf.mover_wins(s)), key
        assert rows[key]["remoteness"] == bf.remoteness(s), key
        assert "grundy" not in rows[key]
    assert str(np.load(path)["convention"]) == "misere"
    assert res.convention == "misere"
    assert res.winner == (1 if bf.mover_wins(g.start) else 2)
    assert res.remoteness == bf.remoteness(g.start)
    assert res.p_positions == sum(not bf.mover_wins(s) for s in reach.values())
    wins = sorted(_text(t) for t in g.successors(g.start) if not bf.mover_wins(t))
    assert sorted(d["position"] for d in res.start_detail if d["class"] == "P") == wins


def test_misere_start_without_a_move() -> None:
    """Common practice (misère convention): the player who cannot move has not made the
    last move and wins, so at n = 1 player 1 wins; under normal play player 1 loses."""
    assert solve(1, misere=True).winner == 1
    assert solve(1, remoteness=True).winner == 2
    assert solve(1, misere=True).remoteness == 0


# --- Sprague–Grundy theory ----------------------------------------------------------------


@pytest.mark.parametrize("name", SHIPPED)
def test_grundy_zero_exactly_at_p_positions(tmp_path: Path, name: str) -> None:
    """Source: "Winning Ways for your Mathematical Plays" (1982): the Grundy value is 0
    exactly at P-positions; the P-position count also equals the one-bit solve's."""
    n = {"standard": 40, "reversed": 30, "tribonacci": 40, "twos": 18}[name]
    path = tmp_path / "g.npz"
    res = solve(n, name, grundy=True, export=str(path), threads=1)
    z = np.load(path)
    assert ((z["grundy"] == 0) == (z["cls"] == 0)).all()
    assert int((z["grundy"] == 0).sum()) == solve(n, name, threads=1).p_positions
    assert res.p_positions == solve(n, name, threads=1).p_positions
    # the bound the dtype relies on: a value is the mex of at most as many values as the
    # position has moves, so it never exceeds the number of moves (brute force's count)
    assert int(z["grundy"].max()) == res.stats["grundy_max"]
    assert res.stats["grundy_max"] <= len(_game(name, n).moves)


def test_standard_start_has_grundy_zero() -> None:
    """Source: "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins for n > 2, so
    the start is a P-position, whose Grundy value is 0 ("Winning Ways", 1982); at n = 2
    player 1 wins (Grundy value 1: its one move ends the game)."""
    assert solve(2, grundy=True).grundy == 1
    assert [solve(n, grundy=True).grundy for n in range(3, 41)] == [0] * 38


def _zeckendorf_terms(n: int) -> int:
    """Z(n): terms of the greedy (Zeckendorf) decomposition of n into 1, 2, 3, 5, 8, ..."""
    fib = [1, 2]
    while fib[-1] + fib[-2] <= n:
        fib.append(fib[-1] + fib[-2])
    terms = 0
    for f in reversed(fib):
        if f <= n:
            n -= f
            terms += 1
    return terms


def test_standard_start_remoteness_published_facts() -> None:
    """Source: "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins for n > 2, so
    the start is a P-position and (by the definition of remoteness) its remoteness is
    even; every game lasts at least n - Z(n) moves (the shortest game), so the
    remoteness, the length of one game, is at least that."""
    for n in range(3, 81):
        rem = solve(n, remoteness=True, threads=1).remoteness
        assert rem % 2 == 0, n
        assert rem >= n - _zeckendorf_terms(n), n


@pytest.mark.parametrize("name", SHIPPED)
def test_sum_matches_product_game(name: str) -> None:
    """Source: brute force mex over the product game (tests/support/cgt_bruteforce.py):
    the sum's value, its winner and its set of winning first moves."""
    top = {"standard": 9, "reversed": 9, "tribonacci": 9, "twos": 5}[name]
    for n1 in range(1, top + 1):
        for n2 in range(n1, top + 1, 2):
            g1, g2 = _game(name, n1), _game(name, n2)
            succ = cgt.sum_successors([g1.successors, g2.successors])
            bf = cgt.Analysis(succ)
            start = (g1.start, g2.start)
            res = solve_sum([n1, n2], name, threads=1)
            assert res.nimber == bf.grundy(start), (n1, n2)
            assert res.winner == (1 if bf.mover_wins(start) else 2)
            expect = sorted(
                [(1, _text(t)) for t in g1.successors(g1.start)
                 if not bf.mover_wins((t, g2.start))]
                + [(2, _text(t)) for t in g2.successors(g2.start)
                   if not bf.mover_wins((g1.start, t))])
            got = sorted((m["part"], m["position"]) for m in res.winning_moves)
            assert got == expect, (n1, n2)


def test_sum_value_is_xor_of_parts() -> None:
    """Source: "Winning Ways for your Mathematical Plays" (1982): the value of a sum is the
    XOR of the values of its parts (here the parts' values come from separate solves)."""
    for name in ("reversed", "tribonacci"):
        for ns in ([3, 5, 8], [4, 6], [2, 7, 9, 11]):
            parts = [solve(n, name, grundy=True).grundy for n in ns]
            x = 0
            for p in parts:
                x ^= p
            assert solve_sum(ns, name).nimber == x


# --- P-positions per level ------------------------------------------------------------------


@pytest.mark.parametrize("n", [5, 12, 16])
def test_p_positions_by_level(n: int) -> None:
    """Source: brute force; for the standard game the level is the number of tokens
    (every weight is 1), so the brute force counts P-positions by token count."""
    g = _game("standard", n)
    bf = cgt.Analysis(g.successors)
    expect: dict[int, int] = {}
    for s in cgt.reachable(g.successors, g.start):
        if not bf.mover_wins(s):
            expect[sum(s)] = expect.get(sum(s), 0) + 1
    for res in (solve(n, threads=1), solve(n, remoteness=True, threads=1)):
        got = {lv: c for lv, c in res.p_positions_by_level.items() if c}
        assert got == expect
        assert sum(res.p_positions_by_level.values()) == res.p_positions
        assert res.to_dict()["p_positions_by_level"] == {
            str(k): v for k, v in sorted(res.p_positions_by_level.items())}


# --- threads ------------------------------------------------------------------------------


@pytest.mark.parametrize("name", SHIPPED)
@pytest.mark.parametrize("misere", [False, True])
def test_threaded_values_equal_one_thread(monkeypatch: pytest.MonkeyPatch, name: str,
                                          misere: bool) -> None:
    """Source: the one-thread solve; every layer forced through the block schedule."""
    monkeypatch.setattr(waves, "PARALLEL_MIN_STATES", 0)
    n = {"standard": 50, "reversed": 36, "tribonacci": 50, "twos": 22}[name]
    kw = {"misere": True} if misere else {"grundy": True}
    one = solve(n, name, remoteness=True, keep_classes=True, threads=1, **kw)
    for threads in (2, 3):
        many = solve(n, name, remoteness=True, keep_classes=True, threads=threads, **kw)
        assert many.stats["parallel_layers"] == many.stats["layers"] > 0
        assert one.stats["parallel_layers"] == 0
        for key in one.values:
            assert sorted(one.values[key]) == sorted(many.values[key])
            for lv, arr in one.values[key].items():
                assert np.array_equal(arr, many.values[key][lv]), (key, lv)
        assert (one.winner, one.remoteness, one.grundy, one.p_positions,
                one.p_positions_by_level, one.start_detail) == (
            many.winner, many.remoteness, many.grundy, many.p_positions,
            many.p_positions_by_level, many.start_detail)


# --- the command line and bad input --------------------------------------------------------


def test_cli_json_keys(tmp_path: Path) -> None:
    """Source: brute force for the values printed (standard game, n = 12)."""
    out = tmp_path / "e.npz"
    r = CliRunner().invoke(solve_command, ["12", "--remoteness", "--grundy", "--json",
                                           "--export", str(out)])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    g = _game("standard", 12)
    bf = cgt.Analysis(g.successors)
    assert d["remoteness"] == bf.remoteness(g.start)
    assert d["grundy"] == bf.grundy(g.start)
    assert d["start"]["position"] == "12"
    assert d["start"]["class"] == ("N" if bf.mover_wins(g.start) else "P")
    assert d["export"]["positions"] == len(cgt.reachable(g.successors, g.start))
    assert d["export"]["fields"] == ["class", "remoteness", "grundy"]
    assert out.is_file()
    r = CliRunner().invoke(solve_command, ["--sum", "2,5", "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    g1, g2 = _game("standard", 2), _game("standard", 5)
    assert d["grundy"] == cgt.Analysis(cgt.sum_successors(
        [g1.successors, g2.successors])).grundy((g1.start, g2.start))


@pytest.mark.parametrize("args, code", [
    (["10", "--grundy", "--players", "3"], 2),
    (["10", "--misere", "--players", "4"], 2),
    (["10", "--remoteness", "--players", "3"], 2),
    (["10", "--grundy", "--misere"], 2),
    (["10", "--export", "/nonexistent-folder-zk/x.npz"], 6),
    (["10", "--export-fields", "class"], 2),
    (["10", "--export", "x.npz", "--export-fields", "class,colour"], 2),
    (["30", "--remoteness", "--max-memory", "1K"], 3),
    (["30", "--export", "x.npz", "--max-memory", "40K"], 3),
    (["--sum", "3"], 2),
    (["--sum", "3,x"], 2),
    (["5", "--sum", "3,4"], 2),
    (["--sum", "3,4", "--misere"], 2),
    (["--sum", "3,4", "--remoteness"], 2),
    (["--sum", "3,4", "--export", "s.npz"], 2),
    ([], 2),
    (["10", "--grundy", "--checkpoint", "ckpt"], 2),
    (["10", "--misere", "--strategy", "s.zstrat"], 2),
])
def test_bad_input_one_line(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, args: list[str],
                            code: int) -> None:
    """Common practice: bad input is one line on stderr and a non-zero exit (the codes of
    zeckenum.errors), before any computation; nothing is left behind."""
    monkeypatch.chdir(tmp_path)
    r = CliRunner().invoke(solve_command, args)
    assert r.exit_code == code, (args, r.output)
    assert r.output.strip().count("\n") == 0, r.output
    assert "Traceback" not in r.output
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_api_refusals() -> None:
    """Common practice: the API refuses the same things with the same errors."""
    with pytest.raises(InputError):
        api.solve(10, players=3, grundy=True)
    with pytest.raises(InputError):
        api.solve(10, misere=True, shards=2)
    with pytest.raises(MemoryRefused):
        api.solve(30, grundy=True, max_memory=2048)
    with pytest.raises(InputError):
        solve_sum([5], "standard")


def test_failed_export_write_keeps_everything(tmp_path: Path,
                                              monkeypatch: pytest.MonkeyPatch) -> None:
    """Common practice: a write that fails after the solve loses nothing: the summary is
    printed, the archive goes to a rescue file the one error line names (exit 6), and the
    rescued archive holds every reachable position (brute force count)."""
    import tempfile

    from zeckenum import safeio

    real = safeio.write_atomic
    target = tmp_path / "out.npz"

    def failing(path: object, data: bytes) -> None:
        if Path(path) == target:
            raise OSError(28, "No space left on device")
        real(path, data)

    monkeypatch.setattr(safeio, "write_atomic", failing)
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    r = CliRunner().invoke(solve_command, ["14", "--export", str(target)])
    assert r.exit_code == 6, r.output
    assert "winner" in r.output and "player 2" in r.output
    rescued = [p for p in tmp_path.iterdir() if p.name.startswith("zeckenum-rescued-")]
    assert len(rescued) == 1 and str(rescued[0]) in r.output
    assert not target.exists()
    g = _game("standard", 14)
    z = np.load(rescued[0])
    assert z["cls"].size == len(cgt.reachable(g.successors, g.start))


@pytest.mark.slow
def test_large_values_agree_with_the_bits_and_threads() -> None:
    """Source: the one-bit solve (checked against brute force in test_solve.py) for every
    state's class at n = 200 (5.2 million states), and the one-thread values for the
    threaded ones, with the natural size threshold (layers of 32,768 states and more run on
    threads)."""
    one = solve(200, remoteness=True, grundy=True, keep_classes=True, threads=1)
    two = solve(200, remoteness=True, grundy=True, keep_classes=True, threads=2)
    bits = solve(200, keep_classes=True, threads=1)
    assert two.stats["parallel_layers"] > 0
    for key in one.values:
        for lv, arr in one.values[key].items():
            assert np.array_equal(arr, two.values[key][lv]), (key, lv)
    for lv, cls in bits.classes.items():
        assert np.array_equal(one.classes[lv], cls), lv
    assert one.p_positions_by_level == bits.p_positions_by_level
    # Winning Ways (1982): Grundy value 0 exactly at P-positions
    for lv, g in one.values["grundy"].items():
        assert np.array_equal(g == 0, ~bits.classes[lv]), lv


def test_sum_of_positions_matches_product_game() -> None:
    """Source: brute force mex over the product game (tests/support/cgt_bruteforce.py) with
    each part started at a position (tests/support/rules_bruteforce.py): the sum's value,
    winner and winning first moves, through the API and the command line's `+` form."""
    desc = rb.DESCRIPTIONS["standard"]
    cases = [((3, 1, 0, 2), (0, 4)), ((1, 1, 1), (2, 0, 1)), ((0, 2, 1), 5), ((4, 1), (0, 3))]
    for a, b in cases:
        games = [rb.Game({**desc, "start": {"position": list(p)}}, sum(
            c * v for c, v in zip(p, (1, 2, 3, 5, 8), strict=False))) if isinstance(p, tuple)
            else _game("standard", p) for p in (a, b)]
        bf = cgt.Analysis(cgt.sum_successors([g.successors for g in games]))
        start = (games[0].start, games[1].start)
        res = api.solve_sum([a, b], "standard", threads=1)
        assert res.nimber == bf.grundy(start), (a, b)
        assert res.winner == (1 if bf.mover_wins(start) else 2)
        expect = sorted(
            [(1, _text(t)) for t in games[0].successors(games[0].start)
             if not bf.mover_wins((t, games[1].start))]
            + [(2, _text(t)) for t in games[1].successors(games[1].start)
               if not bf.mover_wins((games[0].start, t))])
        assert sorted((m["part"], m["position"]) for m in res.winning_moves) == expect
        text = " + ".join(",".join(map(str, p)) if isinstance(p, tuple) else str(p)
                          for p in (a, b))
        r = CliRunner().invoke(solve_command, ["--sum", text, "--json"])
        assert r.exit_code == 0, r.output
        assert json.loads(r.output)["grundy"] == res.nimber


@pytest.mark.parametrize("text", ["3,1 +", "3,-1 + 2", "+", "3,1 + 0", "2 + 5,x"])
def test_sum_of_positions_bad_input(text: str) -> None:
    """Common practice: a malformed part of `--sum` is one line, exit 2."""
    r = CliRunner().invoke(solve_command, ["--sum", text])
    assert r.exit_code == 2, r.output
    assert len(r.output.strip().splitlines()) == 1
