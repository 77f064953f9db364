"""Published tables over a range of n, and their verification.

`build_table(lo, hi, what, out)` writes one directory:

    summary.csv      one row per n: n,states,transitions,games,shortest,longest,
                     shortest_games,longest_games
    spectra.csv      long format, one row per (n, length) that occurs: n,length,count
    <name>.seq       one sequence per file, two columns "n value" (games, states,
                     transitions, shortest, longest, shortest_games, longest_games)
    solve.csv        (what includes solve) n,winner,p_positions
    random.csv       (what includes random) n,player,probability (exact p/q, two players,
                     uniform over the legal moves)
    manifest.json    provenance: rule set and its content hash, tool version, parameters,
                     UTC date, the primes used, and the SHA-256 and size of every file

`verify_table(dir)` re-reads every file against its SHA-256, checks the files against each
other (spectrum sums = games, first/last lengths = shortest/longest, sequences = summary),
and recomputes a seeded sample of n with a prime set disjoint from the one the table used;
any disagreement raises `TableCheckFailed` naming the file, n and field.
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


def solve_row(rules, n: int) -> dict:  # noqa: ANN001
    """Two-player optimal play at n: winner and number of P-positions (task function)."""
    from ..solve import solve

    r = solve(n, rules)
    return {"n": n, "winner": r.winner, "p_positions": r.p_positions}


def random_rows(rules, n: int, prime_offset: int = 0) -> list[dict]:  # noqa: ANN001
    """Two-player uniform random play at n: each player's exact win probability (task)."""
    from ..randomplay import random_play

    r = random_play(n, rules, players=2, winners_only=True, prime_offset=prime_offset)
    return [{"n": n, "player": p, "probability": str(Fraction(v))}
            for p, v in sorted(r.win_probability.items())]


def extra_kinds() -> dict[str, Callable]:
    """The table kinds besides count whose engines import and run here (n = 3 probe)."""
    out: dict[str, Callable] = {}
    for name, fn in (("solve", solve_row), ("random", random_rows)):
        try:
            fn("standard", 3)
        except Exception:  # noqa: BLE001 - an engine being written elsewhere may not work yet
            continue
        out[name] = fn
    return out


def parse_what(text: str) -> tuple[str, ...]:
    """The comma-separated table kinds, validated (count is always available)."""
    kinds = tuple(dict.fromkeys(w.strip() for w in text.split(",") if w.strip()))
    if not kinds:
        raise InputError("--what needs at least one of: count, random, solve")
    extra = extra_kinds() if set(kinds) - {"count"} else {}
    for k in kinds:
        if k == "count" or k in extra:
            continue
        if k in ("random", "solve"):
            raise InputError(f"--what {k}: that engine is not available in this build")
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
    extras = extra_kinds() if set(what) - {"count"} else {}
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
            futs = [pool.submit(extras[kind], ruleset, n) for n in ns]
            got = [f.result() for f in futs]
            if kind == "solve":
                files["solve.csv"] = csv_text(("n", "winner", "p_positions"), got)
            else:
                files["random.csv"] = csv_text(("n", "player", "probability"),
                                               [row for rows in got for row in rows])
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
    2. the files agree with each other (spectra vs summary vs sequences);
    3. `sample` values of n (seeded) are recomputed with primes disjoint from the table's
       (prime offset past every prime the table used) and compared row by row.
    """
    from .run import run_counts

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
    checked = len(manifest.get("files", {}))
    what = manifest.get("parameters", {}).get("what", [])
    recomputed: list[int] = []
    if "count" not in what:
        return {"files": checked, "rows": 0, "recomputed": recomputed}

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
    for name in SEQUENCES:
        path = folder / f"{name}.seq"
        for line_no, line in enumerate(path.read_text().splitlines(), 1):
            parts = line.split()
            if len(parts) != 2:
                raise TableCheckFailed(f"{path}:{line_no}: expected two columns 'n value'")
            n, v = _int(parts[0], f"{path}:{line_no}"), _int(parts[1], f"{path}:{line_no}")
            if n not in by_n or by_n[n][name] != v:
                raise TableCheckFailed(f"{path}:{line_no}: n={n} value {v} disagrees with "
                                       "summary.csv")

    ruleset = get_rules(rules or manifest.get("rules", "standard"))
    if ruleset.content_hash() != manifest.get("rules_hash"):
        raise TableCheckFailed(
            f"rule set {ruleset.name!r} has hash {ruleset.content_hash()}, the table was made "
            f"with {manifest.get('rules_hash')}; pass the right rule file with --rules"
        )
    used = max((int(v) for v in manifest.get("primes_per_n", {}).values()), default=0)
    offset = int(manifest.get("parameters", {}).get("prime_offset", 0)) + used + 1
    ns = sorted(by_n)
    if sample >= len(ns):
        recomputed = ns
    else:
        recomputed = sorted(random.Random(seed).sample(ns, sample))
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
    _verify_extras(folder, what, ruleset, recomputed)
    return {"files": checked, "rows": len(summary), "recomputed": recomputed,
            "prime_offset": offset}


def _verify_extras(folder: Path, what: list, ruleset, ns: list[int]) -> None:  # noqa: ANN001
    """Recompute the sampled n of solve.csv / random.csv (random: other primes)."""
    if "solve" in what:
        rows = {int(r["n"]): r for r in _read_csv(folder / "solve.csv")}
        for n in ns:
            fresh = {k: str(v) if v is not None else "" for k, v in solve_row(ruleset, n).items()}
            if rows.get(n) != fresh:
                raise TableCheckFailed(f"solve.csv n={n} disagrees with a recomputation")
    if "random" in what:
        rows_r: dict[int, list] = {}
        for r in _read_csv(folder / "random.csv"):
            rows_r.setdefault(int(r["n"]), []).append(r)
        for n in ns:
            fresh = [{k: str(v) for k, v in r.items()}
                     for r in random_rows(ruleset, n, prime_offset=64)]
            if rows_r.get(n) != fresh:
                raise TableCheckFailed(
                    f"random.csv n={n} disagrees with a recomputation with other primes"
                )
