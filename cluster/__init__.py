"""The Dask layer of zeckenum: sharded exact counts and random play, chained optimal play,
checkpoints, resume, published tables.

Shard design: one large n splits by *prime block*.  In-process, `zeckenum.counting.count.count`
runs `spectrum.spectrum_residues(space, windows, block)` for each block in threads; the
cluster twin `tasks.spectrum_task(rules, n, block) -> (residues, word_updates)` rebuilds the
game, its state space and its windows on the worker (deterministic; cached per worker
process) and calls the same function.  The client plans (primes from the first sweep's size
bound, equal blocks), submits one task per block (per (n, block) for ranges), gathers,
checkpoints each shard as it arrives, and rebuilds the integers by the CRT.  Exact random
play shards the same way (`random_tasks.random_law_task`, `random_win_task`, primes below
2**50), driven by the same `run.shards_on_pool`.  Optimal play of one n runs as a checkpointed
chain of level ranges (`solve_chain.run_solve`; resumable, not parallel).

Modules: `tasks` and `random_tasks` (the functions that run on workers), `kinds` (what
each kind of run supplies to the driver), `plan` (shard plans), `checkpoint` (atomic shard
files + manifest, resume), `backend` (threads / LocalCluster / remote scheduler, numba
cache slots), `run` (`run_count`, `run_counts`, `run_random`), `solve_chain`
(`run_solve`), `table` (published tables
and their verification), `predict` (the `plan` command's forecast).
"""

from zeckenum.cluster.run import count_on_cluster, run_count, run_counts, run_random
from zeckenum.cluster.solve_chain import run_solve

__all__ = ["count_on_cluster", "run_count", "run_counts", "run_random", "run_solve"]
