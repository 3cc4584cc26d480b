"""Errors that reach the user as one clear line instead of a traceback."""


class InputError(ValueError):
    """Bad input: names the offending field and says what is allowed."""

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


def positive_int(text: str) -> int:
    """An argparse type: an integer >= 1 (the message names the allowed values)."""
    import argparse

    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, not {text!r}")
    return value


#: rows of a printed table of reactions (``show``, ``query top``)
TABLE_ROWS = 10


class CaseFailure(RuntimeError):
    """A single case could not be computed; the reason is stored with the case."""


class StorageError(RuntimeError):
    """The results folder cannot take a file (full disk, read-only, gone): the run stops with
    one line naming the folder, what was kept and how to continue."""

    def __init__(self, message: str):
        self.message = message
        super().__init__(message)


class FormatError(ValueError):
    """A file of another major format version (or of none): recompute it."""
