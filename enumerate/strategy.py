"""Strategy files: a compact text format, its writer and reader, and an independent checker.

Format ("zstrat/1"), UTF-8 text, optionally gzip-compressed when the name ends in .gz:

    # comment lines start with '#', anywhere
    zstrat/1 rules=standard rules_hash=0123456789abcdef n=80 players=2 winner=2 positions=K
    <counts> <move>
    ...

The first non-comment line is the header: the format tag, then key=value fields.  Every
following line is one position the winner can face when following the strategy, and the
move to play there:

    counts  token counts of bins 1, 2, 3, ... (values 1, 2, 3, 5, 8, ...), comma-separated,
            trailing empty bins omitted ("0" for the empty position)
    move    template name and 1-based bin, e.g. "split@3" (the template applied at bin 3)

The checker (`check_strategy`) trusts nothing in the file and nothing of the solver: it
rebuilds the bins and the moves from the rule set's definition (its bin recurrence and move
templates), then replays every game in which the winner follows the file and the loser plays
any legal move.  It fails, with one line naming the first failing position, when a listed
move is illegal or unknown, when a position the winner can face is not listed, when the
loser can make the last move, or when play can cycle.
"""

from __future__ import annotations

import gzip
from dataclasses import dataclass
from pathlib import Path

from .errors import CheckFailed, InputError
from .rules import RuleSet, get_rules
from .solve import Strategy

FORMAT_TAG = "zstrat/1"

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


def format_counts(counts: tuple[int, ...]) -> str:
    """'3,0,2' for (3, 0, 2, 0, 0): comma-separated, trailing zero bins dropped."""
    c = list(counts)
    while c and c[-1] == 0:
        c.pop()
    return ",".join(str(x) for x in c) if c else "0"


def format_strategy(strategy: Strategy, values: list[int]) -> str:
    """The whole file text of a strategy (see the module docstring)."""
    shown = ", ".join(str(v) for v in values[:5])
    lines = [HEADER_COMMENT.format(tag=FORMAT_TAG, values=shown).rstrip("\n")]
    lines.append(
        f"{FORMAT_TAG} rules={strategy.rules} rules_hash={strategy.rules_hash} "
        f"n={strategy.n} players=2 winner={strategy.winner} positions={strategy.size}"
    )
    for counts, move in zip(strategy.positions, strategy.moves, strict=True):
        lines.append(f"{format_counts(counts)} {move}")
    return "\n".join(lines) + "\n"


def write_strategy(path: str | Path, strategy: Strategy, values: list[int]) -> int:
    """Write a strategy file (gzip when the name ends in .gz); returns its size in bytes."""
    path = Path(path)
    data = format_strategy(strategy, values).encode()
    if path.suffix == ".gz":
        data = gzip.compress(data, mtime=0)
    tmp = path.with_name(path.name + ".tmp")
    try:
        tmp.write_bytes(data)
        tmp.replace(path)
    except OSError as exc:
        raise InputError(f"cannot write strategy file {path}: {exc.strerror}") from None
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


def _strip(counts: tuple[int, ...]) -> tuple[int, ...]:
    c = list(counts)
    while c and c[-1] == 0:
        c.pop()
    return tuple(c)


def parse_strategy(text: str, name: str = "<strategy>") -> StrategyFile:
    """Parse strategy text; InputError (one line, with the line number) when malformed."""
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
                    raise InputError(f"{name}:{lineno}: header field {field!r} lacks '='")
                header[key] = val
            continue
        if len(parts) != 2:
            raise InputError(f"{name}:{lineno}: expected '<counts> <move>', got {line!r}")
        try:
            counts = tuple(int(x) for x in parts[0].split(","))
        except ValueError:
            raise InputError(f"{name}:{lineno}: bad counts {parts[0]!r}") from None
        if any(x < 0 for x in counts):
            raise InputError(f"{name}:{lineno}: negative count in {parts[0]!r}")
        key = _strip(counts)
        if key in table:
            raise InputError(
                f"{name}:{lineno}: position {parts[0]} already listed on line {table[key][1]}"
            )
        table[key] = (parts[1], lineno)
    if header is None:
        raise InputError(f"{name}: no {FORMAT_TAG} header line")
    for key in ("rules", "n", "winner"):
        if key not in header:
            raise InputError(f"{name}: header lacks {key}=")
    try:
        n = int(header["n"])
        winner = int(header["winner"])
        players = int(header.get("players", "2"))
        declared = int(header.get("positions", str(len(table))))
    except ValueError:
        raise InputError(f"{name}: header n, winner, players, positions must be integers") from None
    if players != 2:
        raise InputError(f"{name}: only two-player strategies are defined (players={players})")
    if winner not in (1, 2):
        raise InputError(f"{name}: winner must be 1 or 2, got {winner}")
    if n < 1:
        raise InputError(f"{name}: n must be positive, got {n}")
    return StrategyFile(
        rules=header["rules"],
        rules_hash=header.get("rules_hash", ""),
        n=n,
        winner=winner,
        declared_positions=declared,
        table=table,
    )


def read_strategy(path: str | Path) -> StrategyFile:
    """Read and parse a strategy file (gzip-compressed when it starts with the gzip magic)."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read strategy file {path}: {exc.strerror}") from None
    if data[:2] == b"\x1f\x8b":
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError):
            raise InputError(f"{path}: corrupt gzip data") from None
    try:
        text = data.decode()
    except UnicodeDecodeError:
        raise InputError(f"{path}: not UTF-8 text") from None
    return parse_strategy(text, str(path))


def _vector_len(start: object) -> int:
    return len(start) if isinstance(start, tuple) else 0


class ReferenceGame:
    """The game rebuilt from a rule set's definition, independently of the solver's arrays.

    Bins: the values of the rule set's recurrence (or its listed bins) up to the game's
    value: n, or n * value(v) for a start vector v.  Start: n / value(bin 1) tokens in bin
    1 ("ones"), the greedy decomposition ("greedy"), or n * v.  Moves: each template at each
    index k whose touched bins all exist, named "<template>@<k>".  A move is legal when no
    count goes negative; a position is terminal when no move is legal.
    """

    def __init__(self, rules: RuleSet, n: int):
        first = self._first_bins(rules, max(len(rules.initial), _vector_len(rules.start)))
        if isinstance(rules.start, tuple):
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
        if rules.start == "ones":
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


def check_strategy(sf: StrategyFile, rules: str | RuleSet | None = None) -> CheckReport:
    """Replay every answer of the loser; StrategyRejected unless the winner always moves last.

    `rules` (a name, a .toml rule file or a RuleSet) overrides the header's rule set name,
    for strategies of games defined in a rule file; its rules_hash must still match.
    """
    rules = get_rules(sf.rules if rules is None else rules)
    if sf.rules_hash and sf.rules_hash != rules.content_hash():
        raise InputError(
            f"the strategy is for rules {sf.rules!r} with rules_hash {sf.rules_hash}, but rule "
            f"set {rules.name!r} has rules_hash {rules.content_hash()}"
        )
    game = ReferenceGame(rules, sf.n)
    nb = len(game.values)
    for key, (_, line) in sf.table.items():
        if len(key) > nb:
            raise InputError(f"line {line}: position has {len(key)} bins, n={sf.n} has {nb}")
        if sum(c * v for c, v in zip(key, game.values, strict=False)) != game.value:
            raise InputError(
                f"line {line}: position {format_counts(key)} does not have the game's value "
                f"{game.value}"
            )

    def show(state: tuple[int, ...]) -> str:
        return "[" + format_counts(state) + "]"

    def loser_answers(u: tuple[int, ...]) -> list[tuple[int, ...]]:
        """Winner positions after each loser move from u (u is not terminal)."""
        out = []
        for name, w in game.options(u):
            if not game.options(w):
                raise StrategyRejected(
                    f"the loser moves last: from {show(u)} the answer {name} reaches the end "
                    f"{show(w)}"
                )
            out.append(w)
        return out

    loser_seen: set[tuple[int, ...]] = set()

    def children(w: tuple[int, ...]) -> list[tuple[int, ...]]:
        """Winner positions that can follow w (after the listed move and any answer)."""
        entry = sf.table.get(_strip(w))
        if entry is None:
            raise StrategyRejected(f"no move listed for position {show(w)}, which the winner "
                                   "can face")
        move, line = entry
        u = game.apply(w, move)
        if u is None:
            why = "unknown move" if move not in game.moves else "illegal move"
            raise StrategyRejected(f"line {line}: {why} {move} at position {show(w)}")
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

    # Iterative depth-first search; GREY positions are on the current path (a revisit
    # means play can cycle), BLACK ones are proved.  depth[w] = most moves from winner
    # position w to the end, known once w is BLACK (all its children are BLACK first).
    grey, black = 1, 2
    color: dict[tuple[int, ...], int] = {}
    depth: dict[tuple[int, ...], int] = {}
    for root in roots:
        if color.get(root) == black:
            continue
        color[root] = grey
        stack: list[tuple[tuple[int, ...], list[tuple[int, ...]], int]] = [
            (root, children(root), 0)
        ]
        while stack:
            w, kids, i = stack[-1]
            if i < len(kids):
                stack[-1] = (w, kids, i + 1)
                c = kids[i]
                st = color.get(c)
                if st == grey:
                    raise StrategyRejected(f"play can cycle through position {show(c)}")
                if st is None:
                    color[c] = grey
                    stack.append((c, children(c), 0))
                continue
            stack.pop()
            color[w] = black
            depth[w] = max((2 + depth[c] for c in kids), default=1)
    longest = max((depth[r] for r in roots), default=0)
    if roots and sf.winner == 2:
        longest += 1  # the loser's first move
    listed = set(sf.table)
    used = {_strip(w) for w in depth}
    return CheckReport(
        n=sf.n,
        winner=sf.winner,
        winner_positions=len(depth),
        loser_positions=len(loser_seen),
        longest_game=longest,
        unused_lines=len(listed - used),
    )
