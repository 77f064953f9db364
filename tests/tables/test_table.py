"""Published tables (`table`), their verification (`verify`) and the forecast (`plan`).

External references: the brute force in tests/support/bruteforce.py (plain Python); OEIS A003107
(partitions of n into Fibonacci parts = states of the standard game's space), from memory;
hashlib for checksums (reference library).  The CLI commands are driven with click's
CliRunner on the command objects.
"""

from __future__ import annotations

import csv
import hashlib
import json

import pytest
from bruteforce import census
from click.testing import CliRunner
from zeckenum.cli.tables import plan_command, table_command, verify_command


@pytest.fixture(scope="module")
def table(tmp_path_factory):  # noqa: ANN001, ANN201
    out = tmp_path_factory.mktemp("tables") / "t"
    r = CliRunner().invoke(table_command, ["--from", "18", "--to", "24", "--out", str(out)])
    assert r.exit_code == 0, r.output
    return out


def _copy(src, dst):  # noqa: ANN001, ANN202
    dst.mkdir()
    for f in src.iterdir():
        (dst / f.name).write_bytes(f.read_bytes())
    return dst


def fix_checksums(folder) -> None:  # noqa: ANN001
    """Recompute the SHA-256 and size of every file the manifest lists (hashlib), so only
    checks other than the checksums can notice an edit."""
    m = json.loads((folder / "manifest.json").read_text())
    for name in m.get("files", {}):
        if (folder / name).is_file():
            raw = (folder / name).read_bytes()
            m["files"][name] = {"sha256": hashlib.sha256(raw).hexdigest(), "bytes": len(raw)}
    (folder / "manifest.json").write_text(json.dumps(m, indent=1))


def _rows(path) -> list[dict]:  # noqa: ANN001
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def test_table_matches_bruteforce(table) -> None:  # noqa: ANN001
    summary = {int(r["n"]): r for r in _rows(table / "summary.csv")}
    assert sorted(summary) == list(range(18, 25))
    spectra = _rows(table / "spectra.csv")
    for n in (18, 21, 24):
        ref = census(n)
        row = summary[n]
        assert int(row["games"]) == ref["games"]
        assert (int(row["shortest"]), int(row["longest"])) == (ref["shortest"], ref["longest"])
        assert (int(row["states"]), int(row["transitions"])) == (ref["states"],
                                                                 ref["transitions"])
        assert int(row["shortest_games"]) == ref["length_counts"][ref["shortest"]]
        got = {int(r["length"]): int(r["count"]) for r in spectra if int(r["n"]) == n}
        assert got == ref["length_counts"]
    games = dict(line.split() for line in (table / "games.seq").read_text().splitlines())
    assert int(games["20"]) == census(20)["games"]


def test_manifest_has_provenance_and_checksums(table) -> None:  # noqa: ANN001
    import zeckenum

    m = json.loads((table / "manifest.json").read_text())
    assert m["rules"] == "standard"
    assert m["rules_hash"] == zeckenum.STANDARD.content_hash()
    assert m["version"] == zeckenum.__version__
    assert m["parameters"]["from"] == 18 and m["parameters"]["to"] == 24
    assert m["created"].endswith("Z")
    names = {p.name for p in table.iterdir()} - {"manifest.json"}
    assert set(m["files"]) == names
    for name, entry in m["files"].items():
        assert hashlib.sha256((table / name).read_bytes()).hexdigest() == entry["sha256"]
    # published files get the usual permissions of a new file (umask), not mkstemp's 0600
    # (common practice)
    import os

    mask = os.umask(0o022)
    os.umask(mask)
    assert (table / "summary.csv").stat().st_mode & 0o777 == 0o666 & ~mask
    assert "rules_text" in m     # the rule file itself travels with the table


def test_verify_passes_on_a_fresh_table(table) -> None:  # noqa: ANN001
    r = CliRunner().invoke(verify_command, [str(table)])
    assert r.exit_code == 0, r.output
    assert "OK" in r.output


def test_verify_fails_on_an_edited_cell(table, tmp_path) -> None:  # noqa: ANN001
    bad = _copy(table, tmp_path / "bad")
    text = (bad / "spectra.csv").read_text().splitlines()
    n, length, count = text[5].split(",")
    text[5] = f"{n},{length},{int(count) + 1}"
    (bad / "spectra.csv").write_text("\n".join(text) + "\n")
    r = CliRunner().invoke(verify_command, [str(bad)])
    assert r.exit_code == 5
    assert len(r.output.strip().splitlines()) == 1
    assert "spectra.csv" in r.output and "SHA-256" in r.output


def test_verify_recomputation_catches_a_forged_checksum(table, tmp_path) -> None:  # noqa: ANN001
    # change a value no cross-check covers (states) in both files, then forge the checksums:
    # only the recomputation with disjoint primes can notice
    bad = _copy(table, tmp_path / "forged")
    rows = (bad / "summary.csv").read_text().splitlines()
    cells = rows[3].split(",")
    cells[1] = str(int(cells[1]) + 1)
    rows[3] = ",".join(cells)
    (bad / "summary.csv").write_text("\n".join(rows) + "\n")
    seq = (bad / "states.seq").read_text().splitlines()
    seq[2] = f"{cells[0]} {cells[1]}"
    (bad / "states.seq").write_text("\n".join(seq) + "\n")
    fix_checksums(bad)
    r = CliRunner().invoke(verify_command, [str(bad), "--sample", "100"])
    assert r.exit_code == 5
    assert f"n={cells[0]} states" in r.output


def test_verify_catches_inconsistent_files(table, tmp_path) -> None:  # noqa: ANN001
    bad = _copy(table, tmp_path / "inconsistent")
    seq = (bad / "games.seq").read_text().splitlines()
    n, v = seq[0].split()
    seq[0] = f"{n} {int(v) * 2}"
    (bad / "games.seq").write_text("\n".join(seq) + "\n")
    fix_checksums(bad)
    r = CliRunner().invoke(verify_command, [str(bad), "--sample", "0"])
    assert r.exit_code == 5 and "games.seq" in r.output


def test_table_refuses_bad_input(tmp_path) -> None:  # noqa: ANN001
    runner = CliRunner()
    r = runner.invoke(table_command, ["--from", "5", "--to", "6", "--what", "census",
                                      "--out", str(tmp_path / "x")])
    assert r.exit_code == 2 and "census" in r.output
    r = runner.invoke(table_command, ["--from", "9", "--to", "6", "--out", str(tmp_path / "y")])
    assert r.exit_code == 2
    r = runner.invoke(verify_command, [str(tmp_path / "nothing")])
    assert r.exit_code == 2


def test_table_with_solve_and_random(tmp_path) -> None:  # noqa: ANN001
    from fractions import Fraction

    from fraction_bruteforce import length_law

    out = tmp_path / "t"
    r = CliRunner().invoke(table_command, ["--from", "2", "--to", "9", "--what",
                                           "count,solve,random", "--out", str(out)])
    assert r.exit_code == 0, r.output
    # source: tests/support/fraction_bruteforce.py (exact law of a random game, fractions)
    laws: dict[int, dict[int, Fraction]] = {}
    for row in _rows(out / "random_lengths.csv"):
        laws.setdefault(int(row["n"]), {})[int(row["length"])] = Fraction(row["probability"])
    for n in range(2, 10):
        ref = {k: v for k, v in length_law(n, "moves").items() if v}
        assert laws[n] == ref, n
    for row in _rows(out / "random.csv"):
        n = int(row["n"])
        p1 = sum(p for L, p in laws[n].items() if L % 2 == 1)
        assert Fraction(row["player1_wins"]) == p1
        assert Fraction(row["player1_wins"]) + Fraction(row["player2_wins"]) == 1
        assert Fraction(row["mean_length"]) == sum(L * p for L, p in laws[n].items())
    rows = _rows(out / "solve.csv")
    assert [int(r["n"]) for r in rows] == list(range(2, 10))
    # "The Zeckendorf Game" (2018), arXiv:1809.04881: player 2 wins for every n > 2
    assert all(r["winner"] == "2" for r in rows if int(r["n"]) > 2)
    assert (out / "p_positions.seq").read_text().splitlines()[0] == f"2 {rows[0]['p_positions']}"
    assert CliRunner().invoke(verify_command, [str(out), "--sample", "20"]).exit_code == 0


def _forge(folder, name: str, edit) -> None:  # noqa: ANN001
    """Apply `edit` to the last line of a table file and update its checksum."""
    lines = (folder / name).read_text().splitlines()
    lines[-1] = edit(lines[-1])
    (folder / name).write_text("\n".join(lines) + "\n")
    fix_checksums(folder)


@pytest.mark.parametrize("what", ["solve", "random"])
def test_verify_catches_a_forged_extra_row(tmp_path, what: str) -> None:  # noqa: ANN001
    from fractions import Fraction

    out = tmp_path / "t"
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "8", "--what", what,
                                           "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert CliRunner().invoke(verify_command, [str(out), "--sample", "0"]).exit_code == 0

    def bump(line: str) -> str:
        cells = line.split(",")
        if what == "solve":
            cells[-1] = str(int(cells[-1]) + 1)
        else:
            cells[-1] = str(Fraction(cells[-1]) / 2)
        return ",".join(cells)

    name = "solve.csv" if what == "solve" else "random.csv"
    forged = tmp_path / "forged"
    _copy(out, forged)
    _forge(forged, name, bump)
    # solve.csv: p_positions.seq no longer repeats it; random.csv: the variance no longer
    # follows from random_lengths.csv (fractions)
    r = CliRunner().invoke(verify_command, [str(forged), "--sample", "0"])
    assert r.exit_code == 5 and name in r.output, r.output


def _write_rows(path, rows: list[dict]) -> None:  # noqa: ANN001
    with open(path, "w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]), lineterminator="\n")
        w.writeheader()
        w.writerows(rows)


def test_plan_reports_exact_sizes() -> None:
    r = CliRunner().invoke(plan_command, ["count", "100", "--workers", "2", "--json",
                                          "--probe", "60"])
    assert r.exit_code == 0, r.output
    p = json.loads(r.output)
    assert p["states_in_space"] == 97075  # OEIS A003107(100), from memory
    assert p["workers"] == 2 and p["shards"] % 2 == 0
    # the two workers' forecast is never above the one worker's (same formula, fewer primes)
    assert p["predicted_seconds_one_worker"] >= p["predicted_seconds"]


def test_plan_word_updates_equal_the_run() -> None:
    import zeckenum
    from zeckenum.cluster.predict import predict_count

    p = predict_count(64, probe_n=40)
    assert p["word_updates"] == zeckenum.count(64).stats["word_updates"]


# ------------------------------------------------------- tampering with fixed checksums
#
# A table of n = 3..12 with every kind.  Each edit below keeps the files parseable and
# fixes the checksums, so only the checks of the files' contents can catch it.  The edits
# are at n = 7, inside the range and never the largest n.

TAMPER_N = "7"


@pytest.fixture(scope="module")
def full_table(tmp_path_factory):  # noqa: ANN001, ANN201
    out = tmp_path_factory.mktemp("full") / "t"
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "12", "--what",
                                           "count,solve,random", "--out", str(out)])
    assert r.exit_code == 0, r.output
    return out


SEQ_SOURCES = {
    "summary.csv": ("games", "states", "transitions", "shortest", "longest",
                    "shortest_games", "longest_games"),
    "solve.csv": ("winner", "p_positions"),
    "random.csv": ("player1_wins", "mean_length"),
}


def _rewrite_seqs(folder) -> None:  # noqa: ANN001
    """Make every .seq file repeat its CSV column again (a consistent edit)."""
    for source, columns in SEQ_SOURCES.items():
        if not (folder / source).exists():
            continue
        rows = _rows(folder / source)
        for col in columns:
            (folder / f"{col}.seq").write_text("".join(f"{r['n']} {r[col]}\n" for r in rows))


def _edit_rows(folder, name: str, edit) -> None:  # noqa: ANN001
    rows = _rows(folder / name)
    _write_rows(folder / name, edit(rows))


def _cell(rows: list[dict], n: str, length: str | None = None) -> dict:
    return next(r for r in rows if r["n"] == n and (length is None or r["length"] == length))


def _set_random_summary(folder, n: str) -> None:  # noqa: ANN001
    """random.csv's row of n made consistent with random_lengths.csv (fractions)."""
    from fractions import Fraction

    law = {int(r["length"]): Fraction(r["probability"])
           for r in _rows(folder / "random_lengths.csv") if r["n"] == n}
    mean = sum(L * q for L, q in law.items())
    p1 = sum(q for L, q in law.items() if L % 2 == 1)

    def frac(x: Fraction) -> str:
        return f"{x.numerator}/{x.denominator}"

    def edit(rows: list[dict]) -> list[dict]:
        _cell(rows, n).update(player1_wins=frac(p1), player2_wins=frac(1 - p1),
                              mean_length=frac(mean),
                              variance=frac(sum((L - mean) ** 2 * q for L, q in law.items())))
        return rows

    _edit_rows(folder, "random.csv", edit)


def _summary_from_spectrum(folder, n: str) -> None:  # noqa: ANN001
    spec = {int(r["length"]): int(r["count"]) for r in _rows(folder / "spectra.csv")
            if r["n"] == n}

    def edit(rows: list[dict]) -> list[dict]:
        lo, hi = min(spec), max(spec)
        _cell(rows, n).update(games=str(sum(spec.values())), shortest=str(lo),
                              longest=str(hi), shortest_games=str(spec[lo]),
                              longest_games=str(spec[hi]))
        return rows

    _edit_rows(folder, "summary.csv", edit)


def t_states(d) -> None:  # noqa: ANN001
    def edit(rows):  # noqa: ANN001, ANN202
        _cell(rows, TAMPER_N)["states"] = str(int(_cell(rows, TAMPER_N)["states"]) + 1)
        return rows
    _edit_rows(d, "summary.csv", edit)


def _spectrum_edit(d, change: dict[str, int]) -> None:  # noqa: ANN001
    def edit(rows):  # noqa: ANN001, ANN202
        for length, delta in change.items():
            c = _cell(rows, TAMPER_N, length)
            c["count"] = str(int(c["count"]) + delta)
        return rows
    _edit_rows(d, "spectra.csv", edit)
    _summary_from_spectrum(d, TAMPER_N)


def t_moved_count(d) -> None:  # noqa: ANN001
    _spectrum_edit(d, {"6": -1, "7": +1})   # lengths 6 and 7 lie strictly inside 5..8


def t_consistent_counts(d) -> None:  # noqa: ANN001
    _spectrum_edit(d, {"6": +1})            # and games + 1 (summary, games.seq)


def t_negative_count(d) -> None:  # noqa: ANN001
    c6 = int(_cell(_rows(d / "spectra.csv"), TAMPER_N, "6")["count"])
    _spectrum_edit(d, {"6": -2 * c6, "7": 2 * c6})  # same games, count -c6 at length 6


def t_flipped_winner(d) -> None:  # noqa: ANN001
    def edit(rows):  # noqa: ANN001, ANN202
        _cell(rows, TAMPER_N)["winner"] = "1"
        return rows
    _edit_rows(d, "solve.csv", edit)


def _law_edit(d, move) -> None:  # noqa: ANN001
    from fractions import Fraction

    def edit(rows):  # noqa: ANN001, ANN202
        a, b = _cell(rows, TAMPER_N, "6"), _cell(rows, TAMPER_N, "7")
        pa, pb = Fraction(a["probability"]), Fraction(b["probability"])
        shift = move(pa)
        a["probability"] = f"{(pa - shift).numerator}/{(pa - shift).denominator}"
        b["probability"] = f"{(pb + shift).numerator}/{(pb + shift).denominator}"
        return rows
    _edit_rows(d, "random_lengths.csv", edit)
    _set_random_summary(d, TAMPER_N)


def t_random_law(d) -> None:  # noqa: ANN001
    _law_edit(d, lambda p: p / 2)


def t_negative_probability(d) -> None:  # noqa: ANN001
    _law_edit(d, lambda p: 2 * p)


def t_duplicated_row(d) -> None:  # noqa: ANN001
    def edit(rows):  # noqa: ANN001, ANN202
        i = rows.index(_cell(rows, TAMPER_N, "6"))
        return rows[:i + 1] + [dict(rows[i])] + rows[i + 1:]
    _edit_rows(d, "spectra.csv", edit)


def t_truncated_range(d) -> None:  # noqa: ANN001
    for name in ("summary.csv", "spectra.csv", "solve.csv", "random.csv",
                 "random_lengths.csv"):
        _edit_rows(d, name, lambda rows: [r for r in rows if r["n"] != "12"])


def t_truncated_spectrum(d) -> None:  # noqa: ANN001
    _edit_rows(d, "spectra.csv", lambda rows: [r for r in rows if (r["n"], r["length"])
                                               != (TAMPER_N, "8")])
    _summary_from_spectrum(d, TAMPER_N)


def t_kind_hidden(d) -> None:  # noqa: ANN001
    t_flipped_winner(d)
    m = json.loads((d / "manifest.json").read_text())
    m["parameters"]["what"] = [w for w in m["parameters"]["what"] if w != "solve"]
    (d / "manifest.json").write_text(json.dumps(m))


TAMPERINGS = [
    # (edit, extra verify options): recomputation-only edits need --full, since the sample
    # is random and n = 7 is not the largest n
    (t_states, []),                 # states = partitions into Fibonacci parts
    (t_moved_count, ["--full"]),
    (t_consistent_counts, ["--full"]),
    (t_flipped_winner, []),         # player 2 wins for n > 2 (arXiv:1809.04881)
    (t_random_law, ["--full"]),
    (t_negative_count, []),
    (t_negative_probability, []),
    (t_duplicated_row, []),
    (t_truncated_range, []),
    (t_truncated_spectrum, []),     # random law's support = lengths of the spectrum
    (t_kind_hidden, []),
]


@pytest.mark.parametrize(("edit", "options"), TAMPERINGS, ids=[t.__name__ for t, _ in TAMPERINGS])
def test_verify_catches_consistent_tampering(full_table, tmp_path, edit, options) -> None:  # noqa: ANN001
    bad = _copy(full_table, tmp_path / "bad")
    edit(bad)
    _rewrite_seqs(bad)
    fix_checksums(bad)
    r = CliRunner().invoke(verify_command, [str(bad), *options])
    assert r.exit_code == 5, r.output
    assert len(r.output.strip().splitlines()) == 1 and r.output.startswith("zeckenum: error:")


def test_verify_refuses_a_manifest_without_files(full_table, tmp_path) -> None:  # noqa: ANN001
    bad = _copy(full_table, tmp_path / "bad")
    m = json.loads((bad / "manifest.json").read_text())
    del m["files"]
    (bad / "manifest.json").write_text(json.dumps(m))
    r = CliRunner().invoke(verify_command, [str(bad)])
    assert r.exit_code == 5 and "'files'" in r.output, r.output


def test_verify_requires_every_file_listed(full_table, tmp_path) -> None:  # noqa: ANN001
    bad = _copy(full_table, tmp_path / "extra")
    (bad / "notes.csv").write_text("n\n1\n")
    r = CliRunner().invoke(verify_command, [str(bad)])
    assert r.exit_code == 5 and "notes.csv" in r.output


def test_verify_sample_is_fresh_and_repeatable(full_table) -> None:  # noqa: ANN001
    import re

    def run(*opts: str) -> tuple[str, str]:
        r = CliRunner().invoke(verify_command, [str(full_table), "--sample", "2", *opts])
        assert r.exit_code == 0, r.output
        m = re.search(r"recomputed n = ([0-9, ]+) \(--seed (\d+)\)", r.output)
        assert m, r.output
        return m.group(1), m.group(2)

    seeds = {run()[1] for _ in range(3)}
    assert len(seeds) > 1          # 32-bit seeds drawn afresh (common practice)
    ns, seed = run()
    assert run("--seed", seed) == (ns, seed)
    assert ns.split(", ")[-1] == "12"   # the largest n is always recomputed
    r = CliRunner().invoke(verify_command, [str(full_table), "--full"])
    assert r.exit_code == 0 and "n = 3, 4, 5, 6, 7, 8, 9, 10, 11, 12 (--full)" in r.output


# ------------------------------------------------------------------- bad table input


def b_missing_file(d) -> None:  # noqa: ANN001
    (d / "spectra.csv").unlink()


def b_missing_column(d) -> None:  # noqa: ANN001
    rows = _rows(d / "summary.csv")
    for r in rows:
        del r["transitions"]
    _write_rows(d / "summary.csv", rows)
    fix_checksums(d)


def b_manifest_not_object(d) -> None:  # noqa: ANN001
    (d / "manifest.json").write_text("[1, 2]\n")


def b_binary_csv(d) -> None:  # noqa: ANN001
    (d / "summary.csv").write_bytes(bytes(range(256)) * 8)
    fix_checksums(d)


def b_huge_field(d) -> None:  # noqa: ANN001
    # more than Python's csv field limit of 131,072 characters (csv.field_size_limit())
    text = (d / "summary.csv").read_text()
    (d / "summary.csv").write_text(text + '"' + "9" * 200_000 + '",1,1,1,1,1,1,1\n')
    fix_checksums(d)


def b_huge_range(d) -> None:  # noqa: ANN001
    m = json.loads((d / "manifest.json").read_text())
    m["parameters"]["to"] = 1e12
    (d / "manifest.json").write_text(json.dumps(m))


def _listed(name: str):  # noqa: ANN202
    def edit(d) -> None:  # noqa: ANN001
        m = json.loads((d / "manifest.json").read_text())
        m["files"][name] = {"sha256": "0" * 64, "bytes": 10}
        (d / "manifest.json").write_text(json.dumps(m))
    return edit


def b_fifo(d) -> None:  # noqa: ANN001
    import os

    os.mkfifo(d / "pipe.csv")
    _listed("pipe.csv")(d)


BAD_INPUT = [
    (b_missing_file, 5), (b_missing_column, 5), (b_manifest_not_object, 2),
    (b_binary_csv, 5), (b_huge_field, 5), (b_huge_range, 5), (_listed("/dev/zero"), 2),
    (b_fifo, 2), (_listed("../x"), 2),
]


@pytest.mark.parametrize(("edit", "status"), BAD_INPUT,
                         ids=["missing-file", "missing-column", "manifest-list", "binary-csv",
                              "huge-field", "to-1e12", "dev-zero", "fifo", "dotdot"])
def test_verify_bad_input_is_one_line(full_table, tmp_path, edit, status) -> None:  # noqa: ANN001
    bad = _copy(full_table, tmp_path / "bad")
    edit(bad)
    r = CliRunner().invoke(verify_command, [str(bad)])
    assert isinstance(r.exception, SystemExit), r.exception   # no traceback
    assert r.exit_code == status, r.output
    assert len(r.output.strip().splitlines()) == 1 and r.output.startswith("zeckenum: error:")


# ------------------------------------------------ hypothesis: mutated table files

@pytest.fixture(scope="module")
def small_table(tmp_path_factory):  # noqa: ANN001, ANN201
    out = tmp_path_factory.mktemp("small") / "t"
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "8", "--what",
                                           "count,solve,random", "--out", str(out)])
    assert r.exit_code == 0, r.output
    return out


IGNORED_MANIFEST_KEYS = ("created", "version", "tool", "primes_per_n", "random_primes_per_n")
"""Provenance a verify cannot check (when, by which build, how many primes were used)."""


def _semantic_manifest(raw: bytes) -> object:
    try:
        m = json.loads(raw)
    except ValueError:
        return None
    if isinstance(m, dict):
        out = {k: v for k, v in m.items() if k not in IGNORED_MANIFEST_KEYS}
        if isinstance(out.get("rules_text"), str):
            out["rules_text"] = _rules_meaning(out["rules_text"])
        return out
    return m


def _rules_meaning(text: str) -> object:
    """The embedded rule file as TOML data without its free-text `about` line (tomllib, not
    zeckenum): the description is prose outside the rule set's content hash, which a table
    cannot check (README "Variants: rule files"); an edit there that leaves valid TOML changes no
    number.  Text that is not TOML stays as it is (a verify must refuse it)."""
    try:
        import tomllib
    except ImportError:  # Python 3.10
        import tomli as tomllib

    try:
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, ValueError):
        return text
    data.pop("about", None)
    return data


def test_verify_mutated_tables_hypothesis(small_table, tmp_path_factory) -> None:  # noqa: ANN001
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    names = sorted(p.name for p in small_table.iterdir())
    original = {name: (small_table / name).read_bytes() for name in names}

    @settings(max_examples=150, deadline=None, database=None,
              suppress_health_check=list(HealthCheck))
    @given(name=st.sampled_from(names), kind=st.sampled_from(["flip", "delete", "insert",
                                                               "truncate"]),
           where=st.floats(0, 1), data=st.binary(min_size=1, max_size=6),
           fix=st.booleans())
    def check(name: str, kind: str, where: float, data: bytes, fix: bool) -> None:
        d = tmp_path_factory.mktemp("mut")
        for n, raw in original.items():
            (d / n).write_bytes(raw)
        raw = original[name]
        i = min(int(where * len(raw)), len(raw) - 1)
        if kind == "flip":
            new = raw[:i] + bytes([raw[i] ^ (data[0] or 1)]) + raw[i + 1:]
        elif kind == "delete":
            new = raw[:i] + raw[i + len(data):]
        elif kind == "insert":
            new = raw[:i] + data + raw[i:]
        else:
            new = raw[:i]
        (d / name).write_bytes(new)
        if fix and name != "manifest.json":
            fix_checksums(d)
        r = CliRunner().invoke(verify_command, [str(d), "--full"])
        assert r.exception is None or isinstance(r.exception, SystemExit), (
            name, kind, r.exception)    # never a traceback
        if name == "manifest.json":
            untouched = _semantic_manifest(new) == _semantic_manifest(raw)
        else:
            untouched = new == raw
        if untouched:
            assert r.exit_code == 0, r.output
        else:
            assert r.exit_code in (2, 5), (name, kind, r.output)
            assert len(r.output.strip().splitlines()) == 1
            assert r.output.startswith("zeckenum: error:")

    check()


# ----------------------------------------------------------------- resume and outputs


def test_table_resumes_a_partial_directory(tmp_path, monkeypatch) -> None:  # noqa: ANN001
    import zeckenum.tables.build as table_mod

    whole = tmp_path / "whole"
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "10", "--what",
                                           "count,solve", "--out", str(whole)])
    assert r.exit_code == 0, r.output

    real_solve = table_mod.TASKS["solve"]
    solved: list[int] = []

    def crashing(rules, n):  # noqa: ANN001, ANN202
        if n == 9:
            raise KeyboardInterrupt  # the run is stopped in the middle of solve
        solved.append(n)
        return real_solve(rules, n)

    part = tmp_path / "part"
    monkeypatch.setitem(table_mod.TASKS, "solve", crashing)
    with pytest.raises(KeyboardInterrupt):
        table_mod.build_table(3, 10, ("count", "solve"), part)
    assert not (part / "manifest.json").exists()
    kept = sorted(p.name for p in (part / ".rows").iterdir())
    # rows finish in any order in the pool: some solve rows before 9 are kept, 9 is not
    assert "solve-9.json" not in kept and "count-10.json" in kept
    assert any(f"solve-{n}.json" in kept for n in range(3, 9))
    # a damaged row is computed again, not trusted
    (part / ".rows" / "solve-5.json").write_text('{"sha256": "0", "payload": {}}')

    counted: list[int] = []

    def spy(rules, n):  # noqa: ANN001, ANN202
        solved.append(n)
        return real_solve(rules, n)

    solved.clear()
    monkeypatch.setitem(table_mod.TASKS, "solve", spy)
    import zeckenum.cluster.run as run_mod

    real_pool = run_mod.count_on_pool

    def count_spy(ns, *a, **k):  # noqa: ANN001, ANN002, ANN003, ANN202
        counted.extend(ns)
        return real_pool(ns, *a, **k)

    monkeypatch.setattr(run_mod, "count_on_pool", count_spy)
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "10", "--what",
                                           "count,solve", "--out", str(part)])
    assert r.exit_code == 0, r.output
    # only the rows that were not kept (rows finish in any order in the pool) and the
    # damaged one are computed again
    missing = {n for n in range(3, 11) if f"solve-{n}.json" not in kept} - {5}
    assert {9, 10} <= missing
    assert counted == [] and sorted(solved) == sorted(missing | {5})
    assert not (part / ".rows").exists()
    for name in json.loads((whole / "manifest.json").read_text())["files"]:
        assert (part / name).read_bytes() == (whole / name).read_bytes(), name
    assert CliRunner().invoke(verify_command, [str(part), "--full"]).exit_code == 0

    # a larger range over a complete table computes only the new n
    solved.clear()
    counted.clear()
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "11", "--what",
                                           "count,solve", "--out", str(part)])
    assert r.exit_code == 0, r.output
    assert counted == [11] and solved == [11]
    # other kinds or other rules: refused, nothing computed
    for opts in (["--what", "count"], ["--what", "count,solve", "--rules", "twos"]):
        r = CliRunner().invoke(table_command, ["--from", "3", "--to", "11", "--out",
                                               str(part), *opts])
        assert r.exit_code == 2 and "written with" in r.output, r.output


def test_table_unwritable_outputs_exit_6(tmp_path, monkeypatch) -> None:  # noqa: ANN001
    import errno
    import os

    import zeckenum.safeio as safeio

    blocker = tmp_path / "file"
    blocker.write_text("x")
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "5", "--out",
                                           str(blocker / "t")])
    assert r.exit_code == 6 and r.output.startswith("zeckenum: error:"), r.output
    if os.geteuid() != 0:   # root writes into read-only folders
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o555)
        r = CliRunner().invoke(table_command, ["--from", "3", "--to", "5", "--out",
                                               str(ro / "t")])
        assert r.exit_code == 6
    # a full disk while publishing: every fsync of a regular file fails with ENOSPC
    out = tmp_path / "full"
    out.mkdir()
    real_fsync = os.fsync

    def full(fd: int) -> None:
        import stat

        if stat.S_ISREG(os.fstat(fd).st_mode):
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)

    import zeckenum.tables.build as table_mod

    real_write = table_mod.write_atomic

    def failing_final(path, data):  # noqa: ANN001, ANN202
        if path.parent.name != ".rows":
            monkeypatch.setattr(safeio.os, "fsync", full)
        return real_write(path, data)

    monkeypatch.setattr(table_mod, "write_atomic", failing_final)
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "6", "--out", str(out)])
    monkeypatch.setattr(safeio.os, "fsync", real_fsync)
    monkeypatch.setattr(table_mod, "write_atomic", real_write)
    assert r.exit_code == 6, r.output
    assert "could not write" in r.output
    # the finished table went to standard output as one JSON object
    bundle = json.loads(r.output[:r.output.rindex("zeckenum: error:")])
    assert "summary.csv" in bundle["files"]
    assert not [p for p in out.rglob("*") if p.name.endswith(".tmp")]
    # the rows are kept: the rerun (disk space back) computes nothing
    assert sorted(p.name for p in (out / ".rows").iterdir())[0] == "count-3.json"
    r = CliRunner().invoke(table_command, ["--from", "3", "--to", "6", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert CliRunner().invoke(verify_command, [str(out)]).exit_code == 0
