"""Errors that reach the user as one clear line instead of a traceback."""


class InputError(ValueError):
    """Bad input: names the offending field and says what is allowed."""

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


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
