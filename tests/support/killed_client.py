"""Test helper: run a client script in its own process and SIGKILL it mid-run.

The script prints a marker line once it has written what the test wants to resume from,
then stalls; the helper reads that line, kills the process (no cleanup runs in it, as when
a machine dies) and always reaps it.
"""

from __future__ import annotations

import subprocess
import sys


def kill_after_marker(script: str, *args: str, marker: str = "CHECKPOINTED") -> None:
    """Run `python -c script args...`, wait for `marker` on its stdout, then SIGKILL it."""
    proc = subprocess.Popen([sys.executable, "-c", script, *args], stdout=subprocess.PIPE,
                            text=True)
    try:
        assert proc.stdout.readline().strip() == marker
        proc.kill()  # SIGKILL
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
        proc.stdout.close()


def busy_worker_killer(client):  # noqa: ANN001, ANN201
    """(on_shard callback, killed addresses): after the first shard, SIGKILL one Dask worker
    that is busy with a task (once), so the run must recover a task in flight."""
    import os
    import signal

    pids = client.run(os.getpid)
    killed: list[str] = []

    def kill(_n: int, _i: int) -> None:
        if killed:
            return
        busy = [w for w, keys in client.processing().items() if keys and w in pids]
        if busy:
            os.kill(pids[busy[0]], signal.SIGKILL)
            killed.append(busy[0])

    return kill, killed
