"""The README's figure: the length law at n = 200 of all games and of random play.

Left panel: the exact number of games of each length (`zeckenum.count(200)`), normalised,
with the normal density of the same mean and variance.  Right panel: the length law of a
random game (uniform over legal moves) from the float sweep (`zeckenum.randomplay.floating`), whose
printed rigorous error bound is far below what a plot can show, with its normal density.

    python benchmarks/figure_random200.py [--n 200] [--out benchmarks/figures/random200]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import zeckenum
from zeckenum.analysis.rundata import RunData
from zeckenum.present.plots import figure_distribution, save_figure
from zeckenum.randomplay.floating import float_play


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=200)
    ap.add_argument("--out", default=str(Path(__file__).parent / "figures" / "random200"))
    args = ap.parse_args()
    res = zeckenum.count(args.n)
    fl = float_play(args.n)
    data = RunData(
        rules="standard",
        spectra={args.n: res.length_counts},
        random={args.n: dict(fl.length_probability)},
        provenance={"random": f"float sweep, max error bound {fl.max_error:.2e}"},
    )
    fig = figure_distribution(data, args.n)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    for path in save_figure(fig, args.out):
        print(path)
    print(f"float sweep: largest error bound on a probability {fl.max_error:.3e}")


if __name__ == "__main__":
    main()
