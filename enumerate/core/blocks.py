"""The one prime-block planner and the one thread runner of every exact sweep.

An exact sweep is run once per word-size prime; the primes of one run (the CRT's primes
plus the check prime, `core.modular`) are cut into *blocks*, and one block's sweep is one
shard: run in threads in-process (`run_blocks`; kernels release the GIL) or on a cluster
worker.  Every prime costs the same work, so blocks of equal size balance; each engine
differs only in its numbers:

* `per_block` -- the primes a block aims at (the count's `COUNT_PRIMES_PER_BLOCK`, random
  play's `LAW_PRIMES_PER_BLOCK` / `WIN_PRIMES_PER_BLOCK`, or None: as many as memory allows);
* memory -- bytes per prime of a block (`prime_bytes`), fixed bytes per block
  (`block_bytes`), bytes shared by all blocks (`shared_bytes`) and the limit;
* whether too little memory for `threads` blocks of one prime refuses the run
  (`fewer_threads=False`, the count) or runs fewer blocks at once (random play).

Invariants of a plan (`block_plan`, and the cluster's shard plans built from
`block_count` + `split_evenly`): the blocks are consecutive runs of the primes in their
order, their sizes differ by at most one, there are at most as many blocks as primes, and
by default their number is a multiple of the threads (or workers) so that they finish
together.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import TypeVar

from zeckenum.core.memory import refuse_if_over
from zeckenum.errors import InputError

T = TypeVar("T")
R = TypeVar("R")


@dataclass(frozen=True)
class BlockPlan:
    """How the primes of one exact sweep are cut into blocks and run in threads."""

    blocks: tuple[tuple[int, ...], ...]
    threads: int
    bytes_per_block: tuple[int, ...]
    shared_bytes: int = 0

    @property
    def peak_bytes(self) -> int:
        """Bytes of the blocks running at once plus what they share."""
        return self.shared_bytes + sum(sorted(self.bytes_per_block, reverse=True)[: self.threads])


def block_count(
    nprimes: int, workers: int, per_block: int, blocks: int | None = None,
    max_primes_per_block: int | None = None,
) -> int:
    """How many blocks `nprimes` primes are cut into (1 .. nprimes): `blocks`, or enough
    for `max_primes_per_block`, or by default about `per_block` primes each, the number
    rounded up to a multiple of the workers."""
    if blocks is not None:
        if blocks < 1:
            raise InputError(f"blocks must be >= 1, got {blocks}")
        return min(nprimes, blocks)
    if max_primes_per_block is not None:
        if max_primes_per_block < 1:
            raise InputError(f"max primes per block must be >= 1, got {max_primes_per_block}")
        return min(nprimes, math.ceil(nprimes / max_primes_per_block))
    workers = max(1, workers)
    k = math.ceil(nprimes / per_block)
    return min(nprimes, workers * math.ceil(k / workers))


def split_evenly(primes: Sequence[int], nblocks: int) -> tuple[tuple[int, ...], ...]:
    """`primes` cut into `nblocks` consecutive blocks whose sizes differ by at most one
    (the first ones are the larger)."""
    base, extra = divmod(len(primes), nblocks)
    out, i = [], 0
    for b in range(nblocks):
        size = base + (1 if b < extra else 0)
        out.append(tuple(int(p) for p in primes[i : i + size]))
        i += size
    return tuple(out)


def block_plan(
    primes: Sequence[int], threads: int, *, per_block: int | None, prime_bytes: int,
    limit: int, what: str, block_bytes: int = 0, shared_bytes: int = 0,
    fewer_threads: bool = False,
) -> BlockPlan:
    """Cut `primes` into blocks so that the blocks running at once fit under `limit` bytes.

    A block of b primes holds b * `prime_bytes` + `block_bytes` bytes at its peak, and
    `shared_bytes` are held once for all blocks.  At most min(threads, len(primes)) blocks
    run at once; with `fewer_threads`, fewer when memory requires (MemoryRefused, naming
    `what`, only when one block of one prime does not fit); without it MemoryRefused when
    that many blocks of one prime do not fit (naming `what`, the blocks and the threads).
    Blocks hold at most `per_block` primes (None: no limit but memory) and as many as
    memory allows below that, and their number is the smallest multiple of the threads
    that achieves this (`block_count`), at most one block per prime.
    """
    nprimes = len(primes)
    k = max(1, min(threads, nprimes))
    one = prime_bytes + block_bytes
    if fewer_threads:
        refuse_if_over(shared_bytes + one, limit, what)
        k = min(k, (limit - shared_bytes) // one)
    # the largest block size whose k blocks fit (math.inf: any size fits)
    room = limit - shared_bytes - k * block_bytes
    if prime_bytes > 0:
        fits: float = room // (k * prime_bytes)
    else:
        fits = math.inf if room >= 0 else 0
    if fits < 1:
        refuse_if_over(shared_bytes + k * one, limit,
                       f"{what} ({nprimes} prime blocks, {k} threads)")
    size = max(1, min(fits, math.inf if per_block is None else per_block))
    nblocks = block_count(nprimes, k, size) if size != math.inf else min(nprimes, k)
    blocks = split_evenly(primes, nblocks)
    return BlockPlan(blocks=blocks, threads=k,
                     bytes_per_block=tuple(len(b) * prime_bytes + block_bytes for b in blocks),
                     shared_bytes=shared_bytes)


def run_blocks(blocks: Sequence[T], fn: Callable[[T], R], threads: int) -> list[R]:
    """fn(block) for every block, `threads` blocks at a time (in threads: kernels release
    the GIL), the results in block order; in the calling thread when there is one block
    or one thread."""
    if len(blocks) == 1 or threads == 1:
        return [fn(b) for b in blocks]
    with ThreadPoolExecutor(threads) as pool:
        return list(pool.map(fn, blocks))
