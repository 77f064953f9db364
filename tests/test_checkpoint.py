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
from killed_client import kill_after_marker
from zeckenum.cluster import run_count
from zeckenum.cluster.checkpoint import write_atomic
from zeckenum.cluster.errors import CheckpointRefused


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
