"""Certificates for three or more players: export with `solve --players P --strategy`,
verification with `check-strategy`, corrupted certificates refused in one line.

Sources of the expected values:
- tests/support/coalition_replay.py: the rule set rebuilt from its definition data and the
  coalition minimax / certificate replay written in plain Python (no zeckenum code) --
  "brute force".
- Exit statuses (5 for a failed check, 2 for malformed input, one line): common practice,
  enumerate/errors.py.
"""

from __future__ import annotations

import coalition_replay as ref
import pytest
from click.testing import CliRunner
from zeckenum.cli.optimal import check_strategy_command, solve_command
from zeckenum.optimal.strategyfile import parse_strategy
from zeckenum.rules.catalogue import get_rules

CASES = [("standard", 3, 3), ("standard", 4, 4), ("standard", 2, 5),
         ("tribonacci", 11, 3), ("tribonacci", 9, 4), ("tribonacci", 6, 4),
         ("tribonacci", 5, 3)]


def _export(tmp_path, rules: str, n: int, players: int, gz: bool = False):
    path = tmp_path / f"c-{rules}-{n}-{players}.zst{'.gz' if gz else ''}"
    res = CliRunner().invoke(solve_command, [str(n), "--players", str(players), "--rules",
                                             rules, "--strategy", str(path)])
    assert res.exit_code == 0, res.output
    return path


def _check(path):
    return CliRunner().invoke(check_strategy_command, [str(path)])


@pytest.mark.parametrize(("rules", "n", "players"), CASES)
def test_certificate_passes_and_replays(tmp_path, rules: str, n: int, players: int) -> None:
    """Brute force: the exporting winner is the coalition minimax's winner, the certificate
    passes check-strategy, and the plain-Python replay confirms every game ends with the
    winner's move."""
    path = _export(tmp_path, rules, n, players)
    sf = parse_strategy(path.read_text())
    rs = get_rules(rules)
    assert sf.players == players and sf.winner == ref.forced_winner(rs, n, players)
    table = {k: m for k, (m, _) in sf.table.items()}
    assert ref.replay(rs, n, players, sf.winner, table) is None
    res = _check(path)
    assert res.exit_code == 0, res.output
    assert f"player {sf.winner} wins" in res.output and "coalition" in res.output


def test_gzip_certificate(tmp_path) -> None:
    """The same through a gzip file (brute force winner as above)."""
    path = _export(tmp_path, "tribonacci", 11, 3, gz=True)
    assert _check(path).exit_code == 0


def _corrupt(path, edit) -> str:  # noqa: ANN001
    lines = path.read_text().splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.startswith("zstrat/1"))
    return "\n".join(edit(lines, head)) + "\n"


def _swap_move(lines, head):  # noqa: ANN001, ANN202
    """Replace the first listed move by another legal move the replay shows losing."""
    rs = get_rules("tribonacci")
    start, moves = ref.named_moves(rs, 11)
    sf = parse_strategy("\n".join(lines))
    table = {k: m for k, (m, _) in sf.table.items()}
    for i in range(head + 1, len(lines)):
        pos, mv = lines[i].split()
        counts = tuple(int(x) for x in pos.split(","))
        state = counts + (0,) * (len(start) - len(counts))
        for name, ch in moves.items():
            if name == mv or any(state[b] + d < 0 for b, d in ch.items()):
                continue
            trial = dict(table)
            trial[counts] = name
            if ref.replay(rs, 11, 3, sf.winner, trial) is not None:
                lines[i] = f"{pos} {name}"
                return lines
    raise AssertionError("no losing alternative found")


CORRUPTIONS = {
    "losing move": (_swap_move, 5),
    "missing line": (lambda ls, h: ls[: h + 1] + ls[h + 2:], 5),
    "illegal move": (lambda ls, h: ls[: h + 1] + [ls[h + 1].split()[0] + " split@9"]
                     + ls[h + 2:], 5),
    "other winner": (lambda ls, h: ls[:h] + [ls[h].replace("winner=2", "winner=3")]
                     + ls[h + 1:], 5),
    "too many players": (lambda ls, h: ls[:h] + [ls[h].replace("players=3", "players=99")]
                         + ls[h + 1:], 2),
    "winner beyond players": (lambda ls, h: ls[:h] + [ls[h].replace("winner=2", "winner=4")]
                              + ls[h + 1:], 2),
    "garbled line": (lambda ls, h: ls[: h + 1] + ["1,x combine@2"] + ls[h + 1:], 2),
}


@pytest.mark.parametrize("kind", sorted(CORRUPTIONS))
def test_corrupted_certificate_fails_in_one_line(tmp_path, kind: str) -> None:
    """Common practice (exit statuses) and brute force (the swapped move loses): each
    corruption of a valid certificate (tribonacci, n = 11, 3 players, whose brute-force
    winner is player 2) is refused with one line and its status."""
    path = _export(tmp_path, "tribonacci", 11, 3)
    assert parse_strategy(path.read_text()).winner == ref.forced_winner(
        get_rules("tribonacci"), 11, 3) == 2
    edit, status = CORRUPTIONS[kind]
    bad = tmp_path / "bad.zst"
    bad.write_text(_corrupt(path, edit))
    res = _check(bad)
    assert res.exit_code == status, res.output
    assert len(res.output.strip().splitlines()) == 1


def test_no_forced_winner_is_one_line(tmp_path) -> None:
    """Brute force: nobody forces the last move at n = 5 with 3 players (standard game), so
    there is no certificate: one line, non-zero status, no file."""
    assert ref.forced_winner(get_rules("standard"), 5, 3) is None
    path = tmp_path / "none.zst"
    res = CliRunner().invoke(solve_command, ["5", "--players", "3", "--strategy", str(path)])
    assert res.exit_code != 0 and len(res.output.strip().splitlines()) == 1
    assert not path.exists()
