"""Benchmark of random play: engine modes against a plain-Python Fraction baseline.

Each task runs in a fresh subprocess; the time is measured inside the child (imports and
compilation excluded), both wall-clock and CPU (user + system of all the child's threads,
from resource.getrusage): the machine may be shared, and CPU seconds are the steadier
figure when other jobs compete for the cores.  The baseline is the memoised Fraction
recursion of tests/support/fraction_bruteforce.py (plain Python, no engine code), run with a time
limit; when it does not finish at the target n, the ratio is computed at the largest n it
finishes (printed as such).

    python benchmarks/bench_random.py [--quick] [--baseline-limit SECONDS]

Targets (2 cores): exact win probabilities P=2 at n=200 <= 60 s; exact length law at n=120
<= 120 s; float law at n=250 <= 60 s; 10**6 simulated games at n=200 <= 60 s.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import click

ROOT = Path(__file__).resolve().parent.parent

CHILD = r"""
import json, resource, sys, time
def cpu():
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime
sys.setrecursionlimit(100000)
task, n = sys.argv[1], int(sys.argv[2])
if task == "baseline":
    sys.path.insert(0, {tests!r})
    import threading
    threading.stack_size(512 * 2**20)
    from fraction_bruteforce import length_law
    box = {{}}
    def run():
        t = time.perf_counter(); c = cpu(); box["law"] = length_law(n, "moves")
        box["s"] = time.perf_counter() - t; box["cpu"] = cpu() - c
    th = threading.Thread(target=run); th.start(); th.join()
    print(json.dumps({{"s": box["s"], "cpu": box["cpu"]}}))
    sys.exit(0)
from zeckenum.randomplay.exact import random_play
from zeckenum.randomplay.floating import float_play
from zeckenum.randomplay.simulate import simulate
random_play(5); random_play(5, winners_only=True); float_play(5); simulate(5, 10)  # compile
t = time.perf_counter()
c = cpu()
if task == "wins":
    random_play(n, winners_only=True)
elif task == "exact":
    random_play(n)
elif task == "float":
    float_play(n)
elif task == "simulate":
    simulate(n, int(sys.argv[3]), seed=1)
print(json.dumps({{"s": time.perf_counter() - t, "cpu": cpu() - c}}))
"""


def run_child(task: str, n: int, limit: float, *extra: str) -> dict | None:
    """{"s": wall seconds, "cpu": CPU seconds} of one task in a fresh process (None on
    timeout)."""
    code = CHILD.format(tests=str(ROOT / "tests"))
    try:
        out = subprocess.run(
            [sys.executable, "-c", code, task, str(n), *extra], capture_output=True,
            text=True, timeout=limit, check=True,
        )
    except subprocess.TimeoutExpired:
        return None
    return json.loads(out.stdout.strip().splitlines()[-1])


@click.command()
@click.option("--quick", is_flag=True, help="Smaller n (a smoke run).")
@click.option("--baseline-limit", default=120.0, show_default=True,
              help="Seconds the baseline may take per n.")
def main(quick: bool, baseline_limit: float) -> None:
    rows = [
        ("exact wins, P=2", "wins", 60 if quick else 200, 60.0, ()),
        ("exact length law", "exact", 50 if quick else 120, 120.0, ()),
        ("float length law", "float", 80 if quick else 250, 60.0, ()),
        ("simulate 10^6 games", "simulate", 50 if quick else 200, 60.0,
         ("10000" if quick else "1000000",)),
    ]
    print(f"{'task':22} {'n':>5} {'wall s':>8} {'cpu s':>8} {'target s':>9} "
          f"{'baseline n':>10} {'base wall':>9} {'base cpu':>9} {'eng wall@bn':>11} "
          f"{'eng cpu@bn':>10} {'ratio wall':>10} {'ratio cpu':>9}")
    base_cache: dict[int, dict | None] = {}

    def fmt(x: dict | None, key: str, width: int, prec: int = 2) -> str:
        return f"{x[key]:{width}.{prec}f}" if x is not None else f"{'-':>{width}}"

    for label, task, n, target, extra in rows:
        eng = run_child(task, n, 20 * target, *extra)
        # baseline: the same n if it finishes, else the largest of a few smaller n
        bn, bs = None, None
        for m in [n, 80, 60, 40, 30]:
            if m > n:
                continue
            if m not in base_cache:
                base_cache[m] = run_child("baseline", m, baseline_limit)
            if base_cache[m] is not None:
                bn, bs = m, base_cache[m]
                break
        eng_at_bn = eng if bn == n else (run_child(task, bn, 20 * target, *extra)
                                         if bn else None)
        ratio_w = (f"{bs['s'] / eng_at_bn['s']:10.1f}" if bs and eng_at_bn
                   else f"{'-':>10}")
        ratio_c = (f"{bs['cpu'] / eng_at_bn['cpu']:9.1f}" if bs and eng_at_bn
                   else f"{'-':>9}")
        print(f"{label:22} {n:5d} {fmt(eng, 's', 8)} {fmt(eng, 'cpu', 8)} {target:9.0f} "
              f"{bn if bn else '-':>10} {fmt(bs, 's', 9)} {fmt(bs, 'cpu', 9)} "
              f"{fmt(eng_at_bn, 's', 11, 3)} {fmt(eng_at_bn, 'cpu', 10, 3)} {ratio_w} {ratio_c}")
    print("ratio = baseline s / engine s at the baseline's n (Fraction recursion, model "
          "'moves'; it computes the full length law, so it is the same work as every task "
          "except simulate, where it is only a reference point)")


if __name__ == "__main__":
    main()
