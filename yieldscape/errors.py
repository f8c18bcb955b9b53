"""One error tree for yieldscape.

Every error a user can cause with bad input is an :class:`InputError`; the CLI maps those to
exit code 2 and prints the message alone. Anything else reaching the CLI is a bug (exit 1).
Subclasses also inherit the matching builtin so that library callers can catch ``ValueError``.
"""


class YieldscapeError(Exception):
    """Root of every error raised on purpose by yieldscape."""


class InputError(YieldscapeError, ValueError):
    """Bad input: a scenario key, an inventory field or row, a file that cannot be used."""


class ScenarioError(InputError):
    """A scenario file (or a --set override) that cannot be used as written."""


class InventoryError(InputError):
    """A stand layer that fails a check: missing fields, bad rows, bad geometries, no CRS."""


class OutputError(InputError):
    """An output location that cannot be used (for example a directory yieldscape did not make)."""
