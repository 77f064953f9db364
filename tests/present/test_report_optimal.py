"""The report's optimal-play section: winner, P-positions per n and per level, Grundy value.

Sources of the expected values:
- tests/support/minimax.py: the standard game's states and minimax written in plain Python
  (no zeckenum code) -- "brute force": winners, P-positions (per level: token count), and
  the start's Sprague-Grundy value by the mex rule (Sprague-Grundy theorem, any textbook of
  combinatorial game theory).
- "The Zeckendorf Game" (2018, arXiv:1809.04881): player 2 wins the standard game for every
  n > 2.
"""

from __future__ import annotations

import sys
from functools import cache
from html.parser import HTMLParser
from pathlib import Path

import minimax
from click.testing import CliRunner
from zeckenum.analysis.rundata import RunData, collect, optimal_row
from zeckenum.cli.view import report_command
from zeckenum.present.report import render_report

sys.setrecursionlimit(100_000)


class Cells(HTMLParser):
    """Rows of the table of one class."""

    def __init__(self, cls: str) -> None:
        super().__init__()
        self.cls, self.rows, self._in, self._cell = cls, [], False, None

    def handle_starttag(self, tag: str, attrs) -> None:  # noqa: ANN001
        if tag == "table":
            self._in = dict(attrs).get("class") == self.cls
        elif self._in and tag == "tr":
            self.rows.append([])
        elif self._in and tag == "td":
            self._cell = ""

    def handle_endtag(self, tag: str) -> None:
        if tag == "table":
            self._in = False
        elif self._in and tag == "td" and self._cell is not None:
            self.rows[-1].append(self._cell)
            self._cell = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell += data


def table_rows(page: str, cls: str) -> list[list[str]]:
    p = Cells(cls)
    p.feed(page)
    return [r for r in p.rows if r]


@cache
def grundy(state: tuple[int, ...]) -> int:
    """mex of the successors' values (brute force)."""
    seen = {grundy(t) for _, t in minimax.moves_of(state)}
    g = 0
    while g in seen:
        g += 1
    return g


def brute(n: int) -> dict:
    states = minimax.reachable(n)
    p = [s for s in states if not minimax.mover_wins(s)]
    by_level: dict[int, int] = {}
    for s in p:
        by_level[sum(s)] = by_level.get(sum(s), 0) + 1
    start = minimax.start_state(n)
    return {"winner": 1 if minimax.mover_wins(start) else 2, "states": len(states),
            "p_positions": len(p), "by_level": by_level, "grundy": grundy(start)}


def test_report_shows_winner_and_p_positions(tmp_path: Path) -> None:
    """Brute force (winner, states, P-positions for n = 1..12) and arXiv:1809.04881
    (player 2 for n > 2): the optimal-play table of a fresh report."""
    data = collect(1, 12, random_upto=4)
    page = render_report(data, tmp_path)
    rows = table_rows(page, "optimal")
    assert [int(r[0]) for r in rows] == list(range(1, 13))
    for r in rows:
        b = brute(int(r[0]))
        assert r[1] == f"player {b['winner']}"
        assert (int(r[2]), int(r[3])) == (b["states"], b["p_positions"])
        if int(r[0]) > 2:
            assert r[1] == "player 2"  # arXiv:1809.04881
    assert "arXiv:1809.04881" in page and "agree" in page and "DISAGREE" not in page


def test_grundy_and_levels_from_the_result_dict(tmp_path: Path) -> None:
    """Brute force: rows built by `optimal_row` from result dicts that carry the keys
    `grundy` and `p_positions_by_level` (the values are the brute force's own) are shown
    as given; a wrong winner is flagged against arXiv:1809.04881."""
    base = collect(3, 8, random_upto=3, solve_upto=0)
    optimal = {}
    for n in base.ns:
        b = brute(n)
        optimal[n] = optimal_row({"winner": b["winner"], "states": b["states"],
                                  "p_positions": b["p_positions"], "grundy": b["grundy"],
                                  "p_positions_by_level": {str(k): v for k, v in
                                                           b["by_level"].items()}})
    data = RunData(rules=base.rules, spectra=base.spectra, random=base.random,
                   wins=base.wins, summary=base.summary, provenance=base.provenance,
                   ruleset=base.ruleset, rules_text=base.rules_text, optimal=optimal)
    page = render_report(data, tmp_path)
    rows = table_rows(page, "optimal")
    assert [int(r[5]) for r in rows] == [brute(n)["grundy"] for n in range(3, 9)]
    levels = table_rows(page, "p-levels")
    assert {int(a): int(b) for a, b in levels} == brute(8)["by_level"]
    optimal[5] = {**optimal[5], "winner": 1}
    bad = RunData(rules=base.rules, spectra=base.spectra, summary=base.summary,
                  ruleset=base.ruleset, rules_text=base.rules_text, optimal=optimal)
    assert "DISAGREE at n = 5" in render_report(bad, tmp_path)


def test_grundy_absent_is_not_invented() -> None:
    """Common practice: without a `grundy` key in the solve result no Grundy value is
    invented; a boolean is not taken for one."""
    assert "grundy" not in optimal_row({"winner": 2, "p_positions": 3})
    assert "grundy" not in optimal_row({"winner": 2, "p_positions": 3, "grundy": True})
    assert optimal_row({"winner": 2, "p_positions": 3, "grundy": 0})["grundy"] == 0


def test_report_cli_solve_upto(tmp_path: Path) -> None:
    """Brute force: the CLI's page holds the optimal rows up to --solve-upto only."""
    res = CliRunner().invoke(report_command, [str(tmp_path), "--range", "1", "8",
                                              "--random-upto", "3", "--solve-upto", "6"])
    assert res.exit_code == 0, res.output
    rows = table_rows((tmp_path / "report.html").read_text(), "optimal")
    assert [(int(r[0]), int(r[3])) for r in rows] == [(n, brute(n)["p_positions"])
                                                    for n in range(1, 7)]


def test_report_from_a_table_with_solve_rows(tmp_path: Path) -> None:
    """Brute force: a table's solve.csv (winner, P-positions) reaches the report with no
    solve run by the report (--solve-upto 0)."""
    from zeckenum.cli.tables import table_command

    out = tmp_path / "t"
    res = CliRunner().invoke(table_command, ["--from", "1", "--to", "8", "--out", str(out),
                                             "--what", "count,solve"])
    assert res.exit_code == 0, res.output
    res = CliRunner().invoke(report_command, [str(out), "--random-upto", "2",
                                              "--solve-upto", "0"])
    assert res.exit_code == 0, res.output
    rows = table_rows((out / "report.html").read_text(), "optimal")
    assert [(int(r[0]), r[1], int(r[3])) for r in rows] == [
        (n, f"player {brute(n)['winner']}", brute(n)["p_positions"]) for n in range(1, 9)]


def test_grundy_comes_from_the_solver(tmp_path: Path) -> None:
    """Brute force (mex): with --grundy the report shows the solver's Sprague-Grundy value
    of each start, equal to the brute force's mex value."""
    res = CliRunner().invoke(report_command, [str(tmp_path), "--range", "1", "7",
                                              "--random-upto", "3", "--grundy"])
    assert res.exit_code == 0, res.output
    rows = table_rows((tmp_path / "report.html").read_text(), "optimal")
    assert [int(r[5]) for r in rows] == [brute(n)["grundy"] for n in range(1, 8)]
    assert any(int(r[5]) > 0 for r in rows)  # n = 1, 2: player 1 wins, a non-zero value
