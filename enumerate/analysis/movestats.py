"""Move statistics over all games and under random play, and the linear invariants.

A game's *move-count vector* c has one entry per move (a move type at a bin, in the order of
`GameSpec.move_names`): how many times the game plays it.  Three exact quantities:

move totals      T[m] = sum over all games of c[m] = sum over the moves e = (s -> t) of
                 type m of paths(start -> s) * paths(t -> end), Python ints.
expected counts  E_rand[c[m]] under a random model ("moves": uniform over the legal moves;
                 "pairs": uniform over token pairs, see `randomplay`) = sum over the moves e of
                 type m of P(the game visits s) * p(e | s), Fractions.
distribution     of one chosen c[m]: over all games (number of games with c[m] = j), or
                 under random play (probability that c[m] = j).

Linear invariants.  Let E be the effect matrix (bins x moves: E[k, m] = change of bin k by
move m).  Every game satisfies E c = end - start.  If y = E^T x for some vector x, then
y . c = x . (end - start), the same for every game ending at `end`; these forms y (with x
orthogonal to the differences of the end positions when a game has several) are the
invariants derived from the effect vectors.  `linear_invariants` returns a basis in reduced
row-echelon form (exact rationals), each with its constant; the number of combining moves
is one of them for the standard game (combines remove one token, splits keep the count):
it always equals n - Z(n), Z(n) the number of terms of the Zeckendorf decomposition.

Everything walks the explicit move graph (`explicit_graph`): global ids in sweep order
(levels downward, ranks ascending inside a layer), which is topological.  It is meant for
n up to a few hundred thousand states (Python integers per state).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from math import comb

import numpy as np
from zeckenum.core.checks import check_model, check_n
from zeckenum.core.listing import moves_out
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.statespace import build_space, refuse_space, states_upper_bound
from zeckenum.core.sweep import length_bound
from zeckenum.errors import InputError
from zeckenum.randomplay.skeleton import max_weight_bound
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import GameSpec, RuleSet

GRAPH_MAX_STATES = 3_000_000

PY_INT = 32
"""Bytes of a small Python int object (28) rounded up; a list slot adds 8."""
PY_FRACTION = 56
"""Bytes of a Fraction object besides its two ints."""


def graph_bytes(spec: GameSpec, states: int, model: str | None = "moves") -> int:
    """Forecast peak bytes of the move statistics at most `states` states: the explicit
    graph and the Python numbers walked over it, with `model` (None: totals only).

    Per state: its counts (int64 per bin), the row pointer as an array and a Python list,
    the two path counts (Python ints of at most L log2(moves + 1) bits, L the game length
    bound of `core.sweep.length_bound`, else the states), the visit probability (a Fraction
    whose denominator has at most L log2(max D) bits) and one small dict of the --move
    distribution in flight.  Per move, at most one per move type and state: dest and move
    as arrays (twice while the layers are joined), as Python lists, the listing's int64
    arrays, and the step probability (a Fraction of small ints).
    """
    moves = len(spec.move_names)
    length = length_bound(spec) or states
    count_bits = length * math.log2(moves + 1)
    dmax = max_weight_bound(spec, model or "moves")
    prob_bits = length * math.log2(max(dmax, 2))
    big = PY_INT + 8 + count_bits / 8
    per_state = 8 * spec.nbins + 16 + (8 + PY_INT) + 2 * big + 232
    per_move = 2 * 16 + 2 * (8 + PY_INT) + 28
    if model is not None:
        per_state += 8 + PY_FRACTION + 2 * (PY_INT + prob_bits / 8)
        per_move += 8 + PY_FRACTION + 2 * PY_INT + 8 + PY_INT
    return math.ceil(states * (per_state + moves * per_move))


@dataclass(frozen=True, eq=False)
class MoveGraph:
    """The whole move graph of one game (small n), ids in topological order.

    Moves of state u: ptr[u]..ptr[u+1]-1, to state dest[e] by move index move[e];
    counts[u] is u's count vector; start is the start's id; terminal[u] marks states
    without moves.
    """

    spec: GameSpec
    ptr: np.ndarray
    dest: np.ndarray
    move: np.ndarray
    counts: np.ndarray
    start: int
    terminal: np.ndarray

    @property
    def size(self) -> int:
        return int(self.counts.shape[0])


def refuse_graph(spec: GameSpec, max_memory: int | None = None,
                 model: str | None = "moves") -> None:
    """Refuse, before anything is built, a game of more than GRAPH_MAX_STATES states
    (InputError; `statespace.states_upper_bound`, exact for the standard game) or whose
    `graph_bytes` exceed `max_memory` (default: what the machine has available)."""
    limit = resolve_limit(max_memory)
    refuse_space(spec, limit, f"the move statistics of n={spec.n}")
    upper = states_upper_bound(spec.values, spec.n)
    if upper > GRAPH_MAX_STATES:
        raise InputError(
            f"n={spec.n}: up to {upper:,} states, more than {GRAPH_MAX_STATES:,}; move "
            "statistics walk the whole move graph in Python and are meant for smaller n"
        )
    refuse_if_over(graph_bytes(spec, upper, model), limit,
                   f"the move statistics of n={spec.n}")


def explicit_graph(spec: GameSpec, max_memory: int | None = None) -> MoveGraph:
    """Every state of value n at the start's level or below, with all moves between them
    (refused first by `refuse_graph`)."""
    refuse_graph(spec, max_memory)
    space = build_space(spec, max_memory)
    levels = [lv for lv in space.levels if lv <= spec.start_level]
    if sum(space.layer_size(lv) for lv in levels) > GRAPH_MAX_STATES:
        raise InputError(
            f"n={spec.n}: more than {GRAPH_MAX_STATES:,} states; move statistics walk the "
            "whole move graph in Python and are meant for smaller n"
        )
    offset: dict[int, int] = {}
    total = 0
    for lv in levels:
        offset[lv] = total
        total += space.layer_size(lv)
    ptrs, dests, moves, states = [], [], [], []
    base = 0
    for lv in levels:
        lm = moves_out(space, lv)
        lv_off = np.array([offset.get(lv - d, 0) for d in range(space.max_drop + 1)],
                          dtype=np.int64)
        ptrs.append(lm.ptr[:-1] + base)
        dests.append(lv_off[lm.drop] + lm.other)
        moves.append(lm.move.astype(np.int64))
        states.append(lm.states)
        base += int(lm.ptr[-1])
    ptr = np.concatenate([*ptrs, np.array([base], dtype=np.int64)])
    dest = np.concatenate(dests)
    if dest.size and (dest <= np.repeat(np.arange(total), np.diff(ptr))).any():
        raise RuntimeError("move graph ids are not topological")  # pragma: no cover
    counts = np.concatenate(states)
    slv, srk = space.rank(spec.start)
    return MoveGraph(spec=spec, ptr=ptr, dest=dest, move=np.concatenate(moves),
                     counts=counts, start=offset[slv] + srk, terminal=np.diff(ptr) == 0)


def graph_for(n: int, rules: str | RuleSet = "standard",
              max_memory: int | None = None) -> MoveGraph:
    """The explicit move graph of the game for n (`explicit_graph`)."""
    return explicit_graph(get_rules(rules).instantiate(check_n(n)), max_memory)


# ------------------------------------------------------------------ totals over all games


def path_counts(g: MoveGraph) -> tuple[list[int], list[int]]:
    """(paths start -> u, paths u -> any end) for every state u, Python ints."""
    fwd = [0] * g.size
    fwd[g.start] = 1
    ptr, dest = g.ptr.tolist(), g.dest.tolist()
    for u in range(g.start, g.size):
        x = fwd[u]
        if x:
            for e in range(ptr[u], ptr[u + 1]):
                fwd[dest[e]] += x
    bwd = [0] * g.size
    for u in range(g.size - 1, -1, -1):
        if ptr[u] == ptr[u + 1]:
            bwd[u] = 1
        else:
            bwd[u] = sum(bwd[dest[e]] for e in range(ptr[u], ptr[u + 1]))
    return fwd, bwd


@dataclass(frozen=True)
class MoveTotals:
    """T[m] = occurrences of move m summed over all games; `games` = number of games."""

    n: int
    move_names: tuple[str, ...]
    totals: tuple[int, ...]
    games: int

    def as_dict(self) -> dict[str, int]:
        return dict(zip(self.move_names, self.totals, strict=True))


def move_totals(n: int, rules: str | RuleSet = "standard", *,
                max_memory: int | None = None) -> MoveTotals:
    """Exact total occurrences of every move over all games (module docstring)."""
    g = graph_for(n, rules, max_memory)
    fwd, bwd = path_counts(g)
    tot = [0] * len(g.spec.move_names)
    ptr, dest, move = g.ptr.tolist(), g.dest.tolist(), g.move.tolist()
    for u in range(g.size):
        x = fwd[u]
        if x:
            for e in range(ptr[u], ptr[u + 1]):
                tot[move[e]] += x * bwd[dest[e]]
    games = sum(fwd[u] for u in range(g.size) if g.terminal[u])
    return MoveTotals(n=g.spec.n, move_names=g.spec.move_names, totals=tuple(tot), games=games)


# ------------------------------------------------------------------- random play


def move_weights(g: MoveGraph, model: str) -> list[int]:
    """Integer weight of every move of the graph under a random model (`randomplay`)."""
    check_model(model)
    if model == "moves":
        return [1] * int(g.dest.size)
    spec = g.spec
    taken = np.where(spec.mv_delta < 0, -spec.mv_delta, 0)
    src = np.repeat(np.arange(g.size), np.diff(g.ptr))
    out = []
    for e, u in enumerate(src.tolist()):
        m = int(g.move[e])
        w = 1
        for j in range(spec.mv_bins.shape[1]):
            if taken[m, j]:
                w *= comb(int(g.counts[u, spec.mv_bins[m, j]]), int(taken[m, j]))
        out.append(w)
    return out


def visit_probabilities(g: MoveGraph, model: str) -> tuple[list[Fraction], list[Fraction]]:
    """(P(random game visits u) per state, p(move e | its source) per move), exact."""
    w = move_weights(g, model)
    ptr, dest = g.ptr.tolist(), g.dest.tolist()
    step = [Fraction(0)] * len(w)
    for u in range(g.size):
        a, b = ptr[u], ptr[u + 1]
        d = sum(w[a:b])
        for e in range(a, b):
            step[e] = Fraction(w[e], d)
    visit = [Fraction(0)] * g.size
    visit[g.start] = Fraction(1)
    for u in range(g.start, g.size):
        x = visit[u]
        if x:
            for e in range(ptr[u], ptr[u + 1]):
                visit[dest[e]] += x * step[e]
    return visit, step


def expected_counts(n: int, rules: str | RuleSet = "standard",
                    model: str = "moves", *, max_memory: int | None = None,
                    ) -> dict[str, Fraction]:
    """Exact expected number of times each move is played by a random game."""
    check_model(model)
    g = graph_for(n, rules, max_memory)
    visit, step = visit_probabilities(g, model)
    out = [Fraction(0)] * len(g.spec.move_names)
    ptr, move = g.ptr.tolist(), g.move.tolist()
    for u in range(g.size):
        if visit[u]:
            for e in range(ptr[u], ptr[u + 1]):
                out[move[e]] += visit[u] * step[e]
    return dict(zip(g.spec.move_names, out, strict=True))


def move_count_distribution(
    n: int, move: str, rules: str | RuleSet = "standard", weighting: str = "games", *,
    max_memory: int | None = None,
) -> dict[int, int | Fraction]:
    """Distribution of the number of times `move` is played in a game: a move name
    ("combine@3"), a move type (template) name ("split": all its bins), or a prefix ending
    in "*" ("combine*": every move whose name starts with "combine").

    weighting "games": {j: number of games playing it exactly j times} (Python ints);
    "moves" / "pairs": {j: probability} under that random model (Fractions).
    """
    g = graph_for(n, rules, max_memory)
    names = g.spec.move_names
    if move.endswith("*"):
        chosen = {m for m, x in enumerate(names) if x.startswith(move[:-1])}
    else:
        chosen = {m for m, x in enumerate(names) if x == move or x.split("@")[0] == move}
    if not chosen:
        raise InputError(f"unknown move {move!r} at n={n} (moves: {', '.join(names)})")
    if weighting == "games":
        step: list = [1] * int(g.dest.size)
        one: int | Fraction = 1
    else:
        step = visit_probabilities(g, weighting)[1]
        one = Fraction(1)
    ptr, dest, mv = g.ptr.tolist(), g.dest.tolist(), g.move.tolist()
    poly: list[dict[int, object] | None] = [None] * g.size
    poly[g.start] = {0: one}
    out: dict[int, object] = {}
    for u in range(g.start, g.size):
        p = poly[u]
        if p is None:
            continue
        poly[u] = None
        if ptr[u] == ptr[u + 1]:
            for j, x in p.items():
                out[j] = out.get(j, 0) + x
            continue
        for e in range(ptr[u], ptr[u + 1]):
            shift = 1 if mv[e] in chosen else 0
            q = poly[dest[e]]
            if q is None:
                q = poly[dest[e]] = {}
            for j, x in p.items():
                q[j + shift] = q.get(j + shift, 0) + x * step[e]
    return {j: out[j] for j in sorted(out) if out[j]}


# --------------------------------------------------------------------- linear invariants


def effect_matrix(spec: GameSpec) -> list[list[int]]:
    """E[k][m]: change of the count of bin k (0-based) by move m."""
    E = [[0] * len(spec.move_names) for _ in range(spec.nbins)]
    for m in range(len(spec.move_names)):
        for j in range(spec.mv_bins.shape[1]):
            E[int(spec.mv_bins[m, j])][m] += int(spec.mv_delta[m, j])
    return E


def rref(rows: list[list[Fraction]]) -> tuple[list[list[Fraction]], list[int]]:
    """Reduced row-echelon form (exact) and pivot columns; zero rows dropped."""
    a = [list(r) for r in rows]
    pivots: list[int] = []
    ncols = len(a[0]) if a else 0
    r = 0
    for col in range(ncols):
        piv = next((i for i in range(r, len(a)) if a[i][col] != 0), None)
        if piv is None:
            continue
        a[r], a[piv] = a[piv], a[r]
        p = a[r][col]
        a[r] = [x / p for x in a[r]]
        for i in range(len(a)):
            if i != r and a[i][col] != 0:
                f = a[i][col]
                a[i] = [x - f * y for x, y in zip(a[i], a[r], strict=True)]
        pivots.append(col)
        r += 1
    return a[:r], pivots


def nullspace(rows: list[list[Fraction]], ncols: int) -> list[list[Fraction]]:
    """A basis of {x : rows . x = 0} (exact)."""
    if not rows:
        return [[Fraction(int(i == j)) for j in range(ncols)] for i in range(ncols)]
    red, piv = rref(rows)
    free = [c for c in range(ncols) if c not in piv]
    basis = []
    for f in free:
        x = [Fraction(0)] * ncols
        x[f] = Fraction(1)
        for i, p in enumerate(piv):
            x[p] = -red[i][f]
        basis.append(x)
    return basis


@dataclass(frozen=True)
class Invariant:
    """sum_m coeffs[m] * c[m] == value for every game."""

    coeffs: tuple[Fraction, ...]
    value: Fraction
    name: str = ""

    def evaluate(self, c: list[int] | tuple[int, ...] | dict) -> Fraction:
        if isinstance(c, dict):
            raise TypeError("pass a vector in move order")
        return sum((a * x for a, x in zip(self.coeffs, c, strict=True)), Fraction(0))


@dataclass(frozen=True)
class Invariants:
    """A basis of the invariant linear forms of one game, plus named consequences."""

    n: int
    move_names: tuple[str, ...]
    basis: tuple[Invariant, ...]
    named: tuple[Invariant, ...]
    ends: tuple[tuple[int, ...], ...]

    def in_span(self, coeffs: list[Fraction] | tuple[Fraction, ...]) -> bool:
        """Whether a form lies in the span of the basis."""
        if not any(coeffs):
            return True
        rows = [list(b.coeffs) for b in self.basis]
        return len(rref([*rows, [Fraction(x) for x in coeffs]])[0]) == len(rows)


def linear_invariants(n: int, rules: str | RuleSet = "standard", *,
                      max_memory: int | None = None) -> Invariants:
    """The linear forms in the move counts that the effect vectors force to be constant
    over all games (module docstring), as an exact RREF basis with constants."""
    n = check_n(n)
    spec = get_rules(rules).instantiate(n)
    g = explicit_graph(spec, max_memory)
    fwd, _ = path_counts(g)
    ends = [g.counts[u] for u in range(g.size) if g.terminal[u] and fwd[u]]
    start = spec.start
    E = effect_matrix(spec)
    nb, nm = spec.nbins, len(spec.move_names)
    diffs = [[Fraction(int(x)) for x in (e - ends[0])] for e in ends[1:]]
    xs = nullspace([d for d in diffs if any(d)], nb)
    delta = [int(x) for x in (ends[0] - start)]
    forms = []
    for x in xs:
        y = [sum((x[k] * E[k][m] for k in range(nb)), Fraction(0)) for m in range(nm)]
        forms.append((y, sum((x[k] * delta[k] for k in range(nb)), Fraction(0))))
    # reduce [y | value] jointly: the value follows each row operation
    red, piv = rref([[*y, v] for y, v in forms])
    basis = tuple(
        Invariant(tuple(r[:nm]), r[nm]) for r in red if any(r[:nm])
    )
    named = []
    combine = [Fraction(int(x.startswith("combine"))) for x in spec.move_names]
    if any(combine):
        ones = [Fraction(-1)] * nb
        y = [sum((ones[k] * E[k][m] for k in range(nb)), Fraction(0)) for m in range(nm)]
        if y == combine and not diffs_change_tokens(ends):
            value = Fraction(int(start.sum()) - int(ends[0].sum()))
            what = ("n - Z(n)" if spec.rules.position is None
                    else "tokens at the start - tokens at the end")
            named.append(Invariant(tuple(combine), value,
                                   f"number of combining moves = {what}"))
    return Invariants(n=n, move_names=spec.move_names, basis=basis, named=tuple(named),
                      ends=tuple(tuple(int(v) for v in e) for e in ends))


def diffs_change_tokens(ends: list[np.ndarray]) -> bool:
    """Whether the end positions hold different numbers of tokens."""
    return len({int(e.sum()) for e in ends}) > 1


def format_form(coeffs: tuple[Fraction, ...], names: tuple[str, ...]) -> str:
    """A form as "c[combine@2] - 2 c[split@3] + ..."."""
    parts = []
    for a, name in zip(coeffs, names, strict=True):
        if a == 0:
            continue
        sign = "-" if a < 0 else "+"
        mag = abs(a)
        coef = "" if mag == 1 else f"{mag} "
        parts.append(f"{sign} {coef}#{name}")
    text = " ".join(parts) if parts else "0"
    return text[2:] if text.startswith("+ ") else "-" + text[2:] if text.startswith("- ") else text


def format_invariants(inv: Invariants) -> str:
    """Printable list: the named invariants, then the basis (#move = times it is played)."""
    lines = [f"linear invariants of the move counts, n={inv.n} "
             f"(#move = number of times a game plays it; {len(inv.basis)} independent forms)"]
    for x in inv.named:
        lines.append(f"  {x.name}: {format_form(x.coeffs, inv.move_names)} = {x.value}")
    lines.append("  basis (reduced row-echelon form):")
    for b in inv.basis:
        lines.append(f"    {format_form(b.coeffs, inv.move_names)} = {b.value}")
    return "\n".join(lines)


def check_on_totals(inv: Invariants, totals: MoveTotals) -> list[str]:
    """Failures of sum_m y[m] T[m] == games * value over every form (empty: all hold)."""
    bad = []
    for x in (*inv.named, *inv.basis):
        got = x.evaluate(totals.totals)
        if got != totals.games * x.value:
            bad.append(f"{format_form(x.coeffs, inv.move_names)}: summed over games {got} != "
                       f"{totals.games} x {x.value}")
    return bad


def check_on_expected(inv: Invariants, expected: dict[str, Fraction]) -> list[str]:
    """Failures of sum_m y[m] E[c[m]] == value (expectation under random play)."""
    vec = [expected[m] for m in inv.move_names]
    return [format_form(x.coeffs, inv.move_names) for x in (*inv.named, *inv.basis)
            if x.evaluate(vec) != x.value]


def _frac(x: Fraction) -> str:
    """An exact rational as "p/q", or "p" when it is an integer."""
    return f"{x.numerator}/{x.denominator}" if x.denominator != 1 else str(x.numerator)


@dataclass(frozen=True)
class MoveStats:
    """What `zeckenum move-stats` shows at n.

    totals     every move's occurrences over all games (`move_totals`)
    expected   {move: exact expected count} under random play with `model` (None: skipped)
    invariants the linear invariants (`linear_invariants`)
    failures   the invariants that fail on the totals or the expected counts (empty when
               all hold: a non-empty list is a failed check, exit 5 on the command line)
    move, distribution, random_distribution: the chosen move's count distribution over all
               games {count: games} and under random play {count: probability}, or None
    """

    rules: str
    n: int
    model: str
    totals: MoveTotals
    expected: dict[str, Fraction] | None
    invariants: Invariants
    failures: list[str]
    move: str | None = None
    distribution: dict[int, int] | None = None
    random_distribution: dict[int, Fraction] | None = None
    position: str = ""  # the start position (README "Positions") when not the rule set's

    def to_dict(self) -> dict:
        """JSON-ready form; the keys `zeckenum move-stats --json` prints."""
        inv = self.invariants
        out: dict = {
            "rules": self.rules, "n": self.n,
            **({"position": self.position} if self.position else {}),
            "games": str(self.totals.games),
            "totals": {m: str(t) for m, t in self.totals.as_dict().items()},
            "invariants": [{"form": format_form(x.coeffs, inv.move_names),
                            "coefficients": [_frac(c) for c in x.coeffs],
                            "value": _frac(x.value), "name": x.name}
                           for x in (*inv.named, *inv.basis)],
            "invariants_verified": not self.failures, "failures": list(self.failures),
        }
        if self.expected is not None:
            out["random_model"] = self.model
            out["expected"] = {m: _frac(v) for m, v in self.expected.items()}
        if self.distribution is not None:
            out["distribution"] = {"move": self.move,
                                   "games": {str(k): str(v)
                                             for k, v in self.distribution.items()}}
            if self.random_distribution is not None:
                out["distribution"]["random"] = {str(k): _frac(v)
                                                 for k, v in self.random_distribution.items()}
        return out


def move_stats(n: int, rules: str | RuleSet = "standard", *, move: str | None = None,
               model: str = "moves", random: bool = True,
               max_memory: int | None = None) -> MoveStats:
    """Move totals, expected counts under random play (unless not `random`), the linear
    invariants checked on both, and the distribution of `move`'s count when given."""
    rs = get_rules(rules)
    totals = move_totals(n, rs, max_memory=max_memory)
    expected = expected_counts(n, rs, model, max_memory=max_memory) if random else None
    inv = linear_invariants(n, rs, max_memory=max_memory)
    bad = check_on_totals(inv, totals) + (check_on_expected(inv, expected) if expected else [])
    dist = rdist = None
    if move:
        dist = move_count_distribution(n, move, rs, "games", max_memory=max_memory)
        if random:
            rdist = move_count_distribution(n, move, rs, model, max_memory=max_memory)
    return MoveStats(rules=rs.name, n=n, model=model, totals=totals, expected=expected,
                     invariants=inv, failures=bad, move=move, distribution=dist,
                     random_distribution=rdist)
