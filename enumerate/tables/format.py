"""The format of a published table: its files, their fields, and reading one back.

A table is one directory (written by `tables.build.build_table`, checked again with
recomputation by `tables.verify.verify_table`).  This module is the one place that
knows its file names and fields, writes their text (`count_texts`, `solve_files`,
`random_files`) and reads them back (`load_table`); whoever reads a table (`present`)
reads it through `load_table`.  Files:

    summary.csv      one row per n: n,states,transitions,games,shortest,longest,
                     shortest_games,longest_games
    spectra.csv      long format, one row per (n, length) that occurs: n,length,count
    <name>.seq       one sequence per file, two columns "n value" (games, states,
                     transitions, shortest, longest, shortest_games, longest_games)
    solve.csv        (what includes solve) one row per n: n,winner,p_positions (two
                     players, normal play); winner.seq, p_positions.seq
    random.csv       (what includes random) one row per n: n,player1_wins,player2_wins,
                     mean_length,variance (exact p/q; two players, each picking uniformly
                     among the legal moves); player1_wins.seq, mean_length.seq
    random_lengths.csv  long format, one row per (n, length) of positive probability:
                     n,length,probability (exact p/q)
    manifest.json    provenance: the rule file itself (`rules_text`, the canonical text of
                     `rulefile.format_rules`) and its content hash, tool version,
                     parameters (from, to, what, prime_offset, and for a game started at
                     a position `position`, its count vector), UTC date, the primes used,
                     and the SHA-256 and size of every file

`load_table(dir)` reads a table as untrusted input and checks everything that needs no
recomputation (`verify.verify_table` adds the recomputation).  Invariants checked:

* the manifest is a JSON object of this format; its `files` entry lists exactly the files
  in the directory (besides manifest.json and report.html), each a plain name inside it,
  a regular file of at most `MAX_FILE_BYTES`, with its recorded size and SHA-256;
* the kinds (count, solve, random) and the range of n come from the files (each kind's
  complete file set; the n of every row) and must equal `parameters.what`, `.from`, `.to`;
  `parameters.position` is present exactly when the embedded rule file starts at a
  position, equals it, and the table then holds the one row n = its value;
* every file is exactly the canonical text of its parsed rows (header, order, number
  format; one row per n or (n, length), no duplicates, every n of the range present), and
  every `.seq` file is the column of its CSV;
* row-wise, on every row: counts positive (only lengths that occur are listed) and summing
  to `games`; shortest/longest the least/greatest length listed, with their counts; the
  random law positive, at most 1, summing to exactly 1 (fractions) and giving the wins,
  mean and variance; its support equal to the lengths of the spectrum (every game has
  positive probability); when every game has one parity, the solve winner follows from it;
  for the standard game shortest = n - Z(n) ("The Zeckendorf Game", 2018,
  arXiv:1809.04881), player 2 wins for n > 2 (same paper), and states = the number of
  partitions of n into the bin values (every state of the standard game is reachable).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

from zeckenum.cluster.errors import TableCheckFailed
from zeckenum.core.text import frac_str
from zeckenum.counting.result import CountResult
from zeckenum.errors import InputError
from zeckenum.rules.model import STANDARD, RuleSet
from zeckenum.rules.notation import format_position
from zeckenum.rules.rulefile import rules_from_text
from zeckenum.safeio import member, read_regular

FORMAT = "zeckenum-table/1"
SUMMARY_FIELDS = (
    "n", "states", "transitions", "games", "shortest", "longest", "shortest_games",
    "longest_games",
)
SEQUENCES = ("games", "states", "transitions", "shortest", "longest", "shortest_games",
             "longest_games")
SPECTRA_FIELDS = ("n", "length", "count")

TABLE_KINDS = ("count", "solve", "random")
SOLVE_FIELDS = ("n", "winner", "p_positions")
SOLVE_SEQUENCES = ("winner", "p_positions")
RANDOM_FIELDS = ("n", "player1_wins", "player2_wins", "mean_length", "variance")
RANDOM_SEQUENCES = ("player1_wins", "mean_length")
LENGTH_FIELDS = ("n", "length", "probability")

KIND_FILES: dict[str, tuple[str, ...]] = {
    "count": ("summary.csv", "spectra.csv", *(f"{s}.seq" for s in SEQUENCES)),
    "solve": ("solve.csv", *(f"{s}.seq" for s in SOLVE_SEQUENCES)),
    "random": ("random.csv", "random_lengths.csv", *(f"{s}.seq" for s in RANDOM_SEQUENCES)),
}
"""The complete file set of each table kind; a kind is present iff its first file is."""
NOT_LISTED = ("manifest.json", "report.html")
"""Files a table directory may hold beside the listed ones (the page `report` writes)."""
ROWS_DIR = ".rows"
BUNDLE = "table-bundle.json"
"""Where a table whose files could not be written goes as one JSON object (if it can)."""
MAX_FILE_BYTES = 1 << 30
MAX_MANIFEST_BYTES = 16 << 20
MAX_ROW_BYTES = 64 << 20
MAX_RANGE = 100_000
"""Most n one table may hold (a guard against a manifest declaring a huge range)."""
MAX_PRIMES = 1 << 20
MAX_N = 100_000
"""Largest n a table row may hold (far beyond what any count, solve or random play
reaches; a guard for the checks that cost O(n), such as the partitions of n)."""

INT_RE = re.compile(r"-?(?:0|[1-9][0-9]{0,9999})")
FRAC_RE = re.compile(r"-?(?:0|[1-9][0-9]{0,9999})/[1-9][0-9]{0,9999}")



def parse_what(text: str) -> tuple[str, ...]:
    """The comma-separated table kinds, validated."""
    kinds = tuple(dict.fromkeys(w.strip() for w in text.split(",") if w.strip()))
    if not kinds:
        raise InputError("--what needs at least one of: count, random, solve")
    for k in kinds:
        if k not in TABLE_KINDS:
            raise InputError(f"--what {k}: unknown table kind (use count, random, solve)")
    return kinds


def csv_text(header: tuple[str, ...] | list[str], rows: list[dict]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(header), lineterminator="\n")
    w.writeheader()
    for row in rows:
        w.writerow(row)
    return buf.getvalue()


def summary_row(r: CountResult) -> dict:
    return {
        "n": r.n, "states": r.states, "transitions": r.transitions, "games": r.games,
        "shortest": r.shortest, "longest": r.longest, "shortest_games": r.shortest_games,
        "longest_games": r.longest_games,
    }


def seq_text(pairs: list[tuple[int, object]]) -> str:
    return "".join(f"{n} {v}\n" for n, v in pairs)


def count_texts(summary: dict[int, dict], spectra: dict[int, dict[int, int]]) -> dict[str, str]:
    """File name -> text of the count part of a table, from summary rows and spectra."""
    ns = sorted(summary)
    rows = [summary[n] for n in ns]
    files = {
        "summary.csv": csv_text(SUMMARY_FIELDS, rows),
        "spectra.csv": csv_text(SPECTRA_FIELDS, [{"n": n, "length": L, "count": c}
                                                for n in ns
                                                for L, c in sorted(spectra[n].items())]),
    }
    for name in SEQUENCES:
        files[f"{name}.seq"] = seq_text([(row["n"], row[name]) for row in rows])
    return files


def count_files(results: dict[int, CountResult]) -> dict[str, str]:
    """File name -> text of the count part of a table."""
    return count_texts({n: summary_row(r) for n, r in results.items()},
                       {n: dict(r.length_counts) for n, r in results.items()})


def solve_files(rows: list[dict]) -> dict[str, str]:
    """File name -> text of the solve part of a table."""
    files = {"solve.csv": csv_text(SOLVE_FIELDS, rows)}
    for name in SOLVE_SEQUENCES:
        files[f"{name}.seq"] = seq_text(
            [(row["n"], "" if row[name] is None else row[name]) for row in rows])
    return files


def random_files(got: list[tuple[dict, list[dict]]]) -> dict[str, str]:
    """File name -> text of the random-play part of a table."""
    rows = [row for row, _ in got]
    files = {
        "random.csv": csv_text(RANDOM_FIELDS, rows),
        "random_lengths.csv": csv_text(LENGTH_FIELDS,
                                       [r for _, lengths in got for r in lengths]),
    }
    for name in RANDOM_SEQUENCES:
        files[f"{name}.seq"] = seq_text([(row["n"], row[name]) for row in rows])
    return files


# --------------------------------------------------------------------------- independent


def zeckendorf_terms(n: int) -> int:
    """Z(n): the number of terms of the Zeckendorf decomposition of n >= 1, by the greedy
    rule (take the largest Fibonacci number 1, 2, 3, 5, ... not above what is left).
    Deliberately independent of the engine's bins."""
    fib = [1, 2]
    while fib[-1] <= n:
        fib.append(fib[-1] + fib[-2])
    terms = 0
    for f in reversed(fib):
        if f <= n:
            n -= f
            terms += 1
    return terms


def fibonacci_partitions(top: int) -> list[int]:
    """ways[m] for 0 <= m <= top: the number of ways to write m as a sum of the values
    1, 2, 3, 5, 8, ... (order ignored, repeats allowed), i.e. the states of the standard
    game at m (OEIS A003107).  A plain coin-change recursion, independent of the engine's
    ranking."""
    ways = [1] + [0] * top
    a, b = 1, 2
    while a <= top:
        for v in range(a, top + 1):
            ways[v] += ways[v - a]
        a, b = b, a + b
    return ways


# ------------------------------------------------------------------------------ reading


@dataclass
class Table:
    """A table read back and checked by `load_table` (everything short of recomputing).

    ns        the n of the rows, consecutive, equal to parameters.from..to
    kinds     the kinds the files hold, equal to parameters.what
    summary   {n: {field: int}}          spectra  {n: {length: count}}    (count)
    solve     {n: {"winner": str, "p_positions": int}}                     (solve)
    random    {n: {field: Fraction}}     laws     {n: {length: Fraction}} (random)
    """

    folder: Path
    manifest: dict
    ruleset: RuleSet
    rules_text: str
    kinds: tuple[str, ...]
    ns: list[int]
    summary: dict[int, dict[str, int]] = field(default_factory=dict)
    spectra: dict[int, dict[int, int]] = field(default_factory=dict)
    solve: dict[int, dict] = field(default_factory=dict)
    random: dict[int, dict[str, Fraction]] = field(default_factory=dict)
    laws: dict[int, dict[int, Fraction]] = field(default_factory=dict)

    @property
    def is_standard(self) -> bool:
        return self.ruleset.content_hash() == STANDARD.content_hash()

    def to_dict(self) -> dict:
        """JSON-ready: exact integers and rationals ("p/q") as strings, keys as text."""
        def frac(x: object) -> str:
            return frac_str(x) if isinstance(x, Fraction) else str(x)

        return {
            "folder": str(self.folder), "manifest": self.manifest,
            "rules": self.ruleset.name, "rules_hash": self.ruleset.content_hash(),
            "kinds": list(self.kinds), "ns": list(self.ns),
            "summary": {str(n): {k: frac(v) for k, v in row.items()}
                        for n, row in self.summary.items()},
            "spectra": {str(n): {str(k): str(v) for k, v in sp.items()}
                        for n, sp in self.spectra.items()},
            "solve": {str(n): {k: frac(v) for k, v in row.items()}
                      for n, row in self.solve.items()},
            "random": {str(n): {k: frac(v) for k, v in row.items()}
                       for n, row in self.random.items()},
            "random_lengths": {str(n): {str(k): frac(v) for k, v in law.items()}
                               for n, law in self.laws.items()},
        }


def _fail(msg: str) -> TableCheckFailed:
    return TableCheckFailed(msg)


MANIFEST_KEYS = frozenset({"format", "tool", "version", "created", "rules", "rules_hash",
                           "rules_text", "parameters", "primes_per_n", "random_primes_per_n",
                           "files"})
"""Every key a table manifest written by `build_table` has (`random_primes_per_n` only with
random play); any other key refuses the table."""


def _manifest_of(folder: Path) -> tuple[Path, dict]:
    if not folder.is_dir():
        raise InputError(f"{folder}: not a directory (not a zeckenum table)")
    mpath = member(folder, "manifest.json", "table manifest")
    if not mpath.exists():
        raise InputError(f"{folder}: no manifest.json (not a zeckenum table)")
    raw = read_regular(mpath, MAX_MANIFEST_BYTES, "table manifest")
    try:
        manifest = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise InputError(f"{mpath} is not valid JSON: {exc}") from None
    if not isinstance(manifest, dict):
        raise InputError(f"{mpath} is not a JSON object (not a zeckenum table manifest)")
    if manifest.get("format") != FORMAT:
        raise InputError(f"{mpath} is not a {FORMAT} manifest")
    unknown = sorted(set(manifest) - MANIFEST_KEYS)
    if unknown:  # a renamed or added key is an edit, not a table this version wrote
        raise _fail(f"{mpath}: unknown key {unknown[0][:60]!r} (not a manifest "
                    f"zeckenum writes)")
    return mpath, manifest


def rules_of_manifest(manifest: dict, where: str) -> tuple[RuleSet, str]:
    """The rule set embedded in a manifest (`rules_text`), checked against `rules_hash`;
    never looked up by name."""
    text, digest = manifest.get("rules_text"), manifest.get("rules_hash")
    if not isinstance(text, str) or not text:
        raise InputError(f"{where} embeds no rule file ('rules_text'); the table was written "
                         "by an older zeckenum: rebuild it")
    if not isinstance(digest, str):
        raise InputError(f"{where} records no rules_hash")
    ruleset = rules_from_text(text, digest, where=f"{where} rules_text")
    if manifest.get("rules") != ruleset.name:
        raise TableCheckFailed(f"{where}: 'rules' is {manifest.get('rules')!r} but the "
                               f"embedded rule file is named {ruleset.name!r}")
    return ruleset, text


def _read_listed(folder: Path, manifest: dict, mpath: Path) -> dict[str, str]:
    """name -> text of every file the manifest lists, after the listing, size and SHA-256
    checks (TableCheckFailed) and the name checks (InputError)."""
    files = manifest.get("files")
    if not isinstance(files, dict):
        raise _fail(f"{mpath} has no 'files' object listing the table's files and checksums")
    for name in files:
        member(folder, name, "table file")
    try:
        present = {e.name for e in os.scandir(folder)} - set(NOT_LISTED)
    except OSError as exc:
        raise InputError(f"cannot list {folder}: {exc.strerror}") from None
    for name in sorted(present - set(files)):
        if name == ROWS_DIR:
            raise _fail(f"{folder / name} exists: a `zeckenum table` run into this directory "
                        "has not finished (rerun it to complete the table)")
        raise _fail(f"{folder / name} is in the table directory but not listed in the manifest")
    texts: dict[str, str] = {}
    for name, entry in sorted(files.items()):
        path = folder / name
        if not path.exists():
            raise _fail(f"{path} is listed in the manifest but missing")
        if (not isinstance(entry, dict) or not isinstance(entry.get("sha256"), str)
                or type(entry.get("bytes")) is not int):
            raise _fail(f"{mpath}: the entry of {name} needs 'sha256' and 'bytes'")
        if entry["bytes"] > MAX_FILE_BYTES or entry["bytes"] < 0:
            raise _fail(f"{mpath}: {name} is recorded as {entry['bytes']} bytes, outside "
                        f"0..{MAX_FILE_BYTES}")
        raw = read_regular(path, MAX_FILE_BYTES, "table file")
        if len(raw) != entry["bytes"] or hashlib.sha256(raw).hexdigest() != entry["sha256"]:
            raise _fail(f"{path} does not match its size and SHA-256 in the manifest "
                        "(edited or corrupt)")
        try:
            texts[name] = raw.decode("utf-8")
        except UnicodeDecodeError:
            raise _fail(f"{path} is not UTF-8 text") from None
    return texts


def _cells(name: str, text: str, header: tuple[str, ...]) -> list[list[str]]:
    """The data rows of a CSV text with exactly `header` (TableCheckFailed otherwise)."""
    try:
        rows = list(csv.reader(io.StringIO(text, newline="")))
    except csv.Error as exc:
        raise _fail(f"{name} is not a readable CSV file: {exc}") from None
    if not rows or tuple(rows[0]) != header:
        raise _fail(f"{name}: the header must be {','.join(header)}")
    for i, row in enumerate(rows[1:], 2):
        if len(row) != len(header):
            raise _fail(f"{name}:{i}: expected {len(header)} columns, found {len(row)}")
    return rows[1:]


def _int(text: str, where: str) -> int:
    if not isinstance(text, str) or not INT_RE.fullmatch(text):
        raise _fail(f"{where}: {text!r} is not an integer")
    try:
        return int(text)
    except ValueError:
        raise _fail(f"{where}: {text[:20]!r}... is too long an integer") from None


def _fraction(text: str, where: str) -> Fraction:
    if not isinstance(text, str) or not FRAC_RE.fullmatch(text):
        raise _fail(f"{where}: {text[:40]!r} is not an exact rational p/q")
    try:
        return Fraction(text)
    except (ValueError, ZeroDivisionError):
        raise _fail(f"{where}: {text[:40]!r} is not an exact rational p/q") from None


def _by_n(name: str, rows: list[list[str]]) -> dict[int, list[str]]:
    """Rows keyed by n, strictly increasing (so one per n)."""
    out: dict[int, list[str]] = {}
    last = None
    for i, row in enumerate(rows, 2):
        n = _int(row[0], f"{name}:{i} n")
        if not 1 <= n <= MAX_N:
            raise _fail(f"{name}:{i}: n={n} is outside 1..{MAX_N}")
        if last is not None and n <= last:
            raise _fail(f"{name}:{i}: n={n} repeats or is out of order (one row per n, "
                        "ascending)")
        out[n] = row
        last = n
    return out


def _long(name: str, rows: list[list[str]], value: Callable[[str, str], object],
          ) -> dict[int, dict[int, object]]:
    """Long-format rows (n, length, value) keyed by n then length, strictly increasing."""
    out: dict[int, dict[int, object]] = {}
    last = None
    for i, row in enumerate(rows, 2):
        n, L = _int(row[0], f"{name}:{i} n"), _int(row[1], f"{name}:{i} length")
        if not 1 <= n <= MAX_N:
            raise _fail(f"{name}:{i}: n={n} is outside 1..{MAX_N}")
        if last is not None and (n, L) <= last:
            raise _fail(f"{name}:{i}: (n={n}, length={L}) repeats or is out of order (one "
                        "row per (n, length), ascending)")
        if L < 0:
            raise _fail(f"{name}:{i}: negative length {L}")
        out.setdefault(n, {})[L] = value(row[2], f"{name}:{i} n={n} length={L}")
        last = (n, L)
    return out


def _same_text(name: str, got: str, expect: str, source: str) -> None:
    """`got` (the file `name`) must be exactly `expect`, the text regenerated from the rows
    parsed out of `source`."""
    if got != expect:
        a, b = got.splitlines(), expect.splitlines()
        line = next((i for i, (x, y) in enumerate(zip(a, b, strict=False), 1) if x != y),
                    min(len(a), len(b)) + 1)
        what = ("is not in canonical form (number format, quoting or line ends)"
                if name == source else f"disagrees with {source}")
        raise _fail(f"{name}:{line}: {what}")


def _same_texts(texts: dict[str, str], expect: dict[str, str], source: str) -> None:
    for name in sorted(expect, key=lambda x: x != source):
        _same_text(name, texts[name], expect[name], source)


def _check_count(t: Table, texts: dict[str, str]) -> list[int]:
    rows = _by_n("summary.csv", _cells("summary.csv", texts["summary.csv"], SUMMARY_FIELDS))
    for n, cells in rows.items():
        t.summary[n] = {k: _int(v, f"summary.csv n={n} {k}")
                        for k, v in zip(SUMMARY_FIELDS, cells, strict=True)}
    t.spectra = _long("spectra.csv", _cells("spectra.csv", texts["spectra.csv"],
                                            SPECTRA_FIELDS), _int)  # type: ignore[assignment]
    if set(t.spectra) != set(t.summary):
        raise _fail("spectra.csv and summary.csv cover different n")
    states = fibonacci_partitions(max(t.summary, default=0)) if t.is_standard else []
    for n, row in t.summary.items():
        where = f"summary.csv n={n}"
        spec = t.spectra[n]
        bad = [L for L, c in spec.items() if c <= 0]
        if bad:
            raise _fail(f"spectra.csv n={n} length={bad[0]}: count {spec[bad[0]]} is not "
                        "positive (only lengths that occur are listed)")
        if row["states"] < 1 or row["transitions"] < 0:
            raise _fail(f"{where}: states must be >= 1 and transitions >= 0")
        lo, hi = min(spec), max(spec)
        for key, value in (("games", sum(spec.values())), ("shortest", lo), ("longest", hi),
                           ("shortest_games", spec[lo]), ("longest_games", spec[hi])):
            if row[key] != value:
                raise _fail(f"{where} {key}={row[key]} disagrees with spectra.csv ({value})")
        if t.is_standard:
            # "The Zeckendorf Game" (2018, arXiv:1809.04881): the shortest game has
            # n - Z(n) moves; every state of the standard game is reachable, so the states
            # are the partitions of n into Fibonacci numbers (OEIS A003107)
            if row["shortest"] != n - zeckendorf_terms(n):
                raise _fail(f"{where} shortest={row['shortest']} but the shortest game of "
                            f"the standard game has n - Z(n) = {n - zeckendorf_terms(n)} "
                            "moves (arXiv:1809.04881)")
            if row["states"] != states[n]:
                raise _fail(f"{where} states={row['states']} but n has {states[n]} "
                            "partitions into Fibonacci parts (OEIS A003107)")
    expect = count_texts(t.summary, t.spectra)
    _same_text("spectra.csv", texts["spectra.csv"], expect.pop("spectra.csv"), "spectra.csv")
    _same_texts(texts, expect, "summary.csv")
    return sorted(t.summary)


def _check_solve(t: Table, texts: dict[str, str]) -> list[int]:
    rows = _by_n("solve.csv", _cells("solve.csv", texts["solve.csv"], SOLVE_FIELDS))
    out = []
    for n, cells in rows.items():
        if cells[1] not in ("1", "2", ""):
            raise _fail(f"solve.csv n={n} winner={cells[1]!r} is not 1, 2 or empty")
        p = _int(cells[2], f"solve.csv n={n} p_positions")
        if p < 0:
            raise _fail(f"solve.csv n={n} p_positions={p} is negative")
        t.solve[n] = {"winner": cells[1], "p_positions": p}
        out.append({"n": n, "winner": cells[1], "p_positions": p})
        if t.is_standard and n > 2 and cells[1] != "2":
            raise _fail(f"solve.csv n={n} winner={cells[1]!r}, but player 2 wins the standard "
                        "game for every n > 2 (\"The Zeckendorf Game\", arXiv:1809.04881)")
    _same_texts(texts, solve_files(out), "solve.csv")
    return sorted(t.solve)


def _check_random(t: Table, texts: dict[str, str]) -> list[int]:
    rows = _by_n("random.csv", _cells("random.csv", texts["random.csv"], RANDOM_FIELDS))
    t.laws = _long("random_lengths.csv", _cells("random_lengths.csv",
                                                texts["random_lengths.csv"], LENGTH_FIELDS),
                   _fraction)  # type: ignore[assignment]
    if set(t.laws) != set(rows):
        raise _fail("random_lengths.csv and random.csv cover different n")
    got = []
    for n, cells in rows.items():
        where = f"random.csv n={n}"
        t.random[n] = {k: _fraction(v, f"{where} {k}")
                       for k, v in zip(RANDOM_FIELDS[1:], cells[1:], strict=True)}
        law = t.laws[n]
        for L, p in law.items():
            if not 0 < p <= 1:
                raise _fail(f"random_lengths.csv n={n} length={L}: probability {p} is not in "
                            "(0, 1]")
        if sum(law.values()) != 1:
            raise _fail(f"random_lengths.csv n={n}: probabilities do not sum to 1")
        mean = sum(L * p for L, p in law.items())
        expect = {
            "player1_wins": sum(p for L, p in law.items() if L % 2 == 1),
            "player2_wins": sum(p for L, p in law.items() if L % 2 == 0),
            "mean_length": mean,
            "variance": sum((L - mean) ** 2 * p for L, p in law.items()),
        }
        for key, value in expect.items():
            if t.random[n][key] != value:
                raise _fail(f"{where} {key} disagrees with random_lengths.csv")
        got.append(({"n": n, **{k: frac_str(v) for k, v in t.random[n].items()}},
                    [{"n": n, "length": L, "probability": frac_str(p)}
                     for L, p in law.items()]))
    expect = random_files(got)
    _same_text("random_lengths.csv", texts["random_lengths.csv"],
               expect.pop("random_lengths.csv"), "random_lengths.csv")
    _same_texts(texts, expect, "random.csv")
    return sorted(t.random)


def _kinds_of(files: dict[str, str]) -> tuple[str, ...]:
    kinds = tuple(k for k in TABLE_KINDS if KIND_FILES[k][0] in files)
    expect = {name for k in kinds for name in KIND_FILES[k]}
    extra, missing = set(files) - expect, expect - set(files)
    if extra or missing or not kinds:
        raise _fail("the files do not form a table: "
                    + (f"unexpected {sorted(extra)} " if extra else "")
                    + (f"missing {sorted(missing)}" if missing else "")
                    + ("no summary.csv, solve.csv or random.csv" if not kinds else ""))
    return kinds


def _check_position(params: dict, ruleset: RuleSet, ns: list[int]) -> None:
    """A table of a game started at a position records it as `parameters.position` (the
    count vector, README "Positions"), equal to the embedded rule file's start, and holds
    the one row n = its value; a table of any other game has no such key."""
    pos = ruleset.position
    want = None if pos is None else format_position(pos)
    have = params.get("position")
    if have != want:
        raise _fail(f"manifest.json records position {str(have)[:60]!r} but the embedded rule "
                    f"file starts {'at ' + want if want else 'at its own start'}")
    if pos is not None and ns != [ruleset.position_value(pos)]:
        raise _fail(f"a table from position {want} holds the one row n = "
                    f"{ruleset.position_value(pos)}, not n = {ns[0]}..{ns[-1]}")


def check_texts(folder: Path, manifest: dict, ruleset: RuleSet, rules_text: str,
                texts: dict[str, str]) -> Table:
    """Every check short of recomputation on the file texts of a table (see the module
    docstring); returns the parsed table or raises TableCheckFailed."""
    kinds = _kinds_of(texts)
    params = manifest.get("parameters")
    if not isinstance(params, dict):
        raise _fail("manifest.json has no 'parameters' object")
    what = params.get("what")
    if not isinstance(what, list) or sorted(map(str, what)) != sorted(kinds) \
            or len(what) != len(kinds):
        raise _fail(f"manifest.json declares what={what!r} but the files hold "
                    f"{', '.join(kinds)}")
    t = Table(folder=folder, manifest=manifest, ruleset=ruleset, rules_text=rules_text,
              kinds=kinds, ns=[])
    covers = {}
    for kind, check in (("count", _check_count), ("solve", _check_solve),
                        ("random", _check_random)):
        if kind in kinds:
            covers[kind] = check(t, texts)
    ns = next(iter(covers.values()))
    for kind, got in covers.items():
        if got != ns:
            raise _fail(f"the {kind} files cover other n than the {next(iter(covers))} files")
    if not ns:
        raise _fail("the table has no rows")
    if ns != list(range(ns[0], ns[-1] + 1)) or ns[0] < 1:
        missing = next(n for n in range(ns[0], ns[-1] + 1) if n not in set(ns))
        raise _fail(f"n={missing} is missing: the rows are not one consecutive range of n")
    lo, hi = params.get("from"), params.get("to")
    if type(lo) is not int or type(hi) is not int or (lo, hi) != (ns[0], ns[-1]):
        raise _fail(f"manifest.json declares n = {lo!r}..{hi!r} but the files hold "
                    f"n = {ns[0]}..{ns[-1]}")
    _check_position(params, ruleset, ns)
    if "count" in kinds and "solve" in kinds:
        for n in ns:
            parities = {L % 2 for L in t.spectra[n]}
            if len(parities) == 1:
                winner = "1" if parities == {1} else "2"
                if t.solve[n]["winner"] != winner:
                    raise _fail(f"solve.csv n={n} winner={t.solve[n]['winner']!r}, but every "
                                f"game has {'odd' if winner == '1' else 'even'} length "
                                "(spectra.csv)")
    if "count" in kinds and "random" in kinds:
        for n in ns:
            if set(t.laws[n]) != set(t.spectra[n]):
                raise _fail(f"random_lengths.csv n={n}: the lengths of positive probability "
                            "differ from those of spectra.csv (every game has positive "
                            "probability)")
    t.ns = ns
    return t


def load_table(folder: str | Path) -> Table:
    """Read a table directory as untrusted input and run every check short of recomputing
    (module docstring).  InputError (exit 2) when it is not a readable table or its rule
    text disagrees with its hash; TableCheckFailed (exit 5) when a check fails."""
    folder = Path(folder)
    mpath, manifest = _manifest_of(folder)
    ruleset, text = rules_of_manifest(manifest, str(mpath))
    texts = _read_listed(folder, manifest, mpath)
    return check_texts(folder, manifest, ruleset, text, texts)


def is_table(folder: str | Path) -> bool:
    """Whether `folder` looks like a table with counts (manifest.json and summary.csv are
    regular files); `load_table` checks the rest."""
    folder = Path(folder)
    return (folder / "manifest.json").is_file() and (folder / "summary.csv").is_file()
