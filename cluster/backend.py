"""Where shards run: threads in this process, a local Dask cluster, or an existing one.

`open_pool(workers=None, scheduler=None)` yields a `Pool`:

* neither given: threads in this process (nothing is started);
* `workers=K`: a `distributed.LocalCluster` of K worker processes (one thread each) on
  127.0.0.1 with free ports, closed when the block exits, even on error;
* `scheduler=ADDRESS`: a client of an existing cluster (nothing is started or closed).

Numba's on-disk cache is not safe when several processes compile the same function at once
(numba issues 4807 and 10128).  So the client compiles first (`warm_up`: a tiny count or
random play in this process), and every worker process gets a cache folder of its own, a
*slot* under `$ZECKENUM_NUMBA_CACHE` (default: <tmp>/zeckenum-numba-<uid>) held with an
exclusive `flock` (the kernel drops the lock when its holder dies, even by SIGKILL):

* `--workers K`: the client locks K slots, copies its freshly compiled kernels into them
  (`seed_slot`) and starts worker i with NUMBA_CACHE_DIR set to slot i, so the worker
  loads the kernels instead of compiling them (seconds instead of tens of seconds);
* `--scheduler ADDRESS`: the `NumbaCacheSlot` worker plugin locks a free slot on the
  worker's own machine before the worker imports zeckenum (a worker started with
  NUMBA_CACHE_DIR already set keeps it).  Slots persist, so later runs load the kernels.

Progress never depends on where a task runs: tasks are unrestricted, or carry at most a
loose hint (`submit(..., prefer=ADDRESS)`) that the driver withdraws by resubmitting the
task unhinted as soon as that worker is gone (Dask never rescheduled hinted tasks whose
workers had all died, and a run hung forever).  The driver waits for results with a
`Watchdog`: it wakes every few seconds and raises `ClusterStalled` (exit 7) once the
cluster has had no worker and finished no task for the stall timeout (`stall_seconds`: the
caller's value, else $ZECKENUM_STALL_TIMEOUT, else 600 s).
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import contextlib
import logging
import math
import os
import queue
import threading
import time
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING

from zeckenum.core.checks import thread_count
from zeckenum.core.jit import cache_base
from zeckenum.errors import ClusterStalled, InputError

if TYPE_CHECKING:  # pragma: no cover - types only
    from zeckenum.cluster.batch import BatchSpec

log = logging.getLogger("zeckenum.cluster")

_warm = threading.Lock()
_warmed: set[str] = set()

STALL_TIMEOUT = 600.0
"""Default seconds without any worker and without a finished task before a run stops."""
STALL_ENV = "ZECKENUM_STALL_TIMEOUT"

WARM_KINDS = ("count", "points", "random", "solve")
"""Kinds of run whose kernels `warm_up` knows how to compile."""


def warm_up(kinds: tuple[str, ...] = ("count",)) -> None:
    """Compile (or load) the kernels of each kind of run in `kinds` in this process, once:
    "count" (a tiny `count`), "points" (a tiny count by evaluation points), "random" (a
    tiny `random_play`, length law and winners) and "solve" (tiny solves: two and three
    players, with and without the reachability sweep)."""
    with _warm:
        for kind in kinds:
            if kind in _warmed:
                continue
            if kind == "count":
                from zeckenum.counting.count import count

                count(5, threads=1)
            elif kind == "points":
                from zeckenum.counting.points import count_points

                count_points(5, points_per_shard=1, threads=1)
            elif kind == "random":
                from zeckenum.randomplay.exact import random_play

                random_play(5, threads=1)
                random_play(5, threads=1, winners_only=True)
            elif kind == "solve":
                from zeckenum.optimal.solve import solve

                solve(5)
                solve(5, players=3)
                solve(5, "reversed")
            else:
                raise ValueError(f"unknown kind of run to warm up: {kind!r}")
            _warmed.add(kind)


def warm_worker(kinds: tuple[str, ...] = ("count",)) -> bool:
    """Run on each worker when a pool opens: import zeckenum and load (or compile) its
    kernels there, so the first shard does not pay for it."""
    warm_up(kinds)
    return True


_PLUGIN_SOURCE = """
def setup(self, worker):
    import os
    import sys
    import tempfile

    if os.environ.get("NUMBA_CACHE_DIR"):
        return
    if any(m == "zeckenum" or m.startswith("zeckenum.") for m in list(sys.modules)):
        import logging

        logging.getLogger("zeckenum.cluster").warning(
            "zeckenum was imported before its numba cache slot was set; keeping the default")
        return
    base = os.environ.get("ZECKENUM_NUMBA_CACHE") or os.path.join(
        tempfile.gettempdir(), "zeckenum-numba-%d" % (os.getuid() if hasattr(os, "getuid") else 0))
    os.makedirs(base, exist_ok=True)
    try:
        import fcntl
    except ImportError:
        slot = os.path.join(base, "pid-%d" % os.getpid())
    else:
        for i in range(4096):
            fd = os.open(os.path.join(base, "slot-%d.lock" % i), os.O_CREAT | os.O_RDWR, 0o600)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(fd)
                continue
            self._lock_fd = fd  # held for the life of the worker process
            slot = os.path.join(base, "slot-%d" % i)
            break
        else:
            slot = os.path.join(base, "pid-%d" % os.getpid())
    os.makedirs(slot, exist_ok=True)
    seed = getattr(self, "seed", None)
    if seed and os.path.isdir(seed):  # the client's compiled kernels, where visible
        import shutil

        try:
            for root, _, files in os.walk(seed):
                dst = os.path.join(slot, os.path.relpath(root, seed))
                os.makedirs(dst, exist_ok=True)
                for f in files:
                    if f.endswith((".nbi", ".nbc")) and not os.path.exists(
                            os.path.join(dst, f)):
                        tmp = os.path.join(dst, ".%s.%d.tmp" % (f, os.getpid()))
                        shutil.copyfile(os.path.join(root, f), tmp)
                        os.replace(tmp, os.path.join(dst, f))
        except OSError:
            pass  # seeding is an optimisation only: the worker compiles
    os.environ["NUMBA_CACHE_DIR"] = slot
    if "numba" in sys.modules:
        from numba.core import config

        config.CACHE_DIR = slot
"""


def _make_plugin(seed: str | None = None):  # noqa: ANN202
    """The `NumbaCacheSlot` worker plugin: a slot folder of its own for each worker process.

    `seed`: a folder laid out like a worker's NUMBA_CACHE_DIR (`seed_slot`) whose compiled
    kernels the plugin copies into the slot, when the worker can see it (batch jobs).

    Its code must reach the worker without importing zeckenum (importing any part of the
    package compiles or loads the kernels, fixing their cache folder).  So the plugin is
    built from source in a namespace that is not an importable module: cloudpickle then
    ships it by value, and unpickling it on the worker imports nothing of ours.  The slot
    rule is the same as `claim_slots` (first free `flock`ed slot under the cache base).
    """
    from distributed.diagnostics.plugin import WorkerPlugin

    module = "zeckenum_numba_cache_slot_plugin"  # deliberately not importable
    ns: dict = {"__name__": module}
    exec(compile(_PLUGIN_SOURCE, "<zeckenum numba cache slot plugin>", "exec"), ns)  # noqa: S102
    cls = type("NumbaCacheSlot", (WorkerPlugin,), {
        "__module__": module, "name": "zeckenum-numba-cache-slot", "setup": ns["setup"],
        "__doc__": "Give each worker process its own numba cache folder.",
    })
    plugin = cls()
    plugin.seed = seed
    return plugin


class Pool:
    """Runs task functions somewhere and hands back their futures as they finish.

    Tasks are never restricted to workers (a lost worker's tasks must run elsewhere)."""

    kind = "pool"

    def submit(self, fn: Callable, *args, priority: int = 0,
               prefer: str | None = None) -> Future:
        """Run fn(*args); `prefer`: a worker that should run it if it can (a loose hint,
        never needed for progress: the driver resubmits unhinted a task whose preferred
        worker is gone)."""
        raise NotImplementedError

    def completion(self) -> Completion:
        return Completion()

    def live_workers(self) -> int:
        """Workers able to run tasks now (a pool in this process always has its threads)."""
        return max(1, len(self.workers))

    def state_note(self) -> str:
        """A short note on the cluster's jobs for progress and stall messages ("" if none).
        Batch pools also replace lost jobs when asked (`BatchPool`)."""
        return ""

    def run_stats(self) -> dict:
        """What a result's stats add about the backend (batch jobs: the request, jobs lost)."""
        return {}

    @property
    def workers(self) -> list[str]:
        raise NotImplementedError


class Completion:
    """Futures in the order they finish; more can be added while waiting.

    Works for `concurrent.futures` and `distributed` futures alike (both call
    `add_done_callback` once the future is finished, failed or cancelled).
    """

    def __init__(self) -> None:
        self._q: queue.Queue = queue.Queue()
        self._pending = 0

    def add(self, fut: Future) -> None:
        self._pending += 1
        fut.add_done_callback(self._q.put)

    @property
    def pending(self) -> int:
        """Futures added and not yet handed out by `next`."""
        return self._pending

    def next(self, timeout: float | None) -> Future | None:
        """The next finished future, or None when none finished within `timeout` seconds
        (or none is pending)."""
        if not self._pending:
            return None
        try:
            fut = self._q.get(timeout=timeout)
        except queue.Empty:
            return None
        self._pending -= 1
        return fut

    def __iter__(self) -> Iterator[Future]:
        while self._pending:
            fut = self.next(None)
            if fut is not None:
                yield fut


def stall_seconds(value: float | None = None) -> float:
    """The watchdog's time in seconds: `value`, else $ZECKENUM_STALL_TIMEOUT, else 600.

    InputError unless it is a finite number > 0.
    """
    where = "the stall timeout"
    if value is None:
        raw = os.environ.get(STALL_ENV, "").strip()
        if not raw:
            return STALL_TIMEOUT
        where = f"{STALL_ENV}={raw!r}"
        try:
            value = float(raw)
        except ValueError:
            raise InputError(f"{where} is not a number of seconds") from None
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{where} is not a number of seconds") from None
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{where} must be a number of seconds > 0, got {value:g}")
    return value


WAIT_TIMEOUTS = tuple({TimeoutError, concurrent.futures.TimeoutError, asyncio.TimeoutError})
"""What `Future.result(timeout=...)` raises when the time runs out (one class on Python
3.11+, three on 3.10), for concurrent.futures and distributed futures alike."""


class Watchdog:
    """Stops a run whose cluster has had no worker and finished no task for `timeout` s.

    Invariant: `last` is the latest moment a task finished or a worker was seen; the
    driver calls `progress` on every finished task and `idle` whenever a wait timed out
    (every `period` seconds), and `idle` raises `ClusterStalled` once now - last >=
    timeout.  A pool in this process never stalls.  `kept` ends the message: what became
    of the finished work (e.g. the checkpoint that was kept).
    """

    def __init__(self, pool: Pool, timeout: float, kept: str) -> None:
        self.pool = pool
        self.timeout = float(timeout)
        self.kept = kept
        self.last = time.monotonic()
        self.bar = None  # a tqdm bar whose postfix shows the batch jobs (`Pool.state_note`)

    def _note(self) -> None:
        if self.bar is not None:
            note = self.pool.state_note()
            if note:
                self.bar.set_postfix_str(note)

    @property
    def period(self) -> float:
        """Seconds between two looks at the cluster while nothing finishes."""
        return max(0.05, min(5.0, self.timeout / 4))

    def progress(self) -> None:
        self.last = time.monotonic()
        self._note()

    def idle(self) -> None:
        self._note()
        now = time.monotonic()
        if self.pool.live_workers() > 0:
            self.last = now
            return
        waited = now - self.last
        if waited >= self.timeout:
            note = self.pool.state_note()
            raise ClusterStalled(
                f"the cluster stalled: no worker and no finished task for {waited:.0f} s "
                f"(stall timeout {self.timeout:g} s{'; ' + note if note else ''}); "
                f"{self.kept}")

    def result(self, fut: Future):  # noqa: ANN201
        """`fut.result()`, waiting in periods (ClusterStalled if the cluster stalls).

        Also for a future that was reported finished: a Dask result lives on a worker, and
        when that worker dies before the client has fetched it the task runs again, so the
        fetch itself may wait for a worker (and must not wait forever when none comes).
        """
        while True:
            try:
                value = fut.result(timeout=self.period)
            except WAIT_TIMEOUTS:
                self.idle()
                continue
            self.progress()
            return value


def kept_note(checkpoint_dir: str | Path | None) -> str:
    """How a stalled run's message ends: what was kept of its finished work."""
    if checkpoint_dir is None:
        return "no checkpoint was given, so finished shards were not kept"
    return (f"the checkpoint {checkpoint_dir} was kept: rerun with the same checkpoint to "
            "resume")


class ThreadPool(Pool):
    """Shards in threads of this process (the kernels release the GIL)."""

    kind = "in-process"

    def __init__(self, threads: int | None = None) -> None:
        self.threads = thread_count(threads)
        self._ex = ThreadPoolExecutor(max_workers=self.threads)

    def submit(self, fn, *args, priority=0, prefer=None):  # noqa: ANN001, ANN002
        return self._ex.submit(fn, *args)

    @property
    def workers(self) -> list[str]:
        return [""] * self.threads

    def close(self) -> None:
        self._ex.shutdown(wait=True, cancel_futures=True)


class DaskPool(Pool):
    """Shards as tasks of a Dask cluster, placed (and re-placed) by its scheduler."""

    kind = "dask"

    def __init__(self, client) -> None:  # noqa: ANN001
        self.client = client

    def submit(self, fn, *args, priority=0, prefer=None):  # noqa: ANN001, ANN002
        if prefer is None:
            return self.client.submit(fn, *args, pure=False, priority=priority)
        return self.client.submit(fn, *args, pure=False, priority=priority,
                                  workers=[prefer], allow_other_workers=True)

    def live_workers(self) -> int:
        """Workers the scheduler knows now; 0 when the scheduler cannot be asked."""
        client = self.client
        if client.status != "running":
            return 0
        try:
            info = client.sync(client.scheduler.identity, n_workers=-1, callback_timeout=30)
        except Exception:  # noqa: BLE001 - an unreachable scheduler has no workers for us
            return 0
        return len(info.get("workers") or {})

    def run_everywhere(self, fn: Callable, *args, timeout: float = 30.0) -> bool:
        """Run `fn(*args)` on every worker now (errors ignored), giving up after `timeout`
        seconds; True if it returned in time.  Best effort: for clean-up."""
        box: list = []

        def go() -> None:
            try:
                self.client.run(fn, *args, on_error="ignore")
                box.append(True)
            except Exception as exc:  # noqa: BLE001
                box.append(exc)

        t = threading.Thread(target=go, daemon=True, name="zeckenum-release")
        t.start()
        t.join(timeout)
        if not box:
            log.warning("workers did not answer %s within %g s", fn.__name__, timeout)
            return False
        if box[0] is not True:
            log.warning("could not run %s on the workers: %s", fn.__name__, box[0])
            return False
        return True

    @property
    def workers(self) -> list[str]:
        return sorted(self.client.scheduler_info(n_workers=-1)["workers"])


class BatchPool(DaskPool):
    """Shards on the workers of batch jobs (`batch`): a DaskPool whose `state_note` tells
    the jobs running and pending, and which drops lost jobs from the cluster's plan so
    that adaptive scaling replaces them (`batch.JobWatch`, looked at on every call)."""

    kind = "batch"

    def __init__(self, client, cluster, request: dict) -> None:  # noqa: ANN001
        super().__init__(client)
        from zeckenum.cluster.batch import JobWatch

        self.cluster = cluster
        self.request = request
        self.watch = JobWatch(cluster, client)

    def state_note(self) -> str:
        try:
            return self.watch.look().note()
        except Exception:  # noqa: BLE001 - a note only: the cluster may be closing
            return ""

    def live_workers(self) -> int:
        self.state_note()  # replaces lost jobs while the driver waits
        return super().live_workers()

    def run_stats(self) -> dict:
        self.state_note()
        req = {k: v for k, v in self.request.items() if k != "from"}
        return {"job_request": req, "jobs_lost": self.watch.lost}


def open_batch(spec, warm: tuple[str, ...]) -> Iterator[BatchPool]:  # noqa: ANN001
    """A BatchPool on a new dask-jobqueue cluster of `spec` (`batch.BatchSpec`): jobs
    submitted adaptively between its least and most, the client's kernels copied to
    `<cache base>/seed` for the workers, and the jobs' environment set (ZECKENUM_NUMBA_CACHE
    of this process); waits for the first worker (`batch.wait_for_first_worker`, the
    pending timeout); cancels every job and closes the cluster on exit, even on error."""
    from zeckenum.cluster.batch import (
        job_request,
        joined_names_plugin,
        make_cluster,
        wait_for_first_worker,
    )

    request = job_request(spec)
    seed = cache_base() / "seed"
    seed_slot(seed)
    # one cache slot per worker under this base (NUMBA_CACHE_DIR, if this process has one,
    # must not reach the jobs: they would all share it)
    env = {"ZECKENUM_NUMBA_CACHE": str(cache_base()), "NUMBA_CACHE_DIR": None}
    cluster = make_cluster(request, env)
    client = None
    try:
        from distributed import Client

        cluster.adapt(minimum_jobs=request["jobs_min"], maximum_jobs=request["jobs_max"])
        client = Client(cluster, set_as_default=False, timeout=15)
        client.register_plugin(joined_names_plugin())
        client.register_plugin(_make_plugin(str(seed)))
        pool = BatchPool(client, cluster, request)
        timeout = spec.pending_timeout or stall_seconds(None)
        wait_for_first_worker(client, pool.watch, timeout, spec.kind)
        client.run(warm_worker, tuple(warm))
        yield pool
    finally:
        if client is not None:
            client.close()
        cluster.close()


WORKER_CONFIG = {"distributed": {"worker": {"profile": {"enabled": False}}}}
"""Dask settings of the workers `start_local_cluster` starts: no statistical profiler (it
samples the busy thread every 10 ms; measured 2-4% of a long count, and no dashboard reads
it here)."""


def worker_config() -> dict:
    """This process's Dask configuration with `WORKER_CONFIG` merged in, deeply (a nanny
    merges the config it is given only at the top level)."""
    import dask

    return dask.config.merge(dask.config.config, WORKER_CONFIG)


def start_local_cluster(workers: int, **kwargs):  # noqa: ANN201
    """A LocalCluster of `workers` processes x 1 thread on 127.0.0.1, free ports, no dashboard.

    Worker i is started with NUMBA_CACHE_DIR set to a cache slot that this process locks
    (`claim_slots`), so the folder is the worker's alone from its first import on; a worker
    the nanny restarts gets the same slot back (the old process is gone by then).
    """
    from distributed import LocalCluster

    cluster = LocalCluster(
        n_workers=0, threads_per_worker=1, processes=True, host="127.0.0.1",
        scheduler_port=0, dashboard_address=None, silence_logs=logging.ERROR, **kwargs,
    )
    try:
        slots = claim_slots(workers)
        cluster._zeckenum_slot_fds = [fd for fd, _ in slots]
        for i, (_, folder) in enumerate(slots):
            seed_slot(folder)
            spec = dict(cluster.new_spec)
            options = dict(spec["options"])
            options["env"] = {**(options.get("env") or {}), "NUMBA_CACHE_DIR": str(folder)}
            options["config"] = worker_config()
            cluster.worker_spec[f"w{i}"] = {"cls": spec["cls"], "options": options}
        cluster.scale(workers)
    except BaseException:
        close_cluster(cluster)
        raise
    return cluster


def claim_slots(count: int, base: Path | None = None) -> list[tuple[int, Path]]:
    """Lock `count` free cache slot folders for workers this process starts."""
    import fcntl

    base = cache_base() if base is None else Path(base)
    base.mkdir(parents=True, exist_ok=True)
    out: list[tuple[int, Path]] = []
    for i in range(4096):
        if len(out) == count:
            break
        fd = os.open(base / f"slot-{i}.lock", os.O_CREAT | os.O_RDWR, 0o600)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            continue
        folder = base / f"slot-{i}"
        folder.mkdir(exist_ok=True)
        out.append((fd, folder))
    return out


def kernel_cache_folders() -> list[tuple[Path, Path]]:
    """(this process's numba cache folder, its path relative to a worker's NUMBA_CACHE_DIR)
    of every source folder of zeckenum that holds kernels, sorted.

    numba keeps one cache folder per *source folder* (`_CacheLocator`: the folder's name
    plus a hash of its full path), and the kernels live in several sub-packages (core,
    counting, randomplay, optimal, ...).  Every module that imports `core.jit.kernel` is
    imported (declaring a kernel compiles nothing) and the cache folder of the first numba
    dispatcher it defines (not one it imports) is taken; one entry per source folder.
    """
    import importlib

    import zeckenum
    from numba.core.caching import _CacheLocator
    from numba.core.registry import CPUDispatcher

    root = Path(zeckenum.__file__).parent
    found: dict[Path, tuple[Path, Path]] = {}
    for path in sorted(root.rglob("*.py")):
        if "__pycache__" in path.parts or path.parent in found:
            continue
        try:
            if "zeckenum.core.jit import kernel" not in path.read_text(encoding="utf-8"):
                continue
        except (OSError, UnicodeDecodeError):
            continue
        parts = path.relative_to(root).with_suffix("").parts
        module = importlib.import_module(".".join(("zeckenum", *parts)))
        for value in vars(module).values():
            if isinstance(value, CPUDispatcher) and value.py_func.__module__ == module.__name__ \
                    and hasattr(getattr(value, "_cache", None), "_cache_path"):
                found[path.parent] = (Path(value._cache._cache_path),
                                      Path(_CacheLocator.get_suitable_cache_subpath(str(path))))
                break
    return sorted(found.values())


def seed_slot(folder: Path) -> int:
    """Copy this process's compiled zeckenum kernels into a slot folder; files copied.

    Run after `warm_up` and before the slot's worker starts (the slot is locked by this
    process, so nobody else touches it).  Every source folder holding kernels is seeded
    (`kernel_cache_folders`), each where numba's own rule puts it under the worker's
    NUMBA_CACHE_DIR, so the worker finds them and loads instead of compiling (seconds
    instead of tens of seconds).  Files already there are kept; each copy is atomic
    (temporary file + rename).  Any failure only means the worker compiles.
    """
    try:
        copied = 0
        for src, sub in kernel_cache_folders():
            if not src.is_dir():
                continue
            dst = Path(folder) / sub
            dst.mkdir(parents=True, exist_ok=True)
            for f in src.iterdir():
                if f.suffix not in (".nbi", ".nbc") or (dst / f.name).exists():
                    continue
                tmp = dst / f".{f.name}.{os.getpid()}.tmp"
                tmp.write_bytes(f.read_bytes())
                os.replace(tmp, dst / f.name)
                copied += 1
        return copied
    except Exception as exc:  # noqa: BLE001 - seeding is an optimisation only
        log.info("numba cache seeding skipped: %s", exc)
        return 0


def close_cluster(cluster) -> None:  # noqa: ANN001
    """Close a cluster from `start_local_cluster` and release its cache slots."""
    try:
        cluster.close()
    finally:
        for fd in getattr(cluster, "_zeckenum_slot_fds", []):
            os.close(fd)


SCHEDULER_SCHEMES = ("tcp", "tls", "inproc", "ucx", "ws", "wss")
"""Address schemes of a Dask scheduler that `check_scheduler_address` accepts."""

CONNECT_TIMEOUT = 5
"""Seconds to reach a scheduler before giving up (a wrong address fails fast)."""


def check_scheduler_address(address: object) -> str:
    """A Dask scheduler address, checked without connecting: SCHEME://HOST:PORT with a
    scheme of SCHEDULER_SCHEMES (or HOST:PORT, meaning tcp), a host name or IPv4 / [IPv6]
    address and a port 1..65535 (inproc://... takes any non-empty rest).  InputError."""
    import re

    text = str(address).strip()
    bad = f"scheduler address {text!r}: "
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    if scheme.lower() not in SCHEDULER_SCHEMES:
        raise InputError(bad + f"unknown scheme {scheme!r} (use one of "
                         f"{', '.join(SCHEDULER_SCHEMES)}, e.g. tcp://host:8786)")
    if scheme.lower() == "inproc":
        if not rest or any(c.isspace() for c in rest):
            raise InputError(bad + "an inproc address needs a name after inproc://")
        return text
    m = re.fullmatch(r"(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9](?:[A-Za-z0-9.-]{0,252}))"
                     r":(\d{1,5})/?", rest)
    if not m or not 1 <= int(m.group(2)) <= 65535:
        raise InputError(bad + "expected SCHEME://HOST:PORT with a port from 1 to 65535, "
                         "e.g. tcp://127.0.0.1:8786")
    return text


def connect(address_or_cluster, workers: int | None = None, plugin: bool = True,  # noqa: ANN001, ANN201
            warm: tuple[str, ...] = ("count",)):
    """A Client (with the numba cache slot plugin unless `plugin` is False); waits for
    `workers` workers and loads the kernels of the kinds of run `warm` on each."""
    from distributed import Client

    timeout = CONNECT_TIMEOUT if isinstance(address_or_cluster, str) else 15
    client = Client(address_or_cluster, set_as_default=False, timeout=timeout)
    try:
        if plugin:
            client.register_plugin(_make_plugin())
        if workers:
            client.wait_for_workers(workers, timeout=120)
        client.run(warm_worker, tuple(warm))
    except BaseException:
        client.close()
        raise
    return client


@contextlib.contextmanager
def open_pool(
    workers: int | None = None, scheduler: str | BatchSpec | None = None,
    threads: int | None = None, warm: tuple[str, ...] = ("count",),
) -> Iterator[Pool]:
    """A `Pool` for the requested backend, closed (cluster included) on exit.

    scheduler: the address of a running Dask scheduler, or a `batch.BatchSpec`: workers
    as batch jobs started (and cancelled) for the run (`open_batch`).

    warm: the kinds of run ("count", "random") whose kernels are compiled here first (and
    copied into the new workers' cache slots) and loaded on every worker."""
    from zeckenum.cluster.batch import BatchSpec

    if isinstance(scheduler, BatchSpec):
        if workers is not None:
            raise InputError("give either --workers or --cluster, not both")
        warm_up(tuple(warm))
        yield from open_batch(scheduler, warm)
        return
    if workers is not None and scheduler is not None:
        raise InputError("give either --workers or --scheduler, not both")
    if workers is not None and workers < 1:
        raise InputError(f"workers must be >= 1, got {workers}")
    if scheduler is not None:
        scheduler = check_scheduler_address(scheduler)
    warm_up(tuple(warm))
    if scheduler is not None:
        try:
            client = connect(scheduler, warm=warm)
        except (OSError, TimeoutError) as exc:
            raise InputError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from None
        try:
            if not client.scheduler_info(n_workers=-1)["workers"]:
                try:
                    client.wait_for_workers(1, timeout=60)
                except TimeoutError:
                    raise ClusterStalled(
                        f"no worker joined the Dask scheduler at {scheduler} within 60 s; "
                        "nothing was computed") from None
            yield DaskPool(client)
        finally:
            client.close()
        return
    if workers is not None:
        cluster = start_local_cluster(workers)
        client = None
        try:
            client = connect(cluster, workers, plugin=False, warm=warm)
            yield DaskPool(client)
        finally:
            if client is not None:
                client.close()
            close_cluster(cluster)
        return
    pool = ThreadPool(threads)
    try:
        yield pool
    finally:
        pool.close()
