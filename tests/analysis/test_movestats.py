"""Move statistics and linear invariants of the move counts.

Outside references:
* a labelled brute force written here (plain Python, no engine code) that enumerates every
  game with its move-count vector (as a multiset, memoised per state);
* tests/support/fraction_bruteforce.py (random play with fractions.Fraction);
* sympy for the row space of the effect matrix and for the invariants found in the games;
* the number of combining moves is n - Z(n): combines remove one token, splits keep the
  count, and the game ends at the Zeckendorf decomposition ("The Zeckendorf Game" (2018),
  arXiv:1809.04881).
"""

from __future__ import annotations

import json
import sys
from collections import Counter
from fractions import Fraction
from functools import cache
from pathlib import Path

import pytest
import sympy
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))

from bruteforce import Z, census, fibonacci_upto  # noqa: E402
from fraction_bruteforce import legal_moves, length_law  # noqa: E402
from zeckenum.analysis.movestats import (  # noqa: E402
    check_on_expected,
    check_on_totals,
    effect_matrix,
    expected_counts,
    linear_invariants,
    move_count_distribution,
    move_totals,
)
from zeckenum.cli.view import movestats_command  # noqa: E402
from zeckenum.rules.model import STANDARD  # noqa: E402

# ------------------------------------------------------------- labelled brute force


def labelled_moves(state: tuple[int, ...]) -> list[tuple[str, tuple[int, ...]]]:
    """(name, next state) of every legal move; names "kind@k" with k the 1-based bin."""
    a = list(state)
    nb = len(a)
    out = []

    def put(name: str, ch: dict[int, int]) -> None:
        b = a.copy()
        for i, d in ch.items():
            b[i] += d
        out.append((name, tuple(b)))

    if nb >= 2 and a[0] >= 2:
        put("combine-ones@1", {0: -2, 1: 1})
    for i in range(1, nb - 1):
        if a[i - 1] and a[i]:
            put(f"combine@{i + 1}", {i - 1: -1, i: -1, i + 1: 1})
    if nb >= 3 and a[1] >= 2:
        put("split-twos@2", {1: -2, 0: 1, 2: 1})
    for i in range(2, nb - 1):
        if a[i] >= 2:
            put(f"split@{i + 1}", {i: -2, i - 2: 1, i + 1: 1})
    return out


@cache
def games_from(state: tuple[int, ...]) -> tuple[tuple[tuple[tuple[str, int], ...], int], ...]:
    """Multiset of the move-count vectors of all games from `state`: (sorted items, games)."""
    nxt = labelled_moves(state)
    if not nxt:
        return (((), 1),)
    acc: Counter = Counter()
    for name, t in nxt:
        for items, mult in games_from(t):
            c = Counter(dict(items))
            c[name] += 1
            acc[tuple(sorted(c.items()))] += mult
    return tuple(acc.items())


def all_game_vectors(n: int, names: tuple[str, ...]) -> list[tuple[list[int], int]]:
    start = (n,) + (0,) * (len(fibonacci_upto(n)) - 1)
    out = []
    for items, mult in games_from(start):
        d = dict(items)
        assert set(d) <= set(names)
        out.append(([d.get(m, 0) for m in names], mult))
    return out


# --------------------------------------------------------------------------- tests


@pytest.mark.parametrize("n", range(1, 15))
def test_invariants_hold_on_every_game(n: int) -> None:
    inv = linear_invariants(n)
    vectors = all_game_vectors(n, inv.move_names)
    assert sum(m for _, m in vectors) == census(n)["games"]  # every game is covered
    if n >= 2:  # n = 1 has no move at all
        assert inv.named and inv.named[0].value == n - Z(n)  # arXiv:1809.04881
    for c, _ in vectors:
        for x in (*inv.named, *inv.basis):
            assert x.evaluate(c) == x.value, (n, c, x)
        # the number of combining moves is n - Z(n), counted independently
        assert sum(v for name, v in zip(inv.move_names, c, strict=True)
                   if name.startswith("combine")) == n - Z(n)


@pytest.mark.parametrize("n", [5, 9, 14])
def test_invariants_are_the_row_space_and_complete(n: int) -> None:
    spec = STANDARD.instantiate(n)
    inv = linear_invariants(n)
    names = inv.move_names
    basis = sympy.Matrix([[sympy.Rational(x.numerator, x.denominator) for x in b.coeffs]
                          for b in inv.basis])
    E = sympy.Matrix(effect_matrix(spec))
    # sympy: same row space as the effect matrix (the values make it rank nbins - 1)
    assert basis.rank() == E.rank() == spec.nbins - 1
    assert sympy.Matrix.vstack(basis, E).rank() == basis.rank()
    # every linear form constant on all the brute-force games is a derived invariant plus
    # forms on moves that no game plays at this n
    vectors = [c for c, _ in all_game_vectors(n, names)]
    diffs = sympy.Matrix([[a - b for a, b in zip(c, vectors[0], strict=True)]
                          for c in vectors[1:]] or [[0] * len(names)])
    constant_forms = diffs.nullspace()
    unused = [m for m in range(len(names)) if all(c[m] == 0 for c in vectors)]
    span = sympy.Matrix.vstack(basis, *[sympy.Matrix([[int(j == m) for j in range(len(names))]])
                                        for m in unused])
    for y in constant_forms:
        assert sympy.Matrix.vstack(span, y.T).rank() == span.rank(), (n, list(y))


@pytest.mark.parametrize("n", range(1, 15))
def test_move_totals_against_brute_force(n: int) -> None:
    tot = move_totals(n)
    ref = Counter()
    for c, mult in all_game_vectors(n, tot.move_names):
        for m, x in enumerate(c):
            ref[m] += x * mult
    assert list(tot.totals) == [ref[m] for m in range(len(tot.move_names))]
    assert tot.games == census(n)["games"]


def test_invariants_on_exact_totals_quick() -> None:
    for n in range(1, 41):
        assert check_on_totals(linear_invariants(n), move_totals(n)) == [], n


@pytest.mark.slow
def test_invariants_on_exact_totals_up_to_80() -> None:
    for n in range(41, 81):
        tot = move_totals(n)
        inv = linear_invariants(n)
        assert check_on_totals(inv, tot) == [], n
        # independent of the forms: total combining moves = games * (n - Z(n))
        combines = sum(t for m, t in tot.as_dict().items() if m.startswith("combine"))
        assert combines == tot.games * (n - Z(n))


def expected_by_brute_force(n: int, model: str) -> dict[str, Fraction]:
    """Expected move counts by walking every game with its probability (fractions)."""
    out: Counter = Counter()

    def walk(state: tuple[int, ...], p: Fraction) -> None:
        moves = labelled_moves(state)
        weights = dict(legal_moves(state, model))  # reference weights by next state
        total = sum(weights[t] for _, t in moves)
        for name, t in moves:
            q = p * Fraction(weights[t], total)
            out[name] += q
            walk(t, q)

    walk((n,) + (0,) * (len(fibonacci_upto(n)) - 1), Fraction(1))
    return out


@pytest.mark.parametrize("model", ["moves", "pairs"])
@pytest.mark.parametrize("n", [4, 8, 11])
def test_expected_counts_against_brute_force(n: int, model: str) -> None:
    got = expected_counts(n, model=model)
    ref = expected_by_brute_force(n, model)
    assert {m: v for m, v in got.items() if v} == {m: v for m, v in ref.items() if v}
    assert check_on_expected(linear_invariants(n), got) == []


def test_expected_counts_invariants_larger() -> None:
    for n in (25, 40):
        assert check_on_expected(linear_invariants(n), expected_counts(n)) == []


@pytest.mark.parametrize("n", [7, 12])
def test_move_count_distribution(n: int) -> None:
    names = linear_invariants(n).move_names
    vectors = all_game_vectors(n, names)
    for move in ("split-twos@2", "split"):
        idx = [m for m, x in enumerate(names) if x == move or x.split("@")[0] == move]
        ref: Counter = Counter()
        for c, mult in vectors:
            ref[sum(c[m] for m in idx)] += mult
        assert move_count_distribution(n, move) == {k: ref[k] for k in sorted(ref) if ref[k]}
    law = move_count_distribution(n, "combine*", weighting="moves")
    # every game has n - Z(n) combines: a point mass (arXiv:1809.04881)
    assert law == {n - Z(n): Fraction(1)}
    # the probabilities of a move count sum to one, like the length law's
    assert sum(move_count_distribution(n, "split", weighting="moves").values()) == 1
    assert sum(length_law(n, "moves").values()) == 1


def test_movestats_cli() -> None:
    runner = CliRunner()
    res = runner.invoke(movestats_command, ["13", "--json", "--move", "split"])
    assert res.exit_code == 0, res.output
    d = json.loads(res.output)
    assert d["invariants_verified"] is True
    assert int(d["games"]) == census(13)["games"]
    assert any(x["name"].startswith("number of combining moves") and x["value"] == str(13 - Z(13))
               for x in d["invariants"])
    res = runner.invoke(movestats_command, ["13"])
    assert res.exit_code == 0 and "all hold" in res.output
    res = runner.invoke(movestats_command, ["13", "--move", "jump@2"])
    assert res.exit_code == 2 and res.output.startswith("zeckenum: error:")
