"""The one numba policy of every kernel, and where compiled kernels are cached.

Every numba function of zeckenum is declared with `kernel` (never `nb.njit` directly), so
the policy lives here:

* ``cache=True``: compiled machine code is kept on disk and loaded by later processes.
  numba keys each entry by the source file, the function and its signature; a change of
  source recompiles.  numba's cache is not safe when many processes compile the same
  function at once (numba issues 4807 and 10128), so the Dask layer compiles once in the
  client and gives each worker process a cache folder of its own (`cluster.backend`),
  seeded with the client's files (`cache_base` below is the parent of those folders).
* ``nogil=True``: kernels release the GIL, so the thread runners of the engines
  (`core.blocks`) run them on every core of one process.
* Kernels take plain numpy arrays and integers of at most 64 bits (Python big integers
  never enter a kernel; exact integers are rebuilt by the CRT outside, once, at the end).

``@kernel`` declares a kernel; ``@kernel(inline=True)`` a small helper numba inlines into
its callers (``inline="always"``); ``@kernel(parallel=True)`` a kernel with ``nb.prange``.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import TypeVar, overload

import numba as nb

F = TypeVar("F", bound=Callable)


@overload
def kernel(fn: F) -> F: ...
@overload
def kernel(*, inline: bool = False, parallel: bool = False) -> Callable[[F], F]: ...


def kernel(fn=None, *, inline: bool = False, parallel: bool = False):  # noqa: ANN001, ANN201
    """Compile `fn` with the project's numba policy (see the module docstring)."""
    options: dict = {"cache": True, "nogil": True}
    if inline:
        options["inline"] = "always"
    if parallel:
        options["parallel"] = True

    def wrap(f: F) -> F:
        return nb.njit(**options)(f)

    return wrap(fn) if fn is not None else wrap


def cache_base() -> Path:
    """Parent folder of the per-worker numba cache folders: `$ZECKENUM_NUMBA_CACHE`, else
    `<tmp>/zeckenum-numba-<uid>` (the worker plugin of `cluster.backend` repeats this rule
    in code that must not import zeckenum)."""
    env = os.environ.get("ZECKENUM_NUMBA_CACHE")
    if env:
        return Path(env)
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path(tempfile.gettempdir()) / f"zeckenum-numba-{uid}"
