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
the field and both values):

* the manifest is a regular file inside the directory, read with a size cap
  (`MANIFEST_MAX_BYTES`), nested at most `MAX_JSON_DEPTH` deep, a JSON object of format
  `FORMAT`; every value read from it is type-checked (a bool is not an int, 3.0 is not 3);
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

A shard file itself may be damaged without anyone editing the manifest: each finished shard
is re-read with `safeio.member` (a regular file inside the directory, not a symlink) and
`safeio.read_regular` capped at its exact expected size, then checked (SHA-256, shape and
dtype against the recomputed column count, residues below their primes); a missing,
corrupt, truncated, swapped or non-regular file (FIFO, device, symlink, directory) is
reported with one warning line and recomputed, never used and never opened blocking.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
import stat
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from zeckenum import __version__
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.cluster.plan import ShardPlan
from zeckenum.core.blocks import split_evenly
from zeckenum.errors import InputError, OutputError
from zeckenum.rules.model import RuleSet
from zeckenum.rules.rulefile import format_rules, rules_from_text
from zeckenum.safeio import (
    member,
    read_regular,
    write_atomic,  # noqa: F401 - re-exported for table and solve_chain
)

MANIFEST = "manifest.json"
FORMAT = "zeckenum-shards/1"
MANIFEST_MAX_BYTES = 64 << 20
"""Largest manifest read back (a count at the largest n has a few thousand shards)."""
MAX_JSON_DEPTH = 64
"""Deepest bracket nesting of a manifest (ours is 4 deep, 6 counting the brackets inside
its rule text); deeper is refused unparsed."""
NPY_HEADER_MAX = 4096
"""Bytes of a .npy header at most (numpy writes 128 for our shapes)."""
SHA_RE = re.compile(r"^[0-9a-f]{64}$")
_MISSING = object()


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


def npy_bytes(shape: tuple[int, ...], dtype: str = "<i8") -> int:
    """Exact size of the .npy file `np.save` writes for a C-ordered array of this shape."""
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        buf, {"descr": dtype, "fortran_order": False, "shape": tuple(shape)})
    return len(buf.getvalue()) + int(np.prod(shape, dtype=np.int64)) * np.dtype(dtype).itemsize


def warn(message: str) -> None:
    """One warning line on stderr."""
    print(f"zeckenum: warning: {message}", file=sys.stderr, flush=True)


def short(value: object, limit: int = 48) -> str:
    """repr of a value read from disk, cut to one short line."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def same(a: object, b: object) -> bool:
    """Equal and of the same type (JSON's true is not 1, 3.0 is not 3)."""
    return type(a) is type(b) and a == b


def is_int(x: object) -> bool:
    return type(x) is int


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


def write_or_stop(root: Path, path: Path, data: bytes, kept: int) -> None:
    """`write_atomic`, turning a failed write (disk full, folder gone) into one line
    (`OutputError`, exit 6) that says the finished shards are kept."""
    try:
        write_atomic(path, data)
    except OSError as exc:
        raise OutputError(
            f"could not write checkpoint file {path}: {exc.strerror or exc}; the {kept} "
            f"finished shards in {root} are kept: fix the cause (disk space?) and rerun "
            "to resume"
        ) from None


@dataclass
class Checkpoint:
    """A checkpoint directory of one sharded run: its plan, facts and finished shards.

    Invariant: `plan` and `facts` are the run's own (recomputed), never read from disk; a
    resumed checkpoint reaches this class only through `Stored.verify`.

    kind        the kind parameters ({"kind": "count"} or e.g. {"kind": "random", "model":
                .., "players": .., "winners_only": ..})
    columns     residues per prime of every shard (None: a count's longest + 1 from facts)
    rules_text  the canonical rule-file text of the rule set (`rulefile.format_rules`)
    """

    root: Path
    plan: ShardPlan
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

    @property
    def manifest_path(self) -> Path:
        return self.root / MANIFEST

    def shard_name(self, i: int) -> str:
        return shard_name(i)

    def to_dict(self) -> dict:
        return {
            "format": FORMAT,
            "parameters": parameters(self.plan, self.kind),
            "rules_text": self.rules_text,
            "check_prime": str(self.plan.check_prime),
            "primes": [str(p) for p in self.plan.primes],
            "plan": self.plan.to_dict(),
            "facts": self.facts,
            "columns": self.shard_columns,
            "shards": self.shards,
        }

    def finished(self) -> int:
        return sum(1 for e in self.shards if e.get("sha256"))

    def save_manifest(self) -> None:
        text = json.dumps(self.to_dict(), indent=1) + "\n"
        write_or_stop(self.root, self.manifest_path, text.encode(), self.finished())

    def save_shard(self, i: int, residues: np.ndarray, updates: int) -> None:
        """Write shard i's residues atomically, then record its checksum in the manifest."""
        data = array_bytes(residues.astype(np.int64, copy=False))
        name = self.shard_name(i)
        write_or_stop(self.root, self.root / name, data, self.finished())
        self.shards[i] = {
            "index": i, "file": name, "sha256": sha256_bytes(data), "word_updates": int(updates),
        }
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
        block = np.asarray(self.plan.blocks[i], dtype=np.int64)
        shape = (block.size, self.shard_columns)
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
                residues.min() < 0 or np.any(residues >= block[:, None])
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


def read_verified(root: Path, name: str, sha256: str, max_bytes: int,
                  expected: str = "") -> tuple[bytes | None, str | None]:
    """(the bytes of `root / name`, None) when it is a regular file inside `root` (not a
    symlink) of at most `max_bytes` bytes with this SHA-256, else (None, what is wrong with
    it, as the end of a sentence; `expected` describes the right file).  Never blocks on a
    FIFO, never reads past `max_bytes`."""
    path = Path(root) / name
    if not os.path.lexists(path):
        return None, "is missing"
    try:
        path = member(root, name, "checkpoint shard")
        size = os.stat(path).st_size
    except (InputError, OSError):
        return None, "is not a regular file inside the directory (symlink, FIFO, device?)"
    if size > max_bytes:
        return None, f"is {size} bytes, more than the {max_bytes} of {expected or 'its kind'}"
    try:
        data = read_regular(path, max_bytes, "checkpoint shard")
    except InputError:
        return None, "cannot be read as a regular file of the expected size"
    if sha256_bytes(data) != sha256:
        return None, "fails its SHA-256 check (corrupt, truncated or swapped)"
    return data, None


def _depth(raw: bytes) -> int:
    """Deepest nesting of [ and { counted over all bytes (strings included: a linear-time
    guard before json.loads; our strings hold balanced brackets, so the count exceeds the
    true depth by at most a few)."""
    arr = np.frombuffer(raw, dtype=np.uint8)
    step = (np.isin(arr, (ord("["), ord("{"))).astype(np.int64)
            - np.isin(arr, (ord("]"), ord("}"))).astype(np.int64))
    return int(np.cumsum(step).max()) if step.size else 0


def read_manifest(root: Path, fmt: str = FORMAT,
                  what: str = "a zeckenum shard checkpoint") -> dict | None:
    """The manifest of `root` in format `fmt`, None if there is none; CheckpointRefused (one
    line) if it is not a regular file inside `root`, too large, too deeply nested, not
    JSON, not an object or of another format (`what` names the expected kind)."""
    root = Path(root)
    path = root / MANIFEST
    if not os.path.lexists(path):
        return None
    try:
        raw = read_regular(member(root, MANIFEST, "checkpoint manifest"),
                           MANIFEST_MAX_BYTES, "checkpoint manifest")
    except InputError as exc:
        raise CheckpointRefused(f"{exc}; remove it or use another directory") from None
    try:
        if _depth(raw) > MAX_JSON_DEPTH:
            raise ValueError("nested too deeply")
        data = json.loads(raw.decode("utf-8"))
    except (ValueError, RecursionError, UnicodeDecodeError) as exc:
        raise CheckpointRefused(
            f"checkpoint {path} cannot be read ({exc.__class__.__name__}); "
            "remove it or use another directory"
        ) from None
    if not isinstance(data, dict) or not same(data.get("format"), fmt):
        raise CheckpointRefused(f"{path} is not {what}; use another directory")
    return data


def check_parameters(root: Path, stored: object, wanted: dict) -> None:
    """CheckpointRefused naming the first parameter that differs in value or type (a
    manifest without a kind was written by a count)."""
    if not isinstance(stored, dict):
        raise CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged (parameters); "
                                "remove it")
    for key, value in wanted.items():
        have = stored.get(key, COUNT_KIND.get(key))
        if not same(have, value):
            raise CheckpointRefused(
                f"checkpoint {root} was written for {key}={short(have)}, "
                f"not {key}={value!r}; use another directory (or remove it)"
            )


def rules_text(ruleset: RuleSet) -> str:
    """The canonical rule-file text a checkpoint records for `ruleset`."""
    return format_rules(ruleset)


def check_rules_text(root: Path, data: dict, ruleset: RuleSet) -> str:
    """The manifest's rule-file text, refused unless it parses back to the requested rule
    set's content hash (the recorded parameters hash was already compared with it)."""
    text = data.get("rules_text", _MISSING)
    want = ruleset.content_hash()
    if not isinstance(text, str) or not text:
        raise CheckpointRefused(
            f"checkpoint {root} records no rule file (rules_text); use another directory")
    try:
        got = rules_from_text(text, where=f"checkpoint {root} rules_text").content_hash()
    except InputError as exc:
        first = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
        raise CheckpointRefused(f"{first}; use another directory") from None
    if got != want:
        raise CheckpointRefused(
            f"checkpoint {root} records a rule file of content hash {got}, not {want} "
            "(the rule set asked for); use another directory")
    return text


def _damaged(root: Path, what: str) -> CheckpointRefused:
    return CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged ({what}); remove it")


def check_entries(root: Path, entries: object, count: int | None, name_of,  # noqa: ANN001
                  extra: dict | None = None) -> list[dict]:
    """The shard entries of a manifest, each {"index": i, "file": name_of(i), "sha256": hex
    or None, ...}; CheckpointRefused on a wrong type, a count other than `count`, or a file
    name other than the canonical one (`safeio.member` first: `../x`, absolute paths and
    names with folders are refused as outside the directory).  `extra` maps further keys
    to a check(value) -> bool for finished entries."""
    if not isinstance(entries, list) or (count is not None and len(entries) != count):
        raise _damaged(root, "shards")
    out = []
    for i, e in enumerate(entries):
        if not isinstance(e, dict) or not same(e.get("index"), i):
            raise _damaged(root, f"shard entry {i}")
        sha = e.get("sha256")
        if sha is None:
            out.append({**e, "sha256": None})
            continue
        if not isinstance(sha, str) or not SHA_RE.match(sha):
            raise _damaged(root, f"shard {i} sha256={short(sha)}")
        name = e.get("file")
        if name != name_of(i):  # the canonical name's file is checked when it is read
            try:
                member(root, name, "checkpoint shard")
            except InputError as exc:
                raise CheckpointRefused(f"{exc}; use another directory") from None
            raise CheckpointRefused(
                f"checkpoint {root} names file {short(name)} for shard {i}, "
                f"not {name_of(i)!r}; use another directory")
        for key, ok in (extra or {}).items():
            if not ok(e.get(key)):
                raise _damaged(root, f"shard {i} {key}={short(e.get(key))}")
        out.append(dict(e))
    return out


def refuse_folders_in_the_way(root: Path, names: list[str]) -> None:
    """CheckpointRefused when a shard's file name is taken by a directory (the shard could
    be neither read nor written; a FIFO, device or symlink there is simply replaced)."""
    for name in names:
        try:
            mode = os.lstat(Path(root) / name).st_mode
        except OSError:
            continue
        if stat.S_ISDIR(mode):
            raise CheckpointRefused(f"checkpoint shard {Path(root) / name} is a directory; "
                                    "remove it or use another directory")


def remove_stale(root: Path) -> None:
    """Remove temporary files a killed client left behind (regular files only)."""
    for stale in Path(root).glob(".*.tmp"):
        try:
            if stat.S_ISREG(os.lstat(stale).st_mode):
                stale.unlink()
        except OSError:
            pass


def _word_updates_ok(x: object) -> bool:
    return is_int(x) and 0 <= x < 2**63


@dataclass
class Stored:
    """A manifest whose parameters, rule text and shard names passed; its plan, facts and
    columns are still unverified until `verify` compares them with the recomputed ones."""

    root: Path
    data: dict
    shards: list[dict]

    def verify(self, kind: dict, facts: dict, fact_keys: tuple[str, ...], fresh: ShardPlan,
               columns: int, ruleset: RuleSet) -> Checkpoint:
        """The checkpoint to resume, built from the recomputed `facts` (`to_dict` form) and
        the recomputed plan `fresh` (its primes, check prime and game; its blocking is
        ignored): CheckpointRefused on any result-bearing fact, prime, check prime, block
        split or column count that differs from the manifest's."""
        root, data = self.root, self.data
        stored_facts = data.get("facts")
        if not isinstance(stored_facts, dict):
            raise _damaged(root, "facts")
        for key in fact_keys:
            have = stored_facts.get(key, _MISSING)
            if not same(have, facts[key]):
                raise CheckpointRefused(
                    f"checkpoint {root} records facts.{key}="
                    f"{'(missing)' if have is _MISSING else short(have)}, but the first "
                    f"sweep gives {key}={short(facts[key])}; use another directory")
        plan = data.get("plan")
        if not isinstance(plan, dict):
            raise _damaged(root, "plan")
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
        allp = fresh.all_primes
        blocks = plan.get("blocks")
        nb = len(blocks) if isinstance(blocks, list) else 0
        split = split_evenly(allp, nb) if 1 <= nb <= len(allp) else None
        if split is None or not same(blocks, [[str(p) for p in b] for b in split]):
            raise CheckpointRefused(
                f"checkpoint {root} records plan.blocks that are not an even split of the "
                f"{len(allp)} recomputed primes (check prime last); use another directory")
        if not same(data.get("columns"), columns):
            raise CheckpointRefused(
                f"checkpoint {root} records columns={short(data.get('columns'))}, but the "
                f"first sweep gives columns={columns}; use another directory")
        shards = check_entries(root, self.shards, nb, shard_name,
                               {"word_updates": _word_updates_ok})
        shards = [e if e["sha256"] else blank_entry(i) for i, e in enumerate(shards)]
        refuse_folders_in_the_way(root, [shard_name(i) for i in range(nb)])
        verified = ShardPlan(rules=fresh.rules, rules_hash=fresh.rules_hash, n=fresh.n,
                             prime_offset=fresh.prime_offset, primes=fresh.primes,
                             check_prime=fresh.check_prime, blocks=split)
        remove_stale(root)
        return Checkpoint(root=root, plan=verified, facts=dict(facts), shards=shards,
                          kind=dict(kind), columns=columns, rules_text=rules_text(ruleset))


def open_existing(root: Path, wanted: dict, ruleset: RuleSet | None = None) -> Stored | None:
    """The manifest in `root` if its parameters match `wanted` (and, with `ruleset`, its
    rule-file text that rule set), None if there is none; CheckpointRefused otherwise.

    Only what needs no first sweep is checked here; `Stored.verify` checks the rest against
    the recomputed facts and plan before any shard is reused.
    """
    root = Path(root)
    data = read_manifest(root)
    if data is None:
        return None
    check_parameters(root, data.get("parameters"), wanted)
    if ruleset is not None:
        check_rules_text(root, data, ruleset)
    shards = data.get("shards")
    if not isinstance(shards, list):
        raise _damaged(root, "shards")
    return Stored(root=root, data=data, shards=shards)


def create(
    root: Path, plan: ShardPlan, facts: dict, kind: dict | None = None,
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

