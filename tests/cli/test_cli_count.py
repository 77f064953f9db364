"""The `zeckenum count` command, run as the installed console script and through click.

Expected numbers come from the independent brute force in tests/support/bruteforce.py.
"""

from __future__ import annotations

import csv
import errno
import json
import os
import re
import shutil
import subprocess
from importlib.metadata import version
from pathlib import Path

import pytest
from bruteforce import census
from click.testing import CliRunner
from zeckenum.cli.group import main

N = 12
JSON_KEYS = {"rules", "n", "states", "transitions", "games", "shortest", "longest",
             "length_counts"}


def run_script(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    exe = shutil.which("zeckenum")
    if exe is None:
        pytest.fail("the `zeckenum` console script is not installed on PATH")
    return subprocess.run(
        [exe, *args], capture_output=True, text=True, timeout=300, cwd=cwd, check=False
    )


def run_click(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(main, list(args))
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result.exit_code, result.stdout, result.stderr


def check_json(obj: dict, n: int) -> None:
    want = census(n)
    assert JSON_KEYS <= set(obj)
    assert obj["rules"] == "standard"
    assert obj["n"] == n
    assert obj["states"] == want["states"]
    assert obj["transitions"] == want["transitions"]
    assert isinstance(obj["games"], str) and obj["games"] == str(want["games"])
    assert obj["shortest"] == want["shortest"]
    assert obj["longest"] == want["longest"]
    assert obj["length_counts"] == {str(k): str(v) for k, v in want["length_counts"].items()}
    assert all(isinstance(v, str) for v in obj["length_counts"].values())


def assert_one_line_error(code: int, stdout: str, stderr: str, status: int) -> None:
    assert code == status, (code, stdout, stderr)
    assert "Traceback" not in stderr and "Traceback" not in stdout
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, stderr


# ---------------------------------------------------------------- console script


@pytest.fixture(scope="module")
def script_json_csv(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    """One run of `zeckenum count N --json --out x.csv` (relative path, in a temp dir)."""
    cwd = tmp_path_factory.mktemp("cli")
    proc = run_script("count", str(N), "--json", "--out", "x.csv", cwd=cwd)
    assert proc.returncode == 0, proc.stderr
    return proc.stdout, cwd / "x.csv"


def test_script_json_matches_bruteforce(script_json_csv: tuple[str, Path]) -> None:
    check_json(json.loads(script_json_csv[0]), N)


def test_script_out_csv(script_json_csv: tuple[str, Path]) -> None:
    with open(script_json_csv[1], newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["n", "length", "count"]
    want = census(N)["length_counts"]
    assert [(int(a), int(b), int(c)) for a, b, c in rows[1:]] == [
        (N, length, c) for length, c in want.items()
    ]


def test_script_out_json(tmp_path: Path) -> None:
    out = tmp_path / "x.json"
    proc = run_script("count", str(N), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    check_json(json.loads(out.read_text()), N)
    assert str(census(N)["games"]) in proc.stdout  # the table names the number of games


def test_script_version() -> None:
    proc = run_script("--version")
    assert proc.returncode == 0
    assert version("zeckenum") in proc.stdout


def test_script_count_help_has_example() -> None:
    proc = run_script("count", "--help")
    assert proc.returncode == 0
    assert "example" in proc.stdout.lower()
    assert "zeckenum count " in proc.stdout


# Every bad n is also checked in-process below (CliRunner); two of the four run here as
# separate processes in the fast tier, the other two under @slow (about 1 s each).
@pytest.mark.parametrize(
    "bad", ["0", "abc", pytest.param("-3", marks=pytest.mark.slow),
            pytest.param("2.5", marks=pytest.mark.slow)],
)
def test_script_bad_n(bad: str) -> None:
    proc = run_script("count", bad)
    assert_one_line_error(proc.returncode, proc.stdout, proc.stderr, 2)


def test_script_memory_refused() -> None:
    proc = run_script("count", "30", "--max-memory", "1K")
    assert_one_line_error(proc.returncode, proc.stdout, proc.stderr, 3)
    assert "estimate" in proc.stderr.lower()
    assert proc.stdout.strip() == ""


# ---------------------------------------------------------------- click runner


def test_click_json_matches_bruteforce() -> None:
    code, out, err = run_click("count", str(N), "--json")
    assert code == 0, err
    check_json(json.loads(out), N)


def test_click_other_thread_count_and_prime_set_agree() -> None:
    code, out, err = run_click("count", str(N), "--json", "--threads", "1",
                               "--prime-offset", "7")
    assert code == 0, err
    check_json(json.loads(out), N)


def test_click_out_csv(tmp_path: Path) -> None:
    out = tmp_path / "spec.csv"
    code, _, err = run_click("count", "9", "--out", str(out))
    assert code == 0, err
    rows = list(csv.DictReader(out.open(newline="")))
    assert {int(r["length"]): int(r["count"]) for r in rows} == census(9)["length_counts"]
    assert {int(r["n"]) for r in rows} == {9}


@pytest.mark.parametrize("bad", ["0", "-3", "abc", "2.5"])
def test_click_bad_n(bad: str) -> None:
    assert_one_line_error(*run_click("count", bad), 2)


@pytest.mark.parametrize(
    "args",
    [
        ("count", "5", "--threads", "0"),
        ("count", "5", "--max-memory", "lots"),
        ("count", "5", "--prime-offset", "-1"),
        ("count",),
        ("count", "5", "6"),
    ],
)
def test_click_bad_options(args: tuple[str, ...]) -> None:
    assert_one_line_error(*run_click(*args), 2)


def test_click_bad_out_suffix(tmp_path: Path) -> None:
    assert_one_line_error(*run_click("count", "5", "--out", str(tmp_path / "x.txt")), 2)


def test_click_memory_refused() -> None:
    code, out, err = run_click("count", "30", "--max-memory", "1K")
    assert_one_line_error(code, out, err, 3)
    assert "estimate" in err.lower()


# ------------------------------------------- output files that cannot be written (issue 11)


def _never_count(*args, **kwargs):  # noqa: ANN002, ANN003
    raise AssertionError("the count ran although its output path was refused")


def test_out_missing_folder_refused_before_counting(tmp_path: Path, monkeypatch) -> None:
    import zeckenum.counting.count as engine

    monkeypatch.setattr(engine, "count", _never_count)
    code, out, err = run_click("count", "10", "--out", str(tmp_path / "no" / "dir" / "x.csv"))
    assert_one_line_error(code, out, err, 6)
    assert "does not exist" in err


def test_out_is_a_directory_refused_before_counting(tmp_path: Path, monkeypatch) -> None:
    import zeckenum.counting.count as engine

    monkeypatch.setattr(engine, "count", _never_count)
    (tmp_path / "d.csv").mkdir()
    code, out, err = run_click("count", "10", "--out", str(tmp_path / "d.csv"))
    assert_one_line_error(code, out, err, 2)  # click's own check of the path: a usage error
    assert "directory" in err


def test_out_bad_suffix_refused_before_counting(tmp_path: Path, monkeypatch) -> None:
    import zeckenum.counting.count as engine

    monkeypatch.setattr(engine, "count", _never_count)
    assert_one_line_error(*run_click("count", "5", "--out", str(tmp_path / "x.txt")), 2)


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_out_read_only_folder_refused_before_counting(tmp_path: Path, monkeypatch) -> None:
    import zeckenum.counting.count as engine

    monkeypatch.setattr(engine, "count", _never_count)
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        code, out, err = run_click("count", "10", "--out", str(folder / "x.csv"))
    finally:
        folder.chmod(0o700)
    assert_one_line_error(code, out, err, 6)


def _fail_writes_in(folder: Path, monkeypatch) -> None:
    """Every fsync of a file inside `folder` fails with ENOSPC (a disk that filled up after
    the output path was checked); files elsewhere are written normally."""
    real = os.fsync

    def fsync(fd: int) -> None:
        try:
            where = os.readlink(f"/proc/self/fd/{fd}")
        except OSError:
            where = ""
        if where.startswith(str(folder)) and not os.path.isdir(where):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(fd)

    monkeypatch.setattr(os, "fsync", fsync)


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="needs /proc/self/fd")
@pytest.mark.parametrize("suffix", [".csv", ".json"])
def test_failed_write_after_count_rescues_result(tmp_path: Path, monkeypatch,
                                                 suffix: str) -> None:
    """Source: tests/support/bruteforce.py for the rescued spectrum.  Exit 6, one error line naming
    the rescue file, the result intact there, no temporary file left beside the target."""
    folder = tmp_path / "out"
    folder.mkdir()
    _fail_writes_in(folder, monkeypatch)
    target = folder / f"x{suffix}"
    code, out, err = run_click("count", str(N), "--out", str(target))
    assert_one_line_error(code, out, err, 6)
    assert str(census(N)["games"]) in out  # the table is still printed
    assert list(folder.iterdir()) == []  # neither the file nor a .tmp
    rescued = Path(re.search(r"written to (\S+) instead", err).group(1))
    try:
        if suffix == ".csv":
            rows = list(csv.DictReader(rescued.open(newline="")))
            got = {int(r["length"]): int(r["count"]) for r in rows}
            assert got == census(N)["length_counts"]
        else:
            check_json(json.loads(rescued.read_text()), N)
    finally:
        rescued.unlink()


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="needs /proc/self/fd")
def test_failed_strategy_write_rescues_strategy(tmp_path: Path, monkeypatch) -> None:
    """solve --strategy: the same rescue, and the rescued file passes check-strategy."""
    from zeckenum.cli.optimal import check_strategy_command, solve_command

    folder = tmp_path / "out"
    folder.mkdir()
    _fail_writes_in(folder, monkeypatch)
    res = CliRunner().invoke(solve_command, ["12", "--strategy", str(folder / "s.zst")])
    assert res.exit_code == 6, res.output
    assert list(folder.iterdir()) == []
    rescued = Path(re.search(r"written to (\S+) instead", res.output).group(1))
    try:
        check = CliRunner().invoke(check_strategy_command, [str(rescued)])
        assert check.exit_code == 0, check.output
    finally:
        rescued.unlink()


def test_strategy_path_refused_before_solving(tmp_path: Path, monkeypatch) -> None:
    import zeckenum.cli.optimal as cli_solve

    monkeypatch.setattr(cli_solve, "winning_strategy", _never_count)
    res = CliRunner().invoke(cli_solve.solve_command,
                             ["12", "--strategy", str(tmp_path / "none" / "s.zst")])
    assert res.exit_code == 6, res.output
    assert res.output.startswith("zeckenum: error: ") and "does not exist" in res.output


def test_count_table_plurals() -> None:
    """n = 2: one game of one move (common practice: English plurals)."""
    code, out, err = run_click("count", "2")
    assert code == 0, err
    assert "1 move (1 game)" in out, out
    assert "1 moves" not in out and "1 games" not in out


def test_count_result_write_is_atomic_and_checks_the_suffix(tmp_path: Path) -> None:
    """The API's `CountResult.write` writes what `count --out` writes, refuses other
    suffixes and leaves no temporary file when the write fails (common practice: atomic
    replace).  Reference for the spectrum: the brute force of tests/support/bruteforce.py."""
    import zeckenum
    from zeckenum.errors import InputError

    res = zeckenum.count(9)
    res.write(tmp_path / "s.csv")
    rows = (tmp_path / "s.csv").read_text().splitlines()[1:]
    got = {int(r.split(",")[1]): int(r.split(",")[2]) for r in rows}
    assert got == census(9)["length_counts"]
    with pytest.raises(InputError):
        res.write(tmp_path / "s.txt")
    (tmp_path / "d.json").mkdir()  # a directory in the way: the rename fails
    with pytest.raises(OSError):
        res.write(tmp_path / "d.json")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.json", "s.csv"]
