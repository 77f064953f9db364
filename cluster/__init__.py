"""The Dask layer of zeckenum: sharded exact counts and random play, chained optimal play,
checkpoints, resume.

Shard design: one large n splits by *prime block*.  In-process, `zeckenum.counting.count.count`
runs `spectrum.spectrum_residues(space, windows, block)` for each block in threads; the
cluster twin `count_tasks.spectrum_residues_task(rules, n, block) -> (residues,
word_updates)` rebuilds the game, its state space and its windows on the worker
(deterministic; cached per worker process, `workercache`) and calls the same function.  The
client plans (primes from the first sweep's size bound, equal blocks), submits one task per
block (per (n, block) for ranges), gathers, checkpoints each shard as it arrives, and
rebuilds the integers by the CRT.  Exact random play shards the same way
(`random_tasks.random_law_residues_task`, `random_win_residues_task`, primes below 2**50),
driven by the same `driver.ShardDriver`.  Optimal play of one n runs as a checkpointed chain of
level ranges (`solve_chain.run_solve`; resumable, not parallel).

Modules: `count_tasks` and `random_tasks` (the twins that run on workers, `<wrapper>_task`,
and the first-sweep tasks `count_facts_task`, `random_facts_task`), `workercache` (the
per-worker cache of rebuilt inputs), `kinds` (what each kind of run supplies to the
driver), `plan` (shard plans), `manifest` (the manifest format shared by shard and chain
checkpoints), `checkpoint` (atomic shard files + manifest, resume), `backend` (threads /
LocalCluster / remote scheduler / batch jobs, numba cache slots), `batch` (workers as
SLURM, PBS, SGE or LSF jobs through dask-jobqueue: the job request, lost jobs replaced),
`hostcache` (one first sweep per host),
`driver` (`ShardDriver`, the one driver of sharded runs), `run` (`run_count`,
`run_counts`, `run_random`), `solve_tasks` (the solve twin `layer_classes_task`),
`solve_chain` (`run_solve`), `predict` (the `plan` command's forecast).  Published tables
live in `zeckenum.tables`.
"""

from zeckenum.cluster.run import run_count, run_counts, run_random
from zeckenum.cluster.solve_chain import run_solve

__all__ = ["run_count", "run_counts", "run_random", "run_solve"]
