"""Optimal play of one n as a chain of level-range shards, checkpointed, on any backend.

Shard design.  `solve.sweep_classes` classifies the layers from level 0 up to the start's
level; a layer needs only the bits of the `max_drop` layers below it.  So the levels are
cut into consecutive ranges of about equal states (`plan_ranges`), and shard i sweeps its
range starting from the *boundary* (the bits of the top max_drop + 1 layers) that shard
i - 1 returned.  `sweep_classes_task(rules, n, players, lo, hi, boundary)` is the cluster
twin of `solve.sweep_classes`: a worker rebuilds the game's state space from (rules, n)
(and, for rule sets other than the standard game, its reachability bits, once per process)
and returns the new boundary and the range's statistics.  Only boundaries travel: one bit
per state of max_drop + 1 layers.

The shards depend on each other, so they run one after the other: a cluster does not make
one n faster (ranges of n run in parallel, one task per n, in `table`), but a long solve
survives a lost worker (Dask reruns the shard) and a lost client: every finished shard is
written atomically to the checkpoint directory with its SHA-256 in the manifest, and a
rerun reuses each verified shard, recomputing only the others (a damaged shard i is
recomputed from shard i - 1's boundary; the shards after it stay valid, since they were
computed from the boundary before it was damaged on disk).

The result is `solve.solve_result` of the last boundary and the summed statistics: equal to
`solve.solve(n, rules, players)` field by field (seconds and the peak bit memory aside).
"""

from __future__ import annotations

import contextlib
import io
import json
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from ..count import check_n
from ..errors import InputError
from ..rules import RuleSet, get_rules
from ..solve import (
    SolveResult,
    check_players,
    needs_reach,
    solve_result,
    sweep_classes,
    sweep_reach,
)
from ..statespace import StateSpace, build_space
from .backend import Watchdog, kept_note, open_pool, stall_seconds
from .checkpoint import (
    check_parameters,
    read_manifest,
    read_verified,
    sha256_bytes,
    warn,
    write_atomic,
)
from .errors import CheckpointRefused

FORMAT = "zeckenum-solve-chain/1"
MANIFEST = "manifest.json"
SHARD_STATES = 20_000_000
"""Default states per shard (a few seconds of work each at large n)."""

STAT_KEYS = ("states", "p_positions", "moves_examined", "peak_bits_bytes", "layers")

_cache: OrderedDict[tuple[str, int], tuple[StateSpace, dict | None]] = OrderedDict()
_cache_lock = threading.Lock()


# ------------------------------------------------------------------------------ the plan

def plan_ranges(space: StateSpace, shards: int | None = None) -> list[tuple[int, int]]:
    """Consecutive level ranges [lo, hi] covering 0 .. start level, of about equal states.

    `shards` ranges (at most one per non-empty level); default: one per SHARD_STATES
    states.  Empty levels are absorbed by their neighbours.
    """
    levels = sorted(space.levels)
    sizes = np.array([space.layer_size(lv) for lv in levels], dtype=np.float64)
    total = float(sizes.sum())
    if shards is None:
        shards = max(1, int(np.ceil(total / SHARD_STATES)))
    if shards < 1:
        raise InputError(f"shards must be >= 1, got {shards}")
    shards = min(shards, len(levels))
    cum = np.cumsum(sizes)
    cuts = [int(np.searchsorted(cum, total * j / shards, side="left")) for j in range(1, shards)]
    idx = sorted(set(c for c in cuts if 0 <= c < len(levels) - 1))
    out, lo = [], 0
    for c in idx:
        out.append((lo, levels[c]))
        lo = levels[c] + 1
    out.append((lo, space.spec.start_level))
    return out


# ------------------------------------------------------------------------------ the task

def prepared_space(rules: str | RuleSet, n: int) -> tuple[StateSpace, dict | None]:
    """(state space, reachability bits or None) of (rules, n), cached in this process."""
    ruleset = get_rules(rules)
    key = (ruleset.content_hash(), int(n))
    with _cache_lock:
        hit = _cache.get(key)
        if hit is None:
            space = build_space(ruleset.instantiate(n))
            reach = sweep_reach(space)[0] if needs_reach(ruleset) else None
            hit = (space, reach)
            _cache[key] = hit
            while len(_cache) > 2:
                _cache.popitem(last=False)
        _cache.move_to_end(key)
        return hit


def sweep_classes_task(
    rules: str | RuleSet, n: int, players: int, lo: int, hi: int,
    boundary: dict[int, np.ndarray],
) -> tuple[dict[int, np.ndarray], dict]:
    """(boundary after level hi, statistics) of the levels lo .. hi of the upward sweep.

    The cluster twin of `solve.sweep_classes`: `boundary` is what the shard below returned
    ({} for the first shard).
    """
    space, reach = prepared_space(rules, n)
    return sweep_classes(space, players, reach=reach, levels=range(lo, hi + 1),
                         held=boundary)


# ------------------------------------------------------------------------- checkpoints

def boundary_bytes(boundary: dict[int, np.ndarray], stats: dict) -> bytes:
    """One shard's file: its boundary arrays ("L<level>") and statistics, as .npz bytes."""
    buf = io.BytesIO()
    arrays = {f"L{lv}": a for lv, a in boundary.items()}
    arrays["stats"] = np.array([int(stats[k]) for k in STAT_KEYS], dtype=np.int64)
    np.savez(buf, **arrays)
    return buf.getvalue()


def read_boundary(data: bytes) -> tuple[dict[int, np.ndarray], dict]:
    """Inverse of `boundary_bytes` (ValueError / OSError / KeyError when unreadable)."""
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        stats = dict(zip(STAT_KEYS, (int(x) for x in z["stats"]), strict=True))
        boundary = {int(k[1:]): z[k] for k in z.files if k.startswith("L")}
    return boundary, stats


@dataclass
class ChainCheckpoint:
    """A checkpoint directory of one chained solve: parameters, level ranges, shards."""

    root: Path
    parameters: dict
    ranges: list[tuple[int, int]]
    shards: list[dict] = field(default_factory=list)

    def save_manifest(self) -> None:
        data = {"format": FORMAT, "parameters": self.parameters,
                "ranges": [list(r) for r in self.ranges], "shards": self.shards}
        write_atomic(self.root / MANIFEST, (json.dumps(data, indent=1) + "\n").encode())

    def save_shard(self, i: int, boundary: dict[int, np.ndarray], stats: dict) -> None:
        data = boundary_bytes(boundary, stats)
        name = f"levels-{i:04d}.npz"
        write_atomic(self.root / name, data)
        self.shards[i] = {"index": i, "file": name, "sha256": sha256_bytes(data)}
        self.save_manifest()

    def load_shard(self, i: int) -> tuple[dict[int, np.ndarray], dict] | None:
        """Shard i's (boundary, stats) if its file passes every check, else None (a damaged
        shard is reported with one warning line and forgotten)."""
        entry = self.shards[i]
        if not entry.get("sha256"):
            return None
        path = self.root / entry["file"]
        data, problem = read_verified(path, entry["sha256"])
        if data is not None:
            try:
                return read_boundary(data)
            except (ValueError, OSError, KeyError, EOFError):
                problem = "cannot be read"
        warn(f"checkpoint shard {path} {problem}; recomputing it")
        self.shards[i] = {"index": i, "file": entry.get("file"), "sha256": None}
        return None


def open_chain(root: Path, parameters: dict, ranges: list[tuple[int, int]] | None,
               ) -> ChainCheckpoint:
    """The chained-solve checkpoint in `root`: the existing one if its parameters match
    (CheckpointRefused otherwise), else a new one for `ranges`."""
    root = Path(root)
    path = root / MANIFEST
    data = read_manifest(root, FORMAT, "a checkpoint of a chained solve")
    if data is not None:
        check_parameters(root, data.get("parameters", {}), parameters)
        try:
            stored = [(int(a), int(b)) for a, b in data["ranges"]]
            shards = [dict(s) for s in data["shards"]]
        except (KeyError, TypeError, ValueError):
            raise CheckpointRefused(f"checkpoint {path} is damaged; remove it") from None
        if ranges is not None and stored != ranges:
            raise CheckpointRefused(
                f"checkpoint {root} was written for {len(stored)} level ranges, not "
                f"{len(ranges)}; use another directory"
            )
        if len(shards) != len(stored):
            raise CheckpointRefused(f"checkpoint {path} is damaged; remove it")
        for stale in root.glob(".*.tmp"):
            stale.unlink(missing_ok=True)
        return ChainCheckpoint(root, dict(parameters), stored, shards)
    if ranges is None:
        raise InputError("internal: a new chained-solve checkpoint needs its ranges")
    root.mkdir(parents=True, exist_ok=True)
    cp = ChainCheckpoint(root, dict(parameters), list(ranges),
                         [{"index": i, "file": None, "sha256": None}
                          for i in range(len(ranges))])
    cp.save_manifest()
    return cp


# ------------------------------------------------------------------------------ driver

def add_stats(total: dict, part: dict) -> None:
    """Fold one shard's statistics into the running total (sums; the peak is a maximum)."""
    for k in STAT_KEYS:
        if k == "peak_bits_bytes":
            total[k] = max(total.get(k, 0), int(part[k]))
        else:
            total[k] = total.get(k, 0) + int(part[k])


def run_solve(
    n: int,
    rules: str | RuleSet = "standard",
    players: int = 2,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    checkpoint_dir: str | Path | None = None,
    shards: int | None = None,
    progress: bool = False,
    threads: int | None = None,
    on_shard=None,  # noqa: ANN001 - callable(i) after shard i is stored
    stall_timeout: float | None = None,
) -> SolveResult:
    """`solve.solve(n, rules, players)` as a chain of level-range shards (module docstring).

    stats adds shards_total / shards_computed / shards_reused / shards_rejected and the
    backend.  Each shard is awaited with a `backend.Watchdog`: no worker and no finished
    shard for `stall_timeout` seconds (None: $ZECKENUM_STALL_TIMEOUT, else 600) raises
    `ClusterStalled` (exit 7), the checkpoint kept.
    """
    stall = stall_seconds(stall_timeout)
    n = check_n(n)
    check_players(players)
    ruleset = get_rules(rules)
    t0 = time.perf_counter()
    space = build_space(ruleset.instantiate(n))
    wanted = {"kind": "solve", "rules": ruleset.name, "rules_hash": ruleset.content_hash(),
              "n": n, "players": players, "version": __version__}
    explicit = shards is not None
    ranges = plan_ranges(space, shards)
    cp = None
    if checkpoint_dir is not None:
        root = Path(checkpoint_dir)
        fresh = not (root / MANIFEST).exists()
        cp = open_chain(root, wanted, ranges if (explicit or fresh) else None)
        ranges = cp.ranges
    outputs: list[tuple[dict, dict] | None] = [None] * len(ranges)
    reused = rejected = computed = 0
    if cp is not None:
        for i in range(len(ranges)):
            had = bool(cp.shards[i].get("sha256"))
            outputs[i] = cp.load_shard(i)
            reused += outputs[i] is not None
            rejected += had and outputs[i] is None
        cp.save_manifest()
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(ranges), initial=reused, unit="shard", desc=f"solve n={n}")
    try:
        todo = [i for i, out in enumerate(outputs) if out is None]
        with contextlib.ExitStack() as stack:  # no pool (nor cluster) when all are reused
            pool = stack.enter_context(open_pool(workers, scheduler, threads or 1,
                                                 warm=("solve",))) if todo else None
            watch = Watchdog(pool, stall, kept_note(checkpoint_dir)) if todo else None
            for i in todo:
                lo, hi = ranges[i]
                prev = {} if i == 0 else outputs[i - 1][0]
                fut = pool.submit(sweep_classes_task, ruleset, n, players, lo, hi, prev)
                boundary, stats = watch.result(fut)
                outputs[i] = (boundary, stats)
                computed += 1
                if cp is not None:
                    cp.save_shard(i, boundary, stats)
                if bar is not None:
                    bar.update(1)
                if on_shard is not None:
                    on_shard(i)
    finally:
        if bar is not None:
            bar.close()
    total: dict = {}
    for _, stats in outputs:
        add_stats(total, stats)
    total["reach_pass"] = needs_reach(ruleset)
    res = solve_result(n, space, players, outputs[-1][0], total, time.perf_counter() - t0)
    res.stats.update({
        "backend": "dask" if (workers or scheduler) else "in-process",
        "shards_total": len(ranges), "shards_computed": computed, "shards_reused": reused,
        "shards_rejected": rejected,
    })
    return res


__all__ = ["plan_ranges", "run_solve", "sweep_classes_task"]
