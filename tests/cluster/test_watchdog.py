"""Cluster runs that lose every worker: recovery when the workers come back, and the
watchdog (`ClusterStalled`, exit 7) when they do not.

References: the plain-Python brute force tests/support/bruteforce.py (shares no code with
zeckenum) for the exact result, and `zeckenum.count` in-process for the resumed run.
Every scenario runs in a thread with a deadline, so a hang fails the test instead of
hanging the suite; clusters bind to 127.0.0.1 with free ports and are closed in `finally`.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import zeckenum
from bruteforce import census
from zeckenum.cluster.backend import close_cluster, open_pool, stall_seconds, start_local_cluster
from zeckenum.cluster.run import count_on_pool, run_count
from zeckenum.errors import ClusterStalled, InputError

N = 100  # 7 primes and a check prime: 8 shards of one prime


def bounded(fn: Callable[[], Any], seconds: float) -> Any:
    """fn() in a daemon thread; fails the test if it has not returned after `seconds`."""
    box: dict[str, Any] = {}

    def go() -> None:
        try:
            box["value"] = fn()
        except BaseException as exc:  # noqa: BLE001 - handed to the test below
            box["error"] = exc

    t = threading.Thread(target=go, daemon=True, name="bounded-scenario")
    t.start()
    t.join(seconds)
    assert not t.is_alive(), f"the run did not end within {seconds} s: it hangs"
    if "error" in box:
        raise box["error"]
    return box["value"]


def _unfinished_tasks(dask_scheduler) -> int:  # noqa: ANN001 - runs on the scheduler
    return sum(ts.state not in ("memory", "erred", "forgotten", "released")
               for ts in dask_scheduler.tasks.values())


@pytest.fixture(scope="module")
def reference() -> dict:
    return census(N)


@pytest.fixture
def host_cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("ZECKENUM_HOST_CACHE", str(tmp_path / "host"))
    return tmp_path / "host"


def test_all_workers_killed_at_once_the_run_recovers(reference: dict, host_cache: Path) -> None:
    with open_pool(workers=2) as pool:
        client = pool.client
        pids = client.run(os.getpid)
        assert len(pids) == 2
        unfinished: list[int] = []  # tasks the scheduler had not finished at the kill

        def kill_all(_n: int, _i: int) -> None:
            if unfinished:
                return
            unfinished.append(client.run_on_scheduler(_unfinished_tasks))
            for pid in pids.values():  # every worker at once, as an OOM or a host crash
                os.kill(pid, signal.SIGKILL)

        res = bounded(lambda: count_on_pool([N], "standard", pool, max_primes_per_block=1,
                                            on_shard=kill_all)[N], 400)
        restarted = client.run(os.getpid)
    assert unfinished and unfinished[0] > 0, "every shard had finished: the kill came too late"
    assert not set(restarted.values()) & set(pids.values())  # new worker processes ran them
    assert res.stats["shards_total"] == 8
    assert res.games == reference["games"]
    assert res.length_counts == reference["length_counts"]
    assert (res.states, res.transitions, res.shortest, res.longest) == (
        reference["states"], reference["transitions"], reference["shortest"],
        reference["longest"])


def test_all_workers_killed_in_a_range_the_run_recovers(reference: dict,
                                                        host_cache: Path) -> None:
    # the shards of a range prefer the worker that swept their n: when it is gone, the
    # driver must resubmit them without that preference
    ns = [72, 86, N]
    with open_pool(workers=2) as pool:
        client = pool.client
        pids = client.run(os.getpid)
        unfinished: list[int] = []

        def kill_all(_n: int, _i: int) -> None:
            if unfinished:
                return
            unfinished.append(client.run_on_scheduler(_unfinished_tasks))
            for pid in pids.values():
                os.kill(pid, signal.SIGKILL)

        got = bounded(lambda: count_on_pool(ns, "standard", pool, max_primes_per_block=1,
                                            on_shard=kill_all), 400)
    assert unfinished and unfinished[0] > 0, "every shard had finished: the kill came too late"
    for n in ns:
        ref = reference if n == N else census(n)
        assert got[n].games == ref["games"], n
        assert got[n].length_counts == ref["length_counts"], n


def test_workers_gone_for_good_stop_with_cluster_stalled(
    tmp_path: Path, host_cache: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("ZECKENUM_STALL_TIMEOUT", "3")
    cp = tmp_path / "cp"
    cluster = start_local_cluster(1)
    try:
        with open_pool(scheduler=cluster.scheduler_address) as pool:
            gone: list[int] = []

            def close_workers(_n: int, i: int) -> None:
                if not gone:  # the cluster keeps its scheduler but loses its worker for good
                    gone.append(i)
                    cluster.scale(0)

            t0 = time.monotonic()
            with pytest.raises(ClusterStalled) as err:
                bounded(lambda: count_on_pool([N], "standard", pool, max_primes_per_block=1,
                                              checkpoint_dir=cp, on_shard=close_workers), 300)
            waited = time.monotonic() - t0
        assert gone
        assert err.value.exit_code == 7
        msg = str(err.value)
        assert "\n" not in msg and "stalled" in msg and str(cp) in msg and "kept" in msg
        assert waited < 240  # bounded: the watchdog fired, not the test's deadline
    finally:
        close_cluster(cluster)
    # the checkpoint is valid and a rerun (here in-process) resumes from it
    res = bounded(lambda: run_count(N, checkpoint_dir=cp, max_primes_per_block=1), 300)
    assert res.stats["shards_reused"] >= 1
    assert res.stats["shards_reused"] + res.stats["shards_computed"] == 8
    assert res == zeckenum.count(N)


def test_stall_timeout_is_checked() -> None:
    assert stall_seconds(2.5) == 2.5
    for bad in (0, -1, float("nan"), float("inf"), "soon"):
        with pytest.raises(InputError):
            stall_seconds(bad)  # type: ignore[arg-type]


def test_stall_timeout_from_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("ZECKENUM_STALL_TIMEOUT", raising=False)
    assert stall_seconds() == 600.0
    monkeypatch.setenv("ZECKENUM_STALL_TIMEOUT", "7")
    assert stall_seconds() == 7.0
    monkeypatch.setenv("ZECKENUM_STALL_TIMEOUT", "0")
    with pytest.raises(InputError):
        stall_seconds()


def test_solve_chain_stops_with_cluster_stalled(tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    from zeckenum.cluster.solve_chain import run_solve

    monkeypatch.setenv("ZECKENUM_STALL_TIMEOUT", "3")
    cp = tmp_path / "solve"
    cluster = start_local_cluster(1)
    try:
        gone: list[int] = []

        def close_workers(i: int) -> None:
            if not gone:
                gone.append(i)
                cluster.scale(0)

        with pytest.raises(ClusterStalled) as err:
            bounded(lambda: run_solve(60, scheduler=cluster.scheduler_address, shards=6,
                                      checkpoint_dir=cp, on_shard=close_workers), 300)
        assert gone and err.value.exit_code == 7 and str(cp) in str(err.value)
    finally:
        close_cluster(cluster)
    # the chain's checkpoint resumes in-process; reference: the solve in one piece (held
    # against minimax and the rule-set brute force in tests/optimal/test_solve.py)
    from zeckenum.optimal.solve import solve

    res = bounded(lambda: run_solve(60, checkpoint_dir=cp), 300)
    assert res.stats["shards_reused"] >= 1
    ref = solve(60)
    assert (res.winner, res.states, res.p_positions, res.start_moves) == (
        ref.winner, ref.states, ref.p_positions, ref.start_moves)


class _Boom(Exception):
    pass


@pytest.mark.parametrize("stop", [_Boom, KeyboardInterrupt])
def test_a_failed_run_releases_the_host_cache(host_cache: Path, stop: type) -> None:
    from zeckenum.cluster import hostcache
    from zeckenum.rules.catalogue import get_rules

    folder = hostcache.sweep_folder(get_rules("standard").content_hash(), 70)
    seen: list[bool] = []

    def fail(_n: int, _i: int) -> None:
        seen.append(folder.exists())
        raise stop()

    with open_pool(workers=2) as pool:
        with pytest.raises(stop):
            bounded(lambda: count_on_pool([70], "standard", pool, max_primes_per_block=1,
                                          on_shard=fail), 300)
        assert seen == [True]  # the workers shared the sweep while the run lived ...
        assert not folder.exists()  # ... and were asked to drop it when it failed


def test_table_on_a_cluster_that_loses_every_worker_stops_and_resumes(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """`table` waits on its per-n tasks through the watchdog: workers gone for good give
    ClusterStalled (exit 7) naming the kept rows, and a rerun computes only the rest.
    Reference: player 2 wins the standard game for every n > 2 ("The Zeckendorf Game",
    2018, arXiv:1809.04881)."""
    from zeckenum.tables.build import build_table
    from zeckenum.tables.format import load_table

    monkeypatch.setenv("ZECKENUM_STALL_TIMEOUT", "3")
    out = tmp_path / "t"
    rows = out / ".rows"
    cluster = start_local_cluster(1)
    try:
        box: dict[str, Any] = {}

        def run() -> None:
            try:
                build_table(3, 70, "solve", out, scheduler=cluster.scheduler_address)
            except BaseException as exc:  # noqa: BLE001 - checked below
                box["error"] = exc

        t = threading.Thread(target=run, daemon=True)
        t.start()
        deadline = time.monotonic() + 240
        while time.monotonic() < deadline and not (
            rows.is_dir() and any(p.name.startswith("solve-") for p in rows.iterdir())
        ):
            time.sleep(0.05)
        cluster.scale(0)  # the first rows are in; the worker goes for good
        t.join(240)
        assert not t.is_alive(), "table did not stop: it hangs"
    finally:
        close_cluster(cluster)
    err = box.get("error")
    assert isinstance(err, ClusterStalled), err
    assert err.exit_code == 7 and ".rows" in str(err) and "\n" not in str(err)
    kept = {p.name for p in rows.iterdir() if p.name.startswith("solve-")}
    assert 1 <= len(kept) < 68
    # the rerun in-process keeps those rows and completes the table
    bounded(lambda: build_table(3, 70, "solve", out), 300)
    table = load_table(out)
    assert table.ns == list(range(3, 71))
    assert [str(table.solve[n]["winner"]) for n in table.ns] == ["2"] * 68
