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
    manifest.json    provenance: rule set and its content hash, tool version, parameters,
                     UTC date, the primes used, and the SHA-256 and size of every file

`verify_table(dir)` re-reads every file against its SHA-256, checks the files against each
other (spectrum sums = games, first/last lengths = shortest/longest, sequences = summary),
and recomputes a seeded sample of n with a prime set disjoint from the one the table used
(solve, which has no primes, is recomputed as it is); any disagreement raises
`TableCheckFailed` naming the file, n and field.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import random
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path

from .. import __version__
from ..errors import InputError
from ..results import CountResult
from ..rules import get_rules
from .checkpoint import sha256_file, write_atomic
from .errors import TableCheckFailed

FORMAT = "zeckenum-table/1"
SUMMARY_FIELDS = (
    "n", "states", "transitions", "games", "shortest", "longest", "shortest_games",
    "longest_games",
)
SEQUENCES = ("games", "states", "transitions", "shortest", "longest", "shortest_games",
             "longest_games")


TABLE_KINDS = ("count", "solve", "random")
SOLVE_FIELDS = ("n", "winner", "p_positions")
SOLVE_SEQUENCES = ("winner", "p_positions")
RANDOM_FIELDS = ("n", "player1_wins", "player2_wins", "mean_length", "variance")
RANDOM_SEQUENCES = ("player1_wins", "mean_length")
RANDOM_PRIME_OFFSET = 64
"""Prime offset of `verify`'s recomputation of random play (disjoint from the default)."""


def solve_row(rules, n: int) -> dict:  # noqa: ANN001
    """Two-player optimal play at n: winner and number of P-positions (task function)."""
    from ..solve import solve

    r = solve(n, rules)
    return {"n": n, "winner": r.winner, "p_positions": r.p_positions}


def random_rows(rules, n: int, prime_offset: int = 0) -> tuple[dict, list[dict]]:  # noqa: ANN001
    """Two-player uniform random play at n (task function): (summary row, length rows).

    The summary holds each player's exact win probability and the length's mean and
    variance; the length rows the exact probability of every length that occurs.
    """
    from ..randomplay import frac_str, random_play

    r = random_play(n, rules, players=2, prime_offset=prime_offset)
    law = r.length_probability or {}
    row = {"n": n, "player1_wins": frac_str(Fraction(r.win_probability[1])),
           "player2_wins": frac_str(Fraction(r.win_probability[2])),
           "mean_length": frac_str(Fraction(r.mean_length)),
           "variance": frac_str(Fraction(r.variance))}
    return row, [{"n": n, "length": L, "probability": frac_str(Fraction(p))}
                 for L, p in sorted(law.items())]


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


def count_files(results: dict[int, CountResult]) -> dict[str, str]:
    """File name -> text of the count part of a table."""
    ns = sorted(results)
    rows = [summary_row(results[n]) for n in ns]
    spectra = [{"n": n, "length": L, "count": c}
               for n in ns for L, c in results[n].length_counts.items()]
    files = {
        "summary.csv": csv_text(SUMMARY_FIELDS, rows),
        "spectra.csv": csv_text(("n", "length", "count"), spectra),
    }
    for name in SEQUENCES:
        files[f"{name}.seq"] = seq_text([(row["n"], row[name]) for row in rows])
    return files


def solve_files(rows: list[dict]) -> dict[str, str]:
    """File name -> text of the solve part of a table."""
    files = {"solve.csv": csv_text(SOLVE_FIELDS, rows)}
    for name in SOLVE_SEQUENCES:
        files[f"{name}.seq"] = seq_text([(row["n"], row[name]) for row in rows])
    return files


def random_files(got: list[tuple[dict, list[dict]]]) -> dict[str, str]:
    """File name -> text of the random-play part of a table."""
    rows = [row for row, _ in got]
    files = {
        "random.csv": csv_text(RANDOM_FIELDS, rows),
        "random_lengths.csv": csv_text(("n", "length", "probability"),
                                       [r for _, lengths in got for r in lengths]),
    }
    for name in RANDOM_SEQUENCES:
        files[f"{name}.seq"] = seq_text([(row["n"], row[name]) for row in rows])
    return files


def build_table(
    lo: int, hi: int, what: tuple[str, ...] | str, out: str | Path, rules: str = "standard",
    *, workers: int | None = None, scheduler: str | None = None,
    checkpoint_dir: str | Path | None = None, progress: bool = False, prime_offset: int = 0,
) -> dict:
    """Compute and publish the tables for lo <= n <= hi; returns the manifest."""
    from .backend import open_pool
    from .run import count_on_pool

    if isinstance(what, str):
        what = parse_what(what)
    if lo < 1 or hi < lo:
        raise InputError(f"need 1 <= --from <= --to, got {lo}..{hi}")
    ruleset = get_rules(rules)
    out = Path(out)
    if out.exists() and any(out.iterdir()):
        raise InputError(f"--out {out}: the directory exists and is not empty")
    ns = list(range(lo, hi + 1))
    files: dict[str, str] = {}
    counts: dict[int, CountResult] = {}
    with open_pool(workers, scheduler) as pool:
        if "count" in what:
            if pool.kind == "in-process":
                for n in ns:
                    counts.update(count_on_pool(
                        [n], ruleset, pool, prime_offset=prime_offset,
                        checkpoint_dir=None if checkpoint_dir is None
                        else Path(checkpoint_dir) / f"n-{n:05d}",
                    ))
            else:
                counts = count_on_pool(ns, ruleset, pool, prime_offset=prime_offset,
                                       checkpoint_dir=checkpoint_dir, progress=progress)
            files.update(count_files(counts))
        for kind in ("solve", "random"):
            if kind not in what:
                continue
            futs = [pool.submit(TASKS[kind], ruleset, n) for n in ns]
            got = [f.result() for f in futs]
            files.update(solve_files(got) if kind == "solve" else random_files(got))
    out.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        write_atomic(out / name, text.encode())
    manifest = {
        "format": FORMAT,
        "tool": "zeckenum",
        "version": __version__,
        "created": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "rules": ruleset.name,
        "rules_hash": ruleset.content_hash(),
        "parameters": {"from": lo, "to": hi, "what": list(what), "prime_offset": prime_offset},
        "primes_per_n": {str(n): len(r.primes) + 1 for n, r in sorted(counts.items())},
        "files": {name: {"sha256": sha256_file(out / name), "bytes": (out / name).stat().st_size}
                  for name in sorted(files)},
    }
    write_atomic(out / "manifest.json", (json.dumps(manifest, indent=1) + "\n").encode())
    return manifest


def _read_csv(path: Path) -> list[dict]:
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def _int(text: str, where: str) -> int:
    try:
        return int(text)
    except (TypeError, ValueError):
        raise TableCheckFailed(f"{where}: {text!r} is not an integer") from None


def verify_table(
    folder: str | Path, sample: int = 3, seed: int = 0, rules: str | None = None,
    *, workers: int | None = None, scheduler: str | None = None,
) -> dict:
    """Check a published table; returns a summary, raises TableCheckFailed on any mismatch.

    1. every file listed in manifest.json exists and has its SHA-256;
    2. the files agree with each other (spectra vs summary vs sequences; random play: the
       law sums to 1, and the win probabilities, mean and variance follow from it);
    3. `sample` values of n (seeded) are recomputed, counts and random play with primes
       disjoint from the table's (prime offset past every prime the table used), and
       compared row by row.
    """
    folder = Path(folder)
    mpath = folder / "manifest.json"
    try:
        manifest = json.loads(mpath.read_text())
    except FileNotFoundError:
        raise InputError(f"{folder}: no manifest.json (not a zeckenum table)") from None
    except (OSError, ValueError) as exc:
        raise TableCheckFailed(f"{mpath} cannot be read: {exc}") from None
    if manifest.get("format") != FORMAT:
        raise TableCheckFailed(f"{mpath} is not a zeckenum table manifest")
    for name, entry in sorted(manifest.get("files", {}).items()):
        path = folder / name
        if not path.exists():
            raise TableCheckFailed(f"{path} is missing")
        if sha256_file(path) != entry.get("sha256"):
            raise TableCheckFailed(f"{path} does not match its SHA-256 in the manifest "
                                   "(edited or corrupt)")
    params = manifest.get("parameters", {})
    what = params.get("what", [])
    ns = list(range(int(params.get("from", 1)), int(params.get("to", 0)) + 1))
    ruleset = get_rules(rules or manifest.get("rules", "standard"))
    if ruleset.content_hash() != manifest.get("rules_hash"):
        raise TableCheckFailed(
            f"rule set {ruleset.name!r} has hash {ruleset.content_hash()}, the table was made "
            f"with {manifest.get('rules_hash')}; pass the right rule file with --rules"
        )
    recomputed = ns if sample >= len(ns) else sorted(random.Random(seed).sample(ns, sample))
    rows = 0
    offset = None
    if "count" in what:
        rows, offset = _verify_counts(folder, manifest, ruleset, ns, recomputed, workers,
                                      scheduler)
    if "solve" in what:
        rows += _verify_solve(folder, ruleset, ns, recomputed)
    if "random" in what:
        rows += _verify_random(folder, ruleset, ns, recomputed)
    return {"files": len(manifest.get("files", {})), "rows": rows, "recomputed": recomputed,
            "prime_offset": offset}


def _check_sequences(folder: Path, names: tuple[str, ...], by_n: dict[int, dict], source: str,
                     parse: Callable[[str, str], object]) -> None:
    """Each `<name>.seq` must list exactly the values of column `name` of `source`."""
    for name in names:
        path = folder / f"{name}.seq"
        lines = path.read_text().splitlines()
        for line_no, line in enumerate(lines, 1):
            parts = line.split()
            if len(parts) != 2:
                raise TableCheckFailed(f"{path}:{line_no}: expected two columns 'n value'")
            n, v = _int(parts[0], f"{path}:{line_no}"), parse(parts[1], f"{path}:{line_no}")
            if n not in by_n or by_n[n][name] != v:
                raise TableCheckFailed(f"{path}:{line_no}: n={n} value {v} disagrees with "
                                       f"{source}")
        if len(lines) != len(by_n):
            raise TableCheckFailed(f"{path} and {source} cover different n")


def _check_covers(name: str, got: set[int], ns: list[int]) -> None:
    if got != set(ns):
        raise TableCheckFailed(f"{name} does not cover exactly n = {ns[0]}..{ns[-1]}")


def _verify_counts(folder: Path, manifest: dict, ruleset, ns: list[int],  # noqa: ANN001
                   recomputed: list[int], workers: int | None, scheduler: str | None,
                   ) -> tuple[int, int]:
    """Counts: consistency of summary, spectra and sequences; recomputed sample rows."""
    from .run import run_counts

    summary = _read_csv(folder / "summary.csv")
    by_n = {}
    for row in summary:
        n = _int(row.get("n"), "summary.csv n")
        by_n[n] = {k: _int(row.get(k), f"summary.csv n={n} {k}") for k in SUMMARY_FIELDS}
    spectra: dict[int, dict[int, int]] = {}
    for row in _read_csv(folder / "spectra.csv"):
        n = _int(row.get("n"), "spectra.csv n")
        L = _int(row.get("length"), f"spectra.csv n={n} length")
        spectra.setdefault(n, {})[L] = _int(row.get("count"), f"spectra.csv n={n} L={L}")
    for n, row in by_n.items():
        spec = spectra.get(n, {})
        if not spec:
            raise TableCheckFailed(f"spectra.csv has no rows for n={n}")
        for key, value in (
            ("games", sum(spec.values())), ("shortest", min(spec)), ("longest", max(spec)),
            ("shortest_games", spec[min(spec)]), ("longest_games", spec[max(spec)]),
        ):
            if row[key] != value:
                raise TableCheckFailed(f"summary.csv n={n} {key}={row[key]} disagrees with "
                                       f"spectra.csv ({value})")
    if set(spectra) != set(by_n):
        raise TableCheckFailed("spectra.csv and summary.csv cover different n")
    _check_covers("summary.csv", set(by_n), ns)
    _check_sequences(folder, SEQUENCES, by_n, "summary.csv", _int)

    used = max((int(v) for v in manifest.get("primes_per_n", {}).values()), default=0)
    offset = int(manifest.get("parameters", {}).get("prime_offset", 0)) + used + 1
    fresh = run_counts(recomputed, ruleset, workers=workers, scheduler=scheduler,
                       prime_offset=offset) if recomputed else {}
    for n in recomputed:
        r = fresh[n]
        row = summary_row(r)
        for key in SUMMARY_FIELDS:
            if by_n[n][key] != row[key]:
                raise TableCheckFailed(
                    f"summary.csv n={n} {key}={by_n[n][key]} but a recomputation with "
                    f"disjoint primes gives {row[key]}"
                )
        if spectra[n] != r.length_counts:
            bad = sorted(set(spectra[n]) ^ set(r.length_counts)) or sorted(
                L for L in r.length_counts if spectra[n].get(L) != r.length_counts[L])
            raise TableCheckFailed(
                f"spectra.csv n={n} length={bad[0]} disagrees with a recomputation with "
                "disjoint primes"
            )
    return len(summary), offset


def _verify_solve(folder: Path, ruleset, ns: list[int], recomputed: list[int]) -> int:  # noqa: ANN001
    """solve.csv: sequences agree, covers the range; the sampled n are solved again."""
    rows = {_int(r["n"], "solve.csv n"): r for r in _read_csv(folder / "solve.csv")}
    _check_covers("solve.csv", set(rows), ns)
    _check_sequences(folder, SOLVE_SEQUENCES, rows, "solve.csv", lambda t, _w: t)
    for n in recomputed:
        fresh = {k: str(v) if v is not None else "" for k, v in solve_row(ruleset, n).items()}
        if rows[n] != fresh:
            raise TableCheckFailed(f"solve.csv n={n} disagrees with a recomputation")
    return len(rows)


def _fraction(text: str, where: str) -> Fraction:
    try:
        return Fraction(text)
    except (TypeError, ValueError, ZeroDivisionError):
        raise TableCheckFailed(f"{where}: {text!r} is not an exact rational p/q") from None


def _verify_random(folder: Path, ruleset, ns: list[int], recomputed: list[int]) -> int:  # noqa: ANN001
    """random.csv and random_lengths.csv: the law sums to 1 and gives the summary (wins,
    mean, variance, in fractions); sequences agree; sampled n recomputed with other primes."""
    rows = {_int(r["n"], "random.csv n"): r for r in _read_csv(folder / "random.csv")}
    laws: dict[int, dict[int, Fraction]] = {}
    for r in _read_csv(folder / "random_lengths.csv"):
        n = _int(r["n"], "random_lengths.csv n")
        L = _int(r["length"], f"random_lengths.csv n={n} length")
        laws.setdefault(n, {})[L] = _fraction(r["probability"], f"random_lengths.csv n={n}")
    _check_covers("random.csv", set(rows), ns)
    _check_covers("random_lengths.csv", set(laws), ns)
    for n, law in laws.items():
        where = f"random.csv n={n}"
        if sum(law.values()) != 1:
            raise TableCheckFailed(f"random_lengths.csv n={n}: probabilities do not sum to 1")
        mean = sum(L * p for L, p in law.items())
        expect = {
            "player1_wins": sum(p for L, p in law.items() if L % 2 == 1),
            "player2_wins": sum(p for L, p in law.items() if L % 2 == 0),
            "mean_length": mean,
            "variance": sum((L - mean) ** 2 * p for L, p in law.items()),
        }
        for key, value in expect.items():
            if _fraction(rows[n][key], f"{where} {key}") != value:
                raise TableCheckFailed(f"{where} {key} disagrees with random_lengths.csv")
    _check_sequences(folder, RANDOM_SEQUENCES, rows, "random.csv", lambda t, _w: t)
    for n in recomputed:
        row, lengths = random_rows(ruleset, n, prime_offset=RANDOM_PRIME_OFFSET)
        if rows[n] != {k: str(v) for k, v in row.items()}:
            raise TableCheckFailed(
                f"random.csv n={n} disagrees with a recomputation with other primes")
        if laws[n] != {r["length"]: Fraction(r["probability"]) for r in lengths}:
            raise TableCheckFailed(
                f"random_lengths.csv n={n} disagrees with a recomputation with other primes")
    return len(rows)
