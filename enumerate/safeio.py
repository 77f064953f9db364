"""Reading untrusted files and writing results without losing them.

Every file zeckenum reads back (rule files, strategy files, checkpoint shards and
manifests, table files, the host cache) is untrusted: it may be a FIFO that blocks an
`open` forever, /dev/zero that never ends, a symlink out of its directory, or a huge
file.  `read_regular` opens without blocking, checks with `fstat` that what was opened is a
regular file and reads at most a given number of bytes; `member` resolves a name recorded
in a manifest to a regular file *inside* its directory (no absolute paths, no `..`, no
symlinks out).

Writes go through `write_atomic` (temporary file in the same folder, fsync, rename, fsync
of the folder: a crash leaves the old or the new file, never a torn one, and a failed write
leaves no temporary file).  Output paths are checked before the computation starts
(`check_output_file`, `check_output_dir`), so a typo in `--out` costs nothing; a write
that still fails after the computation hands the result to `deliver`, which prints it on
standard output (or writes it to a fallback file it names) and raises `OutputError`
(exit status 6), so finished work is never lost.
"""

from __future__ import annotations

import os
import stat
import sys
import tempfile
from pathlib import Path

from zeckenum.errors import InputError, OutputError

MiB = 1 << 20


def _why(exc: OSError) -> str:
    return exc.strerror or exc.__class__.__name__


def read_regular(path: str | Path, max_bytes: int, what: str = "file") -> bytes:
    """The bytes of `path`, a regular file of at most `max_bytes` bytes; InputError otherwise.

    Symlinks to regular files are followed (a user's rule file may be one); FIFOs, devices,
    directories and sockets are refused without blocking.
    """
    path = Path(path)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise InputError(f"cannot read {what} {path}: {_why(exc)}") from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise InputError(f"{what} {path} is not a regular file")
        if st.st_size > max_bytes:
            raise InputError(
                f"{what} {path} is {st.st_size} bytes, more than the {max_bytes} allowed")
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, min(1 << 20, max_bytes + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            if total > max_bytes:
                raise InputError(f"{what} {path} grew beyond the {max_bytes} bytes allowed")
        return b"".join(chunks)
    except OSError as exc:
        raise InputError(f"cannot read {what} {path}: {_why(exc)}") from None
    finally:
        os.close(fd)


def member(root: str | Path, name: object, what: str = "file") -> Path:
    """`root / name` for a file name recorded in a manifest, refused (InputError) unless it
    is a plain relative name inside `root` that is not a symlink and, if it exists, is a
    regular file.  Checks the name only: read it with `read_regular`."""
    root = Path(root)
    if not isinstance(name, str) or not name or "\x00" in name:
        raise InputError(f"{what} name {name!r} in {root} is not a file name")
    rel = Path(name)
    if rel.is_absolute() or ".." in rel.parts or rel.name != name:
        raise InputError(f"{what} {name!r} in {root} is not a plain name inside the directory")
    path = root / rel
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return path
    except OSError as exc:
        raise InputError(f"cannot read {what} {path}: {_why(exc)}") from None
    if not stat.S_ISREG(st.st_mode):
        raise InputError(f"{what} {path} is not a regular file inside {root}")
    return path


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover - folders that cannot be opened (some platforms)
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover
        pass
    finally:
        os.close(fd)


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def write_atomic(path: str | Path, data: bytes) -> None:
    """Write `data` to `path` atomically: temporary file, fsync, rename, fsync of the folder.

    Raises OSError when the write fails; the temporary file is removed first.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~_umask())  # mkstemp makes 0600; results are shared files
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    _fsync_dir(path.parent)


def check_output_file(path: str | Path, what: str = "output file") -> Path:
    """Refuse (OutputError) before any computation an output file that cannot be written:
    its folder missing or not writable, or the path a directory or a non-regular file."""
    path = Path(path)
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise OutputError(f"cannot write {what} {path}: folder {parent} does not exist")
    if path.exists() and not path.is_file():
        raise OutputError(f"cannot write {what} {path}: it exists and is not a regular file")
    if not os.access(parent, os.W_OK | os.X_OK) or (path.exists() and not os.access(path, os.W_OK)):
        raise OutputError(f"cannot write {what} {path}: permission denied")
    return path


def check_output_dir(path: str | Path, what: str = "output directory") -> Path:
    """Create `path` (and its parents) if needed and prove it writable by writing and
    removing a probe file; OutputError otherwise, before any computation."""
    path = Path(path)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise OutputError(f"cannot use {what} {path}: it exists and is not a directory") from None
    except OSError as exc:
        raise OutputError(f"cannot create {what} {path}: {_why(exc)}") from None
    try:
        fd, probe = tempfile.mkstemp(prefix=".zeckenum-probe-", dir=path)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise OutputError(f"cannot write into {what} {path}: {_why(exc)}") from None
    return path


def deliver(path: str | Path, data: bytes | str, what: str = "result",
            fallback: str | Path | None = None) -> None:
    """Write a finished result to `path` atomically; if that fails, never lose it: write it
    to `fallback` (a file) when given and writable, else print it on standard output, and
    raise OutputError naming where it went."""
    raw = data.encode() if isinstance(data, str) else data
    try:
        write_atomic(path, raw)
        return
    except OSError as exc:
        why = _why(exc)
    if fallback is not None:
        try:
            write_atomic(fallback, raw)
        except OSError:
            pass
        else:
            raise OutputError(f"could not write {what} to {path} ({why}); "
                              f"it was written to {fallback} instead")
    out = sys.stdout.buffer if hasattr(sys.stdout, "buffer") else None
    if out is not None:
        sys.stdout.flush()
        out.write(raw)
        out.flush()
    else:  # pragma: no cover - a text-only stdout (captured in some test runners)
        sys.stdout.write(raw.decode(errors="replace"))
        sys.stdout.flush()
    raise OutputError(f"could not write {what} to {path} ({why}); "
                      "it was printed to standard output instead")
