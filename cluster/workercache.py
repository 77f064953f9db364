"""What a worker process keeps between tasks: the rebuilt inputs of the games it works on.

A twin (`<wrapper>_task`) receives only (rules, n, ...) and a block; it rebuilds the
game's state space and first sweep on the worker (deterministic) and keeps them in a
`WorkerCache`, so the other shards of the same game on that worker reuse them.  One helper
serves every kind of run (count, random play, solve); each module holds its own instance.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from typing import Generic, TypeVar

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")

GAMES_KEPT = 2
"""Games a process keeps per kind of run: the current n and the next."""


class WorkerCache(Generic[K, V]):
    """A least-recently-used cache of at most `entries` values, one lock for all.

    Invariants: at most `entries` values are held (the least recently used is dropped
    first); `get` builds a missing value *while holding the lock*, so in one process a
    value is built at most once, and never two builds run at once (each is large and
    memory-bound: two at once would double the peak).  Not `functools.lru_cache`: that
    lets concurrent callers build the same value twice and cannot drop one key.
    """

    def __init__(self, entries: int = GAMES_KEPT) -> None:
        if entries < 1:
            raise ValueError(f"a worker cache keeps at least one entry, got {entries}")
        self.entries = entries
        self._data: OrderedDict[K, V] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: K, build: Callable[[], V]) -> V:
        """The value of `key`, built by `build()` (under the lock) when missing."""
        with self._lock:
            hit = self._data.get(key)
            if hit is not None:
                self._data.move_to_end(key)
                return hit
            value = build()
            self._data[key] = value
            while len(self._data) > self.entries:
                self._data.popitem(last=False)
            return value

    def pop(self, key: K) -> None:
        """Forget `key` (nothing if absent)."""
        with self._lock:
            self._data.pop(key, None)

    def clear(self) -> None:
        """Forget every value."""
        with self._lock:
            self._data.clear()

    def __len__(self) -> int:
        return len(self._data)

    def __contains__(self, key: object) -> bool:
        return key in self._data


def worker_address() -> str:
    """Address of the Dask worker running this code ("" outside a worker)."""
    try:
        from distributed import get_worker

        return get_worker().address
    except (ImportError, ValueError):
        return ""
