"""Exceptions that reach the user as one clear line instead of a traceback."""

__all__ = ["DopantgapError", "TableError", "ModelFolderError", "ModelVersionWarning", "SuspectValueWarning"]


class DopantgapError(Exception):
    """Base class for every error caused by the user's input or files.

    The command line prints ``str(error)`` on one line and exits with status 2;
    any other exception is a bug in dopantgap.
    """


class TableError(DopantgapError, ValueError):
    """A problem in the user's table, reported as ``file:line: what; fix``."""

    def __init__(self, message, *, path=None, line=None):
        self.path = None if path is None else str(path)
        self.line = line
        where = ""
        if self.path is not None:
            where = self.path if line is None else f"{self.path}:{line}"
            where += ": "
        super().__init__(where + message)


class ModelFolderError(DopantgapError):
    """A model folder that is missing, incomplete, altered or from elsewhere."""


class ModelVersionWarning(UserWarning):
    """A model folder made with other package versions, loaded all the same."""


class SuspectValueWarning(UserWarning):
    """Values that a unit slip or a flipped sign would explain, kept because the user chose to."""
