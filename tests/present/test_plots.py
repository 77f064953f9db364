"""Figures from a fixed table: the expected number of series, and their data.

The fixed table is built here from the brute forces (tests/support/bruteforce.py for the spectra,
states and moves, tests/support/fraction_bruteforce.py for player 1's win probability under uniform
random play; neither shares code with zeckenum), in the layout `zeckenum table` writes
(manifest.json, summary.csv, spectra.csv, random.csv).  The figures are inspected as
matplotlib objects (axes and lines), not as pixels.  The normal density is
checked against scipy.stats.norm.
"""

from __future__ import annotations

import csv
import json
import math
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import stats

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))

from bruteforce import census  # noqa: E402
from fraction_bruteforce import length_law  # noqa: E402
from zeckenum.analysis.rundata import RunData  # noqa: E402
from zeckenum.cli.view import plot_command  # noqa: E402
from zeckenum.present.plots import (  # noqa: E402
    figure_distribution,
    figure_gaussian,
    figure_moments,
    figure_shape,
    figure_wins,
    fit_leading,
    make_figure,
    normal_curve,
    read_table,
    save_figure,
)

FIXED_NS = tuple(range(1, 13))


def random_laws(ns: tuple[int, ...] = FIXED_NS) -> dict[int, dict[int, Fraction]]:
    return {n: dict(sorted(length_law(n, "moves").items())) for n in ns}


def _frac(x: Fraction) -> str:
    """An exact rational as "p/q" (the table format, denominator always written)."""
    return f"{x.numerator}/{x.denominator}"


def _write_csv(path: Path, header: list[str], rows: list[list[object]]) -> None:
    with path.open("w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def write_fixed_table(folder: Path, ns: tuple[int, ...] = FIXED_NS, random: bool = True,
                      rules_text: str | None = None, rules_hash: str | None = None) -> Path:
    """Write the table for `ns` into `folder` (created) and return it: the numbers come
    from the brute forces, the layout is the one `zeckenum table` writes (manifest with
    the embedded rule file and the SHA-256 of every file, from hashlib)."""
    import hashlib

    import zeckenum
    from zeckenum.rules.rulefile import format_rules

    folder.mkdir(parents=True, exist_ok=True)
    cens = {n: census(n) for n in ns}
    summary = []
    for n, c in cens.items():
        lc = c["length_counts"]
        summary.append([n, c["states"], c["transitions"], c["games"], c["shortest"],
                        c["longest"], lc[c["shortest"]], lc[c["longest"]]])
    fields = ["n", "states", "transitions", "games", "shortest", "longest",
              "shortest_games", "longest_games"]
    _write_csv(folder / "summary.csv", fields, summary)
    for i, name in enumerate(fields[1:], 1):
        (folder / f"{name}.seq").write_text("".join(f"{r[0]} {r[i]}\n" for r in summary))
    _write_csv(folder / "spectra.csv", ["n", "length", "count"],
               [[n, length, k] for n, c in cens.items()
                for length, k in sorted(c["length_counts"].items())])
    if random:
        laws = random_laws(ns)
        rows = []
        for n, law in laws.items():
            p1 = sum((p for length, p in law.items() if length % 2 == 1), Fraction(0))
            mean = sum(length * p for length, p in law.items())
            var = sum((length - mean) ** 2 * p for length, p in law.items())
            rows.append([n, _frac(p1), _frac(1 - p1), _frac(mean), _frac(var)])
        _write_csv(folder / "random.csv",
                   ["n", "player1_wins", "player2_wins", "mean_length", "variance"], rows)
        (folder / "player1_wins.seq").write_text("".join(f"{r[0]} {r[1]}\n" for r in rows))
        (folder / "mean_length.seq").write_text("".join(f"{r[0]} {r[3]}\n" for r in rows))
        _write_csv(folder / "random_lengths.csv", ["n", "length", "probability"],
                   [[n, length, _frac(p)] for n, law in laws.items()
                    for length, p in sorted(law.items())])
    files = {}
    for f in sorted(folder.iterdir()):
        raw = f.read_bytes()
        files[f.name] = {"sha256": hashlib.sha256(raw).hexdigest(), "bytes": len(raw)}
    manifest = {"format": "zeckenum-table/1", "tool": "zeckenum", "rules": "standard",
                "rules_text": rules_text or format_rules(zeckenum.STANDARD),
                "rules_hash": rules_hash or zeckenum.STANDARD.content_hash(),
                "parameters": {"from": ns[0], "to": ns[-1],
                               "what": ["count", "random"] if random else ["count"]},
                "files": files}
    (folder / "manifest.json").write_text(json.dumps(manifest, indent=1))
    return folder


@pytest.fixture(scope="module")
def table(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_fixed_table(tmp_path_factory.mktemp("fixed") / "table")


@pytest.fixture(scope="module")
def data(table: Path) -> RunData:
    d = read_table(table)
    return RunData(rules=d.rules, spectra=d.spectra, random=random_laws(), wins=d.wins,
                   summary=d.summary, provenance=d.provenance, ruleset=d.ruleset,
                   rules_text=d.rules_text)


def test_read_table(table: Path, data: RunData) -> None:
    assert data.ns == list(FIXED_NS)
    assert data.spectra[12] == census(12)["length_counts"]
    # player 1 wins the games of odd length (common practice: players alternate)
    law = random_laws((9,))[9]
    assert data.wins[9] == sum((p for k, p in law.items() if k % 2), Fraction(0))
    # the table's random_lengths.csv is read back exactly (source: fraction_bruteforce)
    assert read_table(table).random == random_laws()


def test_distribution_figure(data: RunData) -> None:
    fig = figure_distribution(data, 12)
    assert len(fig.axes) == 2
    ref = census(12)["length_counts"]
    for ax in fig.axes:
        assert len(ax.lines) == 2  # the law and its normal curve
    law_line = fig.axes[0].lines[0]
    assert list(law_line.get_xdata()) == list(ref)
    assert np.isclose(sum(law_line.get_ydata()), 1.0)
    # the curve is the normal density with the law's mean and variance (scipy)
    k = np.array(list(ref), dtype=float)
    p = np.array(list(ref.values()), dtype=float) / sum(ref.values())
    mean = (k * p).sum()
    sd = math.sqrt(((k - mean) ** 2 * p).sum())
    curve = fig.axes[0].lines[1]
    x = curve.get_xdata()
    assert np.allclose(curve.get_ydata(), stats.norm.pdf(x, mean, sd))


def test_distribution_without_random_has_one_panel(table: Path, tmp_path: Path) -> None:
    bare = write_fixed_table(tmp_path / "bare", random=False)
    fig = figure_distribution(read_table(bare), 10)
    assert len(fig.axes) == 1 and len(fig.axes[0].lines) == 2


@pytest.mark.parametrize("source", ["games", "random"])
def test_shape_figure(data: RunData, source: str) -> None:
    ns = [6, 9, 12]
    fig = figure_shape(data, source, ns)
    (ax,) = fig.axes
    assert len(ax.lines) == len(ns) + 1  # one per n, plus the standard normal
    for line in ax.lines[:-1]:
        x = np.asarray(line.get_xdata())
        y = np.asarray(line.get_ydata())
        # standardised: mean 0 and variance 1 (weights y / sd, sd = 1 / sum(y) spacing...)
        w = y / y.sum()
        assert abs((w * x).sum()) < 1e-9
        assert abs((w * x * x).sum() - 1) < 1e-9
    default = figure_shape(data, source)
    assert len(default.axes[0].lines) == min(6, len(FIXED_NS) - 2) + 1


def test_wins_figure(data: RunData) -> None:
    fig = figure_wins(data)
    (ax,) = fig.axes
    assert len(ax.lines) == 2  # P(player 1 wins) and the line 1/2
    assert list(ax.lines[0].get_xdata()) == list(FIXED_NS)


def test_moments_figure(data: RunData) -> None:
    fig = figure_moments(data)
    assert len(fig.axes) == 2
    for ax in fig.axes:
        assert len(ax.lines) == 4  # two laws, each with its fitted leading term


def test_gaussian_figure(data: RunData) -> None:
    fig = figure_gaussian(data)
    left, right = fig.axes
    assert len(left.lines) == 4  # Kolmogorov and total variation, two laws
    assert len(right.lines) == 5  # skewness and excess kurtosis, two laws, and zero


def test_fit_leading_recovers_a_power_law() -> None:
    # common practice: least squares on log-log data is exact for an exact power law
    ns = list(range(1, 40))
    a, b = fit_leading(ns, [3.0 * n**1.5 for n in ns])
    assert math.isclose(a, 3.0, rel_tol=1e-9) and math.isclose(b, 1.5, rel_tol=1e-9)


def test_normal_curve_is_scipy_density() -> None:
    x, y = normal_curve(2.0, 1.5, -3, 7)
    assert np.allclose(y, stats.norm.pdf(x, 2.0, 1.5))


def test_save_figure_writes_png_and_svg(data: RunData, tmp_path: Path) -> None:
    paths = save_figure(make_figure("moments", data), tmp_path / "sub" / "m")
    assert [p.suffix for p in paths] == [".png", ".svg"]
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"<svg" in paths[1].read_bytes()[:2000]


def test_make_figure_unknown_kind(data: RunData) -> None:
    from zeckenum.errors import InputError

    with pytest.raises(InputError):
        make_figure("pie", data)


def test_plot_cli_from_table_and_fresh(table: Path, tmp_path: Path) -> None:
    runner = CliRunner()
    out = tmp_path / "wins"
    res = runner.invoke(plot_command, ["wins", "--table", str(table), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert out.with_suffix(".png").is_file() and out.with_suffix(".svg").is_file()
    res = runner.invoke(plot_command, ["distribution", "--range", "3", "9", "--n", "8",
                                       "--out", str(tmp_path / "d")])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "d.svg").is_file()
    res = runner.invoke(plot_command, ["shape"])
    assert res.exit_code == 2 and res.output.startswith("zeckenum: error:")


def test_plot_unwritable_output_exit_6(table: Path, tmp_path: Path, monkeypatch) -> None:  # noqa: ANN001
    import errno
    import os
    import stat

    import zeckenum.safeio as safeio

    blocker = tmp_path / "file"
    blocker.write_text("x")
    res = CliRunner().invoke(plot_command, ["wins", "--table", str(table), "--out",
                                            str(blocker / "wins")])
    assert res.exit_code == 6 and res.output.startswith("zeckenum: error:"), res.output
    (tmp_path / "taken.png").mkdir()       # the output path is a folder
    res = CliRunner().invoke(plot_command, ["wins", "--table", str(table), "--out",
                                            str(tmp_path / "taken")])
    assert res.exit_code == 6 and "not a regular file" in res.output, res.output
    real = safeio.os.fsync

    def full(fd: int) -> None:   # the disk fills up while the figure is written
        if stat.S_ISREG(os.fstat(fd).st_mode):
            raise OSError(errno.ENOSPC, "No space left on device")
        real(fd)

    out = tmp_path / "figs"
    out.mkdir()
    monkeypatch.setattr(safeio.os, "fsync", full)
    res = CliRunner().invoke(plot_command, ["wins", "--table", str(table), "--out",
                                            str(out / "wins")])
    monkeypatch.setattr(safeio.os, "fsync", real)
    assert res.exit_code == 6 and "could not write figure wins.png" in res.output
    assert list(out.iterdir()) == []            # nothing torn, no .tmp left
