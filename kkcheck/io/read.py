"""Tolerant reading of optical-constant tables into a :class:`kkcheck.spectrum.Dataset`.

What is read
------------
* **Encoding.** A UTF-16 file with a byte-order mark is decoded as UTF-16. Otherwise the bytes
  are decoded as UTF-8 (a UTF-8 byte-order mark is dropped); bytes that are not valid UTF-8
  are decoded as Windows-1252 (Latin-1 plus typographic quotes), so a ``µm`` saved by an
  old editor still reads. Any NUL byte, any control character other than tab, CR and LF, or
  bytes undefined in Windows-1252 mean *binary content* and are an error.
* **Lines** end with LF, CRLF or CR. ``#`` starts a comment, on its own line or after data.
  Blank lines are skipped. Line numbers in errors and in ``Provenance.rows`` are 1-based and
  count every line of the file.
* **Delimiter**, sniffed from the data lines (not the header): the first of ``;``, tab and
  ``,`` that occurs the same number of times on every data line; failing that, the one
  that occurs on more than half of the data lines; failing that, runs of whitespace. Empty
  cells at the end of a row (a trailing delimiter) are dropped.
* **Numbers** use a decimal *point* only (``1.5``, ``-2e-3``, ``1.5D+00``). A decimal comma
  (``1,5``) is an error that says so. ``nan`` and ``inf`` are errors in axis and value
  columns; in uncertainty columns an empty cell or ``nan`` means "not known".
* **Header.** The first non-comment line is a header when its first cell is not a number. Its
  cells are looked up in :mod:`kkcheck.io.headers` (axis with unit, ``n,k`` or
  ``eps1,eps2``, optional uncertainties, ignored ``source``/``row``/``flags``). In a
  whitespace-separated table, names that contain spaces (``Wavelength (nm)``,
  ``photon energy (eV)``) are found by trying every grouping of the header's words. A file
  whose first row is numeric may carry its header as the last whole-line comment before the
  data (``# wavelength_nm, n, k``); it is used only when every cell is recognised and the
  count matches, and a note says so. Otherwise a file without a header needs ``axis=`` and
  ``quantity=``; its columns are then axis, two values and optionally two uncertainties.
* **Both n,k and eps1,eps2 present:** eps1,eps2 are used, and n,k must agree with them within
  a relative 1e-3 of ``|eps|`` (rounding in the file), else it is an error.
* **Several axis columns** (e.g. ``wavelength_nm`` and ``energy_ev``): the first is used; the
  others must give the same energies within a relative 1e-6, else it is an error.
* **Order.** Points are sorted by increasing photon energy. When the axis was not already
  ascending *in the file's own unit*, a note says it was descending or unsorted.
* **Duplicate energies.** Rows with the same energy whose values are identical are collapsed
  to the first of them; rows whose values differ are averaged (in the quantity the file gave)
  with uncertainties combined as sqrt(sum sigma_i^2)/m, a note naming the lines, and a
  RuntimeWarning. Provenance keeps the first line of each group.
* **Sign convention.** ``convention="auto"`` applies
  :func:`kkcheck.units.detect_convention` to k (or eps2) as read; if the data are in
  exp(+i w t), the imaginary part is negated, ``Dataset.converted`` is set and a note says so.
  ``convention="exp(+iwt)"`` or ``"exp(-iwt)"`` forces the reading.
* **Checks** (each an :class:`~kkcheck.errors.InputError` naming file and line): missing file,
  a directory, empty file or only comments, fewer than three columns, unknown header names,
  a row with a different number of cells, text where a number belongs, NaN/inf, axis values
  <= 0, fewer than :data:`MIN_POINTS` distinct axis values, all axis values equal,
  negative uncertainties, an n column negative on half its rows or more (a few negative n
  are kept with a RuntimeWarning).

How it is read
--------------
:func:`read_table` runs these steps in order, each in its own module:
:mod:`kkcheck.io.text` (bytes -> text -> lines), :mod:`kkcheck.io.layout` (delimiter, header
and what each column holds; spellings in :mod:`kkcheck.io.headers`), :mod:`kkcheck.io.cells`
(cells -> numbers), :mod:`kkcheck.io.values` (axis -> energy, values -> eps, checks, order,
duplicates), then the sign convention here.
"""

from __future__ import annotations

import dataclasses
import hashlib
import warnings
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..options import ConventionChoice, choices
from ..spectrum import Dataset, Provenance
from ..units import detect_convention
from . import headers as _h
from .cells import (
    Parsed,
    decimal_mark,
    delim_name,
    parse_rows,
    refuse_ambiguous_commas,
    split_all,
    with_decimal_points,
)
from .fastpath import fast_read
from .layout import AXIS_CHOICES, Layout, TableLayout, table_layout
from .text import Lines, decode, read_bytes, split_lines
from .values import (
    MIN_POINTS,
    axis_plausibility,
    check_axis,
    check_magnitude,
    collapse,
    first_of_runs,
    order_note,
    values_to_eps,
)
from .workbook import is_workbook, workbook_lines

__all__ = ["read_table", "MIN_POINTS", "CONVENTIONS", "QUANTITIES"]

#: Values accepted by ``convention=`` (:data:`kkcheck.options.ConventionChoice`).
CONVENTIONS = choices(ConventionChoice)
#: Values accepted by ``quantity=``.
QUANTITIES = ("nk", "eps", "n")


def read_table(
    path,
    *,
    axis: str | None = None,
    quantity: str | None = None,
    name: str | None = None,
    convention: ConventionChoice = "auto",
    columns=None,
    sheet=None,
) -> Dataset:
    """Read one table of optical constants into a :class:`~kkcheck.spectrum.Dataset`.

    Parameters
    ----------
    path : str or os.PathLike
        The table file. Its bytes are hashed (sha256) into the provenance.
    axis : str, optional
        Axis unit of the file, one of ``energy_ev``, ``wavelength_nm``, ``wavelength_um``,
        ``wavenumber_cm-1``, ``frequency_thz`` (also ``angular_frequency_rad_s`` or a unit
        token such as ``nm``). Needed when the file has no header or its axis column has no
        unit; must agree with the header otherwise.
    quantity : {"nk", "eps", "n"}, optional
        What the two value columns hold. Needed when the file has no header; must agree with
        the header otherwise. ``"n"`` reads a table of n only (k = 0, stated in a note).
    name : str, optional
        Label of the source; the file stem by default.
    convention : {"auto", "exp(-iwt)", "exp(+iwt)"}
        Time-dependence convention of the file. ``"auto"`` detects it from the sign of k or
        eps2 (:func:`kkcheck.units.detect_convention`).
    columns : mapping, optional
        Which column holds what, by header name or 1-based number, e.g.
        ``{"axis": "Wavelength (nm)", "n": 2, "k": 3}`` (:mod:`kkcheck.io.select`); the
        other columns are left unused and named in a note.
    sheet : str, optional
        For an .xlsx workbook (:mod:`kkcheck.io.workbook`, needs ``openpyxl``): the sheet to
        read; the first by default.

    Returns
    -------
    Dataset
        Energy [eV] strictly increasing, eps in exp(-i w t), uncertainties [eps units] if the
        file had them, ``provenance.rows`` the 1-based file line of each point and
        ``provenance.notes`` everything the reader changed (sorting, duplicates, convention).

    Raises
    ------
    kkcheck.errors.InputError
        For anything in the file that cannot be understood (see the module docstring); the
        message is one line and names the file and, where there is one, the line.

    Notes
    -----
    Axis conversions (CODATA 2018, :mod:`kkcheck.units`): E = hc/lambda with
    hc = 1239.841984 eV nm; E = hc * nu~ with hc = 1.239841984e-4 eV cm; E = h f with
    h = 4.135667696e-3 eV/THz. Values given as n,k become eps = (n + i k)^2; their
    uncertainties propagate to first order: sigma_eps1 = 2 sqrt(n^2 sn^2 + k^2 sk^2),
    sigma_eps2 = 2 sqrt(k^2 sn^2 + n^2 sk^2).

    References
    ----------
    .. [1] E. Tiesinga et al., "CODATA recommended values of the fundamental physical
       constants: 2018", Rev. Mod. Phys. 93, 025010 (2021).
    """
    axis_opt, quantity_opt = _check_options(axis, quantity, convention)
    p = Path(path)
    shown = str(path)
    raw = read_bytes(p, shown)
    digest = hashlib.sha256(raw).hexdigest()
    if is_workbook(p, raw):
        table, parsed, notes = _workbook_numbers(p, shown, axis_opt, quantity_opt, columns, sheet)
    else:
        table, parsed, notes = _numbers(raw, shown, axis_opt, quantity_opt, columns)
    lay = table.layout
    energy = check_axis(parsed, lay, shown)
    notes.extend(axis_plausibility(energy, parsed, lay, shown))
    eps, s1, s2 = values_to_eps(parsed, lay, shown)
    check_magnitude(eps, energy, parsed.lines, shown)
    eps, used, converted, note = _apply_convention(eps, parsed.v2, lay.quantity, convention)
    notes.extend(note)
    order = np.argsort(energy, kind="stable")
    quantum = _sorted_quantum(energy, order, parsed)
    energy, eps, s1, s2, rows_out, sort_notes = _sort_and_collapse(
        energy, order, eps, s1, s2, parsed, lay, converted, shown
    )
    notes.extend(sort_notes)
    if s1 is not None and np.all(np.isnan(s1)) and np.all(np.isnan(s2)):
        s1 = s2 = None
        notes.append("uncertainty: columns present but every value unknown (nan or empty)")
    return Dataset(
        name=p.stem if name is None else name,
        energy_ev=energy,
        eps=eps,
        sigma_eps1=s1,
        sigma_eps2=s2,
        quantity=lay.quantity,
        axis=lay.axis,
        convention=used,
        converted=converted,
        provenance=Provenance(path=shown, sha256=digest, rows=rows_out, notes=tuple(notes)),
        value_quantum=quantum,
    )


def _numbers(raw: bytes, shown: str, axis_opt, quantity_opt, columns):
    """(layout, numbers of the used columns, notes): the fast path when the table is plain
    (:mod:`kkcheck.io.fastpath`), else the careful row parser, which words every error."""
    fast = fast_read(raw, shown, axis_opt, quantity_opt, columns) if raw else None
    if fast is not None:
        table, parsed, encoding = fast.table, fast.parsed, fast.encoding
        mark_notes: list[str] = []
    else:
        lines, encoding = _text_lines(raw, shown)
        table = table_layout(lines, axis_opt, quantity_opt, shown, columns)
        rows, mark_notes = _cells_with_points(table, shown)
        parsed = parse_rows(rows, table.layout, table.delim, shown, table.header_line)
    notes = [] if encoding == "utf-8" else [f"encoding: read as {encoding}"]
    return table, parsed, notes + list(table.notes) + mark_notes


def _workbook_numbers(p: Path, shown: str, axis_opt, quantity_opt, columns, sheet):
    """(layout, numbers, notes) of one sheet of a workbook, read like a tab-separated table."""
    lines, chosen = workbook_lines(p, shown, sheet)
    table = table_layout(lines, axis_opt, quantity_opt, shown, columns)
    rows, mark_notes = _cells_with_points(table, shown)
    parsed = parse_rows(rows, table.layout, table.delim, shown, table.header_line)
    parsed = dataclasses.replace(parsed, q1=None, q2=None)  # binary cells: no printed digits
    notes = [
        f"workbook: sheet {chosen!r}; line numbers are the sheet's row numbers",
        "printed digits: not known (a workbook stores binary numbers)",
    ]
    return table, parsed, notes + list(table.notes) + mark_notes


def _sorted_quantum(energy: np.ndarray, order: np.ndarray, parsed: Parsed) -> np.ndarray | None:
    """Printed-digit units (N, 2) of the value cells, in the order of the sorted, collapsed
    points (the first row of each duplicate group, as :func:`_sort_and_collapse` keeps);
    ``order`` is the stable sort of ``energy``."""
    if parsed.q1 is None or parsed.q2 is None:
        return None
    keep = order[first_of_runs(energy[order])]
    return np.column_stack([parsed.q1[keep], parsed.q2[keep]])


def _cells_with_points(table: TableLayout, shown: str):
    """(line, cells) of every data row, decimal commas written as points; notes."""
    rows = list(
        zip((ln for ln, _ in table.data), split_all(table.data, table.delim, shown), strict=True)
    )
    lay = table.layout
    if table.delim == "," and table.header_line is None and not lay.selected:
        valid = (2, 3) if lay.k_implied else (3, 5)
        refuse_ambiguous_commas(rows, lay.ncols, valid, shown)
    used = [c for c in range(lay.ncols) if c not in lay.ignored]
    if table.delim == "," or not any("," in body for _, body in table.data):
        return rows, []  # no comma in any data line: nothing to decide (cheap on 1e6 rows)
    if decimal_mark(rows, used, table.delim, shown) == ".":
        return rows, []
    note = f"decimal mark: comma ({delim_name(table.delim)}-separated table)"
    return with_decimal_points(rows, used), [note]


def _check_options(axis, quantity, convention) -> tuple[str | None, str | None]:
    """Canonical ``axis`` and ``quantity`` options (None when not given); checks ``convention``."""
    ax = None
    if axis is not None:
        ax = _h.axis_from_option(str(axis))
        if ax is None:
            raise InputError(f"unknown axis {axis!r}; expected one of {', '.join(AXIS_CHOICES)}")
    q = None
    if quantity is not None:
        q = str(quantity).strip().lower()
        if q not in QUANTITIES:
            raise InputError(
                f"unknown quantity {quantity!r}; expected nk or eps (or n for a table of n only)"
            )
    # the vocabulary of kkcheck.options, with the reader's own (tested) wording
    if convention not in CONVENTIONS:
        raise InputError(f"unknown convention {convention!r}; expected {', '.join(CONVENTIONS)}")
    return ax, q


def _text_lines(raw: bytes, shown: str) -> tuple[Lines, str]:
    """The file's lines and encoding name; refuses an empty file or one with no data rows."""
    if not raw:
        raise InputError("empty file: expected a table of axis and value columns", shown)
    text, encoding = decode(raw, shown)
    lines = split_lines(text)
    if not lines.content:
        raise InputError(
            "no data rows (only comments or blank lines): expected a table of axis and value "
            "columns",
            shown,
        )
    return lines, encoding


def _apply_convention(eps, imag_written, quantity: str, convention: str):
    """Decide the time convention on the imaginary part as written; return it in exp(-iwt).

    Returns (eps, convention used, converted, notes).
    """
    check = detect_convention(imag_written)
    which = "k" if quantity == "nk" else "eps2"
    notes = []
    if convention == "auto":
        used = check.detected
        if used == "exp(+iwt)":
            notes.append(
                f"convention: negative {which} carries {100 * check.negative_weight:.0f}% of "
                f"sum |{which}|, so the file is in exp(+iwt); imaginary part negated to exp(-iwt)"
            )
    else:
        used = convention
        if used == "exp(+iwt)":
            notes.append("convention: exp(+iwt) given; imaginary part negated to exp(-iwt)")
        elif check.detected == "exp(+iwt)":
            notes.append(
                f"convention: negative {which} carries {100 * check.negative_weight:.0f}% of "
                f"sum |{which}| (looks like exp(+iwt)), but exp(-iwt) was given; kept as written"
            )
    converted = used == "exp(+iwt)"
    if converted:
        eps = np.conj(eps)
    return eps, used, converted, notes


def _sort_and_collapse(energy, order, eps, s1, s2, parsed: Parsed, lay: Layout, converted, shown):
    """Sort by energy (``order``, stable) and apply the duplicate rule; return arrays, file
    lines and notes."""
    notes = []
    note = order_note(parsed.axis_values, parsed.lines)
    if note:
        notes.append(note)
    sorted_energy = energy[order]
    raw_values = None  # the values as written matter only to rows with the same energy
    if np.any(sorted_energy[1:] == sorted_energy[:-1]):
        raw_values = np.column_stack(
            [parsed.v1, parsed.v2] + ([parsed.s1, parsed.s2] if parsed.s1 is not None else [])
        )[order]
    energy, eps, s1, s2, rows_out, dup_notes = collapse(
        sorted_energy,
        eps[order],
        None if s1 is None else s1[order],
        None if s2 is None else s2[order],
        parsed.lines[order],
        raw_values,
        lay,
        converted,
    )
    notes.extend(dup_notes)
    if any("averaged" in n for n in dup_notes):
        # stacklevel 3: this function <- read_table <- its caller
        warnings.warn(
            f"{shown}: rows with the same axis value but different values were averaged "
            "(see the dataset's provenance notes)",
            RuntimeWarning,
            stacklevel=3,
        )
    if energy.size < MIN_POINTS:
        raise InputError(
            f"only {energy.size} distinct axis value(s); expected at least {MIN_POINTS} points",
            shown,
            int(parsed.lines[-1]),
        )
    return energy, eps, s1, s2, rows_out, notes
