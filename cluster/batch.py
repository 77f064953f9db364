"""Workers as batch jobs: SLURM, PBS, SGE or LSF through dask-jobqueue.

A `BatchSpec` says what to ask the batch system for; whatever it leaves out comes from the
user's Dask configuration under dask-jobqueue's own keys (`jobqueue.slurm.cores`,
`jobqueue.slurm.memory`, `jobqueue.slurm.walltime`, `jobqueue.slurm.queue`,
`jobqueue.slurm.account`, and every other key dask-jobqueue reads: `interface`,
`job-extra-directives`, `job-script-prologue`, `log-directory`, ...; `pbs`, `sge`, `lsf`
alike), and the memory, when neither gives it, from the run's own forecast
(`derived_memory`).

One job holds `cores` worker processes of one thread each (the driver runs one shard per
worker at a time and sizes shards to a worker's memory limit, which dask-jobqueue sets to
the job's memory / cores).  The number of jobs is adaptive between `jobs` and `max_jobs`
(`BatchSpec.jobs == max_jobs`: a fixed number): dask-jobqueue submits jobs while tasks
wait and cancels idle ones down to the minimum.

Survival (`BatchPool`): a job that ends (walltime, `scancel`, node failure) takes its
workers' running shards with it; Dask runs them again on the other workers (the driver
resubmits any task pinned to a lost worker), and the lost job is dropped from the cluster's
plan so that adaptive scaling submits a replacement (dask-jobqueue alone keeps a lost job
in its plan and would never replace it).  A killed client loses nothing that was
checkpointed: the rerun with the same `--checkpoint` reuses every finished shard.

Numba's cache: each worker takes its own slot folder under the client's
$ZECKENUM_NUMBA_CACHE (the `NumbaCacheSlot` plugin of `backend`), seeded from a copy of
the client's compiled kernels (`<cache base>/seed`) when that folder is visible to the
job (same machine or shared file system), so workers load instead of compiling.  The job
runs the client's own Python (`sys.executable`, dask-jobqueue's default).

Nothing here imports dask-jobqueue at module level: `plan` prints a job request without it.
"""

from __future__ import annotations

import math
import re
import shlex
import time
from dataclasses import asdict, dataclass, replace

from zeckenum.core.memory import human, parse_size
from zeckenum.core.text import plural
from zeckenum.errors import ClusterStalled, InputError

BATCH_KINDS = ("slurm", "pbs", "sge", "lsf")
"""Batch systems `--cluster` accepts (dask-jobqueue's SLURMCluster, PBSCluster, SGECluster,
LSFCluster)."""

_CLASSES = {"slurm": "SLURMCluster", "pbs": "PBSCluster", "sge": "SGECluster",
            "lsf": "LSFCluster"}

JOB_NAME = "zeckenum-worker"
"""The batch jobs' name (unless `jobqueue.<kind>.name` sets another than dask-jobqueue's
default): `scancel --name zeckenum-worker` cancels a killed client's jobs."""
MAX_JOBS = 4096
MAX_JOB_CORES = 1024
JOB_OVERHEAD = 256 * 2**20
"""Bytes per worker process on top of the run's forecast (Python, numba, Dask)."""
MIN_WORKER_MEMORY = 512 * 2**20
"""The least memory per worker process a derived request asks for."""


@dataclass(frozen=True)
class BatchSpec:
    """What to ask a batch system for; None: from the Dask config (`jobqueue.<kind>.*`).

    kind             one of BATCH_KINDS
    jobs, max_jobs   adaptive between jobs and max_jobs jobs (None: 1 and jobs)
    cores            worker processes (one thread each) per job
    memory           bytes per job (None and none configured: derived from the forecast)
    walltime         seconds per job
    queue, account   queue or partition, and account to charge
    pending_timeout  seconds a run waits for its first worker while every job is still
                     queued before it stops with ClusterStalled (None: the stall timeout)
    forecast_per_worker  the run's forecast peak bytes per worker (set by the run, not
                     the user): the memory when neither `memory` nor the config gives one
    """

    kind: str
    jobs: int | None = None
    max_jobs: int | None = None
    cores: int | None = None
    memory: int | None = None
    walltime: float | None = None
    queue: str | None = None
    account: str | None = None
    pending_timeout: float | None = None
    forecast_per_worker: int | None = None

    def __post_init__(self) -> None:
        if self.kind not in BATCH_KINDS:
            raise InputError(f"unknown batch system {self.kind!r} (use one of "
                             f"{', '.join(BATCH_KINDS)})")
        for name, most in (("jobs", MAX_JOBS), ("max_jobs", MAX_JOBS),
                           ("cores", MAX_JOB_CORES)):
            v = getattr(self, name)
            if v is not None and (isinstance(v, bool) or not isinstance(v, int)
                                  or not 1 <= v <= most):
                raise InputError(f"{name.replace('_', ' ')} must be a whole number from 1 "
                                 f"to {most}, got {v!r}")
        if self.jobs is not None and self.max_jobs is not None and self.max_jobs < self.jobs:
            raise InputError(f"the most jobs ({self.max_jobs}) is below the least "
                             f"({self.jobs})")
        if self.memory is not None and (not isinstance(self.memory, int) or self.memory < 2**20):
            raise InputError(f"memory per job must be at least 1 MiB, got {self.memory!r}")
        for name in ("walltime", "pending_timeout"):
            v = getattr(self, name)
            if v is not None and not (isinstance(v, (int, float)) and math.isfinite(v)
                                      and v > 0):
                raise InputError(f"{name.replace('_', ' ')} must be a positive number of "
                                 f"seconds, got {v!r}")
        for name in ("queue", "account"):
            v = getattr(self, name)
            if v is not None and (not isinstance(v, str)
                                  or not re.fullmatch(r"[A-Za-z0-9_.:@+-]{1,128}", v)):
                raise InputError(f"{name} {v!r}: letters, digits and _.:@+- only")

    @property
    def min_jobs(self) -> int:
        return self.jobs or 1

    @property
    def most_jobs(self) -> int:
        return max(self.max_jobs or self.min_jobs, self.min_jobs)


def batch_spec(cluster: object) -> BatchSpec | None:
    """A BatchSpec from the API's `cluster=` ("slurm", ... or a BatchSpec); None for None."""
    if cluster is None or isinstance(cluster, BatchSpec):
        return cluster
    if isinstance(cluster, str):
        return BatchSpec(cluster.strip().lower())
    raise InputError(f"cluster must be one of {', '.join(BATCH_KINDS)} or a BatchSpec, "
                     f"got {cluster!r}")


def parse_jobs(text: object) -> tuple[int, int]:
    """(least, most) jobs from 'K' (a fixed number) or 'MIN:MAX' (adaptive); InputError."""
    m = re.fullmatch(r"\s*(\d{1,5})\s*(?::\s*(\d{1,5})\s*)?", str(text))
    if not m:
        raise InputError(f"cannot read the jobs {str(text)[:40]!r} (a number of jobs K, or "
                         "MIN:MAX for adaptive scaling, e.g. 2 or 1:10)")
    lo = int(m.group(1))
    hi = int(m.group(2)) if m.group(2) is not None else lo
    if not 1 <= lo <= hi <= MAX_JOBS:
        raise InputError(f"jobs {lo}:{hi}: need 1 <= MIN <= MAX <= {MAX_JOBS}")
    return lo, hi


def format_walltime(seconds: float, kind: str) -> str:
    """A walltime as the batch system writes it: HH:MM:SS, or HH:MM for LSF (rounded up
    to whole minutes)."""
    total = int(math.ceil(seconds))
    if kind == "lsf":
        minutes = -(-total // 60)
        return f"{minutes // 60:02d}:{minutes % 60:02d}"
    return f"{total // 3600:02d}:{total % 3600 // 60:02d}:{total % 60:02d}"


def _config(kind: str, key: str):  # noqa: ANN202
    import dask

    try:
        import dask_jobqueue  # noqa: F401 - loads jobqueue's defaults into dask.config
    except ImportError:
        pass
    return dask.config.get(f"jobqueue.{kind}.{key}", default=None)


def derived_memory(per_worker: int, cores: int) -> int:
    """Memory of one job for `cores` worker processes whose run forecasts `per_worker`
    bytes each: (forecast + JOB_OVERHEAD, at least MIN_WORKER_MEMORY) x cores, rounded up
    to whole MiB."""
    worker = max(MIN_WORKER_MEMORY, int(per_worker) + JOB_OVERHEAD)
    return -(-worker * cores // 2**20) * 2**20


def job_request(spec: BatchSpec, per_worker: int | None = None) -> dict:
    """The job request a run makes, every value resolved: from `spec`, else the Dask
    config (`jobqueue.<kind>.<key>`), else (memory) `derived_memory(per_worker, cores)`.

    Keys: kind, jobs_min, jobs_max, cores, processes, memory_bytes, memory,
    memory_per_worker, walltime, queue, account, and `from`: where each value came from
    ("option", "config", "forecast" or "default").  InputError when no memory can be found.
    """
    kind = spec.kind
    if per_worker is None:
        per_worker = spec.forecast_per_worker
    src: dict[str, str] = {}

    def pick(name: str, given, key: str, default=None):  # noqa: ANN001, ANN202
        if given is not None:
            src[name] = "option"
            return given
        value = _config(kind, key)
        if value not in (None, ""):
            src[name] = "config"
            return value
        src[name] = "default"
        return default

    cores = int(pick("cores", spec.cores, "cores", 1))
    if not 1 <= cores <= MAX_JOB_CORES:
        raise InputError(f"cores per job must be from 1 to {MAX_JOB_CORES}, got {cores}")
    if spec.memory is not None:
        memory, src["memory"] = int(spec.memory), "option"
    else:
        configured = _config(kind, "memory")
        if configured not in (None, ""):
            try:
                memory = parse_size(str(configured).replace("GB", "G").replace("MB", "M"))
            except InputError:
                raise InputError(f"jobqueue.{kind}.memory in the Dask config: cannot read "
                                 f"{configured!r}") from None
            src["memory"] = "config"
        elif per_worker is not None:
            memory, src["memory"] = derived_memory(per_worker, cores), "forecast"
        else:
            raise InputError(f"no memory per job for --cluster {kind}: give --job-memory "
                             f"or set jobqueue.{kind}.memory in the Dask config")
    if spec.walltime is not None:
        walltime, src["walltime"] = format_walltime(spec.walltime, kind), "option"
    else:
        walltime = pick("walltime", None, "walltime", None)
    request = {
        "kind": kind,
        "jobs_min": spec.min_jobs,
        "jobs_max": spec.most_jobs,
        "cores": cores,
        "processes": cores,
        "memory_bytes": memory,
        "memory": human(memory),
        "memory_per_worker": human(memory // cores),
        "walltime": walltime,
        "queue": pick("queue", spec.queue, "queue"),
        "account": pick("account", spec.account, "account"),
    }
    request["from"] = src
    return request


def format_request(req: dict) -> str:
    """One line of a job request, as `plan` prints it."""
    jobs = (str(req["jobs_min"]) if req["jobs_min"] == req["jobs_max"]
            else f"{req['jobs_min']}..{req['jobs_max']} (adaptive)")
    parts = [f"{req['kind']} jobs {jobs}", plural(req["cores"], "core") + " each",
             f"{req['memory']} ({req['memory_per_worker']} per worker, "
             f"{req['from']['memory']})"]
    if req.get("walltime"):
        parts.append(f"walltime {req['walltime']}")
    if req.get("queue"):
        parts.append(f"queue {req['queue']}")
    if req.get("account"):
        parts.append(f"account {req['account']}")
    return ", ".join(parts)


def cluster_kwargs(req: dict, env: dict[str, str | None] | None = None) -> dict:
    """Keyword arguments of the dask-jobqueue class for a resolved request.  `env`:
    variables exported (None: unset) at the top of the job script, after the configured
    prologue."""
    kw: dict = {
        "cores": req["cores"],
        "processes": req["processes"],
        "memory": f"{req['memory_bytes'] // 2**20}MiB",
        "walltime": req["walltime"],
    }
    name = _config(req["kind"], "name")
    kw["job_name"] = JOB_NAME if name in (None, "", "dask-worker") else name
    if req.get("queue"):
        kw["queue"] = req["queue"]
    if req.get("account"):  # SGE and LSF call it a project
        kw["project" if req["kind"] in ("sge", "lsf") else "account"] = req["account"]
    if req["kind"] == "sge":
        # SGE takes memory as a resource request; dask-jobqueue leaves it to resource_spec
        configured = _config("sge", "resource-spec")
        if not configured:
            kw["resource_spec"] = f"h_vmem={req['memory_bytes'] // req['cores'] // 2**20}M"
    prologue = list(_config(req["kind"], "job-script-prologue") or [])
    for key, value in (env or {}).items():
        prologue.append(f"unset {key}" if value is None
                        else f"export {key}={shlex.quote(str(value))}")
    kw["job_script_prologue"] = prologue
    options = dict(_config(req["kind"], "scheduler-options") or {})
    if "dashboard_address" not in options:  # no dashboard unless configured (and the
        options["dashboard"] = False          # scheduler's HTTP server on a free port)
        options["dashboard_address"] = ":0"
    kw["scheduler_options"] = options
    return kw


def make_cluster(req: dict, env: dict[str, str | None] | None = None):  # noqa: ANN201
    """The dask-jobqueue cluster of a resolved request, with no job submitted yet (its
    Dask scheduler runs in this process)."""
    try:
        import dask_jobqueue
    except ImportError:
        raise InputError("--cluster needs dask-jobqueue (pip install dask-jobqueue)") from None
    cls = getattr(dask_jobqueue, _CLASSES[req["kind"]])
    refused: list[tuple[str, str]] = []
    try:
        cluster = cls(job_cls=_recording_job(cls.job_cls, refused), **cluster_kwargs(req, env))
    except (ValueError, TypeError) as exc:
        raise InputError(f"cannot set up the {req['kind']} cluster: {exc}") from None
    cluster.zeckenum_refused = refused
    return cluster


def submit_error(text: str) -> str:
    """The batch system's own line from a failed submission (dask-jobqueue's RuntimeError
    quotes the command's stdout and stderr): the first line of its stderr, else the last
    line of the message; at most 200 characters."""
    _, sep, err = text.partition("stderr:")
    lines = [x.strip() for x in (err if sep else text).splitlines() if x.strip()]
    if not lines:
        lines = [x.strip() for x in text.splitlines() if x.strip()] or ["(no message)"]
    return (lines[0] if sep else lines[-1])[:200]


def _recording_job(base: type, refused: list[tuple[str, str]]) -> type:
    """A subclass of dask-jobqueue's job class whose `start` records a submission the
    batch system refused ((job name, its error line) in `refused`) instead of raising it
    into the cluster's event loop (where it only printed a traceback and the run waited
    for a job that did not exist).  Such a job has no id (nothing to cancel) and no worker;
    `wait_for_first_worker` and `JobWatch` report it."""
    from distributed.deploy.spec import ProcessInterface

    async def start(self) -> None:  # noqa: ANN001
        try:
            await base.start(self)
        except Exception as exc:  # noqa: BLE001 - the submit command failed
            self.job_id = None
            refused.append((str(self.name), submit_error(str(exc))))
            await ProcessInterface.start(self)  # "running" as far as the cluster goes

    return type(base.__name__, (base,), {"start": start, "__module__": __name__})


@dataclass
class JobStates:
    """Jobs of a batch cluster now: submitted and not lost, running (a worker of theirs
    has joined), pending (the rest), lost (ended after running; replaced), and the error
    line of the last submission the batch system refused ("" if none)."""

    submitted: int = 0
    running: int = 0
    pending: int = 0
    lost: int = 0
    refused: str = ""

    def note(self) -> str:
        text = f"jobs: {self.running} running, {self.pending} pending"
        text += f", {self.lost} lost and replaced" if self.lost else ""
        return text + (f"; the batch system refused a job: {self.refused}"
                       if self.refused else "")


class JobWatch:
    """Tracks the jobs of a dask-jobqueue cluster and replaces the lost ones.

    Invariant: a job name is in `seen` once a worker of it has joined (the scheduler's
    `JoinedNames` record, so a worker that came and went between two looks counts too);
    a seen job with no worker left is lost (its batch job ended: walltime, cancelled, node
    down), counted once (`dropped`), and `look` removes it from the cluster's plan, so that adaptive
    scaling (minimum = the least jobs) submits a new job under a new name.  Workers of
    job J are named J or J-<i> (dask-jobqueue).
    """

    def __init__(self, cluster, client) -> None:  # noqa: ANN001
        self.cluster = cluster
        self.client = client
        self.seen: set[str] = set()
        self.dropped: set[str] = set()
        self.lost = 0
        self.first_worker: float | None = None
        self.t0 = time.monotonic()

    def _names(self) -> tuple[set[str], set[str]]:
        """Names of the workers connected now, and of every worker that ever joined (the
        scheduler's `JoinedNames` record, when `open_batch` registered it)."""
        return self.client.run_on_scheduler(_worker_names)

    def look(self) -> JobStates:
        cluster = self.cluster
        refused = list(getattr(cluster, "zeckenum_refused", []))
        failed = {name for name, _ in refused}
        jobs = [str(j) for j in list(cluster.worker_spec) if str(j) not in failed]
        names, joined = self._names()
        # a job whose worker joined and left between two looks was still running once: the
        # scheduler's record says so (a look that saw only the connected workers would
        # take it for pending forever, and never count nor replace it)
        self.seen.update(job for job in jobs if _has_worker(job, joined))
        states = JobStates(lost=self.lost, refused=refused[-1][1] if refused else "")
        gone: list[str] = []
        for job in jobs:
            alive = _has_worker(job, names)
            if alive:
                self.seen.add(job)
                states.running += 1
                if self.first_worker is None:
                    self.first_worker = time.monotonic()
            elif job in self.dropped:
                continue  # lost, being removed from the plan
            elif job in self.seen:
                gone.append(job)
            else:
                states.pending += 1
        if gone:
            self.dropped.update(gone)
            self.lost += len(gone)
            states.lost = self.lost
            cluster.loop.add_callback(_drop_jobs, cluster, gone)
        states.submitted = states.running + states.pending
        return states


def _has_worker(job: str, names: set[str]) -> bool:
    """Whether one of `names` is a worker of `job` (named J or J-<i> by dask-jobqueue)."""
    return any(n == job or n.startswith(job + "-") for n in names)


JOINED = "zeckenum-joined-names"
"""Name of the scheduler plugin that records every worker name that joined."""


def joined_names_plugin():  # noqa: ANN201
    """A scheduler plugin (`JoinedNames`) that keeps the name of every worker that ever
    joined, so that `JobWatch` counts a job whose worker came and went between two of its
    looks.  Built here so that importing this module does not import distributed; the
    class is local, so cloudpickle ships it by value to the scheduler."""
    from distributed.diagnostics.plugin import SchedulerPlugin

    class JoinedNames(SchedulerPlugin):
        name = JOINED

        def __init__(self) -> None:
            self.names: set[str] = set()

        async def start(self, scheduler) -> None:  # noqa: ANN001 - workers already there
            self.names.update(str(ws.name) for ws in scheduler.workers.values())

        def add_worker(self, scheduler, worker: str) -> None:  # noqa: ANN001
            ws = scheduler.workers.get(worker)
            if ws is not None:
                self.names.add(str(ws.name))

    return JoinedNames()


def _worker_names(dask_scheduler) -> tuple[set[str], set[str]]:  # noqa: ANN001
    """On the scheduler: the names of the workers connected now, and of all that joined
    (connected ones included, whether or not the `JoinedNames` plugin is there)."""
    now = {str(ws.name) for ws in dask_scheduler.workers.values()}
    plugin = dask_scheduler.plugins.get(JOINED)
    return now, now | (set(plugin.names) if plugin is not None else set())


def _drop_jobs(cluster, names: list[str]) -> None:  # noqa: ANN001
    """On the cluster's event loop: forget lost jobs (their batch jobs are cancelled if
    still there), so adaptive scaling submits replacements."""
    import asyncio

    for name in names:
        key = next((k for k in list(cluster.worker_spec) if str(k) == name), name)
        cluster.worker_spec.pop(key, None)
        job = cluster.workers.pop(key, None)
        if job is not None:
            cluster._futures.add(asyncio.ensure_future(job.close()))
        # the replacement must get a new name: SpecCluster takes the first unused number,
        # and a job reusing a lost job's name was cancelled by Dask's delayed clean-up of
        # the lost one (`SpecCluster._update_worker_status`)
        m = re.search(r"-(\d+)$", name)
        if m and isinstance(getattr(cluster, "_i", None), int):
            cluster._i = max(cluster._i, int(m.group(1)) + 1)


def wait_for_first_worker(client, watch: JobWatch, timeout: float, kind: str,  # noqa: ANN001
                          period: float = 1.0) -> None:
    """Wait until a worker of some job has joined; ClusterStalled (one line, with the job
    states) when none has after `timeout` seconds, every job still queued."""
    t0 = time.monotonic()
    while True:
        if client.scheduler_info(n_workers=-1).get("workers"):
            watch.look()
            return
        states = watch.look()
        if states.refused and not states.pending:
            raise ClusterStalled(f"the batch system refused the {kind} job: {states.refused}; "
                                 "nothing was computed")
        waited = time.monotonic() - t0
        if waited >= timeout:
            raise ClusterStalled(
                f"no {kind} job started within {waited:.0f} s ({states.note()}; "
                f"pending timeout {timeout:g} s): the batch queue did not run them; "
                "nothing was computed")
        time.sleep(period)


def spec_dict(spec: BatchSpec) -> dict:
    """A spec as plain data (for stats and JSON)."""
    return {k: v for k, v in asdict(spec).items() if v is not None}


def with_defaults(spec: BatchSpec, **values) -> BatchSpec:  # noqa: ANN003
    """`spec` with each None field among `values` set."""
    return replace(spec, **{k: v for k, v in values.items() if getattr(spec, k) is None})


def run_forecast(kind: str, n: int, rules, players: int = 2, model: str = "moves") -> int:  # noqa: ANN001
    """Forecast peak bytes of one worker of a sharded run of n, from the rank table alone
    (no sweep runs here): the first sweep's forecast (`count.windows_pass_bytes`,
    `skeleton.skeleton_bytes_bound`, or for a solve `solve.solve_bytes`) twice over: the
    worker keeps the first sweep while its shard runs, and the driver sizes the shards
    (or falls back on evaluation points) to fit what remains of the worker's limit."""
    from zeckenum.core.statespace import build_space
    from zeckenum.rules.catalogue import get_rules

    space = build_space(get_rules(rules).instantiate(n))
    if kind == "count":
        from zeckenum.counting.count import windows_pass_bytes

        return 2 * windows_pass_bytes(space, 1)
    if kind == "random":
        from zeckenum.randomplay.skeleton import skeleton_bytes_bound

        return 2 * skeleton_bytes_bound(space, model, True, 1)
    from zeckenum.optimal.solve import solve_bytes

    return solve_bytes(space, players, False, False, 1)


def with_forecast(spec: BatchSpec, forecast) -> BatchSpec:  # noqa: ANN001
    """`spec` with `forecast_per_worker` set from `forecast()` when the memory is neither
    given nor configured (the forecast is only computed then)."""
    if spec.memory is not None or _config(spec.kind, "memory") not in (None, ""):
        return spec
    return replace(spec, forecast_per_worker=int(forecast()))
