"""One error family for everything the engine refuses.

Every message names the column, row or value at fault and says what to do, so the
command line can print it as a single line and exit 2 without a traceback.
"""

from __future__ import annotations

__all__ = ["BendwiseError", "DataError", "UsageError", "SpecError"]


class BendwiseError(Exception):
    """Base class: the message is complete and meant for the user."""


class DataError(BendwiseError):
    """The table cannot be used as asked (file, column, values)."""


class UsageError(BendwiseError):
    """An option or argument has a value the engine cannot work with."""


class SpecError(BendwiseError):
    """An exported model spec is malformed, unsafe or from an unknown version."""
