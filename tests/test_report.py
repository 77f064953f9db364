"""The HTML report: content, self-containment, and rendering in a real headless browser.

The table comes from the brute forces (`write_fixed_table` in tests/test_plots.py); the
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

sys.path.insert(0, str(Path(__file__).parent))

from bruteforce import Z, census  # noqa: E402
from test_plots import FIXED_NS, random_laws, write_fixed_table  # noqa: E402
from zeckenum.cli_view import report_command  # noqa: E402
from zeckenum.plots import RunData, read_table  # noqa: E402
from zeckenum.report import write_report  # noqa: E402

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
    return write_report(data, table, detail_n=12)


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
