"""Errors meant for the user: one line saying what is wrong, where, and what to do."""


class UserError(Exception):
    """Bad input or a bad file.  The command line prints ``str(exc)`` on one line and
    exits non-zero; no traceback reaches the user."""


class InputFileError(UserError):
    """A file cannot be read as what it claims to be.  Message form:
    ``FILE:LINE: reason; what to do`` (LINE omitted when it does not apply)."""

    def __init__(self, path: str, reason: str, line: int | None = None) -> None:
        where = f"{path}:{line}" if line is not None else str(path)
        super().__init__(f"{where}: {reason}")
        self.path = str(path)
        self.line = line
        self.reason = reason
