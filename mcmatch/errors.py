"""Exceptions of mcmatch: one base class, picklable so they cross joblib and Dask process boundaries."""

from __future__ import annotations


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
            where.append(str(self.file))
        if self.key:
            where.append(f"key '{self.key}'")
        prefix = ": ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message

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
