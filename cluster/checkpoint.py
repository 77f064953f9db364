"""Checkpoints: every finished shard on disk, so a rerun resumes instead of starting over.

Layout of a checkpoint directory (one n of one kind of run: a count, or random play):

    manifest.json        parameters, the canonical rule-file text of the rule set, the shard
                         plan, the first sweep's facts, the columns of a shard, and per shard
                         its file name, SHA-256, word updates (null until it is done)
    shard-0000.npy ...   residues of one block (numpy .npy, int64, primes in the block x
                         columns: longest + 1 lengths for a count or a length law, the
                         players for win probabilities)

Every file is written atomically (`safeio.write_atomic`: a temporary file in the same
directory, fsync'ed, renamed over the final name), so a crash leaves either the old or the
new file, never a torn one; a write that fails (disk full) leaves no temporary file, keeps
every shard written before, and stops the run with `OutputError` (exit 6).

Trust rules.  Nothing in a manifest is believed; it is compared with what the run
recomputes, and any difference refuses the directory (`CheckpointRefused`, one line naming
the field and both values).  The reading, writing and checks every checkpoint shares
(format tag, rule text and hash, parameters, shard entries, atomic writes) are those of
`manifest`; this module adds what is particular to shards of primes:

* the manifest is a regular file inside the directory, read with a size cap
  (`manifest.MANIFEST_MAX_BYTES`), nested at most `manifest.MAX_JSON_DEPTH` deep, a JSON
  object of format `FORMAT`; every value read from it is type-checked (a bool is not an
  int, 3.0 is not 3);
* parameters (the kind of run -- "count" or "random" -- and its own parameters such as the
  random model, the players and winners-only; the rule set name and content hash, n, prime
  offset, code version) equal the requested ones, so a count's directory is never reused
  by random play or the other way round;
* the recorded rule-file text (`rulefile.format_rules`) parses back to the recorded content
  hash (`rulefile.rules_from_text`), which equals the requested rule set's;
* the first sweep is run again (`open_existing` only parses; `Stored.verify` compares once
  the run's own first sweep has answered, on a worker on a cluster): every result-bearing
  fact (`kinds.ShardKind.fact_keys`) equals the recomputed one, and from then on only the
  recomputed facts are used (columns of a shard, lengths, states, denominator);
* the primes and the check prime equal the ones the planner derives from the recomputed
  facts and the prime offset; the blocks are `core.blocks.split_evenly` of exactly those primes
  into some number of blocks (the planner's split, or an explicitly different blocking
  asked for earlier);
* every shard entry names its canonical file (`shard-<i>.npy`); any other name (`../x`, an
  absolute path, another shard's file) refuses the directory.

A count by evaluation points (`plan.PointsPlan`) keeps the same layout: its parameters
add route "points" (a prime-block manifest has no route and reads as "windows", so either
resumed as the other is refused by `manifest.check_parameters`), its plan records the
route, N ("points", also the manifest's "columns") and the points per shard, and must
equal the recomputed plan exactly (another shard shape is refused with one line); a shard
file holds the int64 values of one (prime, block of points), shape (hi - lo,), each below
its prime.

A shard file itself may be damaged without anyone editing the manifest: each finished shard
is re-read with `safeio.member` (a regular file inside the directory, not a symlink) and
`safeio.read_regular` capped at its exact expected size, then checked (SHA-256, shape and
dtype against the recomputed column count, residues below their primes); a missing,
corrupt, truncated, swapped or non-regular file (FIFO, device, symlink, directory) is
reported with one warning line and recomputed, never used and never opened blocking.
"""

from __future__ import annotations

import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from zeckenum import __version__
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.cluster.manifest import (
    _MISSING,
    MANIFEST,
    ManifestDir,
    check_entries,
    damaged,
    is_int,
    open_manifest,
    read_verified,
    refuse_folders_in_the_way,
    remove_stale,
    rules_text,
    same,
    short,
    warn,
)
from zeckenum.cluster.plan import AnyPlan, PointsPlan, ShardPlan, split_evenly
from zeckenum.errors import OutputError
from zeckenum.rules.model import RuleSet

FORMAT = "zeckenum-shards/1"
NPY_HEADER_MAX = 4096
"""Bytes of a .npy header at most (numpy writes 128 for our shapes)."""


def array_bytes(a: np.ndarray) -> bytes:
    """The .npy bytes of an array (no pickling)."""
    buf = io.BytesIO()
    np.save(buf, np.ascontiguousarray(a), allow_pickle=False)
    return buf.getvalue()


def npy_bytes(shape: tuple[int, ...], dtype: str = "<i8") -> int:
    """Exact size of the .npy file `np.save` writes for a C-ordered array of this shape."""
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        buf, {"descr": dtype, "fortran_order": False, "shape": tuple(shape)})
    return len(buf.getvalue()) + int(np.prod(shape, dtype=np.int64)) * np.dtype(dtype).itemsize


COUNT_KIND = {"kind": "count"}
"""The kind parameters of a count (and of every manifest written before kinds existed)."""


def parameters(plan: AnyPlan, kind: dict | None = None) -> dict:
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
class Checkpoint(ManifestDir):
    """A checkpoint directory of one sharded run: its plan, facts and finished shards.

    Invariant: `plan` and `facts` are the run's own (recomputed), never read from disk; a
    resumed checkpoint reaches this class only through `Stored.verify`.

    kind        the kind parameters ({"kind": "count"} or e.g. {"kind": "random", "model":
                .., "players": .., "winners_only": ..})
    columns     residues per prime of every shard (None: a count's longest + 1 from facts)
    rules_text  the canonical rule-file text of the rule set (`rulefile.format_rules`)
    """

    root: Path
    plan: AnyPlan
    facts: dict
    shards: list[dict] = field(default_factory=list)
    kind: dict = field(default_factory=lambda: dict(COUNT_KIND))
    columns: int | None = None
    rules_text: str = ""

    @property
    def shard_columns(self) -> int:
        """Residues per prime that every shard file must hold."""
        if self.columns is not None:
            return int(self.columns)
        return int(self.facts["longest"]) + 1

    FORMAT = FORMAT

    @property
    def manifest_path(self) -> Path:
        return self.root / MANIFEST

    def shard_name(self, i: int) -> str:
        return shard_name(i)

    def manifest_fields(self) -> dict:
        return {
            "parameters": parameters(self.plan, self.kind),
            "rules_text": self.rules_text,
            "check_prime": str(self.plan.check_prime),
            "primes": [str(p) for p in self.plan.primes],
            "plan": self.plan.to_dict(),
            "facts": self.facts,
            "columns": self.shard_columns,
            "shards": self.shards,
        }

    def save_shard(self, i: int, residues: np.ndarray, updates: int) -> None:
        """Write shard i's residues atomically, then record its checksum in the manifest."""
        data = array_bytes(residues.astype(np.int64, copy=False))
        name = self.shard_name(i)
        sha = self.save_member(name, data)
        self.shards[i] = {"index": i, "file": name, "sha256": sha, "word_updates": int(updates)}
        self.save_manifest()

    def load_shard(self, i: int) -> np.ndarray | None:
        """Shard i's residues if its file is present and passes every check, else None.

        A shard that the manifest lists as done but whose file is missing, not a regular
        file inside the directory, fails its SHA-256, has the wrong shape or dtype or holds
        a residue outside [0, p) is reported with one warning line and forgotten (it will
        be recomputed).
        """
        entry = self.shards[i]
        if not entry.get("sha256"):
            return None
        moduli = self.plan.shard_moduli(i)
        shape = self.plan.shard_shape(i, self.shard_columns)
        name = self.shard_name(i)
        path = self.root / name
        residues = None
        data, problem = read_verified(self.root, name, entry["sha256"], npy_bytes(shape),
                                      f"a shard that has shape {shape}")
        if data is not None:
            try:
                residues = np.load(io.BytesIO(data), allow_pickle=False)
            except (ValueError, OSError, EOFError):
                problem = "cannot be read as an array"
        if residues is not None:
            if residues.dtype != np.int64 or residues.shape != shape:
                problem = f"has shape {residues.shape}, expected {shape}"
                residues = None
            elif residues.size and (
                residues.min() < 0 or np.any(residues >= moduli)
            ):
                problem = "holds residues outside [0, p)"
                residues = None
        if residues is None:
            warn(f"checkpoint shard {path} {problem}; recomputing it")
            self.shards[i] = blank_entry(i)
            return None
        return residues


def shard_name(i: int) -> str:
    """The only file name shard i may have."""
    return f"shard-{i:04d}.npy"


def blank_entry(i: int) -> dict:
    return {"index": i, "file": shard_name(i), "sha256": None, "word_updates": None}


def _word_updates_ok(x: object) -> bool:
    return is_int(x) and 0 <= x < 2**63


@dataclass
class Stored:
    """A manifest whose parameters, rule text and shard names passed; its plan, facts and
    columns are still unverified until `verify` compares them with the recomputed ones."""

    root: Path
    data: dict
    shards: list[dict]

    def verify(self, kind: dict, facts: dict, fact_keys: tuple[str, ...], fresh: AnyPlan,
               columns: int, ruleset: RuleSet) -> Checkpoint:
        """The checkpoint to resume, built from the recomputed `facts` (`to_dict` form) and
        the recomputed plan `fresh` (its primes, check prime and game; the blocking of a
        prime-block plan is ignored, a points plan must be the same): CheckpointRefused on
        any result-bearing fact, prime, check prime, block split, shard shape or column
        count that differs from the manifest's."""
        root, data = self.root, self.data
        stored_facts = data.get("facts")
        if not isinstance(stored_facts, dict):
            raise damaged(root, "facts")
        for key in fact_keys:
            have = stored_facts.get(key, _MISSING)
            if not same(have, facts[key]):
                raise CheckpointRefused(
                    f"checkpoint {root} records facts.{key}="
                    f"{'(missing)' if have is _MISSING else short(have)}, but the first "
                    f"sweep gives {key}={short(facts[key])}; use another directory")
        plan = data.get("plan")
        if not isinstance(plan, dict):
            raise damaged(root, "plan")
        for key in ("rules", "rules_hash", "n", "prime_offset"):
            if not same(plan.get(key), getattr(fresh, key)):
                raise CheckpointRefused(
                    f"checkpoint {root} records plan.{key}={short(plan.get(key))}, "
                    f"not {getattr(fresh, key)!r}; use another directory")
        want_primes = [str(p) for p in fresh.primes]
        want_check = str(fresh.check_prime)
        for where, doc in (("plan.", plan), ("", data)):
            if not same(doc.get("primes"), want_primes):
                raise CheckpointRefused(
                    f"checkpoint {root} records {where}primes={short(doc.get('primes'))}, "
                    f"but the recomputed primes are {short(want_primes)}; "
                    "use another directory")
            if not same(doc.get("check_prime"), want_check):
                raise CheckpointRefused(
                    f"checkpoint {root} records {where}check_prime="
                    f"{short(doc.get('check_prime'))}, but the recomputed check prime is "
                    f"{want_check}; use another directory")
        verified: AnyPlan
        if isinstance(fresh, PointsPlan):
            verified = same_points_plan(root, plan, fresh)
        else:
            verified = prime_block_plan(root, plan, fresh)
        nb = len(verified.blocks)
        if not same(data.get("columns"), columns):
            raise CheckpointRefused(
                f"checkpoint {root} records columns={short(data.get('columns'))}, but the "
                f"first sweep gives columns={columns}; use another directory")
        shards = check_entries(root, self.shards, nb, shard_name,
                               {"word_updates": _word_updates_ok})
        shards = [e if e["sha256"] else blank_entry(i) for i, e in enumerate(shards)]
        refuse_folders_in_the_way(root, [shard_name(i) for i in range(nb)])
        remove_stale(root)
        return Checkpoint(root=root, plan=verified, facts=dict(facts), shards=shards,
                          kind=dict(kind), columns=columns, rules_text=rules_text(ruleset))


def prime_block_plan(root: Path, plan: dict, fresh: ShardPlan) -> ShardPlan:
    """The plan of a prime-block manifest: `fresh` with the manifest's blocking, refused
    unless that blocking is an even split of exactly the recomputed primes (and the plan
    records no other route)."""
    if "route" in plan and not same(plan["route"], ShardPlan.route):
        raise CheckpointRefused(
            f"checkpoint {root} records plan.route={short(plan['route'])}, not "
            f"{ShardPlan.route!r}; use another directory")
    allp = fresh.all_primes
    blocks = plan.get("blocks")
    nb = len(blocks) if isinstance(blocks, list) else 0
    split = split_evenly(allp, nb) if 1 <= nb <= len(allp) else None
    if split is None or not same(blocks, [[str(p) for p in b] for b in split]):
        raise CheckpointRefused(
            f"checkpoint {root} records plan.blocks that are not an even split of the "
            f"{len(allp)} recomputed primes (check prime last); use another directory")
    return ShardPlan(rules=fresh.rules, rules_hash=fresh.rules_hash, n=fresh.n,
                     prime_offset=fresh.prime_offset, primes=fresh.primes,
                     check_prime=fresh.check_prime, blocks=split)


def _canonical(value: object) -> str:
    """JSON text that tells types apart (true is not 1, 3.0 is not 3), keys sorted."""
    return json.dumps(value, sort_keys=True)


def same_points_plan(root: Path, plan: dict, fresh: PointsPlan) -> PointsPlan:
    """`fresh` when the manifest's plan is exactly its JSON form (route, N, points per
    shard, blocks), else CheckpointRefused naming the first field that differs."""
    want = fresh.to_dict()
    for key in ("route", "points", "points_per_shard", *want):
        if _canonical(plan.get(key)) != _canonical(want[key]):
            what = ("another shard shape" if key in ("points", "points_per_shard", "blocks")
                    else "another plan")
            raise CheckpointRefused(
                f"checkpoint {root} records plan.{key}={short(plan.get(key))}, not "
                f"{short(want[key])} ({what}); use another directory")
    extra = sorted(set(plan) - set(want), key=str)
    if extra:
        raise CheckpointRefused(f"checkpoint {root} records plan.{short(extra[0])}, which a "
                                "points plan does not have; use another directory")
    return fresh


def open_existing(root: Path, wanted: dict, ruleset: RuleSet | None = None) -> Stored | None:
    """The manifest in `root` if its parameters match `wanted` (and, with `ruleset`, its
    rule-file text that rule set), None if there is none; CheckpointRefused otherwise.

    Only what needs no first sweep is checked here; `Stored.verify` checks the rest against
    the recomputed facts and plan before any shard is reused.
    """
    root = Path(root)
    opened = open_manifest(root, FORMAT, "a zeckenum shard checkpoint", wanted, ruleset)
    if opened is None:
        return None
    data, _ = opened
    shards = data.get("shards")
    if not isinstance(shards, list):
        raise damaged(root, "shards")
    return Stored(root=root, data=data, shards=shards)


def create(
    root: Path, plan: AnyPlan, facts: dict, kind: dict | None = None,
    columns: int | None = None, ruleset: RuleSet | None = None,
) -> Checkpoint:
    """A new checkpoint for `plan` in `root` (created if needed), manifest written.

    kind: the kind parameters (default a count); columns: residues per prime of a shard
    (default a count's longest + 1); ruleset: the rule set whose canonical text the
    manifest records (without it a rerun refuses the directory)."""
    root = Path(root)
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create checkpoint directory {root}: "
                          f"{exc.strerror or exc}") from None
    cp = Checkpoint(
        root=root, plan=plan, facts=facts,
        shards=[blank_entry(i) for i in range(len(plan.blocks))],
        kind=dict(COUNT_KIND if kind is None else kind), columns=columns,
        rules_text=rules_text(ruleset) if ruleset is not None else "",
    )
    cp.save_manifest()
    return cp

