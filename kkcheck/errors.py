"""The one exception type that carries a user-facing message about bad input.

Every reader and every stage raises :class:`InputError` for input it cannot use; the command
line turns it into a single line on stderr (``kkcheck: <file>:<line>: <what was expected>``)
and a non-zero exit, with no traceback unless ``--debug`` is given.
"""

from __future__ import annotations

__all__ = ["InputError"]


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
