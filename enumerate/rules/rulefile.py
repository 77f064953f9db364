"""Rule files: a small TOML format describing a game, read into a validated `RuleSet`.

A rule file (the shipped ones are in `rulesets/`)::

    name = "tribonacci"                # letters, digits, '-', '_', '.'
    about = "One line describing the game."
    start = "ones"                     # "ones": n tokens in bin 1
                                       # "greedy": the greedy decomposition of n
                                       # { vector = [0, 1] }: n * vector[i] tokens in bin i+1
                                       # { position = "3,1,0,2" }: exactly these counts,
                                       #   bin 1 first (README "Positions"); n = its value
    layering = "auto"                  # optional: "auto" (default), "tokens", "potential"

    [bins]                             # bin values, smallest first, strictly increasing
    initial = [1, 2, 4]                # either initial values and a linear recurrence
    recurrence = [1, 1, 1]             #   value(k) = 1*value(k-1) + 1*value(k-2) + 1*value(k-3)
    # values = [1, 2, 3, 5, 8]         # or a finite list of bins

    [[move]]                           # one table per move template
    name = "combine"
    from = 3                           # the template applies at every index k >= 3 ...
    # to = 10                          # ... up to k = 10 (optional; default: as far as bins go)
    take = ["k-2", "k-1", "k"]         # one entry per token taken; bins relative to k
    give = ["k+1"]                     # one entry per token given

    [[move]]                           # a one-off move for a boundary bin
    name = "combine-ones"
    at = 1                             # only at index k = 1 (here bins may also be given
    take = ["k", "k"]                  #   as plain numbers: take = [1, 1], give = [2])
    give = ["k+1"]

Bins are numbered from 1.  A bin expression is "k", "k+N" or "k-N"; repeating an entry
takes (gives) several tokens of that bin.  n is the size parameter of every computation:
the game's value is n, or n * value(vector) for a vector start; a position start fixes the
game's value to the position's (every n but that one is refused, `model`).

`read_rule_file` checks the syntax and the value of every move (`validate.check_values`)
and raises InputError with one line naming the file and the offending key or move.
Termination is checked when the rule set is instantiated for an n (`layering`).

A rule file is untrusted input.  It is read with `safeio.read_regular` (a regular file of at
most `MAX_RULE_FILE_BYTES`; FIFOs, devices and directories are refused without blocking),
must be UTF-8, and every number in it is bounded before anything is computed from it:

    bin lists (values, initial, recurrence, start vector)  at most MAX_LIST entries
    bin values and initial values                          1 .. MAX_BIN_VALUE (2^62)
    recurrence coefficients                                0 .. MAX_COEFFICIENT
    bin indices (at, from, to) and offsets (k+N, k-N)      at most MAX_BIN_INDEX
    start vector entries                                   0 .. MAX_VECTOR_ENTRY
    start position counts (`notation.parse_position`)     0 .. notation.MAX_COUNT, value
                                                           at most 2^62

Every error is one line of at most `MAX_MESSAGE` (280) characters (long numbers in a message are
shortened to their leading digits and their length).
"""

from __future__ import annotations

import json
import re
import sys
from collections import Counter
from pathlib import Path
from typing import Any

from zeckenum.errors import InputError
from zeckenum.rules.model import MoveTemplate, RuleSet
from zeckenum.rules.notation import format_position, parse_position
from zeckenum.rules.validate import check_values
from zeckenum.safeio import MiB, read_regular

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

TOP_KEYS = ("name", "about", "start", "layering", "bins", "move")
BIN_KEYS = ("values", "initial", "recurrence")
MOVE_KEYS = ("name", "at", "from", "to", "take", "give")
NAME_RE = re.compile(r"^[A-Za-z0-9_.-]{1,80}$")
BIN_RE = re.compile(r"^\s*k\s*(?:([+-])\s*(\d+))?\s*$")
MAX_BIN_VALUE = 2**62
MAX_RULE_FILE_BYTES = 1 * MiB
"""Largest rule file read (the shipped ones are about 1 KB)."""
MAX_LIST = 512
"""Most entries in a list of bins, initial values, coefficients or start counts."""
MAX_BIN_INDEX = 1024
"""Largest bin index (at, from, to) and largest offset N in "k+N" / "k-N"."""
MAX_COEFFICIENT = 2**31
"""Largest recurrence coefficient."""
MAX_VECTOR_ENTRY = 2**31
"""Largest count of a start vector (the start holds n times it)."""
MAX_MESSAGE = 280
"""Longest error message (characters) a malformed file produces: with the "zeckenum: error: "
prefix the line stays within 300 characters."""
_LONG_NUMBER = re.compile(r"\d{25,}")


def short_message(text: str, limit: int = MAX_MESSAGE) -> str:
    """`text` on one line of at most `limit` characters: numbers of 25 digits or more become
    their first digits and their length, then the middle of an over-long line is cut."""
    text = _LONG_NUMBER.sub(lambda m: f"{m.group()[:8]}...({len(m.group())} digits)", text)
    text = " ".join(text.split())
    if len(text) > limit:
        keep = (limit - 5) // 2
        text = f"{text[:keep]} ... {text[-keep:]}"
    return text


def _where_of(path: str | Path) -> str:
    return short_message(str(path), 120)


def read_bytes(path: str | Path, max_bytes: int, what: str) -> bytes:
    """`safeio.read_regular` with its refusal cut to one short line (InputError): a regular
    file (symlinks followed) of at most `max_bytes`, never a FIFO or a device, so reading
    cannot block or run forever."""
    try:
        return read_regular(path, max_bytes, what)
    except InputError as exc:
        raise InputError(short_message(str(exc))) from None


def decode_text(data: bytes, where: str) -> str:
    """`data` as UTF-8 text; InputError naming `where` and the first bad byte otherwise."""
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{where}: not UTF-8 text (bad byte at offset {exc.start})") from None


def read_text_file(path: str | Path, max_bytes: int, what: str) -> str:
    """The UTF-8 text of a small input file (rule, policy file): `read_bytes` then
    `decode_text`, each failure one line."""
    return decode_text(read_bytes(path, max_bytes, what), _where_of(path))


def read_rule_file(path: str | Path) -> RuleSet:
    """The validated rule set of a rule file (InputError with one line on any problem),
    read by `read_text_file` (at most MAX_RULE_FILE_BYTES)."""
    return parse_rules(read_text_file(path, MAX_RULE_FILE_BYTES, "rule file"),
                       where=_where_of(path))


def parse_rules(text: str, where: str = "<rules>") -> RuleSet:
    """The validated rule set described by the TOML `text` (`where` names it in errors).

    Never raises anything but InputError for any text: every message is one short line.
    """
    try:
        return _parse_rules(text, where)
    except InputError as exc:
        raise InputError(short_message(str(exc))) from None
    except RecursionError:
        raise InputError(f"{where}: arrays or tables nested too deeply") from None


def _parse_rules(text: str, where: str) -> RuleSet:
    if len(text) > MAX_RULE_FILE_BYTES:
        raise InputError(f"{where}: rule text of {len(text)} characters, more than the "
                         f"{MAX_RULE_FILE_BYTES} allowed")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{where}: not valid TOML: {exc}") from None
    except ValueError as exc:  # e.g. an integer literal beyond int's digit limit
        raise InputError(f"{where}: not valid TOML: {exc}") from None
    pre = f"{where}: "
    _known(doc, TOP_KEYS, pre, "the file")
    name = doc.get("name")
    if not isinstance(name, str) or not NAME_RE.match(name):
        raise InputError(f"{pre}'name' must be a word of letters, digits, '-', '_' or '.'")
    about = doc.get("about", "")
    if not isinstance(about, str) or "\n" in about.strip():
        raise InputError(f"{pre}'about' must be a one-line string")
    layering = doc.get("layering", "auto")
    if layering not in ("auto", "tokens", "potential"):
        raise InputError(f"{pre}'layering' must be \"auto\", \"tokens\" or \"potential\"")
    initial, recurrence = _bins(doc.get("bins"), pre)
    nlisted = None if recurrence else len(initial)
    moves = doc.get("move")
    if not isinstance(moves, list) or not moves:
        raise InputError(f"{pre}no moves: add at least one [[move]] table")
    templates: list[MoveTemplate] = []
    seen: set[str] = set()
    for i, mv in enumerate(moves, start=1):
        tpl = _move(mv, i, nlisted, pre)
        if tpl.name in seen:
            raise InputError(f"{pre}move {tpl.name!r} is defined twice")
        seen.add(tpl.name)
        templates.append(tpl)
    start = _start(doc.get("start", "ones"), len(initial) if nlisted else None, pre)
    position = None
    if isinstance(start, dict):
        position, start = start["position"], "ones"
    rules = RuleSet(
        name=name,
        description=about.strip(),
        initial=initial,
        recurrence=recurrence,
        templates=tuple(templates),
        start=start,
        level_weights=layering,
    )
    check_values(rules, where=pre)
    if position is not None:
        try:
            rules = rules.at_position(position)
        except InputError as exc:
            raise InputError(f"{pre}start {exc}") from None
    return rules


def _known(table: dict, keys: tuple[str, ...], pre: str, what: str) -> None:
    for key in table:
        if key not in keys:
            raise InputError(
                f"{pre}unknown key {key!r} in {what} (known: {', '.join(keys)})"
            )


def _ints(x: Any, what: str, pre: str, minimum: int, maximum: int) -> tuple[int, ...]:
    if not isinstance(x, list) or not x or not all(
        isinstance(v, int) and not isinstance(v, bool) for v in x
    ):
        raise InputError(f"{pre}{what} must be a non-empty list of integers")
    if len(x) > MAX_LIST:
        raise InputError(f"{pre}{what} has {len(x)} entries, more than the {MAX_LIST} allowed")
    for i, v in enumerate(x, start=1):
        if not minimum <= v <= maximum:
            raise InputError(f"{pre}{what}: entry {i} is {v}, outside {minimum}..{maximum}")
    return tuple(x)


def _bins(bins: Any, pre: str) -> tuple[tuple[int, ...], tuple[int, ...]]:
    """(initial values, recurrence coefficients); a listed set has no recurrence."""
    if not isinstance(bins, dict):
        raise InputError(f"{pre}missing [bins] table (values = [...], or initial and recurrence)")
    _known(bins, BIN_KEYS, pre, "[bins]")
    if "values" in bins:
        if "initial" in bins or "recurrence" in bins:
            raise InputError(f"{pre}[bins] takes either 'values' or 'initial' and 'recurrence'")
        vals = _ints(bins["values"], "bins.values", pre, 1, MAX_BIN_VALUE)
        _increasing(vals, pre, "bins.values")
        return vals, ()
    if "initial" not in bins or "recurrence" not in bins:
        raise InputError(f"{pre}[bins] needs 'values', or both 'initial' and 'recurrence'")
    initial = _ints(bins["initial"], "bins.initial", pre, 1, MAX_BIN_VALUE)
    recurrence = _ints(bins["recurrence"], "bins.recurrence", pre, 0, MAX_COEFFICIENT)
    if len(recurrence) > len(initial):
        raise InputError(
            f"{pre}bins.recurrence has {len(recurrence)} coefficients but only "
            f"{len(initial)} initial values"
        )
    vals = list(initial)
    while vals[-1] <= MAX_BIN_VALUE and len(vals) < len(initial) + 200:
        vals.append(sum(c * vals[-1 - i] for i, c in enumerate(recurrence)))
    _increasing(vals, pre, "the bins from bins.recurrence")
    return initial, recurrence


def _increasing(vals: Any, pre: str, what: str) -> None:
    for i in range(1, len(vals)):
        if vals[i] <= vals[i - 1]:
            raise InputError(
                f"{pre}{what} must increase strictly: bin {i + 1} has value {vals[i]} after "
                f"{vals[i - 1]}"
            )


def _offsets(entries: Any, key: str, label: str, k_fixed: int | None, pre: str) -> tuple:
    """(offset, tokens) pairs, sorted by offset, from a take/give list."""
    if not isinstance(entries, list) or not entries:
        raise InputError(f"{pre}move {label}: '{key}' must be a non-empty list of bins")
    if len(entries) > MAX_LIST:
        raise InputError(f"{pre}move {label}: '{key}' lists {len(entries)} tokens, more than "
                         f"the {MAX_LIST} allowed")
    counts: Counter[int] = Counter()
    for e in entries:
        if isinstance(e, int) and not isinstance(e, bool):
            if not 1 <= e <= MAX_BIN_INDEX:
                raise InputError(f"{pre}move {label}: bin {e} in '{key}' is outside "
                                 f"1..{MAX_BIN_INDEX}")
            if k_fixed is None:
                raise InputError(
                    f"{pre}move {label}: plain bin number {e} in '{key}' is only allowed in "
                    "a one-off move (at = ...); use k, k+N or k-N"
                )
            counts[e - k_fixed] += 1
            continue
        m = BIN_RE.match(e) if isinstance(e, str) and len(e) <= 40 else None
        if m is None:
            raise InputError(
                f"{pre}move {label}: bad bin {e!r} in '{key}' (use \"k\", \"k+N\" or \"k-N\")"
            )
        if len(m.group(2) or "") > 6 or int(m.group(2) or 0) > MAX_BIN_INDEX:
            raise InputError(f"{pre}move {label}: bin {e!r} in '{key}' is more than "
                             f"{MAX_BIN_INDEX} bins away from k")
        off = int(m.group(2) or 0) * (-1 if m.group(1) == "-" else 1)
        counts[off] += 1
    return tuple(sorted(counts.items()))


def _move(mv: Any, i: int, nlisted: int | None, pre: str) -> MoveTemplate:
    if not isinstance(mv, dict):
        raise InputError(f"{pre}move {i} must be a [[move]] table")
    name = mv.get("name")
    if not isinstance(name, str) or not NAME_RE.match(name):
        raise InputError(f"{pre}move {i}: 'name' must be a word of letters, digits, '-', '_'")
    label = repr(name)
    _known(mv, MOVE_KEYS, pre, f"move {label}")

    def index(key: str) -> int | None:
        v = mv.get(key)
        if v is None:
            return None
        if not isinstance(v, int) or isinstance(v, bool) or not 1 <= v <= MAX_BIN_INDEX:
            raise InputError(f"{pre}move {label}: '{key}' must be a bin index from 1 to "
                             f"{MAX_BIN_INDEX}, got {str(v)[:40]}")
        return v

    at, first, last = index("at"), index("from"), index("to")
    if (at is None) == (first is None):
        raise InputError(f"{pre}move {label}: give exactly one of 'at' (one index) or 'from'")
    if at is not None:
        if last is not None:
            raise InputError(f"{pre}move {label}: 'to' goes with 'from', not with 'at'")
        first = last = at
    if last is not None and last < first:
        raise InputError(f"{pre}move {label}: 'to' = {last} is below 'from' = {first}")
    takes = _offsets(mv.get("take"), "take", label, at, pre)
    gives = _offsets(mv.get("give"), "give", label, at, pre)
    tpl = MoveTemplate(name, takes=takes, gives=gives, first=first, last=last)
    if not tpl.effect(first):
        raise InputError(f"{pre}move {label}: it gives back exactly what it takes")
    lo = first + min(off for off, _ in takes + gives)
    if lo < 1:
        raise InputError(f"{pre}move {label}: at index {first} it uses bin {lo}, which does not "
                         "exist (bins start at 1)")
    if nlisted is not None:
        hi_off = max(off for off, _ in takes + gives)
        end = first if last is None else last
        if end + hi_off > nlisted:
            raise InputError(
                f"{pre}move {label}: at index {end} it uses bin {end + hi_off}, but only "
                f"bins 1..{nlisted} are listed"
            )
    return tpl


def _start(start: Any, nlisted: int | None, pre: str) -> str | tuple[int, ...] | dict:
    """"ones", "greedy", a vector (tuple) or {"position": counts} (checked by the caller
    against the bins, `RuleSet.at_position`)."""
    if start in ("ones", "greedy"):
        return start
    if isinstance(start, dict) and set(start) == {"position"}:
        text = start["position"]
        if not isinstance(text, str):
            raise InputError(f"{pre}start position must be a string of counts per bin, bin 1 "
                             "first, e.g. \"3,1,0,2\"")
        try:
            return {"position": parse_position(text[:4096], nlisted)}
        except InputError as exc:
            raise InputError(f"{pre}start {short_message(str(exc), 200)}") from None
    if isinstance(start, dict) and set(start) == {"vector"}:
        vec = start["vector"]
        if isinstance(vec, list) and len(vec) > MAX_LIST:
            raise InputError(f"{pre}start vector has {len(vec)} entries, more than the "
                             f"{MAX_LIST} allowed")
        if isinstance(vec, list) and any(
            isinstance(v, int) and not isinstance(v, bool) and v > MAX_VECTOR_ENTRY for v in vec
        ):
            raise InputError(f"{pre}start vector entries must be at most {MAX_VECTOR_ENTRY}")
        if (
            isinstance(vec, list) and vec and any(vec)
            and all(isinstance(v, int) and not isinstance(v, bool) and v >= 0 for v in vec)
        ):
            if nlisted is not None and len(vec) > nlisted:
                raise InputError(
                    f"{pre}start vector has {len(vec)} entries but only {nlisted} bins are "
                    "listed"
                )
            return tuple(vec)
        raise InputError(f"{pre}start vector must be a list of counts >= 0, not all zero")
    raise InputError(
        f"{pre}'start' must be \"ones\", \"greedy\", {{ vector = [counts per bin] }} or "
        f"{{ position = \"counts per bin\" }}"
    )


def bin_expression(off: int) -> str:
    """The rule-file expression of a bin at offset `off` from k: 'k', 'k+1' or 'k-2'."""
    return "k" if off == 0 else f"k{off:+d}"


def _toml_str(text: str) -> str:
    """A TOML basic string of `text`: JSON escaping, except that characters outside the
    Basic Multilingual Plane stay literal (JSON writes them as surrogate pairs, which TOML
    refuses) and DEL is escaped (TOML refuses it literal, JSON leaves it)."""
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")


def format_rules(rules: RuleSet) -> str:
    """The canonical rule-file text of `rules`: `parse_rules(format_rules(r))` has the same
    content hash as `r` (tested for every shipped rule set and generated ones).

    Tables, checkpoints, reports and strategy files embed this text, so a result carries
    the exact game it was computed for and can be recomputed from the file alone.
    """
    lines = [f"name = {_toml_str(rules.name)}", f"about = {_toml_str(rules.description)}"]
    if rules.position is not None:
        lines.append(f"start = {{ position = {_toml_str(format_position(rules.position))} }}")
    elif isinstance(rules.start, tuple):
        lines.append(f"start = {{ vector = [{', '.join(str(c) for c in rules.start)}] }}")
    else:
        lines.append(f"start = {_toml_str(rules.start)}")
    lines += [f"layering = {_toml_str(rules.level_weights)}", "", "[bins]"]
    if rules.recurrence:
        lines.append(f"initial = [{', '.join(str(v) for v in rules.initial)}]")
        lines.append(f"recurrence = [{', '.join(str(c) for c in rules.recurrence)}]")
    else:
        lines.append(f"values = [{', '.join(str(v) for v in rules.initial)}]")
    for tpl in rules.templates:
        lines += ["", "[[move]]", f"name = {_toml_str(tpl.name)}"]
        if tpl.last is not None and tpl.last == tpl.first:
            lines.append(f"at = {tpl.first}")
        else:
            lines.append(f"from = {tpl.first}")
            if tpl.last is not None:
                lines.append(f"to = {tpl.last}")
        for key, pairs in (("take", tpl.takes), ("give", tpl.gives)):
            bins = [json.dumps(bin_expression(off)) for off, c in pairs for _ in range(c)]
            lines.append(f"{key} = [{', '.join(bins)}]")
    return "\n".join(lines) + "\n"


def rules_from_text(text: str, expected_hash: str | None = None,
                    where: str = "<embedded rules>") -> RuleSet:
    """The rule set of an embedded rule-file text, refused (InputError) when its content hash
    differs from `expected_hash` (the hash recorded beside it)."""
    rules = parse_rules(text, where=where)
    if expected_hash is not None and rules.content_hash() != expected_hash:
        raise InputError(
            f"{where}: the embedded rule file has content hash {rules.content_hash()}, "
            f"but {expected_hash} is recorded beside it; the file was altered"
        )
    return rules
