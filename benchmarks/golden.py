"""Record, or compare against a recording, the JSON outputs of a fixed set of commands.

Used around refactorings: run `python benchmarks/golden.py record OUT.json` before moving
code and `python benchmarks/golden.py compare OUT.json` after; every result must be
identical.  Keys that measure the run rather than the game (times, rates, probes, memory
of the machine, versions, paths) are dropped before recording; everything else —
integers, fractions, plans, sizes, strategies' positions, table files — is compared
exactly.  This is a regression check of the code against itself, not a correctness test
(the test suite checks correctness against outside sources).

Each command runs as `python -m zeckenum ...` in a subprocess with a fresh temporary
directory, so the recording also covers the command line.

`benchmarks/golden/outputs-3c47acc.json` is the recording made before the restructure into
sub-packages (commit 3c47acc); the restructured code reproduces it exactly, so a later
change that must not alter results compares against it directly:
`python benchmarks/golden.py compare benchmarks/golden/outputs-3c47acc.json`.  A change that
alters results on purpose records a new file beside it and says why in its commit.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import math
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RULES = ("standard", "reversed", "tribonacci", "twos")

VOLATILE = {
    "stats", "seconds", "seconds_total", "seconds_first_sweep", "seconds_reach",
    "states_per_second", "updates_per_second", "probe", "predicted_seconds",
    "predicted_seconds_one_worker", "version", "created", "command", "host", "python",
    "machine", "generated", "elapsed", "seed_used", "path", "out", "threads",
}
"""Keys whose values depend on the machine or the moment, not on the game."""


def commands() -> list[tuple[str, list[str]]]:
    """(label, arguments) of every recorded command; {tmp} is the run's temporary folder."""
    out: list[tuple[str, list[str]]] = []
    for rules in RULES:
        for n in (1, 2, 7, 20, 40):
            out.append((f"count {rules} {n}", ["count", str(n), "--rules", rules, "--json"]))
        for n in (1, 9, 16):
            out.append((f"random {rules} {n}", ["random", str(n), "--rules", rules, "--json"]))
        out.append((f"random-winners {rules} 30",
                    ["random", "30", "--rules", rules, "--winners-only", "--json"]))
        out.append((f"solve {rules} 30", ["solve", "30", "--rules", rules, "--json"]))
        out.append((f"solve3 {rules} 14",
                    ["solve", "14", "--rules", rules, "--players", "3", "--json"]))
        out.append((f"games {rules} 12", ["games", "12", "--rules", rules, "--json"]))
        out.append((f"move-stats {rules} 10", ["move-stats", "10", "--rules", rules, "--json"]))
    out += [
        ("count standard 100", ["count", "100", "--json"]),
        ("random pairs 14", ["random", "14", "--model", "pairs", "--json"]),
        ("random players3 14", ["random", "14", "--players", "3", "--json"]),
        ("random float 40", ["random", "40", "--float", "--json"]),
        ("solve standard 80", ["solve", "80", "--json"]),
        ("plan count 60", ["plan", "count", "60", "--json"]),
        ("plan random 30", ["plan", "random", "30", "--json"]),
        ("plan solve 60", ["plan", "solve", "60", "--json"]),
        ("strategy 14", ["solve", "14", "--strategy", "{tmp}/s.zst"]),
        ("table", ["table", "--from", "3", "--to", "12", "--what", "count,random,solve",
                   "--out", "{tmp}/t"]),
        ("verify", ["verify", "{tmp}/t"]),
    ]
    return out


def _clean(value: object) -> object:
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items() if k not in VOLATILE}
    if isinstance(value, list):
        return [_clean(v) for v in value]
    return value


def _files(folder: Path) -> dict[str, str]:
    """SHA-256 of every data file a command wrote (manifests, which record times, are
    compared without their volatile keys)."""
    out: dict[str, str] = {}
    for p in sorted(folder.rglob("*")):
        if not p.is_file() or p.name.startswith("."):
            continue
        rel = str(p.relative_to(folder))
        if p.suffix == ".json":
            out[rel] = json.dumps(_clean(json.loads(p.read_text())), sort_keys=True)
        elif p.suffix in (".zst", ".gz"):
            continue  # strategy files: their positions are checked by check-strategy
        else:
            out[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def _keeps(before: object, now: object) -> bool:
    """Whether `now` gives every answer `before` recorded: equal values, except that a
    dict in `now` may carry keys `before` lacks (outputs added by later features, such as
    solve's remoteness or P-positions per level, change no recorded answer)."""
    if isinstance(before, dict) and isinstance(now, dict):
        return all(k in now and _keeps(v, now[k]) for k, v in before.items())
    if isinstance(before, list) and isinstance(now, list):
        return len(before) == len(now) and all(
            _keeps(a, b) for a, b in zip(before, now, strict=True))
    if isinstance(before, float) and isinstance(now, float) and math.isnan(before):
        return math.isnan(now)  # NaN recorded (an undefined diagnostic) stays NaN
    return before == now


def run_all(only: str | None = None) -> dict[str, object]:
    results: dict[str, object] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for label, args in commands():
            if only and only not in label:
                continue
            argv = [a.replace("{tmp}", tmp) for a in args]
            t0 = time.perf_counter()
            proc = subprocess.run([sys.executable, "-m", "zeckenum", *argv],
                                  capture_output=True, text=True, timeout=900)
            entry: dict[str, object] = {"exit": proc.returncode}
            try:
                entry["json"] = _clean(json.loads(proc.stdout))
            except ValueError:
                entry["stdout_lines"] = len(proc.stdout.splitlines())
            if label == "table":
                entry["files"] = _files(Path(tmp) / "t")
            results[label] = entry
            print(f"{label:32s} exit {proc.returncode}  {time.perf_counter() - t0:6.1f} s",
                  file=sys.stderr)
    return results


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("action", choices=("record", "compare"))
    ap.add_argument("file", type=Path)
    ap.add_argument("--only", default=None, help="only the commands whose label contains this")
    args = ap.parse_args()
    now = run_all(args.only)
    if args.action == "record":
        args.file.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
        print(f"recorded {len(now)} commands in {args.file}")
        return 0
    before = json.loads(args.file.read_text())
    differ = [k for k in now if not _keeps(before.get(k), now[k])]
    missing = [k for k in before if k not in now and not args.only]
    for k in differ:
        print(f"DIFFERS: {k}")
    for k in missing:
        print(f"MISSING: {k}")
    print(f"{len(now) - len(differ)} of {len(now)} commands identical")
    return 1 if differ or missing else 0


if __name__ == "__main__":
    raise SystemExit(main())
