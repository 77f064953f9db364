"""Errors of the Dask layer; each is a `ZeckenumError`, so the CLI prints one line."""

from __future__ import annotations

from zeckenum.errors import CheckFailed, InputError


class CheckpointRefused(InputError):
    """A checkpoint directory written for other parameters (n, rules, primes, code version)."""

    exit_code = 2


class TableCheckFailed(CheckFailed):
    """A published table failed `verify`: a checksum or a recomputed row disagrees (exit 5)."""
