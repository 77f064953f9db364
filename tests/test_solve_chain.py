"""Optimal play of one n as a chain of level-range shards: in-process, on real Dask clusters
on 127.0.0.1, and through checkpoints.

References: the memoised minimax in tests/minimax.py (plain Python, shares no code with
zeckenum), the rule-set brute force in tests/rules_bruteforce.py, and `zeckenum.solve.solve`
run in one piece (which tests/test_solve.py checks against both): the chain must agree with
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
from killed_client import kill_after_marker
from zeckenum.cli import main
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.cluster.run import run_count
from zeckenum.cluster.solve_chain import plan_ranges, run_solve
from zeckenum.rules import get_rules
from zeckenum.solve import solve
from zeckenum.statespace import build_space

FIELDS = ("winner", "p_positions", "states", "forced_win", "start_moves", "moves_examined")


def same(a, b) -> bool:  # noqa: ANN001
    return all(getattr(a, f) == getattr(b, f) for f in FIELDS)


@pytest.mark.parametrize("n", range(1, 15))
def test_chain_matches_minimax(n: int) -> None:
    # source: tests/minimax.py (memoised normal-play minimax over explicit states)
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
    # source: tests/rules_bruteforce.py
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
