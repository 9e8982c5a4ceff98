"""Exception and warning types that users of voidcube meet.

Every error caused by a user's input is an :class:`InputError` (a ``ValueError``)
whose message names the file, the line or key, and the fix. The command-line
layer prints the message on one line per problem and exits non-zero; it never
shows a traceback for these.
"""

from __future__ import annotations

__all__ = ["InputError", "DataQualityWarning"]


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
