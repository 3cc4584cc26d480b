"""Errors that reach the user as one clear line instead of a traceback."""


class InputError(ValueError):
    """Bad input: names the offending field and says what is allowed."""

    def __init__(self, field: str, message: str):
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


class CaseFailure(RuntimeError):
    """A single case could not be computed; the reason is stored with the case."""
