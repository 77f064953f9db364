"""The first sweep of a count (`core.sweep.sweep_windows`) on one thread and on several.

For each n the table times the whole first sweep, without kept moves (as a cluster shard
without a host cache of moves needs it), on each thread count in turn, in the same process;
the baseline is one thread, so the ratio is the speed-up of the threads.  Every run must
give the same windows, counts and path estimate (checked).

Even "one thread" lists the next layer in a helper thread while the caller gathers the
current one (`listing.prefetch_listings`), so the sweep of n = 250 already keeps two cores
busy.  The profile therefore times the parts apart: listing every layer first (held in
memory), then the sweep on those listings, split into the passes from the layers above
(`pull_windows` with which >= 1, split by ranges of states over the threads), the passes
inside a layer (which <= 0, one thread: a state may read an earlier state of its own
layer) and the bookkeeping between layers (one thread).  With T threads and memory for T
listings in flight, the sweep takes at least the listing / T and at least what is not
shared out (passes inside + bookkeeping) plus the upper passes / T.

    python benchmarks/bench_first_sweep.py --n 200 250 --threads 1 2
"""

from __future__ import annotations

import argparse
import time
from collections import defaultdict

import numpy as np
from zeckenum.core import listing, sweep
from zeckenum.core.statespace import build_space
from zeckenum.rules.model import STANDARD


def _profiled(space, timers: dict) -> sweep.Windows:  # noqa: ANN001
    """One thread's sweep with its parts timed apart: every layer's moves are listed first
    (timed, held in memory), then the sweep runs on those listings with its passes timed
    (the module attributes are swapped for timing wrappers and put back)."""
    start_level = space.rank(space.spec.start)[0]
    held = {}
    t0 = time.perf_counter()
    for level in space.levels:
        if level <= start_level:
            held[level] = listing.moves_in(space, level)
    timers["listing"] = time.perf_counter() - t0
    pull, listed = sweep.pull_windows, listing.moves_in

    def timed_pull(*args) -> None:  # noqa: ANN002
        t0 = time.perf_counter()
        pull(*args)
        timers["upper passes" if args[-1] > 0 else "passes inside"] += time.perf_counter() - t0

    sweep.pull_windows = timed_pull
    listing.moves_in = lambda space, level, pairs=False: held.pop(level)
    try:
        t0 = time.perf_counter()
        out = sweep.sweep_windows(space, keep_incoming=False, threads=1)
        timers["sweep"] = time.perf_counter() - t0
    finally:
        sweep.pull_windows = pull
        listing.moves_in = listed
    return out


def _same(a: sweep.Windows, b: sweep.Windows) -> bool:
    keys = ("states", "transitions", "terminals", "shortest", "longest", "max_window",
            "terminal_paths_log2")
    return all(getattr(a, k) == getattr(b, k) for k in keys) and all(
        np.array_equal(a.lmin[lv], b.lmin[lv]) and np.array_equal(a.win[lv], b.win[lv])
        for lv in a.lmin)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", default=[200, 250])
    ap.add_argument("--threads", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--profile-max-n", type=int, default=250,
                    help="profile n up to this (the profile holds every layer's listing: "
                         "about 4 GB at n = 250)")
    args = ap.parse_args()
    small = build_space(STANDARD.instantiate(20))  # compile / load the kernels first
    sweep.sweep_windows(small, keep_incoming=False, threads=2)
    print("| n | threads | first sweep s | speed-up |")
    print("|---|---|---|---|")
    profiles = []
    for n in args.n:
        space = build_space(STANDARD.instantiate(n))
        base = None
        first = None
        for threads in args.threads:
            t0 = time.perf_counter()
            got = sweep.sweep_windows(space, keep_incoming=False, threads=threads)
            wall = time.perf_counter() - t0
            if first is None:
                first = got
            elif not _same(first, got):
                raise SystemExit(f"n = {n}: {threads} threads gave other windows")
            base = wall if base is None else base
            print(f"| {n} | {threads} | {wall:.2f} | {base / wall:.2f}x |", flush=True)
        if n <= args.profile_max_n:
            timers: dict = defaultdict(float)
            if not _same(first, _profiled(space, timers)):
                raise SystemExit(f"n = {n}: the profiled sweep gave other windows")
            profiles.append((n, timers))
    print()
    print("| n | listing s | upper passes s | passes inside s | bookkeeping s | "
          "not shared out s |")
    print("|---|---|---|---|---|---|")
    for n, t in profiles:
        rest = t["sweep"] - t["upper passes"] - t["passes inside"]
        print(f"| {n} | {t['listing']:.2f} | {t['upper passes']:.2f} | "
              f"{t['passes inside']:.2f} | {rest:.2f} | {t['passes inside'] + rest:.2f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
