"""Published tables (`table`), their verification (`verify`) and the forecast (`plan`).

External references: the brute force in tests/bruteforce.py (plain Python); OEIS A003107
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
from zeckenum.cli_cluster import plan_command, table_command, verify_command


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
    m = json.loads((bad / "manifest.json").read_text())
    for name in ("summary.csv", "states.seq"):
        m["files"][name]["sha256"] = hashlib.sha256((bad / name).read_bytes()).hexdigest()
    (bad / "manifest.json").write_text(json.dumps(m))
    r = CliRunner().invoke(verify_command, [str(bad), "--sample", "100"])
    assert r.exit_code == 5
    assert f"n={cells[0]} states" in r.output


def test_verify_catches_inconsistent_files(table, tmp_path) -> None:  # noqa: ANN001
    bad = _copy(table, tmp_path / "inconsistent")
    seq = (bad / "games.seq").read_text().splitlines()
    n, v = seq[0].split()
    seq[0] = f"{n} {int(v) * 2}"
    (bad / "games.seq").write_text("\n".join(seq) + "\n")
    m = json.loads((bad / "manifest.json").read_text())
    m["files"]["games.seq"]["sha256"] = hashlib.sha256((bad / "games.seq").read_bytes()).hexdigest()
    (bad / "manifest.json").write_text(json.dumps(m))
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
    # source: tests/fraction_bruteforce.py (exact law of a random game, fractions)
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
    m = json.loads((folder / "manifest.json").read_text())
    m["files"][name]["sha256"] = hashlib.sha256((folder / name).read_bytes()).hexdigest()
    (folder / "manifest.json").write_text(json.dumps(m))


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
    # solve.csv: caught by the recomputation (n = 8 in the sample); random.csv: already by
    # the consistency of the variance with random_lengths.csv (fractions)
    r = CliRunner().invoke(verify_command, [str(forged), "--sample", "6"])
    assert r.exit_code == 5 and name in r.output, r.output
    if what == "random":
        # a forged law of n = 8 that sums to 1, with random.csv's row made consistent with
        # it (fractions): only the recomputation with other primes can catch it
        law = tmp_path / "law"
        _copy(out, law)
        rows = _rows(law / "random_lengths.csv")
        mine = [r for r in rows if r["n"] == "8"]
        shift = Fraction(mine[-2]["probability"]) / 2
        mine[-2]["probability"] = str(Fraction(mine[-2]["probability"]) - shift)
        mine[-1]["probability"] = str(Fraction(mine[-1]["probability"]) + shift)
        p = {int(r["length"]): Fraction(r["probability"]) for r in mine}
        mean = sum(L * q for L, q in p.items())
        var = sum((L - mean) ** 2 * q for L, q in p.items())
        p1 = sum(q for L, q in p.items() if L % 2 == 1)
        _write_rows(law / "random_lengths.csv", rows)
        summary = _rows(law / "random.csv")
        summary[-1].update(player1_wins=str(p1), player2_wins=str(1 - p1),
                           mean_length=str(mean), variance=str(var))
        _write_rows(law / "random.csv", summary)
        (law / "mean_length.seq").write_text("".join(
            f"{r['n']} {r['mean_length']}\n" for r in summary))
        (law / "player1_wins.seq").write_text("".join(
            f"{r['n']} {r['player1_wins']}\n" for r in summary))
        m = json.loads((law / "manifest.json").read_text())
        for name in ("random_lengths.csv", "random.csv", "mean_length.seq", "player1_wins.seq"):
            m["files"][name]["sha256"] = hashlib.sha256((law / name).read_bytes()).hexdigest()
        (law / "manifest.json").write_text(json.dumps(m))
        assert CliRunner().invoke(verify_command, [str(law), "--sample", "0"]).exit_code == 0
        r = CliRunner().invoke(verify_command, [str(law), "--sample", "6"])
        assert r.exit_code == 5 and "recomputation with other primes" in r.output, r.output


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
