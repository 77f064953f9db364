"""Sharded counts (threads and real Dask clusters on 127.0.0.1) against references.

References: the brute force in tests/support/bruteforce.py (plain Python, shares no code with
zeckenum) and `zeckenum.count` run in-process (the sharded paths must agree with it exactly,
field by field).  Clusters are started by the tests themselves on 127.0.0.1 with free ports
and closed in `finally` blocks (`open_pool` closes them on any exit).
"""

from __future__ import annotations

import os
import threading

import pytest
import zeckenum
from bruteforce import census
from killed_client import busy_worker_killer
from zeckenum.cluster import run_count
from zeckenum.cluster.backend import open_pool
from zeckenum.cluster.run import count_on_pool


def test_in_process_shards_match_bruteforce() -> None:
    # three shards of one prime each; n = 40 has counts above 2**62, so the CRT is exercised
    res = run_count(40, blocks=3)
    ref = census(40)
    assert res.stats["shards_total"] == 3
    assert res.length_counts == ref["length_counts"]
    assert (res.games, res.shortest, res.longest) == (ref["games"], ref["shortest"],
                                                      ref["longest"])
    assert (res.states, res.transitions) == (ref["states"], ref["transitions"])


@pytest.mark.parametrize("n", [20, 33, 47, 60])
def test_in_process_shards_equal_count(n: int) -> None:
    res = run_count(n, max_primes_per_block=1)
    assert res.stats["shards_total"] == len(res.primes) + 1
    assert res == zeckenum.count(n)


def _cluster_case(workers: int) -> None:
    ns = [25, 44, 60]
    with open_pool(workers=workers) as pool:
        assert len(pool.workers) == workers
        got = count_on_pool(ns, "standard", pool, max_primes_per_block=1)
        single = count_on_pool([60], "standard", pool, blocks=3)[60]
    for n in ns:
        assert got[n].stats["backend"] == "dask"
        assert got[n].stats["workers"] == workers
        assert got[n] == zeckenum.count(n), n
    assert single.stats["shards_total"] == 3
    assert single == zeckenum.count(60)


def test_two_workers_equal_in_process() -> None:
    _cluster_case(2)


@pytest.mark.slow
@pytest.mark.parametrize("workers", [1, 3])
def test_one_and_three_workers_equal_in_process(workers: int) -> None:
    _cluster_case(workers)


def test_killing_a_worker_mid_run_gives_the_same_result() -> None:
    n = 110  # 9 primes: 9 shards of one prime
    with open_pool(workers=2) as pool:
        kill_busy_worker, killed = busy_worker_killer(pool.client)
        res = count_on_pool([n], "standard", pool, max_primes_per_block=1,
                            on_shard=kill_busy_worker)[n]
    assert killed, "no worker was busy after the first shard: the test did not kill one"
    assert res.stats["shards_total"] == 9
    assert res == zeckenum.count(n)


@pytest.mark.slow
def test_table_on_cluster_equals_in_process(tmp_path) -> None:  # noqa: ANN001
    from zeckenum.tables.build import build_table
    from zeckenum.tables.format import TABLE_KINDS

    what = TABLE_KINDS
    a = build_table(3, 14, what, tmp_path / "local")
    b = build_table(3, 14, what, tmp_path / "dask", workers=2)
    assert a["files"].keys() == b["files"].keys()
    for name in a["files"]:
        assert (tmp_path / "local" / name).read_bytes() == (tmp_path / "dask" / name).read_bytes()


def test_workers_and_scheduler_together_are_refused() -> None:
    with pytest.raises(zeckenum.InputError):
        run_count(10, workers=1, scheduler="tcp://127.0.0.1:1")


@pytest.mark.slow
def test_existing_cluster_by_address() -> None:
    from zeckenum.cluster.backend import close_cluster, start_local_cluster

    cluster = start_local_cluster(2)
    try:
        res = run_count(50, scheduler=cluster.scheduler_address, blocks=4)
        assert res.stats["shards_total"] == 4
        assert res == zeckenum.count(50)
    finally:
        close_cluster(cluster)


def test_no_threads_left_behind() -> None:
    before = {t.name for t in threading.enumerate()}
    run_count(30, blocks=2)
    after = {t.name for t in threading.enumerate()}
    assert not {t for t in after - before if t.startswith("ThreadPoolExecutor")}


@pytest.mark.slow
def test_remote_workers_get_their_own_numba_cache(tmp_path, monkeypatch) -> None:  # noqa: ANN001
    # a plain LocalCluster stands in for a remote cluster: nothing of ours set its workers'
    # environment, so the worker plugin must give each worker its own cache slot
    from distributed import LocalCluster

    monkeypatch.setenv("ZECKENUM_NUMBA_CACHE", str(tmp_path / "slots"))
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                           scheduler_port=0, dashboard_address=None)
    try:
        res = run_count(40, scheduler=cluster.scheduler_address, blocks=3)
        from distributed import Client

        with Client(cluster.scheduler_address, set_as_default=False) as client:
            dirs = client.run(lambda: os.environ.get("NUMBA_CACHE_DIR"))
    finally:
        cluster.close()
    assert res == zeckenum.count(40)
    assert len(set(dirs.values())) == 2
    assert all(d and d.startswith(str(tmp_path / "slots")) for d in dirs.values())
