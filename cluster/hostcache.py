"""One first sweep per host: a count's windows and incoming moves, shared by memory map.

Every worker process of a cluster needs the first sweep of the n it counts (`tasks`), and
the largest part of it, the kept incoming-move lists, is the same for all of them.  Worker
processes on one host therefore share it: the first process that needs (rules, n) takes a
file lock, runs the sweep (on the host's cores: the others wait) and writes its arrays
into a folder of the host cache (one .npy file per array, every layer's rows concatenated,
plus a small JSON of offsets and numbers); the others wait on the lock, mark the folder as
in use, leave the lock and map and check the same files all at once (a check lists every
move again when the moves are not kept, so checks one after the other would cost a host
of 32 workers 31 such listings end to end).  The pages are then held
once per host, in RAM and in the shared CPU caches, instead of once per worker, and the
sweep runs once per host instead of once per worker.

Layout of the host cache root (`host_cache_root`: $ZECKENUM_HOST_CACHE, else
/dev/shm/zeckenum-host-<uid> when /dev/shm is writable, else the same name in the
temporary directory):

    <root>/                       mode 0700, owned by this uid, not a symlink
      sweep-<rules>-n<n>-<src>/   one first sweep (rules hash, n, SOURCE_DIGEST)
        lmin.npy win.npy term.npy [inc_ptr.npy inc_drop.npy inc_src.npy]
        meta.json                 levels, offsets, dtypes, sizes and SHA-256 of every array
        seal                      SHA-256 of meta.json, written last
      sweep-...lock               exclusive flock: one process creates/removes (checks
                                  run outside it, each process holding `.users`)
      sweep-...users              shared flock: held by every living process using it

Nothing read back is trusted (the folder outlives the process that wrote it):

* Privacy.  The root is created with mode 0700; a root or sweep folder that is a symlink,
  is owned by another uid or is accessible to group/others is never read.  A bad root is
  refused (one warning; the process computes its own sweep and shares nothing); a bad
  sweep folder inside a good root is removed and written again.
* Integrity.  The writer fills a temporary folder: the arrays, then meta.json (with each
  array file's size and SHA-256), then `seal` (SHA-256 of meta.json), and renames the
  folder into place.  A reader checks the seal, then maps each array file and hashes the
  very mapping the kernels will read (copy-on-write: pages stay shared).  Any mismatch,
  unparsable file or wrong dtype/shape: the folder is discarded with one warning (under
  the lock, and only if it is still the folder that was checked: same device, inode, mtime
  and ctime) and the sweep recomputed (and shared again); a process that finds it damaged
  `CHECK_ATTEMPTS` times keeps its own sweep.  Only the writer, still holding the lock, maps the
  folder it has just written without hashing or range checks (its counts are its own),
  and a process mapping again the very files it checked before (same seal, and same
  device, inode, size, mtime and ctime: the kernel moves ctime on any change) reuses
  that check.
* Ranges and facts.  After the digests, `check_windows` validates every array against
  the game's own state space (layer sizes, max drop) so no kernel can index out of
  bounds: inc_ptr runs from 0 to len(src) monotonically per layer; drops lie in
  [0, max_drop] and lead to an existing layer; sources are ranks of that layer, reachable,
  and (drop 0) of a lower rank; terminal ranks are reachable ranks of their layer.  The
  windows are then *recomputed* from the moves (lmin = 1 + min of the sources' lmin, lmax
  likewise; the start has [0, 0]) and must equal the stored ones, which also guarantees
  that each source's window fits its destination's, the bound the kernels rely on.  The
  counts (states, transitions, terminals, shortest, longest, max window) are recomputed
  from the arrays, never read from meta.json; without kept moves the moves are derived
  again from the state space for this check.  Only `terminal_paths_log2` (a float
  estimate that sizes the primes) is taken from the sealed meta.json, range-checked; the
  extra check prime of every count guards it independently.

Liveness (the rule for folders of dead runs).  Every process that writes or maps a folder
holds a shared `flock` on its `.users` file until the driver releases that n
(`release`) or the process dies (the kernel drops the lock, even on SIGKILL).  Under the
folder's exclusive `.lock`, a process that finds the folder but can take an *exclusive*
non-blocking lock on `.users` knows that no living process uses it: it was left by a run
that died (or ended without releasing), and it is removed and recomputed (one warning),
even if its digests are valid.  A folder some living process holds is mapped (after the
checks above).  So a crashed run's leftovers are replaced by the next run of the same n,
and a run whose every worker was killed and restarted recomputes its sweep once per host.

Its name carries the rule set's content hash, n and a digest of the engine sources that
produce it, so a folder is only ever reused for the very same sweep; the driver removes it
when the run of that n ends, fails or is interrupted (`release`, best effort).  When the
folder cannot be written (disk full, no permission), the process keeps its own copy.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import json
import logging
import math
import mmap
import os
import shutil
import stat
import tempfile
import threading
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
from zeckenum.core.listing import moves_in
from zeckenum.core.memory import available_bytes
from zeckenum.core.statespace import StateSpace
from zeckenum.core.sweep import (
    FOLD_LATER,
    FOLD_OUTSIDE,
    FOLD_UNREACHED,
    Incoming,
    Windows,
    drops_present,
    fold_windows,
)
from zeckenum.errors import InputError
from zeckenum.safeio import member, read_regular

log = logging.getLogger("zeckenum.cluster")

FORMAT = "zeckenum-first-sweep/2"
SCALARS = ("states", "transitions", "terminals", "shortest", "longest",
           "terminal_paths_log2", "max_window")
ARRAY_DTYPES: dict[str, np.dtype] = {
    "lmin": np.dtype("<i4"), "win": np.dtype("<i4"), "term": np.dtype("<i8"),
    "inc_ptr": np.dtype("<i8"), "inc_drop": np.dtype("<i1"), "inc_src": np.dtype("<i4"),
}
"""Array files of a sweep folder and their dtypes (the inc_* three only with kept moves)."""
SEAL = "seal"
META = "meta.json"
META_MAX_BYTES = 16 << 20
SEAL_MAX_BYTES = 256


class Damaged(ValueError):
    """A sweep folder whose digests, shapes or ranges are wrong: discard and recompute."""


class Unsafe(OSError):
    """A host-cache root or folder that is not private to this uid: never read it."""


DIGEST_PACKAGES = ("zeckenum.core", "zeckenum.rules")
"""Sub-packages of zeckenum whose every source file (.py, .toml) enters `SOURCE_DIGEST`."""
DIGEST_MODULES = ("zeckenum.counting.count", "zeckenum.cluster.count_tasks",
                  "zeckenum.cluster.hostcache")
"""Further modules whose source enters `SOURCE_DIGEST`."""


def digest_files() -> list[tuple[str, Path]]:
    """(name, path) of the source files whose output a host-cache folder holds, sorted by
    name: every file of zeckenum.core (state space, first sweep, memory rules, ...) and
    zeckenum.rules (rule model, layering, rule files, shipped rule sets),
    `zeckenum.counting.count` (whether the first sweep keeps the incoming moves,
    `count.count_windows`), `zeckenum.cluster.count_tasks` (the facts recorded beside the
    arrays) and this module (the folder's format).  The name is the package's dotted name
    and the file's path inside it (a moved file changes it)."""
    from importlib.util import find_spec

    out: dict[str, Path] = {}
    for package in DIGEST_PACKAGES:
        spec = find_spec(package)
        for where in spec.submodule_search_locations or ():
            base = Path(where)
            for f in base.rglob("*"):
                if f.is_file() and f.suffix in (".py", ".toml") and \
                        "__pycache__" not in f.parts:
                    out[f"{package}/{f.relative_to(base).as_posix()}"] = f
    for module in DIGEST_MODULES:
        out[module] = Path(find_spec(module).origin)
    return sorted(out.items())


def _source_digest() -> str:
    h = hashlib.sha256()
    for name, path in digest_files():
        data = path.read_bytes()
        h.update(f"{name}\0{len(data)}\0".encode())
        h.update(data)
    return h.hexdigest()[:16]


SOURCE_DIGEST = _source_digest()
"""Digest of the engine sources whose output the host cache holds (`digest_files`: all of
zeckenum.core and zeckenum.rules, counting/count.py, cluster/count_tasks.py and this
module), each file by its path in the package and its bytes: a change to any of them, or
a file moved, gives new folder names, so no folder written by other code is ever read."""


def host_cache_root() -> Path:
    """Where this host keeps shared first sweeps (see the module docstring)."""
    env = os.environ.get("ZECKENUM_HOST_CACHE")
    if env:
        return Path(env)
    shm = Path("/dev/shm")
    base = shm if shm.is_dir() and os.access(shm, os.W_OK) else Path(tempfile.gettempdir())
    return base / f"zeckenum-host-{os.getuid()}"


def sweep_folder(rules_hash: str, n: int) -> Path:
    """The host-cache folder of the first sweep of (rules, n)."""
    return host_cache_root() / f"sweep-{rules_hash[:16]}-n{int(n)}-{SOURCE_DIGEST}"


# ------------------------------------------------------------------------------ privacy

def check_private(path: Path, what: str) -> None:
    """Raise `Unsafe` unless `path` is a real folder (not a symlink) owned by this uid with
    no group/other permission bits."""
    st = os.lstat(path)
    if stat.S_ISLNK(st.st_mode):
        raise Unsafe(f"{what} {path} is a symlink")
    if not stat.S_ISDIR(st.st_mode):
        raise Unsafe(f"{what} {path} is not a folder")
    if st.st_uid != os.getuid():
        raise Unsafe(f"{what} {path} is owned by uid {st.st_uid}, not {os.getuid()}")
    if st.st_mode & 0o077:
        raise Unsafe(f"{what} {path} is accessible to group or others "
                     f"(mode {stat.S_IMODE(st.st_mode):04o})")


def private_root() -> Path:
    """The host cache root, created with mode 0700 if missing; `Unsafe` if it exists and is
    not private to this uid, OSError if it cannot be created."""
    root = host_cache_root()
    root.parent.mkdir(parents=True, exist_ok=True)
    with contextlib.suppress(FileExistsError):
        os.mkdir(root, 0o700)
    check_private(root, "host cache")
    return root


def _discard(folder: Path) -> None:
    """Remove a sweep folder (or whatever took its name: a symlink is unlinked, not
    followed)."""
    _verified.pop(str(folder), None)
    with contextlib.suppress(FileNotFoundError):
        if os.path.islink(folder) or not os.path.isdir(folder):
            os.unlink(folder)
        else:
            shutil.rmtree(folder, ignore_errors=True)


# ------------------------------------------------------------------------------ writing

def _write_concat(path: Path, parts: list[np.ndarray], dtype: np.dtype) -> list[int]:
    """Write the concatenation of `parts` as one .npy file (each part copied once, straight
    into the file's pages); returns the offsets of the parts."""
    offsets = [0]
    for p in parts:
        offsets.append(offsets[-1] + int(p.size))
    out = np.lib.format.open_memmap(path, mode="w+", dtype=dtype, shape=(offsets[-1],))
    for p, a, b in zip(parts, offsets, offsets[1:], strict=False):
        out[a:b] = p
    out.flush()
    del out
    return offsets


def _file_sha256(path: Path) -> tuple[int, str]:
    """(bytes, SHA-256 hex) of a regular file."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as f:
        while chunk := f.read(1 << 22):
            h.update(chunk)
            size += len(chunk)
    return size, h.hexdigest()


def seal(folder: Path) -> None:
    """Record the size and SHA-256 of every array file of `folder` in its meta.json, then
    write `seal` (the SHA-256 of meta.json) last.  The writer calls it before the folder is
    renamed into place."""
    meta = json.loads((folder / META).read_text())
    meta["files"] = {}
    for name in meta["offsets"]:
        size, digest = _file_sha256(folder / f"{name}.npy")
        meta["files"][name] = {"bytes": size, "sha256": digest}
    text = json.dumps(meta).encode()
    (folder / META).write_bytes(text)
    (folder / SEAL).write_text(hashlib.sha256(text).hexdigest())


def save_windows(folder: Path, win: Windows, facts: dict) -> None:
    """Write `win` and `facts` into `folder` (created complete and sealed, by rename, or not
    at all)."""
    levels = sorted(win.lmin)
    arrays: dict[str, list[np.ndarray]] = {
        "lmin": [win.lmin[lv] for lv in levels],
        "win": [win.win[lv] for lv in levels],
        "term": [win.terminal_ranks[lv] for lv in levels],
    }
    if win.incoming is not None:
        inc = [win.incoming[lv] for lv in levels]
        arrays["inc_ptr"] = [i.ptr for i in inc]
        arrays["inc_drop"] = [i.drop for i in inc]
        arrays["inc_src"] = [i.src for i in inc]
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", dir=folder.parent))  # mode 0700
    try:
        offsets = {k: _write_concat(tmp / f"{k}.npy", parts, ARRAY_DTYPES[k])
                   for k, parts in arrays.items()}
        meta = {
            "format": FORMAT, "levels": levels, "facts": facts,
            "scalars": {k: getattr(win, k) for k in SCALARS}, "offsets": offsets,
            "writer": {"pid": os.getpid()},
        }
        (tmp / META).write_text(json.dumps(meta))
        seal(tmp)
        os.rename(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


# ------------------------------------------------------------------------------ reading

_verified: dict[str, tuple[str, dict[str, tuple[int, ...]], dict[str, int]]] = {}
"""Folder path -> (seal, identity of each array file, counts) of the folder as this
process last checked (or wrote) it.  A later map of the same sealed files skips hashing
and range checks; identity = (device, inode, size, mtime_ns, ctime_ns) from `fstat`, and
the kernel updates ctime on every change to a file, so changed files are checked again."""


def _map_array(folder: Path, name: str, record: dict, count: int,
               verify: bool = True, known: tuple[int, ...] | None = None
               ) -> tuple[np.ndarray, tuple[int, ...], bool]:
    """(array, file identity, hashed) of the array file `name` of `folder`, memory-mapped
    copy-on-write, after checking that it is a regular file of the recorded size and
    SHA-256 (hashing the mapping itself; skipped when not `verify` or when the file's
    identity is `known`) holding `count` values of that array's dtype."""
    path = member(folder, f"{name}.npy", "host-cache array")
    fd = os.open(path, os.O_RDONLY | os.O_NOFOLLOW | os.O_NONBLOCK)
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode) or st.st_uid != os.getuid():
            raise Damaged(f"{path} is not a regular file of this user")
        size = int(record["bytes"])
        if st.st_size != size or size <= 0:
            raise Damaged(f"{path} has {st.st_size} bytes, the seal records {size}")
        ident = (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)
        mm = mmap.mmap(fd, size, flags=mmap.MAP_PRIVATE,
                       prot=mmap.PROT_READ | mmap.PROT_WRITE)
    finally:
        os.close(fd)
    hashed = verify and ident != known
    if hashed and hashlib.sha256(mm).hexdigest() != record["sha256"]:
        raise Damaged(f"{path} does not match its SHA-256")
    head = io.BytesIO(mm[: min(size, 1 << 16)])
    try:
        version = np.lib.format.read_magic(head)
        read = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                else np.lib.format.read_array_header_2_0)
        shape, fortran, dtype = read(head)
    except ValueError as exc:
        raise Damaged(f"{path}: {exc}") from None
    start = head.tell()
    if (dtype != ARRAY_DTYPES[name] or tuple(shape) != (count,) or fortran
            or size != start + count * dtype.itemsize):
        raise Damaged(f"{path} holds {shape} {dtype}, expected ({count},) {ARRAY_DTYPES[name]}")
    return np.frombuffer(mm, dtype=dtype, count=count, offset=start), ident, hashed


def _offsets(meta: dict, name: str, nlevels: int) -> list[int]:
    off = meta["offsets"][name]
    if (not isinstance(off, list) or len(off) != nlevels + 1
            or not all(isinstance(x, int) and not isinstance(x, bool) for x in off)
            or off[0] != 0 or any(b < a for a, b in zip(off, off[1:], strict=False))):
        raise Damaged(f"offsets of {name} are not {nlevels + 1} increasing integers from 0")
    return off


def load_windows(
    folder: Path, space: StateSpace, written: Windows | None = None
) -> tuple[Windows, dict]:
    """(Windows whose arrays are copy-on-write maps of the files, recorded facts) of
    `folder`, the first sweep of `space`'s game: digests, shapes and ranges checked and
    every count recomputed (module docstring); `Damaged` or OSError/InputError otherwise.

    `written`: the windows this process has just written into `folder` (under its lock):
    the files are then only mapped (shapes checked, no hashing nor range checks) and the
    counts are taken from `written`.
    """
    check_private(folder, "sweep folder")
    sealed = read_regular(member(folder, SEAL, "host-cache seal"), SEAL_MAX_BYTES,
                          "host-cache seal").decode("ascii", "replace").strip()
    raw = read_regular(member(folder, META, "host-cache metadata"), META_MAX_BYTES,
                       "host-cache metadata")
    if hashlib.sha256(raw).hexdigest() != sealed:
        raise Damaged(f"{folder / META} does not match its seal")
    meta = json.loads(raw)
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise Damaged(f"{folder} is not a shared first sweep of this version")
    start_level = space.rank(space.spec.start)[0]
    levels = sorted(lv for lv in space.levels if lv <= start_level)
    if meta.get("levels") != levels:
        raise Damaged(f"{folder} holds other levels than the game")
    arrays = set(meta["offsets"])
    if arrays not in ({"lmin", "win", "term"}, set(ARRAY_DTYPES)) or set(meta["files"]) != arrays:
        raise Damaged(f"{folder} holds the arrays {sorted(arrays)}")

    prior = _verified.pop(str(folder), None)
    known = prior[1] if prior is not None and prior[0] == sealed else {}
    idents: dict[str, tuple[int, ...]] = {}
    hashed: list[bool] = []

    def split(name: str) -> dict[int, np.ndarray]:
        off = _offsets(meta, name, len(levels))
        data, idents[name], fresh = _map_array(folder, name, meta["files"][name], off[-1],
                                               written is None, known.get(name))
        hashed.append(fresh)
        return {lv: data[off[i] : off[i + 1]] for i, lv in enumerate(levels)}

    lmin, win, term = split("lmin"), split("win"), split("term")
    incoming = None
    if "inc_ptr" in arrays:
        ptr, drop, src = split("inc_ptr"), split("inc_drop"), split("inc_src")
        incoming = {lv: Incoming(ptr[lv], drop[lv], src[lv]) for lv in levels}
    paths_log2 = meta["scalars"]["terminal_paths_log2"]
    if isinstance(paths_log2, bool) or not isinstance(paths_log2, (int, float)):
        raise Damaged(f"{folder}: terminal_paths_log2 is not a number")
    if written is not None:
        counts = {k: getattr(written, k) for k in SCALARS if k != "terminal_paths_log2"}
    elif prior is not None and known and not any(hashed):  # the very files checked before
        counts = dict(prior[2])
    else:
        counts = check_windows(space, lmin, win, term, incoming)
    paths_log2 = float(paths_log2)
    if not (math.isfinite(paths_log2)
            and math.log2(max(1, counts["terminals"])) - 1e-6 <= paths_log2 < 2**20):
        raise Damaged(f"{folder}: terminal_paths_log2 {paths_log2} is out of range")
    out = Windows(lmin=lmin, win=win, terminal_ranks=term, incoming=incoming,
                  terminal_paths_log2=paths_log2, **counts)
    _verified[str(folder)] = (sealed, idents, counts)
    facts = meta.get("facts")
    return out, dict(facts) if isinstance(facts, dict) else {}


FOLD_ERRORS = {
    FOLD_OUTSIDE: "a move from outside its source layer",
    FOLD_LATER: "a move inside the layer from a later rank",
    FOLD_UNREACHED: "a kept move from an unreachable state",
}


def check_windows(
    space: StateSpace,
    lmin: dict[int, np.ndarray],
    win: dict[int, np.ndarray],
    term: dict[int, np.ndarray],
    incoming: dict[int, Incoming] | None,
) -> dict[str, int]:
    """Validate untrusted first-sweep arrays against `space` and return the counts
    recomputed from them (states, transitions, terminals, shortest, longest, max_window).

    Raises `Damaged` unless every index a kernel will follow is in range and the windows
    are exactly those the moves imply (module docstring).  Without kept moves the moves
    are derived from `space` (as the exact sweep does).  Works layer by layer in int64.
    """
    start_level, start_rank = space.rank(space.spec.start)
    levels = [lv for lv in space.levels if lv <= start_level]
    max_drop = int(space.max_drop)
    states = transitions = terminals = max_window = 0
    shortest, longest = None, None
    for level in sorted(levels, reverse=True):  # sources (above) before destinations
        size = int(space.layer_size(level))
        lm, w, ends = lmin[level], win[level], term[level]
        if lm.size != size or w.size != size:
            raise Damaged(f"layer {level} holds {lm.size}/{w.size} windows for {size} states")
        lm64, w64 = lm.astype(np.int64), w.astype(np.int64)
        if size and (lm64.min() < 0 or w64.min() < 0):
            raise Damaged(f"layer {level}: a negative length window")
        reached = w64 > 0
        if np.any(lm64[~reached] != 0):
            raise Damaged(f"layer {level}: an unreachable state with a window")
        if incoming is not None:
            inc = incoming[level]
            ptr, drop, src = inc.ptr, inc.drop, inc.src
            if ptr.size != size + 1 or ptr[0] != 0 or ptr[-1] != src.size \
                    or drop.size != src.size or np.any(np.diff(ptr) < 0):
                raise Damaged(f"layer {level}: move rows do not run from 0 to "
                              f"{src.size} monotonically")
            kept = True
        else:
            moves = moves_in(space, level)
            ptr, drop, src = moves.ptr, moves.drop, moves.other
            kept = False
        if drop.size and (int(drop.min()) < 0 or int(drop.max()) > max_drop):
            raise Damaged(f"layer {level}: a move drops outside [0, {max_drop}]")
        # the windows the moves imply, per state (kernel: no temporaries per move)
        want_lo = np.full(size, np.iinfo(np.int64).max, dtype=np.int64)
        want_hi = np.full(size, -1, dtype=np.int64)
        used = np.zeros(size, dtype=np.int64)
        for d in np.flatnonzero(drops_present(drop, max_drop)):
            d = int(d)
            if level + d not in lmin:
                if kept:
                    raise Damaged(f"layer {level}: moves from layer {level + d}, not swept")
                continue  # derived moves from above the start: the sweeps skip them
            err = fold_windows(want_lo, want_hi, used, ptr, drop, src, d, lmin[level + d],
                               win[level + d], kept)
            if err:
                raise Damaged(f"layer {level}: {FOLD_ERRORS[err]}")
        transitions += int(used.sum())
        has = used > 0
        if level == start_level:
            has = has.copy()
            has[start_rank] = True
            want_lo[start_rank] = min(0, int(want_lo[start_rank]))
            want_hi[start_rank] = max(0, int(want_hi[start_rank]))
        if not np.array_equal(has, reached) or not np.array_equal(
                lm64[reached], want_lo[reached]) or not np.array_equal(
                lm64[reached] + w64[reached] - 1, want_hi[reached]):
            raise Damaged(f"layer {level}: the windows are not those the moves imply")
        ends64 = ends.astype(np.int64)
        if ends64.size:
            if ends64.min() < 0 or ends64.max() >= size or np.any(np.diff(ends64) <= 0) \
                    or not np.all(reached[ends64]):
                raise Damaged(f"layer {level}: terminal ranks outside the reachable states")
            lo = int(lm64[ends64].min())
            hi = int((lm64[ends64] + w64[ends64] - 1).max())
            shortest = lo if shortest is None else min(shortest, lo)
            longest = hi if longest is None else max(longest, hi)
        states += int(reached.sum())
        terminals += int(ends64.size)
        max_window = max(max_window, int(w64.max(initial=0)))
    if longest is None or shortest is None:
        raise Damaged("no terminal state")
    for level in levels:  # every length a kernel writes fits the spectrum (longest + 1)
        if win[level].size and int((lmin[level].astype(np.int64)
                                    + win[level].astype(np.int64) - 1).max()) > longest:
            raise Damaged(f"layer {level}: a window beyond the longest game")
    return {"states": states, "transitions": transitions, "terminals": terminals,
            "shortest": shortest, "longest": longest, "max_window": max_window}


# ------------------------------------------------------------------------------ sharing

_UNREADABLE = (OSError, ValueError, KeyError, TypeError, AttributeError, RecursionError,
               InputError)
"""What reading a damaged folder may raise (Damaged is a ValueError)."""

_held: dict[str, int] = {}
"""Folder path -> fd of its `.users` file, share-locked while this process uses it."""
_held_lock = threading.Lock()


@contextlib.contextmanager
def _locked(path: Path) -> Iterator[None]:
    import fcntl

    fd = os.open(path, os.O_CREAT | os.O_RDWR | os.O_NOFOLLOW, 0o600)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)


def _users_fd(folder: Path) -> int:
    return os.open(folder.with_name(folder.name + ".users"),
                   os.O_CREAT | os.O_RDWR | os.O_NOFOLLOW, 0o600)


def _abandoned(folder: Path) -> bool:
    """True when no living process holds the folder's `.users` lock (call under `.lock`).
    This process's own hold counts as living."""
    import fcntl

    if str(folder) in _held:
        return False
    fd = _users_fd(folder)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as exc:
        if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            return False
        raise
    finally:
        os.close(fd)  # drops the probe lock
    return True


def _hold(folder: Path) -> None:
    """Share-lock the folder's `.users` file for as long as this process uses it."""
    import fcntl

    with _held_lock:
        if str(folder) in _held:
            return
        try:
            fd = _users_fd(folder)
        except OSError as exc:  # then others may take the folder for a dead run's: correct
            log.warning("cannot mark %s as in use: %s", folder, exc)
            return
        fcntl.flock(fd, fcntl.LOCK_SH)
        _held[str(folder)] = fd


def _unhold(folder: Path) -> None:
    with _held_lock:
        fd = _held.pop(str(folder), None)
    if fd is not None:
        os.close(fd)


def shared_windows(
    rules_hash: str, n: int, compute: Callable[[], tuple[Windows, dict]], space: StateSpace,
    compute_shared: Callable[[], tuple[Windows, dict]] | None = None,
) -> tuple[Windows, dict, bool]:
    """(windows, facts, shared) of (rules, n): mapped from this host's cache, computed here
    first (by `compute() -> (Windows, facts dict)`) if no living process of the host has.
    `compute_shared` (default `compute`) is what runs under the lock to fill the cache,
    while the host's other processes wait: it may use every core of the host.

    `space` is the game's state space: the mapped arrays are checked against it.  `shared`
    is False when the host cache is refused or cannot be written, and `compute`'s own
    arrays are returned instead.  The returned facts are those recorded (sealed); callers
    recompute what they rely on (`count_tasks.host_windows_with_facts`).
    """
    try:
        root = private_root()
    except Unsafe as exc:
        log.warning("host cache refused (%s); first sweep of n=%s computed in this process "
                    "(remove that folder, or make it a mode 0700 folder of this user, to "
                    "share sweeps again)", exc, n)
        win, facts = compute()
        return win, facts, False
    except OSError as exc:
        log.warning("first sweep of n=%s not shared on this host: %s", n, exc)
        win, facts = compute()
        return win, facts, False
    folder = root / sweep_folder(rules_hash, n).name
    lock = folder.with_name(folder.name + ".lock")
    for _ in range(CHECK_ATTEMPTS):
        with contextlib.ExitStack() as stack:
            try:
                stack.enter_context(_locked(lock))
            except OSError as exc:
                log.warning("first sweep of n=%s not shared on this host: %s", n, exc)
                win, facts = compute()
                return win, facts, False
            ident = _reusable(folder)
            if ident is None:
                return _compute_and_share(folder, compute_shared or compute, space, n)
            _hold(folder)  # from here on no process takes it for a dead run's
        # checked outside the lock: the other processes of the host check it at once, as
        # many as the memory holds
        try:
            with _check_slot(folder, check_slots(space, folder)):
                win, facts = load_windows(folder, space)
        except _UNREADABLE as exc:
            _unhold(folder)
            log.warning("shared first sweep %s damaged (%s); recomputing it", folder, exc)
            with _locked(lock):
                if _identity(folder) == ident:  # not replaced meanwhile by another
                    _discard(folder)
            continue
        return win, facts, True
    log.warning("first sweep of n=%s not shared on this host: its folder was damaged %d "
                "times", n, CHECK_ATTEMPTS)
    win, facts = compute()
    return win, facts, False


def check_bytes(space: StateSpace, kept: bool) -> int:
    """Bytes `check_windows` holds at its peak, an upper bound: a few int64 arrays per state
    of the largest layer (the windows the moves imply are folded per state by the kernel
    `fold_windows`, nothing per move), and without kept moves the layer's listing
    (`StateSpace.listing_peak`, as `count.listing_bytes`)."""
    return space.listing_peak(64 + 16, 0 if kept else 8 + 8 + 4 + 1)


def check_slots(space: StateSpace, folder: Path) -> int:
    """How many processes of this host may check the folder at once: what the memory
    available now holds (at least 1)."""
    kept = (folder / "inc_src.npy").exists()
    return max(1, available_bytes() // max(1, check_bytes(space, kept)))


@contextlib.contextmanager
def _check_slot(folder: Path, slots: int) -> Iterator[None]:
    """Hold one of `slots` exclusive check locks beside the folder (a semaphore between the
    processes of the host): a free one if any, else wait for one.  The empty lock files
    stay, like `.lock`."""
    import fcntl

    def slot(k: int) -> int:
        return os.open(folder.with_name(f"{folder.name}.check{k}"),
                       os.O_CREAT | os.O_RDWR | os.O_NOFOLLOW, 0o600)

    for k in range(slots):
        fd = slot(k)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            continue
        try:
            yield
        finally:
            os.close(fd)
        return
    fd = slot(os.getpid() % slots)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)


CHECK_ATTEMPTS = 3
"""Times a process maps a shared first sweep and finds it damaged before it keeps its own."""


def _identity(folder: Path) -> tuple[int, ...] | None:
    """(device, inode, mtime, ctime) of a folder, None when absent: a folder written again
    under the same name has another."""
    try:
        st = os.stat(folder, follow_symlinks=False)
    except FileNotFoundError:
        return None
    return (st.st_dev, st.st_ino, st.st_mtime_ns, st.st_ctime_ns)


def _reusable(folder: Path) -> tuple[int, ...] | None:
    """Under the folder's lock: its identity when it may be mapped (it exists, is private
    and some living process holds it), else None after removing whatever is there (one
    warning when something was)."""
    if not os.path.lexists(folder):
        return None
    why = None
    try:
        check_private(folder, "sweep folder")
        if _abandoned(folder):
            why = "left by a dead run"
    except Unsafe as exc:
        why = f"refused: {exc}"
    if why is None:
        return _identity(folder)
    log.warning("shared first sweep %s %s; recomputing it", folder, why)
    _unhold(folder)
    _discard(folder)
    return None


def _compute_and_share(folder: Path, compute: Callable[[], tuple[Windows, dict]],
                       space: StateSpace, n: int) -> tuple[Windows, dict, bool]:
    """Under the folder's lock: run the sweep, write it into `folder` and map it back (the
    other processes wait on the lock meanwhile, so the sweep may use the host's cores)."""
    win, facts = compute()
    try:
        save_windows(folder, win, facts)
    except OSError as exc:
        log.warning("first sweep of n=%s not shared on this host: %s", n, exc)
        return win, facts, False
    try:
        mapped, facts = load_windows(folder, space, written=win)
    except _UNREADABLE as exc:
        log.warning("shared first sweep %s unreadable after writing (%s)", folder, exc)
        _discard(folder)
        return win, facts, False
    _hold(folder)
    return mapped, facts, True


def release(rules_hash: str, n: int) -> bool:
    """Remove this host's shared first sweep of (rules, n); True if this call removed it.

    Drops this process's hold first.  Processes that still map it keep their pages until
    they drop them.  A refused (non-private) root is left alone.
    """
    folder = sweep_folder(rules_hash, n)
    _unhold(folder)
    try:
        check_private(folder.parent, "host cache")
    except OSError:
        return False
    if not os.path.lexists(folder):
        return False
    with _locked(folder.with_name(folder.name + ".lock")):  # the empty lock files stay
        existed = os.path.lexists(folder)
        _discard(folder)
    return existed
