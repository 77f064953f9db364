"""Published tables over a range of n, and their verification.

`build_table(lo, hi, what, out)` writes one directory:

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
                     parameters, UTC date, the primes used, and the SHA-256 and size of
                     every file

While it computes, `build_table` keeps every finished row in `<out>/.rows/` (one small
JSON file per (kind, n), each carrying the SHA-256 of its payload) beside `params.json`
(rules hash, kinds, prime offset).  A rerun with the same parameters RESUMES: rows whose
checksum holds are kept, only the missing (kind, n) are computed; a complete table in
`out` is taken over the same way (after `load_table` checked it), so a rerun with a larger
range computes only the new n.  A directory written for another rule set, other kinds or
another prime offset is refused.  `.rows/` is removed once the manifest is written.

`load_table(dir)` reads a table as untrusted input and checks everything that needs no
recomputation; `verify_table(dir)` adds the recomputation.  Invariants checked:

* the manifest is a JSON object of this format; its `files` entry lists exactly the files
  in the directory (besides manifest.json and report.html), each a plain name inside it,
  a regular file of at most `MAX_FILE_BYTES`, with its recorded size and SHA-256;
* the kinds (count, solve, random) and the range of n come from the files (each kind's
  complete file set; the n of every row) and must equal `parameters.what`, `.from`, `.to`;
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

`verify_table` then recomputes a fresh random sample of n (seed printed; `seed=` repeats
it) plus always the largest n, or every n with `full=True`: counts with a prime set
disjoint from the table's, random play with primes past the table's, and optimal play
(winner, P-positions) from scratch; never from a stored value.  Any disagreement raises
`TableCheckFailed` (exit 5) naming the file, n and field; a manifest that is missing or
unreadable, or whose rule text disagrees with its hash, is bad input (`InputError`, 2).
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io
import json
import os
import re
import secrets
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

from zeckenum import __version__
from zeckenum.cluster.errors import CheckpointRefused, TableCheckFailed
from zeckenum.counting.result import CountResult
from zeckenum.errors import InputError, OutputError, ZeckenumError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import STANDARD, RuleSet
from zeckenum.rules.rulefile import format_rules, rules_from_text
from zeckenum.safeio import check_output_dir, deliver, member, read_regular, write_atomic

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
RANDOM_PRIME_OFFSET = 64
"""Prime offset of `verify`'s recomputation of random play when the manifest does not
record the primes the table used (tables of an earlier version)."""

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


def solve_row(rules, n: int) -> dict:  # noqa: ANN001
    """Two-player optimal play at n: winner and number of P-positions (task function)."""
    from zeckenum.optimal.solve import solve

    r = solve(n, rules)
    return {"n": n, "winner": r.winner, "p_positions": r.p_positions}


def random_rows(rules, n: int, prime_offset: int = 0,  # noqa: ANN001
                ) -> tuple[dict, list[dict], int]:
    """Two-player uniform random play at n (task function): (summary row, length rows,
    primes used including the check prime).

    The summary holds each player's exact win probability and the length's mean and
    variance; the length rows the exact probability of every length that occurs.
    """
    from zeckenum.randomplay.exact import frac_str, random_play

    r = random_play(n, rules, players=2, prime_offset=prime_offset)
    law = r.length_probability or {}
    row = {"n": n, "player1_wins": frac_str(Fraction(r.win_probability[1])),
           "player2_wins": frac_str(Fraction(r.win_probability[2])),
           "mean_length": frac_str(Fraction(r.mean_length)),
           "variance": frac_str(Fraction(r.variance))}
    return row, [{"n": n, "length": L, "probability": frac_str(Fraction(p))}
                 for L, p in sorted(law.items())], len(r.primes) + 1


TASKS: dict[str, Callable] = {"solve": solve_row, "random": random_rows}
"""The table kinds besides count and the task that computes one n of each."""


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
    from zeckenum.randomplay.exact import frac_str

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


# ----------------------------------------------------------------------------- verifying


def _primes_used(manifest: dict, key: str) -> int | None:
    """The largest number of primes the table used for one n (recorded), or None."""
    got = manifest.get(key)
    if got is None:
        return None
    if not isinstance(got, dict) or any(type(v) is not int or not 0 <= v <= MAX_PRIMES
                                        for v in got.values()):
        raise _fail(f"manifest.json: '{key}' must map n to a number of primes")
    return max(got.values(), default=0)


def verify_table(
    folder: str | Path, sample: int = 3, seed: int | None = None, *, full: bool = False,
    workers: int | None = None, scheduler: str | None = None,
) -> dict:
    """Check a published table; returns a summary, raises TableCheckFailed on any mismatch.

    `load_table`'s checks, then recomputation of `sample` n drawn with `seed` (a fresh one
    when None; returned so the run can be repeated) plus always the largest n, or every n
    with `full`: counts with primes disjoint from the table's, random play with primes
    past the table's, optimal play afresh; compared row by row.
    """
    t = load_table(folder)
    params = t.manifest["parameters"]
    if seed is None:
        seed = secrets.randbits(32)
    import random

    ns = t.ns
    if full or sample >= len(ns):
        recomputed = list(ns)
    else:
        recomputed = sorted(set(random.Random(seed).sample(ns, sample)) | {ns[-1]})
    offset = None
    if "count" in t.kinds:
        used = _primes_used(t.manifest, "primes_per_n") or 0
        base = params.get("prime_offset", 0)
        if type(base) is not int or not 0 <= base <= MAX_PRIMES:
            raise _fail("manifest.json: parameters.prime_offset must be a small integer")
        offset = base + used + 1
        _recount(t, recomputed, offset, workers, scheduler)
    if "solve" in t.kinds:
        for n in recomputed:
            fresh = solve_row(t.ruleset, n)
            w = "" if fresh["winner"] is None else str(fresh["winner"])
            for key, value in (("winner", w), ("p_positions", fresh["p_positions"])):
                if t.solve[n][key] != value:
                    raise _fail(f"solve.csv n={n} {key}={t.solve[n][key]} but solving again "
                                f"gives {value}")
    if "random" in t.kinds:
        used = _primes_used(t.manifest, "random_primes_per_n")
        roff = RANDOM_PRIME_OFFSET if used is None else used + 1
        for n in recomputed:
            row, lengths, _ = random_rows(t.ruleset, n, prime_offset=roff)
            law = {r["length"]: Fraction(r["probability"]) for r in lengths}
            if t.laws[n] != law:
                bad = min(L for L in set(law) | set(t.laws[n])
                          if law.get(L) != t.laws[n].get(L))
                raise _fail(f"random_lengths.csv n={n} length={bad} disagrees with a "
                            "recomputation with other primes")
            for key in RANDOM_FIELDS[1:]:
                if t.random[n][key] != Fraction(row[key]):
                    raise _fail(f"random.csv n={n} {key} disagrees with a recomputation "
                                "with other primes")
    files = t.manifest["files"]
    return {"files": len(files), "rows": len(ns) * len(t.kinds), "recomputed": recomputed,
            "prime_offset": offset, "seed": seed, "full": full, "n_range": (ns[0], ns[-1]),
            "kinds": t.kinds}


def _recount(t: Table, recomputed: list[int], offset: int, workers: int | None,
             scheduler: str | None) -> None:
    from zeckenum.cluster.run import run_counts

    fresh = run_counts(recomputed, t.ruleset, workers=workers, scheduler=scheduler,
                       prime_offset=offset) if recomputed else {}
    for n in recomputed:
        r = fresh[n]
        row = summary_row(r)
        for key in SUMMARY_FIELDS:
            if t.summary[n][key] != row[key]:
                raise _fail(f"summary.csv n={n} {key}={t.summary[n][key]} but a "
                            f"recomputation with disjoint primes gives {row[key]}")
        if t.spectra[n] != dict(r.length_counts):
            bad = min(L for L in set(t.spectra[n]) | set(r.length_counts)
                      if t.spectra[n].get(L) != r.length_counts.get(L))
            raise _fail(f"spectra.csv n={n} length={bad} disagrees with a recomputation "
                        "with disjoint primes")


# ------------------------------------------------------------------------------ building


def _row_digest(payload: dict) -> str:
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


class _Rows:
    """The finished rows of a table being built, kept in `<out>/.rows/` so a rerun resumes.

    One file per (kind, n): {"sha256": digest of the payload, "payload": {...}}; a file
    whose digest, kind or n is wrong is dropped and its row computed again.  A failed write
    (full disk) stops further row writes; the rows stay in memory for the final files.
    """

    def __init__(self, out: Path, params: dict) -> None:
        self.dir = out / ROWS_DIR
        self.params = params
        self.rows: dict[str, dict[int, dict]] = {k: {} for k in TABLE_KINDS}
        self.write_error: OSError | None = None

    def open(self) -> None:
        ppath = self.dir / "params.json"
        if self.dir.exists():
            if not self.dir.is_dir() or self.dir.is_symlink():
                raise CheckpointRefused(f"{self.dir} is not a directory of table rows")
            try:
                have = json.loads(read_regular(ppath, 1 << 20, "table rows parameters"))
            except (InputError, ValueError, UnicodeDecodeError):
                raise CheckpointRefused(
                    f"{self.dir}: unreadable params.json; remove the directory to start "
                    "afresh") from None
            self.refuse_other(have, str(self.dir))
            self.load()
        else:
            self.dir.mkdir()
            write_atomic(ppath, json.dumps(self.params, sort_keys=True).encode())

    def refuse_other(self, have: object, where: str) -> None:
        if not isinstance(have, dict):
            raise CheckpointRefused(f"{where} was written by something else")
        for key in ("rules_hash", "what", "prime_offset"):
            if have.get(key) != self.params[key]:
                raise CheckpointRefused(
                    f"{where} was written with {key}={have.get(key)!r}, this run has "
                    f"{self.params[key]!r}; use another --out or the same parameters")

    def load(self) -> None:
        for entry in os.scandir(self.dir):
            m = re.fullmatch(r"(count|solve|random)-(\d{1,9})\.json", entry.name)
            if not m:
                continue
            kind, n = m.group(1), int(m.group(2))
            try:
                doc = json.loads(read_regular(Path(entry.path), MAX_ROW_BYTES, "table row"))
                payload = doc["payload"]
                ok = (doc["sha256"] == _row_digest(payload) and payload["kind"] == kind
                      and payload["n"] == n)
            except (InputError, ValueError, UnicodeDecodeError, KeyError, TypeError):
                ok = False
            if ok:
                self.rows[kind][n] = payload
            else:
                Path(entry.path).unlink(missing_ok=True)

    def add(self, kind: str, n: int, payload: dict) -> None:
        payload = {"kind": kind, "n": n, **payload}
        self.rows[kind][n] = payload
        if self.write_error is not None:
            return
        doc = {"sha256": _row_digest(payload), "payload": payload}
        try:
            write_atomic(self.dir / f"{kind}-{n}.json", json.dumps(doc).encode())
        except OSError as exc:
            self.write_error = exc

    def missing(self, kind: str, ns: list[int]) -> list[int]:
        return [n for n in ns if n not in self.rows[kind]]


def _count_payload(r: CountResult) -> dict:
    return {"summary": summary_row(r),
            "spectrum": [[L, c] for L, c in sorted(r.length_counts.items())],
            "primes": len(r.primes) + 1}


def _existing_table(out: Path, rows: _Rows) -> Table:
    """The complete table already in `out`, checked by `load_table` and refused when it
    was written for other parameters."""
    try:
        t = load_table(out)
    except ZeckenumError as exc:
        raise CheckpointRefused(f"--out {out} holds a table that fails its checks ({exc}); "
                                "remove it or choose another directory") from None
    rows.refuse_other({"rules_hash": t.ruleset.content_hash(), "what": sorted(t.kinds),
                       "prime_offset": t.manifest["parameters"].get("prime_offset", 0)},
                      f"the table in {out}")
    return t


def _take_over(t: Table, rows: _Rows) -> None:
    """Seed `rows` from the checked table `t`."""
    def recorded(key: str) -> dict[str, int]:
        got = t.manifest.get(key)
        return {k: v for k, v in got.items() if type(v) is int and 0 <= v <= MAX_PRIMES} \
            if isinstance(got, dict) else {}

    primes, rprimes = recorded("primes_per_n"), recorded("random_primes_per_n")
    for n in t.ns:
        if "count" in t.kinds:
            rows.add("count", n, {"summary": t.summary[n],
                                  "spectrum": [[L, c] for L, c in t.spectra[n].items()],
                                  "primes": primes.get(str(n), 0)})
        if "solve" in t.kinds:
            w = t.solve[n]["winner"]
            rows.add("solve", n, {"row": {"n": n, "winner": int(w) if w else None,
                                          "p_positions": t.solve[n]["p_positions"]}})
        if "random" in t.kinds:
            from zeckenum.randomplay.exact import frac_str

            rows.add("random", n, {
                "row": {"n": n, **{k: frac_str(v) for k, v in t.random[n].items()}},
                "lengths": [{"n": n, "length": L, "probability": frac_str(p)}
                            for L, p in t.laws[n].items()],
                "primes": rprimes.get(str(n), 0)})


def _prepare_out(out: Path, rows: _Rows) -> None:
    """Check `out` for a resumable table and open its rows (refusing foreign content)."""
    known = {name for names in KIND_FILES.values() for name in names} | set(NOT_LISTED)
    for entry in os.scandir(out):
        if entry.name in known or entry.name in (ROWS_DIR, BUNDLE):
            continue
        if entry.name.startswith(".") and entry.name.endswith(".tmp") and entry.is_file(
                follow_symlinks=False):
            Path(entry.path).unlink(missing_ok=True)  # a write_atomic torn by a crash
            continue
        raise CheckpointRefused(f"--out {out} holds {entry.name!r}, which is not part of a "
                                "zeckenum table; choose an empty or new directory")
    existing = None
    if not (out / ROWS_DIR).exists() and (out / "manifest.json").exists():
        existing = _existing_table(out, rows)
    rows.open()
    if existing is not None:
        _take_over(existing, rows)


def build_table(
    lo: int, hi: int, what: tuple[str, ...] | str, out: str | Path, rules: str = "standard",
    *, workers: int | None = None, scheduler: str | None = None,
    checkpoint_dir: str | Path | None = None, progress: bool = False, prime_offset: int = 0,
) -> dict:
    """Compute and publish the tables for lo <= n <= hi; returns the manifest.

    `out` is checked (created, writable) before anything is computed; a partial or
    complete table of the same rule set, kinds and prime offset in it is resumed
    (module docstring).  A final write that fails prints the table's files as one JSON
    object on standard output and raises OutputError (exit 6)."""
    from zeckenum.cluster.backend import Completion, Watchdog, open_pool, stall_seconds
    from zeckenum.cluster.run import count_on_pool

    if isinstance(what, str):
        what = parse_what(what)
    if lo < 1 or hi < lo:
        raise InputError(f"need 1 <= --from <= --to, got {lo}..{hi}")
    if hi - lo + 1 > MAX_RANGE:
        raise InputError(f"--from {lo} --to {hi}: at most {MAX_RANGE} n per table")
    ruleset = get_rules(rules)
    rules_text = format_rules(ruleset)
    out = check_output_dir(Path(out), "table directory")
    rows = _Rows(out, {"rules_hash": ruleset.content_hash(), "what": sorted(what),
                       "prime_offset": prime_offset})
    try:
        _prepare_out(out, rows)
    except OSError as exc:
        raise OutputError(f"cannot prepare table directory {out}: {exc.strerror}") from None
    ns = list(range(lo, hi + 1))
    with open_pool(workers, scheduler) as pool:
        if "count" in what:
            todo = rows.missing("count", ns)
            if pool.kind == "in-process":
                for n in todo:
                    got = count_on_pool(
                        [n], ruleset, pool, prime_offset=prime_offset,
                        checkpoint_dir=None if checkpoint_dir is None
                        else Path(checkpoint_dir) / f"n-{n:05d}")
                    rows.add("count", n, _count_payload(got[n]))
            elif todo:
                got = count_on_pool(todo, ruleset, pool, prime_offset=prime_offset,
                                    checkpoint_dir=checkpoint_dir, progress=progress)
                for n in todo:
                    rows.add("count", n, _count_payload(got[n]))
        for kind in ("solve", "random"):
            if kind not in what:
                continue
            todo = rows.missing(kind, ns)
            # one task per n, kept as each finishes; waited on through the watchdog, so
            # a cluster that lost every worker stops with ClusterStalled (exit 7) and a
            # rerun resumes from the rows kept so far
            watch = Watchdog(pool, stall_seconds(None),
                             f"the finished rows were kept in {out / '.rows'}: rerun the "
                             "same command to resume")
            done, which = Completion(), {}
            for n in todo:
                fut = pool.submit(TASKS[kind], ruleset, n)
                which[fut] = n
                done.add(fut)
            while done.pending:
                f = done.next(watch.period)
                if f is None:
                    watch.idle()
                    continue
                watch.progress()
                n = which.pop(f)
                res = watch.result(f)  # bounded: a lost result is recomputed
                if kind == "solve":
                    rows.add(kind, n, {"row": res})
                else:
                    rows.add(kind, n, {"row": res[0], "lengths": res[1], "primes": res[2]})
    files: dict[str, str] = {}
    cr = rows.rows["count"]
    if "count" in what:
        files.update(count_texts({n: cr[n]["summary"] for n in ns},
                                 {n: {int(L): c for L, c in cr[n]["spectrum"]} for n in ns}))
    if "solve" in what:
        files.update(solve_files([rows.rows["solve"][n]["row"] for n in ns]))
    if "random" in what:
        rr = rows.rows["random"]
        files.update(random_files([(rr[n]["row"], rr[n]["lengths"]) for n in ns]))
    manifest = {
        "format": FORMAT,
        "tool": "zeckenum",
        "version": __version__,
        "created": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "rules": ruleset.name,
        "rules_hash": ruleset.content_hash(),
        "rules_text": rules_text,
        "parameters": {"from": lo, "to": hi, "what": list(what), "prime_offset": prime_offset},
        "primes_per_n": {str(n): cr[n]["primes"] for n in ns} if "count" in what else {},
        "files": {name: {"sha256": hashlib.sha256(text.encode()).hexdigest(),
                         "bytes": len(text.encode())} for name, text in sorted(files.items())},
    }
    if "random" in what:
        manifest["random_primes_per_n"] = {str(n): rows.rows["random"][n]["primes"]
                                           for n in ns}
    # the rows were computed (or resumed from checksummed rows): the published files must
    # pass every check `verify` makes short of recomputing before they are written
    check_texts(out, manifest, ruleset, rules_text, files)
    try:
        for name, text in files.items():
            write_atomic(out / name, text.encode())
        write_atomic(out / "manifest.json", (json.dumps(manifest, indent=1) + "\n").encode())
    except OSError as exc:
        bundle = json.dumps({"manifest": manifest, "files": files}, indent=1) + "\n"
        deliver(out / BUNDLE, bundle, what="table (manifest and files as one JSON object)")
        raise OutputError(f"could not write the table files into {out} ({exc.strerror}); "
                          f"they were written as one JSON object to {out / BUNDLE}; the "
                          f"rows are kept in {out / ROWS_DIR}") from None
    shutil.rmtree(out / ROWS_DIR, ignore_errors=True)
    (out / BUNDLE).unlink(missing_ok=True)
    return manifest
