"""The manifest base shared by shard checkpoints and chain checkpoints (`cluster.manifest`).

Both kinds of checkpoint read their manifest through the same checks; each must refuse
the other's directory and any manifest that is too deep, not JSON, or names a shard file
outside its directory (common practice for untrusted input: refuse, one line, never use).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from zeckenum.cluster import run_count, run_solve
from zeckenum.cluster.errors import CheckpointRefused


def _count_dir(tmp_path: Path) -> Path:
    folder = tmp_path / "count"
    run_count(14, checkpoint_dir=folder, blocks=2, threads=1)
    return folder


def _chain_dir(tmp_path: Path) -> Path:
    folder = tmp_path / "chain"
    run_solve(14, checkpoint_dir=folder, shards=2)
    return folder


def test_each_kind_refuses_the_other_kinds_directory(tmp_path: Path) -> None:
    with pytest.raises(CheckpointRefused, match="not a checkpoint of a chained solve"):
        run_solve(14, checkpoint_dir=_count_dir(tmp_path), shards=2)
    with pytest.raises(CheckpointRefused, match="not a zeckenum shard checkpoint"):
        run_count(14, checkpoint_dir=_chain_dir(tmp_path), blocks=2, threads=1)


@pytest.mark.parametrize("which", ["count", "chain"])
@pytest.mark.parametrize("damage", ["deep", "not-json", "outside"])
def test_both_kinds_refuse_a_damaged_manifest(tmp_path: Path, which: str, damage: str) -> None:
    folder = _count_dir(tmp_path) if which == "count" else _chain_dir(tmp_path)
    path = folder / "manifest.json"
    data = json.loads(path.read_text())
    if damage == "deep":
        data["facts" if which == "count" else "parameters"]["x"] = json.loads("[" * 80 + "]" * 80)
        path.write_text(json.dumps(data))
    elif damage == "not-json":
        path.write_text(path.read_text()[:-10])
    else:
        data["shards"][0]["file"] = "../elsewhere.npy"
        path.write_text(json.dumps(data))
    with pytest.raises(CheckpointRefused) as info:
        if which == "count":
            run_count(14, checkpoint_dir=folder, blocks=2, threads=1)
        else:
            run_solve(14, checkpoint_dir=folder, shards=2)
    assert "\n" not in str(info.value)
