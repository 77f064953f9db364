"""Sharded exact random play (threads and real Dask clusters on 127.0.0.1) and its
checkpoints.

References: tests/support/fraction_bruteforce.py (plain Python, fractions.Fraction, shares no code
with zeckenum), and `random_play` run in-process, which tests/randomplay/test_random.py checks
against the same Fraction brute force; the sharded paths must agree with it exactly,
field by field.  Clusters are started by the tests themselves through `open_pool` (as in
tests/cluster/test_cluster.py): 127.0.0.1, free ports, closed on any exit.  Checkpoint checksums
are recomputed with hashlib (reference library).
"""

from __future__ import annotations

import hashlib
import json
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))
from fraction_bruteforce import length_law, win_law  # noqa: E402
from killed_client import busy_worker_killer  # noqa: E402
from zeckenum.cli.randomplay import random_command  # noqa: E402
from zeckenum.cluster import run_count, run_random  # noqa: E402
from zeckenum.cluster.backend import open_pool  # noqa: E402
from zeckenum.cluster.errors import CheckpointRefused  # noqa: E402
from zeckenum.cluster.run import random_on_pool  # noqa: E402
from zeckenum.errors import InputError  # noqa: E402
from zeckenum.randomplay.exact import random_play  # noqa: E402


def _manifest(folder: Path) -> dict:
    return json.loads((folder / "manifest.json").read_text())


# Source: fractions.Fraction brute force (memoised over states), independent of the engine;
# every prime in its own shard, both models, the law and the winners-only path.
@pytest.mark.parametrize("model", ["moves", "pairs"])
def test_sharded_random_play_matches_fraction_bruteforce(model: str) -> None:
    n, players = 14, 3
    ref = length_law(n, model)
    law = run_random(n, "standard", players, model, max_primes_per_block=1)
    assert law.stats["shards_total"] == len(law.primes) + 1
    assert law.length_probability == ref
    assert law.win_probability == win_law(ref, players)
    assert all(law.denominator % p.denominator == 0 for p in ref.values())
    wins = run_random(n, "standard", players, model, winners_only=True,
                      max_primes_per_block=1)
    assert wins.length_probability is None
    assert wins.win_probability == win_law(ref, players)


# Source: in-process random_play (itself checked against fractions.Fraction brute force in
# tests/randomplay/test_random.py); several blocks forced at small n.
@pytest.mark.parametrize("n,model,players,winners_only,split", [
    (20, "moves", 2, False, dict(max_primes_per_block=1)),
    (20, "pairs", 3, True, dict(blocks=3)),
    (33, "pairs", 2, False, dict(blocks=5)),
    (40, "moves", 4, True, dict(max_primes_per_block=2)),
    (40, "moves", 3, False, dict(blocks=4)),
])
def test_in_process_shards_equal_random_play(n: int, model: str, players: int,
                                             winners_only: bool, split: dict) -> None:
    ref = random_play(n, "standard", players, model, winners_only=winners_only)
    got = run_random(n, "standard", players, model, winners_only=winners_only, **split)
    assert got.stats["shards_total"] > 1
    assert got.stats["shards_computed"] == got.stats["shards_total"]
    assert got == ref


def test_other_rules_and_prime_offset_equal_random_play() -> None:
    # a prime set disjoint from the default one rebuilds the same fractions (common
    # practice: CRT over any primes whose product exceeds the denominator)
    ref = random_play(18, "tribonacci", 3, "pairs", prime_offset=40)
    got = run_random(18, "tribonacci", 3, "pairs", prime_offset=40, max_primes_per_block=1)
    assert got == ref
    assert not set(got.primes) & set(random_play(18, "tribonacci", 3, "pairs").primes)


def _cluster_case(workers: int) -> None:
    cases = [
        (30, "pairs", 2, False, dict(blocks=3)),
        (40, "moves", 3, True, dict(max_primes_per_block=1)),
        (26, "moves", 2, False, dict(max_primes_per_block=1)),
    ]
    with open_pool(workers=workers, warm=("random",)) as pool:
        assert len(pool.workers) == workers
        got = [random_on_pool(n, "standard", pool, players, model, winners_only=wo, **split)
               for n, model, players, wo, split in cases]
    for res, (n, model, players, wo, _split) in zip(got, cases, strict=True):
        assert res.stats["backend"] == "dask"
        assert res.stats["workers"] == workers
        assert res.stats["shards_total"] >= 3
        assert res == random_play(n, "standard", players, model, winners_only=wo), n


@pytest.mark.parametrize("workers", [1, 2, 3])
def test_dask_workers_equal_in_process(workers: int) -> None:
    _cluster_case(workers)


def test_killing_a_worker_mid_run_gives_the_same_result() -> None:
    n = 60  # the length law at n = 60 needs 21 primes below 2**50 (with the check): 21 shards
    with open_pool(workers=2, warm=("random",)) as pool:
        kill_busy_worker, killed = busy_worker_killer(pool.client)
        res = random_on_pool(n, "standard", pool, max_primes_per_block=1,
                             on_shard=kill_busy_worker)
    assert killed, "no worker was busy after the first shard: the test did not kill one"
    assert res.stats["shards_total"] > 10
    assert res == random_play(n)


# Source: common practice for checkpoints (a rerun reuses every verified shard; the stored
# checksums are recomputed with hashlib).
@pytest.mark.parametrize("winners_only", [False, True])
def test_rerun_reuses_every_shard(tmp_path: Path, winners_only: bool) -> None:
    first = run_random(33, "standard", 3, "pairs", winners_only=winners_only,
                       checkpoint_dir=tmp_path, blocks=4)
    m = _manifest(tmp_path)
    assert m["parameters"]["kind"] == "random"
    assert m["parameters"]["model"] == "pairs" and m["parameters"]["players"] == 3
    assert m["parameters"]["winners_only"] is winners_only
    assert [int(p) for p in m["primes"]] == list(first.primes)
    assert len(m["shards"]) == 4
    for entry in m["shards"]:
        data = (tmp_path / entry["file"]).read_bytes()
        assert hashlib.sha256(data).hexdigest() == entry["sha256"]
    again = run_random(33, "standard", 3, "pairs", winners_only=winners_only,
                       checkpoint_dir=tmp_path)  # no explicit plan: the stored one
    assert again.stats["shards_reused"] == 4
    assert again.stats["shards_computed"] == 0
    assert again == first == random_play(33, "standard", 3, "pairs", winners_only=winners_only)


def test_corrupted_shards_are_detected_and_recomputed(tmp_path: Path, capsys) -> None:  # noqa: ANN001
    n = 40
    ref = random_play(n, "standard", 2, "moves")
    run_random(n, checkpoint_dir=tmp_path, max_primes_per_block=1)
    files = [tmp_path / e["file"] for e in _manifest(tmp_path)["shards"]]
    assert len(files) >= 4
    files[0].write_bytes(files[0].read_bytes()[:-9])  # truncated
    arr = np.load(files[1])
    arr[0, -1] ^= 1  # one residue changed, still a valid .npy file
    np.save(files[1], arr)
    capsys.readouterr()
    res = run_random(n, checkpoint_dir=tmp_path, max_primes_per_block=1)
    err = capsys.readouterr().err
    warnings = [line for line in err.splitlines() if line.startswith("zeckenum: warning:")]
    assert len(warnings) == 2
    assert files[0].name in warnings[0] and files[1].name in warnings[1]
    assert res.stats["shards_rejected"] == 2
    assert res.stats["shards_computed"] == 2
    assert res.stats["shards_reused"] == len(files) - 2
    assert res == ref
    again = run_random(n, checkpoint_dir=tmp_path)
    assert again.stats["shards_reused"] == len(files)
    assert again == ref


def test_shard_of_the_wrong_width_is_recomputed(tmp_path: Path, capsys) -> None:  # noqa: ANN001
    # a shard with a valid checksum but one column too many: the shape is checked against
    # the kind's column count (players for the winners-only path), not a count's
    n, players = 30, 3
    run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path, blocks=2)
    m = _manifest(tmp_path)
    path = tmp_path / m["shards"][0]["file"]
    arr = np.load(path)
    assert arr.shape[1] == players
    np.save(path, np.concatenate([arr, arr[:, :1]], axis=1))
    m["shards"][0]["sha256"] = hashlib.sha256(path.read_bytes()).hexdigest()
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    capsys.readouterr()
    res = run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path)
    assert "has shape" in capsys.readouterr().err
    assert res.stats["shards_rejected"] == 1 and res.stats["shards_reused"] == 1
    assert res == random_play(n, "standard", players, winners_only=True)


def _refused(call, folder: Path, key: str) -> None:  # noqa: ANN001
    before = (folder / "manifest.json").read_bytes()
    with pytest.raises(CheckpointRefused) as info:
        call()
    msg = str(info.value)
    assert key in msg and "\n" not in msg
    assert isinstance(info.value, InputError)  # exit status 2 in the CLI
    assert (folder / "manifest.json").read_bytes() == before  # left untouched


def test_count_and_random_checkpoints_refuse_each_other(tmp_path: Path) -> None:
    counted, played = tmp_path / "count", tmp_path / "random"
    run_count(24, checkpoint_dir=counted, blocks=2)
    run_random(24, checkpoint_dir=played, blocks=2)
    _refused(lambda: run_random(24, checkpoint_dir=counted), counted, "kind='count'")
    _refused(lambda: run_count(24, checkpoint_dir=played), played, "kind='random'")
    # and within random play: the winners-only path, another model, other players
    _refused(lambda: run_random(24, winners_only=True, checkpoint_dir=played), played,
             "winners_only")
    _refused(lambda: run_random(24, model="pairs", checkpoint_dir=played), played, "model")
    _refused(lambda: run_random(24, players=3, checkpoint_dir=played), played, "players")


def test_count_manifest_without_kind_is_still_a_count(tmp_path: Path) -> None:
    # manifests written before kinds existed hold no "kind": they are counts
    first = run_count(30, checkpoint_dir=tmp_path, blocks=2)
    m = _manifest(tmp_path)
    del m["parameters"]["kind"]
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    _refused(lambda: run_random(30, checkpoint_dir=tmp_path), tmp_path, "kind='count'")
    again = run_count(30, checkpoint_dir=tmp_path)
    assert again.stats["shards_reused"] == 2
    assert again == first


def test_bad_input_is_refused() -> None:
    with pytest.raises(InputError):
        run_random(10, players=1)
    with pytest.raises(InputError):
        run_random(10, model="tokens")
    with pytest.raises(InputError):
        run_random(0)
    with pytest.raises(InputError):
        run_random(10, prime_offset=-1)


def _probabilities(output: str) -> tuple[dict, dict]:
    d = json.loads(output)
    return ({k: Fraction(v) for k, v in d["length_probability"].items()},
            {k: Fraction(v) for k, v in d["win_probability"].items()})


# Source: the in-process command (checked against the Fraction brute force in
# tests/randomplay/test_random.py) and the brute force itself.
def test_cli_workers_json_equals_in_process(tmp_path: Path) -> None:
    runner = CliRunner()
    local = runner.invoke(random_command, ["22", "--players", "3", "--json"])
    assert local.exit_code == 0, local.output
    sharded = runner.invoke(random_command, ["22", "--players", "3", "--json",
                                             "--workers", "2"])
    assert sharded.exit_code == 0, sharded.output
    laws, wins = _probabilities(sharded.output)
    assert (laws, wins) == _probabilities(local.output)
    assert {int(k): v for k, v in laws.items()} == length_law(22, "moves")
    assert json.loads(sharded.output)["stats"]["backend"] == "dask"
    folder = tmp_path / "ck"
    checkpointed = runner.invoke(random_command, ["22", "--players", "3", "--json",
                                             "--checkpoint", str(folder)])
    assert checkpointed.exit_code == 0, checkpointed.output
    assert _probabilities(checkpointed.output) == (laws, wins)


def test_cli_refuses_sharding_outside_the_exact_mode(tmp_path: Path) -> None:
    runner = CliRunner()
    for args in (["12", "--float", "--workers", "2"],
                 ["12", "--simulate", "100", "--checkpoint", str(tmp_path / "x")],
                 ["--range", "3", "5", "--scheduler", "tcp://127.0.0.1:1"],
                 ["12", "--float", "--progress"]):
        out = runner.invoke(random_command, args)
        assert out.exit_code == 2, args
        lines = [line for line in out.output.splitlines() if line.strip()]
        assert len(lines) == 1 and "exact mode only" in lines[0], args
        assert "Traceback" not in out.output
    assert not (tmp_path / "x").exists()


# Untrusted manifests of random play: the kind parameters and the first sweep's facts are
# recomputed and compared, so an edit ends in one line, never a wrong probability.
# Source: fractions.Fraction brute force (tests/support/fraction_bruteforce.py).
@pytest.mark.parametrize(("where", "key", "value"), [
    ("facts", "players", 2),
    ("facts", "players", 4),
    ("facts", "winners_only", False),
    ("facts", "model", "pairs"),
    ("facts", "denominator", None),
    ("facts", "columns", 2),
    ("facts", "longest", None),
    ("parameters", "players", 2),
    ("parameters", "players", 3.0),
    ("parameters", "winners_only", 1),
])
def test_edited_random_manifest_is_refused(tmp_path: Path, where: str, key: str,
                                           value: object) -> None:
    n, players = 14, 3
    run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path, blocks=2)
    m = _manifest(tmp_path)
    if value is None:  # a plausible neighbour of the true value
        old = m[where][key]
        value = str(int(old) * 3) if isinstance(old, str) else old + 1
    m[where][key] = value
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    try:
        res = run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path)
    except InputError as exc:
        assert isinstance(exc, CheckpointRefused) and "\n" not in str(exc)
        assert key in str(exc)
        return
    pytest.fail(f"an edited {where}.{key} was accepted: {res.win_probability}")


def test_random_resume_with_true_manifest_is_exact(tmp_path: Path) -> None:
    n, players = 14, 3
    run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path, blocks=2)
    res = run_random(n, "standard", players, winners_only=True, checkpoint_dir=tmp_path)
    assert res.stats["shards_reused"] == 2
    assert res.win_probability == win_law(length_law(n, "moves"), players)
