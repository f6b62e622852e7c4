"""Workbooks (.xlsx): one sheet's cells -> the lines the text reader reads.

The sheet (the first one, or the one named by ``sheet=``) is read through
``pandas.read_excel`` with the optional ``openpyxl`` package (``pip install 'kkcheck[xlsx]'``).
Each sheet row becomes one tab-separated line, so the header detection, units row, metadata
lines, column selection and every check of the text reader apply unchanged; line numbers in
messages are the sheet's row numbers. Numbers are written with Python's shortest round-trip
repr, so the value read is the stored binary value exactly. A workbook stores binary numbers,
not printed digits, so ``Dataset.value_quantum`` is None and a note says so.
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

from ..errors import InputError
from .text import Lines

__all__ = ["WORKBOOK_SUFFIXES", "is_workbook", "workbook_lines", "INSTALL_HINT"]

WORKBOOK_SUFFIXES = (".xlsx", ".xlsm")
INSTALL_HINT = "pip install 'kkcheck[xlsx]'"
_ZIP_MAGIC = b"PK\x03\x04"


def is_workbook(path: Path, raw: bytes) -> bool:
    """A .xlsx/.xlsm file (by suffix and the zip signature every workbook starts with)."""
    return path.suffix.lower() in WORKBOOK_SUFFIXES and raw.startswith(_ZIP_MAGIC)


def _cell_text(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v)
    return " ".join(str(v).split())  # no tabs or line breaks inside a cell


def workbook_lines(path: Path, shown: str, sheet=None) -> tuple[Lines, str]:
    """The sheet's rows as :class:`~kkcheck.io.text.Lines` and the sheet's name."""
    if importlib.util.find_spec("openpyxl") is None:
        raise InputError(
            f"reading .xlsx workbooks needs the openpyxl package: {INSTALL_HINT}", shown
        )
    import pandas as pd

    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except Exception as exc:  # a damaged workbook: zip or XML errors of any kind
        raise InputError(f"cannot read the workbook ({type(exc).__name__}: {exc})", shown) from None
    with book:
        names = list(book.sheet_names)
        if sheet is None:
            chosen = names[0]
        elif str(sheet) in names:
            chosen = str(sheet)
        else:
            raise InputError(
                f"no sheet named {sheet!r}; the workbook has {', '.join(map(repr, names))}",
                shown,
            )
        frame = pd.read_excel(book, sheet_name=chosen, header=None, dtype=object)
    content = []
    for i, row in enumerate(frame.itertuples(index=False), start=1):
        cells = [_cell_text(v) for v in row]
        while cells and cells[-1] == "":
            cells.pop()
        if any(cells):
            content.append((i, "\t".join(cells)))
    if not content:
        raise InputError(
            f"sheet {chosen!r} is empty: expected a table of axis and value columns", shown
        )
    return Lines(content, {}), chosen
