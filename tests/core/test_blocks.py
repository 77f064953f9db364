"""zeckenum.core.blocks: the one prime-block planner and thread runner.

Sources: the planners the engines had before they shared `core.blocks` are written out
below, independently of the engine (common practice: a refactoring keeps every plan), and
the planner's invariants are checked directly (blocks partition the primes in order, sizes
differ by at most one, the running blocks fit the limit).
"""

from __future__ import annotations

import math
import threading

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from zeckenum.core.blocks import block_count, block_plan, run_blocks, split_evenly
from zeckenum.errors import InputError, MemoryRefused


def _count_plan_before(primes, threads, words_one, fixed, shared, limit):  # noqa: ANN001, ANN202
    """The count's planner as it was: grow the number of blocks by `threads` until they fit."""
    threads = max(1, min(threads, len(primes)))
    nblocks = max(threads, math.ceil(len(primes) / 4))
    nblocks = min(len(primes), threads * math.ceil(nblocks / threads))
    while True:
        size = math.ceil(len(primes) / nblocks)
        need = shared + threads * (words_one * 8 * size + fixed)
        if need <= limit or nblocks >= len(primes):
            break
        nblocks = min(len(primes), nblocks + threads)
    if need > limit:
        return None
    blocks = tuple(tuple(int(p) for p in b) for b in np.array_split(primes, nblocks))
    return blocks, threads


def _random_plan_before(allp, threads, words, most, budget, extra):  # noqa: ANN001, ANN202
    """Random play's planner as it was: fewer threads, then the largest blocks that fit."""
    k = max(1, min(threads, len(allp)))
    per_prime = max(1, words) * 8 + extra
    if per_prime > budget:
        return None
    k = min(k, budget // per_prime)
    size = max(1, min(math.ceil(len(allp) / k), budget // (k * per_prime)))
    if most is not None:
        size = min(size, most)
    nblocks = math.ceil(len(allp) / size)
    nblocks = k * math.ceil(nblocks / k)
    blocks = [tuple(int(x) for x in b) for b in np.array_split(np.array(allp), nblocks)]
    return tuple(b for b in blocks if b), k


def _primes(n: int) -> list[int]:
    return [1000 + 7 * i for i in range(n)]  # any distinct values: the planner never divides


@settings(max_examples=400, deadline=None)
@given(nprimes=st.integers(1, 90), threads=st.integers(1, 40), words=st.integers(0, 5000),
       fixed=st.integers(0, 100_000), shared=st.integers(0, 2_000_000),
       limit=st.integers(0, 4_000_000))
def test_count_plans_are_the_plans_before(nprimes, threads, words, fixed, shared,  # noqa: ANN001
                                          limit) -> None:
    primes = _primes(nprimes)
    want = _count_plan_before(primes, threads, words, fixed, shared, limit)
    kwargs = dict(per_block=4, prime_bytes=words * 8, block_bytes=fixed, shared_bytes=shared,
                  limit=limit, what="the exact sweep")
    if want is None:
        with pytest.raises(MemoryRefused, match=rf"\({nprimes} prime blocks"):
            block_plan(primes, threads, **kwargs)
        return
    plan = block_plan(primes, threads, **kwargs)
    assert (plan.blocks, plan.threads) == want
    assert plan.peak_bytes <= limit


@settings(max_examples=400, deadline=None)
@given(nprimes=st.integers(1, 150), threads=st.integers(1, 40), words=st.integers(0, 10**6),
       most=st.one_of(st.none(), st.integers(1, 40)), budget=st.integers(0, 10**9),
       extra=st.integers(0, 50_000))
def test_random_plans_are_the_plans_before(nprimes, threads, words, most, budget,  # noqa: ANN001
                                           extra) -> None:
    primes = _primes(nprimes)
    want = _random_plan_before(primes, threads, words, most, budget, extra)
    kwargs = dict(per_block=most, prime_bytes=max(1, words) * 8 + extra, limit=budget,
                  what="the exact length law", fewer_threads=True)
    if want is None:
        with pytest.raises(MemoryRefused, match="the exact length law needs"):
            block_plan(primes, threads, **kwargs)
        return
    plan = block_plan(primes, threads, **kwargs)
    assert (plan.blocks, plan.threads) == want
    assert plan.peak_bytes <= budget


@settings(max_examples=300, deadline=None)
@given(nprimes=st.integers(1, 200), workers=st.integers(1, 64), per_block=st.integers(1, 40))
def test_default_shard_counts(nprimes: int, workers: int, per_block: int) -> None:
    nb = block_count(nprimes, workers, per_block)
    assert 1 <= nb <= nprimes
    # a multiple of the workers unless capped at one block per prime
    assert nb == nprimes or nb % workers == 0
    # blocks of at most per_block primes, and no more blocks than that needs
    assert math.ceil(nprimes / nb) <= per_block or nb == nprimes
    assert nb - workers < math.ceil(nprimes / per_block) or nb == nprimes


def test_block_count_overrides() -> None:
    assert block_count(10, 3, 4, blocks=7) == 7
    assert block_count(10, 3, 4, blocks=70) == 10
    assert block_count(10, 3, 4, max_primes_per_block=3) == 4
    with pytest.raises(InputError):
        block_count(10, 3, 4, blocks=0)
    with pytest.raises(InputError):
        block_count(10, 3, 4, max_primes_per_block=0)


@given(nprimes=st.integers(0, 60), nblocks=st.integers(1, 60))
def test_split_evenly_partitions_in_order(nprimes: int, nblocks: int) -> None:
    primes = _primes(nprimes)
    blocks = split_evenly(primes, nblocks)
    assert len(blocks) == nblocks
    assert [p for b in blocks for p in b] == primes
    sizes = [len(b) for b in blocks]
    assert max(sizes) - min(sizes) <= 1
    assert sizes == sorted(sizes, reverse=True)


def test_run_blocks_keeps_order_and_uses_threads() -> None:
    seen: set[int] = set()
    lock = threading.Lock()

    def fn(b: tuple[int, ...]) -> int:
        with lock:
            seen.add(threading.get_ident())
        return sum(b)

    blocks = [tuple(range(i, i + 3)) for i in range(0, 30, 3)]
    assert run_blocks(blocks, fn, 4) == [sum(b) for b in blocks]
    assert threading.get_ident() not in seen  # ran in the pool
    seen.clear()
    assert run_blocks(blocks, fn, 1) == [sum(b) for b in blocks]
    assert seen == {threading.get_ident()}  # one thread: in the caller
