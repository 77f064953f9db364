"""`plan count --budget T`: the largest n whose count fits a time budget on given workers.

The forecast of one n (`predict.predict_count_route`) needs n's first sweep: 50 s at
n = 300, far too slow to try many n.  The search therefore splits the sizes of a count in
two:

exact for every n, from the rank table alone (milliseconds even at n = 400):
    states of the space, moves (`StateSpace.moves_by_level`), the largest layer, the
    first sweep's forecast, the move listing, the points route's words per point and its
    word updates per point (moves + states - 1);
fitted on a few measured n (their exact first sweeps, `count_sizes`):
    count_bits        least squares on [1, n, n log n]   (log of the number of games)
    shortest, longest least squares on [1, n]
    mean window       window updates per prime / moves, on [1, n]
    window ratio      the windowed ring's words per prime / the points ring's per point
                      (largest layer's window sum / its states), on [1, n]
    sweep time        seconds of the first sweep per (state + move), the largest measured

Assumptions (stated in the output too): every state of the space is reachable (true for
the standard game; for other rule sets the exact parts are upper bounds); the fitted
quantities keep their measured trend beyond the samples (the output gives each fit's
largest relative error on the samples and on the largest sample when it is left out of
the fit); each core runs its shards at the probe's rate (one thread of this machine),
the cores do not slow each other down (a memory-bandwidth-bound kernel: optimistic when
many cores share a memory bus); every worker runs the first sweep itself, in parallel.

For each candidate n the sizes feed the same rule as the run (`counting.route.
choose_count_route`); the time is the first sweep + the busiest core's shards at the
probed rate of the chosen route (`predict.route_forecast`).  n grows by doubling while it
fits, then bisection.  The final n is confirmed with its exact first sweep when its
space has at most CONFIRM_STATES states (the confirmation replaces the model's forecast).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
from zeckenum.cluster.predict import (
    PROBE_N,
    check_probe,
    predict_count_route,
    probe_route_rate,
    route_forecast,
)
from zeckenum.core.memory import human, resolve_limit
from zeckenum.core.modular import primes_for_bits
from zeckenum.core.ntt import ntt_primes_for_bits, transform_size
from zeckenum.core.statespace import StateSpace, build_space, rank_table_bytes
from zeckenum.core.sweep import incoming_bytes_estimate
from zeckenum.core.text import plural
from zeckenum.counting.count import (
    count_space,
    count_windows,
    listing_bytes,
    windows_pass_bytes,
)
from zeckenum.counting.points import points_peak_words
from zeckenum.counting.route import CountSizes, RoutePlan, choose_count_route, count_sizes
from zeckenum.errors import InputError, MemoryRefused
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

SAMPLE_STATES = 1_500_000
"""The measured n have spaces of at most this many states (first sweeps of a second)."""
SAMPLES = 5
CONFIRM_STATES = 20_000_000
"""The final n is confirmed by its exact first sweep when its space is at most this big
(about 10 s and 1 GiB here)."""
MAX_TABLE_BYTES = 2**28
"""The search stops where the rank table alone would exceed 256 MiB (n near 1,000 for
the standard game): far beyond any budget."""


@dataclass(frozen=True)
class Fit:
    """A least-squares fit y ~ basis(n) @ coef, with its errors on the samples."""

    name: str
    basis: str
    coef: tuple[float, ...]
    max_rel_error: float
    holdout_rel_error: float

    def __call__(self, n: float) -> float:
        return float(np.dot(_basis(self.basis, n), self.coef))


def _basis(kind: str, n: float) -> list[float]:
    if kind == "1,n":
        return [1.0, n]
    return [1.0, n, n * math.log(n)]


def fit(name: str, basis: str, ns: list[int], ys: list[float]) -> Fit:
    """Least squares of ys on the basis at ns; errors in-sample and on the largest n with
    it left out (relative)."""
    a = np.array([_basis(basis, n) for n in ns])
    y = np.array(ys, dtype=float)
    coef = np.linalg.lstsq(a, y, rcond=None)[0]
    rel = np.abs(a @ coef - y) / np.maximum(np.abs(y), 1e-12)
    coef_out = np.linalg.lstsq(a[:-1], y[:-1], rcond=None)[0]
    hold = abs(float(a[-1] @ coef_out) - y[-1]) / max(abs(y[-1]), 1e-12)
    return Fit(name, basis, tuple(float(c) for c in coef), float(rel.max()), float(hold))


def sample_ns(ruleset: RuleSet) -> list[int]:
    """SAMPLES n, evenly spaced over [m / 2, m], m the largest n whose space has at most
    SAMPLE_STATES states (found from rank tables alone)."""
    lo, hi = 8, 16
    while _states(ruleset, hi) <= SAMPLE_STATES and hi < 4096:
        lo, hi = hi, 2 * hi
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (mid, hi) if _states(ruleset, mid) <= SAMPLE_STATES else (lo, mid)
    top = max(lo, 2 * SAMPLES)
    return sorted({round(top / 2 + i * (top / 2) / (SAMPLES - 1)) for i in range(SAMPLES)})


def _states(ruleset: RuleSet, n: int) -> int:
    return build_space(ruleset.instantiate(n)).total_states()


def measure(ruleset: RuleSet, ns: list[int], cores: int) -> list[dict]:
    """Exact first-sweep sizes and times of the sample n."""
    out = []
    limit = resolve_limit(None)
    for n in ns:
        t0 = time.perf_counter()
        space = count_space(ruleset.instantiate(n), limit)
        windows, _ = count_windows(space, n, limit, cores)
        seconds = time.perf_counter() - t0
        s = count_sizes(space, windows, cores)
        out.append({"n": n, "states": s.states, "moves": s.moves, "count_bits": s.count_bits,
                    "shortest": s.shortest, "longest": s.longest,
                    "mean_window": s.window_updates / max(1, s.moves),
                    "window_ratio": s.window_words / max(1, s.point_words),
                    "sweep_seconds": seconds,
                    "sweep_per_unit": seconds / max(1, s.states + s.moves)})
    return out


def fits_of(samples: list[dict]) -> dict[str, Fit]:
    ns = [s["n"] for s in samples]
    return {
        "count_bits": fit("count_bits", "1,n,nlogn", ns, [s["count_bits"] for s in samples]),
        "shortest": fit("shortest", "1,n", ns, [s["shortest"] for s in samples]),
        "longest": fit("longest", "1,n", ns, [s["longest"] for s in samples]),
        "mean_window": fit("mean_window", "1,n", ns, [s["mean_window"] for s in samples]),
        "window_ratio": fit("window_ratio", "1,n", ns, [s["window_ratio"] for s in samples]),
    }


def modelled_sizes(space: StateSpace, fits: dict[str, Fit], limit: int, cores: int,
                   ) -> CountSizes:
    """`CountSizes` of n: exact parts from the space, the rest from the fits."""
    spec = space.spec
    n = spec.n
    states = space.total_states()
    moves = int(space.moves_by_level(-1).sum())
    bits = max(1, math.ceil(fits["count_bits"](n)))
    shortest = max(0, round(fits["shortest"](n)))
    longest = max(shortest, round(fits["longest"](n)))
    order = transform_size(longest - shortest)
    sweep = windows_pass_bytes(space, cores)
    est = incoming_bytes_estimate(space)
    point_words = points_peak_words(space, 1)
    table = rank_table_bytes(spec.nbins, spec.n, spec.start_level)
    return CountSizes(
        n=n, states=states, moves=moves, layer_sizes=(), window_sums=(), count_bits=bits,
        shortest=shortest, longest=longest, max_drop=space.max_drop,
        window_updates=round(fits["mean_window"](n) * moves),
        point_updates=moves + states - 1,
        window_words=round(fits["window_ratio"](n) * point_words), point_words=point_words,
        windows_primes=len(primes_for_bits(bits)[0]) + 1,
        points_primes=len(ntt_primes_for_bits(bits, order)[0]) + 1, points=order,
        held_bytes=table + 8 * states + 8, kept_bytes=est,
        kept=sweep + est <= limit // 4, sweep_bytes=sweep, kept_estimate=est,
        listing_bytes=listing_bytes(space), largest_layer=space.largest_layer(),
        space_bytes=table + 8 * states,
    )


class _Rates:
    """Probe rates per (route, keep), measured once each with the first shape met."""

    def __init__(self, ruleset: RuleSet, probe_n: int) -> None:
        self.ruleset, self.probe_n, self.rates = ruleset, probe_n, {}

    def __call__(self, route: RoutePlan) -> dict:
        key = (route.route, route.keep_moves)
        if key not in self.rates:
            self.rates[key] = probe_route_rate(route, self.probe_n, self.ruleset)
        return self.rates[key]


def forecast_n(n: int, ruleset: RuleSet, fits: dict[str, Fit], per_unit: float,
               limit: int, workers: int, cores: int, rates: _Rates) -> dict | None:
    """The modelled forecast of n, or None when no shape fits the memory (or the rank
    table exceeds MAX_TABLE_BYTES)."""
    spec = ruleset.instantiate(n)
    if rank_table_bytes(spec.nbins, spec.n, spec.start_level) > MAX_TABLE_BYTES:
        return None
    space = build_space(spec)
    sizes = modelled_sizes(space, fits, limit, cores)
    try:
        route = choose_count_route(sizes, limit, cores)
    except MemoryRefused:
        return None
    sweep_seconds = per_unit * (sizes.states + sizes.moves)
    out = route_forecast(sizes, route, workers, cores, sweep_seconds, rates(route))
    return {"n": n, "states": sizes.states, "moves": sizes.moves, **out}


def largest_n_within(
    budget: float, rules: str | RuleSet = "standard", workers: int = 1, cores: int = 1,
    max_memory: int | None = None, *, probe_n: int = PROBE_N,
    samples: list[int] | None = None, confirm_states: int = CONFIRM_STATES,
) -> dict:
    """The largest n whose count is forecast to finish within `budget` seconds on
    `workers` workers of `max_memory` bytes (default: what this machine has available)
    and `cores` cores each (the model and assumptions in the module docstring)."""
    if not (isinstance(budget, (int, float)) and not isinstance(budget, bool)
            and math.isfinite(budget) and budget > 0):
        raise InputError(f"the time budget must be a positive number of seconds, got {budget!r}")
    check_probe(probe_n)
    ruleset = get_rules(rules)
    limit = resolve_limit(max_memory)
    ns = samples or sample_ns(ruleset)
    measured = measure(ruleset, ns, cores)
    fits = fits_of(measured)
    per_unit = max(s["sweep_per_unit"] for s in measured)
    rates = _Rates(ruleset, probe_n)

    def fc(n: int) -> dict | None:
        f = forecast_n(n, ruleset, fits, per_unit, limit, workers, cores, rates)
        return f if f is not None and f["predicted_seconds"] <= budget else None

    lo = 1 if fc(1) else 0
    best = fc(1)
    hi = max(ns)
    while True:  # doubling: lo fits, find a hi that does not
        f = fc(hi)
        if f is None:
            break
        lo, best, hi = hi, f, 2 * hi
    while hi - lo > 1:
        mid = (lo + hi) // 2
        f = fc(mid)
        lo, hi, best = (mid, hi, f) if f is not None else (lo, mid, best)
    beyond = forecast_n(lo + 1, ruleset, fits, per_unit, limit, workers, cores, rates)
    confirmed = None
    if best is not None and best["states"] <= confirm_states:
        exact = predict_count_route(lo, ruleset, workers, limit, cores, probe_n)
        confirmed = {k: exact[k] for k in (
            "route", "shards", "memory_per_worker", "memory_per_shard", "word_updates",
            "predicted_seconds")}
        confirmed["fits"] = exact["predicted_seconds"] <= budget
    return {
        "kind": "budget",
        "rules": ruleset.name,
        "budget_seconds": budget,
        "workers": workers,
        "cores_per_worker": cores,
        "max_memory_bytes": limit,
        "max_memory": human(limit),
        "largest_n": lo if best is not None else 0,
        "forecast": best,
        "next_n": None if beyond is None else {
            "n": lo + 1, "predicted_seconds": beyond["predicted_seconds"],
            "route": beyond["route"], "memory_per_worker": beyond["memory_per_worker"]},
        "next_n_reason": ("no shard shape fits the memory" if beyond is None
                          else "over the budget"),
        "confirmed": confirmed,
        "model": {
            "samples": measured,
            "fits": {k: {"basis": f.basis, "coef": list(f.coef),
                         "max_rel_error": round(f.max_rel_error, 4),
                         "holdout_rel_error": round(f.holdout_rel_error, 4)}
                     for k, f in fits.items()},
            "sweep_seconds_per_unit": per_unit,
            "rates": {f"{r}/{'keep' if k else 'relist'}": round(v["updates_per_second"])
                      for (r, k), v in rates.rates.items()},
        },
        "assumptions": [
            "exact from the rank table: states, moves, largest layer, buffers (every state "
            "reachable: true for the standard game, else upper bounds)",
            "fitted on the measured n: count_bits, shortest, longest, mean window, window "
            "ratio (errors above); sweep time per (state + move) = the largest measured",
            "each core runs at the probe's one-thread rate; cores do not slow each other",
            "every worker runs the first sweep itself, in parallel",
        ],
    }


def format_budget(p: dict) -> str:
    """The budget search as text: the answer, its forecast, the model and its errors."""
    lines = [f"zeckenum plan count --budget {p['budget_seconds']:g} s  rules={p['rules']}  "
             f"workers={p['workers']} x {p['cores_per_worker']} core(s), "
             f"{p['max_memory']} each", ""]
    f = p["forecast"]
    if f is None:
        lines.append("  no n fits this budget and memory")
    else:
        shape = (f"{f['shards']:,} shards of {plural(f['points_per_shard'], 'point')}"
                 if f["route"] == "points" else
                 f"{f['shards']:,} shards of up to {plural(f['primes_per_shard'], 'prime')}")
        lines += [
            f"  largest n           {p['largest_n']}",
            f"  forecast (model)    {f['predicted_seconds']:.0f} s, {f['route']} route, "
            f"{shape}, {f['memory_per_worker']} per worker",
        ]
    nx = p["next_n"]
    if nx is None:
        lines.append(f"  n + 1               {p['next_n_reason']}")
    else:
        lines.append(f"  n + 1               {nx['predicted_seconds']:.0f} s "
                     f"({p['next_n_reason']})")
    c = p["confirmed"]
    if c is not None:
        lines.append(f"  confirmed (exact)   {c['predicted_seconds']:.0f} s, {c['route']}, "
                     f"{c['memory_per_worker']} per worker: "
                     + ("fits" if c["fits"] else "does NOT fit; take a smaller n"))
    else:
        lines.append("  confirmed (exact)   not run (first sweep too large to afford here)")
    m = p["model"]
    lines += ["", "  model (measured n = " + ", ".join(str(s["n"]) for s in m["samples"]) + ")"]
    for name, fi in m["fits"].items():
        lines.append(f"    {name:<13} on [{fi['basis']}]: error {100 * fi['max_rel_error']:.2f}% "
                     f"in sample, {100 * fi['holdout_rel_error']:.2f}% on the largest n "
                     "left out")
    lines += ["", "  assumptions"] + [f"    - {a}" for a in p["assumptions"]]
    return "\n".join(lines)
