"""The one notation for a position, in every input, output, file and error.

A *position* is a count vector: how many tokens lie in each bin, bin 1 (the smallest
value) first. It is written

    3,1,0,2          the count vector: comma-separated counts, bin 1 first

with trailing empty bins dropped (the empty position is written `0`). This form is what
every command reads (`--position`), what every file stores, and what every error names.
For reading by eye, commands may add the *value-annotated* form after it,

    3,1,0,2 (3*1 + 1*2 + 2*5 = 15)

each non-empty bin as count*value, bin 1 first, and the position's value after `=`.
The count vector alone is always enough: the annotated form is display only and is never
parsed.

Invariants: `parse_position(format_position(c)) == c` with trailing zeros stripped, for
every count vector c of non-negative integers; `format_position` never emits a space.
"""

from __future__ import annotations

from collections.abc import Sequence

from zeckenum.errors import InputError

MAX_COUNT = 1 << 40
"""Largest count accepted in one bin when parsing (a guard against runaway input; no game
this tool can enumerate comes near it)."""


def strip_counts(counts: Sequence[int]) -> tuple[int, ...]:
    """The count vector as a tuple of ints with trailing empty bins dropped."""
    out = [int(c) for c in counts]
    while out and out[-1] == 0:
        out.pop()
    return tuple(out)


SHOWN = 60
"""Most characters of a position an error message quotes (`shown`)."""


def shown(text: str, limit: int = SHOWN) -> str:
    """`text` (a position as given or formatted) cut to `limit` characters for an error
    message, with its length after the cut: one line stays short whatever the input."""
    return text if len(text) <= limit else f"{text[:limit]}... ({len(text)} characters)"


def format_position(counts: Sequence[int]) -> str:
    """The count vector, bin 1 first, trailing empty bins dropped: `3,1,0,2` (`0` if empty)."""
    c = strip_counts(counts)
    return ",".join(str(x) for x in c) if c else "0"


def annotate_position(counts: Sequence[int], values: Sequence[int]) -> str:
    """The count vector followed by its value-annotated form: `3,1,0,2 (3*1 + 1*2 + 2*5 = 15)`."""
    c = strip_counts(counts)
    if len(c) > len(values):
        raise ValueError(f"position {format_position(c)} has more bins than the rule set "
                         f"({len(values)})")
    terms = [f"{x}*{values[k]}" for k, x in enumerate(c) if x]
    total = sum(x * values[k] for k, x in enumerate(c))
    return f"{format_position(c)} ({' + '.join(terms) if terms else '0'} = {total})"


def parse_position(text: str, nbins: int | None = None) -> tuple[int, ...]:
    """Read a count vector `3,1,0,2` (spaces around commas allowed, optional surrounding
    brackets or parentheses). Returns the counts with trailing empty bins dropped.

    Raises `InputError` (one line) for anything else: an empty or non-integer field, a
    negative count, a count above `MAX_COUNT`, or, when `nbins` is given, a non-empty bin
    beyond the rule set's `nbins` bins.
    """
    s = text.strip()
    what = shown(repr(text))
    if len(s) >= 2 and (s[0], s[-1]) in {("[", "]"), ("(", ")")}:
        s = s[1:-1].strip()
    if not s:
        raise InputError(f"position {what}: expected counts per bin, bin 1 first, e.g. 3,1,0,2")
    counts = []
    for k, field in enumerate(s.split(","), 1):
        f = field.strip()
        if not f.isdigit() or not f.isascii():
            raise InputError(f"position {what}: bin {k} count {shown(repr(f), 24)} is not a "
                             "non-negative integer")
        v = int(f)
        if v > MAX_COUNT:
            raise InputError(f"position {what}: bin {k} count {shown(str(v), 24)} exceeds "
                             f"{MAX_COUNT}")
        counts.append(v)
    c = strip_counts(counts)
    if nbins is not None and len(c) > nbins:
        raise InputError(f"position {what}: bin {len(c)} is not empty but the rule set has "
                         f"{nbins} bins")
    return c
