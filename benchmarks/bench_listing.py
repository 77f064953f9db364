"""Listing the moves into a layer: the walk (`moves_in`) against a listing of its states.

Every exact sweep that does not keep its moves lists them again, layer by layer
(`core.listing.moves_in`); the first sweep lists them once.  For each n, the table times the
whole listing of every layer on one thread both ways, in the same process, one after the
other: the baseline lists the layer's states (`StateSpace.states`) and then their moves with
`list_moves` (what `moves_in` did before it walked the layer); the walk is today's
`moves_in`.  Both give the same rows (checked layer by layer), so the ratio is the speed-up
of the walk.  Also printed: the moves listed and nanoseconds per move.

    python benchmarks/bench_listing.py --n 200 250 300
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from zeckenum.core.listing import layer_moves, moves_in
from zeckenum.core.statespace import build_space
from zeckenum.rules.model import STANDARD


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", default=[200, 250, 300])
    args = ap.parse_args()
    small = build_space(STANDARD.instantiate(12))  # compile / load the kernels first
    for level in small.levels:
        moves_in(small, level)
        layer_moves(small, level, -1)
    print("| n | moves listed | states + list_moves s | walk s | ns per move (states, walk) "
          "| speed-up |")
    print("|---|---|---|---|---|---|")
    for n in args.n:
        space = build_space(STANDARD.instantiate(n))
        base = walk = 0.0
        moves = 0
        for level in space.levels:
            t0 = time.perf_counter()
            old = layer_moves(space, level, -1)
            t1 = time.perf_counter()
            new = moves_in(space, level)
            t2 = time.perf_counter()
            base += t1 - t0
            walk += t2 - t1
            moves += int(new.ptr[-1])
            for a, b in ((old.ptr, new.ptr), (old.drop, new.drop), (old.other, new.other),
                         (old.move, new.move), (old.dsum, new.dsum)):
                if not np.array_equal(a, b):
                    raise SystemExit(f"n = {n}, level {level}: the two listings disagree")
            del old, new
        print(f"| {n} | {moves:,} | {base:.2f} | {walk:.2f} | {1e9 * base / moves:.1f}, "
              f"{1e9 * walk / moves:.1f} | {base / walk:.2f}x |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
