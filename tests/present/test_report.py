"""The HTML report: content, self-containment, and rendering in a real headless browser.

The table comes from the brute forces (`write_fixed_table` in tests/present/test_plots.py); the
page is parsed with the standard library's html.parser, and rendered by chromium from the
system packages (`--headless --dump-dom`).  When chromium is missing, the browser test
installs it with apt-get only in CI as root (CI=true), and otherwise skips with a message.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parents[1] / "support"))

from bruteforce import Z, census  # noqa: E402
from test_plots import FIXED_NS, random_laws, write_fixed_table  # noqa: E402
from zeckenum.analysis.rundata import RunData, run_detail  # noqa: E402
from zeckenum.cli.view import report_command  # noqa: E402
from zeckenum.present.plots import read_table  # noqa: E402
from zeckenum.present.report import write_report  # noqa: E402

# every figure the fixed table allows: distribution, two shape plots, wins, moments, gaussian
EXPECTED_FIGURES = 6


class Tags(HTMLParser):
    """Collects img sources, table classes, and the text of every table cell."""

    def __init__(self) -> None:
        super().__init__()
        self.imgs: list[str] = []
        self.tables: list[str] = []
        self.links: list[str] = []
        self.scripts = 0
        self.cells: list[str] = []
        self._in_cell = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if tag == "img":
            self.imgs.append(a.get("src") or "")
        elif tag == "table":
            self.tables.append(a.get("class") or "")
        elif tag in ("link", "script", "iframe"):
            self.scripts += 1
        elif tag in ("td", "th"):
            self._in_cell = True
            self.cells.append("")
        if a.get("href"):
            self.links.append(a["href"] or "")

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th"):
            self._in_cell = False

    def handle_data(self, data: str) -> None:
        if self._in_cell:
            self.cells[-1] += data


def parse(text: str) -> Tags:
    t = Tags()
    t.feed(text)
    return t


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    table = write_fixed_table(tmp_path_factory.mktemp("rep") / "table")
    d = read_table(table)
    data = RunData(rules=d.rules, spectra=d.spectra, random=random_laws(), wins=d.wins,
                   summary=d.summary, provenance=d.provenance, ruleset=d.ruleset,
                   rules_text=d.rules_text)
    return write_report(data, table, run_detail(data, 12))


def test_report_is_self_contained(report: Path) -> None:
    text = report.read_text()
    tags = parse(text)
    assert len(tags.imgs) == EXPECTED_FIGURES
    assert all(src.startswith("data:image/png;base64,") for src in tags.imgs)
    assert tags.scripts == 0 and tags.links == []
    assert "http://" not in text and "https://" not in text


def test_report_tables(report: Path) -> None:
    tags = parse(report.read_text())
    for cls in ("summary", "game", "movestats", "invariants", "provenance", "fits"):
        assert cls in tags.tables, cls
    ref = census(12)
    # the summary holds the brute-force number of games, and the invariant n - Z(n)
    assert str(ref["games"]) in tags.cells
    assert str(12 - Z(12)) in tags.cells  # "The Zeckendorf Game" (2018), arXiv:1809.04881
    text = report.read_text()
    assert "zeckenum report" in text  # how to reproduce
    assert "arXiv:2009.09510" in text


def test_report_cli_fresh_and_errors(tmp_path: Path) -> None:
    runner = CliRunner()
    out = tmp_path / "run"
    res = runner.invoke(report_command, [str(out), "--range", "2", "10"])
    assert res.exit_code == 0, res.output
    path = Path(res.output.strip())
    assert path == out / "report.html" and path.is_file()
    tags = parse(path.read_text())
    assert len(tags.imgs) == EXPECTED_FIGURES
    res = runner.invoke(report_command, [str(tmp_path / "nothing")])
    assert res.exit_code == 2 and res.output.startswith("zeckenum: error:")


def test_report_cli_from_table(tmp_path: Path) -> None:
    table = write_fixed_table(tmp_path / "t", FIXED_NS[:8])
    res = CliRunner().invoke(report_command, [str(table)])
    assert res.exit_code == 0, res.output
    assert Path(res.output.strip()) == table / "report.html"


# ------------------------------------------------------------------------- the browser


def find_chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable"):
        path = shutil.which(name)
        if path:
            return path
    return None


def ensure_chromium() -> str | None:
    """A chromium binary, installed with apt-get in CI as root when missing."""
    path = find_chromium()
    if path or os.environ.get("CI", "").lower() != "true":
        return path
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or not shutil.which("apt-get"):
        return None
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    for cmd in (["apt-get", "update"], ["apt-get", "install", "-y", "chromium"]):
        try:
            subprocess.run(cmd, env=env, check=True, capture_output=True, timeout=900)
        except (subprocess.SubprocessError, OSError):
            return None
    return find_chromium()


def test_report_renders_in_headless_chromium(report: Path, tmp_path: Path) -> None:
    chromium = ensure_chromium()
    if chromium is None:
        pytest.skip("chromium is not installed (apt-get install chromium; CI installs it "
                    "when CI=true and running as root)")
    cmd = [chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", "--disable-dev-shm-usage", f"--user-data-dir={tmp_path / 'prof'}",
           "--dump-dom", report.resolve().as_uri()]
    try:
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=180)
    except subprocess.TimeoutExpired:
        pytest.fail("headless chromium did not finish rendering within 180 s")
    assert res.returncode == 0, res.stderr[-2000:]
    dom = parse(res.stdout)
    # the rendered DOM holds every figure and table of the page
    assert len(dom.imgs) == EXPECTED_FIGURES
    assert all(src.startswith("data:image/png;base64,") for src in dom.imgs)
    for cls in ("summary", "game", "movestats", "invariants", "provenance"):
        assert cls in dom.tables, cls
    assert str(census(12)["games"]) in dom.cells


# ------------------------------------------------ a custom rule file named "standard"


def standard_without_split_graph(n: int):  # noqa: ANN201
    """The move graph at n of the standard game with its general split 2F(k) ->
    F(k-2) + F(k+1) (k >= 3) removed, built by hand with networkx (no zeckenum code).
    Bins are the Fibonacci numbers 1, 2, 3, 5, ... <= n; edges carry the move's name as
    the report writes it (name@k, k the 1-based anchor bin of the move template)."""
    import networkx as nx

    fib = [1, 2]
    while fib[-1] + fib[-2] <= n:
        fib.append(fib[-1] + fib[-2])
    nb = len([f for f in fib if f <= n])
    start = (n,) + (0,) * (nb - 1)
    g = nx.DiGraph()
    g.add_node(start)
    todo = [start]
    while todo:
        s = todo.pop()
        a = list(s)
        moves = []
        if nb >= 2 and a[0] >= 2:
            moves.append(("combine-ones@1", {0: -2, 1: 1}))
        for k in range(2, nb):           # F(k-1) + F(k) -> F(k+1), bins 1-based
            if a[k - 2] >= 1 and a[k - 1] >= 1:
                moves.append((f"combine@{k}", {k - 2: -1, k - 1: -1, k: 1}))
        if nb >= 3 and a[1] >= 2:        # 2 F2 -> F1 + F3
            moves.append(("split-twos@2", {1: -2, 0: 1, 2: 1}))
        for name, change in moves:
            b = a.copy()
            for i, d in change.items():
                b[i] += d
            t = tuple(b)
            assert not g.has_edge(s, t)
            if t not in g:
                todo.append(t)
            g.add_edge(s, t, move=name)
    return g, start


def brute_force_extremes_and_totals(n: int) -> tuple[int, int, int, dict[str, int]]:
    """(shortest, longest, games, {move: occurrences over all games}) by networkx."""
    import networkx as nx

    g, start = standard_without_split_graph(n)
    sinks = [v for v in g if g.out_degree(v) == 0]
    dist = nx.single_source_shortest_path_length(g, start)
    shortest = min(dist[v] for v in sinks)
    longest = nx.dag_longest_path_length(g)   # start is the only source of the graph
    order = list(nx.topological_sort(g))
    into = dict.fromkeys(g, 0)
    into[start] = 1
    for u in order:
        for v in g.successors(u):
            into[v] += into[u]
    out = dict.fromkeys(g, 0)
    for u in reversed(order):
        out[u] = 1 if g.out_degree(u) == 0 else sum(out[v] for v in g.successors(u))
    totals: dict[str, int] = {}
    for u, v, m in g.edges(data="move"):
        totals[m] = totals.get(m, 0) + into[u] * out[v]
    return shortest, longest, out[start], totals


def test_report_of_a_custom_rule_file_named_standard(tmp_path: Path) -> None:
    import re

    import zeckenum
    from zeckenum.cli.tables import table_command, verify_command
    from zeckenum.rules.rulefile import format_rules

    text = format_rules(zeckenum.STANDARD)
    cut = text.index('[[move]]\nname = "split"\n')
    rule_file = tmp_path / "mine.toml"
    rule_file.write_text(text[:cut].rstrip() + "\n")          # still named "standard"
    table = tmp_path / "t"
    res = CliRunner().invoke(table_command, ["--from", "2", "--to", "10", "--rules",
                                             str(rule_file), "--out", str(table)])
    assert res.exit_code == 0, res.output
    rule_file.unlink()   # the table carries the rule file itself; no flag is needed
    assert CliRunner().invoke(verify_command, [str(table), "--full"]).exit_code == 0
    res = CliRunner().invoke(report_command, [str(table), "--random-upto", "10"])
    assert res.exit_code == 0, res.output
    page = (table / "report.html").read_text()
    shortest, longest, games, totals = brute_force_extremes_and_totals(10)
    # the built-in game would give n - Z(n) = 8 (arXiv:1809.04881): this game differs
    assert shortest != 10 - Z(10)
    assert f"A shortest game: {shortest} moves" in page
    assert f"A longest game: {longest} moves" in page
    cells = parse(page).cells
    start = cells.index("total over all games")   # the move statistics table
    for move, total in totals.items():
        i = cells.index(move, start)
        assert cells[i + 1] == str(total), move
    assert f"{games} games" in page
    assert "arXiv:2009.09510" not in page      # no greedy claim about another game
    assert re.search(r'<pre class="rulefile">[^<]*split-twos', page)
    assert 'name = &quot;split&quot;' not in page


def test_report_refuses_an_altered_rule_text(tmp_path: Path) -> None:
    import json

    table = write_fixed_table(tmp_path / "t", FIXED_NS[:6])
    m = json.loads((table / "manifest.json").read_text())
    m["rules_text"] = m["rules_text"].replace('from = 3\ntake = ["k", "k"]',
                                              'from = 4\ntake = ["k", "k"]')
    assert m["rules_text"] != json.loads((table / "manifest.json").read_text())["rules_text"]
    (table / "manifest.json").write_text(json.dumps(m))
    res = CliRunner().invoke(report_command, [str(table)])
    assert res.exit_code == 2 and "content hash" in res.output, res.output
    assert len(res.output.strip().splitlines()) == 1


def test_report_unwritable_output_exit_6(tmp_path: Path, monkeypatch) -> None:  # noqa: ANN001
    import errno
    import stat

    import zeckenum.safeio as safeio

    blocker = tmp_path / "file"
    blocker.write_text("x")
    res = CliRunner().invoke(report_command, [str(blocker / "run"), "--range", "2", "6"])
    assert res.exit_code == 6 and res.output.startswith("zeckenum: error:"), res.output
    table = write_fixed_table(tmp_path / "t", FIXED_NS[:6])
    real = safeio.os.fsync

    def full(fd: int) -> None:   # a disk that fills up while the page is written
        if stat.S_ISREG(os.fstat(fd).st_mode):
            raise OSError(errno.ENOSPC, "No space left on device")
        real(fd)

    monkeypatch.setattr(safeio.os, "fsync", full)
    res = CliRunner().invoke(report_command, [str(table)])
    monkeypatch.setattr(safeio.os, "fsync", real)
    assert res.exit_code == 6, res.output
    assert "<!DOCTYPE html>" in res.output      # the finished page is not lost
    assert not (table / "report.html").exists()
    assert not [p for p in table.iterdir() if p.name.endswith(".tmp")]
