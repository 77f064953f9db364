"""Speed and memory of `zeckenum.optimal.solve.solve` against a plain-Python memoised minimax,
in one run.

For each n, `zeckenum.optimal.solve(n)` (two players: the outcome class of every state) runs in a
fresh subprocess; the baseline - a memoised recursion over tuples of token counts, plain
Python, no numpy and no zeckenum - runs in another one at n = --baseline-n (default 80).
Time is the solving call measured inside the child (imports excluded; numba's cache is
warmed by a small solve first), as wall time and as the child's CPU time (the solver is
single-threaded, so cpu s close to solve s means the machine was not shared); peak memory
is the child's peak resident set size from os.wait4 (imports included; the footprint after
imports is printed too).  Both sides must agree on the winner and the number of
P-positions at the baseline's n.

Run from the repository root:

    python benchmarks/bench_solve.py                 # n = 80 200 300
    python benchmarks/bench_solve.py --n 80 300 400  # the full targets (about 5 minutes)
    python benchmarks/bench_solve.py --quick         # n = 40 80

Targets (2-core, 24 GB machine): n = 300 (about 75 million states) in <= 120 s; n = 400 in
<= 15 minutes within 8 GiB peak.  Exit status 0, or 1 if a run failed or disagreed.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGETS = {300: (120.0, None), 400: (900.0, 8 * 1024.0)}  # n -> (seconds, MiB or None)

ENGINE_CHILD = """
import json, resource, sys, time
from zeckenum.optimal.solve import solve
n, players, path = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
solve(12, players=players)  # load the numba kernels from the cache
rss_imports = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
t0, c0 = time.perf_counter(), time.process_time()
res = solve(n, players=players)
seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
with open(path, "w") as fh:
    json.dump({"seconds": seconds, "cpu_seconds": cpu, "kernel_seconds": res.seconds,
               "states": res.states,
               "winner": res.winner, "p_positions": res.p_positions,
               "moves_examined": res.moves_examined, "rss_imports": rss_imports,
               "bits_bytes": res.peak_bits_bytes}, fh)
"""

BASELINE_CHILD = r'''
import json, resource, sys, threading, time
n, path = int(sys.argv[1]), sys.argv[2]
sys.setrecursionlimit(1_000_000)
threading.stack_size(512 * 1024 * 1024)

def bins(n):
    v = [1, 2]
    while v[-1] + v[-2] <= n:
        v.append(v[-1] + v[-2])
    return [x for x in v if x <= n]

K = len(bins(n))
MOVES = [{0: -2, 1: 1}]                                    # 2F1 -> F2
MOVES += [{k - 2: -1, k - 1: -1, k: 1} for k in range(2, K)]  # F(k-1)+F(k) -> F(k+1)
MOVES += [{1: -2, 0: 1, 2: 1}] if K >= 3 else []             # 2F2 -> F1 + F3
MOVES += [{k - 1: -2, k - 3: 1, k: 1} for k in range(3, K)]   # 2F(k) -> F(k-2) + F(k+1)
memo = {}

def wins(s):
    r = memo.get(s)
    if r is None:
        r = False
        for mv in MOVES:
            t = list(s)
            for b, d in mv.items():
                t[b] += d
            if min(t) >= 0 and not wins(tuple(t)):
                r = True
                break
        memo[s] = r
    return r

def everything():
    # classify every state of value n: walk all states from the start, then ask each
    start = (n,) + (0,) * (K - 1)
    seen, stack = {start}, [start]
    while stack:
        s = stack.pop()
        for mv in MOVES:
            t = list(s)
            for b, d in mv.items():
                t[b] += d
            t = tuple(t)
            if min(t) >= 0 and t not in seen:
                seen.add(t)
                stack.append(t)
    p = sum(not wins(s) for s in seen)
    out.update(states=len(seen), p_positions=p, winner=1 if wins(start) else 2)

out = {}
rss_imports = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
t0 = time.perf_counter()
th = threading.Thread(target=everything)
th.start()
th.join()
out["seconds"] = time.perf_counter() - t0
out["rss_imports"] = rss_imports
with open(path, "w") as fh:
    json.dump(out, fh)
'''


def run_child(code: str, args: list[str], timeout: float) -> tuple[dict | None, float]:
    """Run `code` in a fresh interpreter; (its JSON output or None, peak RSS in MiB)."""
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "out.json"
        proc = subprocess.Popen([sys.executable, "-c", code, *args, str(out)])
        deadline = time.monotonic() + timeout
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                break
            if time.monotonic() > deadline:
                proc.kill()
                os.wait4(proc.pid, 0)
                return None, 0.0
            time.sleep(0.2)
        proc.returncode = os.waitstatus_to_exitcode(status)
        peak = usage.ru_maxrss / 1024
        if proc.returncode != 0 or not out.exists():
            return None, peak
        return json.loads(out.read_text()), peak


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", default=[80, 200, 300])
    ap.add_argument("--quick", action="store_true", help="n = 40 80 only")
    ap.add_argument("--baseline-n", type=int, default=80)
    ap.add_argument("--players", type=int, default=2)
    ap.add_argument("--timeout", type=float, default=1800.0)
    args = ap.parse_args()
    sizes = [40, 80] if args.quick else args.n

    failed = False
    base, base_peak = run_child(BASELINE_CHILD, [str(args.baseline_n)], args.timeout)
    if base is None:
        print(f"baseline at n={args.baseline_n} failed or timed out")
        return 1
    base_rate = base["states"] / base["seconds"]

    header = (f"{'n':>5} | {'states':>12} | {'solve s':>9} | {'cpu s':>9} | "
              f"{'states/s':>12} | {'peak MiB':>9} | {'bits KiB':>9} | {'x baseline':>10}")
    print(f"players = {args.players}")
    print(header)
    print("-" * len(header))
    rows = {}
    for n in sizes:
        res, peak = run_child(ENGINE_CHILD, [str(n), str(args.players)], args.timeout)
        if res is None:
            print(f"{n:>5} | run failed or timed out")
            failed = True
            continue
        rate = res["states"] / res["seconds"]
        rows[n] = (res, peak)
        print(f"{n:>5} | {res['states']:>12,} | {res['seconds']:>9.2f} | "
              f"{res['cpu_seconds']:>9.2f} | {rate:>12,.0f} | "
              f"{peak:>9.0f} | {res['bits_bytes'] / 1024:>9.1f} | {rate / base_rate:>10.1f}")
    print("-" * len(header))
    print(f"baseline (plain-Python memoised minimax) n={args.baseline_n}: {base['states']:,} "
          f"states in {base['seconds']:.2f} s = {base_rate:,.0f} states/s, peak "
          f"{base_peak:.0f} MiB")
    print("states/s = states / wall s; x baseline = that rate / the baseline's states/s")
    if rows:
        imp = min(r["rss_imports"] for r, _ in rows.values())
        print(f"engine RSS after imports: {imp:.0f} MiB (included in peak MiB)")
    if args.baseline_n in rows and args.players == 2:
        res, _ = rows[args.baseline_n]
        same = (res["winner"], res["p_positions"]) == (base["winner"], base["p_positions"])
        ratio = base["seconds"] / res["seconds"]
        print(f"n={args.baseline_n}: engine {ratio:,.0f}x faster than the baseline; "
              f"results {'agree' if same else 'DISAGREE'} (winner {res['winner']}, "
              f"{res['p_positions']:,} P-positions)")
        failed |= not same
    for n, (secs, mib) in TARGETS.items():
        if n not in rows or args.players != 2:  # the targets are for two players
            continue
        res, peak = rows[n]
        ok = res["seconds"] <= secs and (mib is None or peak <= mib)
        want = f"<= {secs:.0f} s" + (f", <= {mib:.0f} MiB" if mib else "")
        print(f"target n={n}: {want}: {res['seconds']:.1f} s, {peak:.0f} MiB -> "
              f"{'met' if ok else 'NOT MET'}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
