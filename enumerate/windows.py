"""First sweep: reachability, per-state length windows, and the a-priori size bound.

For every state s reachable from the start, the sweep finds the shortest and the longest
number of moves of a path start -> s (its *length window* [lmin, lmin + win - 1]) and an
upper estimate of log2(number of such paths).  The windows size the exact sweep (each state
stores one residue per length in its window and per prime); the path-count estimate at the
terminal states bounds every length count and so fixes how many primes are needed.

Layers are visited from the start's level downward; inside a layer in ascending rank, which
is topological (see `statespace`).  Only the layers a move can still reach are held as
working arrays; each finished layer keeps two int32 arrays (lmin, win).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba as nb
import numpy as np

from .statespace import StateSpace

UNREACHED = np.iinfo(np.int32).max


@nb.njit(cache=True, nogil=True)
def relax_windows(
    src_lmin: np.ndarray,
    src_lmax: np.ndarray,
    src_lp: np.ndarray,
    ptr: np.ndarray,
    drop: np.ndarray,
    dest: np.ndarray,
    which_drop: int,
    dst_lmin: np.ndarray,
    dst_lmax: np.ndarray,
    dst_lp: np.ndarray,
) -> None:
    """Push windows and log2 path counts along the moves of one layer that drop `which_drop`.

    lmin/lmax are path lengths in moves; lp is log2 of the number of paths (-inf: none).
    With which_drop == 0 the destination arrays are the source arrays and states are
    finished in ascending rank, which the layering guarantees is topological.
    """
    for i in range(src_lmin.size):
        if src_lmin[i] == UNREACHED:
            continue
        a = src_lmin[i] + 1
        b = src_lmax[i] + 1
        x = src_lp[i]
        for e in range(ptr[i], ptr[i + 1]):
            if drop[e] != which_drop:
                continue
            j = dest[e]
            if a < dst_lmin[j]:
                dst_lmin[j] = a
            if b > dst_lmax[j]:
                dst_lmax[j] = b
            y = dst_lp[j]
            if y == -np.inf:
                dst_lp[j] = x
            elif x >= y:
                dst_lp[j] = x + np.log2(1.0 + np.exp2(y - x))
            else:
                dst_lp[j] = y + np.log2(1.0 + np.exp2(x - y))


@dataclass(frozen=True, eq=False)
class Windows:
    """Result of the first sweep.

    lmin[level], win[level]: int32 arrays over the layer's ranks; win 0 marks an unreachable
    state.  `terminal_paths_log2` is the estimate of log2(total number of games) and
    `count_bits` a rigorous bit bound on every count of games of one length (see `bits_bound`).
    """

    lmin: dict[int, np.ndarray]
    win: dict[int, np.ndarray]
    states: int
    transitions: int
    terminals: int
    shortest: int
    longest: int
    terminal_paths_log2: float
    max_window: int

    @property
    def count_bits(self) -> int:
        return bits_bound(self.terminal_paths_log2, self.longest)


def bits_bound(paths_log2: float, depth: int) -> int:
    """Bits that surely hold the total number of games, from its float log2 estimate.

    Every log-add in `relax_windows` is off by a few units in the last place of its result,
    i.e. by less than 8 * 2**-52 * (|log2 count| + 1) in log2; a count is built by at most
    `depth` of them along any chain.  For counts below 2**2**20 and depth below 2**20 the
    total drift stays far below one bit, so floor(estimate) + 2 bits always suffice; the
    extra check prime of the exact sweep confirms it independently.
    """
    if depth >= 2**20 or paths_log2 >= 2**20:
        raise ValueError("size bound out of the range where the float estimate is proved")
    return max(1, math.floor(paths_log2) + 2)


def sweep_windows(space: StateSpace) -> Windows:
    """Reachable states, transitions, length windows and the size bound of one game."""
    spec = space.spec
    start_level, start_rank = space.rank(spec.start)
    live: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}

    def working(level: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if level not in live:
            size = space.layer_size(level)
            live[level] = (
                np.full(size, UNREACHED, dtype=np.int32),
                np.full(size, -1, dtype=np.int32),
                np.full(size, -np.inf, dtype=np.float64),
            )
        return live[level]

    lmin0, lmax0, lp0 = working(start_level)
    lmin0[start_rank] = 0
    lmax0[start_rank] = 0
    lp0[start_rank] = 0.0

    out_lmin: dict[int, np.ndarray] = {}
    out_win: dict[int, np.ndarray] = {}
    states = transitions = terminals = 0
    shortest, longest = UNREACHED, -1
    term_lp = -np.inf
    max_window = 0
    for level in space.levels:
        if level > start_level:
            continue
        lmin, lmax, lp = working(level)
        lm = space.moves(level)
        drops = np.unique(lm.drop)
        for d in drops:
            d = int(d)
            if d == 0:
                relax_windows(lmin, lmax, lp, lm.ptr, lm.drop, lm.dest, 0, lmin, lmax, lp)
            else:
                tmin, tmax, tlp = working(level - d)
                relax_windows(lmin, lmax, lp, lm.ptr, lm.drop, lm.dest, d, tmin, tmax, tlp)
        reached = lmin != UNREACHED
        deg = np.diff(lm.ptr)
        states += int(reached.sum())
        transitions += int(deg[reached].sum())
        ends = reached & (deg == 0)
        if ends.any():
            terminals += int(ends.sum())
            shortest = min(shortest, int(lmin[ends].min()))
            longest = max(longest, int(lmax[ends].max()))
            lps = lp[ends]
            top = lps.max()
            term_lp = np.logaddexp2(term_lp, top + np.log2(np.exp2(lps - top).sum()))
        win = np.where(reached, lmax - lmin + 1, 0).astype(np.int32)
        max_window = max(max_window, int(win.max(initial=0)))
        out_lmin[level] = np.where(reached, lmin, 0).astype(np.int32)
        out_win[level] = win
        del live[level]
    return Windows(
        lmin=out_lmin,
        win=out_win,
        states=states,
        transitions=transitions,
        terminals=terminals,
        shortest=int(shortest),
        longest=int(longest),
        terminal_paths_log2=float(term_lp),
        max_window=max_window,
    )
