"""Exceptions of mcmatch: one base class, picklable so they cross joblib and Dask process boundaries.

Also the two helpers every message built from user input goes through: :func:`quote` (a value, at most
QUOTE_LIMIT characters of it) and :func:`clean` (control characters escaped, so no input can drive the terminal).
"""

from __future__ import annotations

#: Characters of a user's value that a message quotes at most.
QUOTE_LIMIT = 200
#: Characters of a message's file name, key path and text kept at most.
FILE_LIMIT, KEY_LIMIT, MESSAGE_LIMIT = 500, 300, 3000

# C0 controls except tab and newline, DEL and the C1 controls (ESC starts every ANSI sequence; 0x9b is a one-byte CSI)
_ESCAPES = {c: f"\\x{c:02x}" for c in (*range(0x00, 0x09), *range(0x0B, 0x20), *range(0x7F, 0xA0))}


def clean(text: str) -> str:
    """text with every control character but tab and newline written as an escape (ESC as \\x1b) [str]."""
    return text.translate(_ESCAPES)


def shorten(text: str, limit: int) -> str:
    """text cut to `limit` characters, saying how many were left out."""
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(text) - limit} more characters)"


def quote(value: object, limit: int = QUOTE_LIMIT) -> str:
    """A value for a message: repr of at most `limit` characters; a table or array by its size (never a deep or
    huge repr)."""
    if isinstance(value, dict):
        return f"a table of {len(value)} keys"
    if isinstance(value, (list, tuple)):
        return f"an array of {len(value)} items"
    if isinstance(value, str):
        if len(value) > limit:
            return f"{value[:limit]!r}... ({len(value)} characters)"
        return repr(value)
    try:
        text = repr(value)
    except (ValueError, RecursionError):  # an int of more digits than Python prints
        return f"a value of type {type(value).__name__} too large to show"
    return shorten(text, limit)


class McmatchError(Exception):
    """Base class of every error mcmatch raises on purpose."""


class ConfigError(McmatchError, ValueError):
    """Invalid user input: names the file, the key path and what was expected.

    The command line turns it into exit status 2 with the message on stderr.
    """

    def __init__(self, message: str, file: str | None = None, key: str | None = None) -> None:
        self.message = message
        self.file = file
        self.key = key
        super().__init__(message, file, key)

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(shorten(str(self.file), FILE_LIMIT))
        if self.key:
            where.append(f"key '{shorten(str(self.key), KEY_LIMIT)}'")
        prefix = ": ".join(where)
        message = shorten(str(self.message), MESSAGE_LIMIT)
        return clean(f"{prefix}: {message}" if prefix else message)

    def __reduce__(self):  # keep keyword fields through pickling
        return (self.__class__, (self.message, self.file, self.key))


class SolveError(McmatchError):
    """The nominal operating point could not be found; carries what is known of the partial result."""

    def __init__(self, message: str, partial: object | None = None) -> None:
        self.message = message
        self.partial = partial
        super().__init__(message)

    def __reduce__(self):
        return (self.__class__, (self.message, self.partial))
