"""The `plan` command's forecast: size, shards, memory and time of a count before running it.

Exact parts: the states of the state space (`StateSpace.total_states()`), and from the
first sweep (cheap next to the exact sweep) the reachable states, transitions, the primes,
and the exact sweep's word updates (`tasks.updates_per_prime` times the number of primes,
equal to `stats["word_updates"]` of the run).  Calibrated part: the rate of word updates
per second, measured by a probe count on this machine (`probe_n`, one thread, in-process);
the forecast wall time on K workers is the first sweep (every worker runs it, in parallel)
plus the busiest worker's shards divided by that rate.
"""

from __future__ import annotations

import math
import time

from ..count import count
from ..memory import human
from ..rules import RuleSet, get_rules
from .plan import make_plan, worker_bytes
from .tasks import first_sweep

PROBE_N = 90
"""Probe size: about a second on one core, long enough rows to measure the steady rate."""


def probe_rate(probe_n: int = PROBE_N, rules: str | RuleSet = "standard") -> dict:
    """Word updates per second of the exact sweep on one thread of this machine."""
    count(5, rules, threads=1)  # compile / load kernels outside the measurement
    t0 = time.perf_counter()
    r = count(probe_n, rules, threads=1)
    wall = time.perf_counter() - t0
    exact = max(float(r.stats["seconds_exact"]), 1e-6)
    return {
        "probe_n": probe_n,
        "probe_seconds": round(wall, 3),
        "updates_per_second": r.stats["word_updates"] / exact,
    }


def predict_count(
    n: int, rules: str | RuleSet = "standard", workers: int = 1, *,
    blocks: int | None = None, probe_n: int = PROBE_N,
) -> dict:
    """Forecast of `run_count(n, workers=workers)`: exact sizes, shards, memory, time."""
    ruleset = get_rules(rules)
    rate = probe_rate(probe_n, ruleset)
    space, windows, facts = first_sweep(ruleset, n)
    plan = make_plan(facts, 0, workers, blocks)
    nprimes = len(plan.all_primes)
    per_worker = math.ceil(len(plan.blocks) / workers)
    biggest = max(len(b) for b in plan.blocks)
    busiest_updates = facts.updates_one * min(nprimes, per_worker * biggest)
    seconds = facts.seconds_windows + busiest_updates / rate["updates_per_second"]
    one_worker = facts.seconds_windows + facts.updates_one * nprimes / rate[
        "updates_per_second"]
    return {
        "rules": ruleset.name,
        "n": n,
        "states_in_space": space.total_states(),
        "reachable_states": facts.states,
        "transitions": facts.transitions,
        "count_bits": facts.count_bits,
        "primes": nprimes,
        "shards": len(plan.blocks),
        "primes_per_shard": biggest,
        "workers": workers,
        "word_updates": facts.updates_one * nprimes,
        "memory_per_worker_bytes": worker_bytes(facts, plan),
        "memory_per_worker": human(worker_bytes(facts, plan)),
        "seconds_first_sweep": facts.seconds_windows,
        "updates_per_second": round(rate["updates_per_second"]),
        "probe": f"n={rate['probe_n']} in {rate['probe_seconds']} s",
        "predicted_seconds": round(seconds, 1),
        "predicted_seconds_one_worker": round(one_worker, 1),
    }


def format_prediction(p: dict) -> str:
    """The forecast as an aligned text table."""
    rows = [
        ("states (whole space, exact)", f"{p['states_in_space']:,}"),
        ("reachable states (exact)", f"{p['reachable_states']:,}"),
        ("transitions (exact)", f"{p['transitions']:,}"),
        ("size bound", f"{p['count_bits']} bits"),
        ("primes (incl. check prime)", str(p["primes"])),
        ("shards", f"{p['shards']} (up to {p['primes_per_shard']} primes each)"),
        ("word updates (exact)", f"{p['word_updates']:,}"),
        ("memory per worker", p["memory_per_worker"]),
        ("first sweep (measured)", f"{p['seconds_first_sweep']:.2f} s"),
        ("rate (probe " + p["probe"] + ")", f"{p['updates_per_second']:,} updates/s"),
        (f"predicted time, {p['workers']} worker(s)", f"{p['predicted_seconds']:.1f} s"),
        ("predicted time, 1 worker", f"{p['predicted_seconds_one_worker']:.1f} s"),
    ]
    width = max(len(k) for k, _ in rows)
    head = f"zeckenum plan count  rules={p['rules']}  n={p['n']}  workers={p['workers']}"
    return "\n".join([head, ""] + [f"  {k:<{width}}  {v}" for k, v in rows])
