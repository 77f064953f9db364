"""Monte Carlo random play: K games played on count vectors by a numba kernel.

Each game g draws its moves from its own stream of a SplitMix64 generator seeded with
(seed, g), so the result depends only on (n, model, K, seed), not on the thread count.
A move is drawn exactly like the exact models (`zeckenum.randomplay.exact`): uniform over the
legal moves ("moves"), or with probability weight / total weight ("pairs"); the draw of
an integer in [0, total) uses the top 53 bits of a 64-bit output (bias below 2**-30 for
totals below 2**23, far below Monte Carlo noise).

Estimates and 95% intervals (normal approximation, z = 1.959964):
  probability p of an event:  p_hat +- z sqrt(p_hat (1 - p_hat) / K)
  mean length:                mean +- z s / sqrt(K)
  variance:                   s^2 +- z sqrt((m4 - s^4) / K)   (m4 the 4th central moment)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numba as nb
import numpy as np
from zeckenum.core.checks import check_random_args
from zeckenum.core.jit import kernel
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.errors import InputError
from zeckenum.randomplay.exact import winner_of_length
from zeckenum.randomplay.skeleton import take_arrays
from zeckenum.rules.catalogue import get_rules

Z95 = 1.959963984540054

MAX_GAMES = 2**62
"""Most games one simulation accepts (the game index is an int64 in the kernel)."""

BYTES_PER_GAME = 48
"""Forecast bytes per simulated game: the int64 lengths, their float64 copy, the
deviations and two temporaries of the moments (five arrays of K words), plus a margin."""


def check_games(games: object) -> int:
    """The number of games as an int in 1..MAX_GAMES, else InputError."""
    if isinstance(games, bool) or not isinstance(games, (int, np.integer)) or not (
        1 <= games <= MAX_GAMES
    ):
        raise InputError(f"the number of simulated games must be an integer from 1 to 2^62, "
                         f"got {games!r}")
    return int(games)


@kernel(inline=True)
def splitmix_next(state: np.uint64) -> tuple:
    """(new state, 64-bit output) of SplitMix64."""
    state = state + np.uint64(0x9E3779B97F4A7C15)
    z = state
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    z = z ^ (z >> np.uint64(31))
    return state, z


@kernel
def play_one(
    start: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, tk_cnt: np.ndarray,
    pairs: bool, st: np.uint64,
) -> int:
    """The length of one random game from `start`, drawing from SplitMix64 state `st`."""
    nmoves = mv_bins.shape[0]
    width = mv_bins.shape[1]
    a = start.copy()
    wts = np.zeros(nmoves, dtype=np.int64)
    length = 0
    while True:
        tot = 0
        for m in range(nmoves):
            ok = True
            for j in range(width):
                if a[mv_bins[m, j]] + mv_delta[m, j] < 0:
                    ok = False
                    break
            x = 0
            if ok:
                x = 1
                if pairs:
                    for j in range(width):
                        c = tk_cnt[m, j]
                        if c > 0:
                            v = a[mv_bins[m, j]]
                            b = 1
                            for t in range(c):
                                b = b * (v - t) // (t + 1)
                            x *= b
            wts[m] = x
            tot += x
        if tot == 0:
            return length
        st, z = splitmix_next(st)
        r = np.int64(float(z >> np.uint64(11)) * (1.0 / 9007199254740992.0) * tot)
        if r >= tot:
            r = tot - 1
        m = 0
        while r >= wts[m]:
            r -= wts[m]
            m += 1
        for j in range(width):
            a[mv_bins[m, j]] += mv_delta[m, j]
        length += 1


@kernel(parallel=True)
def play_games(
    start: np.ndarray, mv_bins: np.ndarray, mv_delta: np.ndarray, tk_cnt: np.ndarray,
    pairs: bool, games: int, seed: int,
) -> np.ndarray:
    """Lengths (int64[games]) of `games` random games; game g uses stream (seed, g)."""
    lengths = np.zeros(games, dtype=np.int64)
    for g in nb.prange(games):
        st = np.uint64(seed) * np.uint64(0xD1B54A32D192ED03) + np.uint64(g)
        st, _z = splitmix_next(st)
        lengths[g] = play_one(start, mv_bins, mv_delta, tk_cnt, pairs, st)
    return lengths


@dataclass(frozen=True)
class SimulationResult:
    """Monte Carlo estimates from `games` random games (see the module docstring)."""

    rules: str
    n: int
    players: int
    model: str
    games: int
    seed: int
    length_counts: dict[int, int]
    win_probability: dict[int, tuple[float, float, float]]  # estimate, low, high
    mean: tuple[float, float, float]
    variance: tuple[float, float, float]
    stats: dict = field(default_factory=dict, compare=False)
    position: str = ""  # the start position (README "Positions") when not the rule set's

    def to_dict(self) -> dict:
        return {
            "rules": self.rules, "n": self.n,
            **({"position": self.position} if self.position else {}),
            "players": self.players, "model": self.model,
            "mode": "simulate", "games": self.games, "seed": self.seed,
            "no_move_convention": "a game of length 0 counts as a win for the last player",
            "length_counts": {str(k): v for k, v in self.length_counts.items()},
            "length_probability": {
                str(k): list(proportion_ci(v, self.games)) for k, v in self.length_counts.items()
            },
            "win_probability": {str(k): list(v) for k, v in self.win_probability.items()},
            "mean_length": list(self.mean),
            "variance": list(self.variance),
            "confidence": 0.95,
            "stats": self.stats,
        }


def proportion_ci(hits: int, k: int) -> tuple[float, float, float]:
    """(p_hat, low, high): normal-approximation 95% interval for a proportion."""
    p = hits / k
    h = Z95 * math.sqrt(p * (1 - p) / k)
    return p, max(0.0, p - h), min(1.0, p + h)


def simulate_lengths(
    n: int, games: int, seed: int, rules: str = "standard", model: str = "moves"
) -> np.ndarray:
    """The lengths of `games` random games at n (int64 array, deterministic in seed)."""
    games = check_games(games)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not (
        0 <= seed < 2**63
    ):
        raise InputError(f"the seed must be in [0, 2**63), got {seed}")
    spec = get_rules(rules).instantiate(n)
    _bins, tk_cnt = take_arrays(spec)
    return play_games(
        spec.start.astype(np.int64), spec.mv_bins.astype(np.int64),
        spec.mv_delta.astype(np.int64), tk_cnt, model == "pairs", games, seed,
    )


def simulate(
    n: int, games: int, seed: int = 0, rules: str = "standard", players: int = 2,
    model: str = "moves", max_memory: int | None = None,
) -> SimulationResult:
    """Monte Carlo estimates of the length law, win probabilities, mean and variance.

    Memory: BYTES_PER_GAME per game (no state space is built), refused up front against
    `max_memory` (default: what the machine has available)."""
    import time

    check_random_args(n, players, model)
    games = check_games(games)
    refuse_if_over(BYTES_PER_GAME * games, resolve_limit(max_memory),
                   f"simulating {games} games")
    t0 = time.perf_counter()
    lengths = simulate_lengths(n, games, seed, rules, model)
    t1 = time.perf_counter()
    vals, cnts = np.unique(lengths, return_counts=True)
    counts = {int(v): int(c) for v, c in zip(vals, cnts, strict=True)}
    hits = {i: 0 for i in range(1, players + 1)}
    for L, c in counts.items():
        hits[winner_of_length(L, players)] += c
    wins = {i: proportion_ci(h, games) for i, h in hits.items()}
    x = lengths.astype(np.float64)
    mean = float(x.mean())
    d = x - mean
    var = float((d * d).mean())
    m4 = float((d**4).mean())
    hm = Z95 * math.sqrt(var / games)
    hv = Z95 * math.sqrt(max(m4 - var * var, 0.0) / games)
    return SimulationResult(
        rules=get_rules(rules).name, n=n, players=players, model=model, games=games,
        seed=seed, length_counts=counts, win_probability=wins,
        mean=(mean, mean - hm, mean + hm), variance=(var, var - hv, var + hv),
        stats={"simulate_s": round(t1 - t0, 3)},
    )
