"""Random play: exact, float and Monte Carlo modes against references outside the engine.

References: tests/support/fraction_bruteforce.py (plain Python, fractions.Fraction, no engine code);
scipy.stats for moments and goodness-of-fit; a published limit for the winner.
"""

from __future__ import annotations

import json
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import stats

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))
from fraction_bruteforce import all_games, length_law, win_law  # noqa: E402
from zeckenum.cli.randomplay import random_command  # noqa: E402
from zeckenum.core.moments import gaussian_diagnostics  # noqa: E402
from zeckenum.errors import InputError  # noqa: E402
from zeckenum.randomplay.exact import random_play  # noqa: E402
from zeckenum.randomplay.floating import float_play  # noqa: E402
from zeckenum.randomplay.simulate import simulate_lengths  # noqa: E402

MODELS = ("moves", "pairs")


# Source: fractions.Fraction brute force (tests/support/fraction_bruteforce.py), every game walked.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n", [1, 2, 3, 4, 6, 9])
def test_exact_law_matches_walk_of_every_game(n: int, model: str) -> None:
    res = random_play(n, model=model)
    assert res.length_probability == all_games(n, model)


# Source: fractions.Fraction brute force (memoised over states), n <= 14, P = 2, 3, 4.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("players", [2, 3, 4])
@pytest.mark.parametrize("n", [5, 10, 13, 14])
def test_exact_law_and_winners_match_fraction_reference(n: int, model: str,
                                                        players: int) -> None:
    ref = length_law(n, model)
    res = random_play(n, model=model, players=players)
    assert res.length_probability == ref
    assert res.win_probability == win_law(ref, players)
    fast = random_play(n, model=model, players=players, winners_only=True)
    assert fast.win_probability == win_law(ref, players)


# Source: common practice (a probability law sums to exactly 1).
@pytest.mark.parametrize("model", MODELS)
def test_probabilities_sum_to_exactly_one(model: str) -> None:
    res = random_play(25, model=model, players=3)
    assert sum(res.length_probability.values()) == 1
    assert sum(res.win_probability.values()) == 1
    fast = random_play(25, model=model, players=4, winners_only=True)
    assert sum(fast.win_probability.values()) == 1


# Source: scipy.stats.rv_discrete moments of the same distribution.
@pytest.mark.parametrize("model", MODELS)
def test_moments_match_scipy(model: str) -> None:
    res = random_play(30, model=model)
    ks = np.array(sorted(res.length_probability))
    ps = np.array([float(res.length_probability[k]) for k in ks])
    law = stats.rv_discrete(values=(ks, ps / ps.sum()))
    mean, var, skew, kurt = law.stats(moments="mvsk")
    m = res.moments
    assert float(m["mean"]) == pytest.approx(float(mean), rel=1e-12)
    assert float(m["variance"]) == pytest.approx(float(var), rel=1e-10)
    assert m["skewness"] == pytest.approx(float(skew), rel=1e-8, abs=1e-10)
    assert float(m["excess_kurtosis"]) == pytest.approx(float(kurt), rel=1e-8, abs=1e-10)


# Source: scipy.stats.norm (the Kolmogorov distance is evaluated independently here on a
# fine grid; the sup over a grid is a lower bound that must come close to the reported one).
def test_kolmogorov_distance_against_grid() -> None:
    res = random_play(20)
    dist = {k: float(v) for k, v in res.length_probability.items()}
    g = gaussian_diagnostics(dist)
    ks = np.array(sorted(dist))
    ps = np.array([dist[k] for k in ks])
    xs = np.linspace(ks[0] - 3, ks[-1] + 3, 200001)
    cdf = np.array([ps[ks <= x].sum() for x in xs[::50]])
    phi = stats.norm.cdf((xs[::50] - g["mean"]) / np.sqrt(g["variance"]))
    grid_sup = np.abs(cdf - phi).max()
    assert grid_sup <= g["kolmogorov"] + 1e-12
    assert g["kolmogorov"] - grid_sup < 0.02
    assert 0 < g["total_variation"] < 1


# Source: the rigorous bound itself (floatplay docstring) checked against exact Fractions.
@pytest.mark.parametrize("n,model", [(14, "pairs"), (40, "moves"), (40, "pairs"),
                                     (70, "moves")])
def test_float_within_its_error_bound(n: int, model: str) -> None:
    f = float_play(n, model=model, players=3)
    r = random_play(n, model=model, players=3)
    assert set(f.length_probability) == set(r.length_probability)
    for L, p in r.length_probability.items():
        assert abs(Fraction(f.length_probability[L]) - p) <= Fraction(f.length_error[L])
    for i, p in r.win_probability.items():
        assert abs(Fraction(f.win_probability[i]) - p) <= Fraction(f.win_error[i])


@pytest.mark.slow
def test_float_within_its_error_bound_n100() -> None:
    f = float_play(100)
    r = random_play(100, winners_only=True)
    for i, p in r.win_probability.items():
        assert abs(Fraction(f.win_probability[i]) - p) <= Fraction(f.win_error[i])


def _chi_square_pvalue(n: int, games: int, seed: int, model: str = "moves",
                      rules: str = "standard") -> float:
    res = random_play(n, rules, model=model)
    lengths = simulate_lengths(n, games, seed, rules, model=model)
    ks = sorted(res.length_probability)
    exp = np.array([float(res.length_probability[k]) for k in ks]) * games
    obs = np.array([(lengths == k).sum() for k in ks], dtype=float)
    assert obs.sum() == games  # every simulated length has positive exact probability
    # pool the tails so every cell expects at least 5 games (common practice)
    cells_o, cells_e, acc_o, acc_e = [], [], 0.0, 0.0
    for o, e in zip(obs, exp, strict=True):
        acc_o += o
        acc_e += e
        if acc_e >= 5:
            cells_o.append(acc_o)
            cells_e.append(acc_e)
            acc_o = acc_e = 0.0
    cells_o[-1] += acc_o
    cells_e[-1] += acc_e
    e = np.array(cells_e)
    return float(stats.chisquare(cells_o, e * sum(cells_o) / e.sum()).pvalue)


# Source: scipy.stats.chisquare goodness of fit at level 0.001, fixed seeds (deterministic).
@pytest.mark.parametrize("model", MODELS)
def test_simulation_agrees_with_exact_n40(model: str) -> None:
    assert _chi_square_pvalue(40, 20000, seed=12345, model=model) > 1e-3


# Source: scipy.stats.chisquare as above, on the rule sets whose moves drop several levels.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("rules", ["reversed", "tribonacci"])
def test_simulation_agrees_with_exact_other_rules(rules: str, model: str) -> None:
    assert _chi_square_pvalue(20, 20000, seed=777, model=model, rules=rules) > 1e-3


@pytest.mark.slow
def test_simulation_agrees_with_exact_n80() -> None:
    assert _chi_square_pvalue(80, 20000, seed=2024) > 1e-3


# Source: common practice (Monte Carlo with a fixed seed is reproducible).
def test_simulation_is_reproducible() -> None:
    a = simulate_lengths(30, 500, 9)
    b = simulate_lengths(30, 500, 9)
    c = simulate_lengths(30, 500, 10)
    assert (a == b).all() and not (a == c).all()


# Source: published work on random Zeckendorf games: player 1's win probability under random
# play tends to 1/2 ("The Zeckendorf Game", arXiv:1809.04881, 2018, and its follow-ups on
# random play; cited from memory).
@pytest.mark.slow
def test_first_player_tends_to_half() -> None:
    p20 = random_play(20, winners_only=True).win_probability[1]
    p120 = random_play(120, winners_only=True).win_probability[1]
    assert abs(p120 - Fraction(1, 2)) < abs(p20 - Fraction(1, 2))


# Source: common practice (CLI contract of the issue).
def test_cli_json_and_errors() -> None:
    runner = CliRunner()
    out = runner.invoke(random_command, ["9", "--players", "3", "--json"])
    assert out.exit_code == 0
    d = json.loads(out.output)
    ref = length_law(9, "moves")
    assert {int(k): Fraction(v) for k, v in d["length_probability"].items()} == ref
    assert {int(k): Fraction(v) for k, v in d["win_probability"].items()} == win_law(ref, 3)
    assert Fraction(d["mean_length"]) == sum(k * p for k, p in ref.items())
    for key in ("rules", "n", "players", "variance"):
        assert key in d
    bad = runner.invoke(random_command, ["5", "--players", "1"])
    assert bad.exit_code == 2 and "Traceback" not in bad.output
    assert runner.invoke(random_command, ["0"]).exit_code == 2
    assert runner.invoke(random_command, ["--range", "10", "12"]).exit_code == 0
    assert runner.invoke(random_command, ["12", "--float"]).exit_code == 0
    assert runner.invoke(random_command, ["12", "--simulate", "100"]).exit_code == 0


def test_bad_model_is_input_error() -> None:
    with pytest.raises(InputError):
        random_play(5, model="tokens")


# Source: Python's exact integer arithmetic (a * b % p), on random and edge-case inputs, for
# the float-assisted products of the exact sweep (proofs in zeckenum.core.modular.mulmod,
# mulmod_by with its multiplier's quotient factor float(b) * fl(1 / p) made once).
def test_mulmod_and_reduce_match_python_integers() -> None:
    from zeckenum.core.modular import MUL_PRIME_CEILING, mul_primes, mulmod, mulmod_by, reduce62

    rng = np.random.default_rng(20240611)
    primes = mul_primes(3) + mul_primes(2, offset=200) + [2**49 + 9, 1_000_003, 8209, 3]
    for p in primes:
        assert p < MUL_PRIME_CEILING
        pinv = 1.0 / p
        edge = [0, 1, 2, p // 2, p // 2 + 1, p - 2, p - 1]
        rand = [int(x) % p for x in rng.integers(0, 2**62, size=400, dtype=np.int64)]
        vals = [x for x in edge if 0 <= x < p] + rand
        for a in vals[:60]:
            for b in vals[:60]:
                assert mulmod(a, b, p, pinv) == a * b % p, (a, b, p)
                assert mulmod_by(a, b, float(b) * pinv, p) == a * b % p, (a, b, p)
        for a, b in zip(rand, rand[::-1], strict=True):
            assert mulmod(a, b, p, pinv) == a * b % p, (a, b, p)
            assert mulmod_by(a, b, float(b) * pinv, p) == a * b % p, (a, b, p)
        if p > 2**13:
            xs = [0, 1, p - 1, p, p + 1, 2 * p - 1, 2**62 - 1, 2**62 - p, (2**62 // p) * p,
                  (2**62 // p) * p - 1] + [int(x) for x in rng.integers(0, 2**62, size=400)]
            for x in xs:
                assert reduce62(x, p, pinv) == x % p, (x, p)


# Source: common practice (the incremental ranks of the shared listing agree with a listing
# written here from scratch: every move applied to every state's count vector, its other end
# looked up in a dict of its layer's states, weights by math.comb).
def _reference_moves_in(space, level: int, states: np.ndarray):
    from math import comb

    spec = space.spec
    index: dict[int, dict[tuple, int]] = {}

    def rank_in(lv: int, counts: tuple) -> int:
        if lv not in index:
            index[lv] = {tuple(int(x) for x in r): k for k, r in enumerate(space.states(lv))}
        return index[lv][counts]

    def applies(counts: list[int], m: int, sign: int) -> bool:
        target = level - sign * int(spec.mv_drop[m])
        if not 0 <= target <= space.top:
            return False
        after = list(counts)
        for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            after[int(b)] += sign * int(d)
        return min(after) >= 0

    ptr, drop, src, move, dsum, weight = [0], [], [], [], [], []
    for row in states:
        counts = [int(x) for x in row]
        total = 0
        for m in range(spec.mv_bins.shape[0]):
            if applies(counts, m, +1):
                w = 1
                for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
                    if d < 0:
                        w *= comb(counts[int(b)], -int(d))
                total += w
            if applies(counts, m, -1):
                source = list(counts)
                for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
                    source[int(b)] -= int(d)
                w = 1
                for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
                    if d < 0:
                        w *= comb(source[int(b)], -int(d))
                weight.append(w)
                d = int(spec.mv_drop[m])
                drop.append(d)
                src.append(rank_in(level + d, tuple(source)))
                move.append(m)
        ptr.append(len(drop))
        dsum.append(total)
    return [np.array(x, dtype=np.int64) for x in (ptr, drop, src, move, dsum, weight)]


def test_incremental_listing_matches_statespace() -> None:
    from zeckenum.core.listing import moves_in
    from zeckenum.core.statespace import build_space
    from zeckenum.rules.catalogue import BUILTIN

    for name, rs in BUILTIN.items():
        for n in (1, 2, 7, 16, 29, 47):
            space = build_space(rs.instantiate(n))
            for level in space.levels:
                lm = moves_in(space, level, pairs=True)
                assert lm.size == space.layer_size(level)
                states = space.states(level)
                ptr, drop, src, move, d2, w = _reference_moves_in(space, level, states)
                assert np.array_equal(ptr, lm.ptr), (name, n, level)
                assert np.array_equal(drop, lm.drop), (name, n, level)
                assert np.array_equal(src, lm.other), (name, n, level)
                assert np.array_equal(move, lm.move), (name, n, level)
                assert np.array_equal(lm.dsum, d2), (name, n, level)
                assert np.array_equal(lm.w, w), (name, n, level)


# Source: fractions.Fraction brute force; the exact result does not depend on the prime
# blocks (thread count) or on which primes are used (disjoint prime sets).
@pytest.mark.parametrize("model", MODELS)
def test_exact_independent_of_threads_and_primes(model: str) -> None:
    ref = length_law(12, model)
    one = random_play(12, model=model, threads=1)
    two = random_play(12, model=model, threads=2, prime_offset=50)
    assert one.length_probability == ref and two.length_probability == ref
    assert not set(one.primes) & set(two.primes)
    w1 = random_play(12, model=model, threads=1, winners_only=True)
    w2 = random_play(12, model=model, threads=2, winners_only=True, prime_offset=50)
    assert w1.win_probability == w2.win_probability == win_law(ref, 2)


def _potential_layered_standard():
    """The standard game's moves layered by a strict potential instead of token counts:
    every move then drops the level by 1 or more (several levels for some), none stays in
    its layer -- the multi-layer gather of the sweeps on a game with a known law."""
    from zeckenum.rules.catalogue import RULESETS_DIR
    from zeckenum.rules.rulefile import parse_rules

    text = (RULESETS_DIR / "standard.toml").read_text()
    return parse_rules(text.replace('layering = "tokens"', 'layering = "potential"'))


# Source: fractions.Fraction brute force (memoised over states); the layering is only a
# sweep order, so the standard game layered by a potential must give the same exact law.
@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n", [2, 5, 9, 14])
def test_multi_level_drops_match_fraction_reference(n: int, model: str) -> None:
    from zeckenum.core.statespace import build_space
    from zeckenum.rules.model import STANDARD

    rs = _potential_layered_standard()
    space = build_space(rs.instantiate(n))
    assert space.max_drop >= 2
    assert rs.content_hash() != STANDARD.content_hash()
    ref = length_law(n, model)
    res = random_play(n, rs, players=3, model=model)
    assert res.length_probability == ref
    assert res.win_probability == win_law(ref, 3)
    assert res.rules_hash == rs.content_hash()
    fast = random_play(n, rs, players=3, model=model, winners_only=True)
    assert fast.win_probability == win_law(ref, 3)
    f = float_play(n, rs, players=3, model=model)
    for L, p in ref.items():
        assert abs(Fraction(f.length_probability[L]) - p) <= Fraction(f.length_error[L])


# Source: common practice (results name the rule set by its content hash, as counts do).
def test_result_carries_rules_hash() -> None:
    from zeckenum.rules.model import STANDARD

    d = random_play(6).to_dict()
    assert d["rules"] == "standard" and d["rules_hash"] == STANDARD.content_hash()


def test_exact_paths_refuse_runs_that_do_not_fit(monkeypatch: pytest.MonkeyPatch) -> None:
    """With (almost) no memory available both exact paths refuse before sweeping (common
    practice: the project's rule that a run which cannot fit is refused up front)."""
    import zeckenum.randomplay.exact as rp
    from zeckenum.errors import MemoryRefused

    monkeypatch.setattr(rp, "available_bytes", lambda: 10)
    with pytest.raises(MemoryRefused, match="estimated"):
        rp.random_play(20)
    with pytest.raises(MemoryRefused, match="estimated"):
        rp.random_play(20, winners_only=True)


def test_json_of_moments_with_thousands_of_digits() -> None:
    # source: fractions; the fourth central moment under "pairs" at n = 44 has more than
    # 4300 digits (the default limit of Python's int <-> str conversion), and the printed
    # moments must equal the ones recomputed from the printed law
    res = CliRunner().invoke(random_command, ["44", "--model", "pairs", "--json"])
    assert res.exit_code == 0, res.output
    d = json.loads(res.output)
    law = {int(k): Fraction(v) for k, v in d["length_probability"].items()}
    assert sum(law.values()) == 1
    mean = sum(k * p for k, p in law.items())
    assert Fraction(d["mean_length"]) == mean
    m4 = sum((k - mean) ** 4 * p for k, p in law.items())
    assert Fraction(d["central_moment_4"]) == m4
    assert len(d["central_moment_4"]) > 4300


# --------------------------------------------- readable output of exact play (issue 11, D)

DIGITS = 12
PRINTED = {  # label on the terminal -> key of the exact value in --json
    "mean length": "mean_length",
    "variance": "variance",
    "third central moment": "central_moment_3",
    "fourth central moment": "central_moment_4",
    "skewness squared": "skewness_squared",
    "excess kurtosis": "excess_kurtosis",
}


def _exp10(x: Fraction) -> int:
    """floor(log10(|x|)) by exact comparison (x != 0)."""
    x = abs(x)
    e = 0
    while Fraction(10) ** e > x:
        e -= 1
    while Fraction(10) ** (e + 1) <= x:
        e += 1
    return e


def _assert_rounded(printed: str, exact: Fraction, what: str) -> None:
    """Source: fractions (exact comparison).  `printed` has at most DIGITS significant
    digits and lies within half a unit of its last digit of `exact`."""
    mant = printed.lstrip("-").split("e")[0].replace(".", "").lstrip("0")
    assert len(mant) <= DIGITS, (what, printed)
    got = Fraction(printed)
    if exact == 0:
        assert got == 0, (what, printed)
        return
    half_unit = Fraction(1, 2) * Fraction(10) ** (_exp10(exact) - DIGITS + 1)
    assert abs(got - exact) <= half_unit, (what, printed, float(exact))


@pytest.fixture(scope="module")
def pairs40() -> tuple[str, dict]:
    runner = CliRunner()
    text = runner.invoke(random_command, ["40", "--model", "pairs"])
    assert text.exit_code == 0, text.output
    js = runner.invoke(random_command, ["40", "--model", "pairs", "--json"])
    assert js.exit_code == 0, js.output
    return text.output, json.loads(js.output)


def test_terminal_lines_are_short(pairs40: tuple[str, dict]) -> None:
    out, d = pairs40
    assert max(len(line) for line in out.splitlines()) <= 200
    assert len(out) < 10_000
    assert max(len(v) for v in d["length_probability"].values()) > 1000  # exact is huge


def test_printed_decimals_agree_with_exact_fractions(pairs40: tuple[str, dict]) -> None:
    out, d = pairs40
    lines = out.splitlines()
    values = {}
    for line in lines:
        key, sep, val = line.partition(" = ")
        if sep:
            values[key.strip()] = val.split()[0]
    for label, key in PRINTED.items():
        assert label in values, (label, out)
        _assert_rounded(values[label], Fraction(d[key]), label)
    for i in (1, 2):
        _assert_rounded(values[f"P(player {i} wins)"], Fraction(d["win_probability"][str(i)]),
                        f"player {i}")
    start = lines.index("length  probability")
    table = {int(a): b for a, b in (ln.split() for ln in lines[start + 1:] if ln.strip())}
    assert set(table) == {int(k) for k in d["length_probability"]}
    for length, printed in table.items():
        _assert_rounded(printed, Fraction(d["length_probability"][str(length)]), str(length))


def test_printed_skewness_is_the_root_of_the_exact_square(pairs40: tuple[str, dict]) -> None:
    """Source: the decimal module's square root at 60 digits of the exact skewness^2."""
    import decimal

    out, d = pairs40
    line = next(ln for ln in out.splitlines() if ln.startswith("skewness "))
    printed = line.split(" = ")[1].split()[0]
    sq = Fraction(d["skewness_squared"])
    with decimal.localcontext() as ctx:
        ctx.prec = 60
        root = (decimal.Decimal(sq.numerator) / decimal.Decimal(sq.denominator)).sqrt()
    exact = Fraction(root) * (1 if Fraction(d["central_moment_3"]) >= 0 else -1)
    got = Fraction(printed)
    assert abs(got - exact) <= Fraction(10) ** (_exp10(exact) - DIGITS + 1)


def test_exact_option_prints_the_fractions() -> None:
    """Source: tests/support/fraction_bruteforce.py (every game walked with fractions)."""
    res = CliRunner().invoke(random_command, ["9", "--exact"])
    assert res.exit_code == 0, res.output
    ref = length_law(9, "moves")
    lines = res.output.splitlines()
    start = lines.index("length  probability")
    got = {int(ln.split()[0]): Fraction(ln.split()[2]) for ln in lines[start + 1:] if ln}
    assert got == ref
    plain = CliRunner().invoke(random_command, ["9"])
    assert "/" not in plain.output.split("length  probability")[1]
    bad = CliRunner().invoke(random_command, ["9", "--exact", "--float"])
    assert bad.exit_code == 2


def test_tiny_probabilities_do_not_underflow() -> None:
    """Source: fractions.  A probability below 1e-308 (no float holds it) is still printed
    to 12 significant digits."""
    from zeckenum.core.text import decimal

    x = Fraction(2, 3) * Fraction(1, 10**400)
    _assert_rounded(decimal(x), x, "tiny")
    y = Fraction(10**500 + 1, 7)
    _assert_rounded(decimal(y), y, "huge")
    assert decimal(Fraction(999_999_999_999_6, 10**13)) == "1"  # rounding carries


def test_plural_forms(tmp_path) -> None:  # noqa: ANN001
    """Common practice: '1 game', '1 move', '1 position' in human output."""
    from zeckenum.cli.optimal import check_strategy_command, solve_command

    sim = CliRunner().invoke(random_command, ["5", "--simulate", "1"])
    assert sim.exit_code == 0 and "1 game," in sim.output and "1 games" not in sim.output
    strategy = str(tmp_path / "s.zst")
    solved = CliRunner().invoke(solve_command, ["2", "--strategy", strategy])
    assert solved.exit_code == 0, solved.output
    assert "1 position," in solved.output, solved.output
    checked = CliRunner().invoke(check_strategy_command, [strategy])
    assert checked.exit_code == 0, checked.output
    assert "1 move" in checked.output and "1 moves" not in checked.output
