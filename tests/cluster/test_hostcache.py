"""The host cache: one first sweep per host, shared by the worker processes through memory
maps.  References: the in-process first sweep (`cluster.count_tasks.windows_with_facts`,
checked against the brute force in tests/counting/test_count_reference.py) and
`zeckenum.count`; the concurrency checks are common practice (one file lock, one writer).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
import zeckenum
from zeckenum.cluster import hostcache
from zeckenum.cluster.count_tasks import windows_with_facts
from zeckenum.rules.catalogue import get_rules


@pytest.fixture
def cache_root(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("ZECKENUM_HOST_CACHE", str(tmp_path / "host"))
    return tmp_path / "host"


def _share(rs, n: int, compute):  # noqa: ANN001, ANN202
    """`hostcache.shared_windows` of the game (rs, n), checked against its state space."""
    from zeckenum.core.statespace import build_space

    return hostcache.shared_windows(rs.content_hash(), n, compute,
                                    build_space(rs.instantiate(n)))


def _same_windows(a, b) -> None:  # noqa: ANN001
    assert sorted(a.lmin) == sorted(b.lmin)
    for lv in a.lmin:
        assert np.array_equal(a.lmin[lv], b.lmin[lv])
        assert np.array_equal(a.win[lv], b.win[lv])
        assert np.array_equal(a.terminal_ranks[lv], b.terminal_ranks[lv])
        for f in ("ptr", "drop", "src"):
            x, y = getattr(a.incoming[lv], f), getattr(b.incoming[lv], f)
            assert x.dtype == y.dtype and np.array_equal(x, y)
    for k in hostcache.SCALARS:
        assert getattr(a, k) == getattr(b, k)


@pytest.mark.parametrize(("rules", "n"), [("standard", 1), ("standard", 45), ("reversed", 20),
                                          ("tribonacci", 25)])
def test_round_trip_is_exact(cache_root: Path, rules: str, n: int) -> None:
    rs = get_rules(rules)
    _, win, facts = windows_with_facts(rs, n)
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, got_facts, shared = _share(rs, n, compute)
    assert shared and calls == [1]
    _same_windows(win, got)
    assert got_facts == facts.to_dict()
    again, _, _ = _share(rs, n, compute)
    assert calls == [1]  # mapped, not computed again
    _same_windows(win, again)
    assert hostcache.release(rs.content_hash(), n)
    assert not hostcache.sweep_folder(rs.content_hash(), n).exists()
    assert not hostcache.release(rs.content_hash(), n)


def test_count_from_mapped_windows_equals_count(cache_root: Path) -> None:
    from zeckenum.core.modular import primes_for_bits
    from zeckenum.counting.count import assemble_count
    from zeckenum.counting.spectrum import spectrum_residues

    rs = get_rules("standard")
    space, win, facts = windows_with_facts(rs, 60)
    mapped, _, _ = _share(rs, 60,
                                            lambda: (win, facts.to_dict()))
    primes, check = primes_for_bits(mapped.count_bits)
    residues, _ = spectrum_residues(space, mapped, [*primes, check])
    res = assemble_count("standard", rs.content_hash(), 60, mapped.states, mapped.transitions,
                         mapped.shortest, mapped.longest, primes, check, residues, {})
    assert res == zeckenum.count(60)


def test_damaged_folder_is_recomputed(cache_root: Path, caplog: pytest.LogCaptureFixture) -> None:
    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, 30)
    _share(rs, 30, lambda: (win, facts.to_dict()))
    folder = hostcache.sweep_folder(rs.content_hash(), 30)
    (folder / "meta.json").write_text("{not json")
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, _, shared = _share(rs, 30, compute)
    assert shared and calls == [1]  # recomputed and shared again
    assert "damaged" in caplog.text
    _same_windows(win, got)


def test_unwritable_cache_falls_back_to_own_copy(tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("ZECKENUM_HOST_CACHE", str(blocker / "below"))
    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, 20)
    got, _, shared = _share(rs, 20,
                                              lambda: (win, facts.to_dict()))
    assert not shared and got is win


_PROCESS = textwrap.dedent(
    """
    import os, sys, time
    from zeckenum.cluster import hostcache
    from zeckenum.cluster.count_tasks import windows_with_facts
    from zeckenum.rules.catalogue import get_rules

    rs = get_rules("standard")
    marks = sys.argv[1]

    def compute():
        with open(marks, "a") as f:
            f.write(f"{os.getpid()}\\n")
        time.sleep(1.0)  # let the other process reach the lock meanwhile
        _, win, facts = windows_with_facts(rs, 50)
        return win, facts.to_dict()

    from zeckenum.core.statespace import build_space
    space = build_space(rs.instantiate(50))
    win, facts, shared = hostcache.shared_windows(rs.content_hash(), 50, compute, space)
    print(shared, win.states, win.transitions, int(sum(a.sum() for a in win.win.values())))
    """
)


def test_two_processes_compute_once(cache_root: Path, tmp_path: Path) -> None:
    marks = tmp_path / "marks"
    env = {**__import__("os").environ, "ZECKENUM_HOST_CACHE": str(cache_root)}
    procs = [subprocess.Popen([sys.executable, "-c", _PROCESS, str(marks)], env=env,
                              stdout=subprocess.PIPE, text=True) for _ in range(2)]
    outs = []
    for p in procs:
        out, _ = p.communicate(timeout=300)
        assert p.returncode == 0
        outs.append(out.split())
    assert len(marks.read_text().split()) == 1  # one sweep for the host
    assert outs[0] == outs[1] and outs[0][0] == "True"
    _, win, _ = windows_with_facts(get_rules("standard"), 50)
    assert outs[0][1:] == [str(win.states), str(win.transitions),
                           str(int(sum(a.sum() for a in win.win.values())))]


def test_workers_share_and_release(cache_root: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from zeckenum.cluster.backend import open_pool
    from zeckenum.cluster.run import count_on_pool

    rs = get_rules("standard")
    folder = hostcache.sweep_folder(rs.content_hash(), 70)
    during: list[bool] = []
    with open_pool(workers=2) as pool:
        seen = pool.client.run(lambda: __import__("os").environ.get("ZECKENUM_HOST_CACHE"))
        assert set(seen.values()) == {str(cache_root)}  # the workers inherit the setting
        res = count_on_pool([70], "standard", pool, blocks=4,
                            on_shard=lambda _n, _i: during.append(folder.exists()))[70]
    assert res == zeckenum.count(70)
    assert during and all(during)  # the workers' sweep lived in the host cache ...
    assert not folder.exists()  # ... and was released when n was done


# ------------------------------------------------------------------ untrusted cached data
#
# Every scenario below damages a host-cache folder and then counts through it.  The count
# runs in a child process (a damaged folder could crash the kernels of a careless reader,
# which must not take pytest down) that makes this process look like a Dask worker, so
# `count_tasks.prepared` goes through the host cache exactly as on a cluster.  Reference: the
# plain-Python brute force tests/support/bruteforce.py (shares no code with zeckenum).

N_TAMPER = 40

_COUNT_AS_WORKER = textwrap.dedent(
    """
    import sys
    from zeckenum.cluster import count_tasks as tasks
    from zeckenum.cluster.run import run_count

    tasks.worker_address = lambda: "tcp://127.0.0.1:1"  # look like a Dask worker
    res = run_count(int(sys.argv[1]), blocks=2)
    print(res.games, res.states, res.transitions, res.shortest, res.longest)
    print(sorted(res.length_counts.items()))
    """
)


def _count_as_worker(cache_root: Path, n: int) -> tuple[int, str, str]:
    """(exit status, stdout, stderr) of a count of n whose first sweep goes through the
    host cache at `cache_root`, run in a child process (bounded by a timeout)."""
    import os

    env = {**os.environ, "ZECKENUM_HOST_CACHE": str(cache_root)}
    proc = subprocess.run([sys.executable, "-c", _COUNT_AS_WORKER, str(n)], env=env,
                          capture_output=True, text=True, timeout=600)
    return proc.returncode, proc.stdout, proc.stderr


def _expected_lines(n: int) -> list[str]:
    from bruteforce import census

    ref = census(n)
    return [f"{ref['games']} {ref['states']} {ref['transitions']} {ref['shortest']} "
            f"{ref['longest']}", str(sorted(ref["length_counts"].items()))]


def _shared_folder(n: int) -> Path:
    """Write the host-cache folder of the standard game's first sweep of n (as a worker
    would) and return it."""
    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, n)
    _, _, shared = _share(rs, n, lambda: (win, facts.to_dict()))
    assert shared
    return hostcache.sweep_folder(rs.content_hash(), n)


def _npy_data(path: Path) -> tuple[np.ndarray, int]:
    """(array, byte offset of its data) of a .npy file."""
    arr = np.load(path)
    return arr, path.stat().st_size - arr.nbytes


def _reseal(folder: Path) -> None:
    """Rewrite the folder's digests after a deliberate edit (as a same-user writer with a
    bug could), so the checks behind the digest are exercised too."""
    seal = getattr(hostcache, "seal", None)
    if seal is not None:
        seal(folder)


def _assert_exact(cache_root: Path, n: int) -> None:
    code, out, err = _count_as_worker(cache_root, n)
    assert code == 0, err[-2000:]
    assert out.splitlines() == _expected_lines(n)


def test_flipped_bit_in_moves_is_caught(cache_root: Path) -> None:
    folder = _shared_folder(N_TAMPER)
    src, start = _npy_data(folder / "inc_src.npy")
    odd = np.flatnonzero(src % 2 == 1)
    assert odd.size  # an odd rank: flipping its lowest bit keeps it inside its layer
    raw = bytearray((folder / "inc_src.npy").read_bytes())
    raw[start + 4 * int(odd[len(odd) // 2])] ^= 1
    (folder / "inc_src.npy").write_bytes(bytes(raw))
    _assert_exact(cache_root, N_TAMPER)


@pytest.mark.parametrize("resealed", [False, True])
def test_edited_facts_are_not_trusted(cache_root: Path, resealed: bool) -> None:
    import json

    folder = _shared_folder(N_TAMPER)
    meta = json.loads((folder / "meta.json").read_text())
    for key in ("states", "transitions", "terminals"):
        meta["facts"][key] += 7
        meta["scalars"][key] += 7
    meta["facts"]["shortest"] += 1
    meta["scalars"]["shortest"] += 1
    (folder / "meta.json").write_text(json.dumps(meta))
    if resealed:
        _reseal(folder)
    _assert_exact(cache_root, N_TAMPER)


@pytest.mark.parametrize("damage", ["src_too_large", "src_negative", "drop_too_large",
                                    "ptr_not_monotone", "lmin_beyond_longest"])
def test_out_of_range_values_give_a_recompute_not_a_crash(cache_root: Path,
                                                          damage: str) -> None:
    folder = _shared_folder(N_TAMPER)
    name, index, value = {
        "src_too_large": ("inc_src.npy", -1, 2**30),
        "src_negative": ("inc_src.npy", 3, -5),
        "drop_too_large": ("inc_drop.npy", 2, 100),
        "ptr_not_monotone": ("inc_ptr.npy", 5, 2**40),
        "lmin_beyond_longest": ("lmin.npy", -1, 10**6),
    }[damage]
    arr, _ = _npy_data(folder / name)
    arr = arr.copy()
    arr[index] = value
    np.save(folder / name, arr)
    _reseal(folder)
    _assert_exact(cache_root, N_TAMPER)


def _refused(cache_root: Path, caplog: pytest.LogCaptureFixture) -> None:
    """The first sweep is computed privately: nothing read from or written to the root."""
    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, 20)
    before = sorted(p.name for p in cache_root.iterdir()) if cache_root.is_dir() else None
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, _, shared = _share(rs, 20, compute)
    assert not shared and calls == [1] and got is win
    assert "refus" in caplog.text
    after = sorted(p.name for p in cache_root.iterdir()) if cache_root.is_dir() else None
    assert before == after


def test_group_or_world_accessible_root_is_refused(cache_root: Path,
                                                   caplog: pytest.LogCaptureFixture) -> None:
    import os

    cache_root.mkdir()
    os.chmod(cache_root, 0o777)
    _refused(cache_root, caplog)


def test_root_of_another_owner_is_refused(cache_root: Path,
                                          caplog: pytest.LogCaptureFixture) -> None:
    import os

    if os.getuid() != 0:
        pytest.skip("changing a folder's owner needs root")
    cache_root.mkdir(mode=0o700)
    os.chown(cache_root, 4242, 4242)
    _refused(cache_root, caplog)


def test_symlinked_root_is_refused(cache_root: Path, tmp_path: Path,
                                   caplog: pytest.LogCaptureFixture) -> None:
    real = tmp_path / "elsewhere"
    real.mkdir(mode=0o700)
    cache_root.symlink_to(real)
    _refused(real, caplog)


def test_world_readable_sweep_folder_is_not_read(cache_root: Path,
                                                 caplog: pytest.LogCaptureFixture) -> None:
    import os

    folder = _shared_folder(N_TAMPER)
    os.chmod(folder, 0o777)
    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, N_TAMPER)
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, _, _ = _share(rs, N_TAMPER, compute)
    assert calls == [1]
    _same_windows(win, got)


_WRITE_AND_WAIT = textwrap.dedent(
    """
    import sys
    from zeckenum.cluster import hostcache
    from zeckenum.cluster.count_tasks import windows_with_facts
    from zeckenum.rules.catalogue import get_rules

    rs = get_rules("standard")
    n = int(sys.argv[1])
    space, win, facts = windows_with_facts(rs, n)
    got, _, shared = hostcache.shared_windows(rs.content_hash(), n,
                                              lambda: (win, facts.to_dict()), space)
    print("READY" if shared else "NOT-SHARED", flush=True)
    if sys.argv[2] == "hold":
        sys.stdin.read()  # alive (and using the folder) until the test closes our stdin
    """
)


def _writer(cache_root: Path, n: int, mode: str) -> subprocess.Popen:
    import os

    env = {**os.environ, "ZECKENUM_HOST_CACHE": str(cache_root)}
    proc = subprocess.Popen([sys.executable, "-c", _WRITE_AND_WAIT, str(n), mode], env=env,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "READY"
    return proc


def test_folder_of_a_dead_run_is_replaced(cache_root: Path,
                                          caplog: pytest.LogCaptureFixture) -> None:
    proc = _writer(cache_root, 30, "exit")  # writes the folder and dies without releasing
    proc.communicate(timeout=120)
    rs = get_rules("standard")
    folder = hostcache.sweep_folder(rs.content_hash(), 30)
    assert folder.is_dir()
    _, win, facts = windows_with_facts(rs, 30)
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, _, shared = _share(rs, 30, compute)
    assert calls == [1] and shared  # recomputed, and the new folder is shared
    assert "dead run" in caplog.text
    _same_windows(win, got)


def test_folder_in_use_by_a_live_process_is_kept(cache_root: Path) -> None:
    proc = _writer(cache_root, 30, "hold")
    try:
        rs = get_rules("standard")
        calls = []
        _, _, shared = _share(rs, 30,
                                                lambda: calls.append(1))
        assert shared and calls == []  # mapped: the writer is alive
    finally:
        proc.stdin.close()
        proc.wait(timeout=120)


def test_round_trip_without_kept_moves(cache_root: Path) -> None:
    # the largest games keep no moves: the windows are then checked against moves derived
    # again from the state space; reference: the in-process sweep and `zeckenum.count`
    import json

    from zeckenum.core.statespace import build_space
    from zeckenum.core.sweep import sweep_windows

    rs = get_rules("standard")
    space = build_space(rs.instantiate(45))
    win = sweep_windows(space, keep_incoming=False)
    _, full, facts = windows_with_facts(rs, 45)
    got, _, shared = _share(rs, 45, lambda: (win, facts.to_dict()))
    assert shared and got.incoming is None
    for k in hostcache.SCALARS:
        assert getattr(got, k) == getattr(full, k)
    folder = hostcache.sweep_folder(rs.content_hash(), 45)
    lmin = np.load(folder / "lmin.npy").copy()
    reached = np.flatnonzero(np.load(folder / "win.npy") > 0)
    lmin[reached[len(reached) // 2]] += 1  # a window the moves do not imply
    np.save(folder / "lmin.npy", lmin)
    _reseal(folder)
    meta = json.loads((folder / "meta.json").read_text())
    assert "inc_src" not in meta["offsets"]
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    again, _, _ = _share(rs, 45, compute)
    assert calls == [1]
    for k in hostcache.SCALARS:
        assert getattr(again, k) == getattr(full, k)


def test_any_changed_byte_is_refused_before_use(tmp_path_factory: pytest.TempPathFactory) -> None:
    # generated damage (common practice): any one byte of any file of a sealed folder,
    # changed in any way, makes the reader refuse the folder; never returns its arrays
    import os

    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st
    from zeckenum.core.statespace import build_space
    from zeckenum.errors import InputError

    rs = get_rules("standard")
    space, win, facts = windows_with_facts(rs, 25)
    root = tmp_path_factory.mktemp("sealed")
    os.chmod(root, 0o700)
    folder = root / "sweep"
    hostcache.save_windows(folder, win, facts.to_dict())
    names = sorted(p.name for p in folder.iterdir())
    pristine = {name: (folder / name).read_bytes() for name in names}
    space = build_space(rs.instantiate(25))

    @settings(max_examples=150, deadline=None,
              suppress_health_check=[HealthCheck.function_scoped_fixture])
    @given(name=st.sampled_from(names), where=st.floats(0, 1, exclude_max=True),
           mask=st.integers(1, 255))
    def damaged(name: str, where: float, mask: int) -> None:
        raw = bytearray(pristine[name])
        raw[int(where * len(raw))] ^= mask
        (folder / name).write_bytes(bytes(raw))
        try:
            with pytest.raises((hostcache.Damaged, ValueError, OSError, InputError)):
                hostcache.load_windows(folder, space)
        finally:
            (folder / name).write_bytes(pristine[name])

    damaged()
    got, _ = hostcache.load_windows(folder, space)  # the pristine folder still loads
    _same_windows(win, got)


def test_a_file_changed_after_a_check_is_checked_again(cache_root: Path) -> None:
    # a process maps the same folder many times (its own cache keeps two games); reuse of
    # an earlier check must not survive a change of the files (common practice)
    import time

    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, 30)
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    _share(rs, 30, compute)
    _share(rs, 30, compute)  # mapped again, the earlier check reused
    assert calls == [1]
    folder = hostcache.sweep_folder(rs.content_hash(), 30)
    src, start = _npy_data(folder / "inc_src.npy")
    odd = np.flatnonzero(src % 2 == 1)
    time.sleep(0.05)  # past the file-time granularity
    with open(folder / "inc_src.npy", "r+b") as f:  # in place: same inode and size
        f.seek(start + 4 * int(odd[0]))
        byte = f.read(1)
        f.seek(start + 4 * int(odd[0]))
        f.write(bytes([byte[0] ^ 1]))
    got, _, _ = _share(rs, 30, compute)
    assert calls == [1, 1]  # refused and recomputed
    _same_windows(win, got)


def _lock_is_free(folder: Path) -> bool:
    """Whether no open file description holds the folder's exclusive `.lock` (flock locks
    belong to open file descriptions, so this probe conflicts with this process's too)."""
    import fcntl
    import os

    fd = os.open(folder.with_name(folder.name + ".lock"), os.O_RDWR)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        return False
    finally:
        os.close(fd)
    return True


def test_a_mapped_folder_is_checked_outside_the_lock(cache_root: Path,
                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    # the check lists every move again when the moves are not kept: under the lock, the
    # worker processes of one host would check one after the other (common practice: hold
    # a lock only to decide, not to verify)
    rs = get_rules("standard")
    folder = _shared_folder(30)
    win = windows_with_facts(rs, 30)[1]
    seen = []
    original = hostcache.check_windows

    def probing(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        seen.append(_lock_is_free(folder))
        return original(*args, **kwargs)

    monkeypatch.setattr(hostcache, "check_windows", probing)
    hostcache._verified.clear()  # as in another process: nothing checked yet
    got, _, shared = _share(rs, 30, lambda: pytest.fail("recomputed a good folder"))
    assert shared and seen == [True]
    _same_windows(win, got)


def test_the_filling_sweep_is_the_shared_one(cache_root: Path) -> None:
    # `compute_shared` fills the cache under the lock; `compute` only runs when the cache
    # cannot be used
    from zeckenum.core.statespace import build_space

    rs = get_rules("standard")
    _, win, facts = windows_with_facts(rs, 25)
    calls = []
    space = build_space(rs.instantiate(25))

    def via(tag: str):  # noqa: ANN202
        def compute():  # noqa: ANN202
            calls.append(tag)
            return win, facts.to_dict()
        return compute

    got, _, shared = hostcache.shared_windows(rs.content_hash(), 25, via("own"), space,
                                              via("shared"))
    assert shared and calls == ["shared"]
    _same_windows(win, got)


def test_checks_wait_for_a_free_check_slot(cache_root: Path,
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    # checks outside the lock are bounded by memory: with one slot taken, the next check
    # waits for it (common practice: a counting semaphore of file locks)
    import fcntl
    import os
    import threading

    rs = get_rules("standard")
    folder = _shared_folder(30)
    win = windows_with_facts(rs, 30)[1]
    monkeypatch.setattr(hostcache, "check_slots", lambda space, folder: 1)
    hostcache._verified.clear()
    fd = os.open(folder.with_name(folder.name + ".check0"), os.O_CREAT | os.O_RDWR, 0o600)
    fcntl.flock(fd, fcntl.LOCK_EX)
    done = []
    t = threading.Thread(target=lambda: done.append(_share(rs, 30, lambda: pytest.fail(
        "recomputed a good folder"))))
    try:
        t.start()
        t.join(1.0)
        assert not done  # waiting for the slot
    finally:
        os.close(fd)
    t.join(60)
    assert done and done[0][2]
    _same_windows(win, done[0][0])


def test_check_slots_follow_the_memory(cache_root: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from zeckenum.core.statespace import build_space

    rs = get_rules("standard")
    folder = _shared_folder(30)
    space = build_space(rs.instantiate(30))
    one = hostcache.check_bytes(space, kept=True)
    assert hostcache.check_bytes(space, kept=False) > one
    monkeypatch.setattr(hostcache, "available_bytes", lambda: 5 * one + 1)
    assert hostcache.check_slots(space, folder) == 5
    monkeypatch.setattr(hostcache, "available_bytes", lambda: one - 1)
    assert hostcache.check_slots(space, folder) == 1


@pytest.mark.parametrize("damage", ["later_rank", "window_off"])
def test_check_refuses_moves_that_break_the_windows(damage: str) -> None:
    # the windows a first sweep records must be those its moves imply (module docstring);
    # the check folds them per state: each kind of break is refused, not used
    from zeckenum.core.statespace import build_space
    from zeckenum.core.sweep import Incoming

    rs = get_rules("standard")
    space = build_space(rs.instantiate(30))
    _, win, _ = windows_with_facts(rs, 30)
    hostcache.check_windows(space, win.lmin, win.win, win.terminal_ranks, win.incoming)
    inc = {lv: Incoming(i.ptr, i.drop.copy(), i.src.copy()) for lv, i in win.incoming.items()}
    lmin = {lv: a.copy() for lv, a in win.lmin.items()}
    done = False
    for lv in sorted(inc, reverse=True):
        i = inc[lv]
        rows = np.repeat(np.arange(i.ptr.size - 1), np.diff(i.ptr))
        if damage == "later_rank":
            e = np.flatnonzero(i.drop == 0)
            if e.size:
                i.src[e[0]] = rows[e[0]]
                done = True
        else:
            reached = np.flatnonzero(win.win[lv] > 0)
            if lv != max(inc) and reached.size:
                lmin[lv][reached[0]] += 1
                done = True
        if done:
            break
    assert done
    with pytest.raises(hostcache.Damaged):
        hostcache.check_windows(space, lmin, win.win, win.terminal_ranks, inc)
