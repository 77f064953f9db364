"""Workers as batch jobs (`--cluster`, `zeckenum.cluster.batch`) on a real SLURM.

The SLURM tests submit real worker jobs through dask-jobqueue to the SLURM that `.ci/slurm-up`
starts (CI runs it; a developer runs `eval "$(.ci/slurm-up)"` first).  They skip, with
`sinfo`'s own error line, only when no SLURM controller answers.  References: the count
run in this process (`zeckenum.count`, which `tests/cluster/test_cluster.py` holds against
the brute force of tests/support), and the batch systems' own job-script syntax (SLURM
`sbatch`, PBS Pro `qsub -l select`, SGE `qsub -l h_rt/h_vmem`, LSF `bsub -n/-M/-W`: the
documented directives, common practice).  The job-script tests need no daemon.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
import zeckenum
from zeckenum.cluster.batch import (
    BatchSpec,
    format_walltime,
    job_request,
    make_cluster,
    parse_jobs,
)
from zeckenum.cluster.run import run_count
from zeckenum.errors import ClusterStalled, InputError

ROOT = Path(__file__).resolve().parents[2]
GIB = 2**30


# ------------------------------------------------------------- job scripts, no daemon


def _script(kind: str, **spec) -> str:  # noqa: ANN003
    cluster = make_cluster(job_request(BatchSpec(kind, **spec)),
                           {"ZECKENUM_NUMBA_CACHE": "/scratch/cache", "NUMBA_CACHE_DIR": None})
    try:
        return cluster.job_script()
    finally:
        cluster.close()


def _worker_line(script: str) -> str:
    return next(line for line in script.splitlines() if "distributed.cli.dask_worker" in line)


def _common(script: str, cores: int, memory: int) -> None:
    """What every kind's script holds: our python, one thread per worker process, `cores`
    processes, each limited to memory / cores, and the job's environment."""
    line = _worker_line(script)
    assert line.startswith(sys.executable + " ")
    assert re.search(r"--nthreads 1\b", line)
    assert re.search(rf"--nworkers {cores}\b", line)
    limit = re.search(r"--memory-limit ([\d.]+)GiB", line)
    assert limit and abs(float(limit.group(1)) * GIB - memory / cores) < 0.01 * GIB
    assert "export ZECKENUM_NUMBA_CACHE=/scratch/cache" in script
    assert "unset NUMBA_CACHE_DIR" in script


def test_slurm_job_script() -> None:
    s = _script("slurm", cores=3, memory=6 * GIB, walltime=5400, queue="short", account="lab")
    assert "#SBATCH --cpus-per-task=3" in s
    assert "#SBATCH --mem=6G" in s
    assert "#SBATCH -t 01:30:00" in s
    assert "#SBATCH -p short" in s and "#SBATCH -A lab" in s
    assert "#SBATCH -J zeckenum-worker" in s
    _common(s, 3, 6 * GIB)


def test_pbs_job_script() -> None:
    s = _script("pbs", cores=4, memory=8 * GIB, walltime=7200, queue="workq")
    assert re.search(r"#PBS -l select=1:ncpus=4:mem=(8192MB|8GB)\b", s)
    assert "#PBS -l walltime=02:00:00" in s
    assert "#PBS -q workq" in s
    _common(s, 4, 8 * GIB)


def test_sge_job_script() -> None:
    # SGE has no core count in the header (the parallel environment is site-specific: set
    # it with jobqueue.sge.job-extra-directives); memory per slot and the walltime are.
    s = _script("sge", cores=2, memory=4 * GIB, walltime=1800, account="proj")
    assert "#$ -l h_rt=00:30:00" in s
    assert "#$ -l h_vmem=2048M" in s
    assert "#$ -P proj" in s
    _common(s, 2, 4 * GIB)


def test_lsf_job_script() -> None:
    s = _script("lsf", cores=3, memory=6 * GIB, walltime=5400)
    assert "#BSUB -n 3" in s
    assert "#BSUB -W 01:30" in s  # LSF: [hours:]minutes
    m = re.search(r"#BSUB -M (\d+)", s)
    # LSF's default unit for limits is KB (LSF_UNIT_FOR_LIMITS); 1000 or 1024 bytes
    assert m and min(abs(int(m.group(1)) * k - 6 * GIB) for k in (1000, 1024)) < 0.03 * 6 * GIB
    _common(s, 3, 6 * GIB)


def test_job_request_from_dask_config_and_forecast() -> None:
    import dask

    with dask.config.set({"jobqueue.slurm.cores": 4, "jobqueue.slurm.memory": "10GB",
                          "jobqueue.slurm.walltime": "04:00:00",
                          "jobqueue.slurm.queue": "long"}):
        req = job_request(BatchSpec("slurm", jobs=2, max_jobs=5))
        assert (req["cores"], req["memory_bytes"], req["walltime"], req["queue"]) == (
            4, 10 * GIB, "04:00:00", "long")
        assert (req["jobs_min"], req["jobs_max"]) == (2, 5)
        assert req["from"]["memory"] == "config"
        req = job_request(BatchSpec("slurm", cores=2, memory=3 * GIB, walltime=60))
        assert (req["cores"], req["memory_bytes"], req["walltime"]) == (2, 3 * GIB, "00:01:00")
    with dask.config.set({"jobqueue.pbs.memory": None}):
        # no memory given or configured: the forecast per worker + 256 MiB, times cores
        req = job_request(BatchSpec("pbs", cores=2), per_worker=GIB)
        assert req["memory_bytes"] == 2 * (GIB + 256 * 2**20)
        assert req["from"]["memory"] == "forecast"
        with pytest.raises(InputError, match="--job-memory"):
            job_request(BatchSpec("pbs"))


def test_api_fills_memory_from_forecast_only_when_needed() -> None:
    import dask
    from zeckenum.api import _where

    calls: list[int] = []

    def forecast() -> int:
        calls.append(1)
        return 300 * 2**20

    with dask.config.set({"jobqueue.slurm.memory": None}):
        spec = _where(None, None, "slurm", forecast)
        assert spec.forecast_per_worker == 300 * 2**20 and calls == [1]
        assert job_request(spec)["memory_bytes"] == 556 * 2**20  # + 256 MiB, one core
    with dask.config.set({"jobqueue.slurm.memory": "2GB"}):
        spec = _where(None, None, "slurm", forecast)
        assert spec.forecast_per_worker is None and calls == [1]  # not computed
    with pytest.raises(InputError, match="one of --workers, --scheduler and --cluster"):
        _where(2, None, "slurm")
    assert _where(None, "tcp://127.0.0.1:8786", None) == "tcp://127.0.0.1:8786"


def test_bad_batch_input() -> None:
    assert parse_jobs("3") == (3, 3) and parse_jobs("1:8") == (1, 8)
    for bad in ("0", "5:2", "x", "1:2:3", ""):
        with pytest.raises(InputError):
            parse_jobs(bad)
    with pytest.raises(InputError, match="unknown batch system"):
        BatchSpec("condor")
    with pytest.raises(InputError):
        BatchSpec("slurm", queue="a b; rm")
    with pytest.raises(InputError):
        BatchSpec("slurm", jobs=3, max_jobs=2)
    from zeckenum.cli import options
    from zeckenum.cluster import batch

    assert options.BATCH_KINDS == batch.BATCH_KINDS and options.MAX_WORKERS == batch.MAX_JOBS
    assert format_walltime(90, "slurm") == "00:01:30"
    assert format_walltime(90, "lsf") == "00:02"  # rounded up to whole minutes


def test_cli_refuses_job_options_without_cluster() -> None:
    from click.testing import CliRunner
    from zeckenum.cli import main

    r = CliRunner().invoke(main, ["count", "20", "--jobs", "2"])
    assert r.exit_code == 2 and "--cluster" in r.output
    r = CliRunner().invoke(main, ["count", "20", "--cluster", "slurm", "--workers", "2"])
    assert r.exit_code == 2 and "one of --workers, --scheduler and --cluster" in r.output
    r = CliRunner().invoke(main, ["count", "20", "--cluster", "slurm", "--jobs", "3:1"])
    assert r.exit_code == 2


def test_plan_prints_the_job_request() -> None:
    from click.testing import CliRunner
    from zeckenum.cli import main

    r = CliRunner().invoke(main, ["plan", "count", "40", "--probe", "30", "--json",
                                  "--cluster", "slurm", "--jobs", "1:3", "--job-cores", "2",
                                  "--walltime", "2h", "--queue", "debug"])
    assert r.exit_code == 0, r.output
    p = json.loads(r.output)
    req = p["job_request"]
    assert p["workers"] == 6  # the most jobs x cores per job
    assert (req["jobs_min"], req["jobs_max"], req["cores"], req["walltime"],
            req["queue"]) == (1, 3, 2, "02:00:00", "debug")
    # memory from the forecast: per worker at least the forecast's, times the cores
    assert req["memory_bytes"] >= 2 * p["memory_per_worker_bytes"]


def test_example_sbatch_script_is_valid_bash() -> None:
    script = ROOT / "examples" / "slurm-count.sbatch"
    subprocess.run(["bash", "-n", str(script)], check=True)
    text = script.read_text()
    assert "--cluster slurm" in text and "--checkpoint" in text


def test_job_whose_worker_came_and_went_between_looks_is_lost() -> None:
    """A job's worker may join and leave between two looks of `JobWatch` (no progress
    display asks in between): it must still be counted lost and dropped from the plan, not
    taken for a job still queued.  Workers of an in-process LocalCluster stand for the jobs
    (its plan keys are the worker names, as dask-jobqueue's are)."""
    from distributed import Client, LocalCluster
    from zeckenum.cluster.batch import JobWatch, joined_names_plugin

    cluster = LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                           dashboard_address=None)  # in-process: no port is opened
    client = Client(cluster, set_as_default=False)
    try:
        client.register_plugin(joined_names_plugin())
        watch = JobWatch(cluster, client)
        cluster.scale(2)  # a second "job" starts, and its worker joins...
        client.wait_for_workers(2, timeout=30)
        gone = [a for a, w in client.scheduler_info(n_workers=-1)["workers"].items()
                if str(w["name"]) == "1"]
        client.retire_workers(gone, close_workers=True, remove=True)  # ...and leaves
        deadline = time.monotonic() + 30
        while len(client.scheduler_info(n_workers=-1)["workers"]) > 1:
            assert time.monotonic() < deadline, "the worker did not leave"
            time.sleep(0.1)
        states = watch.look()  # the first look: job 1 has no worker now
        assert watch.lost == states.lost == 1
        assert (states.running, states.pending) == (1, 0)
        deadline = time.monotonic() + 30
        while 1 in cluster.worker_spec:  # dropped from the plan on the cluster's loop
            assert time.monotonic() < deadline, "the lost job stayed in the plan"
            time.sleep(0.1)
        assert watch.look().lost == 1  # counted once
    finally:
        client.close()
        cluster.close()


# ------------------------------------------------------------------- a real SLURM


def _sinfo() -> str | None:
    """None when a SLURM controller answers, else sinfo's own error line."""
    if shutil.which("sinfo") is None:
        return "sinfo: command not found (no SLURM client installed; see .ci/slurm-up)"
    r = subprocess.run(["sinfo", "-h", "-o", "%t"], capture_output=True, text=True,
                       timeout=30)
    if r.returncode != 0:
        lines = (r.stderr or r.stdout).strip().splitlines()
        return lines[0] if lines else f"sinfo exited {r.returncode}"
    if not r.stdout.strip():
        return "sinfo: no node in any partition"
    return None


@pytest.fixture(scope="module")
def slurm(tmp_path_factory):  # noqa: ANN001, ANN201
    """A reachable SLURM (else skip with sinfo's line), worker job logs in a temporary
    folder (through the Dask config, dask-jobqueue's own key), and no job of ours left
    at the end."""
    import dask

    why = _sinfo()
    if why is not None:
        pytest.skip(f"no SLURM reachable: {why}")
    logs = tmp_path_factory.mktemp("slurm-logs")
    with dask.config.set({"jobqueue.slurm.log-directory": str(logs)}):
        try:
            yield logs
        finally:
            subprocess.run(["scancel", "--name", "zeckenum-worker"], check=False)


@pytest.fixture(scope="module")
def count120() -> zeckenum.CountResult:
    return zeckenum.count(120, threads=1)


COUNT_FIELDS = ("games", "shortest", "longest", "length_counts", "states", "transitions")


def _same_count(got: zeckenum.CountResult, ref: zeckenum.CountResult) -> None:
    """Equal counts; the points route (used here for many small shards) takes other primes."""
    a, b = got.to_dict(), ref.to_dict()
    for key in COUNT_FIELDS:
        assert a[key] == b[key], key


def _our_jobs(state: str = "R") -> list[str]:
    r = subprocess.run(["squeue", "-h", "--name", "zeckenum-worker", "-t", state, "-o", "%i"],
                       capture_output=True, text=True, check=True)
    return r.stdout.split()


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("NUMBA_CACHE_DIR", None)
    return env


def test_count_60_on_two_slurm_jobs(slurm, tmp_path) -> None:  # noqa: ANN001
    r = subprocess.run(
        [sys.executable, "-m", "zeckenum", "count", "60", "--cluster", "slurm", "--jobs", "2",
         "--walltime", "10m", "--pending-timeout", "120", "--json", "--no-progress"],
        capture_output=True, text=True, cwd=tmp_path, env=_env(), timeout=300)
    assert r.returncode == 0, r.stderr[-2000:]
    got = json.loads(r.stdout)
    ref = zeckenum.count(60).to_dict()
    assert got["stats"]["backend"] == "batch"
    assert got["stats"]["job_request"]["jobs_min"] == 2
    assert got["stats"]["job_request"]["memory_bytes"] >= 512 * 2**20  # from the forecast
    for key in COUNT_FIELDS:
        assert got[key] == ref[key], key
    assert not _our_jobs("PD,R,CG")  # every job was cancelled when the run ended


def test_scancel_of_a_worker_job_changes_nothing(slurm, count120) -> None:  # noqa: ANN001
    cancelled: list[str] = []

    def cancel_one(n: int, i: int) -> None:
        if cancelled:
            return
        running = _our_jobs("R")
        if len(running) == 2:  # both jobs have workers: cancel one in the middle of the run
            subprocess.run(["scancel", running[0]], check=True)
            cancelled.append(running[0])

    res = run_count(120, scheduler=BatchSpec("slurm", jobs=2, memory=GIB, walltime=600,
                                             pending_timeout=120),
                    points_per_shard=8, on_shard=cancel_one)
    assert cancelled, "the run ended before both jobs were running"
    assert res.stats["shards_computed"] == res.stats["shards_total"] > 20
    assert res.stats["jobs_lost"] >= 1  # the cancelled job was seen to go
    _same_count(res, count120)


def test_killed_client_resumes_from_checkpoint(slurm, count120, tmp_path) -> None:  # noqa: ANN001
    ckpt = tmp_path / "ckpt"
    client = textwrap.dedent(f"""
        from zeckenum.cluster.batch import BatchSpec
        from zeckenum.cluster.run import run_count
        run_count(120, scheduler=BatchSpec("slurm", jobs=2, memory={GIB}, walltime=600,
                                           pending_timeout=120),
                  checkpoint_dir={str(ckpt)!r}, points_per_shard=8,
                  on_shard=lambda n, i: print("stored", i, flush=True))
    """)
    proc = subprocess.Popen([sys.executable, "-c", client], stdout=subprocess.PIPE,
                            stderr=subprocess.DEVNULL, text=True, cwd=tmp_path, env=_env())
    stored: list[int] = []
    try:
        assert proc.stdout is not None
        t0 = time.monotonic()
        for line in proc.stdout:
            if line.startswith("stored "):
                stored.append(int(line.split()[1]))
            if len(stored) >= 10 or time.monotonic() - t0 > 240:
                break
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
        # the dead client's worker jobs would wait out their death timeout: cancel them
        subprocess.run(["scancel", "--name", "zeckenum-worker"], check=False)
    assert len(stored) >= 10, "the client stored too few shards before the kill"
    manifest = json.loads((ckpt / "manifest.json").read_text())
    assert manifest  # the checkpoint the killed client left is readable
    res = run_count(120, scheduler=BatchSpec("slurm", jobs=2, memory=GIB, walltime=600,
                                             pending_timeout=120),
                    checkpoint_dir=ckpt, points_per_shard=8)
    # every shard the killed client had stored is reused, none recomputed
    assert res.stats["shards_reused"] >= len(stored)
    assert res.stats["shards_computed"] + res.stats["shards_reused"] == \
        res.stats["shards_total"]
    assert res.stats["shards_computed"] >= 1
    _same_count(res, count120)


def test_jobs_that_never_start_stop_with_one_line(slurm, tmp_path) -> None:  # noqa: ANN001
    # the jobs are held back an hour (a directive from the Dask config, through
    # dask-jobqueue's own key): the run must stop after the pending timeout, exit 7
    env = _env()
    env["DASK_JOBQUEUE__SLURM__JOB_EXTRA_DIRECTIVES"] = '["--begin=now+3600"]'
    r = subprocess.run(
        [sys.executable, "-m", "zeckenum", "count", "30", "--cluster", "slurm",
         "--job-memory", "512M", "--pending-timeout", "8", "--no-progress"],
        capture_output=True, text=True, cwd=tmp_path, env=env, timeout=120)
    assert r.returncode == 7, r.stderr[-2000:]
    lines = [x for x in r.stderr.splitlines() if x.startswith("zeckenum:")]
    assert len(lines) == 1 and "no slurm job started within" in lines[0]
    assert "1 pending" in lines[0]
    assert "Traceback" not in r.stderr
    assert not _our_jobs("PD,R,CG")


def test_example_sbatch_script_is_accepted_by_sbatch(slurm) -> None:  # noqa: ANN001
    r = subprocess.run(["sbatch", "--test-only", str(ROOT / "examples" / "slurm-count.sbatch")],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    assert "to start at" in r.stderr + r.stdout


def test_pending_timeout_in_process_api(slurm) -> None:  # noqa: ANN001
    import dask

    with dask.config.set({"jobqueue.slurm.job-extra-directives": ["--begin=now+3600"]}), \
            pytest.raises(ClusterStalled, match="no slurm job started"):
        zeckenum.count(25, cluster=BatchSpec("slurm", memory=GIB // 2, pending_timeout=5))
    assert not _our_jobs("PD,R,CG")


def test_refused_submission_is_one_line(slurm, tmp_path) -> None:  # noqa: ANN001
    # sbatch refuses a partition that does not exist: its own error line, exit 7, at once
    r = subprocess.run(
        [sys.executable, "-m", "zeckenum", "count", "20", "--cluster", "slurm", "--queue",
         "nosuchpartition", "--job-memory", "512M", "--pending-timeout", "60",
         "--no-progress"],
        capture_output=True, text=True, cwd=tmp_path, env=_env(), timeout=120)
    assert r.returncode == 7
    assert r.stderr.strip().splitlines() == [
        r.stderr.strip().splitlines()[-1]]  # one line, no traceback or log
    assert "refused the slurm job: sbatch: error:" in r.stderr
    assert "nosuchpartition" in r.stderr


def test_watchdog_stops_when_lost_jobs_cannot_be_replaced(slurm, tmp_path) -> None:  # noqa: ANN001
    # the only job is cancelled mid-run while the partition is down, so its replacement
    # stays pending: the watchdog stops the run after the stall timeout (exit 7) naming
    # the jobs, and the checkpoint keeps what was finished
    part = subprocess.run(["sinfo", "-h", "-o", "%R"], capture_output=True, text=True,
                          check=True).stdout.split()[0]
    done: list[int] = []

    def cancel_all(n: int, i: int) -> None:
        done.append(i)
        if len(done) == 3:
            subprocess.run(["scontrol", "update", f"PartitionName={part}", "State=DOWN"],
                           check=True)
            subprocess.run(["scancel", "--name", "zeckenum-worker"], check=True)

    try:
        with pytest.raises(ClusterStalled, match=r"jobs: 0 running, 1 pending, 1 lost"):
            run_count(120, scheduler=BatchSpec("slurm", jobs=1, memory=GIB, walltime=600,
                                               pending_timeout=120),
                      points_per_shard=8, checkpoint_dir=tmp_path / "ckpt", stall_timeout=10,
                      on_shard=cancel_all)
    finally:
        subprocess.run(["scontrol", "update", f"PartitionName={part}", "State=UP"],
                       check=True)
    assert len(done) >= 3
    manifest = (tmp_path / "ckpt" / "manifest.json").read_text()
    assert manifest.count("sha256") >= 3  # the finished shards are in the checkpoint
    assert not _our_jobs("PD,R,CG")
