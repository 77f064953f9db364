"""zeckenum: exact enumeration of the Zeckendorf game and its relatives.

Python API (the CLI is a thin layer over it)::

    import zeckenum
    res = zeckenum.count(40)          # exact census of all games at n = 40
    res.games, res.length_counts      # Python ints
    res.to_dict()                     # JSON-ready
"""

from importlib.metadata import PackageNotFoundError, version

from .count import count
from .errors import CheckPrimeMismatch, InputError, MemoryRefused, ZeckenumError
from .results import CountResult
from .rules import STANDARD, RuleSet, get_rules

try:
    __version__ = version("zeckenum")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

__all__ = [
    "STANDARD",
    "CheckPrimeMismatch",
    "CountResult",
    "InputError",
    "MemoryRefused",
    "RuleSet",
    "ZeckenumError",
    "__version__",
    "count",
    "get_rules",
]
