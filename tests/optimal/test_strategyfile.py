"""Strategy files: export, the zstrat/1 format, its reader and the independent checker.

Sources of the expected values:
- the independent checker `check_strategy` rebuilds the moves from the rule set's definition
  and replays every game (it shares no code with the solver); its verdicts are checked
  against hand-corrupted files below.
- tests/support/minimax.py: plain-Python bins and moves of the variants ("brute force").
- Hostile-file tests: one short error line and exit status 2 is common practice.
"""

from __future__ import annotations

import gzip
import json
import os
import re
import shutil
import subprocess

import minimax
import pytest
from click.testing import CliRunner
from zeckenum.cli.optimal import check_strategy_command, solve_command
from zeckenum.errors import InputError
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.optimal.strategyfile import (
    StrategyRejected,
    check_strategy,
    format_strategy,
    parse_strategy,
    read_strategy,
    write_strategy,
)
from zeckenum.rules.model import STANDARD


def _write(tmp_path, n: int, gz: bool = False):
    strat, _ = winning_strategy(n)
    path = tmp_path / (f"s{n}.zst.gz" if gz else f"s{n}.zst")
    write_strategy(path, strat, STANDARD.bin_values(n))
    return path, strat


@pytest.mark.parametrize("n", list(range(1, 41, 3)) + [80])
def test_exported_strategies_pass_checker(tmp_path, n: int) -> None:
    """Source: the independent checker (own move rules). Strategies for small n win."""
    path, strat = _write(tmp_path, n, gz=(n % 2 == 0))
    rep = check_strategy(read_strategy(path))
    assert rep.winner == strat.winner
    assert rep.winner_positions == strat.size
    assert rep.unused_lines == 0


@pytest.mark.slow
def test_every_strategy_up_to_80_passes(tmp_path) -> None:
    """Every exported strategy for n <= 80 passes check-strategy (through the CLI)."""
    runner = CliRunner()
    for n in range(1, 81):
        path = tmp_path / f"s{n}.zst"
        res = runner.invoke(solve_command, [str(n), "--strategy", str(path)])
        assert res.exit_code == 0, res.output
        res = runner.invoke(check_strategy_command, [str(path), "--json"])
        assert res.exit_code == 0, (n, res.output)
        assert json.loads(res.output)["ok"] is True


def _lines(path) -> list[str]:
    return path.read_text().splitlines()


def _data_index(lines: list[str]) -> list[int]:
    """Indices of the data lines (after the header line)."""
    body = [i for i, ln in enumerate(lines) if ln and not ln.startswith("#")]
    return body[1:]


def test_corrupt_illegal_move(tmp_path) -> None:
    path, _ = _write(tmp_path, 20)
    lines = _lines(path)
    i = _data_index(lines)[0]
    counts = lines[i].split()[0]
    lines[i] = f"{counts} split@5"  # 2F5 is not present early in the game
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(StrategyRejected, match=r"illegal move split@5 at position"):
        check_strategy(read_strategy(path))


def test_corrupt_missing_position(tmp_path) -> None:
    path, _ = _write(tmp_path, 20)
    lines = _lines(path)
    del lines[_data_index(lines)[0]]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(StrategyRejected, match=r"no move listed for position"):
        check_strategy(read_strategy(path))


def test_corrupt_losing_move(tmp_path) -> None:
    """Source: brute force picks a legal move to an N-position; the checker must reject it."""
    n = 16
    path, strat = _write(tmp_path, n)
    lines = _lines(path)
    for i in _data_index(lines):
        counts_text, _ = lines[i].split()
        pos = tuple(int(x) for x in counts_text.split(","))
        pos = pos + (0,) * (len(minimax.start_state(n)) - len(pos))
        bad = [name for name, t in minimax.moves_of(pos) if minimax.mover_wins(t)]
        if bad:
            lines[i] = f"{counts_text} {bad[0]}"
            break
    else:  # pragma: no cover
        pytest.fail("no position with a losing alternative")
    path.write_text("\n".join(lines) + "\n")
    runner = CliRunner()
    res = runner.invoke(check_strategy_command, [str(path)])
    assert res.exit_code == 5  # a failed check (errors.CheckFailed)
    assert res.output.startswith("zeckenum: error: ")
    assert len(res.output.strip().splitlines()) == 1


def test_corrupt_header_and_syntax(tmp_path) -> None:
    path, strat = _write(tmp_path, 12)
    text = path.read_text()
    with pytest.raises(InputError, match="not a zstrat/1"):
        parse_strategy(text.replace("zstrat/1 ", "zstrat/9 "))
    with pytest.raises(InputError, match="bad counts"):
        parse_strategy(text + "1,x,2 combine@2\n")
    first = next(ln for ln in text.splitlines()[7:] if ln)
    with pytest.raises(InputError, match="already listed"):
        parse_strategy(text + first + "\n")
    # claiming the other player wins cannot pass
    flipped = text.replace(f"winner={strat.winner}", f"winner={3 - strat.winner}")
    with pytest.raises(StrategyRejected):
        check_strategy(parse_strategy(flipped))


def test_gzip_roundtrip(tmp_path) -> None:
    path, strat = _write(tmp_path, 25, gz=True)
    text = gzip.decompress(path.read_bytes()).decode()
    assert text == format_strategy(strat, STANDARD.bin_values(25))



def test_check_strategy_missing_file(tmp_path) -> None:
    res = CliRunner().invoke(check_strategy_command, [str(tmp_path / "none.zst")])
    assert res.exit_code == 2
    assert "cannot read" in res.output


@pytest.mark.parametrize("name", ["reversed", "tribonacci", "twos"])
def test_variant_strategies_pass_checker(tmp_path, name: str) -> None:
    from zeckenum.rules.catalogue import get_rules

    rules = get_rules(name)
    for n in (2, 6, 10):
        strat, _ = winning_strategy(n, rules)
        path = tmp_path / f"{name}{n}.zst"
        write_strategy(path, strat, list(minimax.TemplateGame(rules, n).values))
        rep = check_strategy(read_strategy(path))
        assert rep.winner_positions == strat.size


# --- hostile strategy files and embedded rule files (issue 11, part B) -------------------

MAX_ERROR_LINE = 300  # common practice: one short line


def _one_line(res, status: int = 2, pattern: str | None = None) -> str:
    assert res.exit_code == status, res.output[:2000]
    assert isinstance(res.exception, SystemExit), res.exception
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: "), res.output[:2000]
    assert len(lines[0]) <= MAX_ERROR_LINE, lines[0][:400]
    if pattern is not None:
        assert pattern in lines[0], lines[0]
    return lines[0]


def _check(path, *extra: str):
    return CliRunner().invoke(check_strategy_command, [str(path), *extra])


def _script_check(path) -> subprocess.CompletedProcess:
    exe = shutil.which("zeckenum")
    assert exe is not None
    return subprocess.run([exe, "check-strategy", str(path)], capture_output=True, text=True,
                          timeout=120, check=False)


def test_corrupt_deflate_stream(tmp_path) -> None:
    path, _ = _write(tmp_path, 20, gz=True)
    data = bytearray(path.read_bytes())
    for i in range(20, len(data) - 12, 7):  # keep the gzip header, wreck the deflate blocks
        data[i] ^= 0x5A
    path.write_bytes(bytes(data))
    _one_line(_check(path), 2, "gzip")


def test_truncated_gzip(tmp_path) -> None:
    path, _ = _write(tmp_path, 20, gz=True)
    path.write_bytes(path.read_bytes()[: len(path.read_bytes()) // 2])
    _one_line(_check(path), 2, "gzip")


def test_gzip_bomb_is_refused(tmp_path, monkeypatch) -> None:
    """A small gzip file inflating past the cap is refused while inflating."""
    import zeckenum.optimal.strategyfile as strategy_module

    monkeypatch.setattr(strategy_module, "MAX_TEXT_BYTES", 1 << 20, raising=False)
    path = tmp_path / "bomb.zst.gz"
    path.write_bytes(gzip.compress(b"#" * (16 << 20)))
    _one_line(_check(path), 2, "more than")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_strategy_fifo_does_not_block(tmp_path) -> None:
    path = tmp_path / "pipe.zst"
    os.mkfifo(path)
    res = _script_check(path)
    assert res.returncode == 2, res.stderr
    assert "not a regular file" in res.stderr and len(res.stderr.strip().splitlines()) == 1


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_strategy_symlink_to_dev_zero(tmp_path) -> None:
    path = tmp_path / "zero.zst"
    path.symlink_to("/dev/zero")
    res = _script_check(path)
    assert res.returncode == 2, res.stderr
    assert "not a regular file" in res.stderr and len(res.stderr.strip().splitlines()) == 1


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_header_naming_a_fifo_is_never_opened(tmp_path) -> None:
    """The header's rules= field is a name, never a path to open."""
    pipe = tmp_path / "rules.toml"
    os.mkfifo(pipe)
    path, _ = _write(tmp_path, 10)
    text = path.read_text()
    header = next(ln for ln in text.splitlines() if ln.startswith("zstrat/1"))
    fields = [f for f in header.split() if not f.startswith(("rules=", "rules_text="))]
    new = " ".join(fields + [f"rules={pipe}"])
    path.write_text(text.replace(header, new))
    res = _script_check(path)  # opening the FIFO would block until the timeout
    assert res.returncode == 2, res.stderr
    assert "not built in" in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_header_numbers_bounded(tmp_path) -> None:
    path, strat = _write(tmp_path, 10)
    text = path.read_text().replace(f" n={strat.n} ", " n=" + "9" * 15 + " ")
    path.write_text(text)
    _one_line(_check(path), 2, "n must be")


CUSTOM_RULES = """\
name = "two-start"
about = "The standard moves, started from n tokens in bin 2."
start = { vector = [0, 1] }
layering = "tokens"

[bins]
initial = [1, 2]
recurrence = [1, 1]

[[move]]
name = "combine-ones"
at = 1
take = ["k", "k"]
give = ["k+1"]

[[move]]
name = "combine"
from = 2
take = ["k-1", "k"]
give = ["k+1"]

[[move]]
name = "split-twos"
at = 2
take = ["k", "k"]
give = ["k-1", "k+1"]

[[move]]
name = "split"
from = 3
take = ["k", "k"]
give = ["k-2", "k+1"]
"""


def _custom_strategy(tmp_path, n: int = 6):
    rules_path = tmp_path / "two-start.toml"
    rules_path.write_text(CUSTOM_RULES)
    path = tmp_path / "custom.zst"
    res = CliRunner().invoke(solve_command, [str(n), "--rules", str(rules_path),
                                             "--strategy", str(path)])
    assert res.exit_code == 0, res.output
    rules_path.unlink()  # the check must need nothing but the strategy file
    return path


def test_custom_rules_checked_from_the_file_alone(tmp_path) -> None:
    """Source: the independent checker, on the game rebuilt from the embedded rule file;
    the winner it confirms is compared with the template minimax of tests/support/minimax.py."""
    from zeckenum.rules.rulefile import parse_rules

    path = _custom_strategy(tmp_path)
    res = _check(path, "--json")
    assert res.exit_code == 0, res.output
    rep = json.loads(res.output)
    assert rep["ok"] is True
    game = minimax.TemplateGame(parse_rules(CUSTOM_RULES), 6)
    assert rep["winner"] == (1 if game.mover_wins(game.start) else 2)


def test_embedded_rules_with_another_hash_refused(tmp_path) -> None:
    import base64

    path = _custom_strategy(tmp_path)
    text = path.read_text()
    header = next(ln for ln in text.splitlines() if ln.startswith("zstrat/1"))
    field = next(f for f in header.split() if f.startswith("rules_text="))
    other = CUSTOM_RULES.replace("vector = [0, 1]", "vector = [1, 1]")
    forged = "rules_text=" + base64.b64encode(other.encode()).decode()
    path.write_text(text.replace(field, forged))
    _one_line(_check(path), 2, "content hash")
    path.write_text(text.replace(field, "rules_text=@@not-base64@@"))
    _one_line(_check(path), 2, "base64")


def test_files_without_embedded_rules_still_read(tmp_path) -> None:
    """Files written before the rules_text field: a built-in name still checks."""
    path, strat = _write(tmp_path, 14)
    text = path.read_text()
    header = next(ln for ln in text.splitlines() if ln.startswith("zstrat/1"))
    old = " ".join(f for f in header.split() if not f.startswith("rules_text="))
    path.write_text(text.replace(header, old))
    res = _check(path, "--json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.output)["winner_positions"] == strat.size


def test_losing_strategy_exits_5(tmp_path) -> None:
    path, strat = _write(tmp_path, 12)
    text = path.read_text().replace(f"winner={strat.winner}", f"winner={3 - strat.winner}")
    path.write_text(text)
    _one_line(_check(path), 5)


# --------------------------- generated hostile strategy files (hypothesis, issue 11, part E)
# Property (common practice for readers of untrusted files): reading and checking any bytes
# ends in a report or a ZeckenumError with one line of at most MAX_ERROR_LINE characters;
# never another exception, never a hang.

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402
from zeckenum.errors import ZeckenumError  # noqa: E402

HYPO = settings(max_examples=120, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])
SMALL_N = 12


def _real_strategy_text() -> str:
    strat, _ = winning_strategy(SMALL_N)
    return format_strategy(strat, STANDARD.bin_values(SMALL_N), STANDARD)


REAL_TEXT = _real_strategy_text()


def _read_and_check(tmp_path, data: bytes, suffix: str = ".zst") -> None:
    path = tmp_path / f"gen{suffix}"
    path.write_bytes(data)
    try:
        check_strategy(read_strategy(path))
    except ZeckenumError as exc:
        msg = str(exc)
        assert "\n" not in msg and 0 < len(msg) <= MAX_ERROR_LINE, msg[:400]


@HYPO
@given(data=st.binary(max_size=3000), gz_magic=st.booleans())
def test_generated_random_bytes(tmp_path, data: bytes, gz_magic: bool) -> None:
    _read_and_check(tmp_path, (b"\x1f\x8b" + data) if gz_magic else data)


@HYPO
@given(cut=st.integers(min_value=0, max_value=10**6),
       flips=st.lists(st.tuples(st.integers(min_value=0, max_value=10**6),
                                st.integers(min_value=1, max_value=255)), max_size=4))
def test_truncated_and_bit_flipped_gzip(tmp_path, cut: int, flips: list) -> None:
    data = bytearray(gzip.compress(REAL_TEXT.encode(), mtime=0))
    for pos, mask in flips:
        data[pos % len(data)] ^= mask
    data = data[: len(data) - cut % len(data)] if cut % 3 else data
    _read_and_check(tmp_path, bytes(data), ".zst.gz")


line_edit = st.tuples(
    st.sampled_from(["replace", "delete", "duplicate", "number", "header", "swap"]),
    st.integers(min_value=0, max_value=10**6),
    st.one_of(st.text(max_size=30),
              st.sampled_from(["0", "1", "2", "3", "12", "13", "99999999999999999999",
                               "-1", "split@3", "combine@2", "combine-ones@1", "x=y", "=",
                               "rules=standard", "rules=../../etc/passwd.toml",
                               "rules_text=AAAA", "rules_hash=0000000000000000", "n=13",
                               "winner=1", "players=3"])),
)


def _edit_lines(text: str, edits: list) -> str:
    lines = text.split("\n")
    header = next(i for i, ln in enumerate(lines) if ln.startswith("zstrat/1"))
    for kind, pos, token in edits:
        body = list(range(header + 1, len(lines))) or [header]
        i = body[pos % len(body)]
        if kind == "replace":
            lines[i] = token
        elif kind == "delete" and len(lines) > 1:
            del lines[i]
        elif kind == "duplicate":
            lines.insert(i, lines[i])
        elif kind == "swap":
            j = body[(pos // 7) % len(body)]
            a, b = lines[i].split(" "), lines[j].split(" ")
            if len(a) == 2 and len(b) == 2:  # trade the moves of two positions
                lines[i], lines[j] = f"{a[0]} {b[1]}", f"{b[0]} {a[1]}"
        elif kind == "number":
            nums = [m.span() for m in re.finditer(r"\d+", lines[i])]
            if nums:
                a, b = nums[pos % len(nums)]
                lines[i] = lines[i][:a] + str(pos % 97) + lines[i][b:]
        else:  # change or add a header field
            fields = lines[header].split(" ")
            key = token.partition("=")[0]
            fields = [f for f in fields if f.partition("=")[0] != key] + [token]
            lines[header] = " ".join(fields)
        if header >= len(lines) or not lines[header].startswith("zstrat/1"):
            break
    return "\n".join(lines)


@HYPO
@given(edits=st.lists(line_edit, min_size=1, max_size=4), gz=st.booleans())
def test_mutated_lines_of_a_real_strategy(tmp_path, edits: list, gz: bool) -> None:
    data = _edit_lines(REAL_TEXT, edits).encode("utf-8", errors="surrogatepass")
    if gz:
        data = gzip.compress(data, mtime=0)
    _read_and_check(tmp_path, data, ".zst.gz" if gz else ".zst")


def test_real_strategy_text_passes() -> None:
    """The unmutated file of the battery above is accepted (so the battery can fail)."""
    rep = check_strategy(parse_strategy(REAL_TEXT))
    assert rep.n == SMALL_N and rep.unused_lines == 0


def test_long_path_error_is_short(tmp_path) -> None:
    deep = tmp_path
    for _ in range(30):
        deep = deep / ("d" * 60)
    res = _check(str(deep / "missing.zst"))
    _one_line(res, 2, "cannot read")
