"""The position export of `solve N --export FILE`: every reachable position and its values.

The file is a NumPy `.npz` archive (a zip of `.npy` arrays, deflate-compressed), written
atomically (`core.text.deliver_result`: a temporary file renamed into place; a write that
fails puts the archive in a rescue file it names, exit 6).  It loads in one line,

    z = np.load("n40.npz")          # allow_pickle stays False: no array holds objects

and one row per reachable position, in the same order in every per-position array:
ascending level, then ascending rank inside the level (co-lexicographic: the largest bin is
the most significant digit).  Format `zpositions/1`:

| array | dtype | shape | meaning |
| --- | --- | --- | --- |
| `format` | str | () | "zpositions/1" |
| `rules`, `rules_hash` | str | () | the rule set's name and content hash |
| `rules_text` | str | () | the canonical rule file (`rulefile.format_rules`) |
| `n` | int64 | () | the n the game was solved at |
| `value` | int64 | () | the value of every position (n for games starting with n ones) |
| `convention` | str | () | "normal" (the last player to move wins) or "misere" |
| `bin_values` | int64 | (bins,) | the value of each bin, bin 1 first |
| `weights` | int64 | (bins,) | the level weights: `level = counts @ weights` |
| `start` | int64 | (bins,) | the start position's count vector |
| `counts` | uint8 / uint16 / uint32 | (states, bins) | each position's count vector, bin 1 first (the narrowest dtype that holds value // bin_values[0]) |
| `level` | uint16 / uint32 | (states,) | each position's level |
| `cls` | uint8 | (states,) | 0: P-position (the player to move loses), 1: N-position |
| `remoteness` | uint16 | (states,) | with the field "remoteness": moves to the end under optimal play (the winner hastens, the loser delays); its parity is the class |
| `grundy` | uint8 / uint16 | (states,) | with the field "grundy" (normal play): the Sprague–Grundy value |

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
    of the space counted as reachable), the archive built in memory (at most the arrays
    plus zip and deflate overhead: counted as the arrays again plus 1 MiB) and one
    listed layer (int64 per bin) at a time."""
    arrays = space.total_states() * row_bytes(space, fields)
    return 2 * arrays + (1 << 20) + space.largest_layer() * 8 * space.spec.nbins


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
    lose = 1 if misere else 0
    parts: dict[str, list[np.ndarray]] = {"counts": [], "level": [], "cls": [],
                                          "remoteness": [], "grundy": []}
    for level in sorted(rems):
        size = space.layer_size(level)
        if reach is None:
            keep = np.ones(size, dtype=bool)
        else:
            keep = np.unpackbits(reach[level], bitorder="little", count=size).astype(bool)
        if not keep.any():
            continue
        states = space.states(level)[keep]
        parts["counts"].append(states.astype(cdt))
        del states
        parts["level"].append(np.full(int(keep.sum()), level, dtype=ldt))
        rem = rems[level][keep]
        parts["cls"].append(((rem & 1) != lose).astype(np.uint8))
        if "remoteness" in fields:
            parts["remoteness"].append(rem)
        if "grundy" in fields and grus is not None:
            parts["grundy"].append(grus[level][keep])
    gdt = grundy_dtype(int(spec.mv_bins.shape[0]))
    empty = {"counts": np.zeros((0, spec.nbins), dtype=cdt), "level": np.zeros(0, ldt),
             "cls": np.zeros(0, np.uint8), "remoteness": np.zeros(0, np.uint16),
             "grundy": np.zeros(0, gdt)}
    out: dict[str, np.ndarray] = {
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
    }
    for key in ("counts", "level", "cls", "remoteness", "grundy"):
        if key == "remoteness" and "remoteness" not in fields:
            continue
        if key == "grundy" and "grundy" not in fields:
            continue
        chunks = parts[key]
        out[key] = np.concatenate(chunks) if chunks else empty[key]
        parts[key] = []
    return out


def write_export(path: str, arrays: dict[str, np.ndarray]) -> int:
    """Write the archive atomically (a failed write goes to a rescue file: OutputError,
    exit 6); returns its size in bytes."""
    buf = io.BytesIO()
    np.savez_compressed(buf, **arrays)
    data = buf.getbuffer()  # no copy: the buffer is written as it is
    deliver_result(path, data, "the position export")  # type: ignore[arg-type]
    return int(data.nbytes)
