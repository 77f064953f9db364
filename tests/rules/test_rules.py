"""Rule sets: rule files, validation, the shipped variants, and the engine on them.

References: `rules_bruteforce` (independent plain-Python enumerators, no zeckenum code),
OEIS A000073 (Tribonacci numbers, from memory), the uniqueness of representations by
distinct Tribonacci numbers without three consecutive terms ("Fibonacci representations of
higher order", Fibonacci Quarterly, 1972, from memory), scipy/fractions as named below.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import subprocess
import textwrap
from fractions import Fraction
from functools import cache
from pathlib import Path

import numpy as np
import pytest
import rules_bruteforce as bf
import zeckenum
from click.testing import CliRunner
from zeckenum.analysis.describe import terminal_positions
from zeckenum.cli.rules import rules_group
from zeckenum.errors import InputError
from zeckenum.optimal.solve import solve
from zeckenum.randomplay.exact import random_play
from zeckenum.rules.catalogue import BUILTIN, RULESETS_DIR, get_rules
from zeckenum.rules.model import STANDARD
from zeckenum.rules.rulefile import parse_rules, read_rule_file

SHIPPED = sorted(BUILTIN)
SMALL_N = range(1, 11)


def write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / f"{name}.toml"
    path.write_text(textwrap.dedent(text))
    return path


FIB_BINS = """
    [bins]
    initial = [1, 2]
    recurrence = [1, 1]
"""


# ----------------------------------------------------------------------- the shipped files

def test_shipped_names() -> None:
    # common practice: the issue asks for the standard game, its reversal and two more
    assert {"standard", "reversed", "tribonacci", "twos"} <= set(BUILTIN)
    assert len(list(RULESETS_DIR.glob("*.toml"))) == len(BUILTIN)


def test_standard_file_is_the_standard_game() -> None:
    # common practice: the file and the Python definition must give identical arrays
    rs = read_rule_file(RULESETS_DIR / "standard.toml")
    assert rs.content_hash() == STANDARD.content_hash()
    for n in (1, 2, 7, 30):
        a, b = rs.instantiate(n), STANDARD.instantiate(n)
        for field in ("values", "weights", "mv_bins", "mv_delta", "mv_drop", "start"):
            assert np.array_equal(getattr(a, field), getattr(b, field)), field
        assert a.move_names == b.move_names


def test_content_hash_ignores_names_but_not_moves() -> None:
    # common practice: the hash identifies the game, not its label
    text = (RULESETS_DIR / "standard.toml").read_text()
    renamed = parse_rules(text.replace('name = "standard"', 'name = "other"'))
    assert renamed.content_hash() == STANDARD.content_hash()
    restricted = parse_rules(text.replace('from = 3', 'from = 4'))
    assert restricted.content_hash() != STANDARD.content_hash()


def test_get_rules_accepts_name_ruleset_and_file(tmp_path: Path) -> None:
    # common practice
    path = RULESETS_DIR / "tribonacci.toml"
    assert get_rules("tribonacci") is BUILTIN["tribonacci"]
    assert get_rules(STANDARD) is STANDARD
    assert get_rules(path).content_hash() == BUILTIN["tribonacci"].content_hash()
    assert get_rules(str(path)).content_hash() == BUILTIN["tribonacci"].content_hash()
    with pytest.raises(InputError, match="unknown rule set"):
        get_rules("nonesuch")
    with pytest.raises(InputError, match="cannot read"):
        get_rules(str(tmp_path / "missing.toml"))


# ------------------------------------------------------------- engine against brute force

@pytest.mark.parametrize("name", SHIPPED)
def test_spectrum_matches_bruteforce(name: str) -> None:
    # source: rules_bruteforce (independent memoised enumeration)
    for n in SMALL_N:
        game = bf.Game(bf.DESCRIPTIONS[name], n)
        res = zeckenum.count(n, name, threads=1)
        assert res.length_counts == dict(sorted(game.spectrum().items())), (name, n)
        assert res.rules == name
        assert res.rules_hash == BUILTIN[name].content_hash()


@pytest.mark.parametrize("name", SHIPPED)
def test_terminal_positions_match_bruteforce(name: str) -> None:
    # source: rules_bruteforce
    for n in SMALL_N:
        game = bf.Game(bf.DESCRIPTIONS[name], n)
        assert terminal_positions(BUILTIN[name], n) == sorted(game.terminals()), (name, n)


def pairs_length_law(game: bf.Game) -> dict[int, Fraction]:
    """{length: probability} when a move is drawn with probability proportional to the number
    of token subsets it can take: prod over its taken bins of binomial(count, taken).

    Plain Python over the brute force's own moves (`rules_bruteforce.Game.moves`)."""

    @cache
    def rest(state: tuple[int, ...]) -> tuple[tuple[int, Fraction], ...]:
        options = []
        for take, give in game.moves:
            if all(state[b - 1] >= c for b, c in take.items()):
                nxt = list(state)
                for b, c in take.items():
                    nxt[b - 1] -= c
                for b, c in give.items():
                    nxt[b - 1] += c
                options.append((tuple(nxt), math.prod(math.comb(state[b - 1], c)
                                                      for b, c in take.items())))
        if not options:
            return ((0, Fraction(1)),)
        total = sum(w for _, w in options)
        acc: dict[int, Fraction] = {}
        for nxt, w in options:
            for length, p in rest(nxt):
                acc[length + 1] = acc.get(length + 1, Fraction(0)) + p * Fraction(w, total)
        return tuple(sorted(acc.items()))

    return dict(rest(game.start))


def win_law(law: dict[int, Fraction], players: int) -> dict[int, Fraction]:
    """{player: probability}: player i makes the last move when (length - 1) % P == i - 1."""
    out = {i: Fraction(0) for i in range(1, players + 1)}
    for length, p in law.items():
        out[(length - 1) % players + 1] += p
    return out


@pytest.mark.parametrize("model", ["moves", "pairs"])
@pytest.mark.parametrize("name", SHIPPED)
def test_random_play_matches_bruteforce(name: str, model: str) -> None:
    # source: rules_bruteforce with fractions.Fraction ("moves": uniform choice among legal
    # moves, `Game.length_distribution`; "pairs": `pairs_length_law` above).  n up to 10
    # covers moves dropping the level by several layers ('reversed' from n = 5, 'tribonacci'
    # from n = 10).
    from zeckenum.randomplay.exact import random_play

    for n in range(1, 11):
        game = bf.Game(bf.DESCRIPTIONS[name], n)
        ref = game.length_distribution() if model == "moves" else pairs_length_law(game)
        res = random_play(n, name, players=3, model=model)
        assert res.length_probability == ref, (name, n)
        assert res.win_probability == win_law(ref, 3), (name, n)
        assert res.to_dict()["rules_hash"] == BUILTIN[name].content_hash()
        fast = random_play(n, name, players=3, model=model, winners_only=True)
        assert fast.win_probability == win_law(ref, 3), (name, n)


@pytest.mark.parametrize("model", ["moves", "pairs"])
@pytest.mark.parametrize("name", SHIPPED)
def test_float_play_within_its_bound_of_bruteforce(name: str, model: str) -> None:
    # source: rules_bruteforce with fractions.Fraction, against the float sweep's own
    # rigorous error bounds
    from zeckenum.randomplay.floating import float_play

    for n in (5, 10, 12):
        game = bf.Game(bf.DESCRIPTIONS[name], n)
        ref = game.length_distribution() if model == "moves" else pairs_length_law(game)
        res = float_play(n, name, players=2, model=model)
        assert set(res.length_probability) == set(ref), (name, n)
        for length, p in ref.items():
            err = abs(Fraction(res.length_probability[length]) - p)
            assert err <= Fraction(res.length_error[length]), (name, n, length)
        for i, p in win_law(ref, 2).items():
            assert abs(Fraction(res.win_probability[i]) - p) <= Fraction(res.win_error[i])


@pytest.mark.parametrize("name", SHIPPED)
def test_outcomes_match_bruteforce(name: str) -> None:
    # source: rules_bruteforce (normal-play minimax)
    from zeckenum.optimal.solve import solve

    for n in range(1, 11):
        game = bf.Game(bf.DESCRIPTIONS[name], n)
        res = solve(n, name)
        assert (res.winner == 1) == game.first_player_wins(), (name, n)


# ------------------------------------------------------------------------- reversed game

def test_reversed_equals_standard_up_to_40() -> None:
    # common practice: the reversed game's move graph is the standard one reversed, its only
    # end is n tokens in bin 1, so its games are the standard games read backwards
    for n in range(1, 41):
        a = zeckenum.count(n, "standard", threads=1)
        b = zeckenum.count(n, "reversed", threads=1)
        assert b.games == a.games and b.length_counts == a.length_counts, n
        assert b.states == a.states, n


def test_reversed_needs_and_gets_a_strict_potential() -> None:
    # common practice: checked here in exact integers, independently of the solver
    rs = BUILTIN["reversed"]
    for n in (10, 40, 70, 100):
        spec = rs.instantiate(n)
        w = [int(x) for x in spec.weights]
        assert min(w) >= 0
        for m in range(spec.mv_bins.shape[0]):
            change = sum(int(d) * w[int(b)] for b, d in zip(spec.mv_bins[m], spec.mv_delta[m],
                                                            strict=True))
            assert change <= -1, spec.move_names[m]
        # the ranking table stays moderate: start level at most 20 n
        assert spec.start_level <= 20 * n


def test_reversed_potential_is_optimal_against_linprog() -> None:
    # source: scipy.optimize.linprog (the LP relaxation bounds the integer optimum below)
    from scipy.optimize import linprog

    spec = BUILTIN["reversed"].instantiate(40)
    a = np.zeros((spec.mv_bins.shape[0], spec.nbins))
    for m in range(a.shape[0]):
        for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            a[m, b] += d
    lp = linprog(spec.start.astype(float), A_ub=a, b_ub=-np.ones(a.shape[0]),
                 bounds=(0, None))
    assert lp.status == 0
    assert np.ceil(lp.fun - 1e-9) <= spec.start_level <= 2 * lp.fun + 1


@pytest.mark.parametrize("n", range(1, 11))  # n = 2 has sparse levels 2 and 0, max drop 2
def test_forced_potential_layering_counts_the_standard_game(n: int) -> None:
    # source: rules_bruteforce; the same moves layered by an LP potential (moves dropping
    # several levels, inside-layer moves impossible) must count the same games
    text = (RULESETS_DIR / "standard.toml").read_text()
    rs = parse_rules(text.replace('layering = "tokens"', 'layering = "potential"'))
    assert rs.instantiate(max(n, 3)).mv_drop.min() >= 1
    game = bf.Game(bf.STANDARD, n)
    assert zeckenum.count(n, rs, threads=1).length_counts == dict(game.spectrum()), n


# ------------------------------------------------------------------------ tribonacci game

def tribonacci_oeis(count: int) -> list[int]:
    """A000073: 0, 0, 1, 1, 2, 4, 7, 13, ... (a(n) = a(n-1) + a(n-2) + a(n-3))."""
    a = [0, 0, 1]
    while len(a) < count:
        a.append(a[-1] + a[-2] + a[-3])
    return a


def test_tribonacci_bins_are_tribonacci_numbers() -> None:
    # source: OEIS A000073, from memory: 0, 0, 1, 1, 2, 4, 7, 13, 24, 44, 81, 149, 274, 504
    seq = tribonacci_oeis(14)
    assert seq == [0, 0, 1, 1, 2, 4, 7, 13, 24, 44, 81, 149, 274, 504]
    bins = BUILTIN["tribonacci"].bin_values(504)
    assert bins == seq[3:]


def greedy(n: int, bins: list[int]) -> tuple[int, ...]:
    out = [0] * len(bins)
    for i in range(len(bins) - 1, -1, -1):
        out[i], n = divmod(n, bins[i])
    return tuple(out)


def test_tribonacci_ends_at_greedy_decomposition_up_to_60() -> None:
    # source: OEIS A000073 (from memory) for the bins; "Fibonacci representations of higher
    # order" (Fibonacci Quarterly, 1972, from memory): the greedy decomposition is the unique
    # sum of distinct Tribonacci numbers with no three consecutive ones
    seq = tribonacci_oeis(20)[3:]
    for n in range(1, 61):
        bins = [x for x in seq if x <= n]
        g = greedy(n, bins)
        assert max(g) <= 1 and all(g[i : i + 3] != (1, 1, 1) for i in range(len(g)))
        assert terminal_positions(BUILTIN["tribonacci"], n) == [g], n


# ----------------------------------------------------------------------- bad rule files

def run_check(path: Path, *extra: str):
    return CliRunner().invoke(rules_group, ["check", str(path), *extra])


def assert_one_line_error(result, pattern: str) -> None:
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit)  # not a traceback
    errors = [ln for ln in result.output.splitlines() if ln.startswith("zeckenum: error:")]
    assert len(errors) == 1, result.output
    assert pattern in errors[0], errors[0]


def test_value_changing_move(tmp_path: Path) -> None:
    # common practice: 2 + 3 != 8, so combine at k = 2 (bins 1, 2 -> bin 4) changes the value
    path = write(tmp_path, "v", 'name = "v"\n' + FIB_BINS + """
    [[move]]
    name = "skip"
    from = 2
    take = ["k-1", "k"]
    give = ["k+2"]
    """)
    res = run_check(path)
    assert_one_line_error(res, "move 'skip' at index 2 changes the value: it takes 3 and gives 5")
    with pytest.raises(InputError, match="'skip'"):
        zeckenum.count(5, str(path))


def test_value_change_found_past_the_first_index(tmp_path: Path) -> None:
    # common practice: 2 F(k) -> F(k+1) holds at k = 1 (1 + 1 = 2) only: 2 + 2 != 3
    path = write(tmp_path, "w", 'name = "w"\n' + FIB_BINS + """
    [[move]]
    name = "double"
    from = 1
    take = ["k", "k"]
    give = ["k+1"]
    """)
    assert_one_line_error(run_check(path), "move 'double' at index 2 changes the value")


def test_cyclic_moves(tmp_path: Path) -> None:
    # common practice: a move and its inverse give the cycle (n) -> (n-2, 1) -> (n)
    path = write(tmp_path, "c", 'name = "c"\n' + FIB_BINS + """
    [[move]]
    name = "up"
    at = 1
    take = ["k", "k"]
    give = ["k+1"]

    [[move]]
    name = "down"
    at = 1
    take = ["k+1"]
    give = ["k", "k"]
    """)
    res = run_check(path, "--n", "4")
    assert_one_line_error(res, "does not terminate at value 4: cycle ")
    # the printed cycle is a real one: closed, and each step is "up" or "down"
    text = res.output.split("cycle ", 1)[1].strip()
    states = [tuple(int(c) for c in part.strip("() ").split(",")) for part in text.split("->")]
    states = [s + (0,) * (2 - len(s)) for s in states]
    assert len(states) >= 3 and states[0] == states[-1]
    for a, b in zip(states, states[1:], strict=False):
        assert (b[0] - a[0], b[1] - a[1]) in ((-2, 1), (2, -1))
        assert min(b) >= 0 and b[0] + 2 * b[1] == 4
    with pytest.raises(InputError, match="cycle"):
        zeckenum.count(6, str(path))


def test_acyclic_without_potential(tmp_path: Path) -> None:
    # common practice: B1+B3 -> 2B2 -> B4 -> B1+B3 sums to zero (no linear potential), but
    # from n tokens in bin 1 nothing moves at all: one game, of no move
    path = write(tmp_path, "a", """
    name = "a"
    [bins]
    values = [1, 2, 3, 4]
    [[move]]
    name = "p"
    at = 2
    take = [1, 3]
    give = [2, 2]
    [[move]]
    name = "q"
    at = 2
    take = [2, 2]
    give = [4]
    [[move]]
    name = "r"
    at = 2
    take = [4]
    give = [1, 3]
    """)
    res = run_check(path, "--n", "4")
    assert res.exit_code == 0, res.output
    assert "of the 0 moves that fire at value 4" in res.output
    assert zeckenum.count(4, str(path), threads=1).length_counts == {0: 1}


# Bins 1..5; pairs merge (1+1 -> 2, 2+2 -> 4), and a swap 3+4 <-> 2+5 with its inverse.
# The swap pair alone sums to zero, so no linear potential exists for the whole move set.
SWAP_GAME = """
    name = "swap"
    [bins]
    values = [1, 2, 3, 4, 5]
    [[move]]
    name = "pair"
    at = 1
    take = [1, 1]
    give = [2]
    [[move]]
    name = "double"
    at = 2
    take = [2, 2]
    give = [4]
    [[move]]
    name = "swap-up"
    at = 3
    take = [3, 4]
    give = [2, 5]
    [[move]]
    name = "swap-down"
    at = 3
    take = [2, 5]
    give = [3, 4]
"""

SWAP_BF = {
    "bins": lambda limit: [v for v in (1, 2, 3, 4, 5) if v <= limit],
    "start": "ones",
    "moves": [
        (lambda k: ({1: 2}, {2: 1}), 1, 1),
        (lambda k: ({2: 2}, {4: 1}), 2, 2),
        (lambda k: ({3: 1, 4: 1}, {2: 1, 5: 1}), 3, 3),
        (lambda k: ({2: 1, 5: 1}, {3: 1, 4: 1}), 3, 3),
    ],
}


def test_moves_that_never_fire_are_left_out(tmp_path: Path) -> None:
    # source: rules_bruteforce with all four moves.  From n tokens in bin 1 no token ever
    # reaches bin 3 or 5, so the swaps never fire (common practice): the cycle search proves
    # every game ends, and the two merges alone have a strict potential.
    path = write(tmp_path, "swap", SWAP_GAME)
    rs = read_rule_file(path)
    for n in range(1, 13):
        spec = rs.instantiate(n)
        assert set(spec.move_names) <= {"pair@1", "double@2"}, n
        game = bf.Game(SWAP_BF, n)
        assert zeckenum.count(n, rs, threads=1).length_counts == dict(game.spectrum()), n
        law = random_play(n, rs).length_probability
        assert law == {k: v for k, v in game.length_distribution().items() if v}, n
        assert (solve(n, rs).winner == 1) == game.first_player_wins(), n
    res = run_check(path, "--n", "8")
    assert res.exit_code == 0, res.output
    assert "of the 2 moves that fire at value 8" in res.output


def test_same_moves_cycle_from_another_start(tmp_path: Path) -> None:
    # common practice: from one token in bin 3 and one in bin 4, swap-up then swap-down
    # come back to the start
    vector = 'name = "swap"\n    start = { vector = [0, 0, 1, 1] }'
    text = SWAP_GAME.replace('name = "swap"', vector)
    path = write(tmp_path, "swap2", text)
    assert_one_line_error(run_check(path, "--n", "1"),
                          "does not terminate at value 7: cycle 0,0,1,1 -> 0,1,0,0,1 -> "
                          "0,0,1,1")


def test_token_layering_refused_for_rising_moves(tmp_path: Path) -> None:
    # common practice: the reversed moves raise the token count
    text = (RULESETS_DIR / "reversed.toml").read_text()
    path = write(tmp_path, "t", text.replace('start = "greedy"', 'start = "greedy"\n'
                                             'layering = "tokens"'))
    assert_one_line_error(run_check(path), "raises the token count")


@pytest.mark.parametrize(
    ("body", "message"),
    [
        # unknown bins
        ('[bins]\nvalues = [1, 2, 3]\n[[move]]\nname = "m"\nfrom = 2\nto = 3\n'
         'take = ["k-1", "k"]\ngive = ["k+1"]\n', "uses bin 4, but only bins 1..3"),
        (FIB_BINS + '[[move]]\nname = "m"\nfrom = 2\ntake = ["k", "k"]\ngive = ["k-2", "k+1"]\n',
         "uses bin 0"),
        # malformed templates
        (FIB_BINS + '[[move]]\nname = "m"\nfrom = 2\ntake = ["k-1", "j"]\ngive = ["k+1"]\n',
         "bad bin 'j'"),
        (FIB_BINS + '[[move]]\nname = "m"\nfrom = 2\ntake = [1]\ngive = [2]\n',
         "only allowed in a one-off move"),
        (FIB_BINS + '[[move]]\nname = "m"\nat = 2\nfrom = 2\ntake = ["k"]\ngive = ["k"]\n',
         "exactly one of 'at'"),
        (FIB_BINS + '[[move]]\nname = "m"\nat = 2\ntake = ["k"]\ngive = ["k"]\n',
         "gives back exactly what it takes"),
        (FIB_BINS + '[[move]]\nname = "m"\nform = 2\ntake = ["k"]\ngive = ["k"]\n',
         "unknown key 'form'"),
        (FIB_BINS + '[[move]]\nname = "m"\nfrom = 2\ntake = "k"\ngive = ["k+1"]\n',
         "'take' must be a non-empty list"),
        (FIB_BINS + '[[move]]\nname = "m"\nfrom = 2\ntake = ["k-1", "k"\n',
         "not valid TOML"),
        # other file problems
        (FIB_BINS, "no moves"),
        ('[bins]\nvalues = [1, 3, 2]\n', "must increase strictly"),
        ('[bins]\ninitial = [1, 2]\nrecurrence = [0, 1]\n', "must increase strictly"),
        (FIB_BINS + 'start = "middle"\n', "unknown key 'start' in [bins]"),
    ],
)
def test_malformed_files(tmp_path: Path, body: str, message: str) -> None:
    # common practice: each problem gives its own one-line error, never a traceback
    path = tmp_path / "bad.toml"
    path.write_text('name = "bad"\n' + textwrap.dedent(body))
    assert_one_line_error(run_check(path), message)


def test_bad_start(tmp_path: Path) -> None:
    # common practice
    text = (RULESETS_DIR / "twos.toml").read_text()
    path = write(tmp_path, "s", text.replace("vector = [0, 1]", "vector = [0, -1]"))
    assert_one_line_error(run_check(path), "start vector must be a list of counts")


# --------------------------------------------------------------------------------- CLI

def test_cli_list() -> None:
    # common practice: one line per built-in rule set
    res = CliRunner().invoke(rules_group, ["list"])
    assert res.exit_code == 0
    lines = res.output.strip().splitlines()
    assert [ln.split()[0] for ln in lines] == SHIPPED


@pytest.mark.parametrize("name", SHIPPED)
def test_cli_check_shipped_files(name: str) -> None:
    # common practice: every shipped file passes its own check
    res = run_check(RULESETS_DIR / f"{name}.toml")
    assert res.exit_code == 0, res.output
    assert res.output.strip().endswith("ok")


def test_cli_show_tribonacci_end_position() -> None:
    # source: OEIS A000073 (from memory): 30 = 24 + 4 + 2 greedily
    res = CliRunner().invoke(rules_group, ["show", "tribonacci", "--n", "30"])
    assert res.exit_code == 0, res.output
    assert "end positions at n=30: 1" in res.output
    # bins 1, 2, 4, 7, 13, 24: one token each in bins 2, 3 and 6 (README "Positions")
    assert "0,1,1,0,0,1 (1*2 + 1*4 + 1*24 = 30)" in res.output
    assert "combine: B(k-2) + B(k-1) + B(k) -> B(k+1) for k >= 3" in res.output


def test_cli_show_file_and_potential() -> None:
    # common practice: the reversed game ends with all n tokens in bin 1
    res = CliRunner().invoke(rules_group, ["show", str(RULESETS_DIR / "reversed.toml"),
                                           "--n", "12"])
    assert res.exit_code == 0, res.output
    assert "strict potential" in res.output
    assert "  12 (12*1 = 12)" in res.output


def test_cli_show_unknown() -> None:
    # common practice
    res = CliRunner().invoke(rules_group, ["show", "nonesuch"])
    assert_one_line_error(res, "unknown rule set 'nonesuch'")


# ------------------------------------------------------------------------- vector start

def test_vector_start_scales_with_n() -> None:
    # common practice: n tokens worth 2 each end at the Zeckendorf decomposition of 2n
    fib = bf.fib_bins(200)
    for n in (1, 5, 13, 30):
        spec = BUILTIN["twos"].instantiate(n)
        assert spec.n == 2 * n and int(spec.start[1]) == n and int(spec.start.sum()) == n
        bins = [x for x in fib if x <= 2 * n]
        assert terminal_positions(BUILTIN["twos"], n) == [greedy(2 * n, bins)]


@pytest.mark.parametrize("name", sorted(BUILTIN))
def test_canonical_rule_text_round_trips(name: str) -> None:
    """The embedded rule-file text parses back to the same game (same content hash) and a
    one-character change to a move is caught by the recorded hash (common practice: a
    digest binds a text to its recorded identity)."""
    from zeckenum.rules.rulefile import format_rules, rules_from_text

    rs = BUILTIN[name]
    text = format_rules(rs)
    back = parse_rules(text)
    assert back.content_hash() == rs.content_hash()
    assert back.templates == rs.templates and back.start == rs.start
    assert rules_from_text(text, rs.content_hash()).content_hash() == rs.content_hash()
    # a valid game that differs only in its start position must not pass as this one
    other = '"greedy"' if rs.start != "greedy" else '"ones"'
    altered = "\n".join(f"start = {other}" if line.startswith("start =") else line
                         for line in text.splitlines())
    with pytest.raises(InputError, match="altered"):
        rules_from_text(altered, rs.content_hash())


# ------------------------------------------------- hostile rule files (issue 11, part A)

MAX_ERROR_LINE = 300
"""Longest error line we accept for any malformed file (common practice: one short line)."""


def assert_short_error(result, pattern: str | None = None) -> None:
    """Exit 2, exactly one error line, at most MAX_ERROR_LINE characters, no traceback."""
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit), result.exception
    errors = [ln for ln in result.output.splitlines() if ln.startswith("zeckenum: error:")]
    assert len(errors) == 1, result.output[:2000]
    assert len(errors[0]) <= MAX_ERROR_LINE, (len(errors[0]), errors[0][:400])
    if pattern is not None:
        assert pattern in errors[0], errors[0]


def shipped_text() -> str:
    return (RULESETS_DIR / "standard.toml").read_text()


def test_rule_file_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "bad.toml"
    path.write_bytes(shipped_text().encode() + b"\n# \xff\xfe\xc3\x28\n")
    assert_short_error(run_check(path), "UTF-8")


def test_rule_file_deep_nesting(tmp_path: Path) -> None:
    """tomllib recurses once per nesting level; 100k levels overflow the Python stack."""
    path = tmp_path / "deep.toml"
    path.write_text("x = " + "[" * 100_000 + "]" * 100_000 + "\n")
    assert_short_error(run_check(path), "nest")


@pytest.mark.parametrize("edit, pattern", [
    (("at = 1\ntake", "at = 100000\ntake"), "'at'"),
    (("from = 2", "from = 1e20"), "'from'"),
    (("from = 2", "from = 2\nto = 99999999999999999"), "'to'"),
    (('give = ["k+1"]', 'give = ["k+99999999999999999999"]'), "k+99999999999999999999"),
    (('give = ["k+1"]', 'give = ["k+' + "9" * 5000 + '"]'), "bin"),
    (("start = \"ones\"", "start = { vector = [1" + "0" * 40 + "] }"), "vector"),
    (("start = \"ones\"", "start = { vector = [1" + "0" * 5000 + "] }"), None),
    (("initial = [1, 2]", "initial = [1, 1" + "0" * 40 + "]"), "bins.initial"),
    (("recurrence = [1, 1]", "recurrence = [1, 1" + "0" * 40 + "]"), "bins.recurrence"),
])
def test_rule_file_numbers_out_of_range(tmp_path: Path, edit: tuple[str, str],
                                        pattern: str | None) -> None:
    """Every number in a rule file is bounded: one short line, never a hang or a traceback."""
    old, new = edit
    text = shipped_text()
    assert old in text
    path = tmp_path / "big.toml"
    path.write_text(text.replace(old, new, 1))
    assert_short_error(run_check(path), pattern)


def test_rule_file_at_large_index_short_message(tmp_path: Path) -> None:
    """A one-off move far past the bins used to print both Fibonacci numbers in full."""
    path = tmp_path / "far.toml"
    path.write_text(shipped_text().replace("at = 1\ntake", "at = 900\ntake", 1))
    assert_short_error(run_check(path))


def _run_script_check(path: Path) -> subprocess.CompletedProcess:
    exe = shutil.which("zeckenum")
    assert exe is not None
    return subprocess.run([exe, "rules", "check", str(path)], capture_output=True, text=True,
                          timeout=120, check=False)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_rule_file_fifo_does_not_block(tmp_path: Path) -> None:
    path = tmp_path / "pipe.toml"
    os.mkfifo(path)
    res = _run_script_check(path)  # a blocking open would hit the timeout
    assert res.returncode == 2, res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "not a regular file" in lines[0], res.stderr


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="needs /dev/zero")
def test_rule_file_symlink_to_dev_zero(tmp_path: Path) -> None:
    path = tmp_path / "zero.toml"
    path.symlink_to("/dev/zero")
    res = _run_script_check(path)
    assert res.returncode == 2, res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "not a regular file" in lines[0], res.stderr


def test_rule_file_too_large(tmp_path: Path) -> None:
    path = tmp_path / "huge.toml"
    path.write_text(shipped_text() + ("# padding\n" * 200_000))
    assert_short_error(run_check(path), "bytes")


def test_rules_option_of_count_reads_file_safely(tmp_path: Path) -> None:
    """`--rules FILE` of a computing command goes through the same reader."""
    from zeckenum.cli.group import main

    path = tmp_path / "bad.toml"
    path.write_bytes(b"name = \"x\xff\"\n")
    res = CliRunner().invoke(main, ["count", "5", "--rules", str(path)])
    assert_short_error(res, "UTF-8")


# ------------------------------ generated hostile rule files (hypothesis, issue 11, part E)
# Property (common practice for parsers of untrusted input): reading any text or bytes
# either gives a rule set or raises a ZeckenumError with one line of at most
# MAX_ERROR_LINE characters; never another exception, never a hang.  A rule set read
# successfully also survives the canonical text round trip (`format_rules`).

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402
from zeckenum.errors import ZeckenumError  # noqa: E402
from zeckenum.rules.rulefile import format_rules, rules_from_text  # noqa: E402

HYPO = settings(max_examples=150, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])

KEYS = ["name", "about", "start", "layering", "bins", "move", "values", "initial",
        "recurrence", "at", "from", "to", "take", "give", "vector"]

scalars = st.one_of(
    st.integers(min_value=-(10**30), max_value=10**30),
    st.integers(min_value=-3, max_value=40),
    st.floats(allow_nan=False, allow_infinity=False),
    st.booleans(),
    st.sampled_from(["k", "k+1", "k-1", "k-2", "k+99999999999", "ones", "greedy", "tokens",
                     "auto", "potential", "combine", ""]),
    st.text(max_size=12),
)
toml_values = st.recursive(
    scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=5),
        st.dictionaries(st.sampled_from(KEYS), inner, max_size=5),
    ),
    max_leaves=25,
)


def toml_value(v) -> str:
    """A minimal TOML writer for the generated values (inline arrays and tables)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(x)}" for k, x in v.items()) + "}"


toml_docs = st.dictionaries(st.sampled_from(KEYS), toml_values, max_size=7).map(
    lambda d: "\n".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in d.items()) + "\n"
)


def read_or_one_line(path: Path) -> None:
    try:
        rules = read_rule_file(path)
    except ZeckenumError as exc:
        msg = str(exc)
        assert "\n" not in msg and 0 < len(msg) <= MAX_ERROR_LINE, msg[:400]
        return
    again = rules_from_text(format_rules(rules), rules.content_hash())
    assert again.content_hash() == rules.content_hash()


@HYPO
@given(text=toml_docs)
def test_generated_toml_structures(tmp_path: Path, text: str) -> None:
    path = tmp_path / "gen.toml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    read_or_one_line(path)


@HYPO
@given(data=st.binary(max_size=2000))
def test_generated_random_bytes(tmp_path: Path, data: bytes) -> None:
    path = tmp_path / "bytes.toml"
    path.write_bytes(data)
    read_or_one_line(path)


mutation = st.tuples(
    st.sampled_from(["delete", "insert", "number", "duplicate", "swap"]),
    st.integers(min_value=0, max_value=10**6),
    st.integers(min_value=0, max_value=60),
    st.one_of(st.integers(min_value=-(10**25), max_value=10**25),
              st.sampled_from([0, 1, 2, 3, 1023, 1024, 1025, 2**62, 2**63, 10**40])),
    st.text(max_size=20),
)


def mutate(text: str, mutations: list[tuple]) -> str:
    """Apply edits to a shipped rule file: cut or insert text, replace a number, duplicate
    or swap lines."""
    for kind, pos, width, number, extra in mutations:
        if not text:
            break
        i = pos % len(text)
        if kind == "delete":
            text = text[:i] + text[i + width:]
        elif kind == "insert":
            text = text[:i] + extra + text[i:]
        elif kind == "number":
            spans = [m.span() for m in re.finditer(r"\d+", text)]
            if spans:
                a, b = spans[pos % len(spans)]
                text = text[:a] + str(number) + text[b:]
        else:
            lines = text.split("\n")
            j, k = pos % len(lines), (pos + width) % len(lines)
            if kind == "duplicate":
                lines.insert(j, lines[k])
            else:
                lines[j], lines[k] = lines[k], lines[j]
            text = "\n".join(lines)
    return text


@HYPO
@given(name=st.sampled_from(sorted(p.stem for p in RULESETS_DIR.glob("*.toml"))),
       mutations=st.lists(mutation, min_size=1, max_size=4))
def test_mutated_shipped_rule_files(tmp_path: Path, name: str, mutations: list[tuple]) -> None:
    text = mutate((RULESETS_DIR / f"{name}.toml").read_text(), mutations)
    path = tmp_path / "mut.toml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    read_or_one_line(path)


def test_cli_check_plurals() -> None:
    """Common practice (English plurals): at n = 2 the standard game has one move."""
    res = run_check(RULESETS_DIR / "standard.toml", "--n", "2")
    assert res.exit_code == 0, res.output
    assert "1 move," in res.output and "1 moves" not in res.output


wide_ints = st.one_of(st.integers(min_value=-3, max_value=12), st.integers(1, 4),
                      st.sampled_from([1023, 1024, 1025, 2**31, 2**62, 2**63, 10**19, 10**40]))
bin_exprs = st.one_of(wide_ints, st.builds(lambda s, v: f"k{s}{v}", st.sampled_from("+-"),
                                          wide_ints.filter(lambda v: v >= 0)),
                      st.just("k"))
move_tables = st.fixed_dictionaries(
    {"name": st.sampled_from(["a", "b", "c", "split"]),
     "take": st.lists(bin_exprs, min_size=1, max_size=4),
     "give": st.lists(bin_exprs, min_size=1, max_size=4)},
    optional={"at": wide_ints, "from": wide_ints, "to": wide_ints},
)
rule_docs = st.fixed_dictionaries(
    {"name": st.just("gen"),
     "bins": st.one_of(
         st.just({"initial": [1, 2], "recurrence": [1, 1]}),
         st.just({"values": [1, 2, 3, 5, 8, 13, 21]}),
         st.just({"initial": [1, 2, 4], "recurrence": [1, 1, 1]}),
         st.fixed_dictionaries({"values": st.lists(wide_ints, min_size=1, max_size=8)}),
         st.fixed_dictionaries({"initial": st.lists(wide_ints, min_size=1, max_size=4),
                                "recurrence": st.lists(wide_ints, min_size=1, max_size=4)})),
     "move": st.lists(move_tables, min_size=1, max_size=4, unique_by=lambda m: m["name"])},
    optional={"start": st.one_of(st.sampled_from(["ones", "greedy"]),
                                 st.fixed_dictionaries({"vector": st.lists(wide_ints,
                                                                           max_size=4)})),
              "layering": st.sampled_from(["auto", "tokens", "potential", "x"])},
)


def rule_doc_text(doc: dict) -> str:
    lines = [f"{k} = {toml_value(v)}" for k, v in doc.items() if k not in ("bins", "move")]
    lines.append("[bins]")
    lines += [f"{k} = {toml_value(v)}" for k, v in doc["bins"].items()]
    for mv in doc["move"]:
        lines.append("[[move]]")
        lines += [f"{json.dumps(k)} = {toml_value(v)}" for k, v in mv.items()]
    return "\n".join(lines) + "\n"


@HYPO
@given(doc=rule_docs)
def test_generated_rule_shaped_documents(tmp_path: Path, doc: dict) -> None:
    """Documents shaped like rule files, with numbers from every range: past the parser's
    syntax into the bounds and the value check."""
    path = tmp_path / "shaped.toml"
    path.write_text(rule_doc_text(doc))
    read_or_one_line(path)
