"""Errors a user can cause or meet; the CLI prints each as one line and exits non-zero."""


class ZeckenumError(Exception):
    """Base class: a clear, one-line message for the user, no traceback."""

    exit_code = 1


class InputError(ZeckenumError):
    """Bad input: n < 1, an unknown rule set, a malformed option or file."""

    exit_code = 2


class MemoryRefused(ZeckenumError):
    """The run's estimated memory exceeds what the machine (or the given limit) allows."""

    exit_code = 3


class CheckPrimeMismatch(ZeckenumError):
    """The CRT reconstruction disagrees with the extra check prime: the result is not trusted."""

    exit_code = 4
