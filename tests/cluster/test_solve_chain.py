"""Optimal play of one n as a chain of level-range shards: in-process, on real Dask clusters
on 127.0.0.1, and through checkpoints.

References: the memoised minimax in tests/support/minimax.py (plain Python, shares no code with
zeckenum), the rule-set brute force in tests/support/rules_bruteforce.py, and
`zeckenum.optimal.solve.solve`
run in one piece (which tests/optimal/test_solve.py checks against both): the chain must agree with
it on every field but the timing.  Clusters are started by the tests on 127.0.0.1 with free
ports and closed on every exit (`open_pool` / `run_solve` close them in `finally`).
"""

from __future__ import annotations

import json
import os
import signal
import textwrap

import minimax
import pytest
import rules_bruteforce as bf
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from killed_client import kill_after_marker
from zeckenum.cli.group import main
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.cluster.run import run_count
from zeckenum.cluster.solve_chain import plan_ranges, run_solve
from zeckenum.core.statespace import build_space
from zeckenum.optimal.solve import solve
from zeckenum.rules.catalogue import get_rules

FIELDS = ("winner", "p_positions", "states", "forced_win", "start_moves", "moves_examined")


def same(a, b) -> bool:  # noqa: ANN001
    return all(getattr(a, f) == getattr(b, f) for f in FIELDS)


@pytest.mark.parametrize("n", range(1, 15))
def test_chain_matches_minimax(n: int) -> None:
    # source: tests/support/minimax.py (memoised normal-play minimax over explicit states)
    res = run_solve(n, shards=4)
    assert (res.winner == 1) == minimax.mover_wins(minimax.start_state(n))
    assert res.states == len(minimax.reachable(n))


@pytest.mark.parametrize(("rules", "n", "players"), [
    ("standard", 45, 2), ("standard", 24, 3), ("standard", 18, 4), ("reversed", 26, 2),
    ("tribonacci", 30, 2), ("twos", 14, 3),
])
@pytest.mark.parametrize("shards", [1, 2, 7])
def test_chain_equals_one_sweep(rules: str, n: int, players: int, shards: int) -> None:
    # reference: the one-piece solve (tested against minimax and the rule-set brute force)
    res = run_solve(n, rules, players, shards=shards)
    assert res.stats["shards_total"] == len(plan_ranges(
        build_space(get_rules(rules).instantiate(n)), shards))
    assert same(res, solve(n, rules, players))


def test_chain_on_a_variant_matches_bruteforce() -> None:
    # source: tests/support/rules_bruteforce.py
    for n in range(1, 11):
        res = run_solve(n, "reversed", shards=3)
        assert (res.winner == 1) == bf.Game(bf.REVERSED, n).first_player_wins(), n


def test_plan_covers_every_level_once() -> None:
    # common practice: consecutive ranges from 0 to the start's level, none empty
    space = build_space(get_rules("standard").instantiate(120))
    for shards in (1, 3, 10, 500):
        ranges = plan_ranges(space, shards)
        assert ranges[0][0] == 0 and ranges[-1][1] == space.spec.start_level
        assert all(b + 1 == c for (_, b), (c, _) in zip(ranges, ranges[1:], strict=False))
        assert all(any(space.layer_size(lv) for lv in range(lo, hi + 1)) for lo, hi in ranges)
        assert len(ranges) <= shards


@pytest.mark.parametrize("workers", [1, 2, pytest.param(3, marks=pytest.mark.slow)])
def test_chain_on_dask_equals_in_process(workers: int) -> None:
    res = run_solve(50, workers=workers, shards=5)
    assert res.stats["backend"] == "dask"
    assert res.stats["shards_computed"] == 5
    assert same(res, solve(50))


def test_rerun_reuses_every_shard(tmp_path) -> None:  # noqa: ANN001
    first = run_solve(40, checkpoint_dir=tmp_path, shards=4)
    again = run_solve(40, checkpoint_dir=tmp_path)
    assert again.stats["shards_reused"] == 4 and again.stats["shards_computed"] == 0
    assert same(first, again) and same(again, solve(40))
    manifest = json.loads((tmp_path / "manifest.json").read_text())
    assert manifest["parameters"]["kind"] == "solve"
    assert all(len(e["sha256"]) == 64 for e in manifest["shards"])


@pytest.mark.parametrize("damage", ["truncate", "flip", "swap", "delete"])
def test_damaged_shard_is_recomputed(tmp_path, capsys, damage: str) -> None:  # noqa: ANN001
    run_solve(44, checkpoint_dir=tmp_path, shards=4)
    files = sorted(tmp_path.glob("levels-*.npz"))
    victim = files[1]
    data = victim.read_bytes()
    if damage == "truncate":
        victim.write_bytes(data[: len(data) // 2])
    elif damage == "flip":
        victim.write_bytes(data[:-40] + bytes([data[-40] ^ 1]) + data[-39:])
    elif damage == "swap":
        victim.write_bytes(files[2].read_bytes())
    else:
        victim.unlink()
    capsys.readouterr()
    res = run_solve(44, checkpoint_dir=tmp_path)
    assert "recomputing it" in capsys.readouterr().err
    assert res.stats["shards_rejected"] == 1
    assert res.stats["shards_computed"] == 1 and res.stats["shards_reused"] == 3
    assert same(res, solve(44))


@pytest.mark.parametrize(("args", "key"), [
    ({"n": 45}, "n="), ({"n": 44, "players": 3}, "players="),
    ({"n": 44, "rules": "twos"}, "rules="),
])
def test_other_parameters_are_refused(tmp_path, args: dict, key: str) -> None:  # noqa: ANN001
    run_solve(44, checkpoint_dir=tmp_path, shards=2)
    before = (tmp_path / "manifest.json").read_bytes()
    args = dict(args)
    n = args.pop("n")
    with pytest.raises(CheckpointRefused, match=key):
        run_solve(n, checkpoint_dir=tmp_path, **args)
    assert (tmp_path / "manifest.json").read_bytes() == before


def test_count_and_solve_checkpoints_refuse_each_other(tmp_path) -> None:  # noqa: ANN001
    run_solve(30, checkpoint_dir=tmp_path / "s", shards=2)
    run_count(30, checkpoint_dir=tmp_path / "c", blocks=2)
    with pytest.raises(CheckpointRefused, match="not a checkpoint of a chained solve"):
        run_solve(30, checkpoint_dir=tmp_path / "c")
    with pytest.raises(CheckpointRefused):
        run_count(30, checkpoint_dir=tmp_path / "s")


_CLIENT = textwrap.dedent(
    """
    import sys, time
    from zeckenum.cluster.solve_chain import run_solve

    def stall(i, seen=[]):
        seen.append(i)
        if len(seen) == 3:
            print("CHECKPOINTED", flush=True)
            time.sleep(600)

    run_solve(int(sys.argv[1]), checkpoint_dir=sys.argv[2], shards=6, on_shard=stall)
    print("FINISHED", flush=True)
    """
)


def test_killed_client_resumes_only_unfinished_shards(tmp_path) -> None:  # noqa: ANN001
    n = 60
    folder = tmp_path / "ck"
    kill_after_marker(_CLIENT, str(n), str(folder))
    res = run_solve(n, checkpoint_dir=folder)
    assert res.stats["shards_reused"] == 3
    assert res.stats["shards_computed"] == res.stats["shards_total"] - 3 == 3
    assert same(res, solve(n))


def test_killing_a_worker_mid_chain_gives_the_same_result() -> None:
    from zeckenum.cluster.backend import close_cluster, start_local_cluster

    cluster = start_local_cluster(2)
    killed: list[int] = []
    try:
        from distributed import Client

        with Client(cluster.scheduler_address, set_as_default=False) as client:
            client.wait_for_workers(2, timeout=120)
            pids = list(client.run(os.getpid).values())

        def kill_all(i: int) -> None:
            # every worker process dies between two shards; the nannies start new ones
            if i == 1 and not killed:
                for pid in pids:
                    os.kill(pid, signal.SIGKILL)
                    killed.append(pid)

        res = run_solve(70, scheduler=cluster.scheduler_address, shards=6, on_shard=kill_all)
    finally:
        close_cluster(cluster)
    assert len(killed) == 2
    assert res.stats["shards_computed"] == 6
    assert same(res, solve(70))


def test_cli_solve_chain_equals_in_process(tmp_path) -> None:  # noqa: ANN001
    runner = CliRunner()
    one = runner.invoke(main, ["solve", "48", "--json"])
    chained = runner.invoke(main, ["solve", "48", "--json", "--shards", "3",
                                   "--checkpoint", str(tmp_path / "ck")])
    assert one.exit_code == 0 and chained.exit_code == 0, chained.output
    a, b = json.loads(one.output), json.loads(chained.output)
    for key in ("winner", "p_positions", "states", "start_moves"):
        assert a[key] == b[key], key
    bad = runner.invoke(main, ["solve", "20", "--strategy", str(tmp_path / "s"), "--shards", "2"])
    assert bad.exit_code == 2 and "does not take" in bad.output


# Untrusted chain manifests: the ranges must be exactly the ones `plan_ranges` recomputes,
# and every stored boundary is checked before use.  An edit ends in the exact result or
# one line (reference: tests/support/minimax.py and the one-piece solve).
def _blank_all(m: dict) -> None:
    for s in m["shards"]:
        s["sha256"] = None


def _gap(m: dict) -> None:
    a, b = m["ranges"][1]
    m["ranges"][1] = [a, b - 1]  # level b is in no range


def _overlap(m: dict) -> None:
    c, d = m["ranges"][2]
    m["ranges"][2] = [c - 1, d]  # level c - 1 is in two ranges


def _merged(m: dict) -> None:
    (a, _), (_, d) = m["ranges"][1], m["ranges"][2]
    m["ranges"][1:3] = [[a, d]]
    m["shards"] = m["shards"][:-1]


def _short_top(m: dict) -> None:
    m["ranges"][-1][1] -= 1  # the start's level is never swept


def _wrong_shards(m: dict) -> None:
    m["shards_requested"] = 2


@pytest.mark.parametrize("edit", [_gap, _overlap, _merged, _short_top, _wrong_shards])
@pytest.mark.parametrize("blank", [False, True])
def test_edited_ranges_are_refused(tmp_path, edit, blank: bool) -> None:  # noqa: ANN001
    n = 14
    run_solve(n, checkpoint_dir=tmp_path, shards=4)
    m = json.loads((tmp_path / "manifest.json").read_text())
    assert len(m["ranges"]) == 4
    edit(m)
    if blank:
        _blank_all(m)  # every range recomputed from the (edited) ranges
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    try:
        res = run_solve(n, checkpoint_dir=tmp_path)
    except CheckpointRefused as exc:
        assert "\n" not in str(exc)
        return
    # accepted only when it still gives the exact answer
    assert (res.winner == 1) == minimax.mover_wins(minimax.start_state(n))
    assert res.states == len(minimax.reachable(n))
    assert same(res, solve(n))
    pytest.fail("an edited range list was accepted")


@pytest.mark.parametrize("damage", ["dtype", "shape", "levels", "stats"])
def test_boundary_of_the_wrong_shape_is_recomputed(tmp_path, capsys, damage: str) -> None:  # noqa: ANN001
    # a boundary file with a valid checksum but the wrong contents is never used
    import hashlib

    import numpy as np
    from zeckenum.cluster.solve_chain import boundary_bytes, read_boundary

    n = 40
    run_solve(n, checkpoint_dir=tmp_path, shards=4)
    m = json.loads((tmp_path / "manifest.json").read_text())
    path = tmp_path / m["shards"][1]["file"]
    boundary, stats = read_boundary(path.read_bytes())
    top = max(boundary)
    if damage == "dtype":
        boundary[top] = boundary[top].astype(np.uint16)
    elif damage == "shape":
        boundary[top] = boundary[top][:-1]
    elif damage == "levels":
        boundary[top + 1] = boundary[top]
    else:
        stats["layers"] += 1
    data = boundary_bytes(boundary, stats)
    path.write_bytes(data)
    m["shards"][1]["sha256"] = hashlib.sha256(data).hexdigest()
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    capsys.readouterr()
    res = run_solve(n, checkpoint_dir=tmp_path)
    assert "recomputing it" in capsys.readouterr().err
    assert res.stats["shards_rejected"] == 1
    assert same(res, solve(n))


@pytest.mark.parametrize("name", ["../x.npz", "/dev/zero", "ABSOLUTE", "levels-0002.npz"])
def test_chain_shard_names_outside_the_directory_are_refused(tmp_path, name: str) -> None:  # noqa: ANN001
    folder = tmp_path / "ck"
    run_solve(30, checkpoint_dir=folder, shards=3)
    m = json.loads((folder / "manifest.json").read_text())
    outside = tmp_path / "x.npz"
    outside.write_bytes((folder / m["shards"][1]["file"]).read_bytes())
    m["shards"][1]["file"] = str(outside) if name == "ABSOLUTE" else name
    (folder / "manifest.json").write_text(json.dumps(m))
    with pytest.raises(CheckpointRefused) as info:
        run_solve(30, checkpoint_dir=folder)
    assert "\n" not in str(info.value)


def test_chain_rule_text_is_checked(tmp_path) -> None:  # noqa: ANN001
    run_solve(20, "reversed", checkpoint_dir=tmp_path, shards=2)
    m = json.loads((tmp_path / "manifest.json").read_text())
    from zeckenum.rules.rulefile import rules_from_text

    assert rules_from_text(m["rules_text"]).content_hash() == get_rules("reversed").content_hash()
    m["rules_text"] = m["rules_text"].replace("[[move]]", "[[move]]\n", 1) + "#"
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    assert same(run_solve(20, "reversed", checkpoint_dir=tmp_path), solve(20, "reversed"))
    m["rules_text"] = get_rules_text("standard")
    (tmp_path / "manifest.json").write_text(json.dumps(m))
    with pytest.raises(CheckpointRefused, match="rule"):
        run_solve(20, "reversed", checkpoint_dir=tmp_path)


def get_rules_text(name: str) -> str:
    from zeckenum.rules.rulefile import format_rules

    return format_rules(get_rules(name))


def test_unwritable_chain_checkpoint_is_refused(tmp_path) -> None:  # noqa: ANN001
    from zeckenum.errors import OutputError

    blocker = tmp_path / "file"
    blocker.write_text("x")
    for folder in (blocker, blocker / "sub"):
        with pytest.raises(OutputError) as info:
            run_solve(20, checkpoint_dir=folder, shards=2)
        assert info.value.exit_code == 6


_PRISTINE: dict = {}


# A battery of generated chain-manifest mutations (hypothesis, tests/support/manifest_mutations.py):
# each ends in the exact result (the memoised minimax of tests/support/minimax.py and the one-piece
# solve) or a ZeckenumError of one line -- never another exception, never a wrong answer.
@settings(max_examples=50, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_mutated_chain_manifests_give_the_exact_result_or_one_line(data) -> None:  # noqa: ANN001
    import shutil
    import tempfile
    from pathlib import Path

    from manifest_mutations import draw_mutation
    from zeckenum.errors import ZeckenumError

    n = 16
    if not _PRISTINE:
        folder = Path(tempfile.mkdtemp(prefix="zeckenum-pristine-chain-"))
        run_solve(n, checkpoint_dir=folder, shards=4)
        _PRISTINE["folder"] = folder
        _PRISTINE["manifest"] = json.loads((folder / "manifest.json").read_text())
        _PRISTINE["ref"] = solve(n)
    mutated = draw_mutation(data, _PRISTINE["manifest"])
    work = Path(tempfile.mkdtemp(prefix="zeckenum-mutated-chain-"))
    try:
        target = work / "ck"
        shutil.copytree(_PRISTINE["folder"], target)
        (target / "manifest.json").write_text(json.dumps(mutated))
        try:
            res = run_solve(n, checkpoint_dir=target)
        except ZeckenumError as exc:
            assert "\n" not in str(exc)
            return
    finally:
        shutil.rmtree(work, ignore_errors=True)
    assert (res.winner == 1) == minimax.mover_wins(minimax.start_state(n))
    assert res.states == len(minimax.reachable(n))
    assert same(res, _PRISTINE["ref"])


@pytest.mark.parametrize("kind", ["fifo", "symlink-out", "symlink-dev-zero", "directory"])
def test_non_regular_chain_files_are_never_read(tmp_path, capsys, kind: str) -> None:  # noqa: ANN001
    # a FIFO or symlink under a range's own name: one warning line, the range recomputed
    # (never opened blocking, never followed); a directory there: refused up front
    import threading

    folder = tmp_path / "ck"
    run_solve(30, checkpoint_dir=folder, shards=3)
    victim = folder / "levels-0001.npz"
    outside = tmp_path / "outside.npz"
    outside.write_bytes(victim.read_bytes())
    victim.unlink()
    if kind == "fifo":
        os.mkfifo(victim)
    elif kind == "symlink-out":
        victim.symlink_to(outside)
    elif kind == "symlink-dev-zero":
        victim.symlink_to("/dev/zero")
    else:
        victim.mkdir()
    capsys.readouterr()
    box: dict = {}

    def call() -> None:
        try:
            box["res"] = run_solve(30, checkpoint_dir=folder)
        except Exception as exc:  # noqa: BLE001
            box["err"] = exc

    t = threading.Thread(target=call, daemon=True)
    t.start()
    t.join(120)
    if t.is_alive():
        os.close(os.open(victim, os.O_WRONLY | os.O_NONBLOCK))
        t.join(30)
        pytest.fail("the chain hung on a FIFO")
    if kind == "directory":
        assert isinstance(box.get("err"), CheckpointRefused) and "\n" not in str(box["err"])
        return
    assert "err" not in box, box.get("err")
    res = box["res"]
    assert res.stats["shards_rejected"] == 1 and res.stats["shards_reused"] == 2
    assert "levels-0001.npz" in capsys.readouterr().err
    assert same(res, solve(30))
    assert res.states == len(minimax.reachable(30))
