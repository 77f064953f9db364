"""Rule sets: bins, move templates and start positions, and their instantiation for one n.

A rule set describes a chip game on bins with positive integer values.  A *state* is the
vector of token counts per bin; a *move template* takes tokens from bins at fixed offsets
from an index k and gives tokens to bins at fixed offsets, for every k in its range.  A
move is a template applied to one index ("a move type applied to a bin").  Every move
preserves the value sum(count[k] * value[k]).

`RuleSet.instantiate(n)` turns a rule set into a `GameSpec`: plain arrays over the bins
whose value is at most the game's value, ready for the numba kernels.  Bins are numbered
from 1 in everything a user sees (F1 = 1, F2 = 2, ...) and from 0 inside arrays.

What n means: for the starts "ones" and "greedy" the game's value is n (n tokens in bin 1,
or the greedy decomposition of n); for an explicit start vector v the start holds n * v[k]
tokens in bin k, so the game's value is n * value(v).  A *position* p (`RuleSet.position`,
set by `at_position`, read from `start = { position = "3,1,0,2" }`) is an absolute start:
the start holds exactly p[k] tokens in bin k, the game's value is value(p), and
`instantiate(n)` refuses any n other than value(p) (one line naming both).  Its bins are the
rule set's bins of value <= value(p): every non-empty bin of p is among them.  The level
weights, the termination proof and the moves that fire are found from p exactly as from any
other start (`layering`), so every engine built on `GameSpec` plays from p with no special
case.  `GameSpec.n` is always the game's value (what the state space is built over).

Level weights (the engine's layering, see `statespace`): "tokens" uses the token count
(weights all 1) and refuses a rule set that breaks it; "auto" uses the token count when
every move keeps or lowers it and a move keeping it raises its largest changed bin, and
otherwise a strict potential found by integer linear programming (over the moves that fire
at this n when the whole move set has none: `layering`); "potential" always uses a
potential.  Rule files are read by `rulefile`; the shipped rule sets and the lookup by name
(`get_rules`, `BUILTIN`) are in `catalogue`.

Dependencies point one way: `model` imports only `layering` and `notation` (and
`errors`); `validate`, `rulefile` and `catalogue` import `model`, never the reverse.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field, replace

import numpy as np
from zeckenum.errors import InputError
from zeckenum.rules.layering import layering_weights
from zeckenum.rules.notation import annotate_position, format_position, shown, strip_counts

MAX_POSITION_VALUE = 2**62
"""Largest value of a position (the engines' limit on n, `core.checks.MAX_N`)."""


@dataclass(frozen=True)
class MoveTemplate:
    """A family of moves indexed by a bin k (1-based) with first <= k <= last.

    `takes` and `gives` are (offset, count) pairs: the move removes `count` tokens from bin
    k + offset for each pair in `takes` and adds `count` tokens to bin k + offset for each
    pair in `gives`.  `last` None means: as far as the bins go.
    """

    name: str
    takes: tuple[tuple[int, int], ...]
    gives: tuple[tuple[int, int], ...]
    first: int
    last: int | None = None

    def effect(self, k: int) -> dict[int, int]:
        """Net change per 1-based bin when the template is applied at index k."""
        change: dict[int, int] = {}
        for off, c in self.takes:
            change[k + off] = change.get(k + off, 0) - c
        for off, c in self.gives:
            change[k + off] = change.get(k + off, 0) + c
        return {b: d for b, d in change.items() if d != 0}


@dataclass(frozen=True)
class RuleSet:
    """A game: bin values from a linear recurrence, move templates, and a start position.

    Bin values: `initial` followed by value[k] = sum(coeff[i] * value[k - 1 - i]); an empty
    `recurrence` means the bins are exactly `initial` (a listed, finite set of bins).
    Start: "ones" puts n tokens in bin 1, "greedy" the greedy decomposition of n (largest
    bin first), a tuple v of counts puts n * v[k] tokens in bin k + 1 (value n * value(v)).
    Layering: `level_weights` is "tokens" (level = token count, which no move of the
    standard game increases: combines lower it by one, splits keep it), "auto" or
    "potential" (see the module docstring).
    `position`, when set (a count vector, bin 1 first, trailing zeros stripped, value > 0),
    replaces `start`: the game starts at exactly that position, whose value must be n.
    """

    name: str
    description: str
    initial: tuple[int, ...]
    recurrence: tuple[int, ...]
    templates: tuple[MoveTemplate, ...]
    start: str | tuple[int, ...] = "ones"
    level_weights: str = "tokens"
    position: tuple[int, ...] | None = None
    extra: dict = field(default_factory=dict, compare=False, hash=False)

    def bin_values(self, n: int) -> list[int]:
        """Values of all bins whose value is at most n, smallest first."""
        vals = list(self.initial)
        while True:
            nxt = sum(c * vals[-1 - i] for i, c in enumerate(self.recurrence))
            if nxt > n or nxt <= vals[-1]:
                break
            vals.append(nxt)
        return [v for v in vals if v <= n]

    def bins_by_count(self, count: int) -> list[int]:
        """The first `count` bin values (fewer if the bins are listed and run out)."""
        vals = list(self.initial[:count])
        while len(vals) < count and self.recurrence:
            vals.append(sum(c * vals[-1 - i] for i, c in enumerate(self.recurrence)))
        return vals

    def content_hash(self) -> str:
        """SHA-256 (first 16 hex digits) of the rule set's defining content."""
        body = {
            "initial": self.initial,
            "recurrence": self.recurrence,
            "templates": [
                [t.name, t.takes, t.gives, t.first, t.last] for t in self.templates
            ],
            "start": self.start if self.position is None else {"position": self.position},
            "level_weights": self.level_weights,
        }
        text = json.dumps(body, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    def at_position(self, counts: tuple[int, ...] | list[int]) -> RuleSet:
        """This rule set started at the position `counts` (count vector, bin 1 first).

        Refused with one line (InputError): a negative or non-integer count, the empty
        position (value 0), a non-empty bin beyond the rule set's bins (a listed rule set
        has only so many), a value above `MAX_POSITION_VALUE`.
        """
        raw = list(counts)
        for k, c in enumerate(raw, 1):
            if isinstance(c, bool) or not isinstance(c, (int, np.integer)) or c < 0:
                raise InputError(f"position {shown(','.join(str(x) for x in raw))}: bin {k} "
                                 f"count {shown(repr(c), 24)} is not a non-negative integer")
        pos = strip_counts(raw)
        if not pos:
            raise InputError("position 0 is empty: a game starts with at least one token")
        self.position_value(pos)
        return replace(self, position=pos)

    def start_label(self) -> str:
        """The start position in its display form `3,1,0,2 (3*1 + 1*2 + 2*5 = 15)` when the
        game starts at a position (`notation.annotate_position`), else ""."""
        if self.position is None:
            return ""
        return annotate_position(self.position, self.bins_by_count(len(self.position)))

    def position_value(self, pos: tuple[int, ...]) -> int:
        """The value of the count vector `pos` in this rule set's bins (InputError when
        `pos` has more bins than the rule set or its value exceeds MAX_POSITION_VALUE)."""
        vals = self.bins_by_count(len(pos))
        if len(vals) < len(pos):
            raise InputError(f"position {shown(format_position(pos))}: bin {len(pos)} is not "
                             f"empty but rule set {self.name!r} has {len(vals)} bins")
        value = sum(c * v for c, v in zip(pos, vals, strict=True))
        if value > MAX_POSITION_VALUE:
            raise InputError(f"position {shown(format_position(pos))} has value "
                             f"{shown(str(value), 24)}, above the limit 2^62")
        return value

    def game_value(self, n: int) -> int:
        """The value of the game for n: n, n * value(v) for an explicit start vector v, or
        value(p) for a position p (which must equal n)."""
        if self.position is not None:
            value = self.position_value(self.position)
            if n != value:
                raise InputError(f"position {shown(format_position(self.position))} has value "
                                 f"{value}, not N={n} (give N = {value} or leave N out)")
            return value
        if isinstance(self.start, tuple):
            vals = self.bin_values(2**62)
            if len(self.start) > len(vals):
                raise InputError(
                    f"rule set {self.name!r}: the start vector has {len(self.start)} entries "
                    f"but only {len(vals)} bins exist"
                )
            return n * sum(c * v for c, v in zip(self.start, vals, strict=False))
        return n

    def start_vector(self, n: int, values: list[int]) -> np.ndarray:
        """The start state's counts over `values` (the bins of the game for n)."""
        nbins = len(values)
        start = np.zeros(nbins, dtype=np.int64)
        if self.position is not None:
            if len(self.position) > nbins:  # pragma: no cover - game_value checked the value
                raise InputError(f"position {shown(format_position(self.position))} has more bins "
                                 f"than the game for n={n}")
            start[: len(self.position)] = self.position
        elif self.start == "ones":
            start[0] = n // values[0]
            if values[0] * start[0] != n:
                raise InputError(f"start 'ones' needs bin 1 to divide n={n}")
        elif self.start == "greedy":
            rest = n
            for k in range(nbins - 1, -1, -1):
                start[k], rest = divmod(rest, values[k])
            if rest:
                raise InputError(f"start 'greedy' leaves {rest} of n={n} over (bin 1 is not 1)")
        elif isinstance(self.start, tuple):
            for k, c in enumerate(self.start):
                start[k] = n * c
        else:
            raise InputError(f"unknown start {self.start!r}")
        return start

    def instantiate(self, n: int) -> GameSpec:
        """The concrete game for n: bins with value <= the game's value, and its moves.

        Every template is applied at every index of its range whose bins exist.  When a
        potential is needed for the layering, moves that take more value than the game has
        (they can never apply) are left out, and when the rest has no potential but every
        game ends, so are the moves that never fire from the start (`layering`).
        """
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
            raise InputError(f"n must be a positive integer, got {n}")
        n = int(n)
        value = self.game_value(n)
        values = self.bin_values(value)
        nbins = len(values)
        if nbins == 0:
            raise InputError(f"rule set {self.name!r}: no bin has a value <= {value}")
        names: list[str] = []
        effects: list[dict[int, int]] = []
        for tpl in self.templates:
            last = nbins if tpl.last is None else min(tpl.last, nbins)
            for k in range(tpl.first, last + 1):
                eff = tpl.effect(k)
                if any(b < 1 or b > nbins for b in eff):
                    continue
                names.append(f"{tpl.name}@{k}")
                effects.append(eff)
        for m, eff in enumerate(effects):
            if sum(d * values[b - 1] for b, d in eff.items()) != 0:
                raise InputError(f"move {names[m]} changes the value")
        start = self.start_vector(n, values)
        weights, keep, layering = layering_weights(
            self.name, self.level_weights, values, effects, names, start
        )
        if keep is not None:
            names = [names[m] for m in keep]
            effects = [effects[m] for m in keep]
        width = max((len(e) for e in effects), default=1)
        mv_bins = np.zeros((len(effects), width), dtype=np.int64)
        mv_delta = np.zeros((len(effects), width), dtype=np.int64)
        for m, eff in enumerate(effects):
            for j, (b, d) in enumerate(sorted(eff.items())):
                mv_bins[m, j] = b - 1
                mv_delta[m, j] = d
        vals = np.array(values, dtype=np.int64)
        mv_drop = -(mv_delta * weights[mv_bins]).sum(axis=1)
        return GameSpec(
            rules=self,
            n=value,
            values=vals,
            weights=weights,
            mv_bins=mv_bins,
            mv_delta=mv_delta,
            mv_drop=mv_drop.astype(np.int64),
            move_names=tuple(names),
            start=start,
            layering=layering,
        )


@dataclass(frozen=True, eq=False)
class GameSpec:
    """One rule set instantiated for one n: plain arrays for the kernels.

    values[k]      value of bin k (0-based), strictly increasing
    weights[k]     level weight of bin k; the level of a state is sum(weights * counts)
    mv_bins[m, j]  0-based bins touched by move m (padded with bin 0 and delta 0)
    mv_delta[m, j] change of the count in mv_bins[m, j]
    mv_drop[m]     how much move m lowers the level (>= 0 for a valid layering)
    start          the start state's count vector
    layering       how the weights were found (`layering`: token count, strict or ranked
                   potential, possibly on the moves that fire at this n only)
    """

    rules: RuleSet
    n: int  # the game's value (see the module docstring)
    values: np.ndarray
    weights: np.ndarray
    mv_bins: np.ndarray
    mv_delta: np.ndarray
    mv_drop: np.ndarray
    move_names: tuple[str, ...]
    start: np.ndarray
    layering: str = "token count"

    @property
    def nbins(self) -> int:
        return int(self.values.size)

    @property
    def start_level(self) -> int:
        return int((self.weights * self.start).sum())


STANDARD = RuleSet(
    name="standard",
    description=(
        "The Zeckendorf game: n tokens in F1, bins 1, 2, 3, 5, 8, ...; combine 2F1->F2 and "
        "F(k-1)+F(k)->F(k+1); split 2F2->F1+F3 and 2F(k)->F(k-2)+F(k+1) for k>=3."
    ),
    initial=(1, 2),
    recurrence=(1, 1),
    templates=(
        MoveTemplate("combine-ones", takes=((0, 2),), gives=((1, 1),), first=1, last=1),
        MoveTemplate("combine", takes=((-1, 1), (0, 1)), gives=((1, 1),), first=2),
        MoveTemplate("split-twos", takes=((0, 2),), gives=((-1, 1), (1, 1)), first=2, last=2),
        MoveTemplate("split", takes=((0, 2),), gives=((-2, 1), (1, 1)), first=3),
    ),
)
