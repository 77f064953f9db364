"""zeckenum: exact enumeration of the Zeckendorf game and its relatives.

Python API (the CLI is a thin layer over it)::

    import zeckenum
    res = zeckenum.count(40)          # exact census of all games at n = 40
    res.games, res.length_counts      # Python ints
    res.to_dict()                     # JSON-ready
"""

import sys
from importlib.metadata import PackageNotFoundError, version

from zeckenum.counting.count import count
from zeckenum.counting.result import CountResult
from zeckenum.errors import CheckPrimeMismatch, InputError, MemoryRefused, ZeckenumError
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import STANDARD, RuleSet

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
