"""The fast path of the reader: plain numeric tables parsed in bulk, bit-identical to the rows.

Large tables (1e5-1e6 rows) are almost always plain: a few lines of comments and a header,
then rows of numbers with one delimiter. For those the row-by-row parser
(:mod:`kkcheck.io.cells`) spends its time on Python objects per cell. This module reads such a
table in two parts:

* the **head**, the first :data:`HEAD_LINES` lines, goes through the careful reader exactly as
  before (encoding, comments, metadata, header, delimiter, layout);
* the **body**, every data line from the head's first one to the end, is checked at the byte
  level and then converted by ``pandas.read_csv`` (C engine, correctly rounded float
  conversion; pandas 3) in one call.

The body is used only when every check holds: only ASCII digits, ``. e E + -``, the head's
delimiter (a single space for whitespace tables) and line ends (LF, or CRLF throughout); no
``#``, no quotes, no blank lines, no decimal commas, no ``d`` exponents, no ``nan``/``inf``;
every line has exactly the head's number of cells (checked on the byte positions of every
delimiter and line end); every converted value is finite. Over that alphabet the number
grammar of ``pandas.read_csv`` and Python's ``float`` is the grammar of the careful parser
(``tests/test_io_fastpath.py`` checks every token of up to five characters), so a body that
passes gives the same numbers. Anything else returns ``None`` and :func:`kkcheck.io.read_table`
reads the whole file with the careful parser, which locates the fault and words the error
(line-exact messages unchanged). The printed-digit units (:func:`kkcheck.io.cells.printed_quantum`)
of the body are counted on the raw bytes from the positions of the decimal point, the exponent
mark and the cell end, with the same formula.
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from . import headerblock as _hb
from .cells import Parsed
from .layout import TableLayout, table_layout
from .text import LINE_BREAK, decode, split_lines

__all__ = ["HEAD_LINES", "FastRead", "fast_read"]

#: Lines read by the careful parser before the bulk conversion takes over.
HEAD_LINES = 64
#: Fewest data rows the head must hold (the delimiter and layout are decided on them).
_MIN_HEAD_ROWS = 4
#: Longest exponent (characters after the sign) counted on bytes; longer ones go the slow way.
_MAX_EXPONENT_DIGITS = 6
_NUMBER_BYTES = b"0123456789.eE+-"
_LINE_BREAK_BYTES = re.compile(rb"\r\n|\r|\n")


@dataclass(frozen=True)
class FastRead:
    """A table read by the fast path.

    Attributes
    ----------
    table : TableLayout
        Layout, delimiter, header line and notes, decided on the head as the careful reader
        does (its ``data`` holds the head's data lines only).
    parsed : Parsed
        Numbers of the used columns of every data row (head and body), file order.
    encoding : str
        Encoding of the file as :func:`kkcheck.io.text.decode` names it.
    """

    table: TableLayout
    parsed: Parsed
    encoding: str


def fast_read(
    raw: bytes, shown: str, axis_opt, quantity_opt, columns=None, head_lines: int | None = None
) -> FastRead | None:
    """Read ``raw`` by the fast path, or None when the careful parser must read it.

    Parameters
    ----------
    raw : bytes
        The whole file.
    shown : str
        How the file is named in messages.
    axis_opt, quantity_opt, columns
        As for :func:`kkcheck.io.read_table` (already checked).
    head_lines : int, optional
        Lines given to the careful parser (:data:`HEAD_LINES` by default; smaller in tests).

    Returns
    -------
    FastRead or None
        None whenever anything is unusual (including any input error: the careful reader then
        raises it with its usual wording).
    """
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return None  # UTF-16
    cut = _head_end(raw, HEAD_LINES if head_lines is None else head_lines)
    if cut is None:
        return None
    try:
        return _read_parts(raw, cut, shown, axis_opt, quantity_opt, columns)
    except InputError:
        return None


def _head_end(raw: bytes, head_lines: int) -> int | None:
    """Byte offset just after the ``head_lines``-th LF, or None if the file is shorter."""
    pos = -1
    for _ in range(head_lines):
        pos = raw.find(b"\n", pos + 1)
        if pos < 0:
            return None
    return pos + 1 if pos + 1 < len(raw) else None


def _normalised_body(body: bytes) -> bytes | None:
    """The body with LF line ends and a final LF, or None if it cannot be fast."""
    if not body.isascii():
        return None
    if b"\r" in body:
        if body.count(b"\r") != body.count(b"\r\n"):
            return None
        body = body.replace(b"\r\n", b"\n")
    return body if body.endswith(b"\n") else body + b"\n"


def _read_parts(raw: bytes, cut: int, shown, axis_opt, quantity_opt, columns):
    """Layout from the head; every data row (the head's and the rest) converted in bulk."""
    text, encoding = decode(raw[:cut], shown)
    lines = split_lines(text)
    bodies = [b for _, b in lines.content]
    if not bodies or _hb.first_numeric(bodies) is None:
        return None
    table = table_layout(lines, axis_opt, quantity_opt, shown, columns)
    if len(table.data) < _MIN_HEAD_ROWS or not _plain_head(table):
        return None
    first = table.data[0][0]
    after_head = len(LINE_BREAK.findall(text)) + 1
    if [ln for ln, _ in table.data] != list(range(first, after_head)):
        return None  # a comment or blank line among the head's rows: the careful parser reads
    start = _line_offset(raw[:cut], first)
    body = None if start is None else _normalised_body(raw[start:])
    if body is None:
        return None
    grid = _body_grid(body, table.delim, table.layout.ncols)
    if grid is None:
        return None
    parsed = _parse_body(body, grid, table.layout, table.delim, first)
    return None if parsed is None else FastRead(table, parsed, encoding)


def _line_offset(head: bytes, line: int) -> int | None:
    """Byte offset where 1-based ``line`` of ``head`` starts (line breaks as the text reader)."""
    if line == 1:
        return None if head.startswith(b"\xef\xbb\xbf") else 0  # a BOM: let the careful read
    for i, m in enumerate(_LINE_BREAK_BYTES.finditer(head), start=2):
        if i == line:
            return m.end()
    return None


def _plain_head(table: TableLayout) -> bool:
    """The head's data rows decide the delimiter the same way the whole file would.

    The delimiter must occur ``ncols - 1`` times on every head data row (no trailing
    delimiter), the rows must have no decimal comma to decide on, and a headerless
    ','-table must show a decimal point (else the ambiguity rule reads the whole file).
    """
    d, lay = table.delim, table.layout
    data = [b for _, b in table.data]
    if d == " ":
        return not any(c in b for b in data for c in ',;\t"')
    if any(b.count(d) != lay.ncols - 1 or '"' in b for b in data):
        return False
    if d != "," and any("," in b for b in data):
        return False
    if d == "," and table.header_line is None and not lay.selected:
        return any("." in b for b in data)
    return True


@dataclass(frozen=True)
class _Grid:
    """Byte offsets of the body's cells: ``ends`` (rows, ncols) is the offset of the byte after
    each cell; ``dot`` and ``emark`` the offset of its decimal point and exponent mark, or -1."""

    a: np.ndarray
    ends: np.ndarray
    dot: np.ndarray
    emark: np.ndarray


def _body_grid(body: bytes, delim: str, ncols: int) -> _Grid | None:
    """The body's cell offsets, or None when a byte or a line does not fit the table."""
    if body.translate(None, _NUMBER_BYTES + b"\n" + delim.encode()):
        return None  # a byte outside the plain-number alphabet
    a = np.frombuffer(body, np.uint8)
    if delim == " ":
        return _whitespace_grid(a, ncols, body)
    d = ord(delim)
    ends_flat, marks = _scan(a, d)
    if ends_flat.size % ncols or ends_flat.size == 0:
        return None
    ends = ends_flat.reshape(-1, ncols)
    if not (np.all(a[ends[:, -1]] == 10) and np.all(a[ends[:, :-1]] == d)):
        return None
    if ends[0, 0] == 0 or np.any(np.diff(ends_flat) == 1):
        return None  # an empty cell
    small = np.int32 if a.size < 2**31 - 1 else np.int64  # half the memory: fewer page faults
    dot, emark = (np.full(ends_flat.size, -1, dtype=small) for _ in range(2))
    for out, (cell, at) in zip((dot, emark), marks, strict=True):
        out[cell] = at
    return _Grid(a, ends, dot.reshape(ends.shape), emark.reshape(ends.shape))


def _scan(a: np.ndarray, delim: int, step: int = 1 << 18):
    """Cell ends (offsets of each delimiter and LF) and the (cell, offset) of every decimal
    point and exponent mark.

    Done in blocks of ``step`` bytes with reused buffers, which keeps the work in cache (about
    twice as fast as whole-array expressions on 1e6 rows). A mark's cell is the number of cell
    ends before it.
    """
    mark = np.empty(min(step, a.size), dtype=bool)
    other = np.empty_like(mark)
    low = np.empty(mark.size, dtype=np.uint8)
    ends, dots, emarks = [], [], []
    base = 0
    for i in range(0, a.size, step):
        c = a[i : i + step]
        m, o, lo = mark[: c.size], other[: c.size], low[: c.size]
        np.equal(c, delim, out=m)
        np.equal(c, 10, out=o)
        m |= o
        np.equal(c, 46, out=o)
        m |= o
        np.bitwise_or(c, 32, out=lo)  # 'E' -> 'e'
        np.equal(lo, 101, out=o)
        m |= o
        at = np.flatnonzero(m)
        kind = lo[at]
        is_end = (kind == (delim | 32)) | (kind == (10 | 32))  # delimiter or LF
        cell = np.cumsum(is_end) - is_end + base
        base += int(np.count_nonzero(is_end))
        at += i
        ends.append(at[is_end])
        for found, code in ((dots, 46), (emarks, 101)):
            sel = kind == code
            found.append((cell[sel], at[sel]))
    marks = tuple(
        (np.concatenate([c for c, _ in f]), np.concatenate([x for _, x in f]))
        for f in (dots, emarks)
    )
    return np.concatenate(ends), marks


def _whitespace_grid(a: np.ndarray, ncols: int, body: bytes) -> _Grid | None:
    """Cell offsets of a table separated by runs of spaces (lines may be indented)."""
    cell = (a != 32) & (a != 10)
    edge = np.diff(cell.astype(np.int8), prepend=np.int8(0), append=np.int8(0))
    starts, ends = np.flatnonzero(edge == 1), np.flatnonzero(edge == -1)
    newlines = np.flatnonzero(a == 10)
    if starts.size == 0 or starts.size != newlines.size * ncols:
        return None
    per_line = np.diff(np.searchsorted(starts, newlines), prepend=0)
    if np.any(per_line != ncols):
        return None

    def marks(is_mark):
        at = np.flatnonzero(is_mark)
        out = np.full(ends.size, -1, dtype=np.int64)
        out[np.searchsorted(ends, at)] = at
        return out.reshape(-1, ncols)

    dot = marks(a == 46)
    emark = marks((a | 32) == 101) if (b"e" in body or b"E" in body) else np.full_like(dot, -1)
    return _Grid(a, ends.reshape(-1, ncols), dot, emark)


def _parse_body(body: bytes, grid: _Grid, lay, delim: str, first_line: int) -> Parsed | None:
    """Numbers of the used columns of the body (pandas C parser) and their printed digits."""
    import pandas as pd  # the reader's only pandas use: imported where needed

    wanted = sorted(
        {c for c in (lay.axis_col, *(c for c, _ in lay.extra_axes), *lay.value_cols) if c >= 0}
        | {c for c in (lay.nk_check_cols or ()) + (lay.sigma_cols or ()) if c >= 0}
    )
    n = grid.ends.shape[0]
    try:
        frame = pd.read_csv(
            io.BytesIO(body),
            header=None,
            sep=r"\s+" if delim == " " else delim,
            usecols=wanted,
            dtype=float,
            na_filter=False,
            engine="c",
            **_exact_floats(pd),
        )
    except (ValueError, pd.errors.ParserError):
        return None
    if frame.shape != (n, len(wanted)):
        return None
    cols = {c: frame[c].to_numpy(dtype=float) for c in wanted}
    if not all(np.all(np.isfinite(v)) for v in cols.values()):
        return None
    q = {c: _quantum(grid, c) for c in lay.value_cols if c >= 0}
    if any(v is None for v in q.values()):
        return None
    q1, q2 = (q[c] if c >= 0 else np.zeros(n) for c in lay.value_cols)
    lines = np.arange(first_line, first_line + n, dtype=int)
    return _parsed_from(cols, lay, lines, q1, q2)


def _exact_floats(pd) -> dict:
    """read_csv keywords for correctly rounded floats (what Python's ``float`` gives).

    pandas 3 converts correctly rounded by default (and deprecates the keyword); before it, the
    default converter may differ from ``float`` in the last bit, so "round_trip" is asked for.
    """
    major = int(pd.__version__.split(".")[0])
    return {} if major >= 3 else {"float_precision": "round_trip"}


def _quantum(grid: _Grid, c: int) -> np.ndarray | None:
    """Unit of the last printed digit of every cell of column ``c``, or None.

    The formula of :func:`kkcheck.io.cells.printed_quantum`, 10^(exponent - digits after
    the decimal point), counted on byte offsets: the decimal point, the exponent mark and the
    cell end. The cells are valid numbers (pandas converted them), so each holds at most one
    point and one exponent mark, the point before the mark.
    """
    d, e, end = grid.dot[:, c], grid.emark[:, c], grid.ends[:, c]
    mant_end = np.where(e >= 0, e, end)
    decimals = np.where(d >= 0, mant_end - d - 1, 0)
    exponent = np.zeros(end.size, dtype=np.int64)
    has_e = e >= 0
    if has_e.any():
        got = _exponents(grid.a, e[has_e], end[has_e])
        if got is None:
            return None
        exponent[has_e] = got
    return 10.0 ** (exponent - decimals).astype(float)


def _exponents(a: np.ndarray, e_at: np.ndarray, e_end: np.ndarray) -> np.ndarray | None:
    """Integer value of the exponents a[e_at + 1 : e_end] (optional sign, then digits)."""
    longest = int(np.max(e_end - e_at)) - 1
    if longest > _MAX_EXPONENT_DIGITS + 1:
        return None
    value = np.zeros(e_at.size, dtype=np.int64)
    sign = np.ones(e_at.size, dtype=np.int64)
    for j in range(1, longest + 1):
        pos = e_at + j
        inside = pos < e_end
        b = a[np.where(inside, pos, 0)].astype(np.int64)
        digit = inside & (b >= 48) & (b <= 57)
        value = np.where(digit, value * 10 + (b - 48), value)
        sign = np.where(inside & (b == 45), -1, sign)
    return sign * value


def _parsed_from(cols: dict, lay, lines: np.ndarray, q1, q2) -> Parsed:
    n = lines.size
    cols = {**cols, -1: np.zeros(n)}
    sig = lay.sigma_cols
    return Parsed(
        lines=lines,
        axis_values=cols[lay.axis_col],
        extra_axes=tuple(cols[c] for c, _ in lay.extra_axes),
        v1=cols[lay.value_cols[0]],
        v2=cols[lay.value_cols[1]],
        nk_check=(cols[lay.nk_check_cols[0]], cols[lay.nk_check_cols[1]])
        if lay.nk_check_cols
        else None,
        s1=cols[sig[0]] if sig else None,
        s2=cols[sig[1]] if sig else None,
        q1=q1,
        q2=q2,
    )
