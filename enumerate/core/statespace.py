"""The packed state space: dense ranks of states, layers by level, and per-layer move lists.

States of a game for n are the count vectors a with sum(a[k] * values[k]) == n.  They are
grouped into *layers* by their level sum(a[k] * weights[k]); for the standard game the
level is the token count, which no move raises.  Inside a layer, states are ordered
co-lexicographically (the count in the largest bin is the most significant digit) and
ranked densely 0, 1, 2, ... in that order.  Every move of the standard game raises the
count of a bin above every bin it lowers, so it goes to a state of higher co-lexicographic
rank: inside a layer, ascending rank is a topological order.  `listing.list_moves` checks
this for every move it lists, so a rule set that breaks it is refused instead of
miscounted (`listing.refuse_order`).

No state is ever hashed: a vector's rank is computed from the table `tab` in O(bins).

    tab[k, v, t] = number of count vectors over bins 0..k-1 with value v and level t

The same arrays serve counting, random play and solving; kernels take plain arrays only.
The moves of a layer are listed by `listing` and swept by `sweep`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.memory import human, refuse_if_over, resolve_limit
from zeckenum.errors import InputError, MemoryRefused
from zeckenum.rules.model import GameSpec

OVERFLOW = -1
"""Entry of the rank table whose count does not fit int64 (see `rank_table`)."""
INT64_MAX = np.iinfo(np.int64).max


@kernel
def rank_table(values: np.ndarray, weights: np.ndarray, n: int, max_level: int) -> np.ndarray:
    """tab[k, v, t]: count vectors over bins 0..k-1 of value v and level t (int64).

    A count of 2**63 or more is stored as OVERFLOW (-1), and so is every entry built from
    one: each sum x + y of two non-negative terms is checked as y > INT64_MAX - x before it
    is formed.  `build_space` refuses a table holding OVERFLOW.
    """
    nbins = values.size
    tab = np.zeros((nbins + 1, n + 1, max_level + 1), dtype=np.int64)
    tab[0, 0, 0] = 1
    for k in range(nbins):
        vk = values[k]
        wk = weights[k]
        for v in range(n + 1):
            for t in range(max_level + 1):
                x = tab[k, v, t]
                if v >= vk and t >= wk and x >= 0:
                    y = tab[k + 1, v - vk, t - wk]
                    # compare before adding: a wrapped sum is undefined to the compiler
                    x = OVERFLOW if y < 0 or y > INT64_MAX - x else x + y
                tab[k + 1, v, t] = x
    return tab


def rank_table_bytes(nbins: int, n: int, top: int) -> int:
    """Exact bytes of `rank_table` for `nbins` bins, value n and levels 0..top (Python
    ints: no overflow, so it can refuse an n far beyond int64)."""
    return (int(nbins) + 1) * (int(n) + 1) * (int(top) + 1) * 8


def states_upper_bound(values: np.ndarray | list[int], n: int) -> int:
    """An upper bound on the states of value n of any level: the number of count vectors
    over `values` summing to n (partitions of n into those parts; for the standard game
    exactly the states, OEIS A003107), computed in O(n x bins) time and O(n) memory.

    Float64 dynamic programming: each bin's pass is a prefix sum along residues mod its
    value (non-negative terms, relative rounding error at most (n + 1) u per pass, u =
    2**-53); the result is inflated by (1 + 8 (n + 2) bins u) + 1, which covers the
    compounded error, and an overflow to infinity gives 2**1100.
    """
    n = int(n)
    dp = np.zeros(n + 1, dtype=np.float64)
    dp[0] = 1.0
    vals = [int(v) for v in values if 0 < int(v) <= n]
    with np.errstate(over="ignore", invalid="ignore"):
        for vk in vals:
            rows = -(-(n + 1) // vk)
            a = np.zeros(rows * vk, dtype=np.float64)
            a[: n + 1] = dp
            dp = np.cumsum(a.reshape(rows, vk), axis=0).ravel()[: n + 1]
        x = float(dp[n]) * (1.0 + 8.0 * (n + 2) * max(1, len(vals)) * 2.0**-53) + 1.0
    if not np.isfinite(x):
        return 2**1100
    return int(np.ceil(x))


def refuse_space(spec: GameSpec, limit: int, what: str, per_state: float = 0.0,
                 extra: int = 0) -> int:
    """Refuse (MemoryRefused) before the rank table exists when the rank table (exact
    bytes) + `per_state` bytes x `states_upper_bound` + `extra` exceed `limit`.

    `per_state` is what the run keeps for every state of the space (for a count, its two
    int32 window bounds), so the sum is a lower bound of the run's peak; the finer
    forecast follows once the rank table gives the layer sizes.  Costs O(n x bins).
    Returns the states bound (0 when not needed).
    """
    table = rank_table_bytes(spec.nbins, spec.n, spec.start_level)
    refuse_if_over(table + extra, limit, f"{what} (rank table)")
    if per_state <= 0:
        return 0
    upper = states_upper_bound(spec.values, spec.n)
    refuse_if_over(table + extra + math.ceil(per_state * upper), limit,
                   f"{what} (up to {upper:.3g} states x {per_state:g} bytes)")
    return upper


@kernel(inline=True)
def rank_of(
    counts: np.ndarray, tab: np.ndarray, values: np.ndarray, weights: np.ndarray, n: int,
    level: int,
) -> int:
    """Co-lexicographic rank of `counts` among the states of value n and the given level."""
    r = 0
    v = n
    t = level
    for k in range(values.size - 1, -1, -1):
        c = counts[k]
        if c > 0:
            r += tab[k + 1, v, t] - tab[k + 1, v - c * values[k], t - c * weights[k]]
            v -= c * values[k]
            t -= c * weights[k]
    return r


@kernel
def layer_states(
    tab: np.ndarray, values: np.ndarray, weights: np.ndarray, n: int, level: int
) -> np.ndarray:
    """All states of value n at `level`, as rows of int64 counts, in ascending rank order."""
    nbins = values.size
    size = tab[nbins, n, level]
    out = np.zeros((size, nbins), dtype=np.int64)
    if size == 0:
        return out
    a = np.zeros(nbins, dtype=np.int64)
    rem_v = np.zeros(nbins + 1, dtype=np.int64)
    rem_t = np.zeros(nbins + 1, dtype=np.int64)
    rem_v[nbins] = n
    rem_t[nbins] = level
    row = 0
    k = nbins - 1
    a[k] = 0
    while True:
        v = rem_v[k + 1] - a[k] * values[k]
        t = rem_t[k + 1] - a[k] * weights[k]
        if v < 0 or t < 0:
            # this bin is exhausted: back up to the next larger bin and advance it
            k += 1
            if k == nbins:
                break
            a[k] += 1
            continue
        if k == 0:
            if v % values[0] == 0:
                c = v // values[0]
                if c * weights[0] == t:
                    a[0] = c
                    out[row, :] = a
                    row += 1
            k = 1
            if k == nbins:
                break
            a[k] += 1
            continue
        if tab[k, v, t] == 0:
            a[k] += 1
            continue
        rem_v[k] = v
        rem_t[k] = t
        k -= 1
        a[k] = 0
    return out


@kernel(inline=True)
def move_applies(
    states: np.ndarray, i: int, m: int, sign: int, level: int, max_level: int,
    mv_bins: np.ndarray, mv_delta: np.ndarray, mv_drop: np.ndarray,
) -> bool:
    """Whether move m (sign +1) or its reverse (sign -1) applies to state i of `states`.

    A reverse move that would lead above `max_level` leaves the ranked space and is skipped.
    """
    target = level - sign * mv_drop[m]
    if target < 0 or target > max_level:
        return False
    for j in range(mv_bins.shape[1]):
        if states[i, mv_bins[m, j]] + sign * mv_delta[m, j] < 0:
            return False
    return True


@dataclass(frozen=True, eq=False)
class StateSpace:
    """The ranked state space of one game: layer sizes and the ranking table.

    Layers are visited from `top` (the start's level) down to 0; only layers with at least
    one state of value n exist.  Layer sizes count every state of value n at that level; the
    reachable ones are found by the first sweep (see `sweep`).
    """

    spec: GameSpec
    tab: np.ndarray
    top: int

    @property
    def levels(self) -> list[int]:
        """Levels that hold states, from the start's level downward (sweep order)."""
        return [t for t in range(self.top, -1, -1) if self.layer_size(t) > 0]

    @property
    def max_drop(self) -> int:
        return int(self.spec.mv_drop.max()) if self.spec.mv_drop.size else 0

    def layer_size(self, level: int) -> int:
        return int(self.tab[self.spec.nbins, self.spec.n, level])

    def total_states(self) -> int:
        """Number of count vectors of value n at levels 0..top (an upper bound on reachable)."""
        return sum(int(x) for x in self.tab[self.spec.nbins, self.spec.n, : self.top + 1])

    def largest_layer(self) -> int:
        """States of the largest layer (0 for an empty space)."""
        return max((self.layer_size(lv) for lv in self.levels), default=0)

    def listing_peak(self, state_bytes: float, move_bytes: float, sign: int = -1) -> int:
        """Bytes of the largest one-layer structure holding `state_bytes` per state and
        `move_bytes` per listed move (`moves_by_level`) of that layer."""
        sizes = self.tab[self.spec.nbins, self.spec.n].astype(np.float64)
        per_level = sizes * state_bytes + self.moves_by_level(sign) * move_bytes
        return math.ceil(float(per_level.max(initial=0.0)))

    def moves_by_level(self, sign: int = -1) -> np.ndarray:
        """Per level 0..top, the number of (state, move) pairs `listing.list_moves` lists with this
        sign (-1: moves into the layer's states, +1: out of them), exactly, as float64.

        A move's reverse applies to a state iff the state holds at least the tokens the
        move gives (bins and counts g); those states biject (subtract g) with the vectors
        of value n - value(g) and level t - weight(g), whose number is the rank table's
        tab[bins, n - value(g), t - weight(g)].  Forward moves likewise with the tokens
        taken.  The level the move leads to must lie in 0..top, as in `move_applies`.
        """
        s = self.spec
        top = self.top
        out = np.zeros(top + 1, dtype=np.float64)
        row = self.tab[s.nbins].astype(np.float64)
        for gv, gw, d in self._held_tokens(sign):
            src = row[s.n - gv]
            for t in range(gw, top + 1):
                target = t - sign * d
                if 0 <= target <= top:
                    out[t] += src[t - gw]
        return out

    def moves_at(self, level: int, sign: int = -1) -> int:
        """`moves_by_level(sign)[level]` as an exact integer, for one level only."""
        s = self.spec
        total = 0
        for gv, gw, d in self._held_tokens(sign):
            if level >= gw and 0 <= level - sign * d <= self.top:
                total += int(self.tab[s.nbins, s.n - gv, level - gw])
        return total

    def _held_tokens(self, sign: int) -> list[tuple[int, int, int]]:
        """Per move whose tokens held fit n: (their value, their level, the move's drop),
        the tokens a state must hold for the move (sign +1) or its reverse (sign -1)."""
        s = self.spec
        out = []
        for m in range(s.mv_bins.shape[0]):
            delta = s.mv_delta[m] * (-sign)
            held = np.where(delta > 0, delta, 0)
            gv = int((held * s.values[s.mv_bins[m]]).sum())
            gw = int((held * s.weights[s.mv_bins[m]]).sum())
            if gv <= s.n:
                out.append((gv, gw, int(s.mv_drop[m])))
        return out

    def states(self, level: int) -> np.ndarray:
        s = self.spec
        return layer_states(self.tab, s.values, s.weights, s.n, level)

    def rank(self, counts: np.ndarray) -> tuple[int, int]:
        """(level, rank) of a count vector."""
        s = self.spec
        counts = np.asarray(counts, dtype=np.int64)
        level = int((counts * s.weights).sum())
        return level, int(rank_of(counts, self.tab, s.values, s.weights, s.n, level))


def build_space(spec: GameSpec, max_memory: int | None = None) -> StateSpace:
    """Rank table and layer bookkeeping for one instantiated game.

    The table's exact size, (bins + 1) x (n + 1) x (top + 1) int64 words, is checked
    against `max_memory` (default: the memory available now) before it is allocated
    (MemoryRefused); a space with a count of 2**63 or more is refused after (ranks would
    not fit int64).
    """
    if (spec.mv_drop < 0).any():
        bad = spec.move_names[int(np.argmax(spec.mv_drop < 0))]
        raise InputError(f"move {bad} raises the level; the layering needs non-raising moves")
    top = spec.start_level
    refuse_if_over(rank_table_bytes(spec.nbins, spec.n, top), resolve_limit(max_memory),
                   f"the rank table of n={spec.n}")
    tab = rank_table(spec.values, spec.weights, spec.n, top)
    if tab.size and int(tab.min()) < 0:
        raise MemoryRefused(
            f"n={spec.n}: the state space has 2^63 states or more (its ranks do not fit "
            f"int64; the rank table alone took {human(tab.nbytes)})"
        )
    return StateSpace(spec=spec, tab=tab, top=top)
