"""Argument checks shared by every engine, the CLI and the cluster: one place per limit.

Each `check_*` returns the checked value (or None) or raises InputError with one line that
names the argument, the accepted range and the value given (exit status 2 on the command
line).  Bools are refused wherever an integer is expected (`True` is an int in Python).
The limits are plain constants so that the CLI declares the same ranges on its options.
"""

from __future__ import annotations

import os
import re

import numpy as np
from zeckenum.errors import InputError

MAX_N = 2**62
"""Largest n any command accepts: counts of bins stay int64.  Far below it every run is
refused by its memory forecast (the rank table alone holds more than 8 n^2 bytes)."""

MAX_THREADS = 4096
"""Most threads a run accepts (each may hold a layer in flight)."""

MAX_PRIME_OFFSET = 2000
"""Largest --prime-offset: the primes below 2**62 are found by a sieve-free downward search,
about 21 Miller-Rabin tests per prime (2000 primes: about 0.4 s per search, repeated
once per prime the run adds); far larger offsets would run for minutes before any work."""

RANDOM_MODELS = ("moves", "pairs")
"""The random models of random play (see `randomplay.exact`)."""

RANDOM_MAX_PLAYERS = 1024
"""Most players random play accepts: every state carries one residue per player."""

SOLVE_MAX_PLAYERS = 64
"""Most players solve accepts (its classification keeps one outcome per player)."""


def check_n(n: object) -> int:
    """n as a positive int no larger than MAX_N, or InputError."""
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise InputError(f"n must be a positive integer, got {n!r}")
    if n < 1:
        raise InputError(f"n must be a positive integer, got {n}")
    if n > MAX_N:
        raise InputError(f"n must be at most 2^62, got {n}")
    return int(n)


def check_threads(threads: object) -> int | None:
    """threads as None (all cores) or an int in 1..MAX_THREADS, else InputError."""
    if threads is None:
        return None
    if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)) or not (
        1 <= threads <= MAX_THREADS
    ):
        raise InputError(f"threads must be an integer from 1 to {MAX_THREADS}, got {threads!r}")
    return int(threads)


def thread_count(threads: int | None) -> int:
    """Threads to run: `threads` when given (already checked), else every core."""
    return max(1, threads or os.cpu_count() or 1)


def check_prime_offset(prime_offset: object) -> int:
    """prime_offset as an int in 0..MAX_PRIME_OFFSET, else InputError."""
    if isinstance(prime_offset, bool) or not isinstance(prime_offset, (int, np.integer)) or not (
        0 <= prime_offset <= MAX_PRIME_OFFSET
    ):
        raise InputError(
            f"the prime offset must be an integer from 0 to {MAX_PRIME_OFFSET:,}, "
            f"got {prime_offset!r}"
        )
    return int(prime_offset)


def check_model(model: str) -> None:
    """InputError unless `model` is one of RANDOM_MODELS."""
    if model not in RANDOM_MODELS:
        raise InputError(
            f"unknown random model {model!r} (use one of: {', '.join(RANDOM_MODELS)})"
        )


def check_random_args(n: int, players: int, model: str) -> None:
    """InputError unless n is a valid n (`check_n`), 2 <= players <= RANDOM_MAX_PLAYERS and
    the model is known (`check_model`): the arguments of random play (exact, floating or
    simulated)."""
    check_n(n)
    if isinstance(players, bool) or not isinstance(players, int) or not (
        2 <= players <= RANDOM_MAX_PLAYERS
    ):
        raise InputError(
            f"the number of players must be an integer from 2 to {RANDOM_MAX_PLAYERS}, "
            f"got {players}"
        )
    check_model(model)


def check_players(players: int) -> None:
    """InputError unless `players` is an int in 2..SOLVE_MAX_PLAYERS: the players of solve
    (random play has its own limit, RANDOM_MAX_PLAYERS, checked by `check_random_args`)."""
    if not isinstance(players, int) or players < 2 or players > SOLVE_MAX_PLAYERS:
        raise InputError(
            f"players must be an integer from 2 to {SOLVE_MAX_PLAYERS}, got {players}"
        )


_SECONDS_PER = {"": 1, "s": 1, "m": 60, "h": 3600, "d": 86400}
MAX_DURATION = 366 * 86400
"""Longest accepted time budget (a year): a forecast further out says nothing."""


def parse_duration(text: object) -> float:
    """Seconds in a time budget such as '90', '90s', '30m', '1.5h', '2d' (> 0, at most a
    year), else InputError."""
    m = re.fullmatch(r"\s*(\d{1,12}(?:\.\d{1,9})?)\s*([smhd]?)\s*", str(text).lower())
    seconds = float(m.group(1)) * _SECONDS_PER[m.group(2)] if m else 0.0
    if not m or not 0 < seconds <= MAX_DURATION:
        raise InputError(f"cannot read the time budget {str(text)[:40]!r} (a positive time "
                         "up to a year, e.g. 90s, 30m, 1h, 2d or seconds)")
    return seconds
