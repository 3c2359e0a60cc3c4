"""The one exception type for bad input.

Every check of user input raises :class:`InputError` with one sentence that
names the bad argument or file.  It subclasses :class:`ValueError`, so API
callers can catch either; the command line prints the sentence and exits
non-zero instead of showing a traceback.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input from the user: one clear sentence naming the argument or file."""


def reason(exc: BaseException) -> str:
    """An exception's message for quoting inside one of our sentences.

    Strips the trailing full stop so that ``f"... ({reason(exc)})."`` reads as
    one sentence; falls back to the exception's type name when it says nothing.
    """
    text = str(exc).strip().rstrip(".")
    return text or type(exc).__name__
