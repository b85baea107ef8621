"""Error and warning types shared by every stage.

``TubevisionInputError`` marks a problem the user caused (bad file, bad
option, malformed data file). The command line prints its message as one
line on stderr and exits with status 2. Anything else is a bug and keeps its
traceback.
"""

from __future__ import annotations

__all__ = ["TubevisionInputError", "TubevisionWarning"]


class TubevisionInputError(ValueError):
    """Bad input from the user: the message says what to fix, in one line."""


class TubevisionWarning(UserWarning):
    """A condition worth a person's attention that does not stop the analysis."""
