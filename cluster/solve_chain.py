"""Optimal play of one n as a chain of level-range shards, checkpointed, on any backend.

Shard design.  `classify.layer_classes` classifies the layers from level 0 up to the start's
level; a layer needs only the bits of the `max_drop` layers below it.  So the levels are
cut into consecutive ranges of about equal states (`plan_ranges`), and shard i sweeps its
range starting from the *boundary* (the bits of the top max_drop + 1 layers) that shard
i - 1 returned.  `solve_tasks.layer_classes_task(rules, n, players, lo, hi, boundary)` is
the cluster twin of `classify.layer_classes`: a worker rebuilds the game's state space from
(rules, n) (and, for rule sets other than the standard game, its reachability bits, once
per process) and returns the new boundary and the range's statistics.  Only boundaries
travel: one bit per state of max_drop + 1 layers.

The shards depend on each other, so they run one after the other: a cluster does not make
one n faster (ranges of n run in parallel, one task per n, in `table`), but a long solve
survives a lost worker (Dask reruns the shard) and a lost client: every finished shard is
written atomically to the checkpoint directory with its SHA-256 in the manifest, and a
rerun reuses each verified shard, recomputing only the others (a damaged shard i is
recomputed from shard i - 1's boundary; the shards after it stay valid, since they were
computed from the boundary before it was damaged on disk).

The result is `solve.solve_result` of the last boundary and the summed statistics: equal to
`solve.solve(n, rules, players)` field by field (seconds and the peak bit memory aside).

Trust rules of a chain checkpoint (as for shard checkpoints, `checkpoint`): the manifest is
read with a size cap as a regular file; its parameters and its rule-file text must match
the requested ones; its level ranges must equal `plan_ranges` recomputed from (rules, n)
and the recorded number of shards asked for (`shards_requested`), so they tile the levels
exactly -- a gap, an overlap or any edit refuses the directory (`CheckpointRefused`); a
shard names its canonical file (`levels-<i>.npz`).  A stored boundary is read capped at its
expected size and checked before use: exactly the non-empty levels of [hi - max_drop, hi],
each a uint8 array of the layer's packed size (and players planes), statistics in range;
anything else is reported with one warning line and recomputed.
"""

from __future__ import annotations

import contextlib
import io
import time
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from zeckenum import __version__
from zeckenum.cluster.backend import Watchdog, kept_note, open_pool, stall_seconds
from zeckenum.cluster.batch import BatchSpec
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.cluster.manifest import (
    ManifestDir,
    check_entries,
    damaged,
    is_int,
    open_manifest,
    read_verified,
    refuse_folders_in_the_way,
    remove_stale,
    rules_text,
    short,
    warn,
)
from zeckenum.cluster.solve_tasks import layer_classes_task
from zeckenum.core.checks import check_n, check_players
from zeckenum.core.statespace import StateSpace, build_space
from zeckenum.errors import InputError
from zeckenum.optimal.solve import SolveResult, needs_reach, solve_result
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet
from zeckenum.safeio import check_output_dir

FORMAT = "zeckenum-solve-chain/1"
SHARD_STATES = 20_000_000
"""Default states per shard (a few seconds of work each at large n)."""

STAT_KEYS = ("states", "p_positions", "moves_examined", "peak_bits_bytes", "layers")

"""Games (rules, n) whose state space (and reachability bits) this process keeps."""


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


# ------------------------------------------------------------------------- checkpoints

def boundary_bytes(boundary: dict[int, np.ndarray], stats: dict) -> bytes:
    """One shard's file: its boundary arrays ("L<level>") and statistics, as .npz bytes."""
    buf = io.BytesIO()
    arrays = {f"L{lv}": a for lv, a in boundary.items()}
    arrays["stats"] = np.array([int(stats[k]) for k in STAT_KEYS], dtype=np.int64)
    np.savez(buf, **arrays)
    return buf.getvalue()


def read_boundary(data: bytes, max_bytes: int | None = None,
                  ) -> tuple[dict[int, np.ndarray], dict]:
    """Inverse of `boundary_bytes` (ValueError / OSError / KeyError when unreadable, or when
    its members would expand beyond `max_bytes`)."""
    if max_bytes is not None:
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            if sum(info.file_size for info in zf.infolist()) > max_bytes:
                raise ValueError("members larger than a boundary")
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        stats = dict(zip(STAT_KEYS, (int(x) for x in z["stats"]), strict=True))
        boundary = {int(k[1:]): z[k] for k in z.files if k.startswith("L")}
    return boundary, stats


def boundary_shapes(space: StateSpace, players: int, hi: int) -> dict[int, tuple[int, ...]]:
    """{level: shape} of the boundary after level hi: the non-empty levels of
    [hi - max_drop, hi], each ceil(size / 8) bytes (times `players` planes for P > 2)."""
    out = {}
    for lv in range(max(0, hi - space.max_drop), hi + 1):
        size = space.layer_size(lv)
        if size:
            nbytes = (size + 7) // 8
            out[lv] = (nbytes,) if players == 2 else (players, nbytes)
    return out


def boundary_problem(space: StateSpace, players: int, lo: int, hi: int,
                     boundary: dict[int, np.ndarray], stats: dict) -> str | None:
    """What is wrong with a stored boundary of levels lo .. hi (end of a sentence), or None
    when its levels, dtypes and shapes are exactly the expected ones and its statistics
    lie in range (layers exact, states at most the range's states)."""
    shapes = boundary_shapes(space, players, hi)
    if sorted(boundary) != sorted(shapes):
        return f"holds levels {short(sorted(boundary))}, expected {sorted(shapes)}"
    for lv, shape in shapes.items():
        a = boundary[lv]
        if a.dtype != np.uint8 or a.shape != shape:
            return f"holds level {lv} as {a.dtype} {a.shape}, expected uint8 {shape}"
    sizes = [space.layer_size(lv) for lv in range(lo, hi + 1)]
    states = sum(sizes)
    if any(not is_int(v) or v < 0 for v in stats.values()):
        return "holds negative statistics"
    if stats["layers"] != sum(1 for x in sizes if x) or stats["states"] > states or \
            stats["p_positions"] > stats["states"] or stats["peak_bits_bytes"] >= 2**62:
        return "holds statistics outside their range"
    return None


def chain_file(i: int) -> str:
    """The only file name range i may have."""
    return f"levels-{i:04d}.npz"


@dataclass
class ChainCheckpoint(ManifestDir):
    """A checkpoint directory of one chained solve: parameters, level ranges, shards.

    Invariant: `ranges` equal `plan_ranges(space, requested)` of the run's own state
    space (checked by `open_chain`); `rules_text` is the canonical rule-file text.
    """

    root: Path
    parameters: dict
    ranges: list[tuple[int, int]]
    shards: list[dict] = field(default_factory=list)
    rules_text: str = ""
    requested: int | None = None

    FORMAT = FORMAT

    def manifest_fields(self) -> dict:
        return {"parameters": self.parameters, "rules_text": self.rules_text,
                "shards_requested": self.requested,
                "ranges": [list(r) for r in self.ranges], "shards": self.shards}

    def save_shard(self, i: int, boundary: dict[int, np.ndarray], stats: dict) -> None:
        name = chain_file(i)
        sha = self.save_member(name, boundary_bytes(boundary, stats))
        self.shards[i] = {"index": i, "file": name, "sha256": sha}
        self.save_manifest()

    def load_shard(self, i: int, space: StateSpace,
                   players: int) -> tuple[dict[int, np.ndarray], dict] | None:
        """Shard i's (boundary, stats) if its file passes every check (SHA-256, levels,
        dtypes, shapes, statistics), else None (a damaged shard is reported with one
        warning line and forgotten)."""
        entry = self.shards[i]
        if not entry.get("sha256"):
            return None
        lo, hi = self.ranges[i]
        name = chain_file(i)
        shapes = boundary_shapes(space, players, hi)
        payload = sum(int(np.prod(sh)) for sh in shapes.values()) + 8 * len(STAT_KEYS)
        cap = payload + 1024 * (len(shapes) + 2)  # .npy headers and zip records
        data, problem = read_verified(self.root, name, entry["sha256"], cap,
                                      f"a boundary of levels {lo}..{hi}")
        if data is not None:
            try:
                boundary, stats = read_boundary(data, cap)
                problem = boundary_problem(space, players, lo, hi, boundary, stats)
                if problem is None:
                    return boundary, stats
            except (ValueError, OSError, KeyError, EOFError, zipfile.BadZipFile):
                problem = "cannot be read"
        warn(f"checkpoint shard {self.root / name} {problem}; recomputing it")
        self.shards[i] = {"index": i, "file": None, "sha256": None}
        return None


def _ranges(root: Path, raw: object) -> list[tuple[int, int]]:
    if not isinstance(raw, list) or not all(
            isinstance(r, list) and len(r) == 2 and all(is_int(x) for x in r) for r in raw):
        raise damaged(root, "ranges")
    return [(r[0], r[1]) for r in raw]


def open_chain(root: Path, parameters: dict, space: StateSpace, shards: int | None,
               ruleset: RuleSet) -> ChainCheckpoint:
    """The chained-solve checkpoint in `root`: the existing one if its parameters, rule
    text and ranges match (CheckpointRefused otherwise), else a new one.

    `shards` is the number of shards asked for now (None: the stored request, or the
    default for a new checkpoint); the stored ranges must equal `plan_ranges(space,
    shards or the recorded request)` exactly.
    """
    root = Path(root)
    opened = open_manifest(root, FORMAT, "a checkpoint of a chained solve", parameters, ruleset)
    if opened is not None:
        data, text = opened
        requested = data.get("shards_requested")
        if requested is not None and not (is_int(requested) and 1 <= requested <= 2**31):
            raise CheckpointRefused(f"checkpoint {root} records shards_requested="
                                    f"{short(requested)}; use another directory")
        stored = _ranges(root, data.get("ranges"))
        want = plan_ranges(space, shards if shards is not None else requested)
        if stored != want:
            if shards is not None:
                raise CheckpointRefused(
                    f"checkpoint {root} was written for {len(stored)} level ranges, not "
                    f"{len(want)}; use another directory"
                )
            raise CheckpointRefused(
                f"checkpoint {root} records ranges={short(stored)}, but the levels "
                f"0..{space.spec.start_level} split as {short(want)}; use another directory"
            )
        entries = [e if e["sha256"] else {"index": i, "file": None, "sha256": None}
                   for i, e in enumerate(check_entries(root, data.get("shards"),
                                                       len(stored), chain_file))]
        refuse_folders_in_the_way(root, [chain_file(i) for i in range(len(stored))])
        remove_stale(root)
        return ChainCheckpoint(root, dict(parameters), stored, entries, text,
                               requested if shards is None else shards)
    root.mkdir(parents=True, exist_ok=True)
    ranges = plan_ranges(space, shards)
    cp = ChainCheckpoint(root, dict(parameters), ranges,
                         [{"index": i, "file": None, "sha256": None}
                          for i in range(len(ranges))], rules_text(ruleset), shards)
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
    scheduler: str | BatchSpec | None = None,
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
    if checkpoint_dir is not None:  # refused before any sweep when it cannot be written
        check_output_dir(checkpoint_dir, "checkpoint directory")
    t0 = time.perf_counter()
    space = build_space(ruleset.instantiate(n))
    wanted = {"kind": "solve", "rules": ruleset.name, "rules_hash": ruleset.content_hash(),
              "n": n, "players": players, "version": __version__}
    ranges = plan_ranges(space, shards)
    cp = None
    if checkpoint_dir is not None:
        cp = open_chain(Path(checkpoint_dir), wanted, space, shards, ruleset)
        ranges = cp.ranges
    outputs: list[tuple[dict, dict] | None] = [None] * len(ranges)
    reused = rejected = computed = 0
    if cp is not None:
        for i in range(len(ranges)):
            had = bool(cp.shards[i].get("sha256"))
            outputs[i] = cp.load_shard(i, space, players)
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
            if watch is not None:
                watch.bar = bar  # batch jobs running / pending beside the ranges
            for i in todo:
                lo, hi = ranges[i]
                prev = {} if i == 0 else outputs[i - 1][0]
                fut = pool.submit(layer_classes_task, ruleset, n, players, lo, hi, prev)
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
        "backend": ("batch" if isinstance(scheduler, BatchSpec)
                    else "dask" if (workers or scheduler) else "in-process"),
        "shards_total": len(ranges), "shards_computed": computed, "shards_reused": reused,
        "shards_rejected": rejected,
    })
    return res


__all__ = ["plan_ranges", "run_solve"]
