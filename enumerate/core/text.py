"""Shared pieces of the commands' output: plurals, decimals of exact fractions, and where a
result goes when its output file cannot be written.

Invariants: `decimal(x, d)` is the exact rational x rounded (half to even) to d significant
digits, computed in integers, so it is right for any size of numerator and denominator
(a float conversion would underflow below 1e-308 or overflow above 1e308).
"""

from __future__ import annotations

import os
import tempfile
import time
from fractions import Fraction
from pathlib import Path

from zeckenum import safeio

DIGITS = 12
"""Significant digits of the decimals printed for exact probabilities and moments."""


def noun(count: int, word: str, many: str | None = None) -> str:
    """`word` when count == 1, else its plural (`many`, default word + 's')."""
    return word if count == 1 else (many if many is not None else word + "s")


def plural(count: int, word: str, many: str | None = None, sep: bool = False) -> str:
    """'1 move', '2 moves', '0 moves'; with `sep`, thousands separated ('1,234 states')."""
    return f"{count:,} {noun(count, word, many)}" if sep else f"{count} {noun(count, word, many)}"


def _exponent(x: Fraction) -> int:
    """floor(log10(x)) for a rational x > 0, exactly."""
    e = (x.numerator.bit_length() - x.denominator.bit_length()) * 30103 // 100000
    while Fraction(10) ** e > x:
        e -= 1
    while Fraction(10) ** (e + 1) <= x:
        e += 1
    return e


def frac_str(x: Fraction) -> str:
    """A reduced rational as "num/den" (Fraction is always reduced): how every exact
    probability and moment is written in JSON, tables and checkpoints."""
    return f"{x.numerator}/{x.denominator}"


def decimal(x: Fraction | int | float | None, digits: int = DIGITS) -> str:
    """`x` to `digits` significant digits: positional for 1e-5 <= |x| < 1e12, else with an
    exponent ('1.5e-400'); trailing zeros dropped; '-' for None."""
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.{digits}g}"
    x = Fraction(x)
    if x == 0:
        return "0"
    sign = "-" if x < 0 else ""
    x = abs(x)
    e = _exponent(x)
    m = round(x * Fraction(10) ** (digits - 1 - e))
    if m >= 10**digits:  # rounding carried into a new digit
        m //= 10
        e += 1
    ds = str(m)
    if -5 <= e < 12:
        if e >= 0:
            whole = ds[: e + 1].ljust(e + 1, "0")
            frac = ds[e + 1:]
        else:
            whole, frac = "0", "0" * (-e - 1) + ds
        frac = frac.rstrip("0")
        return sign + whole + ("." + frac if frac else "")
    mant = ds[0] + ("." + ds[1:].rstrip("0") if ds[1:].rstrip("0") else "")
    return f"{sign}{mant}e{e:+d}"


def rescue_path(path: str | Path) -> Path:
    """A fresh file name in the temporary folder for a result that could not be written to
    `path` (`safeio.deliver`'s fallback)."""
    name = Path(path).name or "result"
    return Path(tempfile.gettempdir()) / f"zeckenum-rescued-{os.getpid()}-{time.time_ns()}-{name}"


def deliver_result(path: str | Path, data: bytes | str, what: str) -> None:
    """Write a finished result atomically to `path`; if that fails, `safeio.deliver` puts it
    in a rescue file in the temporary folder (or on standard output) and raises OutputError
    naming where it went (exit status 6)."""
    safeio.deliver(path, data, what, fallback=rescue_path(path))
