"""One-line error reporting shared by every command module.

A `ZeckenumError` becomes `zeckenum: error: <message>` on stderr and the error's exit
status (2 for bad input); no traceback reaches the user.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from functools import wraps
from typing import Any

import click
from zeckenum.errors import ZeckenumError


def fail(exc: ZeckenumError) -> None:
    """Print a ZeckenumError as one line and exit with its status."""
    click.echo(f"zeckenum: error: {exc}", err=True)
    sys.exit(exc.exit_code)


def one_line_errors(func: Callable[..., Any]) -> Callable[..., Any]:
    """Decorator: a ZeckenumError raised by a command goes through `fail`."""

    @wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except ZeckenumError as exc:
            fail(exc)

    return wrapper
