"""One first sweep per host: a count's windows and incoming moves, shared by memory map.

Every worker process of a cluster needs the first sweep of the n it counts (`tasks`), and
the largest part of it, the kept incoming-move lists, is the same for all of them.  Worker
processes on one host therefore share it: the first process that needs (rules, n) takes a
file lock, runs the sweep and writes its arrays into a folder of the host cache (one .npy
file per kind of array, every layer's rows concatenated, plus a small JSON of offsets and
numbers); the others wait on the lock and map the same files.  The pages are then held
once per host, in RAM and in the shared CPU caches, instead of once per worker, and the
sweep runs once per host instead of once per worker.

The folder is written under a temporary name and renamed when complete, so a process
killed while writing leaves nothing usable behind, and the lock dies with its process.
Its name carries the rule set's content hash, n and a digest of the engine sources that
produce it, so a folder is only ever reused for the very same sweep; the driver removes it
when the run of that n ends (`release`).  Host cache root: $ZECKENUM_HOST_CACHE, else
/dev/shm (RAM-backed) when writable, else the temporary directory.  When the folder cannot
be written (disk full, no permission), the process keeps its own copy, as before.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from .. import statespace, windows
from ..windows import Incoming, Windows

log = logging.getLogger("zeckenum.cluster")

FORMAT = "zeckenum-first-sweep/1"
SCALARS = ("states", "transitions", "terminals", "shortest", "longest",
           "terminal_paths_log2", "max_window")


def _source_digest() -> str:
    h = hashlib.sha256()
    for module in (statespace, windows):
        h.update(Path(module.__file__).read_bytes())
    return h.hexdigest()[:16]


SOURCE_DIGEST = _source_digest()
"""Digest of the engine sources whose output the host cache holds."""


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


def _write_concat(path: Path, parts: list[np.ndarray], dtype: type) -> list[int]:
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


def save_windows(folder: Path, win: Windows, facts: dict) -> None:
    """Write `win` and `facts` into `folder` (created complete, by rename, or not at all)."""
    levels = sorted(win.lmin)
    kinds: dict[str, tuple[list[np.ndarray], type]] = {
        "lmin": ([win.lmin[lv] for lv in levels], np.int32),
        "win": ([win.win[lv] for lv in levels], np.int32),
        "term": ([win.terminal_ranks[lv] for lv in levels], np.int64),
    }
    if win.incoming is not None:
        inc = [win.incoming[lv] for lv in levels]
        kinds["inc_ptr"] = ([i.ptr for i in inc], np.int64)
        kinds["inc_drop"] = ([i.drop for i in inc], np.int8)
        kinds["inc_src"] = ([i.src for i in inc], np.int32)
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.", dir=folder.parent))
    try:
        offsets = {k: _write_concat(tmp / f"{k}.npy", parts, dtype)
                   for k, (parts, dtype) in kinds.items()}
        meta = {
            "format": FORMAT, "levels": levels, "facts": facts,
            "scalars": {k: getattr(win, k) for k in SCALARS}, "offsets": offsets,
        }
        (tmp / "meta.json").write_text(json.dumps(meta))
        os.rename(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def load_windows(folder: Path) -> tuple[Windows, dict]:
    """(Windows whose arrays are views of the memory-mapped files, facts) of `folder`."""
    meta = json.loads((folder / "meta.json").read_text())
    if meta.get("format") != FORMAT:
        raise ValueError(f"{folder} is not a shared first sweep")
    levels = [int(lv) for lv in meta["levels"]]

    def split(kind: str) -> dict[int, np.ndarray]:
        # copy-on-write maps: the kernels see plain writable arrays, the pages stay shared
        data = np.asarray(np.load(folder / f"{kind}.npy", mmap_mode="c"))
        off = meta["offsets"][kind]
        return {lv: data[off[i] : off[i + 1]] for i, lv in enumerate(levels)}

    incoming = None
    if "inc_ptr" in meta["offsets"]:
        ptr, drop, src = split("inc_ptr"), split("inc_drop"), split("inc_src")
        incoming = {lv: Incoming(ptr[lv], drop[lv], src[lv]) for lv in levels}
    sc = meta["scalars"]
    win = Windows(
        lmin=split("lmin"), win=split("win"), terminal_ranks=split("term"),
        incoming=incoming, states=int(sc["states"]), transitions=int(sc["transitions"]),
        terminals=int(sc["terminals"]), shortest=int(sc["shortest"]),
        longest=int(sc["longest"]), terminal_paths_log2=float(sc["terminal_paths_log2"]),
        max_window=int(sc["max_window"]),
    )
    return win, dict(meta["facts"])


@contextlib.contextmanager
def _locked(path: Path):
    import fcntl

    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_CREAT | os.O_RDWR, 0o600)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)


def shared_windows(rules_hash: str, n: int, compute) -> tuple[Windows, dict, bool]:  # noqa: ANN001
    """(windows, facts, shared) of (rules, n): mapped from this host's cache, computed here
    first (by `compute() -> (Windows, facts dict)`) if no process of the host has yet.

    `shared` is False when the folder could not be written and `compute`'s own arrays are
    returned instead.
    """
    folder = sweep_folder(rules_hash, n)
    with contextlib.ExitStack() as stack:
        try:
            stack.enter_context(_locked(folder.with_name(folder.name + ".lock")))
        except OSError as exc:
            log.warning("first sweep of n=%s not shared on this host: %s", n, exc)
            win, facts = compute()
            return win, facts, False
        if not (folder / "meta.json").exists():
            win, facts = compute()
            try:
                save_windows(folder, win, facts)
            except OSError as exc:
                log.warning("first sweep of n=%s not shared on this host: %s", n, exc)
                return win, facts, False
            del win
        try:
            win, facts = load_windows(folder)
        except (OSError, ValueError, KeyError) as exc:
            log.warning("shared first sweep %s unreadable (%s); recomputing", folder, exc)
            shutil.rmtree(folder, ignore_errors=True)
            win, facts = compute()
            return win, facts, False
    return win, facts, True


def release(rules_hash: str, n: int) -> bool:
    """Remove this host's shared first sweep of (rules, n); True if this call removed it.

    Processes that still map it keep their pages until they drop them.
    """
    folder = sweep_folder(rules_hash, n)
    if not folder.exists():
        return False
    with _locked(folder.with_name(folder.name + ".lock")):  # the empty lock file stays
        existed = folder.exists()
        shutil.rmtree(folder, ignore_errors=True)
    return existed
