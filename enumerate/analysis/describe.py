"""Descriptions of a rule set for people: its bins, start and moves in words, the layering
the engine finds at one n, and the end positions the engine reaches.

Used by `zeckenum rules check` / `zeckenum rules show`.  The texts depend only on the
`RuleSet`; `layering_report` and `terminal_positions` build the game's state space
(`core.statespace`) and run the first sweep (`core.sweep`) at one n, so they are the
engine's own answer, which the tests compare with an independent brute force.
"""

from __future__ import annotations

from dataclasses import dataclass

from zeckenum.core.statespace import build_space
from zeckenum.core.sweep import sweep_windows
from zeckenum.rules.model import MoveTemplate, RuleSet
from zeckenum.rules.rulefile import bin_expression


def start_text(rules: RuleSet) -> str:
    """The start position in words, with the game's value."""
    if rules.position is not None:
        return f"position {rules.start_label()} (n is its value)"
    if rules.start == "ones":
        return "ones (n tokens in bin 1; value n)"
    if rules.start == "greedy":
        return "greedy (the greedy decomposition of n; value n)"
    vec = ", ".join(str(c) for c in rules.start)
    return f"vector [{vec}] times n (value n * {rules.game_value(1)})"


def bins_text(rules: RuleSet, count: int = 10) -> str:
    """The first `count` bin values and how they are made (a recurrence or a listed set)."""
    vals = rules.bins_by_count(count)
    more = ", ..." if rules.recurrence else ""
    how = (
        f"recurrence {list(rules.recurrence)} from {list(rules.initial)}"
        if rules.recurrence else "listed"
    )
    return ", ".join(str(v) for v in vals) + more + f"  ({how})"


def describe_template(tpl: MoveTemplate) -> str:
    """One line: the template as tokens moved and its range, e.g.
    'split: 2 B(k) -> B(k-2) + B(k+1) for k >= 3'."""

    def where(off: int) -> str:
        return str(tpl.first + off) if tpl.first == tpl.last else bin_expression(off)

    def side(pairs: tuple[tuple[int, int], ...]) -> str:
        return " + ".join((f"{c} " if c > 1 else "") + f"B({where(off)})" for off, c in pairs)

    if tpl.first == tpl.last:
        rng = "(one-off)"
    elif tpl.last is None:
        rng = f"for k >= {tpl.first}"
    else:
        rng = f"for {tpl.first} <= k <= {tpl.last}"
    return f"{tpl.name}: {side(tpl.takes)} -> {side(tpl.gives)} {rng}"


@dataclass(frozen=True)
class LayeringReport:
    """How the engine layers one rule set at one n (for `rules check` / `rules show`)."""

    n: int
    value: int
    method: str
    weights: tuple[int, ...]
    start_level: int
    moves: int
    table_bytes: int
    states: int


def layering_report(rules: RuleSet, n: int) -> LayeringReport:
    """Instantiate `rules` at n and describe the level weights the engine will use."""
    spec = rules.instantiate(n)
    space = build_space(spec)
    return LayeringReport(
        n=n,
        value=spec.n,
        method=spec.layering,
        weights=tuple(int(x) for x in spec.weights),
        start_level=spec.start_level,
        moves=len(spec.move_names),
        table_bytes=int(space.tab.nbytes),
        states=space.total_states(),
    )


def terminal_positions(rules: RuleSet, n: int) -> list[tuple[int, ...]]:
    """The reachable end positions of the game for n (count vectors), found by the engine."""
    space = build_space(rules.instantiate(n))
    win = sweep_windows(space, keep_incoming=False)
    out: list[tuple[int, ...]] = []
    for level, ranks in win.terminal_ranks.items():
        if ranks.size:
            states = space.states(level)
            out.extend(tuple(int(c) for c in states[r]) for r in ranks)
    return sorted(out)
