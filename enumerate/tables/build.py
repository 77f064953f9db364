"""Building a published table over a range of n, resumable.

`build_table(lo, hi, what, out)` computes the rows of every kind asked for (count,
solve, random; one task per n, or the sharded counts of `cluster.run`) and writes the
directory described in `tables.format` (texts made there, and checked there with
`format.check_texts` before anything is written).

While it computes, `build_table` keeps every finished row in `<out>/.rows/` (one small
JSON file per (kind, n), each carrying the SHA-256 of its payload) beside `params.json`
(rules hash, kinds, prime offset).  A rerun with the same parameters RESUMES: rows whose
checksum holds are kept, only the missing (kind, n) are computed; a complete table in
`out` is taken over the same way (after `load_table` checked it), so a rerun with a larger
range computes only the new n.  A directory written for another rule set, other kinds or
another prime offset is refused.  `.rows/` is removed once the manifest is written.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import re
import shutil
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path

from zeckenum import __version__
from zeckenum.cluster.errors import CheckpointRefused
from zeckenum.core.text import frac_str
from zeckenum.counting.result import CountResult
from zeckenum.errors import InputError, OutputError, ZeckenumError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.notation import format_position
from zeckenum.rules.rulefile import format_rules
from zeckenum.safeio import check_output_dir, deliver, read_regular, write_atomic
from zeckenum.tables.format import (
    BUNDLE,
    FORMAT,
    KIND_FILES,
    MAX_PRIMES,
    MAX_RANGE,
    MAX_ROW_BYTES,
    NOT_LISTED,
    ROWS_DIR,
    TABLE_KINDS,
    Table,
    check_texts,
    count_texts,
    load_table,
    parse_what,
    random_files,
    solve_files,
    summary_row,
)


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
    from zeckenum.randomplay.exact import random_play

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
        "parameters": {"from": lo, "to": hi, "what": list(what), "prime_offset": prime_offset,
                       **({"position": format_position(ruleset.position)}
                          if ruleset.position is not None else {})},
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
