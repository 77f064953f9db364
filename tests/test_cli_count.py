"""The `zeckenum count` command, run as the installed console script and through click.

Expected numbers come from the independent brute force in tests/bruteforce.py.
"""

from __future__ import annotations

import csv
import json
import shutil
import subprocess
from importlib.metadata import version
from pathlib import Path

import pytest
from bruteforce import census
from click.testing import CliRunner
from zeckenum.cli import main

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
