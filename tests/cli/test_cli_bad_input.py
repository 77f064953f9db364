"""Bad numeric input and memory refusals on the command line: one line, a defined exit status,
no traceback, no hang.

Every case goes through the `zeckenum` group (`cli.main`) with click's CliRunner; a few also
run as real processes (`python -m zeckenum`) under a timeout, so a hang fails the test.
Exit statuses from `zeckenum.errors` (2 bad input, 3 memory refused).  Results of the
successful generated runs are checked against brute forces written in tests/ (shares no
code with the engine) and the shortest-game theorem n - Z(n) ("The Zeckendorf Game", 2018,
arXiv:1809.04881).
"""

from __future__ import annotations

import json
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import pytest
from bruteforce import census, fibonacci_upto, zeckendorf
from click.testing import CliRunner
from fraction_bruteforce import length_law, win_law
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from zeckenum.cli.group import main

HUGE = "99999999999999999999"  # beyond int64
LIMIT = "16K"  # below the rank table of any n >= 20


def one_line_error(args: list[str], status: int | set[int]) -> str:
    """Run `zeckenum ARGS`; assert one line `zeckenum: error: ...`, the exit status(es), no
    traceback and nothing on stdout; return the line."""
    res = CliRunner().invoke(main, args)
    want = {status} if isinstance(status, int) else status
    assert res.exit_code in want, (args, res.exit_code, res.output)
    lines = [x for x in res.output.splitlines() if x.strip()]
    assert len(lines) == 1, (args, res.output)
    assert lines[0].startswith("zeckenum: error: "), (args, res.output)
    assert "Traceback" not in res.output
    assert res.stdout.strip() == "", (args, res.stdout)
    return lines[0]


BAD_NUMBERS = [
    ["count", "99999999999999999999999"],
    ["count", "2.5"],
    ["count", "abc"],
    ["count", "-5"],
    ["count", "0"],
    ["count", "\u0661\u0662"],  # Arabic-Indic digits: not a whole number here
    ["count", "10", "--threads", HUGE],
    ["count", "10", "--threads", "0"],
    ["count", "10", "--prime-offset", "100000000"],
    ["count", "10", "--workers", HUGE],
    ["count", "10", "--max-memory", "0"],
    ["count", "10", "--max-memory", "lots"],
    ["count", "10", "--max-memory", "9" * 40 + "T"],
    ["random", "10", "--simulate", HUGE],
    ["random", "10", "--simulate", "0"],
    ["random", "10", "--simulate", "10", "--seed", HUGE],
    ["random", "10", "--players", HUGE],
    ["random", "10", "--players", "1"],
    ["random", "--range", "1", HUGE],
    ["random", "--range", "0", "5"],
    ["random", "--range", "9", "5"],
    ["random", HUGE],
    ["random", "10", "--workers", HUGE],
    ["solve", "10", "--shards", HUGE],
    ["solve", "10", "--players", HUGE],
    ["solve", "0"],
    ["solve", HUGE],
    ["games", "-1"],
    ["games", HUGE],
    ["move-stats", "0"],
    ["move-stats", HUGE],
    ["plan", "count", "30", "--probe", "1"],
    ["plan", "count", "30", "--probe", HUGE],
    ["plan", "count", HUGE],
    ["plan", "random", "10", "--workers", HUGE],
    ["plan", "random", "10", "--players", "1"],
    ["plan", "solve", "10", "--shards", HUGE],
    ["plan", "solve", "10", "--probe", "0"],
    ["table", "--from", "1", "--to", HUGE, "--out", "unused"],
    ["table", "--from", "5", "--to", "3", "--out", "unused"],
]


@pytest.mark.parametrize("args", BAD_NUMBERS, ids=lambda a: " ".join(a)[:60])
def test_bad_numbers_are_one_line_and_status_2(args: list[str], tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    one_line_error(args, 2)
    assert not (tmp_path / "unused").exists()


BAD_SCHEDULERS = ["garbage://x", "tcp://", "tcp://host", "tcp://host:0", "tcp://host:99999",
                  "http://host:8786", "tcp://a b:1"]


@pytest.mark.parametrize("address", BAD_SCHEDULERS)
@pytest.mark.parametrize("command", [["count", "10"], ["random", "10"], ["solve", "10"],
                                     ["verify", "somewhere"],
                                     ["table", "--from", "1", "--to", "3", "--out", "t"]])
def test_bad_scheduler_address_fails_before_connecting(address: str, command: list[str],
                                                       tmp_path: Path,
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    """The address is checked in the option, before any cluster code runs (it used to wait
    30 s for a connection to `garbage://x`)."""
    import zeckenum.cluster.backend as backend

    def no_connect(*a: object, **k: object) -> None:
        raise AssertionError("tried to connect")

    monkeypatch.setattr(backend, "connect", no_connect)
    monkeypatch.chdir(tmp_path)
    line = one_line_error([*command, "--scheduler", address], 2)
    assert "scheduler" in line


MEMORY_REFUSALS = [
    ["count", "3000"],
    ["count", "5000"],
    ["count", "20000"],
    ["count", "99999"],
    ["random", "1000"],
    ["random", "1000", "--winners-only"],
    ["random", "1000", "--float"],
    ["random", "--range", "1", "5000"],
    ["solve", "99999"],
    ["solve", "99999", "--grundy"],
    ["solve", "99999", "--misere"],
    ["solve", "99999", "--export", "e.npz"],
    ["solve", "--sum", "99999,5"],
    ["games", "99999"],
    ["move-stats", "99999"],
    ["plan", "count", "5000"],
    ["plan", "random", "1000"],
    ["plan", "solve", "99999"],
    ["table", "--from", "1", "--to", "5000", "--out", "t", "--what", "count,random,solve"],
    ["random", "400", "--simulate", "10000000000000"],
]


@pytest.mark.parametrize("args", MEMORY_REFUSALS, ids=lambda a: " ".join(a)[:60])
def test_large_runs_are_refused_up_front(args: list[str], tmp_path: Path,
                                         monkeypatch: pytest.MonkeyPatch) -> None:
    """Each forecast exceeds any machine (terabytes); the run is refused with exit 3 and
    the estimate and the limit in the line."""
    monkeypatch.chdir(tmp_path)
    line = one_line_error(args, 3)
    assert "needs an estimated" in line and "limit is" in line
    assert not (tmp_path / "t").exists()


MAX_MEMORY_EVERYWHERE = [
    ["count", "30"],
    ["count", "30", "--threads", "1"],
    ["random", "30"],
    ["random", "30", "--winners-only"],
    ["random", "30", "--float"],
    ["random", "30", "--simulate", "100000"],
    ["random", "--range", "5", "30"],
    ["random", "--range", "5", "30", "--float"],
    ["solve", "30"],
    ["solve", "30", "--players", "3"],
    ["solve", "30", "--remoteness"],
    ["solve", "30", "--misere"],
    ["solve", "30", "--grundy", "--threads", "2"],
    ["solve", "30", "--export", "e.npz"],
    ["solve", "--sum", "20,30"],
    ["games", "30"],
    ["move-stats", "20"],
    ["plan", "count", "30"],
    ["plan", "random", "30"],
    ["plan", "solve", "30"],
    ["table", "--from", "1", "--to", "30", "--out", "t"],
    ["table", "--from", "1", "--to", "30", "--out", "t", "--what", "random"],
    ["table", "--from", "1", "--to", "30", "--out", "t", "--what", "solve"],
]


@pytest.mark.parametrize("args", MAX_MEMORY_EVERYWHERE, ids=lambda a: " ".join(a)[:60])
def test_max_memory_is_honoured_by_every_command(args: list[str], tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    line = one_line_error([*args, "--max-memory", LIMIT], 3)
    assert "limit is 16.0 KiB" in line
    assert not (tmp_path / "t").exists()


@pytest.mark.parametrize("command", [["count", "30"], ["random", "30"]])
def test_max_memory_reaches_the_sharded_paths(command: list[str], tmp_path: Path) -> None:
    """--max-memory used to be ignored with --checkpoint / --workers: the run is refused
    before any cluster or checkpoint exists."""
    folder = tmp_path / "ck"
    line = one_line_error([*command, "--checkpoint", str(folder), "--max-memory", LIMIT], 3)
    assert "limit is 16.0 KiB" in line
    assert not folder.exists()
    one_line_error([*command, "--workers", "2", "--max-memory", LIMIT], 3)


def test_move_stats_at_n_1() -> None:
    """n = 1: one game, of no move (brute force), and no move type at all."""
    res = CliRunner().invoke(main, ["move-stats", "1"])
    assert res.exit_code == 0, res.output
    assert f"games={census(1)['games']}" in res.output
    res = CliRunner().invoke(main, ["move-stats", "1", "--json"])
    assert json.loads(res.stdout)["games"] == str(census(1)["games"])


# ------------------------------------------------------------------ progress by default


def test_progress_is_off_without_a_terminal_and_forced_by_the_flag() -> None:
    quiet = CliRunner().invoke(main, ["count", "25"])
    assert quiet.exit_code == 0 and quiet.stderr == ""
    loud = CliRunner().invoke(main, ["count", "25", "--progress"])
    assert loud.exit_code == 0 and "count n=25" in loud.stderr
    solved = CliRunner().invoke(main, ["solve", "25", "--progress"])
    assert solved.exit_code == 0 and "solve n=25" in solved.stderr
    assert CliRunner().invoke(main, ["solve", "25"]).stderr == ""
    # the results do not depend on the bar
    assert quiet.stdout.split("exact via")[0] == loud.stdout.split("exact via")[0]


def test_progress_default_follows_the_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    from zeckenum.cli.options import resolve_progress

    class Tty:
        def __init__(self, tty: bool) -> None:
            self.tty = tty

        def isatty(self) -> bool:
            return self.tty

    monkeypatch.setattr(sys, "stderr", Tty(True))
    assert resolve_progress(None) is True
    assert resolve_progress(False) is False
    monkeypatch.setattr(sys, "stderr", Tty(False))
    assert resolve_progress(None) is False
    assert resolve_progress(True) is True


# ------------------------------------------------------------------ real processes


@pytest.mark.parametrize("args,status", [
    (["count", "99999999999999999999999"], 2),
    (["random", "10", "--simulate", HUGE], 2),
    (["count", "10", "--scheduler", "garbage://x"], 2),
    (["plan", "count", "30", "--probe", "1"], 2),
    (["count", "10", "--prime-offset", "100000000"], 2),
    (["count", "3000"], 3),
    (["count", "99999"], 3),
    (["random", "1000"], 3),
    (["plan", "random", "1000"], 3),
])
def test_real_process_one_line_no_hang(args: list[str], status: int) -> None:
    """`python -m zeckenum ...` under a timeout: a hang (random 1000 used to grow without
    bound, count 10 --prime-offset 100000000 ran for minutes) fails the test."""
    out = subprocess.run([sys.executable, "-m", "zeckenum", *args], capture_output=True,
                         text=True, timeout=90)
    assert out.returncode == status, (args, out.stderr)
    lines = [x for x in out.stderr.splitlines() if x.strip()]
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), out.stderr
    assert out.stdout == ""
    if status == 3:  # a forecast, not a MemoryError caught after the fact
        assert "needs an estimated" in lines[0] and "limit is" in lines[0], lines[0]


def test_progress_is_on_by_default_on_a_real_terminal() -> None:
    """stderr on a pseudo-terminal: `solve` draws its bar without --progress."""
    pty = pytest.importorskip("pty")
    import fcntl
    import os
    import struct
    import termios

    master, slave = pty.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 40, 100, 0, 0))
    try:
        out = subprocess.run([sys.executable, "-m", "zeckenum", "solve", "60"],
                             stdout=subprocess.PIPE, stderr=slave, timeout=90)
    finally:
        os.close(slave)
    data = b""
    try:
        while chunk := os.read(master, 4096):
            data += chunk
    except OSError:
        pass
    os.close(master)
    assert out.returncode == 0
    assert b"solve n=60" in data and b"100%" in data


# ------------------------------------------------------------------ generated input

N_TEXT = st.one_of(
    st.integers(min_value=-10**25, max_value=10**25).map(str),
    st.integers(min_value=1, max_value=40).map(str),
    st.text(max_size=8),
)
OPTION = st.sampled_from(["--threads", "--prime-offset", "--max-memory", None])
VALUE = st.one_of(st.integers(min_value=-10**22, max_value=10**22).map(str),
                  st.text(max_size=6), st.sampled_from(["1", "2", "3M", "1K"]))


def partitions_into_fibonacci(n: int) -> int:
    """Number of partitions of n into Fibonacci parts (OEIS A003107), by a plain loop."""
    ways = [1] + [0] * n
    for part in fibonacci_upto(n):
        for v in range(part, n + 1):
            ways[v] += ways[v - part]
    return ways[n]


def _checked(args: list[str]):  # noqa: ANN202 - a click Result
    res = CliRunner().invoke(main, args)
    if res.exit_code != 0:
        assert res.exit_code in (2, 3), (args, res.exit_code, res.output)
        lines = [x for x in res.output.splitlines() if x.strip()]
        assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), (args, res.output)
        assert "Traceback" not in res.output
    return res


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(n=N_TEXT, option=OPTION, value=VALUE)
def test_generated_count_input(n: str, option: str | None, value: str) -> None:
    """Exit 0 with a correct census, or one line with exit 2 or 3."""
    args = ["count", n, "--json", "--max-memory", "8M"]
    if option is not None:
        args += [option, value]
    res = _checked(args)
    if res.exit_code == 0:
        d = json.loads(res.stdout)
        k = int(n)
        assert d["n"] == k
        assert d["states"] == partitions_into_fibonacci(k)  # every state is reachable
        assert d["shortest"] == k - len(zeckendorf(k))  # arXiv:1809.04881
        if k <= 12:
            assert int(d["games"]) == census(k)["games"]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(n=N_TEXT, players=st.one_of(st.integers(min_value=-5, max_value=10**21).map(str),
                                   st.text(max_size=4)),
       winners=st.booleans())
def test_generated_random_input(n: str, players: str, winners: bool) -> None:
    """Exit 0 with the exact law of the brute force, or one line with exit 2 or 3."""
    args = ["random", n, "--players", players, "--json", "--max-memory", "6M"]
    if winners:
        args.append("--winners-only")
    res = _checked(args)
    if res.exit_code == 0:
        d = json.loads(res.stdout)
        k, p = int(n), int(players)
        wins = {int(i): Fraction(v) for i, v in d["win_probability"].items()}
        assert sum(wins.values()) == 1
        if k <= 10:
            assert wins == win_law(length_law(k, "moves"), p)
