"""The host cache: one first sweep per host, shared by the worker processes through memory
maps.  References: the in-process first sweep (`cluster.tasks.first_sweep`, checked against
the brute force in tests/test_count_reference.py) and `zeckenum.count`; the concurrency
checks are common practice (one file lock, one writer).
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
from zeckenum.cluster.tasks import first_sweep
from zeckenum.rules import get_rules


@pytest.fixture
def cache_root(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("ZECKENUM_HOST_CACHE", str(tmp_path / "host"))
    return tmp_path / "host"


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
    _, win, facts = first_sweep(rs, n)
    calls = []

    def compute():  # noqa: ANN202
        calls.append(1)
        return win, facts.to_dict()

    got, got_facts, shared = hostcache.shared_windows(rs.content_hash(), n, compute)
    assert shared and calls == [1]
    _same_windows(win, got)
    assert got_facts == facts.to_dict()
    again, _, _ = hostcache.shared_windows(rs.content_hash(), n, compute)
    assert calls == [1]  # mapped, not computed again
    _same_windows(win, again)
    assert hostcache.release(rs.content_hash(), n)
    assert not hostcache.sweep_folder(rs.content_hash(), n).exists()
    assert not hostcache.release(rs.content_hash(), n)


def test_count_from_mapped_windows_equals_count(cache_root: Path) -> None:
    from zeckenum.count import assemble_count
    from zeckenum.modular import primes_for_bits
    from zeckenum.spectrum import spectrum_residues

    rs = get_rules("standard")
    space, win, facts = first_sweep(rs, 60)
    mapped, _, _ = hostcache.shared_windows(rs.content_hash(), 60,
                                            lambda: (win, facts.to_dict()))
    primes, check = primes_for_bits(mapped.count_bits)
    residues, _ = spectrum_residues(space, mapped, [*primes, check])
    res = assemble_count("standard", rs.content_hash(), 60, mapped.states, mapped.transitions,
                         mapped.shortest, mapped.longest, primes, check, residues, {})
    assert res == zeckenum.count(60)


def test_damaged_folder_is_recomputed(cache_root: Path, caplog: pytest.LogCaptureFixture) -> None:
    rs = get_rules("standard")
    _, win, facts = first_sweep(rs, 30)
    hostcache.shared_windows(rs.content_hash(), 30, lambda: (win, facts.to_dict()))
    folder = hostcache.sweep_folder(rs.content_hash(), 30)
    (folder / "meta.json").write_text("{not json")
    got, _, shared = hostcache.shared_windows(rs.content_hash(), 30,
                                              lambda: (win, facts.to_dict()))
    assert not shared and "unreadable" in caplog.text
    _same_windows(win, got)


def test_unwritable_cache_falls_back_to_own_copy(tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("ZECKENUM_HOST_CACHE", str(blocker / "below"))
    rs = get_rules("standard")
    _, win, facts = first_sweep(rs, 20)
    got, _, shared = hostcache.shared_windows(rs.content_hash(), 20,
                                              lambda: (win, facts.to_dict()))
    assert not shared and got is win


_PROCESS = textwrap.dedent(
    """
    import os, sys, time
    from zeckenum.cluster import hostcache
    from zeckenum.cluster.tasks import first_sweep
    from zeckenum.rules import get_rules

    rs = get_rules("standard")
    marks = sys.argv[1]

    def compute():
        with open(marks, "a") as f:
            f.write(f"{os.getpid()}\\n")
        time.sleep(1.0)  # let the other process reach the lock meanwhile
        _, win, facts = first_sweep(rs, 50)
        return win, facts.to_dict()

    win, facts, shared = hostcache.shared_windows(rs.content_hash(), 50, compute)
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
    _, win, _ = first_sweep(get_rules("standard"), 50)
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
