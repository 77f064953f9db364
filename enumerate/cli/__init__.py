"""The command line: a thin click layer over the Python API (`zeckenum.cli.group.main`)."""

from zeckenum.cli.group import main

__all__ = ["main"]
