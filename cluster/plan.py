"""Shard plans: which primes a sharded run uses and how they are cut into blocks.

Every prime costs the same work (the exact sweep does the same word updates per prime), so
blocks of equal size balance.  The default aims at `count.COUNT_PRIMES_PER_BLOCK` primes per
block and rounds the number of blocks up to a multiple of the workers, so that every
worker gets the same share; `blocks=` or `max_primes_per_block=` override it (tests use
them to get several shards at small n).  A count takes primes below 2**62 for its size
bound (`make_plan`); random play takes primes below 2**50 whose product exceeds its
denominator (`zeckenum.core.modular.mul_primes_exceeding`); both are cut by `plan_from_primes`
with the one planner's `core.blocks.block_count` and `split_evenly`.
"""

from __future__ import annotations

from dataclasses import dataclass

from zeckenum.cluster.count_tasks import Facts
from zeckenum.cluster.random_tasks import RandomFacts
from zeckenum.core.blocks import block_count, split_evenly
from zeckenum.core.modular import primes_for_bits
from zeckenum.counting.count import COUNT_PRIMES_PER_BLOCK


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

    @property
    def all_primes(self) -> tuple[int, ...]:
        return (*self.primes, self.check_prime)

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


def worker_bytes(facts: Facts | RandomFacts, plan: ShardPlan, threads: int = 1) -> int:
    """Peak bytes of one worker running `threads` shards of `plan` at once.

    The per-state windows and shared move lists of the game, plus for each running shard
    its layers in flight (words_one words per prime of the block) and fixed buffers.
    """
    biggest = sorted((len(b) for b in plan.blocks), reverse=True)[:threads]
    per_block = sum(facts.words_one * 8 * b + facts.fixed_bytes for b in biggest)
    return facts.window_bytes + facts.shared_bytes + per_block
