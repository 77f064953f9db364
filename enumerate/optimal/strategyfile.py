"""Strategy files: a compact text format, its writer and reader, and an independent checker.

Format ("zstrat/1"), UTF-8 text, optionally gzip-compressed when the name ends in .gz:

    # comment lines start with '#', anywhere
    zstrat/1 rules=standard rules_hash=0123456789abcdef n=80 players=2 winner=2 positions=K
        rules_text=<base64>             (the header is one line; wrapped here)
    <counts> <move>
    ...

The first non-comment line is the header: the format tag, then key=value fields separated
by spaces (a value runs from the first '=' to the next space).  Fields:

    rules       the rule set's name
    rules_hash  its content hash (`RuleSet.content_hash`)
    n, players, winner, positions   the game's n, the number of players P (2, or 3 to
                MAX_PLAYERS for a coalition certificate), the winning player (1..P), the
                number of lines
    rules_text  the rule file itself: standard base64 (RFC 4648, with '=' padding, no line
                breaks) of the UTF-8 canonical rule text `rulefile.format_rules(rules)`.
                Written since the field was introduced; files without it are still read,
                and then `rules` must be a built-in name (or the checker is given --rules).

The checker rebuilds the game from `rules_text` when present (`rulefile.rules_from_text`,
which refuses a text whose content hash is not `rules_hash`), so a strategy of a game from a
rule file is checked from the strategy file alone.  No field names a file: nothing named
in a strategy file is ever opened.

A strategy file is untrusted: it is read with `safeio.read_regular` (a regular file of at
most MAX_FILE_BYTES, never a FIFO or device), a gzip stream is inflated incrementally and
refused past MAX_TEXT_BYTES (a gzip bomb costs at most that much), and n, the number of
lines (at most `strategy.STRATEGY_MAX_STATES`, the most positions a strategy can have) and the
rule text are bounded.  Every following line is one position the winner can face when
following the strategy, and the move to play there:

    counts  the position in the one position notation (`rules.notation`, README
            "Positions"): token counts of bins 1, 2, 3, ... (values 1, 2, 3, 5, 8, ...),
            comma-separated, trailing empty bins omitted ("0" for the empty position);
            read by `notation.parse_position` (digits only, as always written)
    move    template name and 1-based bin, e.g. "split@3" (the template applied at bin 3)

Three or more players (players=P >= 3): the file is a *certificate* that the winner x
forces the last move against the coalition of all the others (`strategy.coalition_strategy`).
Its lines are the positions where x is to move that x can face, with x's move; the
coalition plays every other turn (players x+1, ..., x+P-1 in turn), any legal move.  The
checker replays every such game from the start (player 1 to move): it fails when a listed
move is illegal or unknown, a position x can face is not listed, the game ends after a
move that was not x's (or with nobody having moved), or play can cycle.

The checker (`check_strategy`) trusts nothing in the file and nothing of the solver: it
rebuilds the bins and the moves from the rule set's definition (its bin recurrence and move
templates), then replays every game in which the winner follows the file and the loser plays
any legal move.  It fails, with one line naming the first failing position, when a listed
move is illegal or unknown, when a position the winner can face is not listed, when the
loser can make the last move, or when play can cycle.
"""

from __future__ import annotations

import base64
import binascii
import gzip
import zlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from zeckenum.errors import CheckFailed, InputError
from zeckenum.optimal.strategy import STRATEGY_MAX_STATES, Strategy
from zeckenum.rules.catalogue import BUILTIN, get_rules
from zeckenum.rules.model import RuleSet
from zeckenum.rules.notation import format_position, parse_position, strip_counts
from zeckenum.rules.rulefile import (
    MAX_RULE_FILE_BYTES,
    decode_text,
    format_rules,
    read_bytes,
    rules_from_text,
    short_message,
)
from zeckenum.safeio import MiB

FORMAT_TAG = "zstrat/1"
MAX_FILE_BYTES = 1024 * MiB
"""Largest strategy file read (compressed or not)."""
MAX_TEXT_BYTES = 1024 * MiB
"""Largest decompressed strategy text: at most STRATEGY_MAX_STATES lines of well under
200 bytes each.  A gzip stream inflating past it is refused."""
MAX_POSITIONS = STRATEGY_MAX_STATES
"""Most position lines: a strategy never lists more positions than its game has states."""
MAX_PLAYERS = 64
"""Most players in a header (the solver's own limit, `core.checks.SOLVE_MAX_PLAYERS`)."""
MAX_N = 10**6
"""Largest n in a header (strategies exist only for games of at most STRATEGY_MAX_STATES)."""

HEADER_COMMENT = """\
# zeckenum winning strategy ({tag}).
# Header: format tag, then key=value fields.  Then one line per position the winner can
# face when following the strategy: "<counts> <move>", where counts are the token counts
# of bins 1,2,3,... (values {values}...), comma-separated, trailing zeros omitted, and
# move is "<template>@<bin>" with 1-based bins.  Check it with: zeckenum check-strategy FILE
"""


class StrategyRejected(CheckFailed):
    """The strategy file is well formed but does not win (illegal move, missing position,
    a loser's answer that ends the game, or a cycle); exit status 5, like every failed check."""


def encode_rules_text(rules: RuleSet) -> str:
    """The `rules_text` header value: base64 of the UTF-8 canonical rule text."""
    return base64.b64encode(format_rules(rules).encode()).decode("ascii")


def format_strategy(strategy: Strategy, values: list[int], rules: RuleSet | None = None) -> str:
    """The whole file text of a strategy (see the module docstring); with `rules` (the rule
    set it was solved for) the header embeds its canonical rule text."""
    if rules is not None and rules.content_hash() != strategy.rules_hash:
        raise ValueError("the rule set given is not the one the strategy was solved for")
    shown = ", ".join(str(v) for v in values[:5])
    lines = [HEADER_COMMENT.format(tag=FORMAT_TAG, values=shown).rstrip("\n")]
    header = (
        f"{FORMAT_TAG} rules={strategy.rules} rules_hash={strategy.rules_hash} "
        f"n={strategy.n} players={strategy.players} winner={strategy.winner} "
        f"positions={strategy.size}"
    )
    if rules is not None:
        header += f" rules_text={encode_rules_text(rules)}"
    lines.append(header)
    for counts, move in zip(strategy.positions, strategy.moves, strict=True):
        lines.append(f"{format_position(counts)} {move}")
    return "\n".join(lines) + "\n"


def strategy_bytes(path: str | Path, strategy: Strategy, values: list[int],
                   rules: RuleSet | None = None) -> bytes:
    """The bytes of the strategy file `path` (gzip-compressed when the name ends in .gz)."""
    data = format_strategy(strategy, values, rules).encode()
    if Path(path).suffix == ".gz":
        data = gzip.compress(data, mtime=0)
    return data


def write_strategy(path: str | Path, strategy: Strategy, values: list[int],
                   rules: RuleSet | None = None) -> int:
    """Write a strategy file (gzip when the name ends in .gz); returns its size in bytes.

    Written atomically (`safeio.write_atomic` inside `clifmt.deliver_result`); when the
    write fails the strategy goes to a rescue file and OutputError (exit 6) names it.
    """
    from zeckenum.core.text import deliver_result

    data = strategy_bytes(path, strategy, values, rules)
    deliver_result(path, data, "the strategy")
    return len(data)


@dataclass(frozen=True)
class StrategyFile:
    """A parsed strategy file: header fields and the position -> move table."""

    rules: str
    rules_hash: str
    n: int
    winner: int
    declared_positions: int
    table: dict[tuple[int, ...], tuple[str, int]]  # counts (no trailing zeros) -> (move, line)
    rules_text: str | None = None  # the embedded canonical rule text, decoded
    players: int = 2


def parse_strategy(text: str, name: str = "<strategy>") -> StrategyFile:
    """Parse strategy text; InputError (one short line, with the line number) when malformed.

    Never raises anything else, whatever the text."""
    try:
        return _parse_strategy(text, short_message(name, 120))
    except InputError as exc:
        raise InputError(short_message(str(exc))) from None


def _parse_strategy(text: str, name: str) -> StrategyFile:
    header: dict[str, str] | None = None
    table: dict[tuple[int, ...], tuple[str, int]] = {}
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        parts = line.split()
        if header is None:
            if parts[0] != FORMAT_TAG:
                raise InputError(f"{name}:{lineno}: not a {FORMAT_TAG} strategy file")
            header = {}
            for field in parts[1:]:
                key, sep, val = field.partition("=")
                if not sep:
                    raise InputError(f"{name}:{lineno}: header field {field[:40]!r} lacks '='")
                if key in header:
                    raise InputError(f"{name}:{lineno}: header field {key[:40]!r} given twice")
                header[key] = val
            continue
        if len(parts) != 2:
            raise InputError(f"{name}:{lineno}: expected '<counts> <move>', got {line[:60]!r}")
        if len(table) >= MAX_POSITIONS:
            raise InputError(f"{name}:{lineno}: more than {MAX_POSITIONS} positions")
        try:
            key = parse_position(parts[0][:4096])
        except InputError as exc:
            raise InputError(f"{name}:{lineno}: bad counts: {exc}") from None
        if key in table:
            raise InputError(
                f"{name}:{lineno}: position {parts[0][:60]} already listed on line "
                f"{table[key][1]}"
            )
        table[key] = (parts[1], lineno)
    if header is None:
        raise InputError(f"{name}: no {FORMAT_TAG} header line")
    for key in ("rules", "n", "winner"):
        if key not in header:
            raise InputError(f"{name}: header lacks {key}=")
    fields = {"n": header["n"], "winner": header["winner"],
              "players": header.get("players", "2"),
              "positions": header.get("positions", str(len(table)))}
    if any(len(v) > 20 or not v.isascii() or not v.isdigit() for v in fields.values()):
        raise InputError(f"{name}: header n, winner, players, positions must be whole numbers")
    n, winner, players, declared = (int(fields[k]) for k in ("n", "winner", "players",
                                                              "positions"))
    if not 2 <= players <= MAX_PLAYERS:
        raise InputError(f"{name}: players must be from 2 to {MAX_PLAYERS}, got {players}")
    if not 1 <= winner <= players:
        raise InputError(f"{name}: winner must be from 1 to {players}, got {winner}")
    if not 1 <= n <= MAX_N:
        raise InputError(f"{name}: n must be from 1 to {MAX_N}, got {n}")
    rules_text = None
    if "rules_text" in header:
        rules_text = _decode_rules_text(header["rules_text"], name)
        if not header.get("rules_hash"):
            raise InputError(f"{name}: the header embeds rules_text but no rules_hash")
    return StrategyFile(
        rules=header["rules"],
        rules_hash=header.get("rules_hash", ""),
        n=n,
        winner=winner,
        declared_positions=declared,
        table=table,
        rules_text=rules_text,
        players=players,
    )


def _decode_rules_text(value: str, name: str) -> str:
    """The rule text of a `rules_text` header value (base64 of UTF-8), checked for size."""
    if len(value) > 2 * MAX_RULE_FILE_BYTES:
        raise InputError(f"{name}: the embedded rule text is longer than "
                         f"{MAX_RULE_FILE_BYTES} bytes")
    try:
        raw = base64.b64decode(value, validate=True)
    except (binascii.Error, ValueError):
        raise InputError(f"{name}: header rules_text is not valid base64") from None
    if len(raw) > MAX_RULE_FILE_BYTES:
        raise InputError(f"{name}: the embedded rule text is longer than "
                         f"{MAX_RULE_FILE_BYTES} bytes")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{name}: the embedded rule text is not UTF-8") from None


def gunzip_capped(data: bytes, cap: int, name: str = "<strategy>") -> bytes:
    """Inflate gzip `data` (one or more members) incrementally, refusing (InputError) a
    stream that is corrupt, truncated, or inflates to more than `cap` bytes: at most
    cap + 1 MiB is ever held, whatever the compression ratio."""
    out: list[bytes] = []
    total = 0
    rest = data
    while rest:
        if rest[:2] != b"\x1f\x8b":
            if not rest.strip(b"\x00"):
                break  # zero padding after the last member
            raise InputError(f"{name}: trailing bytes after the gzip data")
        inflater = zlib.decompressobj(16 + zlib.MAX_WBITS)
        buf = rest
        try:
            while True:
                piece = inflater.decompress(buf, min(MiB, cap + 1 - total))
                total += len(piece)
                if total > cap:
                    raise InputError(f"{name}: the gzip data inflates to more than {cap} bytes")
                out.append(piece)
                buf = inflater.unconsumed_tail
                if inflater.eof or (not buf and not piece):
                    break
        except zlib.error as exc:
            raise InputError(f"{name}: corrupt gzip data ({short_message(str(exc), 80)})") \
                from None
        if not inflater.eof:
            raise InputError(f"{name}: truncated gzip data")
        rest = inflater.unused_data
    return b"".join(out)


def read_strategy(path: str | Path) -> StrategyFile:
    """Read and parse a strategy file (gzip-compressed when it starts with the gzip magic).

    `safeio.read_regular` refuses FIFOs, devices and files over MAX_FILE_BYTES without
    blocking; a gzip stream is inflated by `gunzip_capped` up to MAX_TEXT_BYTES."""
    name = short_message(str(path), 120)
    data = read_bytes(path, MAX_FILE_BYTES, "strategy file")
    if data[:2] == b"\x1f\x8b":
        data = gunzip_capped(data, MAX_TEXT_BYTES, name)
    elif len(data) > MAX_TEXT_BYTES:
        raise InputError(f"{name}: more than {MAX_TEXT_BYTES} bytes of text")
    return parse_strategy(decode_text(data, name), name)


def _vector_len(start: object) -> int:
    return len(start) if isinstance(start, tuple) else 0


class ReferenceGame:
    """The game rebuilt from a rule set's definition, independently of the solver's arrays.

    Bins: the values of the rule set's recurrence (or its listed bins) up to the game's
    value: n, or n * value(v) for a start vector v, or value(p) = n for a start position p.
    Start: n / value(bin 1) tokens in bin 1 ("ones"), the greedy decomposition ("greedy"),
    n * v, or exactly p.  Moves: each template at each
    index k whose touched bins all exist, named "<template>@<k>".  A move is legal when no
    count goes negative; a position is terminal when no move is legal.
    """

    def __init__(self, rules: RuleSet, n: int):
        pos = rules.position
        first = self._first_bins(rules, max(len(rules.initial), _vector_len(rules.start),
                                            len(pos or ())))
        if pos is not None:
            if len(first) < len(pos):
                raise InputError(f"rule set {rules.name!r}: the start position has more bins "
                                 "than the rule set")
            value = sum(c * v for c, v in zip(pos, first, strict=False))
            if value != n:
                raise InputError(f"rule set {rules.name!r}: the start position has value "
                                 f"{value}, not n={n}")
        elif isinstance(rules.start, tuple):
            value = n * sum(c * v for c, v in zip(rules.start, first, strict=False))
        else:
            value = n
        vals = list(rules.initial)
        while rules.recurrence:
            nxt = sum(c * vals[len(vals) - 1 - i] for i, c in enumerate(rules.recurrence))
            if nxt > value or nxt <= vals[-1]:
                break
            vals.append(nxt)
        self.value = value
        self.values = [v for v in vals if v <= value]
        nb = len(self.values)
        if nb == 0:
            raise InputError(f"rule set {rules.name!r}: no bin has a value <= {value}")
        self.moves: dict[str, tuple[tuple[int, int], ...]] = {}
        for tpl in rules.templates:
            last = nb if tpl.last is None else min(tpl.last, nb)
            for k in range(tpl.first, last + 1):
                change: dict[int, int] = {}
                for off, c in tpl.takes:
                    change[k + off] = change.get(k + off, 0) - c
                for off, c in tpl.gives:
                    change[k + off] = change.get(k + off, 0) + c
                if any(b < 1 or b > nb for b in change):
                    continue
                eff = tuple((b - 1, d) for b, d in sorted(change.items()) if d != 0)
                if sum(d * self.values[b] for b, d in eff) != 0:
                    raise InputError(f"move {tpl.name}@{k} of {rules.name!r} changes the value")
                self.moves[f"{tpl.name}@{k}"] = eff
        start = [0] * nb
        if pos is not None:
            start[: len(pos)] = pos
        elif rules.start == "ones":
            if value % self.values[0]:
                raise InputError(f"rule set {rules.name!r}: bin 1 does not divide n={n}")
            start[0] = value // self.values[0]
        elif rules.start == "greedy":
            rest = value
            for k in range(nb - 1, -1, -1):
                start[k], rest = divmod(rest, self.values[k])
            if rest:
                raise InputError(f"rule set {rules.name!r}: no greedy start for n={n}")
        elif isinstance(rules.start, tuple):
            for k, c in enumerate(rules.start):
                start[k] = n * c
        else:
            raise InputError(f"rule set {rules.name!r}: unknown start {rules.start!r}")
        self.start = tuple(start)

    @staticmethod
    def _first_bins(rules: RuleSet, count: int) -> list[int]:
        vals = list(rules.initial[:count])
        while len(vals) < count and rules.recurrence:
            vals.append(sum(c * vals[len(vals) - 1 - i] for i, c in enumerate(rules.recurrence)))
        return vals

    def apply(self, state: tuple[int, ...], move: str) -> tuple[int, ...] | None:
        """The position after `move`, or None when it is unknown or illegal here."""
        eff = self.moves.get(move)
        if eff is None:
            return None
        nxt = list(state)
        for b, d in eff:
            nxt[b] += d
            if nxt[b] < 0:
                return None
        return tuple(nxt)

    def options(self, state: tuple[int, ...]) -> list[tuple[str, tuple[int, ...]]]:
        """(move name, next position) for every legal move."""
        out = []
        for name in self.moves:
            nxt = self.apply(state, name)
            if nxt is not None:
                out.append((name, nxt))
        return out


def resolve_rules(sf: StrategyFile, rules: str | RuleSet | None = None) -> RuleSet:
    """The rule set to check `sf` against (see `check_strategy`)."""
    if rules is not None:
        return get_rules(rules)
    if sf.rules_text is not None:
        try:
            return rules_from_text(sf.rules_text, sf.rules_hash,
                                   where="the rule text embedded in the strategy")
        except InputError as exc:  # the recorded hash may be any length: keep one short line
            raise InputError(short_message(str(exc))) from None
    if sf.rules in BUILTIN:
        return BUILTIN[sf.rules]
    raise InputError(
        f"the strategy is for rule set {short_message(sf.rules, 60)!r}, which is not built in, "
        "and embeds no rule text; give the rule file with --rules FILE"
    )


@dataclass(frozen=True)
class CheckReport:
    """What the checker replayed: winner positions visited, loser positions answered,
    the longest game seen (moves), and listed positions never reached."""

    n: int
    winner: int
    winner_positions: int
    loser_positions: int
    longest_game: int
    unused_lines: int
    players: int = 2


def check_strategy(sf: StrategyFile, rules: str | RuleSet | None = None) -> CheckReport:
    """Replay every answer of the loser; StrategyRejected unless the winner always moves last.

    The game: `rules` when given (a name, a .toml rule file the user names, or a RuleSet),
    else the rule text embedded in the file (refused unless its content hash is the
    recorded rules_hash), else the header's rule set name, which must be built in: a name
    read from the file is never opened as a path.  The rules_hash must match in every case.
    """
    rules = resolve_rules(sf, rules)
    if sf.rules_hash and sf.rules_hash != rules.content_hash():
        raise InputError(
            f"the strategy is for rules {short_message(sf.rules, 60)!r} with rules_hash "
            f"{short_message(sf.rules_hash, 40)}, but rule "
            f"set {rules.name!r} has rules_hash {rules.content_hash()}"
        )
    game = ReferenceGame(rules, sf.n)
    nb = len(game.values)
    for key, (_, line) in sf.table.items():
        if len(key) > nb:
            raise InputError(f"line {line}: position has {len(key)} bins, n={sf.n} has {nb}")
        if sum(c * v for c, v in zip(key, game.values, strict=False)) != game.value:
            raise InputError(
                f"line {line}: position {format_position(key)} does not have the game's value "
                f"{game.value}"
            )

    if sf.players != 2:
        return _check_coalition(sf, game)

    def show(state: tuple[int, ...]) -> str:
        return format_position(state)

    def loser_answers(u: tuple[int, ...]) -> list[tuple[int, ...]]:
        """Winner positions after each loser move from u (u is not terminal)."""
        out = []
        for name, w in game.options(u):
            if not game.options(w):
                raise StrategyRejected(
                    f"the loser moves last: from position {show(u)} the answer {name} reaches "
                    f"the end {show(w)}"
                )
            out.append(w)
        return out

    loser_seen: set[tuple[int, ...]] = set()

    def children(w: tuple[int, ...]) -> list[tuple[int, ...]]:
        """Winner positions that can follow w (after the listed move and any answer)."""
        u = _listed_move(sf, game, w, show)
        if not game.options(u):
            return []
        loser_seen.add(u)
        return loser_answers(u)

    if sf.winner == 1:
        if not game.options(game.start):
            raise StrategyRejected(f"player 1 cannot move at the start {show(game.start)}")
        roots = [game.start]
    else:
        roots = loser_answers(game.start) if game.options(game.start) else []
        if game.options(game.start):
            loser_seen.add(game.start)

    depth = _depths(roots, children, show, step=2, leaf=1)
    longest = max((depth[r] for r in roots), default=0)
    if roots and sf.winner == 2:
        longest += 1  # the loser's first move
    listed = set(sf.table)
    used = {strip_counts(w) for w in depth}
    return CheckReport(
        n=sf.n,
        winner=sf.winner,
        winner_positions=len(depth),
        loser_positions=len(loser_seen),
        longest_game=longest,
        unused_lines=len(listed - used),
    )


def _check_coalition(sf: StrategyFile, game: ReferenceGame) -> CheckReport:
    """Replay a P >= 3 certificate (module docstring): nodes (position, r), r = (player to
    move - winner) mod P; at r = 0 the listed move, else every legal move; a position
    without moves ends the game, won exactly when r = 1 (the winner moved last)."""
    players, winner = sf.players, sf.winner

    def show(state: tuple[int, ...]) -> str:
        return format_position(state)

    if not game.options(game.start):
        raise StrategyRejected(f"no move is possible at the start {show(game.start)}: "
                               "nobody moves, so nobody wins")
    loser_seen: set[tuple[int, ...]] = set()

    def children(node: tuple[tuple[int, ...], int]) -> list[tuple[tuple[int, ...], int]]:
        state, r = node
        opts = game.options(state)
        if not opts:
            if r == 1:
                return []
            last = (winner - 1 + r - 1) % players + 1
            raise StrategyRejected(f"player {last} of the coalition moves last, reaching the "
                                   f"end {show(state)}")
        if r == 0:
            return [(_listed_move(sf, game, state, show), 1 % players)]
        loser_seen.add(state)
        return [(t, (r + 1) % players) for _, t in opts]

    root = (game.start, (1 - winner) % players)
    depth = _depths([root], children, lambda node: show(node[0]), step=1, leaf=0)
    used = {strip_counts(s) for s, r in depth if r == 0}
    return CheckReport(
        n=sf.n, winner=winner, winner_positions=len(used), loser_positions=len(loser_seen),
        longest_game=depth[root], unused_lines=len(set(sf.table) - used), players=players,
    )


def _depths(roots: list, children: Callable[[Any], list], show: Callable[[Any], str],
            step: int, leaf: int) -> dict:
    """Depth-first search of the play graph below `roots`, refusing a cycle
    (StrategyRejected naming the position): node -> `leaf` for a node without children,
    else `step` + the largest of its children's.  Iterative; GREY nodes are on the current
    path (a revisit means play can cycle), BLACK ones are done, so a node's depth is known
    once it is BLACK (all its children are BLACK first)."""
    grey, black = 1, 2
    color: dict = {}
    depth: dict = {}
    for root in roots:
        if color.get(root) == black:
            continue
        color[root] = grey
        stack = [(root, children(root), 0)]
        while stack:
            node, kids, i = stack[-1]
            if i < len(kids):
                stack[-1] = (node, kids, i + 1)
                c = kids[i]
                st = color.get(c)
                if st == grey:
                    raise StrategyRejected(f"play can cycle through position {show(c)}")
                if st is None:
                    color[c] = grey
                    stack.append((c, children(c), 0))
                continue
            stack.pop()
            color[node] = black
            depth[node] = max((step + depth[c] for c in kids), default=leaf)
    return depth


def _listed_move(sf: StrategyFile, game: Any, state: tuple[int, ...],
                 show: Callable[[tuple[int, ...]], str]) -> tuple[int, ...]:
    """The position after the winner's listed move at `state`, played by the rule
    definition (`game.apply`); StrategyRejected when no move is listed there or the listed
    one is unknown or illegal."""
    entry = sf.table.get(strip_counts(state))
    if entry is None:
        raise StrategyRejected(f"no move listed for position {show(state)}, which the winner "
                               "can face")
    move, line = entry
    nxt = game.apply(state, move)
    if nxt is None:
        why = "unknown move" if move not in game.moves else "illegal move"
        raise StrategyRejected(f"line {line}: {why} {move} at position {show(state)}")
    return nxt
