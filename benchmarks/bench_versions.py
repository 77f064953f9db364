"""Time the same jobs under two installations of zeckenum, back to back, and print the ratio.

For a change to a hot path: install the code before the change in one environment (for
example a git worktree of the old commit, `pip install -e` into its own venv) and run

    python benchmarks/bench_versions.py --baseline-python /path/to/old/venv/bin/python

The current interpreter is the candidate.  Every job runs in a fresh subprocess of each
interpreter, alternating baseline and candidate `--repeat` times, so drift of a shared
machine hits both; the kernels are compiled (or loaded from numba's cache) by a tiny run
of the same job in the child before the timed call, and only the call is timed.  The
table shows the best and the median of each side and the ratio of the medians
(candidate / baseline: below 1 is faster); the spread of the repeats is the noise to read
the ratio against.  Results of the two sides are compared too: a job whose exact answer
differs between the versions is reported and the script exits 1.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys

JOBS: dict[str, tuple[str, str]] = {
    # name: (warm-up call, timed call); each returns something whose repr is the answer
    "count n=200": ("count(12)", "count(200).length_counts"),
    "random law n=120": ("random_play(12)", "random_play(120).length_probability"),
    "random winners n=200": ("random_play(12, winners_only=True)",
                             "random_play(200, winners_only=True).win_probability"),
    "solve n=300": ("solve(12)", "(lambda r: (r.winner, r.p_positions))(solve(300))"),
}

CHILD = """
import hashlib, json, time
from zeckenum import count
try:  # the public API of this version, else the module paths of a version before it
    from zeckenum import random_play, solve
except ImportError:
    try:
        from zeckenum.randomplay.exact import random_play
        from zeckenum.optimal.solve import solve
    except ImportError:
        from zeckenum.randomplay import random_play
        from zeckenum.solve import solve
{warm}
t0 = time.perf_counter()
value = {timed}
dt = time.perf_counter() - t0
print(json.dumps({{"seconds": dt,
                   "answer": hashlib.sha256(repr(value).encode()).hexdigest()[:16]}}))
"""


def run(python: str, job: str, timeout: float) -> dict:
    warm, timed = JOBS[job]
    code = CHILD.format(warm=warm, timed=timed)
    proc = subprocess.run([python, "-c", code], capture_output=True, text=True,
                          timeout=timeout, cwd="/")
    if proc.returncode != 0:
        raise SystemExit(f"{job} failed under {python}:\n{proc.stderr[-2000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline-python", required=True)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--only", nargs="*", default=None, help="job names (substrings)")
    ap.add_argument("--timeout", type=float, default=1800.0)
    args = ap.parse_args()
    jobs = [j for j in JOBS if not args.only or any(o in j for o in args.only)]
    print(f"baseline  {args.baseline_python}\ncandidate {sys.executable}\n")
    print("| job | baseline best s | baseline median s | candidate best s | "
          "candidate median s | ratio (median) | same answer |")
    print("|---|---|---|---|---|---|---|")
    bad = 0
    for job in jobs:
        base, cand = [], []
        answers = set()
        for _ in range(args.repeat):
            for side, py in ((base, args.baseline_python), (cand, sys.executable)):
                r = run(py, job, args.timeout)
                side.append(r["seconds"])
                answers.add(r["answer"])
        same = len(answers) == 1
        bad += not same
        mb, mc = statistics.median(base), statistics.median(cand)
        print(f"| {job} | {min(base):.2f} | {mb:.2f} | {min(cand):.2f} | {mc:.2f} | "
              f"{mc / mb:.3f} | {'yes' if same else 'NO'} |", flush=True)
    return 1 if bad else 0


if __name__ == "__main__":
    raise SystemExit(main())
