"""Checkpoints: every finished shard on disk, so a rerun resumes instead of starting over.

Layout of a checkpoint directory (one n of one kind of run: a count, or random play):

    manifest.json        parameters, the shard plan, the first sweep's facts, the columns
                         of a shard, and per shard its file name, SHA-256, word updates
                         (null until it is done)
    shard-0000.npy ...   residues of one block (numpy .npy, int64, primes in the block x
                         columns: longest + 1 lengths for a count or a length law, the
                         players for win probabilities)

Every file is written atomically: a temporary file in the same directory, flushed and
fsync'ed, then renamed over the final name (and the directory fsync'ed), so a crash leaves
either the old or the new file, never a torn one.  A rerun first compares the parameters
(the kind of run -- "count" or "random" -- and its own parameters such as the random
model, the players and winners-only; the rule set name and content hash, n, prime offset,
code version); a directory from other parameters is refused (`CheckpointRefused`), so a
count's directory is never reused by random play or the other way round.  Then each
finished shard is re-read and checked (SHA-256, shape against the kind's column count,
residues below their primes): a corrupt, truncated or swapped file is reported with a
warning line and recomputed, never used.
"""

from __future__ import annotations

import hashlib
import io
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from ..safeio import write_atomic  # noqa: F401 - re-exported for table and solve_chain
from .errors import CheckpointRefused
from .plan import ShardPlan

MANIFEST = "manifest.json"
FORMAT = "zeckenum-shards/1"


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def array_bytes(a: np.ndarray) -> bytes:
    """The .npy bytes of an array (no pickling)."""
    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(a), allow_pickle=False)
    return buf.getvalue()


def warn(message: str) -> None:
    """One warning line on stderr."""
    print(f"zeckenum: warning: {message}", file=sys.stderr, flush=True)


COUNT_KIND = {"kind": "count"}
"""The kind parameters of a count (and of every manifest written before kinds existed)."""


def parameters(plan: ShardPlan, kind: dict | None = None) -> dict:
    """What must match for a checkpoint to be reused: the kind of run first ("kind" and the
    kind's own parameters, default a count), then rule set, n, prime offset and version."""
    kind = COUNT_KIND if kind is None else kind
    return {
        "kind": kind["kind"],
        "rules": plan.rules,
        "rules_hash": plan.rules_hash,
        "n": plan.n,
        "prime_offset": plan.prime_offset,
        "version": __version__,
        **{k: v for k, v in kind.items() if k != "kind"},
    }


@dataclass
class Checkpoint:
    """A checkpoint directory of one sharded run: its plan, facts and finished shards.

    kind     the kind parameters ({"kind": "count"} or e.g. {"kind": "random", "model": ..,
             "players": .., "winners_only": ..})
    columns  residues per prime of every shard (None: a count's longest + 1 from facts)
    """

    root: Path
    plan: ShardPlan
    facts: dict
    shards: list[dict] = field(default_factory=list)
    kind: dict = field(default_factory=lambda: dict(COUNT_KIND))
    columns: int | None = None

    @property
    def shard_columns(self) -> int:
        """Residues per prime that every shard file must hold."""
        if self.columns is not None:
            return int(self.columns)
        return int(self.facts["longest"]) + 1

    @property
    def manifest_path(self) -> Path:
        return self.root / MANIFEST

    def shard_name(self, i: int) -> str:
        return f"shard-{i:04d}.npy"

    def to_dict(self) -> dict:
        return {
            "format": FORMAT,
            "parameters": parameters(self.plan, self.kind),
            "check_prime": str(self.plan.check_prime),
            "primes": [str(p) for p in self.plan.primes],
            "plan": self.plan.to_dict(),
            "facts": self.facts,
            "columns": self.shard_columns,
            "shards": self.shards,
        }

    def save_manifest(self) -> None:
        text = json.dumps(self.to_dict(), indent=1) + "\n"
        write_atomic(self.manifest_path, text.encode())

    def save_shard(self, i: int, residues: np.ndarray, updates: int) -> None:
        """Write shard i's residues atomically, then record its checksum in the manifest."""
        data = array_bytes(residues.astype(np.int64, copy=False))
        name = self.shard_name(i)
        write_atomic(self.root / name, data)
        self.shards[i] = {
            "index": i, "file": name, "sha256": sha256_bytes(data), "word_updates": int(updates),
        }
        self.save_manifest()

    def load_shard(self, i: int) -> np.ndarray | None:
        """Shard i's residues if its file is present and passes every check, else None.

        A shard that the manifest lists as done but whose file is missing, fails its
        SHA-256, has the wrong shape or holds a residue outside [0, p) is reported with
        one warning line and forgotten (it will be recomputed).
        """
        entry = self.shards[i]
        if not entry.get("sha256"):
            return None
        path = self.root / entry["file"]
        residues = None
        data, problem = read_verified(path, entry["sha256"])
        if data is not None:
            try:
                residues = np.load(io.BytesIO(data), allow_pickle=False)
            except (ValueError, OSError, EOFError):
                problem = "cannot be read as an array"
        if residues is not None:
            block = np.asarray(self.plan.blocks[i], dtype=np.int64)
            shape = (block.size, self.shard_columns)
            if residues.dtype != np.int64 or residues.shape != shape:
                problem = f"has shape {residues.shape}, expected {shape}"
            elif residues.size and (
                residues.min() < 0 or np.any(residues >= block[:, None])
            ):
                problem = "holds residues outside [0, p)"
        if problem is not None:
            warn(f"checkpoint shard {path} {problem}; recomputing it")
            self.shards[i] = blank_entry(i)
            return None
        return residues


def blank_entry(i: int) -> dict:
    return {"index": i, "file": f"shard-{i:04d}.npy", "sha256": None, "word_updates": None}


def read_verified(path: Path, sha256: str) -> tuple[bytes | None, str | None]:
    """(the bytes of `path`, None) when it exists and has this SHA-256, else (None, what is
    wrong with it, as the end of a sentence)."""
    try:
        data = path.read_bytes()
    except OSError:
        return None, "is missing"
    if sha256_bytes(data) != sha256:
        return None, "fails its SHA-256 check (corrupt, truncated or swapped)"
    return data, None


def read_manifest(root: Path, fmt: str = FORMAT,
                  what: str = "a zeckenum shard checkpoint") -> dict | None:
    """The manifest of `root` in format `fmt`, None if there is none; CheckpointRefused if
    it is unreadable or of another format (`what` names the expected kind of checkpoint)."""
    path = Path(root) / MANIFEST
    if not path.exists():
        return None
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise CheckpointRefused(
            f"checkpoint {path} cannot be read ({exc.__class__.__name__}); "
            "remove it or use another directory"
        ) from None
    if not isinstance(data, dict) or data.get("format") != fmt:
        raise CheckpointRefused(f"{path} is not {what}; use another directory")
    return data


def check_parameters(root: Path, stored: dict, wanted: dict) -> None:
    """CheckpointRefused naming the first parameter that differs (a manifest without a kind
    was written by a count)."""
    for key, value in wanted.items():
        have = stored.get(key, COUNT_KIND.get(key))
        if have != value:
            raise CheckpointRefused(
                f"checkpoint {root} was written for {key}={have!r}, "
                f"not {key}={value!r}; use another directory (or remove it)"
            )


def open_existing(root: Path, wanted: dict, plan: ShardPlan | None = None) -> Checkpoint | None:
    """The checkpoint in `root` if it matches `wanted` parameters, None if there is none.

    `plan`, when given, must equal the stored plan (an explicitly different blocking is
    refused too); otherwise the stored plan is reused as it is.  The checkpoint's kind is
    taken from `wanted` (its "kind" and the keys `parameters` adds after "version"); set
    `columns` on it before loading shards of a kind other than a count.
    """
    data = read_manifest(root)
    if data is None:
        return None
    check_parameters(root, data.get("parameters", {}), wanted)
    try:
        stored = ShardPlan.from_dict(data["plan"])
        shards = list(data["shards"])
        facts = dict(data["facts"])
    except (KeyError, TypeError, ValueError):
        raise CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged; remove it") from None
    if plan is not None and plan != stored:
        raise CheckpointRefused(
            f"checkpoint {root} was written for another shard plan "
            f"({len(stored.blocks)} blocks of primes, not {len(plan.blocks)}); "
            "use another directory"
        )
    if len(shards) != len(stored.blocks):
        raise CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged; remove it")
    for stale in Path(root).glob(".*.tmp"):  # left by a client killed while writing
        stale.unlink(missing_ok=True)
    base = set(parameters(stored))
    kind = {"kind": wanted.get("kind", "count"),
            **{k: v for k, v in wanted.items() if k not in base}}
    return Checkpoint(root=Path(root), plan=stored, facts=facts, shards=shards, kind=kind)


def create(
    root: Path, plan: ShardPlan, facts: dict, kind: dict | None = None,
    columns: int | None = None,
) -> Checkpoint:
    """A new checkpoint for `plan` in `root` (created if needed), manifest written.

    kind: the kind parameters (default a count); columns: residues per prime of a shard
    (default a count's longest + 1)."""
    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    cp = Checkpoint(
        root=root, plan=plan, facts=facts,
        shards=[blank_entry(i) for i in range(len(plan.blocks))],
        kind=dict(COUNT_KIND if kind is None else kind), columns=columns,
    )
    cp.save_manifest()
    return cp
