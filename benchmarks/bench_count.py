"""Speed and memory of `zeckenum.count` against the plain-Python baseline, in one run.

For each n, the engine (`zeckenum.count(n)`) and the baseline (`baseline_count.py`, a
memoised recursion holding a dict length -> Python int per state) each run in a fresh
subprocess.  Wall time is the time of the counting call measured inside the child (imports
and interpreter start-up excluded); peak memory is the child's peak resident set size, read
from os.wait4 (the kernel's ru_maxrss of that one child, imports included).  Where both ran,
the spectra must be identical.  The baseline is run only for n <= --baseline-max-n; above
that its time and memory are projected from a power-law fit to its measured runs.

Run from the repository root:

    python benchmarks/bench_count.py                # n = 60 100 150 200
    python benchmarks/bench_count.py --quick        # n = 30 60
    python benchmarks/bench_count.py --n 80 120 --threads 2 --baseline-max-n 120

Exit status: 0, or 1 if a spectrum disagreed or a run failed.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent
BASELINE = HERE / "baseline_count.py"

DEFAULT_N = (60, 100, 150, 200)
QUICK_N = (30, 60)
CALIBRATION_N = (40, 60)  # baseline sizes used for projections when too few were measured

# Targets from the issue (2-core, 24 GB machine).
TARGET_SECONDS_200 = 60.0
TARGET_MIB_200 = 2048.0  # 2 GiB
TARGET_SPEEDUP_100 = 50.0
TARGET_MEMORY_100 = 10.0
TARGET_UPDATES_PER_CORE = 5e8

ENGINE_CHILD = """
import json, resource, sys, time
sys.set_int_max_str_digits(0)
import zeckenum
n, threads, path = int(sys.argv[1]), sys.argv[2], sys.argv[3]
threads = None if threads == "auto" else int(threads)
rss_imports = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
# Load the compiled kernels from numba's on-disk cache once (a per-process cost, about a
# second, paid once per notebook or CLI call); it is reported apart from the count itself.
t0 = time.perf_counter()
zeckenum.count(5, threads=threads)
kernel_load = time.perf_counter() - t0
rss_loaded = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
t0 = time.perf_counter()
res = zeckenum.count(n, threads=threads)
seconds = time.perf_counter() - t0
stats = {k: (v if isinstance(v, (int, float, str, bool)) or v is None else str(v))
         for k, v in dict(res.stats).items()}
with open(path, "w") as fh:
    json.dump({
        "n": n, "seconds": seconds, "states": int(res.states), "games": str(res.games),
        "length_counts": {str(k): str(v) for k, v in res.length_counts.items()},
        "stats": stats, "rss_after_imports_mib": rss_imports,
        "kernel_load_seconds": kernel_load, "rss_after_kernel_load_mib": rss_loaded,
    }, fh)
"""


@dataclass
class Run:
    """One measured child process: in-child seconds, peak RSS (MiB), parsed JSON record."""

    ok: bool
    seconds: float = math.nan
    wall: float = math.nan
    cpu: float = math.nan
    peak_mib: float = math.nan
    record: dict = field(default_factory=dict)
    note: str = ""


def run_child(cmd: list[str], out_json: Path, timeout: float, limit_bytes: int | None) -> Run:
    """Run cmd in a fresh process; measure its peak RSS via os.wait4 and its wall time.

    The child writes its result to out_json.  On timeout the child is killed.  With
    limit_bytes the child's address space is capped (the baseline can outgrow the machine).
    """

    def cap() -> None:
        if limit_bytes is not None:
            resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    with tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        proc = subprocess.Popen(
            cmd, stdout=subprocess.DEVNULL, stderr=err, preexec_fn=cap, cwd=HERE.parent
        )
        timed_out = False
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid == proc.pid:
                break
            if time.perf_counter() - t0 > timeout and not timed_out:
                proc.send_signal(signal.SIGKILL)
                timed_out = True
            time.sleep(0.02)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
        peak = usage.ru_maxrss / 1024  # Linux reports KiB
        cpu = usage.ru_utime + usage.ru_stime
        if timed_out:
            return Run(ok=False, wall=wall, peak_mib=peak, note=f"timeout (>{timeout:.0f} s)")
        if proc.returncode != 0:
            err.seek(0)
            lines = err.read().decode(errors="replace").strip().splitlines()
            last = lines[-1] if lines else f"exit {proc.returncode}"
            return Run(ok=False, wall=wall, peak_mib=peak, note=f"failed: {last[:100]}")
    record = json.loads(out_json.read_text())
    return Run(ok=True, seconds=record["seconds"], wall=wall, cpu=cpu, peak_mib=peak,
               record=record)


def run_engine(n: int, threads: int | None, tmp: Path, timeout: float) -> Run:
    out = tmp / f"engine_{n}.json"
    arg = "auto" if threads is None else str(threads)
    return run_child([sys.executable, "-c", ENGINE_CHILD, str(n), arg, str(out)], out, timeout,
                     None)


def run_baseline(n: int, tmp: Path, timeout: float, limit_bytes: int) -> Run:
    out = tmp / f"baseline_{n}.json"
    cmd = [sys.executable, str(BASELINE), str(n), "--json", str(out)]
    return run_child(cmd, out, timeout, limit_bytes)


def power_fit(points: list[tuple[int, float]], n: int) -> float:
    """Value at n of y = c * x**a through the two largest-x points (log-log line)."""
    (x0, y0), (x1, y1) = sorted(points)[-2:]
    a = math.log(y1 / y0) / math.log(x1 / x0)
    return y1 * (n / x1) ** a


def total_ram_bytes() -> int:
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def fmt(x: float, spec: str) -> str:
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else format(x, spec)


def updates_per_core(run: Run) -> float | None:
    """word_updates / seconds_exact / threads from the engine's stats, or None if missing."""
    st = run.record.get("stats", {})
    try:
        upd, secs, thr = float(st["word_updates"]), float(st["seconds_exact"]), int(st["threads"])
    except (KeyError, TypeError, ValueError):
        return None
    if secs <= 0 or thr <= 0:
        return None
    return upd / secs / thr


def verdict(ok: bool | None) -> str:
    return "not measured" if ok is None else ("met" if ok else "NOT MET")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="+", metavar="N", help="sizes (default 60 100 150 200)")
    ap.add_argument("--quick", action="store_true", help="n = 30 60 only")
    ap.add_argument("--baseline-max-n", type=int, default=100, metavar="N",
                    help="run the baseline only for n <= N; project it above (default 100)")
    ap.add_argument("--threads", type=int, default=None,
                    help="threads for zeckenum.count (default: the engine's choice)")
    ap.add_argument("--timeout", type=float, default=1800.0, metavar="S",
                    help="kill a single run after S seconds (default 1800)")
    args = ap.parse_args(argv)
    if args.n and args.quick:
        ap.error("use either --n or --quick")
    ns = sorted(set(args.n or (QUICK_N if args.quick else DEFAULT_N)))
    if ns[0] < 1:
        ap.error("every n must be a positive integer")
    if args.threads is not None and args.threads < 1:
        ap.error("--threads must be at least 1")
    sys.set_int_max_str_digits(0)
    limit = int(total_ram_bytes() * 0.75)

    print(f"python {sys.version.split()[0]}, {os.cpu_count()} CPUs, "
          f"{total_ram_bytes() / 2**30:.1f} GiB RAM; threads={args.threads or 'engine default'}; "
          f"load average {os.getloadavg()[0]:.2f}")
    with tempfile.TemporaryDirectory(prefix="zeckenum-bench-") as d:
        tmp = Path(d)
        warm = run_engine(10, args.threads, tmp, args.timeout)
        if not warm.ok:
            print(f"engine warm-up count(10) {warm.note}")
            return 1
        print(f"numba cache warmed: count(10) in a separate subprocess ({warm.wall:.1f} s "
              "process wall); timed runs below load compiled kernels from the cache")

        engine: dict[int, Run] = {}
        base: dict[int, Run] = {}
        for n in ns:
            print(f"n={n}: engine ...", end="", flush=True)
            engine[n] = run_engine(n, args.threads, tmp, args.timeout)
            e = engine[n]
            print(f" {fmt(e.seconds, '.2f')} s" if e.ok else f" {e.note}", end="", flush=True)
            if n <= args.baseline_max_n:
                print(", baseline ...", end="", flush=True)
                base[n] = run_baseline(n, tmp, args.timeout, limit)
                b = base[n]
                print(f" {fmt(b.seconds, '.2f')} s" if b.ok else f" {b.note}", end="")
            print(flush=True)

        measured = {n: r for n, r in base.items() if r.ok}
        projected: dict[int, tuple[float, float]] = {}
        skipped = [n for n in ns if n > args.baseline_max_n]
        if skipped:
            pts = dict(measured)
            for n in CALIBRATION_N:
                if len(pts) >= 2:
                    break
                if n not in pts:
                    r = run_baseline(n, tmp, args.timeout, limit)
                    if r.ok:
                        pts[n] = r
            if len(pts) >= 2:
                tp = [(n, r.seconds) for n, r in pts.items()]
                mp = [(n, r.peak_mib) for n, r in pts.items()]
                for n in skipped:
                    projected[n] = (power_fit(tp, n), power_fit(mp, n))

    # Verification where both ran.
    failures = 0
    checks: list[str] = []
    for n in ns:
        e, b = engine[n], base.get(n)
        if not e.ok:
            failures += 1
        if b is not None and not b.ok:
            failures += 1
        if e.ok and b is not None and b.ok:
            same = e.record["length_counts"] == b.record["length_counts"]
            same_states = e.record["states"] == b.record["states"]
            if not same:
                failures += 1
            checks.append(
                f"n={n}: spectra {'identical' if same else 'DIFFER'} "
                f"({len(e.record['length_counts'])} lengths, "
                f"{len(e.record['games'])}-digit total); reachable states "
                f"{e.record['states']} vs {b.record['states']}"
                f"{'' if same_states else ' (DIFFER)'}"
            )

    # Main table.
    head = ("n", "engine s", "engine peak MiB", "baseline s", "baseline peak MiB",
            "speed ratio", "memory ratio", "engine word-updates/s/core")
    rows: list[tuple[str, ...]] = []
    missing_stats = False
    for n in ns:
        e, b = engine[n], base.get(n)
        es = fmt(e.seconds, ".2f") if e.ok else e.note.split(":")[0]
        em = fmt(e.peak_mib, ".0f") if e.ok else "n/a"
        upc = updates_per_core(e) if e.ok else None
        if e.ok and upc is None:
            missing_stats = True
        if b is not None and b.ok:
            bs, bm = fmt(b.seconds, ".2f"), fmt(b.peak_mib, ".0f")
            sr = fmt(b.seconds / e.seconds, ".3g") + "x" if e.ok else "n/a"
            mr = fmt(b.peak_mib / e.peak_mib, ".3g") + "x" if e.ok else "n/a"
        elif b is not None:
            bs, bm, sr, mr = b.note.split(":")[0], "n/a", "n/a", "n/a"
        elif n in projected:
            ps, pm = projected[n]
            bs, bm = f"skipped (projected {ps:.0f} s)", f"(projected {pm:.0f})"
            sr = f"~{ps / e.seconds:.0f}x (proj.)" if e.ok else "n/a"
            mr = f"~{pm / e.peak_mib:.1f}x (proj.)" if e.ok else "n/a"
        else:
            bs, bm, sr, mr = "skipped", "n/a", "n/a", "n/a"
        rows.append((str(n), es, em, bs, bm, sr, mr, fmt(upc, ".3g") if upc else "n/a"))
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    print()
    print(" | ".join(h.rjust(w) for h, w in zip(head, widths, strict=True)))
    print("-+-".join("-" * w for w in widths))
    for r in rows:
        print(" | ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))
    print()
    print("engine s / baseline s: time of the counting call inside its own process, after the")
    print("engine loaded its compiled kernels with count(5) (a once-per-process cost, listed")
    print("below); peak MiB:")
    print("peak RSS of that process (interpreter and imports included). speed ratio = baseline s")
    print("/ engine s; memory ratio = baseline peak / engine peak. word-updates/s/core =")
    print("stats word_updates / seconds_exact / threads.")
    for n in ns:
        e = engine[n]
        if e.ok:
            st = e.record.get("stats", {})
            print(f"  n={n}: engine states={e.record['states']}, "
                  f"RSS after imports {e.record.get('rss_after_imports_mib', math.nan):.0f} MiB, "
                  f"after loading kernels "
                  f"{e.record.get('rss_after_kernel_load_mib', math.nan):.0f} MiB "
                  f"({e.record.get('kernel_load_seconds', math.nan):.2f} s, not in engine s), "
                  f"process wall {e.wall:.2f} s, process CPU {e.cpu:.2f} s, "
                  f"threads={st.get('threads', 'n/a')}, "
                  f"seconds_exact={st.get('seconds_exact', 'n/a')}, "
                  f"word_updates={st.get('word_updates', 'n/a')}")
        b = base.get(n)
        if b is not None and b.ok:
            print(f"  n={n}: baseline states={b.record['states']}, "
                  f"process wall {b.wall:.2f} s, process CPU {b.cpu:.2f} s")
    load = os.getloadavg()[0]
    busy = " (above the core count: other processes competed for the CPUs)"
    print(f"  load average at the end: {load:.2f}{busy if load > (os.cpu_count() or 1) else ''}")
    if missing_stats:
        print("  engine stats lack word_updates/seconds_exact/threads: throughput is n/a")
    for n in ns:
        for who, r in (("engine", engine[n]), ("baseline", base.get(n))):
            if r is not None and not r.ok:
                print(f"  n={n}: {who} {r.note}")
    for line in checks:
        print(line)

    # Targets.
    print()
    e200 = engine.get(200)
    ok200 = (e200.seconds <= TARGET_SECONDS_200 and e200.peak_mib <= TARGET_MIB_200
             if e200 is not None and e200.ok else None)
    detail200 = (f"{e200.seconds:.1f} s, {e200.peak_mib:.0f} MiB"
                 if e200 is not None and e200.ok else "")
    print(f"target n=200 exact spectrum <= {TARGET_SECONDS_200:.0f} s and <= 2 GiB peak: "
          f"{verdict(ok200)} {detail200}".rstrip())
    e100, b100 = engine.get(100), base.get(100)
    if e100 is not None and e100.ok and b100 is not None and b100.ok:
        sp, mem = b100.seconds / e100.seconds, b100.peak_mib / e100.peak_mib
        ok100: bool | None = sp >= TARGET_SPEEDUP_100 and mem >= TARGET_MEMORY_100
        detail100 = f"{sp:.1f}x faster, {mem:.1f}x less memory"
    else:
        ok100, detail100 = None, ""
    print(f"target n=100 >= {TARGET_SPEEDUP_100:.0f}x faster and >= {TARGET_MEMORY_100:.0f}x "
          f"less memory than the baseline: {verdict(ok100)} {detail100}".rstrip())
    good = [n for n in ns if engine[n].ok and updates_per_core(engine[n])]
    if good:
        nt = max(good)
        upc = updates_per_core(engine[nt])
        okt: bool | None = upc >= TARGET_UPDATES_PER_CORE
        detailt = f"{upc:.3g} at n={nt} (largest n measured)"
    else:
        okt, detailt = None, ""
    print(f"target >= {TARGET_UPDATES_PER_CORE:.0e} word-updates/s/core: "
          f"{verdict(okt)} {detailt}".rstrip())
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
