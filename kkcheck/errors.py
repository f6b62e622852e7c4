"""The one exception type that carries a user-facing message about bad input.

Every reader and every stage raises :class:`InputError` for input it cannot use; the command
line turns it into a single line on stderr (``kkcheck: <file>:<line>: <what was expected>``)
and a non-zero exit, with no traceback unless ``--debug`` is given. :class:`OutputError` is its
counterpart for the output side (the environment, or a refusal to write), with its own exit code.
"""

from __future__ import annotations

import errno

__all__ = ["InputError", "OutputError", "OUTPUT_ERROR_EXIT"]


class InputError(ValueError):
    """Input that kkcheck cannot use, with where it is and what was expected.

    Parameters
    ----------
    message : str
        What is wrong and what was expected, one line, no trailing period needed.
    path : str, optional
        The file the problem is in.
    line : int, optional
        1-based line number in that file.
    """

    def __init__(self, message: str, path: str | None = None, line: int | None = None):
        self.message = " ".join(str(message).split())  # always one line
        self.path = None if path is None else str(path)
        self.line = line
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """Return ``path:line: message`` (parts omitted when unknown)."""
        where = ""
        if self.path is not None:
            where = self.path
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        elif self.line is not None:
            where = f"line {self.line}: "
        return where + self.message


#: Exit code of the command line for an :class:`OutputError` (2 is bad input, 3 internal).
OUTPUT_ERROR_EXIT = 4

#: errno -> the cause as the user reads it (anything else: the system's own wording).
_CAUSES = {
    errno.EACCES: "no permission",
    errno.EPERM: "operation not permitted (immutable or protected)",
    errno.EROFS: "read-only file system",
    errno.ENOSPC: "disk full",
    errno.EDQUOT: "disk quota exceeded",
    errno.ENAMETOOLONG: "path too long",
    errno.ENOENT: "folder does not exist",
    errno.ENOTDIR: "a part of the path is a file, not a folder",
    errno.EISDIR: "is a folder, expected a file",
}


class OutputError(Exception):
    """The output folder cannot take kkcheck's results, or refuses them on purpose.

    Raised for the environment (no permission, read-only file system, disk full, path too
    long) and for the safety refusals (a target is an input, a symlink out of the output
    folder, a file kkcheck did not write, a folder another run is writing to). The command
    line prints :meth:`one_line` and exits :data:`OUTPUT_ERROR_EXIT`.

    Parameters
    ----------
    message : str
        The cause and, where useful, what to do, one line.
    path : str, optional
        The file or folder concerned.
    """

    def __init__(self, message: str, path: str | None = None):
        self.message = " ".join(str(message).split())
        self.path = None if path is None else str(path)
        super().__init__(self.one_line())

    @classmethod
    def from_os_error(cls, exc: OSError, path=None, doing: str = "cannot write") -> OutputError:
        """An OutputError naming ``path`` (or the error's own file name) and the cause."""
        cause = _CAUSES.get(exc.errno) or (exc.strerror or type(exc).__name__).lower()
        where = path if path is not None else (exc.filename or None)
        return cls(f"{doing}: {cause}", None if where is None else str(where))

    def one_line(self) -> str:
        """Return ``path: message`` (path omitted when unknown)."""
        return f"{self.path}: {self.message}" if self.path is not None else self.message
