"""Figures of a run over a range of n: pure functions from plain data to matplotlib Figures.

Nothing here computes a game.  The data (`zeckenum.analysis.rundata.RunData`) comes from a
fresh computation (`zeckenum.collect`, i.e. `analysis.rundata.collect`: `count` and
`random_play` for every n of a range) or from a table directory written by `zeckenum table`
(`read_table` here: read and checked by `zeckenum.tables.format.load_table`, checksums and
row invariants included).  `RunData` carries the rule set itself (`ruleset`, and its
canonical rule-file text `rules_text`): a table's rule set is rebuilt from the rule file
embedded in its manifest, checked against its hash, and never looked up by name, so
anything computed later from the data (random play, extremal games, move statistics) is
for the same game.
Every figure function returns a `matplotlib.figure.Figure` built without pyplot (Agg
canvas, no global state), so tests can inspect its axes and lines; `save_figure` writes it
as PNG and SVG.

Figures (`FIGURES`, the names `zeckenum plot KIND` takes):

distribution  length law of all games (games of each length / all games) and of random play
              at one n, each with the normal curve of the same mean and variance
shape         standardised laws (x = (L - mean) / sd, y = sd * P(L)) for several n overlaid
              with the standard normal density: does the shape converge?
wins          player 1's probability of winning a random game against n, with 1/2
moments       mean and variance of the length against n with fitted leading terms a * n^b
gaussian      Kolmogorov and total-variation distances to the normal law, skewness and
              excess kurtosis against n (`moments.gaussian_diagnostics`)
"""

from __future__ import annotations

import math
from fractions import Fraction
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from zeckenum.analysis.rundata import SUMMARY_KEYS, RunData  # noqa: E402
from zeckenum.core.moments import exact_moments, gaussian_diagnostics  # noqa: E402
from zeckenum.errors import InputError  # noqa: E402
from zeckenum.tables.format import is_table, load_table  # noqa: E402

SOURCES = ("games", "random")
SOURCE_LABEL = {"games": "all games", "random": "random play"}


def exact_law(weights: dict[int, int] | dict[int, Fraction]) -> dict[int, Fraction]:
    """The law proportional to `weights` over lengths, as exact probabilities (for
    `core.moments.exact_moments`)."""
    total = Fraction(sum(weights.values()))
    return {k: Fraction(w) / total for k, w in weights.items()}


def read_table(folder: str | Path) -> RunData:
    """A table directory as RunData, after every check of `verify` short of recomputing
    (`zeckenum.tables.format.load_table`: checksums, file list, canonical rows, row
    invariants); the rule set is the one embedded in the manifest.  The table must hold
    counts (summary.csv, spectra.csv); random play comes from random.csv and
    random_lengths.csv when present, optimal play from solve.csv (winner, P-positions), and
    `analysis.rundata.add_random` / `add_optimal` fill in what a table lacks."""
    folder = Path(folder)
    if not is_table(folder):
        raise InputError(f"{folder}: no manifest.json and summary.csv (not a zeckenum table)")
    t = load_table(folder)
    spectra = {n: dict(sorted(t.spectra[n].items())) for n in t.ns if t.spectra.get(n)}
    if not spectra:
        raise InputError(f"{folder}: the table has no spectra")
    random = {n: dict(t.laws[n]) for n in t.ns if n in t.laws}
    wins = {n: t.random[n]["player1_wins"] for n in t.ns if n in t.random}
    summary = {n: {k: t.summary[n][k] for k in SUMMARY_KEYS} for n in t.ns}
    optimal = {n: {"winner": int(row["winner"]) if row["winner"] else None,
                   "p_positions": int(row["p_positions"])}
               for n, row in t.solve.items() if n in spectra}
    prov = {"source": f"table {folder}", "manifest": t.manifest,
            "rules": t.ruleset.name, "rules_hash": t.ruleset.content_hash()}
    return RunData(rules=t.ruleset.name, spectra=spectra, random=random, wins=wins,
                   summary=summary, provenance=prov, ruleset=t.ruleset,
                   rules_text=t.rules_text, optimal=optimal)


# ----------------------------------------------------------------------------- figures


def new_figure(ncols: int = 1, width: float = 6.4, height: float = 4.2) -> Figure:
    fig = Figure(figsize=(width * ncols, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def normal_curve(mean: float, sd: float, lo: float, hi: float, points: int = 300):
    """x grid and the normal density of that mean and sd on it."""
    x = np.linspace(lo, hi, points)
    return x, np.exp(-0.5 * ((x - mean) / sd) ** 2) / (sd * math.sqrt(2 * math.pi))


def _moments(law: dict[int, float]) -> tuple[float, float]:
    k = np.array(list(law), dtype=np.float64)
    p = np.array(list(law.values()), dtype=np.float64)
    mean = float((k * p).sum())
    return mean, float(((k - mean) ** 2 * p).sum())


def figure_distribution(data: RunData, n: int) -> Figure:
    """Length law at n of all games and (when computed) of random play, each with the normal
    density of the same mean and variance: per panel two lines (law, normal)."""
    sources = [s for s in SOURCES if n in (data.spectra if s == "games" else data.random)]
    if not sources:
        raise InputError(f"n={n} is not in the data (range {data.ns[0]}..{data.ns[-1]})")
    fig = new_figure(len(sources))
    for ax, src in zip(fig.subplots(1, len(sources), squeeze=False)[0], sources, strict=True):
        law = data.law(src, n)
        mean, var = _moments(law)
        ks = list(law)
        ax.plot(ks, list(law.values()), "o-", ms=3, label=f"{SOURCE_LABEL[src]}, n={n}")
        if var > 0:
            x, y = normal_curve(mean, math.sqrt(var), ks[0] - 1, ks[-1] + 1)
            ax.plot(x, y, "-", lw=1.2, label=f"normal, mean {mean:.2f}, var {var:.2f}")
        ax.set_xlabel("game length (moves)")
        ax.set_ylabel("probability")
        ax.set_title(f"{SOURCE_LABEL[src]}: length law at n={n}")
        ax.legend(fontsize=8)
    return fig


def pick_ns(ns: list[int], k: int = 6) -> list[int]:
    """Up to k of the sorted ns, evenly spread, always the largest."""
    if len(ns) <= k:
        return list(ns)
    idx = np.unique(np.linspace(0, len(ns) - 1, k).round().astype(int))
    return [ns[i] for i in idx]


def figure_shape(data: RunData, source: str = "games", ns: list[int] | None = None) -> Figure:
    """Standardised length laws for several n overlaid, and the standard normal density:
    one line per n plus one (n whose law has at least three lengths; default: up to six
    of them, evenly spread)."""
    avail = [n for n in data.source_ns(source)
             if len(data.law(source, n)) >= 3 and _moments(data.law(source, n))[1] > 0]
    ns = pick_ns(avail) if ns is None else [n for n in ns if n in avail]
    if not ns:
        raise InputError(f"no n with a non-degenerate {SOURCE_LABEL[source]} law to plot")
    fig = new_figure()
    ax = fig.subplots()
    for n in ns:
        law = data.law(source, n)
        mean, var = _moments(law)
        sd = math.sqrt(var)
        ax.plot([(k - mean) / sd for k in law], [p * sd for p in law.values()], ".-", lw=0.8,
                label=f"n={n}")
    x, y = normal_curve(0.0, 1.0, -4, 4)
    ax.plot(x, y, "k--", lw=1.5, label="standard normal")
    ax.set_xlabel("(length - mean) / sd")
    ax.set_ylabel("sd x probability")
    ax.set_title(f"{SOURCE_LABEL[source]}: standardised length laws")
    ax.legend(fontsize=8)
    return fig


def figure_wins(data: RunData) -> Figure:
    """Player 1's probability of winning a random game against n (one line) and 1/2."""
    if not data.wins:
        raise InputError("no random-play win probabilities in the data")
    ns = sorted(data.wins)
    fig = new_figure()
    ax = fig.subplots()
    ax.plot(ns, [float(data.wins[n]) for n in ns], "o-", ms=3, label="P(player 1 wins)")
    ax.axhline(0.5, color="gray", lw=1, ls=":", label="1/2")
    ax.set_xlabel("n")
    ax.set_ylabel("probability")
    ax.set_title("random play (uniform over legal moves): player 1 wins")
    ax.legend(fontsize=8)
    return fig


def fit_leading(ns: list[int], ys: list[float]) -> tuple[float, float]:
    """(a, b) of the least-squares fit log y = log a + b log n over the upper half of the
    points with y > 0 (at least two): the leading term a * n^b."""
    pts = [(n, y) for n, y in zip(ns, ys, strict=True) if n > 0 and y > 0]
    pts = pts[len(pts) // 2:] if len(pts) >= 4 else pts
    if len(pts) < 2:
        return float("nan"), float("nan")
    x = np.log([p[0] for p in pts])
    y = np.log([p[1] for p in pts])
    b, loga = np.polyfit(x, y, 1)
    return float(math.exp(loga)), float(b)


def moment_table(data: RunData) -> dict[str, dict[int, tuple[float, float]]]:
    """source -> n -> (mean, variance) of the length law (floats from exact values)."""
    out: dict[str, dict[int, tuple[float, float]]] = {}
    for src in SOURCES:
        rows = {}
        for n in data.source_ns(src):
            w = data.spectra[n] if src == "games" else data.random[n]
            m = exact_moments(exact_law(w))
            rows[n] = (float(m["mean"]), float(m["variance"]))
        if rows:
            out[src] = rows
    return out


def figure_moments(data: RunData) -> Figure:
    """Mean (left) and variance (right) of the length against n, for all games and random
    play, each with its fitted leading term a * n^b (per panel: 2 lines per source)."""
    table = moment_table(data)
    fig = new_figure(2)
    axes = fig.subplots(1, 2)
    for j, (ax, what) in enumerate(zip(axes, ("mean", "variance"), strict=True)):
        for src, rows in table.items():
            ns = sorted(rows)
            ys = [rows[n][j] for n in ns]
            (line,) = ax.plot(ns, ys, "o", ms=3, label=SOURCE_LABEL[src])
            a, b = fit_leading(ns, ys)
            if math.isfinite(a):
                grid = np.linspace(ns[0], ns[-1], 200)
                ax.plot(grid, a * grid**b, "-", color=line.get_color(), lw=1,
                        label=f"fit {a:.3g} n^{b:.3f}")
        ax.set_xlabel("n")
        ax.set_ylabel(f"{what} of the length")
        ax.set_title(f"{what} of the game length")
        ax.legend(fontsize=8)
    return fig


def diagnostics_table(data: RunData) -> dict[str, dict[int, dict]]:
    """source -> n -> `gaussian_diagnostics` of the length law at n (n with variance > 0)."""
    out: dict[str, dict[int, dict]] = {}
    for src in SOURCES:
        rows = {}
        for n in data.source_ns(src):
            d = gaussian_diagnostics(data.law(src, n))
            if math.isfinite(d["kolmogorov"]):
                rows[n] = d
        if rows:
            out[src] = rows
    return out


def figure_gaussian(data: RunData) -> Figure:
    """Against n: Kolmogorov and total-variation distances to the normal law (left) and
    skewness and excess kurtosis (right), per source (2 lines per source per panel)."""
    table = diagnostics_table(data)
    if not table:
        raise InputError("no n with a non-degenerate length law")
    fig = new_figure(2)
    left, right = fig.subplots(1, 2)
    for src, rows in table.items():
        ns = sorted(rows)
        lab = SOURCE_LABEL[src]
        left.plot(ns, [rows[n]["kolmogorov"] for n in ns], "o-", ms=3,
                  label=f"Kolmogorov, {lab}")
        left.plot(ns, [rows[n]["total_variation"] for n in ns], "s--", ms=3,
                  label=f"total variation, {lab}")
        right.plot(ns, [rows[n]["skewness"] for n in ns], "o-", ms=3, label=f"skewness, {lab}")
        right.plot(ns, [rows[n]["excess_kurtosis"] for n in ns], "s--", ms=3,
                   label=f"excess kurtosis, {lab}")
    left.set_title("distance to the normal law")
    right.set_title("shape")
    right.axhline(0.0, color="gray", lw=0.8, ls=":")
    for ax in (left, right):
        ax.set_xlabel("n")
        ax.legend(fontsize=8)
    return fig


FIGURES = ("distribution", "shape", "wins", "moments", "gaussian")


def make_figure(figure: str, data: RunData, n: int | None = None,
                source: str = "games") -> Figure:
    """The figure named `figure` (one of `FIGURES`); `n` for "distribution" (default: the
    largest n)."""
    if figure == "distribution":
        return figure_distribution(data, data.ns[-1] if n is None else n)
    if figure == "shape":
        return figure_shape(data, source)
    if figure == "wins":
        return figure_wins(data)
    if figure == "moments":
        return figure_moments(data)
    if figure == "gaussian":
        return figure_gaussian(data)
    raise InputError(f"unknown plot kind {figure!r} (use one of: {', '.join(FIGURES)})")


def figure_paths(prefix: str | Path) -> list[Path]:
    """prefix.png and prefix.svg (a .png/.svg suffix on the prefix is dropped)."""
    prefix = Path(prefix)
    if prefix.suffix.lower() in (".png", ".svg"):
        prefix = prefix.with_suffix("")
    return [prefix.with_name(prefix.name + "." + ext) for ext in ("png", "svg")]


def save_figure(fig: Figure, prefix: str | Path) -> list[Path]:
    """Write `fig` as prefix.png and prefix.svg (atomically, creating the folder); returns
    the two paths.  A write that fails goes to `safeio.deliver`: the image is printed on
    standard output and OutputError (exit 6) raised."""
    import io

    from zeckenum.safeio import deliver

    out = figure_paths(prefix)
    out[0].parent.mkdir(parents=True, exist_ok=True)
    for path in out:
        buf = io.BytesIO()
        fig.savefig(buf, format=path.suffix[1:], dpi=110)
        deliver(path, buf.getvalue(), what=f"figure {path.name}")
    return out
