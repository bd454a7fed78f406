"""Public exceptions of routerisk.

Every error a user can cause derives from :class:`RouteriskError`. The command line turns
one into a single line naming the file and the field, and exits with status 2.
"""

from __future__ import annotations

from pathlib import Path


class RouteriskError(Exception):
    """Base class of every error caused by the user's input or options.

    Parameters
    ----------
    message
        What is wrong, in one sentence.
    path
        The file or folder the problem is in, if any.
    field
        The key, column, option or element that is wrong, if any.
    """

    def __init__(
        self, message: str, *, path: str | Path | None = None, field: str | None = None
    ) -> None:
        self.message = message
        self.path = None if path is None else str(path)
        self.field = field
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """Return the error as one line: ``file: field: message``."""
        parts = [p for p in (self.path, self.field) if p]
        text = ": ".join([*parts, self.message])
        return " ".join(text.split())


class InputFileError(RouteriskError):
    """A data file is missing, unreadable, truncated or of the wrong kind."""


class ProfileError(RouteriskError):
    """A profile file has an unknown key, a wrong type or a value out of range."""


class EmptyNetworkError(RouteriskError):
    """The input holds no drivable roads (or none inside the requested area)."""


class RouteInputError(RouteriskError):
    """A route file is malformed, or a route point is off the network."""


class NetworkFolderError(RouteriskError):
    """A saved network folder is missing, incomplete or from another version."""


class OptionError(RouteriskError):
    """A command-line option has a bad value."""


class OfflineError(RouteriskError):
    """An online source was asked for but the network cannot be reached."""


class OutputError(RouteriskError):
    """An output cannot be written (a file in the way, no permission, disk full)."""


class OutputExistsError(OutputError):
    """An output already exists and ``--force`` was not given (or is of the other kind)."""
