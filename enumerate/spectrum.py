"""Second sweep: the number of games of every length, modulo a block of primes.

Each reachable state s holds, for each prime q of the block and each length L in its
window [lmin(s), lmin(s) + win(s) - 1], the number of paths start -> s with L moves,
modulo q.  A move s -> t adds s's rows, shifted by one length, into t's rows.  At the end
the terminal states' rows are summed into the spectrum: spectrum[q, L] = (number of games
of length L) mod primes[q].

Storage of one layer is a flat int64 array; state i owns words off[i] .. off[i+1]-1 laid out
as [prime][length].  Only the layers a move can still reach are allocated.  A block is
independent of every other block, so blocks run in threads here (kernels release the GIL)
or as separate tasks on a cluster (`zeckenum.cluster`).
"""

from __future__ import annotations

from collections.abc import Callable

import numba as nb
import numpy as np

from .statespace import StateSpace
from .windows import Windows


@nb.njit(cache=True, nogil=True)
def push_residues(
    src: np.ndarray,
    src_off: np.ndarray,
    src_lmin: np.ndarray,
    src_win: np.ndarray,
    ptr: np.ndarray,
    drop: np.ndarray,
    dest: np.ndarray,
    which_drop: int,
    dst: np.ndarray,
    dst_off: np.ndarray,
    dst_lmin: np.ndarray,
    dst_win: np.ndarray,
    primes: np.ndarray,
) -> int:
    """Add every source state's rows into its successors' rows (moves dropping `which_drop`).

    All residues are in [0, q) with q < 2**62, so x + y < 2**63 never overflows int64.
    Returns the number of word updates done.  With which_drop == 0, src and dst are the same
    layer and ascending rank order finishes each state before it is read.
    """
    nprimes = primes.size
    updates = 0
    for i in range(src_win.size):
        w = src_win[i]
        if w == 0:
            continue
        for e in range(ptr[i], ptr[i + 1]):
            if drop[e] != which_drop:
                continue
            j = dest[e]
            dw = dst_win[j]
            shift = src_lmin[i] + 1 - dst_lmin[j]
            for q in range(nprimes):
                p = primes[q]
                s0 = src_off[i] + q * w
                d0 = dst_off[j] + q * dw + shift
                for t in range(w):
                    x = dst[d0 + t] + src[s0 + t]
                    if x >= p:
                        x -= p
                    dst[d0 + t] = x
            updates += w * nprimes
    return updates


@nb.njit(cache=True, nogil=True)
def collect_terminals(
    vals: np.ndarray,
    off: np.ndarray,
    lmin: np.ndarray,
    win: np.ndarray,
    ptr: np.ndarray,
    primes: np.ndarray,
    spectrum: np.ndarray,
) -> None:
    """Add the rows of every reachable state without moves into spectrum[q, length]."""
    for i in range(win.size):
        w = win[i]
        if w == 0 or ptr[i + 1] != ptr[i]:
            continue
        for q in range(primes.size):
            p = primes[q]
            s0 = off[i] + q * w
            for t in range(w):
                x = spectrum[q, lmin[i] + t] + vals[s0 + t]
                if x >= p:
                    x -= p
                spectrum[q, lmin[i] + t] = x


def layer_offsets(win: np.ndarray, nprimes: int) -> np.ndarray:
    """Word offsets of each state's rows in a layer array (length size + 1, int64)."""
    off = np.zeros(win.size + 1, dtype=np.int64)
    np.cumsum(win.astype(np.int64) * nprimes, out=off[1:])
    return off


def peak_words(space: StateSpace, windows: Windows, nprimes: int) -> int:
    """Largest number of int64 words the sweep holds at once for a block of `nprimes`."""
    levels = sorted(windows.win, reverse=True)
    words = {lv: int(windows.win[lv].sum()) * nprimes for lv in levels}
    span = max(space.max_drop, 1)
    peak = 0
    for lv in levels:
        peak = max(peak, sum(words.get(lv - d, 0) for d in range(span + 1)))
    return peak


def spectrum_residues(
    space: StateSpace,
    windows: Windows,
    primes: list[int] | np.ndarray,
    on_layer: Callable[[int], None] | None = None,
) -> tuple[np.ndarray, int]:
    """(spectrum, word updates): spectrum[q, L] = games of length L mod primes[q].

    The local form of one shard of the exact count: pure function of the game, its windows
    and a block of primes; the cluster twin is `zeckenum.cluster.tasks.spectrum_task`.
    `on_layer(states_done)` is called after each layer (for progress bars).
    """
    p = np.asarray(primes, dtype=np.int64)
    nprimes = p.size
    spectrum = np.zeros((nprimes, windows.longest + 1), dtype=np.int64)
    start_level, start_rank = space.rank(space.spec.start)
    live: dict[int, tuple[np.ndarray, np.ndarray]] = {}

    def working(level: int) -> tuple[np.ndarray, np.ndarray]:
        if level not in live:
            off = layer_offsets(windows.win[level], nprimes)
            live[level] = (np.zeros(int(off[-1]), dtype=np.int64), off)
        return live[level]

    vals, off = working(start_level)
    vals[off[start_rank] : off[start_rank + 1]] = 1  # one game of length 0 so far, every prime
    updates = 0
    for level in space.levels:
        if level > start_level:
            continue
        vals, off = working(level)
        lmin, win = windows.lmin[level], windows.win[level]
        lm = space.moves(level)
        for d in np.unique(lm.drop):
            d = int(d)
            if d == 0:
                tv, toff, tmin, twin = vals, off, lmin, win
            else:
                tv, toff = working(level - d)
                tmin, twin = windows.lmin[level - d], windows.win[level - d]
            updates += push_residues(
                vals, off, lmin, win, lm.ptr, lm.drop, lm.dest, d, tv, toff, tmin, twin, p
            )
        collect_terminals(vals, off, lmin, win, lm.ptr, p, spectrum)
        del live[level]
        if on_layer is not None:
            on_layer(lm.size)
    return spectrum, updates
