"""Evaluation points against length windows: time, word updates and memory per shard.

For each n, the windowed count (`zeckenum.count`, the baseline) and the evaluation-point
count (`zeckenum.counting.points.count_points`) run in the same process on one thread, one
after the other, and the table prints their seconds, word updates, the rate per core, the
largest shard's buffer memory and the ratio of the times (points / windows).  Both give the
same spectrum (checked).  The point path does more word updates (every state carries all N
points, a window only its lengths); what it buys is shards of any size.

    python benchmarks/bench_points.py --n 80 120 150 --points-per-shard 64
"""

from __future__ import annotations

import argparse
import time

import zeckenum
from zeckenum.counting.points import count_points


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", default=[80, 120, 150])
    ap.add_argument("--points-per-shard", type=int, default=None,
                    help="points per shard (default: all N in one shard per prime)")
    args = ap.parse_args()
    count_points(12, threads=1)  # compile / load the kernels outside the timings
    zeckenum.count(12, threads=1)
    print("| n | windows s | windows updates | points s | points updates | points rate "
          "per core | shards | shard buffers | time ratio |")
    print("|---|---|---|---|---|---|---|---|---|")
    for n in args.n:
        t0 = time.perf_counter()
        ref = zeckenum.count(n, threads=1)
        t1 = time.perf_counter()
        res = count_points(n, points_per_shard=args.points_per_shard, threads=1)
        t2 = time.perf_counter()
        if res.length_counts != ref.length_counts:
            raise SystemExit(f"n = {n}: the two methods disagree")
        s = res.stats
        print(f"| {n} | {t1 - t0:.2f} | {ref.stats['word_updates']:.3g} | {t2 - t1:.2f} | "
              f"{s['word_updates']:.3g} | {s['word_updates'] / s['seconds_exact']:.3g} | "
              f"{s['shards']} | {s['memory_per_shard_bytes'] / 2**20:.1f} MiB | "
              f"{(t2 - t1) / (t1 - t0):.2f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
