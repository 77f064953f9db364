"""Shard plans: which primes a sharded run uses and how they are cut into blocks.

Every prime costs the same work (the exact sweep does the same word updates per prime), so
blocks of equal size balance.  The default aims at `count.COUNT_PRIMES_PER_BLOCK` primes per
block and rounds the number of blocks up to a multiple of the workers, so that every
worker gets the same share; `blocks=` or `max_primes_per_block=` override it (tests use
them to get several shards at small n).  A count takes primes below 2**62 for its size
bound (`make_plan`); random play takes primes below 2**50 whose product exceeds its
denominator (`zeckenum.core.modular.mul_primes_exceeding`); both are cut by `plan_from_primes`
with the one planner's `core.blocks.block_count` and `split_evenly`.

A count by evaluation points (`counting.points`) has another kind of plan, `PointsPlan`
(`points_plan`): its primes are the NTT primes below 2**50 that are 1 mod N (N the number
of points, `core.ntt.transform_size` of the length span) and a shard is (prime, [lo, hi) of
the N point indices), so its shards are as many and as small as asked (one point each at
the least).  Both plans answer the same questions for the driver and the checkpoint
(`route`, `all_primes`, `to_dict`, `shard_input`, `shard_shape`, `shard_moduli`); a prime
block plan's JSON is as it always was (no "route" key: read as "windows").
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from zeckenum.cluster.count_tasks import Facts, PointsFacts
from zeckenum.cluster.random_tasks import RandomFacts
from zeckenum.core.blocks import block_count, split_evenly
from zeckenum.core.modular import primes_for_bits
from zeckenum.core.ntt import ntt_primes_for_bits, point_blocks, transform_size
from zeckenum.counting.count import COUNT_PRIMES_PER_BLOCK
from zeckenum.errors import InputError


@dataclass(frozen=True)
class ShardPlan:
    """The primes of one exact count and their blocks (shard i computes blocks[i]).

    The last prime of the last block is the check prime; `primes` are the ones the CRT uses.
    """

    rules: str
    rules_hash: str
    n: int
    prime_offset: int
    primes: tuple[int, ...]
    check_prime: int
    blocks: tuple[tuple[int, ...], ...]

    route: ClassVar[str] = "windows"

    @property
    def all_primes(self) -> tuple[int, ...]:
        return (*self.primes, self.check_prime)

    def shard_input(self, i: int) -> tuple[int, ...]:
        """What shard i's task receives: its block of primes."""
        return self.blocks[i]

    def shard_shape(self, i: int, columns: int) -> tuple[int, ...]:
        """Shape of shard i's residues: (primes in block i, columns)."""
        return (len(self.blocks[i]), int(columns))

    def shard_moduli(self, i: int) -> np.ndarray:
        """The prime of every residue of shard i (broadcast against `shard_shape`)."""
        return np.asarray(self.blocks[i], dtype=np.int64)[:, None]

    def to_dict(self) -> dict:
        """JSON form: primes as decimal strings (they exceed 2**53)."""
        return {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            "prime_offset": self.prime_offset,
            "primes": [str(p) for p in self.primes],
            "check_prime": str(self.check_prime),
            "blocks": [[str(p) for p in b] for b in self.blocks],
        }

    @classmethod
    def from_dict(cls, d: dict) -> ShardPlan:
        return cls(
            rules=str(d["rules"]),
            rules_hash=str(d["rules_hash"]),
            n=int(d["n"]),
            prime_offset=int(d["prime_offset"]),
            primes=tuple(int(p) for p in d["primes"]),
            check_prime=int(d["check_prime"]),
            blocks=tuple(tuple(int(p) for p in b) for b in d["blocks"]),
        )


def make_plan(
    facts: Facts, prime_offset: int = 0, workers: int = 1, blocks: int | None = None,
    max_primes_per_block: int | None = None,
) -> ShardPlan:
    """The shard plan of the exact count described by `facts` (primes below 2**62 for its
    size bound `count_bits`, plus the check prime)."""
    primes, check = primes_for_bits(facts.count_bits, prime_offset)
    return plan_from_primes(facts, prime_offset, list(primes), check, workers, blocks,
                            max_primes_per_block)


def plan_from_primes(
    facts: Facts | RandomFacts, prime_offset: int, primes: list[int], check_prime: int,
    workers: int = 1, blocks: int | None = None, max_primes_per_block: int | None = None,
    per_block: int = COUNT_PRIMES_PER_BLOCK,
) -> ShardPlan:
    """The shard plan of any kind of run: `primes` + [check_prime] cut into equal blocks
    (`block_count`, `split_evenly`); `facts` names the game (rules, rules_hash, n)."""
    allp = (*primes, check_prime)
    nblocks = block_count(len(allp), workers, per_block, blocks, max_primes_per_block)
    return ShardPlan(
        rules=facts.rules,
        rules_hash=facts.rules_hash,
        n=facts.n,
        prime_offset=prime_offset,
        primes=tuple(primes),
        check_prime=check_prime,
        blocks=split_evenly(allp, nblocks),
    )


@dataclass(frozen=True)
class PointsPlan:
    """The primes of one count by evaluation points and its shards: shard i computes the
    length polynomial's values mod blocks[i] = (prime, lo, hi) at the points w**k, k in
    [lo, hi), w of order `order` = N mod that prime (`core.ntt.root_of_order`).

    Invariants: every prime is 1 mod `order`; the blocks run prime by prime (in the order
    of `all_primes`, the check prime last), each prime's blocks cut [0, order) in
    consecutive pieces of `per_shard` points (the last one shorter); `to_dict` records the
    route, N and the points per shard, so a checkpoint of another shape is refused.
    """

    rules: str
    rules_hash: str
    n: int
    prime_offset: int
    primes: tuple[int, ...]
    check_prime: int
    order: int
    per_shard: int
    blocks: tuple[tuple[int, int, int], ...]

    route: ClassVar[str] = "points"

    @property
    def all_primes(self) -> tuple[int, ...]:
        return (*self.primes, self.check_prime)

    def shard_input(self, i: int) -> tuple[int, int, int, int]:
        """What shard i's task receives: (prime, N, lo, hi)."""
        q, lo, hi = self.blocks[i]
        return (q, self.order, lo, hi)

    def shard_shape(self, i: int, columns: int) -> tuple[int, ...]:
        """Shape of shard i's values: (hi - lo,) (`columns` is N, the same for all)."""
        _q, lo, hi = self.blocks[i]
        return (hi - lo,)

    def shard_moduli(self, i: int) -> np.ndarray:
        """The prime of every value of shard i."""
        return np.asarray(self.blocks[i][0], dtype=np.int64)

    def to_dict(self) -> dict:
        """JSON form: the route first, primes as decimal strings, point indices as ints."""
        return {
            "route": self.route,
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            "prime_offset": self.prime_offset,
            "primes": [str(p) for p in self.primes],
            "check_prime": str(self.check_prime),
            "points": self.order,
            "points_per_shard": self.per_shard,
            "blocks": [[str(q), lo, hi] for q, lo, hi in self.blocks],
        }


AnyPlan = ShardPlan | PointsPlan
"""A plan the driver and the checkpoints accept."""


def check_points_per_shard(points_per_shard: object) -> int | None:
    """`points_per_shard` as an int >= 1 (or None), else InputError."""
    if points_per_shard is None:
        return None
    if isinstance(points_per_shard, bool) or not isinstance(points_per_shard, int) or (
            points_per_shard < 1):
        raise InputError(f"points per shard must be an integer >= 1, got "
                         f"{points_per_shard!r}")
    return points_per_shard


def points_plan(
    facts: Facts, prime_offset: int = 0, points_per_shard: int | None = None,
    workers: int = 1,
) -> PointsPlan:
    """The shard plan of the count by evaluation points described by `facts`.

    N = `transform_size(longest - shortest)`; the primes are the NTT primes 1 mod N
    below 2**50 whose product exceeds 2**count_bits (skipping `prime_offset`), plus the
    check prime, exactly as `points.count_points` takes them; each prime's N points are
    cut into blocks of `points_per_shard` (at most N).  Without `points_per_shard`: all N
    points per shard, halved until there are at least as many shards as `workers`.
    """
    check_points_per_shard(points_per_shard)
    order = transform_size(facts.longest - facts.shortest)
    primes, check = ntt_primes_for_bits(facts.count_bits, order, prime_offset)
    allp = (*primes, check)
    if points_per_shard is None:
        per = order
        while per > 1 and len(allp) * -(-order // per) < max(1, workers):
            per //= 2
    else:
        per = min(int(points_per_shard), order)
    return PointsPlan(
        rules=facts.rules, rules_hash=facts.rules_hash, n=facts.n,
        prime_offset=prime_offset, primes=tuple(primes), check_prime=check, order=order,
        per_shard=per,
        blocks=tuple((q, lo, hi) for q in allp for lo, hi in point_blocks(order, per)),
    )


def worker_bytes(facts: Facts | RandomFacts, plan: AnyPlan, threads: int = 1) -> int:
    """Peak bytes of one worker running `threads` shards of `plan` at once.

    The per-state windows and shared move lists of the game, plus for each running shard
    its layers in flight (words_one words per prime of the block; for a points plan
    `points_words_one` words per point, `points.points_peak_words`) and fixed buffers.
    """
    if isinstance(plan, PointsPlan):
        if not isinstance(facts, PointsFacts):
            raise TypeError("the memory of a points plan needs PointsFacts "
                            "(count_tasks.points_facts_of)")
        sizes = sorted((hi - lo for _q, lo, hi in plan.blocks), reverse=True)[:threads]
        per_shard = sum(facts.points_words_one * 8 * b + facts.fixed_bytes for b in sizes)
        return facts.window_bytes + facts.shared_bytes + per_shard
    biggest = sorted((len(b) for b in plan.blocks), reverse=True)[:threads]
    per_block = sum(facts.words_one * 8 * b + facts.fixed_bytes for b in biggest)
    return facts.window_bytes + facts.shared_bytes + per_block
