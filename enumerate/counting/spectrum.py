"""Second sweep: the number of games of every length, modulo a block of primes.

Each reachable state s holds, for each prime q of the block and each length L in its
window [lmin(s), lmin(s) + win(s) - 1], the number of paths start -> s with L moves,
modulo q.  Each state gathers its predecessors' rows, shifted by one length.  At the end
the terminal states' rows are summed into the spectrum: spectrum[q, L] = (number of games
of length L) mod primes[q].

Storage of one layer is a flat int64 array; state i owns words off[i] .. off[i+1]-1 laid out
as [prime][length].  Only the layers a move can still reach are held, in a ring of reused
buffers.  A block is
independent of every other block, so blocks run in threads here (kernels release the GIL)
or as separate tasks on a cluster (`zeckenum.cluster`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from zeckenum.core.jit import kernel
from zeckenum.core.statespace import StateSpace
from zeckenum.core.sweep import Windows, drop_stale, gather_passes, moves_into


@kernel
def pull_residues(
    dst: np.ndarray,
    dst_off: np.ndarray,
    dst_lmin: np.ndarray,
    dst_win: np.ndarray,
    ptr: np.ndarray,
    drop: np.ndarray,
    src_rank: np.ndarray,
    which_drop: int,
    src: np.ndarray,
    src_off: np.ndarray,
    src_lmin: np.ndarray,
    src_win: np.ndarray,
    primes: np.ndarray,
) -> int:
    """Add into every state's rows the rows of its predecessors `which_drop` levels up.

    A predecessor's row for length L lands on the state's row for length L + 1.  All
    residues are in [0, q) with q < 2**62, so x + y < 2**63 never overflows int64.  Returns
    the number of word updates done.  With which_drop == 0, src is dst and ascending rank
    finishes each predecessor before it is read.  Gathering (rather than scattering) keeps
    the rows being summed in cache while the predecessors stream past.
    """
    nprimes = primes.size
    updates = 0
    for j in range(dst_win.size):
        dw = dst_win[j]
        if dw == 0:
            continue
        for e in range(ptr[j], ptr[j + 1]):
            if drop[e] != which_drop:
                continue
            i = src_rank[e]
            w = src_win[i]
            if w == 0:
                continue
            shift = src_lmin[i] + 1 - dst_lmin[j]
            for q in range(nprimes):
                p = primes[q]
                s0 = src_off[i] + q * w
                d0 = dst_off[j] + q * dw + shift
                # slices give LLVM non-negative indices, so the loop vectorises
                sv = src[s0 : s0 + w]
                dv = dst[d0 : d0 + w]
                for t in range(w):
                    x = dv[t] + sv[t]
                    dv[t] = x - p if x >= p else x
            updates += w * nprimes
    return updates


@kernel
def collect_terminals(
    vals: np.ndarray,
    off: np.ndarray,
    lmin: np.ndarray,
    win: np.ndarray,
    ends: np.ndarray,
    primes: np.ndarray,
    spectrum: np.ndarray,
) -> None:
    """Add the rows of the terminal states `ends` (ranks) into spectrum[q, length]."""
    for i in ends:
        w = win[i]
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
    off[1:] = win
    np.cumsum(off[1:], out=off[1:])  # in place: no temporary of the layer's size
    off *= nprimes
    return off


def peak_words(space: StateSpace, windows: Windows, nprimes: int) -> int:
    """int64 words of the sweep's buffer ring for a block of `nprimes`.

    The ring holds max_drop + 1 buffers, each as large as the largest layer.
    """
    largest = max(int(w.sum()) for w in windows.win.values())
    return (space.max_drop + 1) * largest * nprimes


def spectrum_residues(
    space: StateSpace,
    windows: Windows,
    primes: list[int] | np.ndarray,
    on_layer: Callable[[int], None] | None = None,
) -> tuple[np.ndarray, int]:
    """(spectrum, word updates): spectrum[q, L] = games of length L mod primes[q].

    The local form of one shard of the exact count: a pure function of the game, its
    windows and a block of primes.  Moves into each layer come from `windows.incoming`
    when the first sweep kept them, else they are derived again here.
    `on_layer(states_done)` is called after each layer (for progress bars).
    """
    p = np.asarray(primes, dtype=np.int64)
    nprimes = p.size
    spectrum = np.zeros((nprimes, windows.longest + 1), dtype=np.int64)
    start_level, start_rank = space.rank(space.spec.start)
    live: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    levels = [lv for lv in space.levels if lv <= start_level]
    # A ring of reused buffers, one per layer in flight: the k-th layer swept lives in
    # ring[k % span]; the layers still read are among the max_drop layers swept just before
    # it, so none shares its slot.  Reuse avoids a fresh allocation (and its page faults)
    # per layer.
    span = min(space.max_drop + 1, len(levels))
    cap = max(int(windows.win[lv].sum()) for lv in levels) * nprimes
    ring = [np.empty(cap, dtype=np.int64) for _ in range(span)]
    updates = 0
    for k, level in enumerate(levels):
        lmin, win = windows.lmin[level], windows.win[level]
        off = layer_offsets(win, nprimes)
        vals = ring[k % span][: int(off[-1])]
        vals[:] = 0
        if level == start_level:
            vals[off[start_rank] : off[start_rank + 1]] = 1  # the empty game, every prime
        live[level] = (vals, off)
        ptr, drop, src = moves_into(space, windows, level)
        # modular sums: any order gives the same residues; drop 0 comes last
        for d, src_level in gather_passes(drop, space.max_drop, level, live, merge=False):
            svals, soff = live[src_level]
            updates += pull_residues(
                vals, off, lmin, win, ptr, drop, src, d,
                svals, soff, windows.lmin[src_level], windows.win[src_level], p,
            )
        collect_terminals(vals, off, lmin, win, windows.terminal_ranks[level], p, spectrum)
        drop_stale(live, level, space.max_drop)
        if on_layer is not None:
            on_layer(int(np.count_nonzero(win)))
    return spectrum, updates
