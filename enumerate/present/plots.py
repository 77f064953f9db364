"""Figures of a run over a range of n: pure functions from plain data to matplotlib Figures.

The data (`RunData`) comes from a fresh computation (`collect`: `count` and `random_play`
for every n of a range) or from a table directory written by `zeckenum table` (`read_table`:
read and checked by `zeckenum.tables.table.load_table`, checksums and row invariants
included).  `RunData` carries the rule set itself (`ruleset`, and its canonical rule-file
text `rules_text`): a table's rule set is rebuilt from the rule file embedded in its
manifest, checked against its hash, and never looked up by name, so anything computed
later from the data (random play, extremal games, move statistics) is for the same game.
Every figure function returns a `matplotlib.figure.Figure` built without pyplot (Agg
canvas, no global state), so tests can inspect its axes and lines; `save_figure` writes it
as PNG and SVG.

Kinds (`KINDS`, the names `zeckenum plot KIND` takes):

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
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from zeckenum.core.moments import gaussian_diagnostics  # noqa: E402
from zeckenum.errors import InputError  # noqa: E402
from zeckenum.rules.model import RuleSet, get_rules  # noqa: E402

SOURCES = ("games", "random")
SOURCE_LABEL = {"games": "all games", "random": "random play"}


@dataclass(frozen=True)
class RunData:
    """Exact results over a range of n.

    spectra[n]  {length: number of games} (all games)
    random[n]   {length: probability} of a random game (uniform over legal moves); may
                cover fewer n than spectra
    wins[n]     probability that player 1 wins a random game (two players)
    summary[n]  states, transitions, games, shortest, longest, shortest_games, longest_games
    provenance  where the numbers came from (rule set, hash, version, parameters, files)
    ruleset     the rule set the numbers are for (None only for hand-made data, whose
                `rules` is then a built-in name or a rule file)
    rules_text  its canonical rule-file text (`rulefile.format_rules`)
    """

    rules: str
    spectra: dict[int, dict[int, int]]
    random: dict[int, dict[int, Fraction]] = field(default_factory=dict)
    wins: dict[int, Fraction] = field(default_factory=dict)
    summary: dict[int, dict[str, int]] = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)
    ruleset: RuleSet | None = None
    rules_text: str = ""

    @property
    def ns(self) -> list[int]:
        return sorted(self.spectra)

    def rule_set(self) -> RuleSet:
        """The rule set of the data: `ruleset` when known (always for tables and `collect`),
        else `rules` resolved by `get_rules` (hand-made data only)."""
        return self.ruleset if self.ruleset is not None else get_rules(self.rules)

    def law(self, source: str, n: int) -> dict[int, float]:
        """{length: probability} (floats) of all games or of random play at n."""
        if source == "games":
            sp = self.spectra[n]
            total = sum(sp.values())
            return {k: float(Fraction(v, total)) for k, v in sorted(sp.items())}
        return {k: float(v) for k, v in sorted(self.random[n].items())}

    def source_ns(self, source: str) -> list[int]:
        return self.ns if source == "games" else sorted(self.random)


def exact_mean_variance(weights: dict[int, int | Fraction]) -> tuple[Fraction, Fraction]:
    """Exact mean and variance of the law proportional to `weights` over lengths."""
    total = Fraction(sum(weights.values()))
    mean = sum((Fraction(k) * w for k, w in weights.items()), Fraction(0)) / total
    var = sum((w * (k - mean) ** 2 for k, w in weights.items()), Fraction(0)) / total
    return mean, var


def collect(lo: int, hi: int, rules: str = "standard", random_upto: int | None = None,
            threads: int | None = None) -> RunData:
    """Fresh exact computation for lo <= n <= hi: `count` at every n, `random_play` (two
    players, uniform over the legal moves) at every n <= random_upto (default: hi)."""
    from zeckenum import __version__
    from zeckenum.counting.count import count
    from zeckenum.randomplay.exact import random_play
    from zeckenum.rules.rulefile import format_rules

    if lo < 1 or hi < lo:
        raise InputError(f"need 1 <= A <= B for the range of n, got {lo}..{hi}")
    rs = get_rules(rules)
    top = hi if random_upto is None else min(hi, random_upto)
    spectra, random, wins, summary = {}, {}, {}, {}
    for n in range(lo, hi + 1):
        r = count(n, rs, threads=threads)
        spectra[n] = dict(r.length_counts)
        summary[n] = {k: int(v) for k, v in r.to_dict().items() if k in SUMMARY_KEYS}
        if n <= top:
            rr = random_play(n, rs, threads=threads)
            random[n] = dict(rr.length_probability or {})
            wins[n] = rr.win_probability[1]
    prov = {"source": "fresh computation", "rules": rs.name, "rules_hash": rs.content_hash(),
            "version": __version__, "range": [lo, hi], "random_upto": top,
            "random_model": "moves"}
    return RunData(rules=rs.name, spectra=spectra, random=random, wins=wins, summary=summary,
                   provenance=prov, ruleset=rs, rules_text=format_rules(rs))


SUMMARY_KEYS = ("states", "transitions", "games", "shortest", "longest", "shortest_games",
                "longest_games")


def is_table(folder: str | Path) -> bool:
    """Whether `folder` holds a table written by `zeckenum table` (manifest + summary)."""
    folder = Path(folder)
    return (folder / "manifest.json").is_file() and (folder / "summary.csv").is_file()


def read_table(folder: str | Path) -> RunData:
    """A table directory as RunData, after every check of `verify` short of recomputing
    (`zeckenum.tables.table.load_table`: checksums, file list, canonical rows, row
    invariants); the rule set is the one embedded in the manifest.  The table must hold
    counts (summary.csv, spectra.csv); random play comes from random.csv and
    random_lengths.csv when present, and `add_random` fills in what a table lacks."""
    from zeckenum.tables.format import load_table

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
    prov = {"source": f"table {folder}", "manifest": t.manifest,
            "rules": t.ruleset.name, "rules_hash": t.ruleset.content_hash()}
    return RunData(rules=t.ruleset.name, spectra=spectra, random=random, wins=wins,
                   summary=summary, provenance=prov, ruleset=t.ruleset,
                   rules_text=t.rules_text)


def add_random(data: RunData, upto: int, threads: int | None = None) -> RunData:
    """`data` with the random-play length laws (and player 1's win probability) computed
    for every n <= upto of its range that lacks them."""
    from zeckenum.randomplay.exact import random_play

    random, wins = dict(data.random), dict(data.wins)
    for n in data.ns:
        if n <= upto and n not in random:
            rr = random_play(n, data.rule_set(), threads=threads)
            random[n] = dict(rr.length_probability or {})
            wins.setdefault(n, rr.win_probability[1])
    prov = {**data.provenance, "random_computed_upto": upto, "random_model": "moves"}
    return RunData(rules=data.rules, spectra=data.spectra, random=random, wins=wins,
                   summary=data.summary, provenance=prov, ruleset=data.ruleset,
                   rules_text=data.rules_text)


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
            m, v = exact_mean_variance(w)
            rows[n] = (float(m), float(v))
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


KINDS = ("distribution", "shape", "wins", "moments", "gaussian")


def make_figure(kind: str, data: RunData, n: int | None = None,
                source: str = "games") -> Figure:
    """The figure of one kind (`KINDS`); `n` for "distribution" (default: the largest n)."""
    if kind == "distribution":
        return figure_distribution(data, data.ns[-1] if n is None else n)
    if kind == "shape":
        return figure_shape(data, source)
    if kind == "wins":
        return figure_wins(data)
    if kind == "moments":
        return figure_moments(data)
    if kind == "gaussian":
        return figure_gaussian(data)
    raise InputError(f"unknown plot kind {kind!r} (use one of: {', '.join(KINDS)})")


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
