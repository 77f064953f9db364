"""Checkpoints: atomic shard files, resume after a killed client, damaged shards, refusals.

The reference for every count is `zeckenum.count` run in-process without checkpoints; the
checksums are checked with hashlib (reference library).  The killed client is a separate
Python process that the test kills with SIGKILL after it reports checkpointed shards.
"""

from __future__ import annotations

import hashlib
import json
import textwrap

import numpy as np
import pytest
import zeckenum
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from killed_client import kill_after_marker
from manifest_mutations import draw_mutation
from zeckenum.cluster import run_count
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.safeio import write_atomic


def _manifest(folder) -> dict:  # noqa: ANN001
    return json.loads((folder / "manifest.json").read_text())


def test_manifest_records_provenance_and_checksums(tmp_path) -> None:  # noqa: ANN001
    res = run_count(47, checkpoint_dir=tmp_path, max_primes_per_block=1)
    m = _manifest(tmp_path)
    assert m["parameters"]["n"] == 47
    assert m["parameters"]["rules_hash"] == zeckenum.STANDARD.content_hash()
    assert m["parameters"]["version"] == zeckenum.__version__
    assert [int(p) for p in m["primes"]] == list(res.primes)
    assert int(m["check_prime"]) == res.check_prime
    assert len(m["shards"]) == res.stats["shards_total"] == len(res.primes) + 1
    for entry in m["shards"]:
        data = (tmp_path / entry["file"]).read_bytes()
        assert hashlib.sha256(data).hexdigest() == entry["sha256"]
    assert not list(tmp_path.glob(".*.tmp"))  # no temporary file left behind


def test_rerun_reuses_every_shard(tmp_path) -> None:  # noqa: ANN001
    first = run_count(52, checkpoint_dir=tmp_path, blocks=3)
    again = run_count(52, checkpoint_dir=tmp_path)  # no explicit plan: the stored one
    assert again.stats["shards_reused"] == 3
    assert again.stats["shards_computed"] == 0
    assert again == first == zeckenum.count(52)


def test_damaged_shards_are_reported_and_recomputed(tmp_path, capsys) -> None:  # noqa: ANN001
    n = 60
    run_count(n, checkpoint_dir=tmp_path, max_primes_per_block=1)
    files = [tmp_path / e["file"] for e in _manifest(tmp_path)["shards"]]
    assert len(files) >= 5
    # truncated
    files[0].write_bytes(files[0].read_bytes()[:-9])
    # one residue changed (still a valid .npy file)
    arr = np.load(files[1])
    arr[0, -1] ^= 1
    np.save(files[1], arr)
    # two shards swapped
    a, b = files[2].read_bytes(), files[3].read_bytes()
    files[2].write_bytes(b)
    files[3].write_bytes(a)
    capsys.readouterr()
    res = run_count(n, checkpoint_dir=tmp_path, max_primes_per_block=1)
    err = capsys.readouterr().err
    warnings = [line for line in err.splitlines() if line.startswith("zeckenum: warning:")]
    assert len(warnings) == 4
    for f in files[:4]:
        assert any(f.name in w for w in warnings)
    assert res.stats["shards_rejected"] == 4
    assert res.stats["shards_computed"] == 4
    assert res.stats["shards_reused"] == len(files) - 4
    assert res == zeckenum.count(n)
    # the directory is healthy again: everything reused
    again = run_count(n, checkpoint_dir=tmp_path)
    assert again.stats["shards_reused"] == len(files)


def test_missing_shard_file_is_recomputed(tmp_path) -> None:  # noqa: ANN001
    run_count(44, checkpoint_dir=tmp_path, max_primes_per_block=1)
    (tmp_path / "shard-0001.npy").unlink()
    res = run_count(44, checkpoint_dir=tmp_path, max_primes_per_block=1)
    assert res.stats["shards_computed"] == 1
    assert res == zeckenum.count(44)


@pytest.mark.parametrize(
    "change, key",
    [
        (dict(n=41), "n=40"),
        (dict(n=40, prime_offset=7), "prime_offset=0"),
        (dict(n=40, rules="standard", blocks=1), "shard plan"),
    ],
)
def test_other_parameters_are_refused(tmp_path, change, key) -> None:  # noqa: ANN001
    run_count(40, checkpoint_dir=tmp_path, blocks=3)
    before = (tmp_path / "manifest.json").read_bytes()
    args = dict(change)
    n = args.pop("n")
    with pytest.raises(CheckpointRefused) as info:
        run_count(n, checkpoint_dir=tmp_path, **args)
    msg = str(info.value)
    assert key in msg and "\n" not in msg
    assert isinstance(info.value, zeckenum.InputError)  # exit status 2 in the CLI
    assert (tmp_path / "manifest.json").read_bytes() == before  # left untouched


def test_foreign_manifest_is_refused(tmp_path) -> None:  # noqa: ANN001
    (tmp_path / "manifest.json").write_text('{"hello": 1}')
    with pytest.raises(CheckpointRefused):
        run_count(20, checkpoint_dir=tmp_path)


def test_write_atomic_replaces_whole_file(tmp_path) -> None:  # noqa: ANN001
    target = tmp_path / "x.bin"
    write_atomic(target, b"old contents")
    write_atomic(target, b"new")
    assert target.read_bytes() == b"new"
    assert [p.name for p in tmp_path.iterdir()] == ["x.bin"]


_CLIENT = textwrap.dedent(
    """
    import sys, time
    from zeckenum.cluster import run_count

    def stall(n, i, seen=[]):
        seen.append(i)
        if len(seen) == 2:
            print("CHECKPOINTED", flush=True)
            time.sleep(600)

    run_count(int(sys.argv[1]), checkpoint_dir=sys.argv[2], max_primes_per_block=1,
              threads=1, on_shard=stall)
    print("FINISHED", flush=True)
    """
)


def test_killed_client_resumes_only_unfinished_shards(tmp_path) -> None:  # noqa: ANN001
    n = 70
    folder = tmp_path / "ck"
    kill_after_marker(_CLIENT, str(n), str(folder))
    done = [e for e in _manifest(folder)["shards"] if e["sha256"]]
    assert len(done) == 2
    res = run_count(n, checkpoint_dir=folder, max_primes_per_block=1)
    assert res.stats["shards_reused"] == 2
    assert res.stats["shards_computed"] == res.stats["shards_total"] - 2 > 0
    assert res == zeckenum.count(n)


# ------------------------------------------------------------------ untrusted manifests
#
# A manifest is untrusted input: every edit below must end in the exact result or in ONE
# line from a ZeckenumError (exit status != 0), never a wrong number with exit 0.  The
# reference is the brute force in tests/support/bruteforce.py (explicit recursion over states,
# shares no code with zeckenum) and, for the move graph, networkx's path enumeration.

TRUST_N = 30


def _census(n: int) -> dict:
    import bruteforce

    return bruteforce.census(n)


def _assert_exact(res, n: int) -> None:  # noqa: ANN001
    ref = _census(n)
    assert res.length_counts == ref["length_counts"]
    assert res.games == ref["games"]
    assert (res.states, res.transitions) == (ref["states"], ref["transitions"])
    assert (res.shortest, res.longest) == (ref["shortest"], ref["longest"])


def test_trust_reference_agrees_with_networkx() -> None:
    # source: networkx (all_simple_paths over the explicit move graph, a DAG) against the
    # brute force used as reference by the tests below
    import bruteforce
    import networkx as nx

    n = 12
    g = bruteforce.move_graph(n)
    end = bruteforce.zeckendorf_state(n)
    paths = list(nx.all_simple_paths(g, bruteforce.start_state(n), end))
    assert len(paths) == _census(n)["games"]


def _edited(folder, edit) -> None:  # noqa: ANN001
    m = _manifest(folder)
    edit(m)
    (folder / "manifest.json").write_text(json.dumps(m))


def _one_line_refusal(call, *words: str) -> str:  # noqa: ANN001
    with pytest.raises(CheckpointRefused) as info:
        call()
    msg = str(info.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg, (w, msg)
    return msg


def _shift(m: dict, key: str, by: int) -> None:
    m["facts"][key] += by


@pytest.mark.parametrize(("edit", "field"), [
    (lambda m: _shift(m, "shortest", 1), "shortest"),
    (lambda m: _shift(m, "shortest", -1), "shortest"),
    (lambda m: _shift(m, "longest", -1), "longest"),
    (lambda m: _shift(m, "longest", 1), "longest"),
    (lambda m: _shift(m, "states", 1), "states"),
    (lambda m: _shift(m, "transitions", -3), "transitions"),
    (lambda m: _shift(m, "count_bits", -40), "count_bits"),
])
def test_edited_facts_are_refused(tmp_path, edit, field: str) -> None:  # noqa: ANN001
    run_count(TRUST_N, checkpoint_dir=tmp_path, max_primes_per_block=1)
    _edited(tmp_path, edit)
    before = (tmp_path / "manifest.json").read_bytes()
    _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=tmp_path), field)
    assert (tmp_path / "manifest.json").read_bytes() == before  # left untouched


def _check_prime_among_primes(m: dict) -> None:
    plan = m["plan"]
    plan["primes"] = [plan["check_prime"], *plan["primes"][1:]]
    plan["check_prime"] = plan["primes"][0]
    plan["blocks"] = [[p] for p in plan["primes"]] + [[plan["check_prime"]]]
    m["primes"], m["check_prime"] = plan["primes"], plan["check_prime"]


def _drop_a_prime(m: dict) -> None:
    plan = m["plan"]
    plan["primes"] = plan["primes"][1:]
    plan["blocks"] = plan["blocks"][1:]
    m["primes"] = plan["primes"]
    m["shards"] = m["shards"][1:]


def _shuffle_blocks(m: dict) -> None:
    plan = m["plan"]
    plan["blocks"] = [plan["blocks"][1], plan["blocks"][0], *plan["blocks"][2:]]


def _prime_twice(m: dict) -> None:
    plan = m["plan"]
    plan["blocks"] = [plan["blocks"][0], plan["blocks"][0], *plan["blocks"][2:]]


@pytest.mark.parametrize("edit", [_check_prime_among_primes, _drop_a_prime, _shuffle_blocks,
                                  _prime_twice])
def test_edited_plan_is_refused(tmp_path, edit) -> None:  # noqa: ANN001
    run_count(TRUST_N, checkpoint_dir=tmp_path, max_primes_per_block=1)
    _edited(tmp_path, edit)
    _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=tmp_path), "prime")


def test_earlier_explicit_blocking_is_accepted(tmp_path) -> None:  # noqa: ANN001
    # a valid split of exactly the recomputed primes, asked for by the user earlier
    run_count(TRUST_N, checkpoint_dir=tmp_path, blocks=2)
    res = run_count(TRUST_N, checkpoint_dir=tmp_path)
    assert res.stats["shards_reused"] == 2
    _assert_exact(res, TRUST_N)


def test_edited_rule_text_is_refused(tmp_path) -> None:  # noqa: ANN001
    run_count(TRUST_N, checkpoint_dir=tmp_path, blocks=2)
    m = _manifest(tmp_path)
    assert "rules_text" in m
    from zeckenum.rules.rulefile import rules_from_text

    assert rules_from_text(m["rules_text"]).content_hash() == zeckenum.STANDARD.content_hash()
    _edited(tmp_path, lambda m: m.update(rules_text=m["rules_text"].replace(
        '"combine-ones"', '"merge-ones"')))
    _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=tmp_path), "rule")
    _edited(tmp_path, lambda m: m.pop("rules_text"))
    _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=tmp_path), "rule")


def _copy_shard_out(tmp_path, folder):  # noqa: ANN001
    outside = tmp_path / "outside.npy"
    outside.write_bytes((folder / "shard-0001.npy").read_bytes())
    return outside


@pytest.mark.parametrize("name", ["../outside.npy", "../../outside.npy", "ABSOLUTE",
                                  "/dev/zero", "sub/shard-0001.npy", "shard-0002.npy"])
def test_shard_names_outside_the_directory_are_refused(tmp_path, name: str) -> None:  # noqa: ANN001
    folder = tmp_path / "a" / "ck"
    run_count(TRUST_N, checkpoint_dir=folder, max_primes_per_block=1)
    outside = _copy_shard_out(tmp_path, folder)
    (tmp_path / "a" / "outside.npy").write_bytes(outside.read_bytes())
    name = str(outside) if name == "ABSOLUTE" else name
    _edited(folder, lambda m: m["shards"][1].update(file=name))
    _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=folder), "shard")


def _no_hang(call, fifo=None, seconds: float = 120.0):  # noqa: ANN001
    """call() in a thread; a call still blocked after `seconds` (on a FIFO) fails the test
    after the FIFO is opened for writing, which releases the blocked reader."""
    import threading

    box: dict = {}

    def target() -> None:
        try:
            box["value"] = call()
        except BaseException as exc:  # noqa: BLE001
            box["error"] = exc

    t = threading.Thread(target=target, daemon=True)
    t.start()
    t.join(seconds)
    if t.is_alive():
        if fifo is not None:
            import os

            fd = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
            os.close(fd)
        t.join(30)
        pytest.fail("the run hung on a FIFO")
    if "error" in box:
        raise box["error"]
    return box["value"]


@pytest.mark.parametrize("kind", ["fifo", "symlink-out", "symlink-dev-zero", "directory"])
def test_non_regular_shard_files_are_never_read(tmp_path, capsys, kind: str) -> None:  # noqa: ANN001
    import os

    folder = tmp_path / "ck"
    run_count(TRUST_N, checkpoint_dir=folder, max_primes_per_block=1)
    outside = _copy_shard_out(tmp_path, folder)
    victim = folder / "shard-0001.npy"
    victim.unlink()
    if kind == "fifo":
        os.mkfifo(victim)
    elif kind == "symlink-out":
        victim.symlink_to(outside)  # a valid shard, but outside the directory
    elif kind == "symlink-dev-zero":
        victim.symlink_to("/dev/zero")
    else:
        victim.mkdir()
    capsys.readouterr()
    if kind == "directory":  # can be neither read nor replaced: refused up front
        _one_line_refusal(lambda: run_count(TRUST_N, checkpoint_dir=folder), "directory")
        return
    # chosen behaviour: the shard is reported with one warning line and recomputed (its
    # name in the manifest is the canonical one; only the file on disk is wrong)
    res = _no_hang(lambda: run_count(TRUST_N, checkpoint_dir=folder),
                   fifo=victim if kind == "fifo" else None)
    assert res.stats["shards_reused"] == res.stats["shards_total"] - 1  # not the victim
    assert res.stats["shards_rejected"] == 1
    warnings = [w for w in capsys.readouterr().err.splitlines() if "warning" in w]
    assert len(warnings) == 1 and "shard-0001.npy" in warnings[0]
    _assert_exact(res, TRUST_N)


@pytest.mark.parametrize("kind", ["fifo", "symlink-dev-zero", "directory", "huge",
                                  "list", "bad-types", "huge-number", "deep"])
def test_bad_manifest_files_are_refused(tmp_path, kind: str) -> None:  # noqa: ANN001
    import os

    folder = tmp_path / "ck"
    run_count(TRUST_N, checkpoint_dir=folder, blocks=2)
    path = folder / "manifest.json"
    m = _manifest(folder)
    path.unlink()
    if kind == "fifo":
        os.mkfifo(path)
    elif kind == "symlink-dev-zero":
        path.symlink_to("/dev/zero")
    elif kind == "directory":
        path.mkdir()
    elif kind == "huge":
        path.write_text(json.dumps(m) + " " * (65 << 20))
    elif kind == "list":
        path.write_text(json.dumps([m]))
    elif kind == "bad-types":
        m["shards"] = {"0": m["shards"][0]}
        m["facts"]["n"] = "30"
        path.write_text(json.dumps(m))
    elif kind == "huge-number":
        m["facts"]["longest"] = 10**4000
        path.write_text(json.dumps(m).replace(str(10**4000), "9" * 5000))
    else:
        path.write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(CheckpointRefused) as info:
        _no_hang(lambda: run_count(TRUST_N, checkpoint_dir=folder),
                 fifo=path if kind == "fifo" else None)
    assert "\n" not in str(info.value)


def test_unwritable_checkpoint_directories_are_refused_before_the_first_sweep(
    tmp_path, monkeypatch,  # noqa: ANN001
) -> None:
    import os

    from zeckenum.cluster import count_tasks as tasks
    from zeckenum.errors import OutputError

    def no_sweep(*args, **kwargs):  # noqa: ANN002, ANN003
        raise AssertionError("the first sweep ran before the directory was checked")

    tasks.clear_cache()
    monkeypatch.setattr(tasks, "windows_with_facts", no_sweep)
    blocker = tmp_path / "a-file"
    blocker.write_text("in the way")
    cases = [blocker, blocker / "sub" / "ck"]
    if os.geteuid() != 0:  # root writes into read-only folders
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        cases += [ro, ro / "sub"]
    for folder in cases:
        with pytest.raises(OutputError) as info:
            run_count(TRUST_N + 1, checkpoint_dir=folder)
        assert info.value.exit_code == 6 and "\n" not in str(info.value)


def test_disk_full_mid_run_keeps_written_shards(tmp_path, monkeypatch) -> None:  # noqa: ANN001
    import errno

    from zeckenum import safeio
    from zeckenum.errors import OutputError

    real_fsync = safeio.os.fsync
    calls = {"n": 0}

    def fsync(fd: int) -> None:
        calls["n"] += 1
        if calls["n"] > 6:  # file + folder: manifest, one shard, manifest; then disk full
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)

    monkeypatch.setattr(safeio.os, "fsync", fsync)
    with pytest.raises(OutputError) as info:
        run_count(TRUST_N, checkpoint_dir=tmp_path, max_primes_per_block=1, threads=1)
    assert "\n" not in str(info.value)
    monkeypatch.setattr(safeio.os, "fsync", real_fsync)
    assert not list(tmp_path.glob(".*.tmp"))
    kept = [e for e in _manifest(tmp_path)["shards"] if e["sha256"]]
    assert len(kept) >= 1
    res = run_count(TRUST_N, checkpoint_dir=tmp_path)
    assert res.stats["shards_reused"] == len(kept)
    _assert_exact(res, TRUST_N)


# A battery of generated manifest mutations (hypothesis): each must end in the exact result
# (brute force, tests/support/bruteforce.py) or a ZeckenumError of one line -- never another
# exception, never a wrong number.

def _pristine(kind: str):  # noqa: ANN202
    """A finished checkpoint directory (made once per session) and its manifest."""
    import tempfile
    from pathlib import Path

    cache = _pristine.__dict__.setdefault("made", {})
    if kind not in cache:
        folder = Path(tempfile.mkdtemp(prefix=f"zeckenum-pristine-{kind}-"))
        if kind == "count":
            run_count(TRUST_N, checkpoint_dir=folder, max_primes_per_block=1)
        else:
            from zeckenum.cluster import run_random

            run_random(14, "standard", 3, "moves", checkpoint_dir=folder,
                       max_primes_per_block=1)
        cache[kind] = (folder, _manifest(folder))
    return cache[kind]


def _run_mutated(kind: str, data):  # noqa: ANN001, ANN202
    import shutil
    import tempfile
    from pathlib import Path

    folder, manifest = _pristine(kind)
    mutated = draw_mutation(data, manifest)
    work = Path(tempfile.mkdtemp(prefix="zeckenum-mutated-"))
    try:
        target = work / "ck"
        shutil.copytree(folder, target)
        (target / "manifest.json").write_text(json.dumps(mutated))
        if kind == "count":
            call = lambda: run_count(TRUST_N, checkpoint_dir=target, threads=1)  # noqa: E731
        else:
            from zeckenum.cluster import run_random

            call = lambda: run_random(14, "standard", 3, "moves",  # noqa: E731
                                      checkpoint_dir=target, threads=1)
        try:
            res = call()
        except zeckenum.ZeckenumError as exc:
            assert "\n" not in str(exc)
            return None
        return res
    finally:
        shutil.rmtree(work, ignore_errors=True)


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_mutated_count_manifests_give_the_exact_result_or_one_line(data) -> None:  # noqa: ANN001
    res = _run_mutated("count", data)
    if res is not None:
        _assert_exact(res, TRUST_N)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_mutated_random_manifests_give_the_exact_result_or_one_line(data) -> None:  # noqa: ANN001
    # source: fractions.Fraction brute force (tests/support/fraction_bruteforce.py)
    from fraction_bruteforce import length_law, win_law

    res = _run_mutated("random", data)
    if res is not None:
        ref = length_law(14, "moves")
        assert res.length_probability == ref
        assert res.win_probability == win_law(ref, 3)


def test_cluster_resume_recomputes_facts_on_workers(tmp_path) -> None:  # noqa: ANN001
    # one small Dask cluster on 127.0.0.1 (closed by open_pool): the resume's first sweep
    # runs on the workers and its answer is compared with the manifest before any shard
    # is reused; reference: the brute force of tests/support/bruteforce.py
    from zeckenum.cluster.backend import DaskPool, open_pool
    from zeckenum.cluster.run import count_on_pool

    with open_pool(2, None, None, warm=("count",)) as pool:
        assert isinstance(pool, DaskPool)
        first = count_on_pool([TRUST_N], "standard", pool, checkpoint_dir=tmp_path,
                              max_primes_per_block=1)[TRUST_N]
        _assert_exact(first, TRUST_N)
        _edited(tmp_path, lambda m: _shift(m, "longest", -1))
        _one_line_refusal(lambda: count_on_pool([TRUST_N], "standard", pool,
                                                checkpoint_dir=tmp_path), "longest")
        _edited(tmp_path, lambda m: _shift(m, "longest", 1))
        again = count_on_pool([TRUST_N], "standard", pool, checkpoint_dir=tmp_path)[TRUST_N]
    assert again.stats["shards_reused"] == again.stats["shards_total"] == 3
    assert again.stats["backend"] == "dask"
    _assert_exact(again, TRUST_N)
