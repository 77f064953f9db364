"""The manifest shared by every checkpoint directory: shard checkpoints of sharded counts
and random play (`checkpoint`) and chain checkpoints of optimal play (`solve_chain`).

A checkpoint directory holds `manifest.json` and one file per finished shard.  What every
kind of checkpoint does with its manifest lives here, once:

* format tag: the manifest is a JSON object whose "format" names its kind of checkpoint
  (`read_manifest` refuses any other);
* untrusted input: the manifest is a regular file inside its directory (`safeio.member`),
  read with a size cap (`MANIFEST_MAX_BYTES`), nested at most `MAX_JSON_DEPTH` deep;
  values are compared by type and value (`same`: a bool is not an int, 3.0 is not 3);
  parameters must equal the requested ones (`check_parameters`); shard entries name their
  canonical file and carry a well-formed SHA-256 (`check_entries`); a shard file is read
  only as a regular file capped at its expected size and checked against its SHA-256
  (`read_verified`);
* rules text + hash: the canonical rule-file text of the rule set (`rules_text`) is
  recorded, and read back only if it parses to the requested content hash
  (`check_rules_text`); it records the start position of a game started at one, and a
  resume from another start is refused naming both (`check_start`);
* atomic writes: every file is written by `safeio.write_atomic`; a write that fails stops
  the run with one line, exit 6, the finished shards kept (`write_or_stop`);
* `ManifestDir`: the base of both checkpoint classes (finished shards, saving a member file
  and the manifest).

Every refusal is `CheckpointRefused` (bad input, exit 2) with one line naming the field.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import stat
import sys
from pathlib import Path
from typing import ClassVar

import numpy as np
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.errors import InputError, OutputError
from zeckenum.rules.model import RuleSet
from zeckenum.rules.notation import format_position
from zeckenum.rules.rulefile import format_rules, rules_from_text
from zeckenum.safeio import member, read_regular, write_atomic

MANIFEST = "manifest.json"
MANIFEST_MAX_BYTES = 64 << 20
"""Largest manifest read back (a count at the largest n has a few thousand shards)."""
MAX_JSON_DEPTH = 64
"""Deepest bracket nesting of a manifest (ours is 4 deep, 6 counting the brackets inside
its rule text); deeper is refused unparsed."""
SHA_RE = re.compile(r"^[0-9a-f]{64}$")
LEGACY_PARAMETERS = {"kind": "count", "route": "windows"}
"""How a missing parameter is read: a manifest without a kind was written by a count, one
without a route by the windowed count (prime blocks; a count by evaluation points records
route "points")."""
_MISSING = object()


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


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


def read_manifest(root: Path, fmt: str, what: str) -> dict | None:
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
    missing key is read as `LEGACY_PARAMETERS` has it: a manifest without a kind was written
    by a count, before kinds existed)."""
    if not isinstance(stored, dict):
        raise CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged (parameters); "
                                "remove it")
    for key, value in wanted.items():
        have = stored.get(key, LEGACY_PARAMETERS.get(key))
        if not same(have, value):
            raise CheckpointRefused(
                f"checkpoint {root} was written for {key}={short(have)}, "
                f"not {key}={value!r}; use another directory (or remove it)"
            )


def _start_words(ruleset: RuleSet) -> str:
    return ("the rule set's own start" if ruleset.position is None
            else f"position {format_position(ruleset.position)}")


def check_start(root: Path, data: dict, ruleset: RuleSet) -> None:
    """CheckpointRefused when the recorded rule text starts the game elsewhere than
    `ruleset` (another position, or a position against the rule set's own start): the
    start position is recorded in the manifest's rule text (`start = { position = ...}`),
    and this names it before the content hashes are compared.  Anything unreadable is
    left to `check_parameters` / `check_rules_text`."""
    text = data.get("rules_text")
    if not isinstance(text, str) or not text:
        return
    try:
        stored = rules_from_text(text, where=f"checkpoint {root} rules_text")
    except InputError:
        return
    if stored.position != ruleset.position:
        raise CheckpointRefused(
            f"checkpoint {root} was written for the game from {_start_words(stored)}, not "
            f"from {_start_words(ruleset)}; use another directory (or remove it)")


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


def damaged(root: Path, what: str) -> CheckpointRefused:
    """The refusal of a manifest whose field `what` is of the wrong shape."""
    return CheckpointRefused(f"checkpoint {root / MANIFEST} is damaged ({what}); remove it")


def check_entries(root: Path, entries: object, count: int | None, name_of,  # noqa: ANN001
                  extra: dict | None = None) -> list[dict]:
    """The shard entries of a manifest, each {"index": i, "file": name_of(i), "sha256": hex
    or None, ...}; CheckpointRefused on a wrong type, a count other than `count`, or a file
    name other than the canonical one (`safeio.member` first: `../x`, absolute paths and
    names with folders are refused as outside the directory).  `extra` maps further keys
    to a check(value) -> bool for finished entries."""
    if not isinstance(entries, list) or (count is not None and len(entries) != count):
        raise damaged(root, "shards")
    out = []
    for i, e in enumerate(entries):
        if not isinstance(e, dict) or not same(e.get("index"), i):
            raise damaged(root, f"shard entry {i}")
        sha = e.get("sha256")
        if sha is None:
            out.append({**e, "sha256": None})
            continue
        if not isinstance(sha, str) or not SHA_RE.match(sha):
            raise damaged(root, f"shard {i} sha256={short(sha)}")
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
                raise damaged(root, f"shard {i} {key}={short(e.get(key))}")
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


class ManifestDir:
    """Base of a checkpoint directory: `root`, its shard entries and its manifest.

    Invariant: `shards[i]` is shard i's entry ({"index": i, "file": ..., "sha256": hex or
    None, ...}); an entry has a SHA-256 only once its file was written completely (the file
    first, then the manifest).  Subclasses name their format (`FORMAT`) and give the
    manifest's other fields (`manifest_fields`, in the order they are written).
    """

    FORMAT: ClassVar[str]
    root: Path
    shards: list[dict]

    def manifest_fields(self) -> dict:
        raise NotImplementedError

    def to_dict(self) -> dict:
        """The manifest: the format tag first, then the subclass's fields."""
        return {"format": self.FORMAT, **self.manifest_fields()}

    def finished(self) -> int:
        """Shards whose file was written (their entry has a SHA-256)."""
        return sum(1 for e in self.shards if e.get("sha256"))

    def save_manifest(self) -> None:
        text = json.dumps(self.to_dict(), indent=1) + "\n"
        write_or_stop(self.root, self.root / MANIFEST, text.encode(), self.finished())

    def save_member(self, name: str, data: bytes) -> str:
        """Write one shard file atomically (`write_or_stop`); its SHA-256."""
        write_or_stop(self.root, self.root / name, data, self.finished())
        return sha256_bytes(data)


def open_manifest(root: Path, fmt: str, what: str, wanted: dict,
                  ruleset: RuleSet | None) -> tuple[dict, str | None] | None:
    """(manifest, its rule-file text) of `root` when its format, parameters (`wanted`) and,
    with `ruleset`, its rule text match; None when there is no manifest; CheckpointRefused
    otherwise.  What the kind of checkpoint records beyond that is the caller's to check."""
    root = Path(root)
    data = read_manifest(root, fmt, what)
    if data is None:
        return None
    if ruleset is not None:
        check_start(root, data, ruleset)
    check_parameters(root, data.get("parameters"), wanted)
    text = check_rules_text(root, data, ruleset) if ruleset is not None else None
    return data, text
