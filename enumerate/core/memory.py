"""Memory sizes: parsing user limits, what the machine has, and refusing runs that cannot fit.

The memory rule (every command that computes): before anything large is allocated, the run
forecasts its peak from arithmetic on n, the bins and (once it exists) the rank table, and
raises `MemoryRefused` (exit status 3) with the estimate and the limit when the forecast
exceeds the limit.  The limit is `max_memory` (`--max-memory SIZE`) or, by default, the
memory the machine has available now (`available_bytes`).  Forecasts are upper bounds of
what the run holds (or exact), never below it by more than a small margin; the tests
compare them with measured peaks.
"""

from __future__ import annotations

import math
import re

import psutil
from zeckenum.errors import InputError, MemoryRefused

_UNITS = {"": 1, "B": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40, "P": 2**50}

MAX_LIMIT = 2**62
"""Largest accepted memory limit (4 EiB): far above any machine, small enough for int64."""


def parse_size(text: str) -> int:
    """Bytes in a size such as '512M', '2G', '1.5T' or '1000000' (binary units), >= 1."""
    m = re.fullmatch(r"\s*(\d{1,30}(?:\.\d{1,30})?)\s*([KMGTP]?)(?:i?B)?\s*", str(text).upper())
    if not m:
        raise InputError(f"cannot read the memory size {text!r} (examples: 800M, 4G)")
    size = int(float(m.group(1)) * _UNITS[m.group(2)])
    return check_limit(size)


def check_limit(size: object) -> int:
    """A memory limit in bytes as an int in [1, MAX_LIMIT], or InputError."""
    if isinstance(size, bool) or not isinstance(size, int) or size < 1 or size > MAX_LIMIT:
        raise InputError(f"the memory limit must be between 1 byte and 4 EiB, got {size!r}")
    return size


def available_bytes() -> int:
    """Memory the machine can give this run now (psutil's 'available')."""
    return int(psutil.virtual_memory().available)


def resolve_limit(max_memory: int | None) -> int:
    """The byte limit of a run: `max_memory` when given (checked), else what is available."""
    return available_bytes() if max_memory is None else check_limit(int(max_memory))


def human(nbytes: float) -> str:
    """A byte count for people: '1.9 GiB' (astronomical ones as a power of two)."""
    if nbytes >= 2**60:
        return f"2^{math.log2(nbytes):.1f} B"
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if abs(nbytes) < 1024 or unit == "TiB":
            return f"{nbytes:.1f} {unit}" if unit != "B" else f"{int(nbytes)} B"
        nbytes /= 1024
    return f"{nbytes:.1f} TiB"  # pragma: no cover


def refuse_if_over(estimate: int, limit: int, what: str) -> None:
    """Raise MemoryRefused with the estimate when `estimate` bytes exceed `limit`."""
    if estimate > limit:
        raise MemoryRefused(
            f"{what} needs an estimated {human(estimate)} but the limit is {human(limit)}; "
            "raise it with --max-memory SIZE if the machine really has more"
        )
