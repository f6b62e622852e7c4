"""Lines -> cells -> numbers: delimiters, cell splitting and number parsing.

* **Delimiter**, sniffed from the data lines (not the header): the first of ``;``, tab and
  ``,`` that occurs the same number of times on every data line; failing that, the one
  that occurs on more than half of the data lines; failing that, runs of whitespace. Empty
  cells at the end of a row (a trailing delimiter) are dropped.
* **Numbers** use a decimal point (``1.5``, ``-2e-3``, ``1.5D+00``), or a decimal comma
  (``1,5``) throughout a table separated by ``;``, tabs or whitespace (:func:`decimal_mark`).
  A decimal comma in a ','-separated table is an error that says so, and a ','-separated
  table without a header that could be read either way is refused
  (:func:`refuse_ambiguous_commas`). ``nan`` and ``inf`` are errors in axis and value
  columns; in uncertainty columns an empty cell or ``nan`` means "not known".
* **Rows** must have as many cells as the header (or the first row); the first fault in file
  order is reported with its line and column.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError

if TYPE_CHECKING:  # pragma: no cover - typing only (layout imports this module)
    from .layout import Layout

__all__ = [
    "Parsed",
    "sniff",
    "cells",
    "split_all",
    "trim",
    "delim_name",
    "number_like",
    "number",
    "parse_rows",
    "printed_quantum",
    "decimal_mark",
    "with_decimal_points",
    "refuse_ambiguous_commas",
]

_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eEdD][+-]?\d+)?", re.ASCII)
_NUMBER_COLUMN = re.compile(
    r"(?:{n})(?:\n(?:{n}))*".format(n=r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"), re.ASCII
)
_NONFINITE = re.compile(r"[+-]?(?:nan|inf|infinity)", re.ASCII | re.IGNORECASE)
_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?", re.ASCII)


# ------------------------------------------------------------------------------------------
# delimiter and cells
# ------------------------------------------------------------------------------------------
def sniff(data_lines: list[str]) -> str:
    """Delimiter rule of the module docstring; ``" "`` stands for runs of whitespace."""
    for d in (";", "\t", ","):
        counts = {line.count(d) for line in data_lines}
        if len(counts) == 1 and counts.pop() > 0:
            if d == "\t" and any(
                len(c.split()) > 1 for line in data_lines for c in line.split("\t")
            ):
                continue  # tabs and spaces mixed for alignment: whitespace table
            if d == "," and _commas_inside_words(data_lines):
                continue  # "400 1,5 0,25": decimal commas in a whitespace table
            return d
    best, best_n = " ", len(data_lines) / 2
    for d in (";", "\t", ","):
        if d == "," and _commas_inside_words(data_lines):
            continue
        n = sum(d in line for line in data_lines)
        if n > best_n:
            best, best_n = d, n
    return best


def _commas_inside_words(data_lines: list[str]) -> bool:
    """Every line with a comma has whitespace inside a ','-cell: commas are decimal marks."""
    with_comma = [line for line in data_lines if "," in line]
    return bool(with_comma) and all(
        any(len(c.split()) > 1 for c in line.split(",")) for line in with_comma
    )


def cells(body: str, delim: str, shown: str, lineno: int) -> list[str]:
    """Cells of one line, stripped (csv quoting rules for a real delimiter)."""
    if delim == " ":
        return body.split()
    try:
        row = next(csv.reader([body], delimiter=delim, skipinitialspace=True, strict=False))
    except (csv.Error, StopIteration) as exc:
        raise InputError(f"cannot split the row into cells ({exc})", shown, lineno) from None
    return [c.strip() for c in row]


def split_all(data: list[tuple[int, str]], delim: str, shown: str) -> list[list[str]]:
    """Cells of every data line (one csv reader for all lines: fast on large files)."""
    if delim == " ":
        return [b.split() for _, b in data]
    reader = csv.reader((b for _, b in data), delimiter=delim, skipinitialspace=True, strict=False)
    out = []
    try:
        for row in reader:
            out.append([c.strip() for c in row])
    except csv.Error as exc:
        raise InputError(
            f"cannot split the row into cells ({exc})", shown, data[len(out)][0]
        ) from None
    if len(out) != len(data):  # a quote left open joined lines into one field
        for ln, body in data:
            if body.count('"') % 2:
                raise InputError(
                    "unbalanced quote: expected quoted cells to close on the same line",
                    shown,
                    ln,
                )
        raise InputError("cannot split the rows into cells (quoted line breaks)", shown)
    return out


def trim(row: list[str]) -> list[str]:
    """Drop empty cells at the end (a trailing delimiter)."""
    row = list(row)
    while row and row[-1] == "":
        row.pop()
    return row


def delim_name(delim: str) -> str:
    """How a delimiter is named in messages."""
    return {";": "';'", "\t": "tab", ",": "','", " ": "whitespace"}[delim]


# ------------------------------------------------------------------------------------------
# cells -> numbers
# ------------------------------------------------------------------------------------------
def number_like(tok: str) -> bool:
    """A number, or something meant as one (nan, inf, decimal comma): not a header name."""
    return bool(
        _NUMBER.fullmatch(tok) or _NONFINITE.fullmatch(tok) or _DECIMAL_COMMA.fullmatch(tok)
    )


def number(tok: str, shown: str, lineno: int, col: int, name: str, *, sigma: bool) -> float:
    """The number in cell ``tok`` (column ``col``, 1-based, named ``name``) of line ``lineno``.

    With ``sigma`` (an uncertainty column) an empty cell or ``nan`` gives NaN ("not known").
    """
    if _NUMBER.fullmatch(tok):
        v = float(tok.replace("d", "e").replace("D", "e"))
        if np.isfinite(v):
            return v
        raise InputError(
            f"column {col} ({name}): {tok!r} is too large to be a finite number", shown, lineno
        )
    if sigma and (tok == "" or tok.lower() in ("nan", "+nan", "-nan")):
        return float("nan")
    where = f"column {col} ({name})"
    if tok == "":
        raise InputError(f"{where} is empty: expected a number", shown, lineno)
    if _NONFINITE.fullmatch(tok):
        raise InputError(f"{where}: {tok!r} is not a finite number; expected one", shown, lineno)
    if _DECIMAL_COMMA.fullmatch(tok):
        raise InputError(
            f"{where}: {tok!r} uses a decimal comma; expected a number with a decimal point",
            shown,
            lineno,
        )
    shown_tok = tok if len(tok) <= 40 else tok[:37] + "..."
    raise InputError(f"{where}: expected a number, found {shown_tok!r}", shown, lineno)


@dataclass(frozen=True)
class Parsed:
    """The numbers of the used columns, in file order.

    Attributes
    ----------
    lines : numpy.ndarray of int
        1-based file line of each row.
    axis_values : numpy.ndarray
        The axis column, in the file's own unit.
    extra_axes : tuple of numpy.ndarray
        Further axis columns (to be checked against the first).
    v1, v2 : numpy.ndarray
        The two value columns as written (n, k or eps1, eps2).
    nk_check : tuple of numpy.ndarray or None
        n, k when eps1, eps2 are the values and n, k are also present.
    s1, s2 : numpy.ndarray or None
        The uncertainty columns as written (NaN = not known).
    q1, q2 : numpy.ndarray or None
        Unit of the last printed digit of each cell of the two value columns
        (:func:`printed_quantum`).
    """

    lines: np.ndarray
    axis_values: np.ndarray
    extra_axes: tuple[np.ndarray, ...]
    v1: np.ndarray
    v2: np.ndarray
    nk_check: tuple[np.ndarray, np.ndarray] | None
    s1: np.ndarray | None
    s2: np.ndarray | None
    q1: np.ndarray | None = None
    q2: np.ndarray | None = None


def parse_rows(
    rows: list[tuple[int, list[str]]], lay: Layout, delim: str, shown: str, header_line: int | None
) -> Parsed:
    """Numbers of the columns ``lay`` uses, from (line number, cells) rows."""
    wanted = [lay.axis_col, *(c for c, _ in lay.extra_axes), *lay.value_cols]
    if lay.nk_check_cols:
        wanted += list(lay.nk_check_cols)
    sig = list(lay.sigma_cols) if lay.sigma_cols else []
    wanted = [c for c in wanted if c >= 0]  # -1: a column the table does not have (k = 0)
    sig_read = [c for c in sig if c >= 0]
    fast = _parse_fast(rows, lay, wanted, sig_read)
    if fast is not None:
        cols = fast
    else:
        cols = _parse_slow(rows, lay, wanted, sig_read, delim, shown, header_line)
    cols[-1] = np.zeros(len(rows))

    def arr(c):
        return cols[c]

    def quantum(c):
        if c < 0:
            return np.zeros(len(rows))
        return printed_quantum([r[1][c] for r in rows])

    return Parsed(
        lines=np.array([r[0] for r in rows], dtype=int),
        axis_values=arr(lay.axis_col),
        extra_axes=tuple(arr(c) for c, _ in lay.extra_axes),
        v1=arr(lay.value_cols[0]),
        v2=arr(lay.value_cols[1]),
        nk_check=(arr(lay.nk_check_cols[0]), arr(lay.nk_check_cols[1]))
        if lay.nk_check_cols
        else None,
        s1=arr(sig[0]) if sig else None,
        s2=arr(sig[1]) if sig else None,
        q1=quantum(lay.value_cols[0]),
        q2=quantum(lay.value_cols[1]),
    )


def printed_quantum(tokens) -> np.ndarray:
    """Unit of the last printed digit of each number cell.

    Parameters
    ----------
    tokens : sequence of str
        Cells already known to be numbers (``1.2340``, ``-3.1e-05``, ``400``, ``1.5D+00``).

    Returns
    -------
    numpy.ndarray
        10^(exponent - digits after the decimal point): ``"1.2340"`` -> 1e-4,
        ``"3.1e-05"`` -> 1e-6, ``"400"`` -> 1 (trailing zeros of an integer count as printed).

    Notes
    -----
    Counted on the strings with vectorised numpy string functions (no per-cell Python), so
    it stays cheap on 1e6 rows.
    """
    a = np.strings.lower(np.asarray(tokens, dtype=str))
    if a.size == 0:
        return np.zeros(0)
    a = np.strings.replace(a, "d", "e")
    length = np.strings.str_len(a)
    epos = np.strings.find(a, "e")
    mant_end = np.where(epos >= 0, epos, length)
    dot = np.strings.find(a, ".")
    decimals = np.where((dot >= 0) & (dot < mant_end), mant_end - dot - 1, 0)
    exp_text = np.strings.partition(a, "e")[2]
    exponent = np.where(exp_text == "", "0", exp_text).astype(np.int64)
    return 10.0 ** (exponent - decimals).astype(float)


def _parse_fast(rows, lay: Layout, wanted, sig) -> dict[int, np.ndarray] | None:
    """All cells plain finite numbers in rows of the right length: convert column-wise.

    Returns None when anything is unusual; the row-by-row parser then finds the first fault
    in file order and words the error.
    """
    n = lay.ncols
    if any(len(row) != n for _, row in rows):
        return None
    out = {}
    for c in wanted + sig:
        tokens = [row[c] for _, row in rows]
        if not _NUMBER_COLUMN.fullmatch("\n".join(tokens)):
            return None
        try:
            v = np.array(tokens, dtype=float)
        except ValueError:
            return None
        if not np.all(np.isfinite(v)):
            return None
        out[c] = v
    return out


def _parse_slow(rows, lay: Layout, wanted, sig, delim, shown, header_line):
    cols: dict[int, list[float]] = {c: [] for c in wanted + sig}
    where = f" as in the header (line {header_line})" if header_line else " as in the first row"
    for lineno, row in rows:
        if len(row) > lay.ncols and not any(row[lay.ncols :]):
            row = row[: lay.ncols]  # trailing delimiter
        if len(row) != lay.ncols:
            raise InputError(
                f"expected {lay.ncols} {delim_name(delim)}-separated cells{where}, "
                f"found {len(row)}{_comma_hint(row, delim)}",
                shown,
                lineno,
            )
        for c in wanted:
            cols[c].append(number(row[c], shown, lineno, c + 1, lay.names[c], sigma=False))
        for c in sig:
            cols[c].append(number(row[c], shown, lineno, c + 1, lay.names[c], sigma=True))
    return {c: np.asarray(v, dtype=float) for c, v in cols.items()}


# ------------------------------------------------------------------------------------------
# decimal commas
# ------------------------------------------------------------------------------------------
#: A cell without a decimal point: an integer part or the digits after a decimal comma.
_WHOLE = re.compile(r"[+-]?\d+(?:[eE][+-]?\d+)?", re.ASCII)


def _comma_hint(row: list[str], delim: str) -> str:
    """A hint for a row of a ','-separated table that may hold decimal commas."""
    if delim != "," or not row or any("." in c for c in row):
        return ""
    return "; if the numbers use decimal commas, separate the columns with ';' or tabs"


def decimal_mark(rows, used: list[int], delim: str, shown: str) -> str:
    """The decimal mark of the used cells: ``"."``, or ``","`` (not with a ',' delimiter).

    A table separated by ``;``, tabs or whitespace whose numbers carry commas and no decimal
    points (``1,5``) uses decimal commas; one with both marks is an error naming the first line
    of each.
    """
    if delim == ",":
        return "."
    first_comma = first_point = None
    for ln, row in rows:
        for c in used:
            tok = row[c] if c < len(row) else ""
            if first_comma is None and _DECIMAL_COMMA.fullmatch(tok):
                first_comma = ln
            elif first_point is None and "." in tok:
                first_point = ln
        if first_comma is not None and first_point is not None:
            raise InputError(
                f"decimal commas (line {first_comma}) and decimal points (line {first_point}) "
                "in one table; expected one decimal mark throughout",
                shown,
                max(first_comma, first_point),
            )
    return "," if first_comma is not None else "."


def with_decimal_points(rows, used: list[int]):
    """Rows with the decimal commas of the used cells written as points."""
    out = []
    for ln, row in rows:
        row = list(row)
        for c in used:
            if c < len(row):
                row[c] = row[c].replace(",", ".")
        out.append((ln, row))
    return out


def refuse_ambiguous_commas(rows, ncols: int, valid_counts: tuple[int, ...], shown: str):
    """Refuse a ','-separated table without a header that reads two ways.

    When no cell has a decimal point and the first row's cells could pair up as decimal-comma
    numbers (an integer part followed by a digits-only part) into another valid column count,
    ``400,1,7,0,1`` is either axis, n, k, sigma_n, sigma_k or axis 400, n 1.7, k 0.1.
    """
    if not rows or any("." in c for _, row in rows for c in row):
        return
    ln, first = rows[0]
    if not all(_WHOLE.fullmatch(c) for c in first):
        return
    # joining j pairs (integer part, tail) of the ncols cells gives ncols - j numbers
    alternatives = [ncols - j for j in range(1, ncols // 2 + 1) if ncols - j in valid_counts]
    if ncols in valid_counts and alternatives:
        raise InputError(
            f"ambiguous ','-separated table: no cell has a decimal point, so the {ncols} cells "
            f"of a row may also be {alternatives[0]} numbers written with decimal commas; "
            "write decimal points (400.0), separate the columns with ';' or tabs, or add a "
            "header row",
            shown,
            ln,
        )
