"""Numba cache seeding of worker slots (`cluster.backend.seed_slot`) and the worker
plugin's import test.

numba keeps compiled kernels in one cache folder per *source folder*, at the subpath its
own `_CacheLocator.get_suitable_cache_subpath` gives under NUMBA_CACHE_DIR (numba's cache
rule, used here as the reference).  The folders that hold kernels are found here by reading
the package's source files for `@kernel` declarations, independently of the seeding code.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import zeckenum
from numba.core.caching import _CacheLocator
from zeckenum.cluster.backend import _PLUGIN_SOURCE, seed_slot, warm_up


def kernel_folders() -> dict[Path, Path]:
    """{source folder holding kernels: one of its kernel files} of the installed package."""
    root = Path(zeckenum.__file__).parent
    out: dict[Path, Path] = {}
    for path in sorted(root.rglob("*.py")):
        if "__pycache__" in path.parts:
            continue
        lines = path.read_text(encoding="utf-8").splitlines()
        if any(line.startswith("@kernel") for line in lines):
            out.setdefault(path.parent, path)
    return out


def test_a_seeded_slot_holds_the_kernels_of_every_folder(tmp_path: Path) -> None:
    warm_up(("count", "random", "solve"))  # compiles (or loads) every folder's kernels here
    folders = kernel_folders()
    assert {p.name for p in folders} >= {"core", "counting", "randomplay", "optimal"}
    slot = tmp_path / "slot-0"
    slot.mkdir()
    assert seed_slot(slot) > 0
    for folder, any_file in folders.items():
        sub = slot / _CacheLocator.get_suitable_cache_subpath(str(any_file))
        names = {f.name for f in sub.iterdir()} if sub.is_dir() else set()
        assert any(n.endswith(".nbi") for n in names), f"no kernel index for {folder.name}"
        assert any(n.endswith(".nbc") for n in names), f"no compiled kernel for {folder.name}"
    assert seed_slot(slot) == 0  # files already there are kept, nothing copied twice


_RUN_PLUGIN = """
import json, os, sys, types
if sys.argv[1] == "partly-imported":
    sys.modules["zeckenum.optimal.solve"] = types.ModuleType("zeckenum.optimal.solve")
ns = {"__name__": "not_importable"}
exec(compile(sys.argv[2], "<plugin>", "exec"), ns)
ns["setup"](types.SimpleNamespace(), None)
print(json.dumps(os.environ.get("NUMBA_CACHE_DIR")))
"""


def _plugin_sets(tmp_path: Path, mode: str) -> str | None:
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env["ZECKENUM_NUMBA_CACHE"] = str(tmp_path / "slots")
    proc = subprocess.run([sys.executable, "-c", _RUN_PLUGIN, mode, _PLUGIN_SOURCE],
                          env=env, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_the_plugin_gives_a_fresh_worker_a_slot(tmp_path: Path) -> None:
    got = _plugin_sets(tmp_path, "fresh")
    assert got is not None and got.startswith(str(tmp_path / "slots" / "slot-"))


def test_the_plugin_keeps_the_default_once_any_zeckenum_module_is_imported(
    tmp_path: Path,
) -> None:
    # any module of the package fixes its kernels' cache folder when imported, not only
    # the count's spectrum module
    assert _plugin_sets(tmp_path, "partly-imported") is None


def test_the_host_cache_digest_covers_core_rules_and_the_count_decision() -> None:
    from importlib.util import find_spec

    from zeckenum.cluster import hostcache

    covered = {p.resolve() for _, p in hostcache.digest_files()}
    for package in ("zeckenum.core", "zeckenum.rules"):
        for where in find_spec(package).submodule_search_locations:
            for f in Path(where).rglob("*.py"):
                if "__pycache__" not in f.parts:
                    assert f.resolve() in covered, f
    for module in ("zeckenum.core.statespace", "zeckenum.core.sweep",
                   "zeckenum.counting.count", "zeckenum.cluster.count_tasks"):
        assert Path(find_spec(module).origin).resolve() in covered, module


def test_everything_sent_to_workers_pickles_by_an_importable_module_path() -> None:
    # Dask ships task functions and the facts they return by module path (pickle by
    # reference): each must be found again under the name it records
    import importlib
    import pickle

    from zeckenum.cluster.kinds import count_kind, random_kind
    from zeckenum.cluster.solve_tasks import layer_classes_task
    from zeckenum.rules.catalogue import get_rules

    rs = get_rules("standard")
    kinds = [count_kind(rs), random_kind(rs, "moves", 2, False), random_kind(rs, "moves", 2, True)]
    sent = [layer_classes_task, rs]
    for kind in kinds:
        sent += [kind.facts_task, kind.shard_task]
        if kind.release is not None:
            sent.append(kind.release)
    sent.append(kinds[0].facts_task(rs, 8))
    sent.append(kinds[1].facts_task(rs, 8, *kinds[1].facts_args))
    for obj in sent:
        assert pickle.loads(pickle.dumps(obj)) == obj or callable(obj)
        target = obj if callable(obj) else type(obj)
        module = importlib.import_module(target.__module__)
        assert getattr(module, target.__qualname__) is target, target
