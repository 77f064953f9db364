"""The per-worker cache of rebuilt task inputs (`cluster.workercache.WorkerCache`).

Expected behaviour is least-recently-used eviction with a fixed bound (common practice),
checked against a plain list model written here; and one build at a time per process.
"""

from __future__ import annotations

import threading
import time

import pytest
from zeckenum.cluster.workercache import WorkerCache


def test_it_keeps_the_most_recently_used_entries_within_its_bound() -> None:
    cache: WorkerCache[int, str] = WorkerCache(2)
    builds: list[int] = []
    model: list[int] = []  # most recently used last

    def ask(key: int) -> str:
        def build() -> str:
            builds.append(key)
            return f"v{key}"

        value = cache.get(key, build)
        if key in model:
            model.remove(key)
        model.append(key)
        del model[:-2]
        return value

    for key in (1, 2, 1, 3, 2, 1, 1, 4):
        assert ask(key) == f"v{key}"
        assert len(cache) <= 2
        assert sorted(k for k in range(6) if k in cache) == sorted(model)
    # built again only after eviction: 1, 2, 3, then 2 (evicted by 3), 1 (evicted by 2), 4
    assert builds == [1, 2, 3, 2, 1, 4]
    cache.pop(1)
    assert 1 not in cache and 4 in cache
    cache.clear()
    assert len(cache) == 0


def test_concurrent_askers_build_a_value_once() -> None:
    cache: WorkerCache[str, int] = WorkerCache(2)
    calls: list[int] = []

    def build() -> int:
        calls.append(1)
        time.sleep(0.05)
        return 7

    out: list[int] = []
    threads = [threading.Thread(target=lambda: out.append(cache.get("k", build)))
               for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert out == [7, 7, 7, 7]
    assert len(calls) == 1


def test_a_cache_keeps_at_least_one_entry() -> None:
    with pytest.raises(ValueError):
        WorkerCache(0)
