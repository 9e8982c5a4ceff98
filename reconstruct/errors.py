"""Exception and warning types that users of voidcube meet.

Every error caused by a user's input is an :class:`InputError` (a ``ValueError``)
whose message names the file, the line or key, and the fix. The command-line
layer prints the message on one line per problem and exits non-zero; it never
shows a traceback for these.
"""

from __future__ import annotations

import numbers

__all__ = ["InputError", "DataQualityWarning", "is_whole_number"]


def is_whole_number(value, minimum, maximum=None) -> bool:
    """True for an integer (Python or numpy, not a bool) from ``minimum`` to
    ``maximum`` (no upper bound when None): the check behind the options'
    "must be a whole number" messages."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        return False
    return minimum <= value and (maximum is None or value <= maximum)


class InputError(ValueError):
    """A problem in a user's input file or arguments.

    Parameters
    ----------
    problems : str or list of str
        One message per problem; each names where (file, line, key path) and
        how to fix it.
    source : str, optional
        The file the problems belong to, prefixed to every message that does
        not already start with it.
    """

    def __init__(self, problems, source: str | None = None):
        if isinstance(problems, str):
            problems = [problems]
        problems = list(problems)
        if source:
            problems = [
                p if p.startswith(str(source)) else f"{source}: {p}" for p in problems
            ]
        self.problems = problems
        self.source = source
        if len(problems) == 1:
            message = problems[0]
        else:
            message = f"{len(problems)} problems:\n" + "\n".join(
                f"  - {p}" for p in problems
            )
        super().__init__(message)


class DataQualityWarning(UserWarning):
    """A finding about the data that does not stop processing (for example
    a node snapped to the ground by more than a cell)."""
