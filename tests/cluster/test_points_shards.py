"""The count by evaluation points through the sharded driver: (prime, block of points)
shards in threads and on a real Dask cluster, checkpointed and resumed.

References: the brute force of tests/support/bruteforce.py (plain Python, shares no code
with zeckenum), `zeckenum.count(n, points_per_shard=K)` run in-process (the sharded result
must equal it field by field: same primes, same spectrum), sympy for primality, and
hashlib for the checksums of edited shard files.  Clusters bind to 127.0.0.1 with free
ports (`open_pool`) and are closed by the fixture.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import zeckenum
from bruteforce import census
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from manifest_mutations import draw_mutation
from zeckenum.cluster import run_count
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.errors import CheckPrimeMismatch, InputError, MemoryRefused

ALL = 1 << 20  # more points per shard than any small n has: one shard per prime


def _manifest(folder) -> dict:  # noqa: ANN001
    return json.loads((folder / "manifest.json").read_text())


def _assert_exact(res, n: int) -> None:  # noqa: ANN001
    ref = census(n)
    assert res.length_counts == ref["length_counts"]
    assert (res.games, res.shortest, res.longest) == (ref["games"], ref["shortest"],
                                                      ref["longest"])
    assert (res.states, res.transitions) == (ref["states"], ref["transitions"])


def _one_line(exc: BaseException, *words: str) -> None:
    msg = str(exc)
    assert "\n" not in msg and msg
    for w in words:
        assert w in msg, (w, msg)


# ----------------------------------------------------------------------------- the plan


def test_points_plan_covers_every_point_of_every_prime_once() -> None:
    import sympy as sp
    from zeckenum.cluster.count_tasks import windows_with_facts
    from zeckenum.cluster.plan import points_plan

    _, _, facts = windows_with_facts(zeckenum.STANDARD, 30)
    span = facts.longest - facts.shortest
    for per in (1, 3, 7, None, ALL):
        plan = points_plan(facts, 0, per, workers=2)
        order = plan.order
        # common practice: the inverse transform needs span + 1 distinct points for the
        # span + 1 unknown coefficients; one more gives a coefficient that must vanish
        assert order == span + 2
        product = 1
        for q in plan.primes:
            product *= q
        assert product.bit_length() > facts.count_bits
        for q in plan.all_primes:
            assert sp.isprime(q) and (q - 1) % order == 0 and q < 2**50
        cells = [(q, k) for q, lo, hi in plan.blocks for k in range(lo, hi)]
        assert sorted(cells) == sorted((q, k) for q in plan.all_primes for k in range(order))
        assert max(hi - lo for _, lo, hi in plan.blocks) == plan.per_shard
        if per is None:  # at least one shard per worker
            assert len(plan.blocks) >= 2
        json.dumps(plan.to_dict())  # plain JSON


def test_bad_points_per_shard_and_prime_blockings_are_refused() -> None:
    for bad in (0, -3, True, 2.5, "4"):
        with pytest.raises(InputError) as info:
            run_count(12, checkpoint_dir=None, points_per_shard=bad, workers=None)
        _one_line(info.value, "points per shard")
    for extra in (dict(blocks=2), dict(max_primes_per_block=1)):
        with pytest.raises(InputError) as info:
            run_count(12, points_per_shard=2, **extra)
        _one_line(info.value, "do not apply")


def test_memory_per_worker_follows_the_points_per_shard(tmp_path) -> None:  # noqa: ANN001
    from zeckenum.cluster.count_tasks import points_facts_of, windows_with_facts
    from zeckenum.cluster.plan import points_plan, worker_bytes
    from zeckenum.counting.points import points_peak_words

    n = 40
    space, _, facts = windows_with_facts(zeckenum.STANDARD, n)
    pf = points_facts_of(facts, space)
    small, big = (worker_bytes(pf, points_plan(pf, 0, k)) for k in (1, ALL))
    order = points_plan(pf, 0, ALL).order
    # the shard buffers are the only part that grows with the points: N - 1 more points
    # cost N - 1 times one point's words (counting.points.points_peak_words)
    assert big - small == 8 * (points_peak_words(space, order) - points_peak_words(space, 1))
    with pytest.raises(TypeError):
        worker_bytes(facts, points_plan(pf, 0, 1))  # plain Facts cannot size a points plan
    # a worker limit below one shard of all the points is refused (exit 3) up front
    with pytest.raises(MemoryRefused) as info:
        run_count(n, points_per_shard=ALL, max_memory=small + (big - small) // 2,
                  checkpoint_dir=tmp_path / "ck", threads=1)
    _one_line(info.value)
    res = run_count(n, points_per_shard=order // 4, max_memory=max(small, 1 << 28),
                    checkpoint_dir=tmp_path / "ck", threads=1)
    assert res == zeckenum.count(n, points_per_shard=order // 4)


def test_a_checkpointed_count_over_its_limit_falls_back_on_points_and_resumes_so(
        tmp_path) -> None:  # noqa: ANN001
    from zeckenum.cluster.count_tasks import points_facts_of, windows_with_facts
    from zeckenum.cluster.plan import make_plan, points_plan, worker_bytes

    n = 60
    space, _, facts = windows_with_facts(zeckenum.STANDARD, n)
    pf = points_facts_of(facts, space)
    windows_need = worker_bytes(facts, make_plan(facts, 0, 2), threads=2)
    one_point = worker_bytes(pf, points_plan(pf, 0, 1), threads=2)
    assert one_point < windows_need  # else this n cannot show the fallback
    limit = (one_point + windows_need) // 2
    ran: list[int] = []

    def stop_after_two(_n: int, i: int) -> None:
        ran.append(i)
        if len(ran) == 2:
            raise Interrupt

    with pytest.raises(Interrupt):
        run_count(n, checkpoint_dir=tmp_path, threads=2, max_memory=limit,
                  on_shard=stop_after_two)
    m = _manifest(tmp_path)
    assert m["parameters"]["route"] == "points"
    per = m["plan"]["points_per_shard"]
    assert worker_bytes(pf, points_plan(pf, 0, per), threads=2) <= limit
    # resumed without any option: the checkpoint's own route and shape, 2 shards reused
    res = run_count(n, checkpoint_dir=tmp_path, threads=2)
    assert res.stats["shards_reused"] == 2
    _assert_exact(res, n)
    assert res == zeckenum.count(n, points_per_shard=per)
    # with room for the prime blocks the same count stays windowed (no fallback)
    wide = run_count(n, checkpoint_dir=tmp_path / "wide", threads=2,
                     max_memory=windows_need)
    assert _manifest(tmp_path / "wide")["parameters"].get("route", "windows") == "windows"
    assert wide.length_counts == res.length_counts


# ------------------------------------------------------------------ results, in threads


@pytest.mark.parametrize("per", [1, 3, ALL])
def test_checkpointed_shards_equal_in_process_and_brute_force(tmp_path, per: int) -> None:  # noqa: ANN001
    n = 16
    res = run_count(n, checkpoint_dir=tmp_path, points_per_shard=per, threads=2)
    _assert_exact(res, n)
    assert res == zeckenum.count(n, points_per_shard=per)  # same primes, same spectrum
    assert res.length_counts == zeckenum.count(n).length_counts
    order = res.stats["points"]
    assert res.stats["shards_total"] == (len(res.primes) + 1) * -(-order // min(per, order))
    m = _manifest(tmp_path)
    assert m["parameters"]["route"] == "points" and m["plan"]["route"] == "points"
    assert m["plan"]["points"] == m["columns"] == order
    assert m["plan"]["points_per_shard"] == min(per, order)
    for entry in m["shards"]:
        data = (tmp_path / entry["file"]).read_bytes()
        assert hashlib.sha256(data).hexdigest() == entry["sha256"]
    again = run_count(n, checkpoint_dir=tmp_path, points_per_shard=per)
    assert again.stats["shards_reused"] == res.stats["shards_total"]
    assert again.stats["shards_computed"] == 0 and again == res


def test_several_n_with_points_in_threads_and_the_api(tmp_path) -> None:  # noqa: ANN001
    from zeckenum.cluster.run import run_counts

    got = run_counts([9, 13], checkpoint_dir=tmp_path, points_per_shard=5)
    for n in (9, 13):
        _assert_exact(got[n], n)
        assert got[n] == zeckenum.count(n, points_per_shard=5)
        assert (tmp_path / f"n-{n:05d}" / "manifest.json").is_file()
    res = zeckenum.count(11, checkpoint=tmp_path / "api", points_per_shard=2)
    assert res.stats["method"] == "points" and res.stats["shards_computed"] > 0
    _assert_exact(res, 11)


class Interrupt(Exception):
    pass


def test_an_interrupted_run_resumes_and_reuses_its_shards(tmp_path) -> None:  # noqa: ANN001
    n, per = 20, 4

    def stop_after_three(_n: int, _i: int, seen: list = []) -> None:  # noqa: B006
        seen.append(_i)
        if len(seen) == 3:
            raise Interrupt

    with pytest.raises(Interrupt):
        run_count(n, checkpoint_dir=tmp_path, points_per_shard=per, threads=1,
                  on_shard=stop_after_three)
    assert len([e for e in _manifest(tmp_path)["shards"] if e["sha256"]]) == 3
    ran: list[int] = []
    res = run_count(n, checkpoint_dir=tmp_path, points_per_shard=per,
                    on_shard=lambda _n, i: ran.append(i))
    total = res.stats["shards_total"]
    assert res.stats["shards_reused"] == 3
    assert res.stats["shards_computed"] == len(ran) == total - 3 > 0
    _assert_exact(res, n)
    assert res == zeckenum.count(n, points_per_shard=per)


# ------------------------------------------------------------------ damaged checkpoints


def _rewrite_shard(folder, i: int, values: np.ndarray) -> None:  # noqa: ANN001
    """Replace shard i's file with `values` and record its true SHA-256 in the manifest,
    as a careful editor would: only the range and transform checks can catch it."""
    import io

    buf = io.BytesIO()
    np.save(buf, values, allow_pickle=False)
    data = buf.getvalue()
    m = _manifest(folder)
    (folder / m["shards"][i]["file"]).write_bytes(data)
    m["shards"][i]["sha256"] = hashlib.sha256(data).hexdigest()
    (folder / "manifest.json").write_text(json.dumps(m))


def test_damaged_shard_files_are_reported_and_recomputed(tmp_path, capsys) -> None:  # noqa: ANN001
    n, per = 18, 3
    run_count(n, checkpoint_dir=tmp_path, points_per_shard=per)
    m = _manifest(tmp_path)
    files = [tmp_path / e["file"] for e in m["shards"]]
    blocks = m["plan"]["blocks"]
    files[0].write_bytes(files[0].read_bytes()[:-5])  # truncated
    arr = np.load(files[1])  # one value at its prime: outside [0, p)
    arr[0] = int(blocks[1][0])
    _rewrite_shard(tmp_path, 1, arr)
    arr = np.load(files[2])  # a negative value
    arr[-1] = -1
    _rewrite_shard(tmp_path, 2, arr)
    _rewrite_shard(tmp_path, 3, np.zeros(per + 1, dtype=np.int64))  # wrong shape
    files[4].write_bytes(files[5].read_bytes())  # another shard's file (fails its SHA)
    capsys.readouterr()
    res = run_count(n, checkpoint_dir=tmp_path, points_per_shard=per)
    warnings = [w for w in capsys.readouterr().err.splitlines()
                if w.startswith("zeckenum: warning:")]
    assert len(warnings) == 5
    for f in files[:5]:
        assert any(f.name in w for w in warnings)
    assert any("outside [0, p)" in w for w in warnings)
    assert res.stats["shards_rejected"] == res.stats["shards_computed"] == 5
    _assert_exact(res, n)
    assert run_count(n, checkpoint_dir=tmp_path, points_per_shard=per).stats[
        "shards_reused"] == len(files)


def test_a_consistent_but_wrong_shard_stops_the_run_never_a_wrong_count(tmp_path) -> None:  # noqa: ANN001
    # a value changed inside [0, p) with its digest updated passes every file check; the
    # interpolation (no term outside the lengths) or the check prime must catch it
    n = 21
    run_count(n, checkpoint_dir=tmp_path, points_per_shard=ALL)
    arr = np.load(tmp_path / "shard-0000.npy")
    arr[1] = (arr[1] + 1) % int(_manifest(tmp_path)["plan"]["blocks"][0][0])
    _rewrite_shard(tmp_path, 0, arr)
    with pytest.raises(CheckPrimeMismatch) as info:
        run_count(n, checkpoint_dir=tmp_path, points_per_shard=ALL)
    _one_line(info.value)


def test_route_and_shape_mismatches_are_refused_with_one_line(tmp_path) -> None:  # noqa: ANN001
    n = 15
    windows, points = tmp_path / "windows", tmp_path / "points"
    run_count(n, checkpoint_dir=windows, blocks=2)
    run_count(n, checkpoint_dir=points, points_per_shard=4)
    before = {f: (f / "manifest.json").read_bytes() for f in (windows, points)}
    with pytest.raises(CheckpointRefused) as info:
        run_count(n, checkpoint_dir=windows, points_per_shard=4)
    _one_line(info.value, "route='windows'", "route='points'")
    with pytest.raises(CheckpointRefused) as info:  # prime blocks asked for explicitly
        run_count(n, checkpoint_dir=points, blocks=2)
    _one_line(info.value, "route='points'", "route='windows'")
    with pytest.raises(CheckpointRefused) as info:
        run_count(n, checkpoint_dir=points, points_per_shard=5)
    _one_line(info.value, "points_per_shard", "shard shape")
    for f, data in before.items():  # a refusal leaves the directory alone
        assert (f / "manifest.json").read_bytes() == data
    assert isinstance(info.value, InputError)  # exit status 2
    # with the shape left to the planner, a points checkpoint resumes as points
    again = run_count(n, checkpoint_dir=points)
    assert again.stats["shards_computed"] == 0 and again.stats["shards_reused"] > 0
    assert again == zeckenum.count(n, points_per_shard=4)


def test_command_line_runs_points_with_a_checkpoint_and_refuses_another_route(
        tmp_path) -> None:  # noqa: ANN001
    from click.testing import CliRunner
    from zeckenum.cli.group import main

    runner = CliRunner()
    ck = str(tmp_path / "ck")
    res = runner.invoke(main, ["count", "10", "--points-per-shard", "3", "--checkpoint", ck,
                               "--json"])
    assert res.exit_code == 0, res.output
    got = json.loads(res.output)
    assert {int(k): int(v) for k, v in got["length_counts"].items()} == census(10)[
        "length_counts"]
    assert got["stats"]["method"] == "points"
    again = runner.invoke(main, ["count", "10", "--checkpoint", ck, "--json"])
    assert again.exit_code == 0, again.output  # the shape left to the planner: resumed
    assert json.loads(again.output)["length_counts"] == got["length_counts"]
    res = runner.invoke(main, ["count", "10", "--points-per-shard", "4", "--checkpoint", ck])
    assert res.exit_code == 2, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("zeckenum: error: ")
    assert "points_per_shard" in lines[0]


# A battery of generated manifest mutations (hypothesis, tests/support/manifest_mutations.py):
# each must end in the exact result (brute force) or one line of a ZeckenumError.

MUTATION_N = 12


def _pristine_points():  # noqa: ANN202
    import tempfile
    from pathlib import Path

    made = _pristine_points.__dict__
    if "folder" not in made:
        folder = Path(tempfile.mkdtemp(prefix="zeckenum-pristine-points-"))
        run_count(MUTATION_N, checkpoint_dir=folder, points_per_shard=3, threads=1)
        made["folder"], made["manifest"] = folder, _manifest(folder)
    return made["folder"], made["manifest"]


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_mutated_points_manifests_give_the_exact_result_or_one_line(data) -> None:  # noqa: ANN001
    import shutil
    import tempfile
    from pathlib import Path

    folder, manifest = _pristine_points()
    mutated = draw_mutation(data, manifest)
    work = Path(tempfile.mkdtemp(prefix="zeckenum-mutated-points-"))
    try:
        target = work / "ck"
        shutil.copytree(folder, target)
        (target / "manifest.json").write_text(json.dumps(mutated))
        try:
            res = run_count(MUTATION_N, checkpoint_dir=target, points_per_shard=3, threads=1)
        except zeckenum.ZeckenumError as exc:
            _one_line(exc)
            return
        _assert_exact(res, MUTATION_N)
    finally:
        shutil.rmtree(work, ignore_errors=True)


# ------------------------------------------------------------------ a real Dask cluster


@pytest.fixture(scope="module")
def pool():  # noqa: ANN201
    from zeckenum.cluster.backend import open_pool

    with open_pool(workers=2, warm=("count", "points")) as p:
        yield p


@pytest.mark.slow  # about 15 s with the cluster's start
def test_two_workers_every_shard_shape_equals_in_process(pool, tmp_path) -> None:  # noqa: ANN001
    from zeckenum.cluster.backend import DaskPool
    from zeckenum.cluster.run import count_on_pool

    assert isinstance(pool, DaskPool) and len(pool.workers) == 2
    for per in (1, 5, ALL):
        folder = tmp_path / f"k{per}"
        got = count_on_pool([14, 25], "standard", pool, checkpoint_dir=folder,
                            points_per_shard=per)
        for n in (14, 25):
            assert got[n].stats["backend"] == "dask"
            assert got[n] == zeckenum.count(n, points_per_shard=per), (n, per)
        _assert_exact(got[14], 14)
        single = count_on_pool([25], "standard", pool, checkpoint_dir=folder / "n-00025",
                               points_per_shard=per)[25]
        assert single.stats["shards_reused"] == single.stats["shards_total"]
        assert single == got[25]


@pytest.mark.slow  # about 10 s
def test_n_120_interrupted_on_two_workers_resumes_to_the_windowed_spectrum(
        pool, tmp_path) -> None:  # noqa: ANN001
    # the windowed count takes primes below 2**62, the points route NTT primes below 2**50
    # that are 1 mod N: two independent modular computations of the same integers
    from zeckenum.cluster.run import count_on_pool

    n, per = 120, 64

    def stop_after_ten(_n: int, _i: int, seen: list = []) -> None:  # noqa: B006
        seen.append(_i)
        if len(seen) == 10:
            raise Interrupt

    with pytest.raises(Interrupt):
        count_on_pool([n], "standard", pool, checkpoint_dir=tmp_path, points_per_shard=per,
                      on_shard=stop_after_ten)
    res = count_on_pool([n], "standard", pool, checkpoint_dir=tmp_path,
                        points_per_shard=per)[n]
    assert res.stats["shards_reused"] == 10
    assert res.stats["shards_computed"] == res.stats["shards_total"] - 10 > 0
    ref = zeckenum.count(n)
    assert res.length_counts == ref.length_counts and res.games == ref.games
    assert not set(res.primes) & set(ref.primes)
    assert res == zeckenum.count(n, points_per_shard=per)
