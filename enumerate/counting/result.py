"""Result objects: plain data returned by the Python API and printed by the CLI."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

from zeckenum.errors import InputError
from zeckenum.safeio import write_atomic

OUT_SUFFIXES = (".csv", ".json")
"""The files `CountResult.write` (and `count --out FILE`) writes."""


@dataclass(frozen=True)
class CountResult:
    """Exact census of the games of one rule set at one n.

    states        reachable states (including the start and the end)
    transitions   legal moves summed over reachable states (edges of the move graph)
    games         number of distinct games (paths from the start to a terminal state)
    shortest      fewest moves in a game; longest: most moves
    length_counts number of games of each length (only lengths that occur, ascending)
    position      the start position's count vector ("3,1,0,2") when the games start at
                  one (`api.game_at`), else ""
    """

    rules: str
    rules_hash: str
    n: int
    states: int
    transitions: int
    games: int
    shortest: int
    longest: int
    length_counts: dict[int, int]
    primes: tuple[int, ...] = ()
    check_prime: int = 0
    stats: dict = field(default_factory=dict, compare=False)
    position: str = ""  # the start position (README "Positions") when not the rule set's

    @property
    def shortest_games(self) -> int:
        return self.length_counts[self.shortest]

    @property
    def longest_games(self) -> int:
        return self.length_counts[self.longest]

    def to_dict(self) -> dict:
        """JSON-ready form: big integers as decimal strings, lengths as string keys."""
        return {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            **({"position": self.position} if self.position else {}),
            "states": self.states,
            "transitions": self.transitions,
            "games": str(self.games),
            "shortest": self.shortest,
            "longest": self.longest,
            "shortest_games": str(self.shortest_games),
            "longest_games": str(self.longest_games),
            "length_counts": {str(k): str(v) for k, v in self.length_counts.items()},
            "primes": [str(p) for p in self.primes],
            "check_prime": str(self.check_prime),
            "stats": self.stats,
        }

    def spectrum_csv(self) -> str:
        """The spectrum as CSV with header n,length,count."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["n", "length", "count"])
        for length, c in self.length_counts.items():
            w.writerow([self.n, length, c])
        return buf.getvalue()

    def file_text(self, path: str | Path) -> str:
        """What `write(path)` writes: the spectrum as CSV for .csv, the full JSON object for
        .json; InputError for any other suffix (`OUT_SUFFIXES`)."""
        suffix = Path(path).suffix.lower()
        if suffix == ".csv":
            return self.spectrum_csv()
        if suffix == ".json":
            return json.dumps(self.to_dict(), indent=2) + "\n"
        raise InputError(f"--out {path}: use a .csv or .json file name")

    def write(self, path: str | Path) -> None:
        """Write the spectrum to `path` atomically (`file_text`; no partial or temporary
        file is left when the write fails)."""
        write_atomic(path, self.file_text(path).encode())
