"""Memory sizes: parsing user limits, what the machine has, and refusing runs that cannot fit."""

from __future__ import annotations

import re

import psutil

from .errors import InputError, MemoryRefused

_UNITS = {"": 1, "B": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40}


def parse_size(text: str) -> int:
    """Bytes in a size such as '512M', '2G', '1.5T' or '1000000' (binary units)."""
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*([KMGT]?)(?:i?B)?\s*", text.upper())
    if not m:
        raise InputError(f"cannot read the memory size {text!r} (examples: 800M, 4G)")
    return int(float(m.group(1)) * _UNITS[m.group(2)])


def available_bytes() -> int:
    """Memory the machine can give this run now (psutil's 'available')."""
    return int(psutil.virtual_memory().available)


def human(nbytes: float) -> str:
    """A byte count for people: '1.9 GiB'."""
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
