"""Project a large cluster from real shards run here: one n by evaluation points.

Starts a LocalCluster of `--workers` processes (one thread each, 127.0.0.1), runs the first
sweep of n on every worker (`cluster.count_tasks.points_facts_task`: the worker processes
of this host share it through the host cache), plans the points route with `--points-per-
shard K` (`cluster.plan.points_plan`, the driver's own planner), runs `--sample S` of its
real shards (`count_tasks.spectrum_points_task`, spread over the primes) and measures each
one's wall time, word updates and the worker's peak resident memory.  Nothing is assembled
(a sample is not a count); the shards' values are checked only for range.

Then it projects a cluster of `--nodes` nodes x `--cores` cores x `--node-memory` bytes:

* work: every shard of the plan does the same word updates as the sampled ones (exact:
  K x (kept moves + states below the start), the same for every prime), so the time of a
  shard is the sampled median;
* a node runs `cores` shards at once if `cores` x (per-shard private memory) + the host's
  shared first sweep fit its memory, else fewer (printed);
* wall time = the first sweep on each node (measured here, on `--workers` threads; on a
  node it runs once per host) + ceil(shards / shards in flight) x shard time + assembly
  (an inverse transform of N values per prime, measured here on real sizes).

Assumptions, printed with the result: the nodes' cores are as fast as these; memory
bandwidth per core does not drop with 32 busy cores (the kernel is bandwidth-bound, so this
is optimistic by up to the ratio of per-core bandwidths); the first sweep is not kept in
memory between shards here when it does not fit (each shard then lists the moves again,
which the sample's time includes), so on nodes that can keep it the projection is
pessimistic.

    python benchmarks/bench_scale.py --n 400 --points-per-shard 8 --sample 4 --workers 2
"""

from __future__ import annotations

import argparse
import math
import resource
import statistics
import time

from zeckenum.core.memory import human, parse_size


def _timed_shard(rules: str, n: int, shard: tuple[int, int, int, int]) -> dict:
    """Run one real shard on a worker and report its seconds, updates and peak RSS."""
    import numpy as np
    from zeckenum.cluster.count_tasks import spectrum_points_task

    t0 = time.perf_counter()
    values, updates = spectrum_points_task(rules, n, shard)
    seconds = time.perf_counter() - t0
    q = shard[0]
    ok = bool(np.all((values >= 0) & (values < q)))
    return {"seconds": seconds, "updates": int(updates), "in_range": ok,
            "peak_rss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}


def _warm() -> None:
    """Load (or compile) the points kernels on a worker outside the timings."""
    from zeckenum.counting.points import count_points

    count_points(8, threads=1)


def _timed_facts(rules: str, n: int) -> dict:
    from zeckenum.cluster.count_tasks import points_facts_task

    t0 = time.perf_counter()
    facts = points_facts_task(rules, n)
    return {"facts": facts, "seconds": time.perf_counter() - t0,
            "peak_rss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=400)
    ap.add_argument("--rules", default="standard")
    ap.add_argument("--points-per-shard", type=int, default=8)
    ap.add_argument("--sample", type=int, default=4)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--nodes", type=int, default=100)
    ap.add_argument("--cores", type=int, default=32)
    ap.add_argument("--node-memory", default="64G")
    args = ap.parse_args()
    node_memory = parse_size(args.node_memory)

    from distributed import Client, as_completed
    from zeckenum.cluster.backend import close_cluster, start_local_cluster
    from zeckenum.cluster.plan import points_plan, worker_bytes
    from zeckenum.core.ntt import coefficients_from_values, root_of_order

    cluster = start_local_cluster(args.workers)
    try:
        client = Client(cluster)
        workers = list(client.scheduler_info()["workers"])
        client.run(_warm)
        t0 = time.perf_counter()
        futs = [client.submit(_timed_facts, args.rules, args.n, workers=[w], pure=False)
                for w in workers]
        sweeps = client.gather(futs)
        first_wall = time.perf_counter() - t0
        print(f"first sweep on the workers: {first_wall:.1f} s", flush=True)
        facts = sweeps[0]["facts"]
        plan = points_plan(facts, 0, args.points_per_shard, args.workers)
        nshards = len(plan.blocks)
        step = max(1, nshards // max(1, args.sample))
        picks = list(range(0, nshards, step))[: args.sample]
        t1 = time.perf_counter()
        futs = [client.submit(_timed_shard, args.rules, args.n, plan.shard_input(i),
                              pure=False) for i in picks]
        shards = []
        for fut in as_completed(futs):  # printed as they finish: a long sample says something
            shards.append(fut.result())
            print(f"shard: {shards[-1]['seconds']:.1f} s, {shards[-1]['updates']:.3g} "
                  f"updates, worker peak {human(shards[-1]['peak_rss'])}", flush=True)
        sample_wall = time.perf_counter() - t1
        client.close()
    finally:
        close_cluster(cluster)

    if not all(s["in_range"] for s in shards):
        raise SystemExit("a sampled shard returned a value outside [0, prime)")
    shard_s = statistics.median(s["seconds"] for s in shards)
    updates = shards[0]["updates"]
    rate = statistics.median(s["updates"] / s["seconds"] for s in shards)
    peak = max(s["peak_rss"] for s in shards)
    ring = worker_bytes(facts, plan) - facts.window_bytes - facts.shared_bytes
    # assembly: one inverse transform of N values per prime, on real sizes
    q = plan.all_primes[0]
    w = root_of_order(q, plan.order)
    t2 = time.perf_counter()
    coefficients_from_values(list(range(plan.order)), q, w)
    assembly = (time.perf_counter() - t2) * len(plan.all_primes)

    shared = facts.window_bytes + facts.shared_bytes
    per_shard_private = ring
    fit = max(0, (node_memory - shared) // max(1, per_shard_private))
    in_flight_node = min(args.cores, fit)
    in_flight = in_flight_node * args.nodes
    waves = math.ceil(nshards / max(1, in_flight))
    first = max(s["seconds"] for s in sweeps)
    projected = first + waves * shard_s + assembly

    print(f"n = {args.n} ({args.rules}): {facts.states:,} states, {facts.transitions:,} moves, "
          f"lengths {facts.shortest}..{facts.longest}, {facts.count_bits} bits")
    print(f"plan: {len(plan.all_primes)} primes (incl. check) x N = {plan.order} points, "
          f"K = {plan.per_shard} -> {nshards:,} shards")
    print()
    print("| measured here | value |")
    print("|---|---|")
    print(f"| first sweep per worker (wall, {args.workers} workers at once) | "
          f"{first:.1f} s (all: {first_wall:.1f} s) |")
    print(f"| first sweep's peak RSS per worker | {human(max(s['peak_rss'] for s in sweeps))} |")
    print(f"| shared first-sweep data (windows + kept moves) | {human(shared)} |")
    print(f"| sampled shards | {len(shards)} in {sample_wall:.1f} s on {args.workers} "
          f"workers |")
    print(f"| one shard: median seconds | {shard_s:.1f} |")
    print(f"| one shard: word updates | {updates:.3g} ({rate:.3g} per second) |")
    print(f"| one shard: ring buffers (forecast) | {human(ring)} |")
    print(f"| worker peak RSS after its shards | {human(peak)} |")
    print(f"| assembly (inverse transforms, all primes) | {assembly:.2f} s |")
    print()
    print(f"| projection: {args.nodes} nodes x {args.cores} cores x {human(node_memory)} | "
          f"value |")
    print("|---|---|")
    print(f"| shards in flight per node | {in_flight_node} (memory allows {fit}) |")
    print(f"| waves of shards | {waves} |")
    print(f"| wall time | {projected / 60:.1f} min (first sweep {first / 60:.1f} min + "
          f"{waves} x {shard_s:.1f} s + assembly {assembly:.1f} s) |")
    print(f"| memory per worker | {human(per_shard_private)} private + "
          f"{human(shared)} shared per node |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
