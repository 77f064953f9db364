"""Benchmark of the Dask layer: speed-up of 2 workers over 1, and the cluster path's overhead.

Prints one table.  Rows:

* one large n (default 150): wall time of the sharded count on a LocalCluster of 1 worker
  and of 2 workers (cluster already up; its start-up is reported separately), and the
  in-process `count(n, threads=1)` as the baseline measured in the same run;
* a range of n (default 100..130) on 1 and 2 workers, one task per (n, block);
* a small run (default n = 30): in-process `run_count` against the cluster path, both with
  an existing cluster (connect, run, disconnect) and with `--workers 2` started from scratch
  (start, run, close).

Ratios: speed-up = time(1 worker) / time(2 workers); overhead = time(cluster path) -
time(in-process).  The machine is shared, so every timing is noisy; rerun to compare.

    python benchmarks/bench_cluster.py [--n 150] [--lo 100 --hi 130] [--small 30] [--repeat 2]
    python benchmarks/bench_cluster.py --only-large --n 170 --repeat 3
"""

from __future__ import annotations

import argparse
import time


def timed(fn):  # noqa: ANN001, ANN201
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def _burn(_: int) -> float:
    t0 = time.perf_counter()
    s = 0
    for i in range(15_000_000):
        s += i
    return time.perf_counter() - t0


def machine_parallelism() -> float:
    """Speed-up two CPU-bound processes get over one on this machine right now (<= 2).

    The machine is shared: when others use a core, no code can reach 2x; this row says how
    much of the second core was actually there during the benchmark.
    """
    import multiprocessing as mp

    one = _burn(0)
    with mp.get_context("spawn").Pool(2) as pool:
        pool.map(_burn, [0, 0])  # start-up outside the measurement
        t0 = time.perf_counter()
        pool.map(_burn, [0, 1])
        two = time.perf_counter() - t0
    return 2 * one / two


def on_cluster(workers: int, ns: list[int]) -> tuple[float, float, dict]:
    """(start-up seconds, run seconds, results) of a count over `ns` on a fresh cluster."""
    from zeckenum.cluster.backend import open_pool
    from zeckenum.cluster.run import count_on_pool

    t0 = time.perf_counter()
    with open_pool(workers=workers) as pool:
        start = time.perf_counter() - t0
        run, res = timed(lambda: count_on_pool(ns, "standard", pool))
    return start, run, res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=150)
    ap.add_argument("--lo", type=int, default=100)
    ap.add_argument("--hi", type=int, default=130)
    ap.add_argument("--small", type=int, default=30)
    ap.add_argument("--only-large", action="store_true", help="Only the one-large-n rows.")
    ap.add_argument("--repeat", type=int, default=1,
                    help="Alternate 1 and 2 workers this many times; keep the best of each.")
    args = ap.parse_args()

    import zeckenum
    from zeckenum.cluster import run_count
    from zeckenum.cluster.backend import close_cluster, start_local_cluster, warm_up

    warm_up()
    rows: list[tuple[str, str, str]] = []
    par = machine_parallelism()
    rows.append(("2 CPU-bound processes vs 1 (the machine now)", f"{par:8.2f} x",
                 "upper bound for any 2-worker speed-up"))

    base, ref = timed(lambda: zeckenum.count(args.n, threads=1))
    rows.append((f"count({args.n}) in-process, 1 thread", f"{base:8.2f} s", "baseline"))
    both, _ = timed(lambda: zeckenum.count(args.n, threads=2))
    rows.append((f"count({args.n}) in-process, 2 threads", f"{both:8.2f} s",
                 f"speed-up {base / both:.2f}x (threads, for reference)"))
    t1 = t2 = float("inf")
    for _ in range(args.repeat):  # alternate, so a burst of load hits both alike
        s1, a1, r1 = on_cluster(1, [args.n])
        s2, a2, r2 = on_cluster(2, [args.n])
        assert r1[args.n] == ref and r2[args.n] == ref
        t1, t2 = min(t1, a1), min(t2, a2)
    rows.append((f"n={args.n} on 1 worker ({r1[args.n].stats['shards_total']} shards)",
                 f"{t1:8.2f} s", f"start-up {s1:.1f} s"))
    rows.append((f"n={args.n} on 2 workers ({r2[args.n].stats['shards_total']} shards)",
                 f"{t2:8.2f} s", f"speed-up {t1 / t2:.2f}x (target 1.7x)"))

    if args.only_large:
        print_table(rows)
        return
    ns = list(range(args.lo, args.hi + 1))
    u1 = u2 = float("inf")
    for _ in range(args.repeat):
        _, b1, q1 = on_cluster(1, ns)
        _, b2, q2 = on_cluster(2, ns)
        assert all(q1[n] == q2[n] for n in ns)
        u1, u2 = min(u1, b1), min(u2, b2)
    rows.append((f"n={args.lo}..{args.hi} on 1 worker", f"{u1:8.2f} s", ""))
    rows.append((f"n={args.lo}..{args.hi} on 2 workers", f"{u2:8.2f} s",
                 f"speed-up {u1 / u2:.2f}x"))

    small = args.small
    local, a = timed(lambda: run_count(small))
    cluster = start_local_cluster(2)
    try:
        run_count(small, scheduler=cluster.scheduler_address)  # workers import + load once
        existing, b = timed(lambda: run_count(small, scheduler=cluster.scheduler_address))
    finally:
        close_cluster(cluster)
    fresh, c = timed(lambda: run_count(small, workers=2))
    assert a == b == c
    par_end = machine_parallelism()
    rows.append(("2 CPU-bound processes vs 1, at the end", f"{par_end:8.2f} x", ""))
    rows.append((f"n={small} in-process run_count", f"{local:8.2f} s", "baseline"))
    rows.append((f"n={small} on an existing 2-worker cluster", f"{existing:8.2f} s",
                 f"overhead {existing - local:+.2f} s (target < 3 s)"))
    rows.append((f"n={small} with --workers 2 (start+run+close)", f"{fresh:8.2f} s",
                 f"overhead {fresh - local:+.2f} s"))

    print_table(rows)


def print_table(rows: list[tuple[str, str, str]]) -> None:
    w = max(len(r[0]) for r in rows)
    print(f"{'case':<{w}}  {'wall':>10}  note")
    for name, t, note in rows:
        print(f"{name:<{w}}  {t:>10}  {note}")


if __name__ == "__main__":
    main()
