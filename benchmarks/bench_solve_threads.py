"""Optimal play on several threads: seconds, peak memory and the speed-up of 2 threads.

Every (n, threads) runs `zeckenum solve N --threads K --json` in a fresh subprocess (so the
peak resident memory is that run's own, read from `os.wait4`), `--repeat` times;
the table keeps the best time and its peak, the machine's 1-minute load average
(`os.getloadavg`) just before that run, and the ratio (1-thread seconds) / (K-thread
seconds), both measured in this run.  All runs of one n must agree on the winner, the
P-positions and the moves examined (checked).  The machine may be shared: read the load
next to each figure.

    python benchmarks/bench_solve_threads.py --n 300 400 --threads 1 2
    python benchmarks/bench_solve_threads.py --n 500 --threads 2 --repeat 1

Measured on the shared 2-core machine (2026-12-03; other jobs running, 1-minute load
beside each figure): n = 300: 1 thread 14.2 s (load 2.8), 2 threads 22.3 s (load 2.7),
ratio 0.63; again 14.2 s / 16.3 s at load 5, ratio 0.87; in one idle moment (load 0)
13.1 s / 9.7 s in-process, ratio 1.35.  n = 400: 103.1 s (load 3.4) / 63.7 s (load 1.5),
ratio 1.62; again 106.8 s / 112.0 s at load 5, ratio 0.95.  n = 500 (3,175,402,700
states), 2 threads: 558 s, peak RSS 282 MiB (load 1.1 at the start, up to 6.7 during).
Peak RSS: 172-189 MiB at n = 300 and 400, whatever the threads.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time


def run_once(n: int, threads: int) -> tuple[float, int, float, dict]:
    """(seconds, peak RSS bytes, load before, JSON result) of one child run; the peak is
    that child's own (`os.wait4`)."""
    load = os.getloadavg()[0]
    t0 = time.perf_counter()
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        proc = subprocess.Popen(
            [sys.executable, "-m", "zeckenum", "solve", str(n), "--threads", str(threads),
             "--json"], stdout=out, stderr=err, text=True)
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
        seconds = time.perf_counter() - t0
        out.seek(0)
        err.seek(0)
        if proc.returncode != 0:
            raise SystemExit(f"n = {n}, threads = {threads}: {err.read().strip()}")
        return seconds, usage.ru_maxrss * 1024, load, json.loads(out.read())


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", default=[300, 400])
    ap.add_argument("--threads", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--repeat", type=int, default=2, help="runs per configuration (best kept)")
    args = ap.parse_args()
    subprocess.run([sys.executable, "-m", "zeckenum", "solve", "60", "--threads", "2"],
                   capture_output=True, check=True)  # compile / load the kernels once
    print("| n | threads | seconds (best) | solve seconds | peak RSS | load (1 min) | "
          "1-thread / this |")
    print("|---|---|---|---|---|---|---|")
    for n in args.n:
        best: dict[int, tuple[float, int, float, dict]] = {}
        for _ in range(args.repeat):
            for k in args.threads:  # alternate the configurations
                got = run_once(n, k)
                if k not in best or got[0] < best[k][0]:
                    best[k] = got
        keys = {(r["winner"], r["p_positions"], r["moves_examined"]) for *_, r in best.values()}
        if len(keys) != 1:
            raise SystemExit(f"n = {n}: the thread counts disagree: {keys}")
        one = best.get(1)
        for k in args.threads:
            seconds, peak, load, res = best[k]
            ratio = f"{one[0] / seconds:.2f}" if one is not None else "-"
            print(f"| {n} | {k} | {seconds:.1f} | {res['seconds']:.1f} | "
                  f"{peak / 2**20:.0f} MiB | {load:.2f} | {ratio} |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
