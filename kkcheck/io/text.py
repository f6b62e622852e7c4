"""Bytes -> text -> lines: the first step of reading a table.

* **Encoding.** A UTF-16 file with a byte-order mark is decoded as UTF-16. Otherwise the bytes
  are decoded as UTF-8 (a UTF-8 byte-order mark is dropped); bytes that are not valid UTF-8
  are decoded as Windows-1252 (Latin-1 plus typographic quotes), so a ``µm`` saved by an
  old editor still reads. Any NUL byte, any control character other than tab, CR and LF, or
  bytes undefined in Windows-1252 mean *binary content* and are an error.
* **Lines** end with LF, CRLF or CR. ``#`` starts a comment, on its own line or after data.
  Blank lines are skipped. Line numbers are 1-based and count every line of the file.

Every refusal is an :class:`~kkcheck.errors.InputError` naming the file and, where there is
one, the line.
"""

from __future__ import annotations

import codecs
import re
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError

__all__ = ["Lines", "read_bytes", "decode", "split_lines", "line_of", "LINE_BREAK"]

_BAD_CHARS = re.compile(r"[\x00-\x08\x0b-\x0c\x0e-\x1f\x7f-\x9f]")
#: Line ends: CRLF, CR or LF.
LINE_BREAK = re.compile(r"\r\n|\r|\n")


def read_bytes(path: Path, shown: str) -> bytes:
    """All bytes of ``path``; ``shown`` is how the file is named in errors."""
    if not path.exists():
        raise InputError("file not found: expected an existing table file", shown)
    if path.is_dir():
        raise InputError("is a directory: expected a table file", shown)
    try:
        return path.read_bytes()
    except PermissionError:
        raise InputError("cannot read the file: permission denied", shown) from None
    except OSError as exc:
        raise InputError(f"cannot read the file: {exc.strerror or exc}", shown) from None


def line_of(data, index: int) -> int:
    """1-based line number of character/byte ``index`` in ``data`` (str or bytes)."""
    head = data[:index]
    if isinstance(head, bytes):
        head = head.decode("latin-1")
    return len(LINE_BREAK.findall(head)) + 1


def decode(raw: bytes, shown: str) -> tuple[str, str]:
    """Decode following the module's encoding rule; return (text, encoding name)."""
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            text, enc = raw.decode("utf-16"), "utf-16"
        except UnicodeDecodeError:
            raise InputError(
                "binary content: UTF-16 byte-order mark but undecodable bytes; "
                "expected a text table",
                shown,
            ) from None
    else:
        nul = raw.find(b"\x00")
        if nul >= 0:
            raise InputError(
                "binary content (NUL byte): expected a text table", shown, line_of(raw, nul)
            )
        try:
            text, enc = raw.decode("utf-8-sig"), "utf-8"
        except UnicodeDecodeError:
            try:
                text, enc = raw.decode("cp1252"), "windows-1252"
            except UnicodeDecodeError as exc:
                raise InputError(
                    "binary content (bytes that are neither UTF-8 nor Windows-1252): "
                    "expected a text table",
                    shown,
                    line_of(raw, exc.start),
                ) from None
    bad = _BAD_CHARS.search(text)
    if bad:
        raise InputError(
            f"binary content (control character {bad.group()!r}): expected a text table",
            shown,
            line_of(text, bad.start()),
        )
    return text, enc


@dataclass(frozen=True)
class Lines:
    """The lines of a table that carry something.

    Attributes
    ----------
    content : list of (int, str)
        (1-based line number, text before any ``#``, stripped) of every non-blank line.
    comments : dict of int -> str
        1-based line number -> text of a whole-line comment (after the ``#``, stripped).
    """

    content: list[tuple[int, str]]
    comments: dict[int, str]


def split_lines(text: str) -> Lines:
    """Split ``text`` into content lines and whole-line comments (see :class:`Lines`)."""
    content, comments = [], {}
    for i, line in enumerate(LINE_BREAK.split(text), start=1):
        body, hash_, rest = line.partition("#")
        body = body.strip()
        if body:
            content.append((i, body))
        elif hash_:
            comments[i] = rest.strip()
    return Lines(content, comments)
