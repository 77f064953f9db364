"""The `plan` command's forecast: size, shards, memory and time of a run before starting it.

Three kinds of run, one forecast each; every forecast has an exact part and a time
calibrated on this machine.

count   (`predict_count`)  Exact: the states of the state space (`StateSpace.total_states()`),
        and from the first sweep (cheap next to the exact sweep) the reachable states,
        transitions, the primes, and the exact sweep's word updates (`counting.route.sweep_updates`
        times the number of primes, equal to `stats["word_updates"]` of the run).  Rate: word
        updates per second of a probe count (`probe_rate`, one thread, in-process).
random  (`predict_random`)  Exact: random play's first sweep (`random_tasks.random_facts_task`,
        the task that plans the sharded run): reachable states, transitions, the denominator M,
        the primes (`core.modular.mul_primes_exceeding` on M, plus the check prime), the shard plan
        of the random kind (`kinds.random_plan`, the driver's own planner) and the word updates
        per prime (`RandomFacts.updates_one`).  Rate: word updates per second of the same
        shard task on a probe game (`probe_random_rate`, one thread).
solve   (`predict_solve`)  Exact: the states of the space from the rank table (all reachable
        in the standard game; for other rule sets an upper bound, made exact by the
        reachability sweep with `reach=True`), the level ranges of the chain
        (`solve_chain.plan_ranges`) and the peak bit memory (`solve_peak_bits`).  Rate: states
        walked per second of a probe solve (`probe_solve_rate`, one thread); the in-process
        solve on K threads walks each large layer's critical path (`solve_critical_states`).

The sharded kinds (count, random) forecast the wall time on K workers as the first sweep
(every worker runs it, in parallel) plus the busiest worker's shards divided by the rate.
A chained solve runs its level ranges one after the other, so its forecast does not depend
on the workers.
"""

from __future__ import annotations

import math
import os
import textwrap
import time
from dataclasses import replace

from zeckenum.cluster.count_tasks import Facts, windows_with_facts
from zeckenum.cluster.kinds import random_kind
from zeckenum.cluster.plan import ShardPlan, make_plan, worker_bytes
from zeckenum.cluster.random_tasks import RandomFacts
from zeckenum.cluster.solve_chain import plan_ranges
from zeckenum.core.checks import (
    check_n,
    check_players,
    check_random_args,
    check_threads,
    thread_count,
)
from zeckenum.core.memory import human, resolve_limit
from zeckenum.core.modular import mul_primes, primes_for_bits
from zeckenum.core.ntt import ntt_primes, root_of_order, transform_size
from zeckenum.core.statespace import StateSpace, build_space
from zeckenum.core.sweep import moves_into
from zeckenum.core.text import plural
from zeckenum.counting.count import count, count_space, count_windows, refuse_count
from zeckenum.counting.points import spectrum_points
from zeckenum.counting.route import (
    CountSizes,
    RoutePlan,
    choose_count_route,
    count_sizes,
    refuse_below,
    routed_space,
)
from zeckenum.counting.spectrum import spectrum_residues
from zeckenum.errors import InputError
from zeckenum.optimal.classify import reachable_bits
from zeckenum.optimal.solve import (
    all_layers_bytes,
    needs_reach,
    solve,
    solve_peak_bits,
    solve_space,
    window_bytes,
)
from zeckenum.optimal.waves import block_plan, parallel_layer
from zeckenum.randomplay.exact import refuse_random
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

PROBE_N = 90
"""Probe size of a count: about a second on one core, long enough rows to measure the
steady rate."""
PROBE_RANDOM_N = 100
"""Probe size of random play: a fraction of a second per shard of the length law."""
PROBE_SOLVE_N = 160
"""Probe size of a solve: about 1.2e6 states, a few tenths of a second on one core."""
PROBE_MIN_SECONDS = 0.25
"""A random-play probe repeats its shard until it has run this long (at most
PROBE_MAX_REPEATS times), so a fast shard (winners only) is still timed reliably."""
PROBE_MAX_REPEATS = 50

PROBE_MIN_N = 20
"""Smallest probe n: a smaller game does too little work to time (n = 1 does none)."""
PROBE_MAX_N = 400
"""Largest probe n: a probe is a calibration, meant to take about a second."""


def check_probe(probe_n: object) -> int:
    """A probe's n as an int in PROBE_MIN_N..PROBE_MAX_N, else InputError."""
    if isinstance(probe_n, bool) or not isinstance(probe_n, int) or not (
        PROBE_MIN_N <= probe_n <= PROBE_MAX_N
    ):
        raise InputError(f"the probe's n must be an integer from {PROBE_MIN_N} to "
                         f"{PROBE_MAX_N}, got {probe_n!r}")
    return probe_n


def _rate(work: float, seconds: float, what: str) -> float:
    """work / seconds, or InputError when the probe did no measurable work."""
    if work <= 0 or seconds <= 0:
        raise InputError(f"the probe did no measurable work ({what}); use a larger --probe")
    return work / seconds


SOLVE_NOTE = ("the chain runs one level range at a time: workers do not speed up one n "
              "(they speed up ranges of n, one task per n in `table`)")


def _check_workers(workers: int) -> int:
    if isinstance(workers, bool) or not isinstance(workers, int) or not 1 <= workers <= 10**6:
        raise InputError(f"workers must be an integer from 1 to 1,000,000, got {workers!r}")
    return workers


# ----------------------------------------------------------------------------- count


def probe_rate(probe_n: int = PROBE_N, rules: str | RuleSet = "standard",
               max_memory: int | None = None) -> dict:
    """Word updates per second of the exact sweep on one thread of this machine."""
    check_probe(probe_n)
    count(5, rules, threads=1)  # compile / load kernels outside the measurement
    t0 = time.perf_counter()
    r = count(probe_n, rules, threads=1, max_memory=max_memory)
    wall = time.perf_counter() - t0
    exact = max(float(r.stats["seconds_exact"]), 1e-6)
    return {
        "probe_n": probe_n,
        "probe_seconds": round(wall, 3),
        "updates_per_second": _rate(r.stats["word_updates"], exact, f"count n={probe_n}"),
    }


def shard_forecast(facts: Facts | RandomFacts, plan: ShardPlan, workers: int, rate: dict,
                   ) -> dict:
    """The part of a sharded run's forecast that counts and random play share.

    primes (incl. the check prime), shards and the primes of the largest one, the exact
    word updates (updates per prime x primes), bytes per worker (`plan.worker_bytes`), and
    seconds: the first sweep plus the busiest worker's word updates / rate["updates_per_second"]
    (on `workers` workers and on one).
    """
    nprimes = len(plan.all_primes)
    per_worker = math.ceil(len(plan.blocks) / workers)
    biggest = max(len(b) for b in plan.blocks)
    speed = rate["updates_per_second"]
    busiest_updates = facts.updates_one * min(nprimes, per_worker * biggest)
    seconds = facts.seconds_windows + busiest_updates / speed
    one_worker = facts.seconds_windows + facts.updates_one * nprimes / speed
    memory = worker_bytes(facts, plan)
    return {
        "primes": nprimes,
        "shards": len(plan.blocks),
        "primes_per_shard": biggest,
        "workers": workers,
        "word_updates": facts.updates_one * nprimes,
        "memory_per_worker_bytes": memory,
        "memory_per_worker": human(memory),
        "seconds_first_sweep": facts.seconds_windows,
        "updates_per_second": round(speed),
        "probe": f"n={rate['probe_n']} in {rate['probe_seconds']} s",
        "predicted_seconds": round(seconds, 1),
        "predicted_seconds_one_worker": round(one_worker, 1),
    }


def predict_count(
    n: int, rules: str | RuleSet = "standard", workers: int = 1, *,
    blocks: int | None = None, probe_n: int = PROBE_N, max_memory: int | None = None,
    cores_per_worker: int | None = None,
) -> dict:
    """Forecast of `run_count(n, workers=workers)`: exact sizes, shards, memory, time.

    Runs the first sweep of n, so it is refused first, like the count itself
    (`count.refuse_count`), against `max_memory` (default: what is available).  With
    `max_memory` (per worker) or `cores_per_worker`, the route and shard shape are chosen
    under that memory (`predict_count_route`)."""
    n = check_n(n)
    _check_workers(workers)
    check_probe(probe_n)
    ruleset = get_rules(rules)
    if max_memory is not None or cores_per_worker is not None:
        return predict_count_route(n, ruleset, workers, resolve_limit(max_memory),
                                   cores_per_worker or 1, probe_n)
    refuse_count(n, ruleset, max_memory=max_memory)
    rate = probe_rate(probe_n, ruleset, max_memory)
    space, windows, facts = windows_with_facts(ruleset, n)
    plan = make_plan(facts, 0, workers, blocks)
    return {
        "rules": ruleset.name,
        "n": n,
        "states_in_space": space.total_states(),
        "reachable_states": facts.states,
        "transitions": facts.transitions,
        "count_bits": facts.count_bits,
        **shard_forecast(facts, plan, workers, rate),
    }


def probe_route_rate(route: RoutePlan, probe_n: int = PROBE_N,
                     rules: str | RuleSet = "standard") -> dict:
    """Word updates per second of one shard of `route`'s kind on one thread of this machine,
    and, when the route lists the moves again per shard, the seconds that costs per move.

    The probe game's first sweep (not timed), then one shard of the route's shape on the
    kept moves, repeated until it has run PROBE_MIN_SECONDS: a block of `primes_per_shard`
    primes below 2**62 (`spectrum_residues`) or a block of `points_per_shard` points (at
    most the probe's N) mod one prime (`spectrum_points`); rate = the word updates they
    report / their seconds.  Re-listing (`core.sweep.moves_into` without kept moves) is
    timed over every layer of the probe: seconds per move listed."""
    check_probe(probe_n)
    ruleset = get_rules(rules)
    count(5, ruleset, threads=1)  # compile / load kernels outside the measurement
    count(5, ruleset, threads=1, points_per_shard=1)
    space = count_space(ruleset.instantiate(probe_n), resolve_limit(None))
    windows, _ = count_windows(space, probe_n, resolve_limit(None))
    if route.route == "points":
        order = transform_size(windows.longest - windows.shortest)
        q = ntt_primes(order, 1)[0]
        w = root_of_order(q, order)
        pts = [pow(w, k, q) for k in range(min(route.points_per_shard, order))]

        def shard() -> int:
            return spectrum_points(space, windows, q, pts)[1]
    else:
        block = primes_for_bits(62 * route.primes_per_shard)[0][: route.primes_per_shard]

        def shard() -> int:
            return spectrum_residues(space, windows, block)[1]
    t0 = time.perf_counter()
    updates, spent, repeats = 0, 0.0, 0
    while repeats < PROBE_MAX_REPEATS and (repeats == 0 or spent < PROBE_MIN_SECONDS):
        t1 = time.perf_counter()
        updates += shard()
        spent += time.perf_counter() - t1
        repeats += 1
    relist = 0.0
    if not route.keep_moves:
        bare = replace(windows, incoming=None)
        t1 = time.perf_counter()
        listed = sum(int(moves_into(space, bare, lv)[1].size) for lv in windows.win)
        relist = (time.perf_counter() - t1) / max(1, listed)
    return {
        "probe_n": probe_n,
        "probe_seconds": round(time.perf_counter() - t0, 3),
        "updates_per_second": _rate(updates, max(spent, 1e-6), f"count n={probe_n}"),
        "relist_seconds_per_move": relist,
    }


def route_forecast(sizes: CountSizes, route: RoutePlan, workers: int, cores: int,
                   seconds_first: float, rate: dict) -> dict:
    """Shards, memory and time of a routed count.  Each of `workers` workers holds the first
    sweep's data once and runs `cores` shards at a time; a shard takes its word updates /
    rate["updates_per_second"] (one core's probe rate: the cores are assumed not to slow
    each other down) plus, when the moves are listed again, every move x
    rate["relist_seconds_per_move"].  Time = the first sweep (every worker runs it, in
    parallel) + the busiest core's shards."""
    if route.route == "points":
        per_shard = route.points_per_shard * sizes.point_updates
        shape = {"points": route.points, "points_per_shard": route.points_per_shard}
    else:
        per_shard = route.primes_per_shard * sizes.window_updates
        shape = {"primes_per_shard": route.primes_per_shard}
    speed = rate["updates_per_second"]
    shard_seconds = per_shard / speed + sizes.moves * rate.get("relist_seconds_per_move", 0.0)
    per_core = -(-route.shards // (workers * cores))
    one_worker = -(-route.shards // cores)
    return {
        "route": route.route,
        "keep_moves": route.keep_moves,
        "primes": route.primes,
        "shards": route.shards,
        **shape,
        "memory_per_shard_bytes": route.shard_bytes,
        "memory_per_shard": human(route.shard_bytes),
        "memory_shared_bytes": route.shared_bytes,
        "memory_per_worker_bytes": route.peak_bytes,
        "memory_per_worker": human(route.peak_bytes),
        "word_updates": route.word_updates,
        "word_updates_per_shard": per_shard,
        "seconds_first_sweep": round(seconds_first, 3),
        "updates_per_second": round(speed),
        "seconds_per_shard": round(shard_seconds, 3),
        "predicted_seconds": round(seconds_first + per_core * shard_seconds, 1),
        "predicted_seconds_one_worker": round(seconds_first + one_worker * shard_seconds, 1),
    }


def predict_count_route(n: int, ruleset: RuleSet, workers: int, limit: int, cores: int,
                        probe_n: int = PROBE_N) -> dict:
    """Forecast of a count whose route and shape are chosen under `limit` bytes per worker
    with `cores` shards in flight per worker (`counting.route.choose_count_route`, the
    rule `count` runs by): the first sweep of n exactly as the run does it (refused alike;
    the moves kept by the same rule), its `CountSizes`, the chosen plan (MemoryRefused
    naming the smallest working limit), and the time from a probe of the chosen route's
    shard kind (`probe_route_rate`)."""
    what = f"counting n={n}"
    count(5, ruleset, threads=1)  # compile / load the first sweep outside its timing
    t0 = time.perf_counter()
    space = routed_space(ruleset.instantiate(n), limit, cores, what)
    windows, _ = count_windows(space, n, limit, cores)
    seconds = time.perf_counter() - t0
    sizes = count_sizes(space, windows, cores)
    route = choose_count_route(sizes, limit, cores, what=what)
    rate = probe_route_rate(route, probe_n, ruleset)
    return {
        "rules": ruleset.name,
        "n": n,
        "workers": workers,
        "cores_per_worker": cores,
        "max_memory_bytes": limit,
        "max_memory": human(limit),
        "states_in_space": space.total_states(),
        "reachable_states": sizes.states,
        "transitions": sizes.moves,
        "count_bits": sizes.count_bits,
        "shortest": sizes.shortest,
        "longest": sizes.longest,
        "largest_layer": sizes.largest_layer,
        "mean_window": round(sizes.window_updates / max(1, sizes.moves), 1),
        **route_forecast(sizes, route, workers, cores, seconds, rate),
        "probe": f"{route.route} shard, n={rate['probe_n']} in {rate['probe_seconds']} s",
        "variants": [dict(v) for v in route.variants],
    }


# ----------------------------------------------------------------------------- random play


def probe_random_rate(
    probe_n: int, rules: str | RuleSet = "standard", model: str = "moves", players: int = 2,
    winners_only: bool = False, block_primes: int = 1,
) -> dict:
    """Word updates per second of one shard of random play on one thread of this machine.

    Runs the random kind's own tasks: the first sweep of the probe game (`facts_task`,
    not timed), then its shard task (`random_law_residues_task`, or `random_win_residues_task` with
    `winners_only`) on a block of `block_primes` primes below 2**50, repeated until it has
    run PROBE_MIN_SECONDS; rate = the word updates those shards report / their seconds.
    """
    ruleset = get_rules(rules)
    kind = random_kind(ruleset, model, players, winners_only)
    t0 = time.perf_counter()
    kind.facts_task(ruleset, probe_n, *kind.facts_args)
    block = mul_primes(max(1, block_primes))
    updates, spent, repeats = 0, 0.0, 0
    while repeats < PROBE_MAX_REPEATS and (repeats == 0 or spent < PROBE_MIN_SECONDS):
        t1 = time.perf_counter()
        _, done = kind.shard_task(ruleset, probe_n, *kind.shard_args, block)
        spent += time.perf_counter() - t1
        updates += int(done)
        repeats += 1
    return {
        "probe_n": probe_n,
        "probe_seconds": round(time.perf_counter() - t0, 3),
        "updates_per_second": _rate(updates, max(spent, 1e-6), f"random play n={probe_n}"),
    }


def primes_per_block_within(facts: RandomFacts, limit: int, what: str) -> int:
    """The most primes a block may hold so that one worker's skeleton, shared data and one
    block (`plan.worker_bytes`: words_one words per prime + fixed bytes) fit `limit`;
    MemoryRefused naming the smallest working limit when not even one prime fits.

    Hook: exact random play shards only by primes today; a points route for random play
    would be chosen here like the count's (`counting.route.choose_count_route`)."""
    base = facts.window_bytes + facts.shared_bytes + facts.fixed_bytes
    one = 8 * max(1, facts.words_one)
    refuse_below(base + one, limit, what)
    return (limit - base) // one


def predict_random(
    n: int, rules: str | RuleSet = "standard", workers: int = 1, *,
    model: str = "moves", players: int = 2, winners_only: bool = False,
    blocks: int | None = None, probe_n: int | None = None, max_memory: int | None = None,
) -> dict:
    """Forecast of `run_random(n, rules, players, model, winners_only=..., workers=workers)`.

    Exact (equal to what the run reports): reachable states, transitions, the denominator's
    bits, the CRT primes and the check prime, the shards, the word updates (per prime and in
    all); memory per worker = the first sweep's skeleton + one block's ring buffers
    (`plan.worker_bytes`); with `max_memory` (per worker) the blocks hold at most as many
    primes as fit it (`primes_per_block_within`).  Time from `probe_random_rate` at
    `probe_n` (default PROBE_RANDOM_N) with blocks as large as the plan's largest.
    `workers` are K Dask workers (`workers=K`) or K threads in-process (`threads=K`): the
    driver plans both alike.
    The first sweeps of n and of the probe are refused up front against `max_memory`.
    """
    check_random_args(n, players, model)
    _check_workers(workers)
    check_probe(probe_n or PROBE_RANDOM_N)
    ruleset = get_rules(rules)
    # it runs the first sweep of n: refused first, like the run (default: what is available)
    refuse_random(n, ruleset, players, model, max_memory=max_memory)
    refuse_random(probe_n or PROBE_RANDOM_N, ruleset, players, model, max_memory=max_memory)
    kind = random_kind(ruleset, model, players, bool(winners_only))
    # compile / load the kernels outside every measurement
    kind.facts_task(ruleset, 5, *kind.facts_args)
    kind.shard_task(ruleset, 5, *kind.shard_args, mul_primes(1))
    facts: RandomFacts = kind.facts_task(ruleset, n, *kind.facts_args)
    plan = kind.plan(facts, 0, workers, blocks, None)
    limit = None if max_memory is None else resolve_limit(max_memory)
    if limit is not None and blocks is None and worker_bytes(facts, plan) > limit:
        # the default shape does not fit one worker: blocks as large as fit
        cap = primes_per_block_within(facts, limit, f"random play n={n} (one shard per worker)")
        plan = kind.plan(facts, 0, workers, None, cap)
    biggest = max(len(b) for b in plan.blocks)
    rate = probe_random_rate(probe_n or PROBE_RANDOM_N, ruleset, model, players,
                             bool(winners_only), biggest)
    space = build_space(ruleset.instantiate(n))
    return {
        "kind": "random",
        "rules": ruleset.name,
        "n": n,
        "model": model,
        "players": players,
        "winners_only": bool(winners_only),
        "states_in_space": space.total_states(),
        "reachable_states": facts.states,
        "transitions": facts.transitions,
        "denominator_bits": int(facts.denominator).bit_length(),
        "crt_primes": [str(p) for p in plan.primes],
        "check_prime": str(plan.check_prime),
        "word_updates_per_prime": facts.updates_one,
        "skeleton_bytes": facts.window_bytes,
        **shard_forecast(facts, plan, workers, rate),
    }


# ----------------------------------------------------------------------------- solve


def in_flight_bits(space: StateSpace, players: int = 2) -> int:
    """Bytes of the largest window of max_drop + 1 consecutive layers, x bit planes (1 for
    two players, else `players`): what any sweep of this space must hold at once."""
    planes = 1 if players == 2 else players
    return planes * max(window_bytes(space, lv) for lv in space.levels)


def probe_solve_rate(probe_n: int = PROBE_SOLVE_N, rules: str | RuleSet = "standard",
                     players: int = 2) -> dict:
    """States of the space walked per second by `solve.solve` on one thread of this machine
    (its reachability sweep included, for the rule sets that need one)."""
    check_probe(probe_n)
    ruleset = get_rules(rules)
    solve(5, ruleset, players, threads=1)  # compile / load kernels outside the measurement
    t0 = time.perf_counter()
    res = solve(probe_n, ruleset, players, threads=1)
    wall = time.perf_counter() - t0
    walked = build_space(ruleset.instantiate(probe_n)).total_states()
    return {
        "probe_n": probe_n,
        "probe_seconds": round(wall, 3),
        "states_per_second": _rate(walked, max(res.seconds, 1e-6), f"solve n={probe_n}"),
    }


def solve_critical_states(space: StateSpace, threads: int) -> int:
    """States the in-process solve on `threads` threads walks one after the other: a layer
    run serially counts all its states, a layer run on threads (`waves.parallel_layer`) the
    larger of its plan's critical path and its states / min(threads, cores)
    (`waves.block_plan`, the plan the solve itself uses)."""
    cores = max(1, min(threads, os.cpu_count() or 1))
    total = 0
    for level in space.levels:
        size = space.layer_size(level)
        if parallel_layer(size, threads):
            plan = block_plan(space, level, threads)
            total += max(plan.critical_states, math.ceil(size / cores))
        else:
            total += size
    return total


def predict_solve(
    n: int, rules: str | RuleSet = "standard", workers: int = 1, *,
    players: int = 2, shards: int | None = None, reach: bool = False,
    probe_n: int | None = None, max_memory: int | None = None, threads: int | None = None,
) -> dict:
    """Forecast of `run_solve(n, rules, players, shards=shards, workers=workers)`.

    Exact: states of the space (rank table); the states solved (`states`): all of them
    for the standard game (every state is reachable, `solve` module docstring), else the
    space's states as an upper bound (`states_exact` False) unless `reach` runs the
    reachability sweep (one bit per state, about as long as a fraction of the solve);
    the level ranges (`solve_chain.plan_ranges`, the chain's shards) and the peak bit
    memory (`solve_peak_bits`, equal to the run's `peak_bits_bytes`).  Memory per worker
    adds the rank table and, for rule sets that need it, the reachability bits (kept for
    the whole sweep).  Time = states of the space / the probe's states per second
    (`probe_solve_rate` at `probe_n`, default PROBE_SOLVE_N), whatever the workers; for
    the in-process solve (workers 1, no shards) on `threads` threads (default every core)
    the states are those of `solve_critical_states` instead.
    """
    n = check_n(n)
    check_players(players)
    _check_workers(workers)
    threads = thread_count(check_threads(threads))
    check_probe(probe_n or PROBE_SOLVE_N)
    ruleset = get_rules(rules)
    # the rank table of n (and with `reach` the reachability bits) are refused first
    space = solve_space(ruleset.instantiate(n), resolve_limit(max_memory), players,
                        bool(reach and needs_reach(ruleset)), False, f"planning solve n={n}")
    ranges = plan_ranges(space, shards)
    total = space.total_states()
    reach_pass = needs_reach(ruleset)
    states, exact, seconds_reach = total, not reach_pass, None
    if reach_pass and reach:
        t0 = time.perf_counter()
        states = reachable_bits(space)[1]["states"]
        seconds_reach = round(time.perf_counter() - t0, 3)
        exact = True
    rate = probe_solve_rate(probe_n or PROBE_SOLVE_N, ruleset, players)
    peak = solve_peak_bits(space, players)
    reach_bytes = all_layers_bytes(space) if reach_pass else 0
    memory = peak + reach_bytes + space.tab.nbytes
    in_process = workers == 1 and shards is None
    if not in_process:
        threads = 1  # a chain runs each level range on one thread
    walked = solve_critical_states(space, threads) if threads > 1 else total
    seconds = walked / rate["states_per_second"]
    return {
        "kind": "solve",
        "rules": ruleset.name,
        "n": n,
        "players": players,
        "workers": workers,
        "threads": threads,
        "states_in_space": total,
        "states": states,
        "states_exact": exact,
        "reach_pass": reach_pass,
        "seconds_reach": seconds_reach,
        "levels": len(space.levels),
        "max_drop": space.max_drop,
        "shards": len(ranges),
        "level_ranges": [[lo, hi] for lo, hi in ranges],
        "range_states": [sum(space.layer_size(lv) for lv in range(lo, hi + 1))
                         for lo, hi in ranges],
        "in_flight_bits_bytes": in_flight_bits(space, players),
        "peak_bits_bytes": peak,
        "reach_bits_bytes": reach_bytes,
        "rank_table_bytes": int(space.tab.nbytes),
        "memory_per_worker_bytes": memory,
        "memory_per_worker": human(memory),
        "states_per_second": round(rate["states_per_second"]),
        "probe": f"n={rate['probe_n']} in {rate['probe_seconds']} s",
        "predicted_seconds": round(seconds, 1),
        "parallel": SOLVE_NOTE,
    }


# ----------------------------------------------------------------------------- text


def _shard_rows(p: dict) -> list[tuple[str, str]]:
    """Rows of the sharded kinds (count, random): primes, shards, work, memory, time."""
    updates = f"{p['word_updates']:,}"
    if "word_updates_per_prime" in p:
        updates += f" ({p['word_updates_per_prime']:,} per prime)"
    memory = p["memory_per_worker"]
    if "skeleton_bytes" in p:
        memory += f" (skeleton {human(p['skeleton_bytes'])} + one block's buffers)"
    rows = [
        ("primes (incl. check prime)", str(p["primes"])),
        ("shards", f"{p['shards']} (up to {plural(p['primes_per_shard'], 'prime')} each)"),
        ("word updates (exact)", updates),
        ("memory per worker", memory),
        *_time_rows(p),
    ]
    if p["workers"] > 1:
        rows.append(("predicted time, 1 worker", f"{p['predicted_seconds_one_worker']:.1f} s"))
    return rows


def _time_rows(p: dict) -> list[tuple[str, str]]:
    """The first sweep, the probe's rate and the predicted time of a sharded forecast."""
    return [
        ("first sweep (measured)", f"{p['seconds_first_sweep']:.2f} s"),
        ("rate (probe " + p["probe"] + ")", f"{p['updates_per_second']:,} updates/s"),
        (f"predicted time, {p['workers']} worker(s)", f"{p['predicted_seconds']:.1f} s"),
    ]


def _count_rows(p: dict) -> list[tuple[str, str]]:
    return [
        ("states (whole space, exact)", f"{p['states_in_space']:,}"),
        ("reachable states (exact)", f"{p['reachable_states']:,}"),
        ("transitions (exact)", f"{p['transitions']:,}"),
        ("size bound", f"{p['count_bits']} bits"),
        *_shard_rows(p),
    ]


def _random_rows(p: dict) -> list[tuple[str, str]]:
    return [
        ("states (whole space, exact)", f"{p['states_in_space']:,}"),
        ("reachable states (exact)", f"{p['reachable_states']:,}"),
        ("transitions (exact)", f"{p['transitions']:,}"),
        ("denominator M (exact)", f"{p['denominator_bits']} bits"),
        *_shard_rows(p),
    ]


def _solve_rows(p: dict) -> list[tuple[str, str]]:
    if not p["reach_pass"]:
        how = "exact: every state is reachable"
    elif p["states_exact"]:
        how = f"exact: reachability sweep, {p['seconds_reach']:.2f} s"
    else:
        how = "upper bound; --reach runs the reachability sweep"
    ranges = p["range_states"]
    planes = 1 if p["players"] == 2 else p["players"]
    rows = [
        ("states (whole space, exact)", f"{p['states_in_space']:,}"),
        ("states solved", f"{p['states']:,} ({how})"),
        ("levels", f"{p['levels']} (a move drops at most {p['max_drop']})"),
        ("level ranges (shards)", f"{p['shards']} (up to {max(ranges):,} states each)"),
        ("peak outcome bits", f"{human(p['peak_bits_bytes'])} ({p['max_drop'] + 1} layers "
                              f"in flight x {planes} plane(s))"),
    ]
    if p["reach_pass"]:
        rows.append(("reachability bits", human(p["reach_bits_bytes"])))
    rows += [
        ("memory per worker", p["memory_per_worker"]),
        ("rate (probe " + p["probe"] + ")", f"{p['states_per_second']:,} states/s"),
        (f"predicted time, {p['workers']} worker(s)"
         + (f", {p['threads']} threads" if p.get("threads", 1) > 1 else ""),
         f"{p['predicted_seconds']:.1f} s"),
    ]
    return rows


def _route_rows(p: dict) -> list[tuple[str, str]]:
    """Rows of a count planned under a memory limit: route, shape, memory, time."""
    if p["route"] == "points":
        shape = (f"{p['shards']:,} of (prime, {plural(p['points_per_shard'], 'point')}); "
                 f"{p['primes']} primes x {p['points']} points")
    else:
        shape = f"{p['shards']:,} (up to {plural(p['primes_per_shard'], 'prime')} each)"
    moves = "kept from the first sweep" if p["keep_moves"] else "listed again per shard"
    rows = [
        ("states (whole space, exact)", f"{p['states_in_space']:,}"),
        ("reachable states (exact)", f"{p['reachable_states']:,}"),
        ("transitions (exact)", f"{p['transitions']:,}"),
        ("size bound", f"{p['count_bits']} bits"),
        ("memory limit per worker", f"{p['max_memory']} ({p['cores_per_worker']} "
                                    "shard(s) in flight)"),
        ("route", f"{p['route']} (moves {moves})"),
        ("shards", shape),
        ("memory per shard (exact)", p["memory_per_shard"]),
        ("memory per worker (exact)", f"{p['memory_per_worker']} (first sweep's data "
                                      f"{human(p['memory_shared_bytes'])} + shards)"),
        ("word updates (exact)", f"{p['word_updates']:,}"),
        *_time_rows(p),
    ]
    if p["workers"] > 1:
        rows.append(("predicted time, 1 worker", f"{p['predicted_seconds_one_worker']:.1f} s"))
    return rows


_HEADS = {
    "count": (("rules", "n", "workers"), _count_rows),
    "random": (("rules", "n", "model", "players", "winners_only", "workers"), _random_rows),
    "solve": (("rules", "n", "players", "workers"), _solve_rows),
}


def format_prediction(p: dict) -> str:
    """Any forecast (`predict_count`, `predict_random`, `predict_solve`) as an aligned text
    table; the kind is p["kind"] (a count's forecast has none)."""
    kind = p.get("kind", "count")
    keys, rows_of = _HEADS[kind]
    rows = _route_rows(p) if "route" in p else rows_of(p)
    width = max(len(k) for k, _ in rows)
    head = f"zeckenum plan {kind}  " + "  ".join(f"{k}={p[k]}" for k in keys)
    lines = [head, ""] + [f"  {k:<{width}}  {v}" for k, v in rows]
    if kind == "solve":
        lines += ["", textwrap.fill(f"note: {p['parallel']}", 90, initial_indent="  ",
                                    subsequent_indent="  ")]
    return "\n".join(lines)
