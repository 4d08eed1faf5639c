"""The project's own input error: one line naming the file (and line) and what is wrong."""

from __future__ import annotations

import os


class InputError(Exception):
    """Bad input from the user: a manifest, a data file or a command-line value.

    ``str(err)`` is one line: ``path:line: what is wrong`` (line omitted when unknown,
    path omitted when the problem belongs to no file). Never carries a traceback to the user.
    """

    def __init__(self, message: str, path: str | os.PathLike | None = None, line: int | None = None):
        self.message = " ".join(str(message).split())  # always one line
        self.path = None if path is None else str(path)
        self.line = line
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = ""
        if self.path is not None:
            where = self.path + (f":{self.line}" if self.line is not None else "") + ": "
        return where + self.message


class InputWarning:
    """A reported but non-fatal observation about the input (same one-line form)."""

    def __init__(self, message: str, path: str | None = None, line: int | None = None):
        self._err = InputError(message, path, line)

    def __str__(self) -> str:
        return str(self._err)

    def __repr__(self) -> str:
        return f"InputWarning({self!s})"
