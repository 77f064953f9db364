"""One self-contained HTML page per run: figures, summary tables, provenance, how to reproduce.

`write_report(data, folder)` renders `RunData` (see `plots`) into `folder/report.html`:
every figure is embedded as a base64 PNG (no external file, no script, no network), every
table is plain HTML.  Sections: the figures of `plots.FIGURES`; one row per n (states, moves,
games, extremes, exact mean and variance of the length of all games and of random play,
player 1's win probability); the fitted leading terms; optimal play (`RunData.optimal`:
the winner, the P-positions per n and their share of the states, the start's Grundy value
and the P-positions per level when the data carry them); at one detail n the explicit
shortest and longest games, the greedy longest game, the number of games at the lengths
near the extremes, the move totals and expected counts and the linear invariants with their
verification; provenance, including the rule file itself (canonical text and content
hash); and the commands that reproduce every number.

Nothing here computes a game: the detail sections render a `RunDetail`
(`zeckenum.analysis.rundata.run_detail`: extremal games and move statistics computed for
`data`'s rule set object, `RunData.rule_set()` - for a table, the rule file embedded in its
manifest - never for a rule set looked up by name; the greedy comparison, a statement about
the standard game, is present only when the rule set's content hash is the standard
game's).  Means and variances are `core.moments.exact_moments` of the exact laws.
"""

from __future__ import annotations

import base64
import datetime as dt
import html
import io
import platform
import shlex
from fractions import Fraction
from pathlib import Path

from zeckenum.analysis.rundata import RunData, RunDetail
from zeckenum.core.moments import exact_moments
from zeckenum.core.text import plural
from zeckenum.errors import InputError, OutputError
from zeckenum.present.plots import (
    SOURCE_LABEL,
    exact_law,
    figure_distribution,
    figure_gaussian,
    figure_moments,
    figure_shape,
    figure_wins,
    fit_leading,
    moment_table,
)

REPORT_NAME = "report.html"
RULE_FILE_NAME = "rules.toml"
"""The name the reproduce section gives the embedded rule file of a non-standard game."""

STYLE = """
body { font-family: sans-serif; max-width: 1200px; margin: 1em auto; padding: 0 1em;
       color: #222; }
table { border-collapse: collapse; margin: 0.5em 0 1em; font-size: 0.85em; }
th, td { border: 1px solid #bbb; padding: 2px 6px; text-align: right; }
th { background: #eee; }
td.l, th.l { text-align: left; }
figure { margin: 1em 0; } figure img { max-width: 100%; }
figcaption { font-size: 0.85em; color: #555; }
pre { background: #f6f6f6; padding: 0.5em; overflow-x: auto; font-size: 0.85em; }
"""


def esc(x: object) -> str:
    return html.escape(str(x))


def fig_png_base64(fig) -> str:  # noqa: ANN001 - a matplotlib Figure
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def html_table(header: list[str], rows: list[list[object]], cls: str = "",
               left: int = 0) -> str:
    """A plain HTML table; the first `left` columns are left-aligned."""
    def cell(tag: str, i: int, v: object) -> str:
        c = ' class="l"' if i < left else ""
        return f"<{tag}{c}>{esc(v)}</{tag}>"

    head = "".join(cell("th", i, h) for i, h in enumerate(header))
    body = "\n".join("<tr>" + "".join(cell("td", i, v) for i, v in enumerate(r)) + "</tr>"
                     for r in rows)
    return (f'<table class="{esc(cls)}"><thead><tr>{head}</tr></thead>\n'
            f"<tbody>{body}</tbody></table>")


def dec(x: Fraction | float, digits: int = 6) -> str:
    return f"{float(x):.{digits}g}"


def figures(data: RunData, detail_n: int) -> list[tuple[str, str, object]]:
    """(kind, caption, Figure) for every figure the data allows."""
    out = [("distribution", f"Length law at n={detail_n}: all games and random play, each "
            "against the normal density with the same mean and variance.",
            lambda: figure_distribution(data, detail_n))]
    for src in ("games", "random"):
        if len(data.source_ns(src)) >= 2:
            out.append((f"shape-{src}", f"{SOURCE_LABEL[src].capitalize()}: standardised "
                        "length laws for several n and the standard normal density.",
                        lambda s=src: figure_shape(data, s)))
    if data.wins:
        out.append(("wins", "Player 1's probability of winning a random game (uniform over "
                    "the legal moves) against n.", lambda: figure_wins(data)))
    out.append(("moments", "Mean and variance of the game length against n, with the least-"
                "squares fit a n^b over the upper half of the range.",
                lambda: figure_moments(data)))
    out.append(("gaussian", "Kolmogorov and total-variation distances to the (discretised) "
                "normal law, skewness and excess kurtosis against n.",
                lambda: figure_gaussian(data)))
    built = []
    for kind, cap, make in out:
        try:
            built.append((kind, cap, make()))
        except InputError:
            continue
    return built


def _mean_variance(weights: dict) -> tuple[Fraction, Fraction]:
    m = exact_moments(exact_law(weights))
    return m["mean"], m["variance"]


def summary_rows(data: RunData) -> list[list[object]]:
    rows = []
    for n in data.ns:
        s = data.summary.get(n, {})
        gm, gv = _mean_variance(data.spectra[n])
        row: list[object] = [n, s.get("states", ""), s.get("transitions", ""),
                             sum(data.spectra[n].values()),
                             f"{min(data.spectra[n])} ({data.spectra[n][min(data.spectra[n])]})",
                             f"{max(data.spectra[n])} ({data.spectra[n][max(data.spectra[n])]})",
                             dec(gm), dec(gv)]
        if n in data.random:
            rm, rv = _mean_variance(data.random[n])
            row += [dec(rm), dec(rv)]
        else:
            row += ["", ""]
        row.append(dec(data.wins[n]) if n in data.wins else "")
        rows.append(row)
    return rows


ZECKENDORF_GAME = "\"The Zeckendorf Game\" (2018, arXiv:1809.04881)"


def optimal_section(data: RunData, detail_n: int | None) -> str:
    """Optimal play per n (two players, normal play): winner, P-positions (count and share
    of the states), the start's Grundy value when the data carry it, and the P-positions
    per level at one n (the detail n, else the largest n) when the data carry them.  For
    the standard game, the published fact that player 2 wins every n > 2 is checked against
    the rows shown.  Empty without optimal-play data."""
    from zeckenum.rules.model import STANDARD

    rows_in = {n: r for n, r in sorted(data.optimal.items()) if n in data.spectra}
    if not rows_in:
        return ""
    grundy = any("grundy" in r for r in rows_in.values())
    header = ["n", "winner", "states", "P-positions", "share of states"]
    header += ["Grundy value of the start"] if grundy else []
    rows = []
    for n, r in rows_in.items():
        states = r.get("states", data.summary.get(n, {}).get("states"))
        p = r.get("p_positions")
        share = dec(Fraction(int(p), int(states)), 4) if p is not None and states else ""
        row = [n, "" if r.get("winner") is None else f"player {r['winner']}",
               "" if states is None else states, "" if p is None else p, share]
        if grundy:
            row.append(r.get("grundy", ""))
        rows.append(row)
    parts = ["<h2>Optimal play</h2>",
             "<p>Two players, normal play (the player who makes the last move wins). A "
             "P-position is a state where the player to move loses against best play; counts "
             "are over the states reachable from the start. The winner is the player who "
             "wins the start under optimal play.</p>",
             html_table(header, rows, "optimal")]
    if data.rule_set().content_hash() == STANDARD.content_hash():
        big = [n for n, r in rows_in.items() if n > 2 and r.get("winner") is not None]
        bad = [n for n in big if rows_in[n]["winner"] != 2]
        if big:
            verdict = ("agree" if not bad
                       else "DISAGREE at n = " + ", ".join(str(n) for n in bad))
            parts.append(f"<p>Published: player 2 wins the standard game for every n &gt; 2 "
                         f"({esc(ZECKENDORF_GAME)}); the rows above ({len(big)} n &gt; 2) "
                         f"{verdict}.</p>")
    levels = [n for n, r in rows_in.items() if r.get("p_positions_by_level")]
    if levels:
        n = detail_n if detail_n in levels else levels[-1]
        by = rows_in[n]["p_positions_by_level"]
        parts.append(f"<h3>P-positions per level at n={n}</h3>")
        parts.append(html_table(["level", "P-positions"],
                                [[lv, by[lv]] for lv in sorted(by)], "p-levels"))
    return "\n".join(parts)


def detail_sections(data: RunData, detail: RunDetail) -> str:
    """Extremal games, greedy comparison, move statistics and invariants at one n."""
    from zeckenum.analysis.extremal import lengths_near_extremes
    from zeckenum.analysis.movestats import format_form
    from zeckenum.rules.notation import annotate_position

    n, long, stats = detail.n, detail.longest, detail.stats
    parts = [f"<h2>Extremal games at n={n}</h2>"]
    near = lengths_near_extremes(data.spectra[n])
    parts.append("<p>Number of games at the lengths nearest the extremes:</p>")
    parts.append(html_table(["shortest lengths", "games"], near["shortest"]))
    parts.append(html_table(["longest lengths", "games"], near["longest"]))
    for g in (detail.shortest, long):
        rows = [[0, "(start)", annotate_position(g.start, g.values)]]
        rows += [[i, s.move, annotate_position(s.after, g.values)]
                 for i, s in enumerate(g.steps, 1)]
        parts.append(f"<h3>A {esc(g.kind)} game: {plural(g.length, 'move')}</h3>")
        parts.append(html_table(["#", "move", "position after (tokens per bin, bin 1 first; "
                                 "count*value terms)"], rows, "game", left=3))
    if detail.greedy is not None:
        greedy = detail.greedy
        same = [s.move for s in greedy.steps] == [s.move for s in long.steps]
        verdict = "equal" if greedy.length == long.length else "DIFFERENT"
        parts.append(
            f"<p>Greedy rule (split whenever possible, on the smallest bin; otherwise "
            f"combine the smallest pair), published to reach the maximum in \"Bounds on "
            f"Zeckendorf Games\" (2020, arXiv:2009.09510): "
            f"{plural(greedy.length, 'move')}; computed "
            f"longest: {plural(long.length, 'move')} ({verdict}); the greedy move list "
            f"{'is' if same else 'is not'} the one shown above.</p>")
    parts.append(f"<h2>Move statistics at n={n}</h2>")
    totals, expected, inv, bad = stats.totals, stats.expected, stats.invariants, stats.failures
    rows = [[m, t, f"{Fraction(t, totals.games) if totals.games else 0}",
             dec(Fraction(t, totals.games)), dec(expected[m])]
            for m, t in zip(totals.move_names, totals.totals, strict=True)]
    parts.append(f"<p>{plural(totals.games, 'game')}. Occurrences of each move summed "
                 "over all games, "
                 "their mean per game, and the exact expected count in a random game "
                 "(uniform over the legal moves).</p>")
    parts.append(html_table(["move", "total over all games", "mean per game (exact)",
                             "mean per game", "expected, random play"], rows, "movestats",
                            left=1))
    parts.append("<h3>Linear invariants of the move counts</h3>")
    parts.append("<p>#move is the number of times a game plays that move. Each form is "
                 "derived from the moves' effect vectors (E c = end - start) and checked "
                 f"against the exact totals over all {plural(totals.games, 'game')} and the exact "
                 f"expected counts under random play: "
                 f"{'all hold' if not bad else 'FAILED: ' + esc('; '.join(bad))}.</p>")
    inv_rows = [[x.name, format_form(x.coeffs, inv.move_names), x.value] for x in inv.named]
    inv_rows += [["basis", format_form(x.coeffs, inv.move_names), x.value] for x in inv.basis]
    parts.append(html_table(["", "form", "value"], inv_rows, "invariants", left=2))
    return "\n".join(parts)


def reproduce_section(data: RunData, detail_n: int | None, folder: Path) -> str:
    from zeckenum.rules.model import STANDARD

    lo, hi = data.ns[0], data.ns[-1]
    q = shlex.quote(str(folder))
    standard = data.rule_set().content_hash() == STANDARD.content_hash()
    rules = "" if standard else f" --rules {RULE_FILE_NAME}"
    lines = [] if standard else [f"# save the rule file shown above as {RULE_FILE_NAME}"]
    if "manifest" in data.provenance:
        lines.append(f"zeckenum report {q}{rules}            # this page, from the table")
    else:
        lines.append(f"zeckenum report {q} --range {lo} {hi}{rules}   # this page")
    lines += [
        f"zeckenum count N --json{rules}          # states, moves, games, spectrum at N",
        f"zeckenum random N --json{rules}         # random-play law, moments, win chances",
    ]
    if data.optimal:
        lines.append(f"zeckenum solve N --json{rules}          # winner, P-positions")
    for kind in ("distribution", "shape", "wins", "moments", "gaussian"):
        lines.append(f"zeckenum plot {kind} --range {lo} {hi}{rules} --out {kind}")
    if detail_n is not None:
        lines += [f"zeckenum games {detail_n}{rules}             # extremal games, greedy",
                  f"zeckenum move-stats {detail_n}{rules}        # totals, invariants"]
    arg = repr("standard" if standard else RULE_FILE_NAME)
    py = ("import zeckenum\n"
          f"data = zeckenum.collect({lo}, {hi}, {arg})   # the numbers behind every figure\n"
          "zeckenum.count(N).length_counts")
    return ("<h2>How to reproduce</h2><p>Every number on this page comes from these "
            "commands (exact integers and fractions; the decimals are rounded from them):</p>"
            f"<pre>{esc(chr(10).join(lines))}</pre><p>From Python:</p><pre>{esc(py)}</pre>")


def provenance_section(data: RunData) -> str:
    import matplotlib
    import numpy
    from zeckenum import __version__
    from zeckenum.rules.rulefile import format_rules

    prov = dict(data.provenance)
    manifest = prov.pop("manifest", None)
    rs = data.rule_set()
    prov["rules_hash"] = rs.content_hash()
    rows = [[k, v] for k, v in prov.items()]
    rows += [["zeckenum version", __version__], ["python", platform.python_version()],
             ["numpy", numpy.__version__], ["matplotlib", matplotlib.__version__],
             ["report written (UTC)",
              dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")]]
    out = ["<h2>Provenance</h2>", html_table(["item", "value"], rows, "provenance", left=2)]
    text = data.rules_text or format_rules(rs)
    out.append(f"<h3>Rule file</h3><p>The game every number on this page is for: rule set "
               f"{esc(rs.name)!s}, content hash <code>{esc(rs.content_hash())}</code>. "
               "Canonical rule-file text:</p>"
               f'<pre class="rulefile">{esc(text)}</pre>')
    if manifest:
        files = manifest.get("files", {})
        frows = [[name, e.get("sha256", ""), e.get("bytes", e.get("size", ""))]
                 for name, e in sorted(files.items()) if isinstance(e, dict)]
        other = {k: v for k, v in manifest.items() if k not in ("files", "rules_text")}
        out.append("<p>Table manifest:</p>")
        out.append(html_table(["key", "value"], [[k, v] for k, v in other.items()],
                              "manifest", left=2))
        if frows:
            out.append(html_table(["file", "sha256", "bytes"], frows, "files", left=2))
    return "\n".join(out)


def render_report(data: RunData, folder: Path, detail: RunDetail | None = None) -> str:
    """The whole HTML page as a string; `detail` (`analysis.rundata.run_detail`) gives the
    sections at one n (none without it)."""
    if detail is not None and detail.n not in data.spectra:
        raise InputError(f"detail n={detail.n} is not in the data ({data.ns[0]}..{data.ns[-1]})")
    detail_n = None if detail is None else detail.n
    fig_n = detail_n if detail_n is not None else data.ns[-1]
    body = [f"<h1>zeckenum run: rules {esc(data.rules)}, n = {data.ns[0]}..{data.ns[-1]}</h1>"]
    body.append("<h2>Figures</h2>")
    for kind, cap, fig in figures(data, fig_n):
        body.append(f'<figure id="fig-{esc(kind)}"><img alt="{esc(kind)}" '
                    f'src="data:image/png;base64,{fig_png_base64(fig)}">'
                    f"<figcaption>{esc(cap)}</figcaption></figure>")
    body.append("<h2>Summary per n</h2>")
    body.append("<p>Shortest/longest: length (number of games of that length). Means and "
                "variances are exact rationals shown as decimals.</p>")
    body.append(html_table(
        ["n", "states", "moves", "games", "shortest", "longest", "mean length",
         "variance", "mean, random", "variance, random", "P(player 1 wins), random"],
        summary_rows(data), "summary"))
    fits = []
    for src, rows in moment_table(data).items():
        ns = sorted(rows)
        for j, what in enumerate(("mean", "variance")):
            a, b = fit_leading(ns, [rows[n][j] for n in ns])
            fits.append([SOURCE_LABEL[src], what, dec(a, 4), dec(b, 4)])
    body.append("<h3>Fitted leading terms a n^b (upper half of the range)</h3>")
    body.append(html_table(["law", "quantity", "a", "b"], fits, "fits", left=2))
    body.append(optimal_section(data, detail_n))
    if detail is not None:
        body.append(detail_sections(data, detail))
    body.append(provenance_section(data))
    body.append(reproduce_section(data, detail_n, folder))
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>zeckenum report {esc(data.rules)} {data.ns[0]}..{data.ns[-1]}</title>"
            f"<style>{STYLE}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")


def write_report(data: RunData, folder: str | Path, detail: RunDetail | None = None) -> Path:
    """Write folder/report.html atomically and return its path (`detail`: see
    `render_report`).  The folder must exist
    (callers check it before computing: `safeio.check_output_dir`); a write that fails
    after the page is rendered goes to `safeio.deliver` (the page is printed on standard
    output) and raises OutputError (exit 6)."""
    from zeckenum.safeio import deliver

    folder = Path(folder)
    if not folder.is_dir():
        raise OutputError(f"cannot write the report into {folder}: not a directory")
    text = render_report(data, folder, detail)
    path = folder / REPORT_NAME
    deliver(path, text.encode("utf-8"), what="report")
    return path
