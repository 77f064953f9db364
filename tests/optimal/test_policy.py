"""Strategy conjectures: policy files, Python hooks, verdicts, refuting lines, shares.

Sources of the expected values:
- tests/support/policy_bruteforce.py and minimax.py: the standard game, the policies and
  their AND-OR evaluation written again in plain Python (memoised recursion on count
  tuples; no zeckenum code) -- "brute force".
- "The Zeckendorf Game" (2018, arXiv:1809.04881): player 2 has a winning strategy for every
  n > 2; so a policy that plays a winning move at every position it faces never fails.
- Malformed input gives one line and exit status 2: common practice (enumerate/errors.py).
"""

from __future__ import annotations

import json

import hypothesis.strategies as st
import minimax
import policy_bruteforce as bf
import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from zeckenum.cli.policy import test_policy_command as policy_command
from zeckenum.errors import InputError
from zeckenum.optimal.policy import policy_row, policy_verdicts
from zeckenum.optimal.policyfile import parse_policy
from zeckenum.optimal.strategy import winning_strategy
from zeckenum.rules.model import STANDARD

SPLIT_HIGH = """
format = "zpolicy/1"
name = "split-high"
[[prefer]]
moves = ["split"]
bin = "highest"
[[prefer]]
moves = ["combine"]
bin = "lowest"
"""

COMBINE_HIGH_GUARDED = """
format = "zpolicy/1"
name = "combine-guarded"
[[prefer]]
moves = ["combine"]
bin = "highest"
when = ["c[k] >= 2", "c[1] is even"]
[[prefer]]
moves = ["split"]
bin = "lowest"
from = 3
[[prefer]]
moves = ["combine"]
bin = "lowest"
when = ["tokens > 3"]
"""

TEMPLATE_NAMES = """
format = "zpolicy/1"
name = "ones-first"
[[prefer]]
moves = ["combine-ones", "split-twos"]
bin = "lowest"
when = ["c[k+1] <= 1", "top < 4"]
[[prefer]]
moves = ["any"]
bin = "highest"
"""

# The same three policies, written out again by hand for the brute force.
BRUTE = {
    "split-high": lambda s, o: bf.prefer(s, o, [("split", "highest", lambda s, k: True),
                                               ("combine", "lowest", lambda s, k: True)]),
    "combine-guarded": lambda s, o: bf.prefer(s, o, [
        ("combine", "highest", lambda s, k: s[k - 1] >= 2 and s[0] % 2 == 0),
        ("split", "lowest", lambda s, k: k >= 3),
        ("combine", "lowest", lambda s, k: sum(s) > 3)]),
}


def _ones_first(s: tuple[int, ...], o: list) -> int:
    top = max((i + 1 for i, x in enumerate(s) if x), default=0)
    for i, (nm, _) in enumerate(o):  # combine-ones@1 (k=1) comes before split-twos@2
        k = bf.k_of(nm)
        if nm.split("@")[0] in ("combine-ones", "split-twos") and top < 4 \
                and (s[k] if k < len(s) else 0) <= 1:
            return i
    ks = [bf.k_of(nm) for nm, _ in o]
    return ks.index(max(ks))  # "any", highest k; the first template in order on a tie


BRUTE["ones-first"] = _ones_first
TEXTS = {"split-high": SPLIT_HIGH, "combine-guarded": COMBINE_HIGH_GUARDED,
         "ones-first": TEMPLATE_NAMES}


@pytest.mark.parametrize("name", sorted(TEXTS))
@pytest.mark.parametrize("player", [1, 2])
def test_verdicts_match_brute_force(name: str, player: int) -> None:
    """Brute force: the verdict, the refutation length and the winning-move counts at
    every n <= 14, for three policies and both players."""
    rep = policy_verdicts(parse_policy(TEXTS[name]), 1, 14, "standard", player)
    for row in rep.rows:
        want = bf.verdict(row.n, player, BRUTE[name])
        assert row.wins == (want is None), (name, player, row.n)
        assert (None if row.wins else len(row.refutation)) == want
        assert (row.positions, row.n_positions, row.winning_choices) == \
            bf.census(row.n, player, BRUTE[name]), (name, player, row.n)


@pytest.mark.parametrize("name", sorted(TEXTS))
def test_refuting_lines_replay(name: str) -> None:
    """Brute force: every refuting line (player 2, n <= 14) replays move by move in the
    game rebuilt from its definition, the policy playing its own choices, and ends with
    the policy player unable to move."""
    rep = policy_verdicts(parse_policy(TEXTS[name]), 3, 14, "standard", 2)
    failures = [r for r in rep.rows if not r.wins]
    assert failures  # these policies are not winning strategies (brute force above)
    for row in failures:
        line = [(s.player, s.move, s.after) for s in row.refutation]
        assert bf.replay(row.n, 2, BRUTE[name], line) is None


def test_bad_policy_fails_with_replayable_line() -> None:
    """A deliberately bad policy: always combine the ones first (player 2).  Brute force:
    it fails, at the first n the reference finds, with a line the reference replays."""
    text = ('format = "zpolicy/1"\nname = "ones"\n[[prefer]]\nmoves = ["combine-ones"]\n'
            '[[prefer]]\nmoves = ["any"]\nbin = "lowest"\n')
    ref = lambda s, o: 0  # noqa: E731 - combine-ones@1 is first when legal, else the lowest
    rep = policy_verdicts(parse_policy(text), 3, 12, "standard", 2)
    first = rep.first_failure
    want = next(n for n in range(3, 13) if bf.verdict(n, 2, ref) is not None)
    assert first is not None and first.n == want
    line = [(s.player, s.move, s.after) for s in first.refutation]
    assert bf.replay(first.n, 2, ref, line) is None
    assert len(line) == bf.verdict(first.n, 2, ref)


def _strategy_hook_file(tmp_path, upto: int):
    """A Python hook that plays the exported winning strategy of `solve` at each n."""
    tables = {}
    for n in range(3, upto + 1):
        strat, _ = winning_strategy(n)
        tables.update({(len(p), tuple(p)): m for p, m in zip(strat.positions, strat.moves,
                                                            strict=True)})
    path = tmp_path / "winning.py"
    path.write_text(
        "TABLE = " + repr(tables) + "\n"
        "def choose(position, moves):\n"
        "    name = TABLE.get((len(position), tuple(position)))\n"
        "    names = [m[0] for m in moves]\n"
        "    return names.index(name) if name in names else 0\n")
    return path


def test_winning_hook_small(tmp_path) -> None:
    """arXiv:1809.04881 (player 2 wins every n > 2): the strategy export, played through
    the Python hook, never fails for 3 <= n <= 20 and every choice is a winning move."""
    path = _strategy_hook_file(tmp_path, 20)
    rep = policy_verdicts(str(path), 3, 20, "standard", 2)
    assert rep.first_failure is None
    for row in rep.rows:
        assert row.positions > 0 and row.winning_choices == row.positions == row.n_positions


@pytest.mark.slow
def test_winning_hook_never_fails_to_80(tmp_path) -> None:
    """arXiv:1809.04881: a policy built from solve's strategy never fails for n <= 80."""
    path = _strategy_hook_file(tmp_path, 80)
    rep = policy_verdicts(f"{path}:choose", 3, 80, "standard", 2)
    assert rep.first_failure is None
    assert all(r.winning_choices == r.positions for r in rep.rows)


def test_hook_matches_file_policy(tmp_path) -> None:
    """Brute force (the same split-high policy as a hook): hook and file agree with it."""
    path = tmp_path / "sh.py"
    path.write_text(
        "def choose(position, moves):\n"
        "    splits = [(int(m.split('@')[1]), i) for i, (m, _) in enumerate(moves)\n"
        "              if m.startswith('split')]\n"
        "    if splits:\n"
        "        k = max(s[0] for s in splits)\n"
        "        return min(i for kk, i in splits if kk == k)\n"
        "    combines = [(int(m.split('@')[1]), i) for i, (m, _) in enumerate(moves)]\n"
        "    return min(combines)[1]\n")
    rep = policy_verdicts(str(path), 1, 12, "standard", 2)
    for row in rep.rows:
        want = bf.verdict(row.n, 2, BRUTE["split-high"])
        assert row.wins == (want is None)
        assert row.fallbacks == 0


def test_hook_errors_are_one_line(tmp_path) -> None:
    """Common practice: a hook returning nonsense or raising is refused with one line."""
    bad = tmp_path / "bad.py"
    bad.write_text("def choose(position, moves):\n    return 99\n")
    with pytest.raises(InputError, match="expected an index"):
        policy_verdicts(str(bad), 3, 4)
    boom = tmp_path / "boom.py"
    boom.write_text("def choose(position, moves):\n    raise ValueError('no')\n")
    with pytest.raises(InputError, match="raised ValueError"):
        policy_verdicts(str(boom), 3, 4)
    with pytest.raises(InputError, match="no function"):
        policy_verdicts(f"{boom}:other", 3, 4)


def test_unknown_template_refused() -> None:
    """Common practice: a template the rule set lacks is refused, naming the templates."""
    text = 'format = "zpolicy/1"\nname = "x"\n[[prefer]]\nmoves = ["shuffle"]\n'
    with pytest.raises(InputError, match="does not have"):
        policy_row(5, STANDARD, 2, policy=parse_policy(text))


def test_cli_json_and_table(tmp_path) -> None:
    """Brute force: the CLI's JSON gives the verdicts and the first failure of split-high;
    the table shows the refuting line in the count-vector notation."""
    f = tmp_path / "p.toml"
    f.write_text(SPLIT_HIGH)
    r = CliRunner().invoke(policy_command,
                           [str(f), "--from", "3", "--to", "9", "--json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    want_first = next(n for n in range(3, 10)
                      if bf.verdict(n, 2, BRUTE["split-high"]) is not None)
    assert doc["first_failure"] == want_first
    assert [row["policy_wins"] for row in doc["rows"]] == \
        [bf.verdict(n, 2, BRUTE["split-high"]) is None for n in range(3, 10)]
    r = CliRunner().invoke(policy_command, [str(f), "--from", "3", "--to", "6"])
    assert r.exit_code == 0
    assert f"first failure: n={want_first}" in r.output
    assert "(4*1 = 4)" in r.output  # the start of n = 4 in the annotated notation


BAD_TEXTS = [
    "",
    "format = 'zpolicy/2'\nname='x'\n[[prefer]]\nmoves=['split']\n",
    "format = 'zpolicy/1'\n[[prefer]]\nmoves=['split']\n",
    "format = 'zpolicy/1'\nname='x'\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=[]\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\nbin='middle'\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\nwhen=['c[k] >> 2']\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\nwhen=['c[0] > 2']\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\nfrom=5\nto=2\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\ncolour='red'\n",
    "format = 'zpolicy/1'\nname='x'\nextra=1\n[[prefer]]\nmoves=['split']\n",
    "format = 'zpolicy/1'\nname='x'\n[[prefer]]\nmoves=['split']\nwhen='c[1] > 0'\n",
    "\x00\x01 not toml [[[",
]


@pytest.mark.parametrize("text", BAD_TEXTS)
def test_malformed_policy_one_line_exit_2(tmp_path, text: str) -> None:
    """Common practice: a malformed policy file gives one line on stderr and exit 2."""
    f = tmp_path / "bad.toml"
    f.write_text(text)
    r = CliRunner().invoke(policy_command, [str(f), "--from", "3", "--to", "4"])
    assert r.exit_code == 2, r.output
    assert len(r.output.strip().splitlines()) == 1
    assert "Traceback" not in r.output


_FIELDS = st.sampled_from([
    "format = 'zpolicy/1'", "name = 'p'", "[[prefer]]", "moves = ['split']",
    "moves = ['combine', 'any']", "bin = 'lowest'", "when = ['c[k] >= 1']", "from = 2",
    "to = 0", "moves = 3", "when = [1]", "name = ''", "bin = 1", "[prefer]", "x = 1",
    "when = ['tokens is prime']", "moves = ['nope@1']", "from = -1", "[[prefer.when]]",
    "about = 7", "'", "=", "[", "moves = ['split'", "when = ['c[k+99999999] > 1']",
])


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(lines=st.lists(_FIELDS, min_size=0, max_size=8))
def test_generated_policies_parse_or_refuse_in_one_line(tmp_path, lines: list[str]) -> None:
    """Common practice: any generated text either parses or is refused by one InputError
    line (exit 2 through the CLI), never another exception."""
    text = "\n".join(lines) + "\n"
    try:
        pol = parse_policy(text)
    except InputError as exc:
        assert "\n" not in str(exc)
        f = tmp_path / "g.toml"
        f.write_text(text)
        r = CliRunner().invoke(policy_command, [str(f), "--from", "3", "--to", "3"])
        assert r.exit_code == 2 and len(r.output.strip().splitlines()) == 1
        return
    try:  # parsed: compiling for the standard game either works or names the template
        policy_row(3, STANDARD, 2, policy=pol)
    except InputError as exc:
        assert "does not have" in str(exc)


def test_bad_ranges_one_line() -> None:
    """Common practice: --to below --from and a missing file give one line and exit 2."""
    r = CliRunner().invoke(policy_command, ["nofile.toml", "--from", "5", "--to", "4"])
    assert r.exit_code == 2 and len(r.output.strip().splitlines()) == 1
    r = CliRunner().invoke(policy_command, ["nofile.toml", "--from", "3", "--to", "4"])
    assert r.exit_code == 2 and len(r.output.strip().splitlines()) == 1


def test_brute_force_reference_sanity() -> None:
    """arXiv:1809.04881 against the reference itself: player 2 wins for 3 <= n <= 14."""
    assert all(not minimax.mover_wins(minimax.start_state(n)) for n in range(3, 15))


def test_memory_refusal_and_huge_n(tmp_path) -> None:
    """Common practice: a run over the memory limit is refused up front (exit 3) and an n
    beyond 2^62 is bad input (exit 2), each with one line."""
    f = tmp_path / "p.toml"
    f.write_text(SPLIT_HIGH)
    r = CliRunner().invoke(policy_command, [str(f), "--from", "150", "--to", "150",
                                            "--max-memory", "2M"])
    assert r.exit_code == 3 and len(r.output.strip().splitlines()) == 1
    r = CliRunner().invoke(policy_command, [str(f), "--from", "3", "--to", str(10**20)])
    assert r.exit_code == 2 and len(r.output.strip().splitlines()) == 1


def test_unwinnable_n_is_marked() -> None:
    """Brute force: player 2 loses n = 2 under optimal play (player 1 combines to 0,1), so
    any policy of player 2 fails there and the row says the game is lost."""
    assert minimax.mover_wins(minimax.start_state(2))
    row = policy_verdicts(parse_policy(SPLIT_HIGH), 2, 2, "standard", 2).rows[0]
    assert not row.wins and not row.winnable
    r = CliRunner().invoke(policy_command, ["/dev/null", "--from", "2", "--to", "2"])
    assert r.exit_code == 2  # /dev/null is not a regular file: refused in one line


def test_file_kernel_matches_hook_choices(tmp_path) -> None:
    """Brute force (the choice rule of COMBINE_HIGH_GUARDED written in plain Python as a
    hook): the compiled file policy and the hook give the same verdicts, refutation
    lengths and counts for every n <= 25, beyond the memoised reference's reach."""
    path = tmp_path / "guarded.py"
    path.write_text(
        "def choose(s, o):\n"
        "    def k(nm):\n"
        "        return int(nm.split('@')[1])\n"
        "    rules = [('combine', True, lambda k: s[k - 1] >= 2 and s[0] % 2 == 0),\n"
        "             ('split', False, lambda k: k >= 3),\n"
        "             ('combine', False, lambda k: sum(s) > 3)]\n"
        "    for kind, high, test in rules:\n"
        "        c = [(k(nm), i) for i, (nm, _) in enumerate(o)\n"
        "             if nm.startswith(kind) and test(k(nm))]\n"
        "        if c:\n"
        "            best = max(x for x, _ in c) if high else min(x for x, _ in c)\n"
        "            return min(i for x, i in c if x == best)\n"
        "    return 0\n")
    a = policy_verdicts(parse_policy(COMBINE_HIGH_GUARDED), 3, 25, "standard", 2)
    b = policy_verdicts(str(path), 3, 25, "standard", 2)
    key = [(r.n, r.wins, len(r.refutation), r.positions, r.n_positions, r.winning_choices)
           for r in a.rows]
    assert key == [(r.n, r.wins, len(r.refutation), r.positions, r.n_positions,
                    r.winning_choices) for r in b.rows]
    assert [(s.move, s.after) for s in a.first_failure.refutation] == \
        [(s.move, s.after) for s in b.first_failure.refutation]


MEASURE = """
import json, sys
import psutil
from zeckenum.optimal.policy import policy_row
from zeckenum.optimal.policyfile import parse_policy
from zeckenum.rules.model import STANDARD
pol = parse_policy(sys.argv[2])
policy_row(8, STANDARD, 2, policy=pol)  # load the kernels outside the measurement
open("/proc/self/clear_refs", "w").write("5")  # restart the high-water mark here
base = psutil.Process().memory_info().rss
row = policy_row(int(sys.argv[1]), STANDARD, 2, policy=pol)
peak = [int(x.split()[1]) * 1024 for x in open("/proc/self/status") if x.startswith("VmHWM")][0]
print(json.dumps({"forecast": row.forecast_peak_bytes, "measured": peak - base}))
"""


def test_forecast_is_not_below_the_measured_peak() -> None:
    """Common practice (as tests/core/test_memory_forecast.py): the forecast of one n is at
    least the measured growth of the peak resident set (5% + 4 MiB of allocator noise) and
    at most 4 times it plus 64 MiB."""
    import os
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", MEASURE, "150", SPLIT_HIGH],
                         capture_output=True, text=True, timeout=600, env=dict(os.environ),
                         check=True)
    d = json.loads(out.stdout.strip().splitlines()[-1])
    forecast, measured = int(d["forecast"]), int(d["measured"])
    assert measured > 16 * 2**20, "the run is too small to measure"
    assert forecast >= 0.95 * measured - 4 * 2**20, (forecast, measured)
    assert forecast <= 4 * measured + 64 * 2**20, (forecast, measured)
