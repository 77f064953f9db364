"""Verifying a published table: every check of `format.load_table`, then recomputation.

`verify_table` runs every check of `load_table`, then recomputes a fresh random sample
of n (seed printed; `seed=` repeats it) plus always the largest n, or every n with
`full=True`: counts with a prime set disjoint from the table's, random play with primes
past the table's, and optimal play (winner, P-positions) from scratch; never from a stored
value.  Any disagreement raises `TableCheckFailed` (exit 5) naming the file, n and field; a
manifest that is missing or unreadable, or whose rule text disagrees with its hash, is bad
input (`InputError`, 2).
"""

from __future__ import annotations

import secrets
from fractions import Fraction
from pathlib import Path

from zeckenum.tables.build import random_rows, solve_row
from zeckenum.tables.format import (
    MAX_PRIMES,
    RANDOM_FIELDS,
    SUMMARY_FIELDS,
    Table,
    _fail,
    load_table,
    summary_row,
)

RANDOM_PRIME_OFFSET = 64
"""Prime offset of `verify`'s recomputation of random play when the manifest does not
record the primes the table used (tables of an earlier version)."""


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


