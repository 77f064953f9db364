"""The position export of `solve N --export FILE`: every reachable position and its values.

The file is a NumPy `.npz` archive (a zip of `.npy` arrays, deflate-compressed), written
atomically (`core.text.deliver_result`: a temporary file renamed into place; a write that
fails puts the archive in a rescue file it names, exit 6).  It loads in one line,

    z = np.load("n40.npz")          # allow_pickle stays False: no array holds objects

and one row per reachable position, in the same order in every per-position array:
ascending level, then ascending rank inside the level (co-lexicographic: the largest bin is
the most significant digit).  Format `zpositions/1`.

Metadata (0-d arrays unless a shape is given):

* `format` (str): "zpositions/1";
* `rules`, `rules_hash` (str): the rule set's name and content hash; `rules_text` (str):
  the canonical rule file (`rulefile.format_rules`);
* `n` (int64): the n the game was solved at; `value` (int64): the value of every position
  (n for games that start with n ones);
* `convention` (str): "normal" (the last player to move wins) or "misere";
* `bin_values`, `weights`, `start` (int64, shape (bins,)): each bin's value, the level
  weights (`level = counts @ weights`) and the start's count vector, bin 1 first.

One row per position (shape (states,) or (states, bins)):

* `counts` (uint8, uint16 or uint32: the narrowest that holds value // bin_values[0]):
  the count vector, bin 1 first;
* `level` (uint16 or uint32): the position's level;
* `cls` (uint8): 0 for a P-position (the player to move loses), 1 for an N-position;
* `remoteness` (uint16; field "remoteness"): the moves left under optimal play (the
  winner hastens, the loser delays); its parity is the class;
* `grundy` (uint8, or uint16 for games of more than 255 moves; field "grundy", normal
  play only): the Sprague–Grundy value.

`cls` and `remoteness` follow the file's `convention`.  Invariants (checked by the
tests against brute force): the rows are exactly the positions reachable from `start`,
each once; `counts @ bin_values == value`; `grundy == 0` exactly where `cls == 0` (normal
play); with normal play `remoteness % 2 == 1 - cls`, with misère `remoteness % 2 == cls`.

Memory: `export_bytes` forecasts the arrays and the archive before the sweep starts.
"""

from __future__ import annotations

import io
from collections.abc import Iterable

import numpy as np
from zeckenum.core.statespace import StateSpace
from zeckenum.core.text import deliver_result
from zeckenum.errors import InputError
from zeckenum.optimal.classify import grundy_dtype
from zeckenum.rules.rulefile import format_rules

FORMAT_TAG = "zpositions/1"
"""The export's format name and version (array `format`)."""

EXPORT_FIELDS = ("class", "remoteness", "grundy")
"""The per-position values an export may carry (`counts` and `level` always)."""


def parse_fields(text: str | Iterable[str]) -> tuple[str, ...]:
    """The export fields from "class,remoteness" (or a sequence), in canonical order;
    InputError for an unknown or empty list.  "class" is always included."""
    items = text.split(",") if isinstance(text, str) else list(text)
    got = {str(f).strip().lower() for f in items if str(f).strip()}
    unknown = sorted(got - set(EXPORT_FIELDS))
    if unknown:
        raise InputError(f"unknown export field {unknown[0]!r} (known: "
                         f"{', '.join(EXPORT_FIELDS)})")
    got.add("class")
    return tuple(f for f in EXPORT_FIELDS if f in got)


def count_dtype(value: int, smallest_bin: int) -> np.dtype:
    """The narrowest unsigned dtype of a count: no bin holds more than value // smallest_bin."""
    most = value // max(1, smallest_bin)
    for dt in (np.uint8, np.uint16, np.uint32):
        if most <= np.iinfo(dt).max:
            return np.dtype(dt)
    return np.dtype(np.uint64)


def level_dtype(top: int) -> np.dtype:
    return np.dtype(np.uint16) if top <= 0xFFFF else np.dtype(np.uint32)


def row_bytes(space: StateSpace, fields: tuple[str, ...]) -> int:
    """Bytes of one position's row over every array of the export."""
    spec = space.spec
    per = (spec.nbins * count_dtype(spec.n, int(spec.values[0])).itemsize
           + level_dtype(space.top).itemsize + 1)
    if "remoteness" in fields:
        per += 2
    if "grundy" in fields:
        per += grundy_dtype(int(spec.mv_bins.shape[0])).itemsize
    return per


def export_bytes(space: StateSpace, fields: tuple[str, ...]) -> int:
    """Upper bound of the export's memory on top of the sweep's: the arrays (every state
    of the space counted as reachable, each array allocated once at its final size), the
    archive built in memory (deflate never grows data by more than a few bytes per 16 KiB
    block, so: the arrays again plus a sixteenth, plus 1 MiB of zip, zlib and buffer
    slack) and one listed layer (int64 per bin) with its masked copy at a time."""
    arrays = space.total_states() * row_bytes(space, fields)
    return (2 * arrays + arrays // 16 + (1 << 20)
            + 2 * space.largest_layer() * 8 * space.spec.nbins)


def export_arrays(
    space: StateSpace, n: int, misere: bool, fields: tuple[str, ...],
    rems: dict[int, np.ndarray], grus: dict[int, np.ndarray] | None,
    reach: dict[int, np.ndarray] | None,
) -> dict[str, np.ndarray]:
    """The arrays of the export (module docstring) from a whole sweep's per-state values
    (`classify.layer_values(..., keep=True)`) and, for rule sets that need it, the
    reachability bits."""
    spec = space.spec
    rs = spec.rules
    cdt = count_dtype(spec.n, int(spec.values[0]))
    ldt = level_dtype(space.top)
    gdt = grundy_dtype(int(spec.mv_bins.shape[0]))
    lose = 1 if misere else 0
    levels = sorted(rems)

    def kept(level: int) -> np.ndarray | None:
        """The reachable ranks of a level as a bool mask (None: all of them)."""
        if reach is None:
            return None
        return np.unpackbits(reach[level], bitorder="little",
                             count=space.layer_size(level)).astype(bool)

    rows = sum(space.layer_size(lv) if reach is None else
               int(np.bitwise_count(reach[lv]).sum()) for lv in levels)
    # allocated once at their final size and filled layer by layer (no concatenation)
    out_rows: dict[str, np.ndarray] = {
        "counts": np.zeros((rows, spec.nbins), dtype=cdt),
        "level": np.zeros(rows, dtype=ldt),
        "cls": np.zeros(rows, dtype=np.uint8),
    }
    if "remoteness" in fields:
        out_rows["remoteness"] = np.zeros(rows, dtype=np.uint16)
    if "grundy" in fields:
        out_rows["grundy"] = np.zeros(rows, dtype=gdt)
    at = 0
    for level in levels:
        mask = kept(level)
        rem = rems[level] if mask is None else rems[level][mask]
        k = rem.size
        if k == 0:
            continue
        states = space.states(level)
        out_rows["counts"][at : at + k] = states if mask is None else states[mask]
        del states
        out_rows["level"][at : at + k] = level
        out_rows["cls"][at : at + k] = (rem & 1) != lose
        if "remoteness" in fields:
            out_rows["remoteness"][at : at + k] = rem
        if "grundy" in fields and grus is not None:
            out_rows["grundy"][at : at + k] = (grus[level] if mask is None
                                               else grus[level][mask])
        at += k
    if at != rows:
        raise RuntimeError("the export's rows do not match the reachable states")
    return {
        "format": np.array(FORMAT_TAG),
        "rules": np.array(rs.name),
        "rules_hash": np.array(rs.content_hash()),
        "rules_text": np.array(format_rules(rs)),
        "n": np.array(n, dtype=np.int64),
        "value": np.array(spec.n, dtype=np.int64),
        "convention": np.array("misere" if misere else "normal"),
        "bin_values": np.asarray(spec.values, dtype=np.int64),
        "weights": np.asarray(spec.weights, dtype=np.int64),
        "start": np.asarray(spec.start, dtype=np.int64),
        **out_rows,
    }


def write_export(path: str, arrays: dict[str, np.ndarray]) -> int:
    """Write the archive atomically (a failed write goes to a rescue file: OutputError,
    exit 6); returns its size in bytes."""
    buf = io.BytesIO()
    np.savez_compressed(buf, **arrays)
    data = buf.getbuffer()  # no copy: the buffer is written as it is
    deliver_result(path, data, "the position export")  # type: ignore[arg-type]
    return int(data.nbytes)
