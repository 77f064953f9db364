"""Policy files: a candidate strategy written as ordered preferences (the `zpolicy/1` format).

A *policy* picks one move at every position where its player is to move.  A policy file is
TOML, UTF-8, at most MAX_POLICY_BYTES:

    format = "zpolicy/1"              # required, exactly this
    name = "split-high"               # required: a short name (letters, digits, - _ .)
    about = "split high, else combine low"   # optional, free text

    [[prefer]]                        # preferences, tried in file order
    moves = ["split"]                 # move kinds and/or template names (below)
    bin = "highest"                   # "highest" or "lowest" (default "highest")
    from = 3                          # optional: only moves at bin index k >= 3
    to = 10                           # optional: only moves at bin index k <= 10
    when = ["c[k] >= 3", "c[1] is even"]   # optional: all must hold

    [[prefer]]
    moves = ["combine"]
    bin = "lowest"

How a choice is made.  Every move is a template of the rule set applied at a bin index k
(1-based; the move `split@4` is the template `split` at k = 4).  For each preference in
order, the *candidates* are the legal moves whose template is in `moves`, whose k lies in
`from`..`to`, and for which every condition of `when` holds (conditions may refer to the
candidate's k).  The first preference with a candidate decides: it plays the candidate
with the highest (or lowest) k; among candidates at the same k, the template listed first
in `moves` (a kind stands for its templates in rule-set order).  When no preference has a
candidate the policy plays the *fallback*: the legal move that comes first in the rule
set's move order (templates in file order, k ascending).  The policy is deterministic.

Move kinds.  `"combine"`: the templates that give fewer tokens than they take (they lower
the token count); `"split"`: the templates that give at least as many tokens as they take;
`"any"`: every template.  Any other entry must be the name of a template of the rule set
the policy is tested on (`combine-ones`, `combine`, `split-twos`, `split` in the standard
game); an unknown name is refused when the policy is compiled for that rule set.

Conditions (strings, one comparison each; spaces optional):

    TERM OP INTEGER          OP one of  >= <= == != > <
    TERM is even | TERM is odd

    TERM   c[B]     the count of bin B of the position the policy moves from
           tokens   the number of tokens of the position
           top      the highest non-empty bin (1-based; 0 for the empty position)
    B      an integer >= 1 (an absolute bin), k, k+j or k-j (relative to the candidate's
           bin index k); a bin outside 1..bins counts 0 tokens

Examples: "c[k] >= 3" (at least three tokens where the move is made), "c[k-1] == 0",
"tokens is odd", "top > 4".

Everything read is untrusted: the file is read with `safeio.read_regular`, unknown keys,
wrong types and out-of-range numbers are refused with one line (`InputError`, exit 2), and
sizes are bounded (MAX_PREFERENCES, MAX_CONDITIONS, MAX_BIN, MAX_LITERAL).

`compile_policy(policy, spec)` turns a parsed `Policy` into the plain arrays the kernel
`optimal.policy.choose_policy_moves` reads (`CompiledPolicy`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from zeckenum.errors import InputError
from zeckenum.rules.model import GameSpec
from zeckenum.rules.rulefile import read_text_file, short_message
from zeckenum.safeio import MiB

try:  # pragma: no cover - Python < 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover
    import tomli as tomllib

FORMAT_TAG = "zpolicy/1"
MAX_POLICY_BYTES = 1 * MiB
MAX_PREFERENCES = 256
MAX_CONDITIONS = 32
"""Most conditions in one preference's `when`."""
MAX_BIN = 10_000
"""Largest bin index or relative offset a policy may name."""
MAX_LITERAL = 10**12
"""Largest absolute integer a condition compares with."""
KINDS = ("combine", "split", "any")
TOP_KEYS = {"format", "name", "about", "prefer"}
PREFER_KEYS = {"moves", "bin", "from", "to", "when"}

TERM_COUNT, TERM_TOKENS, TERM_TOP = 0, 1, 2
OPS = {">=": 0, "<=": 1, "==": 2, "!=": 3, ">": 4, "<": 5, "even": 6, "odd": 7}

_COND = re.compile(
    r"^\s*(?:c\s*\[\s*(?P<bin>k\s*[+-]\s*\d{1,6}|k|\d{1,6})\s*\]|(?P<word>tokens|top))\s*"
    r"(?:(?P<op>>=|<=|==|!=|>|<)\s*(?P<val>-?\d{1,13})|is\s+(?P<par>even|odd))\s*$"
)
_NAME = re.compile(r"^[A-Za-z0-9_.\-]{1,64}$")


@dataclass(frozen=True)
class Condition:
    """One comparison.  term: TERM_COUNT (c[bin]), TERM_TOKENS or TERM_TOP; for c[...],
    `relative` says whether `bin` is an offset from k (else an absolute 1-based bin);
    op: a code of OPS; value: the integer compared with (unused for even/odd)."""

    text: str
    term: int
    relative: bool
    bin: int
    op: int
    value: int


@dataclass(frozen=True)
class Preference:
    """One `[[prefer]]` table: move kinds or template names, bin choice, k range, conditions."""

    moves: tuple[str, ...]
    highest: bool
    k_from: int
    k_to: int | None
    when: tuple[Condition, ...]


@dataclass(frozen=True)
class Policy:
    """A parsed policy file (module docstring)."""

    name: str
    about: str
    prefer: tuple[Preference, ...]
    source: str = ""


def parse_condition(text: object, where: str) -> Condition:
    """One condition string (module docstring), or InputError naming `where`."""
    if not isinstance(text, str):
        raise InputError(f"{where}: a condition must be a string, got {type(text).__name__}")
    m = _COND.match(text)
    if m is None:
        raise InputError(f"{where}: cannot read condition {short_message(text, 60)!r} "
                         "(expected e.g. 'c[k] >= 2', 'c[3] is odd', 'tokens > 4')")
    term, relative, b = TERM_COUNT, False, 0
    if m.group("word") is not None:
        term = TERM_TOKENS if m.group("word") == "tokens" else TERM_TOP
    else:
        spec = m.group("bin").replace(" ", "")
        if spec.startswith("k"):
            relative = True
            b = int(spec[1:]) if len(spec) > 1 else 0
        else:
            b = int(spec)
            if b < 1:
                raise InputError(f"{where}: condition {text!r}: bins are numbered from 1")
        if abs(b) > MAX_BIN:
            raise InputError(f"{where}: condition {text!r}: bin beyond {MAX_BIN}")
    if m.group("par") is not None:
        return Condition(text, term, relative, b, OPS[m.group("par")], 0)
    value = int(m.group("val"))
    if abs(value) > MAX_LITERAL:
        raise InputError(f"{where}: condition {text!r}: |{value}| exceeds {MAX_LITERAL}")
    return Condition(text, term, relative, b, OPS[m.group("op")], value)


def _int_field(table: dict, key: str, where: str, lo: int, hi: int) -> int | None:
    if key not in table:
        return None
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
        raise InputError(f"{where}: {key} must be an integer from {lo} to {hi}")
    return v


def _preference(item: object, i: int) -> Preference:
    where = f"preference {i}"
    if not isinstance(item, dict):
        raise InputError(f"{where}: must be a [[prefer]] table")
    extra = set(item) - PREFER_KEYS
    if extra:
        raise InputError(f"{where}: unknown key {short_message(sorted(extra)[0], 40)!r} "
                         f"(known: {', '.join(sorted(PREFER_KEYS))})")
    moves = item.get("moves")
    if (not isinstance(moves, list) or not moves or len(moves) > 64
            or not all(isinstance(x, str) and _NAME.match(x) for x in moves)):
        raise InputError(f"{where}: moves must be a non-empty list of move kinds "
                         f"({', '.join(KINDS)}) or template names")
    pick = item.get("bin", "highest")
    if pick not in ("highest", "lowest"):
        raise InputError(f"{where}: bin must be \"highest\" or \"lowest\"")
    k_from = _int_field(item, "from", where, 1, MAX_BIN) or 1
    k_to = _int_field(item, "to", where, 1, MAX_BIN)
    if k_to is not None and k_to < k_from:
        raise InputError(f"{where}: to={k_to} is below from={k_from}")
    when = item.get("when", [])
    if not isinstance(when, list) or len(when) > MAX_CONDITIONS:
        raise InputError(f"{where}: when must be a list of at most {MAX_CONDITIONS} "
                         "condition strings")
    conds = tuple(parse_condition(c, where) for c in when)
    return Preference(tuple(moves), pick == "highest", k_from, k_to, conds)


def parse_policy(text: str, name: str = "<policy>") -> Policy:
    """Parse policy text (module docstring); InputError (one line) for anything malformed."""
    label = short_message(name, 120)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(short_message(f"{label}: not valid TOML ({exc})")) from None
    except (RecursionError, ValueError) as exc:
        raise InputError(short_message(f"{label}: not valid TOML ({exc})")) from None
    try:
        return _policy(doc, text)
    except InputError as exc:
        raise InputError(short_message(f"{label}: {exc}")) from None


def _policy(doc: dict, text: str) -> Policy:
    extra = set(doc) - TOP_KEYS
    if extra:
        raise InputError(f"unknown key {short_message(sorted(extra)[0], 40)!r} "
                         f"(known: {', '.join(sorted(TOP_KEYS))})")
    if doc.get("format") != FORMAT_TAG:
        raise InputError(f"format = \"{FORMAT_TAG}\" is required")
    name = doc.get("name")
    if not isinstance(name, str) or not _NAME.match(name):
        raise InputError("name must be 1 to 64 letters, digits, '-', '_' or '.'")
    about = doc.get("about", "")
    if not isinstance(about, str) or len(about) > 2000:
        raise InputError("about must be a string of at most 2000 characters")
    prefer = doc.get("prefer")
    if not isinstance(prefer, list) or not prefer:
        raise InputError("at least one [[prefer]] table is required")
    if len(prefer) > MAX_PREFERENCES:
        raise InputError(f"more than {MAX_PREFERENCES} preferences")
    prefs = tuple(_preference(p, i) for i, p in enumerate(prefer, 1))
    return Policy(name=name, about=about, prefer=prefs, source=text)


def read_policy(path: str | Path) -> Policy:
    """Read and parse a policy file (`safeio.read_regular`: a regular file of at most
    MAX_POLICY_BYTES); InputError (one line) when it cannot be read or is malformed."""
    label = short_message(str(path), 120)
    text = read_text_file(path, MAX_POLICY_BYTES, "policy file")
    return parse_policy(text, label)


@dataclass(frozen=True, eq=False)
class CompiledPolicy:
    """A policy as plain arrays for one instantiated game (`choose_policy_moves`).

    move_k[m]        1-based bin index k of move m (the template's application index)
    rank[p, m]       position of move m's template in preference p's expanded list, or -1
                     when move m is not a candidate of p (template or k range)
    highest[p]       1: pick the highest k, 0: the lowest
    cptr             conditions of preference p are rows cptr[p] .. cptr[p+1]-1 of
    cterm, crel, cbin, cop, cval   (`Condition` fields; cbin 1-based or an offset)
    """

    move_k: np.ndarray
    rank: np.ndarray
    highest: np.ndarray
    cptr: np.ndarray
    cterm: np.ndarray
    crel: np.ndarray
    cbin: np.ndarray
    cop: np.ndarray
    cval: np.ndarray


def template_kinds(spec: GameSpec) -> dict[str, str]:
    """Template name -> "combine" (gives fewer tokens than it takes) or "split"."""
    out = {}
    for t in spec.rules.templates:
        taken = sum(c for _, c in t.takes)
        given = sum(c for _, c in t.gives)
        out[t.name] = "combine" if given < taken else "split"
    return out


def compile_policy(policy: Policy, spec: GameSpec) -> CompiledPolicy:
    """The arrays of `policy` for the game `spec`; InputError for a template name the rule
    set does not have."""
    kinds = template_kinds(spec)
    order = [t.name for t in spec.rules.templates]
    nm = len(spec.move_names)
    tpl = [name.rsplit("@", 1)[0] for name in spec.move_names]
    move_k = np.array([int(name.rsplit("@", 1)[1]) for name in spec.move_names],
                      dtype=np.int64)
    npref = len(policy.prefer)
    rank = np.full((npref, nm), -1, dtype=np.int64)
    highest = np.zeros(npref, dtype=np.int64)
    rows: list[Condition] = []
    cptr = np.zeros(npref + 1, dtype=np.int64)
    for p, pref in enumerate(policy.prefer):
        expanded: list[str] = []
        for entry in pref.moves:
            if entry in KINDS:
                names = [t for t in order if entry == "any" or kinds[t] == entry]
            elif entry in kinds:
                names = [entry]
            else:
                raise InputError(
                    f"policy {policy.name}: preference {p + 1} names move {entry!r}, which "
                    f"rule set {spec.rules.name!r} does not have (its templates: "
                    f"{', '.join(order)}; kinds: {', '.join(KINDS)})")
            expanded += [t for t in names if t not in expanded]
        pos = {t: j for j, t in enumerate(expanded)}
        for m in range(nm):
            k = int(move_k[m])
            if tpl[m] in pos and k >= pref.k_from and (pref.k_to is None or k <= pref.k_to):
                rank[p, m] = pos[tpl[m]]
        highest[p] = 1 if pref.highest else 0
        rows += list(pref.when)
        cptr[p + 1] = len(rows)
    return CompiledPolicy(
        move_k=move_k, rank=rank, highest=highest, cptr=cptr,
        cterm=np.array([c.term for c in rows], dtype=np.int64),
        crel=np.array([1 if c.relative else 0 for c in rows], dtype=np.int64),
        cbin=np.array([c.bin for c in rows], dtype=np.int64),
        cop=np.array([c.op for c in rows], dtype=np.int64),
        cval=np.array([c.value for c in rows], dtype=np.int64),
    )
