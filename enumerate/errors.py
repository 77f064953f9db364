"""Errors a user can cause or meet; the CLI prints each as one line and exits non-zero.

Exit statuses (the README lists them for users):

| status | meaning |
| --- | --- |
| 0 | success (for `verify` and `check-strategy`: the check passed) |
| 1 | any other `ZeckenumError` |
| 2 | bad input: a malformed option, number, rule, strategy, checkpoint or table file |
| 3 | refused up front: the run's forecast memory exceeds the limit |
| 4 | the Chinese-remainder reconstruction disagrees with the check prime |
| 5 | a check ran and failed: `verify` found a bad table, `check-strategy` a bad strategy |
| 6 | a result could not be written (it was printed to standard output or a named file) |
| 7 | a cluster run stopped: no workers and no progress for the watchdog's time |
| 70 | internal error: a bug in zeckenum (one line; ZECKENUM_DEBUG=1 shows the traceback) |
| 130 | interrupted |
"""


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


class CheckFailed(ZeckenumError):
    """A check the user asked for ran to the end and failed (a table, a strategy)."""

    exit_code = 5


class OutputError(ZeckenumError):
    """A result could not be written where the user asked (the message says where it went)."""

    exit_code = 6


class ClusterStalled(ZeckenumError):
    """A cluster run made no progress with no workers for the watchdog's time."""

    exit_code = 7


INTERNAL_ERROR_EXIT = 70
"""Exit status of an unexpected exception (a bug), distinct from every check failure."""
