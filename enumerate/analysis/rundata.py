"""Exact results over a range of n (`RunData`), and the runs that compute them.

`collect(lo, hi)` runs `count` at every n of a range, `random_play` (two players,
uniform over the legal moves) up to `random_upto` and `solve` (two players, optimal play)
up to `solve_upto`; `add_random` and `add_optimal` fill in what a table lacks;
`run_detail` computes what a report shows at one n (extremal games, move statistics).
`zeckenum.present` turns a `RunData` into figures and an HTML page without computing
anything but floats from these exact values; a table directory becomes a `RunData`
through `zeckenum.present.plots.read_table`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from typing import TYPE_CHECKING

from zeckenum.core.text import frac_str
from zeckenum.errors import InputError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

if TYPE_CHECKING:  # pragma: no cover - types only
    from zeckenum.analysis.extremal import PlayedGame
    from zeckenum.analysis.movestats import MoveStats

SUMMARY_KEYS = ("states", "transitions", "games", "shortest", "longest", "shortest_games",
                "longest_games")
"""The census fields of `RunData.summary` (keys of `CountResult.to_dict()`)."""


@dataclass(frozen=True)
class RunData:
    """Exact results over a range of n.

    spectra[n]  {length: number of games} (all games)
    random[n]   {length: probability} of a random game (uniform over legal moves); may
                cover fewer n than spectra
    wins[n]     probability that player 1 wins a random game (two players)
    summary[n]  states, transitions, games, shortest, longest, shortest_games, longest_games
    provenance  where the numbers came from (rule set, hash, version, parameters, files)
    ruleset     the rule set the numbers are for (None only for hand-made data, whose
                `rules` is then a built-in name or a rule file)
    rules_text  its canonical rule-file text (`rulefile.format_rules`)
    optimal[n]  optimal play, two players, normal play (`optimal_row`): winner (1, 2),
                p_positions, and when the source has them states,
                p_positions_by_level {level: count} and grundy (the start's nimber)
    """

    rules: str
    spectra: dict[int, dict[int, int]]
    random: dict[int, dict[int, Fraction]] = field(default_factory=dict)
    wins: dict[int, Fraction] = field(default_factory=dict)
    summary: dict[int, dict[str, int]] = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)
    ruleset: RuleSet | None = None
    rules_text: str = ""
    optimal: dict[int, dict] = field(default_factory=dict)

    @property
    def ns(self) -> list[int]:
        return sorted(self.spectra)

    def rule_set(self) -> RuleSet:
        """The rule set of the data: `ruleset` when known (always for tables and `collect`),
        else `rules` resolved by `get_rules` (hand-made data only)."""
        return self.ruleset if self.ruleset is not None else get_rules(self.rules)

    def law(self, source: str, n: int) -> dict[int, float]:
        """{length: probability} (floats) of all games or of random play at n."""
        if source == "games":
            sp = self.spectra[n]
            total = sum(sp.values())
            return {k: float(Fraction(v, total)) for k, v in sorted(sp.items())}
        return {k: float(v) for k, v in sorted(self.random[n].items())}

    def source_ns(self, source: str) -> list[int]:
        return self.ns if source == "games" else sorted(self.random)

    def to_dict(self) -> dict:
        """JSON-ready: exact integers as decimal strings, rationals as "p/q", n and
        lengths as text keys."""
        return {
            "rules": self.rules,
            "rules_hash": self.rule_set().content_hash(),
            "spectra": {str(n): {str(k): str(v) for k, v in sp.items()}
                        for n, sp in sorted(self.spectra.items())},
            "random_lengths": {str(n): {str(k): frac_str(Fraction(v)) for k, v in law.items()}
                               for n, law in sorted(self.random.items())},
            "player1_wins": {str(n): frac_str(Fraction(w)) for n, w in sorted(self.wins.items())},
            "summary": {str(n): {k: str(v) for k, v in row.items()}
                        for n, row in sorted(self.summary.items())},
            "optimal": {str(n): {k: ({str(a): b for a, b in v.items()} if isinstance(v, dict)
                                     else v) for k, v in row.items()}
                        for n, row in sorted(self.optimal.items())},
            "provenance": dict(self.provenance),
            "rules_text": self.rules_text,
        }


OPTIMAL_KEYS = ("winner", "states", "p_positions", "p_positions_by_level", "grundy")
"""The fields of `RunData.optimal` rows, taken from a solve result's `to_dict()`."""


def optimal_row(result: dict) -> dict:
    """The `RunData.optimal` row of one solve result (`SolveResult.to_dict()`, two
    players): winner, states, p_positions, and, when the result carries them,
    p_positions_by_level ({level: count}, keys made ints) and grundy (the start's
    Sprague-Grundy value, the result's "grundy" key).  Nothing is computed here."""
    row: dict = {k: result[k] for k in ("winner", "states", "p_positions") if k in result}
    levels = result.get("p_positions_by_level")
    if isinstance(levels, dict):
        row["p_positions_by_level"] = {int(k): int(v) for k, v in levels.items()}
    g = result.get("grundy")
    if isinstance(g, int) and not isinstance(g, bool):
        row["grundy"] = g
    return row


def solve_rows(ns: list[int], rules: RuleSet, grundy: bool = False,
               threads: int | None = None) -> dict[int, dict]:
    """`optimal_row` of `optimal.solve.solve` at every n of `ns` (two players), with the
    start's Sprague-Grundy value when `grundy` (computed by the solver, in its layer walk)."""
    from zeckenum.optimal.solve import solve

    return {n: optimal_row(solve(n, rules, 2, threads=threads, grundy=grundy).to_dict())
            for n in ns}


def add_optimal(data: RunData, upto: int, grundy: bool = False,
                threads: int | None = None) -> RunData:
    """`data` with optimal play (`solve_rows`) at every n <= upto of its range lacking it
    (every n <= upto when `grundy` is asked and a row lacks the value)."""
    todo = [n for n in data.ns if n <= upto and (n not in data.optimal
                                                  or (grundy and "grundy" not in data.optimal[n]))]
    optimal = {**data.optimal, **solve_rows(todo, data.rule_set(), grundy, threads)}
    prov = {**data.provenance, "solve_computed_upto": upto}
    return RunData(rules=data.rules, spectra=data.spectra, random=data.random, wins=data.wins,
                   summary=data.summary, provenance=prov, ruleset=data.ruleset,
                   rules_text=data.rules_text, optimal=optimal)


def collect(lo: int, hi: int, rules: str | RuleSet = "standard",
            random_upto: int | None = None, threads: int | None = None,
            solve_upto: int | None = None, grundy: bool = False) -> RunData:
    """Fresh exact computation for lo <= n <= hi: `count` at every n, `random_play` (two
    players, uniform over the legal moves) at every n <= random_upto (default: hi), and
    optimal play (`solve_rows`, with the start's Grundy value when `grundy`) at every
    n <= solve_upto (default: hi)."""
    from zeckenum import __version__
    from zeckenum.counting.count import count
    from zeckenum.randomplay.exact import random_play
    from zeckenum.rules.rulefile import format_rules

    if lo < 1 or hi < lo:
        raise InputError(f"need 1 <= A <= B for the range of n, got {lo}..{hi}")
    rs = get_rules(rules)
    top = hi if random_upto is None else min(hi, random_upto)
    spectra, random, wins, summary = {}, {}, {}, {}
    for n in range(lo, hi + 1):
        r = count(n, rs, threads=threads)
        spectra[n] = dict(r.length_counts)
        summary[n] = {k: int(v) for k, v in r.to_dict().items() if k in SUMMARY_KEYS}
        if n <= top:
            rr = random_play(n, rs, threads=threads)
            random[n] = dict(rr.length_probability or {})
            wins[n] = rr.win_probability[1]
    s_top = hi if solve_upto is None else min(hi, solve_upto)
    optimal = solve_rows(list(range(lo, s_top + 1)), rs, grundy, threads)
    prov = {"source": "fresh computation", "rules": rs.name, "rules_hash": rs.content_hash(),
            "version": __version__, "range": [lo, hi], "random_upto": top,
            "random_model": "moves", "solve_upto": s_top}
    return RunData(rules=rs.name, spectra=spectra, random=random, wins=wins, summary=summary,
                   provenance=prov, ruleset=rs, rules_text=format_rules(rs), optimal=optimal)


def add_random(data: RunData, upto: int, threads: int | None = None) -> RunData:
    """`data` with the random-play length laws (and player 1's win probability) computed
    for every n <= upto of its range that lacks them."""
    from zeckenum.randomplay.exact import random_play

    random, wins = dict(data.random), dict(data.wins)
    for n in data.ns:
        if n <= upto and n not in random:
            rr = random_play(n, data.rule_set(), threads=threads)
            random[n] = dict(rr.length_probability or {})
            wins.setdefault(n, rr.win_probability[1])
    prov = {**data.provenance, "random_computed_upto": upto, "random_model": "moves"}
    return RunData(rules=data.rules, spectra=data.spectra, random=random, wins=wins,
                   summary=data.summary, provenance=prov, ruleset=data.ruleset,
                   rules_text=data.rules_text, optimal=data.optimal)


DETAIL_MAX_N = 60
"""The default detail n of a report: the largest n of the data up to this."""


@dataclass(frozen=True)
class RunDetail:
    """What a report shows at one n of a `RunData`: an explicit shortest and longest game,
    the greedy longest game (only when the rule set's content hash is the standard game's:
    a statement about that game) and the move statistics with the linear invariants
    (random model "moves"), all for the data's own rule set object."""

    n: int
    shortest: PlayedGame
    longest: PlayedGame
    greedy: PlayedGame | None
    stats: MoveStats

    def to_dict(self) -> dict:
        out = {"n": self.n, "shortest_game": self.shortest.to_dict(),
               "longest_game": self.longest.to_dict(), "move_stats": self.stats.to_dict()}
        if self.greedy is not None:
            out["greedy_longest"] = self.greedy.to_dict()
        return out


def detail_n_of(data: RunData, detail_n: int | None = None) -> int | None:
    """The n of a report's detail sections: `detail_n` (InputError unless the data has
    it), by default the largest n <= DETAIL_MAX_N, None when there is none."""
    if detail_n is None:
        small = [n for n in data.ns if n <= DETAIL_MAX_N]
        return small[-1] if small else None
    if detail_n not in data.spectra:
        raise InputError(f"detail n={detail_n} is not in the data ({data.ns[0]}..{data.ns[-1]})")
    return detail_n


def run_detail(data: RunData, detail_n: int | None = None) -> RunDetail | None:
    """The detail of a report at `detail_n_of(data, detail_n)` (None when there is no
    such n)."""
    from zeckenum.analysis.extremal import extremal_games, greedy_longest_game
    from zeckenum.analysis.movestats import move_stats
    from zeckenum.rules.model import STANDARD

    n = detail_n_of(data, detail_n)
    if n is None:
        return None
    rs = data.rule_set()
    short, long = extremal_games(n, rs)
    greedy = greedy_longest_game(n) if rs.content_hash() == STANDARD.content_hash() else None
    return RunDetail(n=n, shortest=short, longest=long, greedy=greedy,
                     stats=move_stats(n, rs, model="moves"))
