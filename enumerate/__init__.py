"""zeckenum: exact enumeration of the Zeckendorf game and its relatives.

Python API (the CLI is a thin layer over it; every job returns a result with `to_dict()`)::

    import zeckenum
    res = zeckenum.count(40)              # exact census of all games at n = 40
    res.games, res.length_counts          # Python ints
    res.to_dict()                         # JSON-ready
    zeckenum.random_play(40).win_probability        # exact Fractions
    zeckenum.solve(100).winner
    zeckenum.games(12).longest                      # an explicit longest game
    zeckenum.move_stats(20).invariants
    zeckenum.build_table(1, 60, "count,random", "tables/std", workers=2)
    zeckenum.verify_table("tables/std")
    zeckenum.count(position="3,1,0,2")    # the games from a position (README "Positions")

The jobs (`zeckenum.api`): count, random_play, random_float, simulate, gaussian, solve,
games, move_stats, policy_verdicts, collect, build_table, load_table, read_table,
verify_table.  `workers=K`, `scheduler=ADDRESS` and `checkpoint=DIR` move a count, random
play, solve or table onto a Dask cluster; the default runs in this process.  `position=`
starts count, random play, solve, games, move statistics or a table at any position (then
n is its value).

Names are loaded on first use (PEP 562 `__getattr__`): `import zeckenum` imports neither
numba, Dask nor matplotlib.
"""

import sys
from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

from zeckenum.errors import CheckPrimeMismatch, InputError, MemoryRefused, ZeckenumError

# Exact results are integers and rationals of many thousands of digits (the fourth moment
# of a random game's length under the "pairs" model passes 4300 digits near n = 42), and
# tables and checkpoints hold them as decimal text.  Python >= 3.11 refuses to convert an
# int of more than 4300 digits to or from text by default; every such conversion in this
# package is of a number it computed or of a file whose checksum it verifies, so the limit
# is lifted once, here.
if hasattr(sys, "set_int_max_str_digits"):
    sys.set_int_max_str_digits(0)

try:
    __version__ = version("zeckenum")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

_LAZY = {
    # jobs
    "count": "zeckenum.api",
    "random_play": "zeckenum.api",
    "random_float": "zeckenum.api",
    "simulate": "zeckenum.api",
    "gaussian": "zeckenum.api",
    "solve": "zeckenum.api",
    "solve_sum": "zeckenum.api",
    "policy_verdicts": "zeckenum.api",
    "games": "zeckenum.api",
    "move_stats": "zeckenum.api",
    "collect": "zeckenum.api",
    "build_table": "zeckenum.api",
    "load_table": "zeckenum.api",
    "read_table": "zeckenum.api",
    "verify_table": "zeckenum.api",
    # result types
    "CountResult": "zeckenum.counting.result",
    "RandomResult": "zeckenum.randomplay.exact",
    "FloatResult": "zeckenum.randomplay.floating",
    "SimulationResult": "zeckenum.randomplay.simulate",
    "GaussianTable": "zeckenum.api",
    "SolveResult": "zeckenum.optimal.solve",
    "SumResult": "zeckenum.optimal.solve",
    "PolicyReport": "zeckenum.optimal.policy",
    "GamesReport": "zeckenum.analysis.extremal",
    "MoveStats": "zeckenum.analysis.movestats",
    "RunData": "zeckenum.analysis.rundata",
    "TableBuild": "zeckenum.api",
    "TableCheck": "zeckenum.api",
    # rule sets
    "STANDARD": "zeckenum.rules.model",
    "RuleSet": "zeckenum.rules.model",
    "get_rules": "zeckenum.rules.catalogue",
}
"""Public name -> the module that defines it (imported on first access)."""


def __getattr__(name: str) -> object:
    """Load a public name on first use; cached in the module's namespace afterwards."""
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'zeckenum' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


__all__ = [
    "STANDARD",
    "CheckPrimeMismatch",
    "CountResult",
    "FloatResult",
    "GamesReport",
    "GaussianTable",
    "InputError",
    "MemoryRefused",
    "MoveStats",
    "PolicyReport",
    "RandomResult",
    "RuleSet",
    "RunData",
    "SimulationResult",
    "SolveResult",
    "SumResult",
    "TableBuild",
    "TableCheck",
    "ZeckenumError",
    "__version__",
    "build_table",
    "collect",
    "count",
    "games",
    "gaussian",
    "get_rules",
    "load_table",
    "move_stats",
    "policy_verdicts",
    "random_float",
    "random_play",
    "read_table",
    "simulate",
    "solve",
    "solve_sum",
    "verify_table",
]
