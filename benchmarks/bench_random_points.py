"""Exact random play: length windows against evaluation points, and the largest n that fits.

Two parts, model "moves", two threads, every measurement in a fresh child process (so that
its peak resident memory, `ru_maxrss`, is its own):

table   Full runs of `zeckenum.random_play` (the windowed route) and
        `randomplay.points.random_play_points` with a few points per shard, at --n (default
        80 and 120), one after the other in the same run.  Columns: n, route, shards,
        seconds (the whole run: first sweep, exact sweep, CRT), word updates (windows: one
        per kept move and source length, `cluster.random_tasks.law_updates_per_prime`
        times the primes; points: the kernels' own count, finishing included), word
        updates per second of the exact sweep, peak bytes (measured), the forecast, and the
        time ratio against the windowed route of the same n.  Both laws are checked equal.

probe   For --probe-n (default 150, 180, 200): the first sweep in full (its seconds and the
        forecast/measured memory), then two shards of each route run at once in two threads
        (windowed: two blocks of LAW_PRIMES_PER_BLOCK primes; points: two primes at all N
        points), timed by the wall clock and by each thread's CPU time.  Every shard of a
        route does the same work (one prime's sweep), so a route's exact sweep on two
        threads lasts ceil(shards / 2) times a pair's seconds.  "Loaded wall" uses the
        pair's wall time on the shared machine as measured; "idle 2 cores" the first
        sweep's CPU seconds plus ceil(shards / 2) times the larger thread CPU time of the
        pair (what two free cores would take; the load of other users inflates wall times
        several-fold, CPU times much less).  Peak memory is the run's own forecast (first
        sweep + two shards).  A power law fitted to the probed n (least squares on log
        seconds, log bytes against log n) gives the largest n under --budget seconds and
        --memory bytes per route (`fit`, also printed by `probe`).

    python benchmarks/bench_random_points.py table --n 80 120 --points-per-shard 0 64 16
    python benchmarks/bench_random_points.py probe --probe-n 150 180 --save rows.jsonl
    python benchmarks/bench_random_points.py probe --probe-n 200 --save rows.jsonl
    python benchmarks/bench_random_points.py fit rows.jsonl

(--points-per-shard 0 means all N points in one shard per prime.)  The machine is shared:
the `uptime` load is printed beside the figures.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import subprocess
import sys
import time

import numpy as np


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"load average {one:.2f} {five:.2f} {fifteen:.2f}"


def _peak() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def child_full(n: int, route: str, per: int) -> dict:
    """One full run in this process: seconds, word updates, peak bytes, law digest."""
    import zeckenum
    from zeckenum.cluster.random_tasks import law_updates_per_prime
    from zeckenum.randomplay.points import random_play_points
    from zeckenum.randomplay.skeleton import random_skeleton, random_space
    from zeckenum.rules.catalogue import get_rules

    # compile / load the kernels outside the timing
    zeckenum.random_play(8, threads=2)
    random_play_points(8, threads=2, points_per_shard=2)
    base = _peak()
    t0 = time.perf_counter()
    if route == "windows":
        res = zeckenum.random_play(n, threads=2)
    else:
        res = random_play_points(n, threads=2, points_per_shard=per or None)
    sec = time.perf_counter() - t0
    peak = max(_peak(), base)
    s = res.stats
    if route == "windows":
        skel = random_skeleton(random_space(get_rules("standard").instantiate(n), "moves",
                                            2**62, "bench"), "moves")
        updates = law_updates_per_prime(skel) * (len(res.primes) + 1)
        shards = -(-(len(res.primes) + 1) // 8)
    else:
        updates = s["word_updates"]
        shards = s["shards"]
    digest = hash(tuple(sorted(res.length_probability.items())))
    return {"n": n, "route": route, "per": per, "shards": shards, "seconds": sec,
            "exact_s": s["exact_sweep_s"], "updates": updates, "peak": peak,
            "forecast": s["forecast_peak_bytes"], "digest": digest,
            "points": s.get("points")}


def child_probe(n: int) -> dict:
    """First sweep of n, then a timed pair of shards of each route (see the docstring)."""
    from zeckenum.core.blocks import run_blocks
    from zeckenum.core.modular import mul_primes_exceeding
    from zeckenum.core.ntt import ntt_primes, ntt_primes_for_bits, root_of_order
    from zeckenum.randomplay.exact import (
        LAW_PRIMES_PER_BLOCK,
        law_words_per_prime,
        random_law_residues,
    )
    from zeckenum.randomplay.points import law_order, law_points_words, random_law_points
    from zeckenum.randomplay.skeleton import (
        random_skeleton,
        random_space,
        skeleton_bytes_bound,
        skeleton_nbytes,
    )
    from zeckenum.rules.catalogue import get_rules

    small = random_skeleton(random_space(get_rules("standard").instantiate(8), "moves",
                                         2**62, "bench"), "moves")
    random_law_residues(small, mul_primes_exceeding(2)[0][:1], True)
    random_law_points(small, ntt_primes(2, 1)[0], [1, 2], True)
    t0, c0 = time.perf_counter(), time.process_time()
    space = random_space(get_rules("standard").instantiate(n), "moves", 2**62, "bench",
                         threads=2)
    skel = random_skeleton(space, "moves", threads=2)
    first_s = time.perf_counter() - t0
    first_cpu = time.process_time() - c0
    first_peak = _peak()
    first_bytes = max(skeleton_bytes_bound(space, "moves", True, 2), skeleton_nbytes(skel))
    # windowed: blocks of LAW_PRIMES_PER_BLOCK primes
    wp, wcheck = mul_primes_exceeding(skel.denominator)
    w_all = [*wp, wcheck]
    w_blocks = -(-len(w_all) // LAW_PRIMES_PER_BLOCK)
    extra = 8 * (max(skel.max_weight, 1) + 1) + 8 * (skel.longest + 3)
    w_block_bytes = LAW_PRIMES_PER_BLOCK * (8 * law_words_per_prime(skel) + extra)
    pair = [w_all[:LAW_PRIMES_PER_BLOCK], w_all[LAW_PRIMES_PER_BLOCK:2 * LAW_PRIMES_PER_BLOCK]]
    def timed(fn):  # noqa: ANN001, ANN202 - (result, CPU seconds of this thread)
        def run(arg):  # noqa: ANN001, ANN202
            c = time.thread_time()
            out = fn(arg)
            return out, time.thread_time() - c
        return run

    t1 = time.perf_counter()
    w_cpu = max(c for _o, c in run_blocks(
        pair, timed(lambda b: random_law_residues(skel, b, True)), 2))
    w_pair = time.perf_counter() - t1
    w_peak = _peak()
    # points: one prime at all N points per shard
    order = law_order(skel.shortest, skel.longest)
    pp, pcheck = ntt_primes_for_bits(skel.denominator.bit_length(), order)
    p_all = [*pp, pcheck]
    p_shard_bytes = 8 * law_points_words(skel, order)

    def one(q: int) -> int:
        w = root_of_order(q, order)
        return random_law_points(skel, q, [pow(w, k, q) for k in range(order)], True)[1]

    t2 = time.perf_counter()
    done = run_blocks(p_all[:2], timed(one), 2)
    p_pair = time.perf_counter() - t2
    upd = [u for u, _c in done]
    p_cpu = max(c for _u, c in done)
    return {
        "n": n, "states": skel.states, "transitions": skel.transitions,
        "shortest": skel.shortest, "longest": skel.longest, "points": order,
        "denominator_bits": skel.denominator.bit_length(),
        "first_s": first_s, "first_cpu": first_cpu, "first_peak": first_peak,
        "first_forecast": first_bytes, "w_pair_cpu": w_cpu, "p_pair_cpu": p_cpu,
        "w_idle_s": first_cpu + math.ceil(w_blocks / 2) * w_cpu,
        "p_idle_s": first_cpu + math.ceil(len(p_all) / 2) * p_cpu,
        "w_primes": len(w_all), "w_shards": w_blocks, "w_pair_s": w_pair,
        "w_forecast": first_bytes + 2 * w_block_bytes, "w_probe_peak": w_peak,
        "w_total_s": first_s + math.ceil(w_blocks / 2) * w_pair,
        "p_primes": len(p_all), "p_shards": len(p_all), "p_pair_s": p_pair,
        "p_updates_per_shard": int(upd[0]),
        "p_forecast": first_bytes + 2 * p_shard_bytes, "p_probe_peak": _peak(),
        "p_total_s": first_s + math.ceil(len(p_all) / 2) * p_pair,
        "load": _load(),
    }


def _run_child(args: list[str]) -> dict:
    out = subprocess.run([sys.executable, __file__, "child", *args], check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def table(ns: list[int], pers: list[int]) -> None:
    print(f"# {_load()}")
    print("| n | route | shards | seconds | word updates | updates/s | peak | forecast "
          "| time / windows |")
    print("|---|---|---|---|---|---|---|---|---|")
    for n in ns:
        ref = _run_child(["full", str(n), "windows", "0"])
        rows = [ref] + [_run_child(["full", str(n), "points", str(k)]) for k in pers]
        for r in rows:
            if r["digest"] != ref["digest"]:
                raise SystemExit(f"n = {n}: the routes disagree")
            name = "windows" if r["route"] == "windows" else (
                f"points K={r['per'] or 'all'} (N={r['points']})")
            print(f"| {n} | {name} | {r['shards']} | {r['seconds']:.2f} | {r['updates']:.3g} "
                  f"| {r['updates'] / max(r['exact_s'], 1e-9):.3g} | "
                  f"{r['peak'] / 2**20:.0f} MiB | {r['forecast'] / 2**20:.0f} MiB | "
                  f"{r['seconds'] / ref['seconds']:.2f} |")
    print(f"# {_load()}")


def _fit(ns: list[int], ys: list[float]) -> tuple[float, float]:
    """(a, b) of y = a * n**b by least squares on the logs."""
    b, loga = np.polyfit(np.log(ns), np.log(ys), 1)
    return float(np.exp(loga)), float(b)


def probe(ns: list[int], save: str | None) -> list[dict]:
    """Run the probe children for `ns`; append their rows to `save` (JSON lines)."""
    rows = [_run_child(["probe", str(n)]) for n in ns]
    if save:
        with open(save, "a", encoding="utf-8") as fh:
            for r in rows:
                fh.write(json.dumps(r) + "\n")
    return rows


def fit(rows: list[dict], budget: float, memory: float) -> None:
    """The probe table and, per route, the power laws and the largest n within budget."""
    rows = sorted({r["n"]: r for r in rows}.values(), key=lambda r: r["n"])
    ns = [r["n"] for r in rows]
    print("| n | states | N | primes | first sweep s (wall / CPU) | shard pair s, wall "
          "(win / pts) | shard pair CPU s (win / pts) | total s, loaded wall (win / pts) | "
          "total s, idle 2 cores (win / pts) | forecast peak (win / pts) | measured peak "
          "| load |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['n']} | {r['states']:,} | {r['points']} | {r['w_primes']} | "
              f"{r['first_s']:.1f} / {r['first_cpu']:.1f} | {r['w_pair_s']:.1f} / "
              f"{r['p_pair_s']:.1f} | {r['w_pair_cpu']:.1f} / {r['p_pair_cpu']:.1f} | "
              f"{r['w_total_s']:.0f} / {r['p_total_s']:.0f} | "
              f"{r['w_idle_s']:.0f} / {r['p_idle_s']:.0f} | "
              f"{r['w_forecast'] / 2**30:.2f} / {r['p_forecast'] / 2**30:.2f} GiB | "
              f"{r['p_probe_peak'] / 2**30:.2f} GiB | {r['load']} |")
    if len(rows) < 2:
        return
    for route in ("w", "p"):
        ta, tb = _fit(ns, [r[f"{route}_idle_s"] for r in rows])
        ma, mb = _fit(ns, [r[f"{route}_forecast"] for r in rows])
        n_time = (budget / ta) ** (1 / tb)
        n_mem = (memory / ma) ** (1 / mb)
        name = "windows" if route == "w" else "points"
        print(f"{name}: idle time ~ {ta:.3g} n^{tb:.2f} s, peak ~ {ma:.3g} n^{mb:.2f} B; "
              f"largest n within {budget:.0f} s: {n_time:.0f}; within "
              f"{memory / 2**30:.1f} GiB: {n_mem:.0f}; both: {min(n_time, n_mem):.0f}")


def main() -> int:
    if len(sys.argv) > 1 and sys.argv[1] == "child":
        kind = sys.argv[2]
        if kind == "full":
            out = child_full(int(sys.argv[3]), sys.argv[4], int(sys.argv[5]))
        else:
            out = child_probe(int(sys.argv[3]))
        print(json.dumps(out))
        return 0
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="what", required=True)
    t = sub.add_parser("table")
    t.add_argument("--n", type=int, nargs="+", default=[80, 120])
    t.add_argument("--points-per-shard", type=int, nargs="+", default=[0, 64, 16])
    p = sub.add_parser("probe")
    p.add_argument("--probe-n", type=int, nargs="+", default=[150, 180, 200])
    p.add_argument("--save", default=None, help="append the rows to this JSON-lines file")
    f = sub.add_parser("fit")
    f.add_argument("rows", help="a JSON-lines file written by probe --save")
    for q in (p, f):
        q.add_argument("--budget", type=float, default=1800.0)
        q.add_argument("--memory", type=float, default=8 * 2**30)
    args = ap.parse_args()
    if args.what == "table":
        table(args.n, args.points_per_shard)
    elif args.what == "probe":
        fit(probe(args.probe_n, args.save), args.budget, args.memory)
    else:
        with open(args.rows, encoding="utf-8") as fh:
            fit([json.loads(line) for line in fh if line.strip()], args.budget, args.memory)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
