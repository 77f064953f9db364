"""Reference spectrum of the standard Zeckendorf game, written the straightforward way.

This is the comparison point for `bench_count.py`: plain Python, no numpy, no zeckenum.
A state is a tuple of token counts per Fibonacci bin (bin values 1, 2, 3, 5, 8, ... up to
n); `games_from(state)` is a memoised recursion returning a dict

    length -> number of games from `state` to the end with exactly that many moves,

with exact Python integers.  The spectrum of n is `games_from((n, 0, 0, ...))`.  Every
visited state keeps its dict in the memo until the end, as a quick research script would.

Run:  python benchmarks/baseline_count.py N [--json PATH]
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import threading
import time
from functools import cache

# Deep games: allow a recursion as deep as the longest game, on a large thread stack.
RECURSION_LIMIT = 1_000_000
THREAD_STACK_BYTES = 512 * 1024 * 1024


def fibonacci_bins(n: int) -> list[int]:
    """Values of the bins F1 = 1, F2 = 2, F(k+1) = F(k) + F(k-1) that are at most n."""
    vals = [1, 2]
    while vals[-1] + vals[-2] <= n:
        vals.append(vals[-1] + vals[-2])
    return [v for v in vals if v <= n]


def move_effects(nbins: int) -> list[tuple[tuple[int, int], ...]]:
    """Every move of the standard game as ((0-based bin, change), ...) pairs.

    combine 2 F1 -> F2; combine F(k-1) + F(k) -> F(k+1) (k >= 2);
    split 2 F2 -> F1 + F3; split 2 F(k) -> F(k-2) + F(k+1) (k >= 3).
    Moves that would need a bin of value above n are left out (no state of value n can
    make them).
    """
    effects: list[tuple[tuple[int, int], ...]] = []
    if nbins >= 2:
        effects.append(((0, -2), (1, 1)))
    for k in range(2, nbins):  # 1-based k = 2 .. nbins - 1 -> bins k-2, k-1 -> k (0-based)
        effects.append(((k - 2, -1), (k - 1, -1), (k, 1)))
    if nbins >= 3:
        effects.append(((1, -2), (0, 1), (2, 1)))
    for k in range(3, nbins):  # 1-based k = 3 .. nbins - 1
        effects.append(((k - 1, -2), (k - 3, 1), (k, 1)))
    return effects


def spectrum(n: int) -> tuple[dict[int, int], int]:
    """(length -> number of games, number of states visited) for n tokens in F1."""
    nbins = len(fibonacci_bins(n))
    effects = move_effects(nbins)

    @cache
    def games_from(state: tuple[int, ...]) -> dict[int, int]:
        out: dict[int, int] = {}
        moved = False
        for eff in effects:
            if all(state[b] + d >= 0 for b, d in eff):
                moved = True
                nxt = list(state)
                for b, d in eff:
                    nxt[b] += d
                for length, c in games_from(tuple(nxt)).items():
                    out[length + 1] = out.get(length + 1, 0) + c
        if not moved:
            out[0] = 1
        return out

    start = (n,) + (0,) * (nbins - 1)
    result = games_from(start)
    visited = games_from.cache_info().currsize
    return dict(sorted(result.items())), visited


def run_deep(fn, *args):
    """Call fn(*args) in a thread with a large stack (for deep recursion); return its value."""
    sys.setrecursionlimit(RECURSION_LIMIT)
    threading.stack_size(THREAD_STACK_BYTES)
    box: dict[str, object] = {}

    def target() -> None:
        try:
            box["value"] = fn(*args)
        except BaseException as exc:  # re-raised in the caller's thread
            box["error"] = exc

    t = threading.Thread(target=target)
    t.start()
    t.join()
    if "error" in box:
        raise box["error"]  # type: ignore[misc]
    return box["value"]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("n", type=int, help="number of tokens in F1 (n >= 1)")
    parser.add_argument("--json", metavar="PATH", help="write the spectrum and timing here")
    args = parser.parse_args(argv)
    if args.n < 1:
        parser.error(f"n must be a positive integer, got {args.n}")
    sys.set_int_max_str_digits(0)
    t0 = time.perf_counter()
    counts, visited = run_deep(spectrum, args.n)
    seconds = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB
    record = {
        "n": args.n,
        "seconds": seconds,
        "states": visited,
        "games": str(sum(counts.values())),
        "length_counts": {str(k): str(v) for k, v in counts.items()},
        "peak_mb_self": peak_mb,
    }
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(record, fh)
    lengths = list(counts)
    print(
        f"n={args.n} states={visited} games={sum(counts.values())} "
        f"lengths {lengths[0]}..{lengths[-1]} seconds={seconds:.3f} peak_mb={peak_mb:.1f}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
