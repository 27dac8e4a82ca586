"""The one error type for bad user input.

Library code raises :class:`InputError` for anything the user can mend (a bad
option value, an unreadable or malformed file, a column that is missing); the
command line turns it, and only it, into a one-line message and a non-zero
exit status. Any other exception is a bug and keeps its traceback.
"""
from __future__ import annotations

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad user input: an option, a file or a column. The message is for the user.

    A subclass of :class:`ValueError`, so callers that already catch
    ``ValueError`` keep working.
    """
