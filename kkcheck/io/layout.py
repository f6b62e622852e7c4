"""Header -> layout: which column is the axis (and its unit), the values and the uncertainties.

* **Header.** The first non-comment line is a header when its first cell is not a number. Its
  cells are looked up in :mod:`kkcheck.io.headers` (axis with unit, ``n,k`` or
  ``eps1,eps2``, optional uncertainties, ignored ``source``/``row``/``flags``). In a
  whitespace-separated table, names that contain spaces (``Wavelength (nm)``,
  ``photon energy (eV)``) are found by trying every grouping of the header's words.
* **Header in a comment.** A file whose first row is numeric may carry its header as the last
  whole-line comment before the data (``# wavelength_nm, n, k``); it is used only when every
  cell is recognised and the count matches, and a note says so.
* **No header.** The file then needs ``axis=`` and ``quantity=``; its columns are axis, two
  values and optionally two uncertainties (axis and n, or axis, n and sigma_n, with
  ``quantity="n"``).
* **Lines above the header** (metadata such as ``Sample: ...``, a units row under the names):
  see :mod:`kkcheck.io.headerblock`.
* **Unknown columns** (``Psi (deg)``, ``Delta (deg)``, a depolarisation column) are left
  unused, with a note naming them, when the known columns make a complete table (an axis and
  a value pair); otherwise the first unknown name is an error.
* **Column selection.** ``columns=`` maps roles to columns (:mod:`kkcheck.io.select`); the
  header then only names the columns.
* **n only.** ``quantity="n"`` (or a ``columns=`` mapping with n and no k) reads a table of n
  alone with k = 0, and a note says so.

The header spellings themselves live in one table, :mod:`kkcheck.io.headers`.
"""

from __future__ import annotations

import dataclasses
import itertools
from dataclasses import dataclass

from ..errors import InputError
from . import headerblock as _hb
from . import headers as _h
from .cells import cells, number_like, sniff, trim
from .select import resolve_columns
from .text import Lines

__all__ = [
    "AXIS_CHOICES",
    "Layout",
    "TableLayout",
    "table_layout",
    "layout_from_header",
    "layout_without_header",
    "header_names",
]

#: Axis units offered to the user for tables without a header.
AXIS_CHOICES = ("energy_ev", "wavelength_nm", "wavelength_um", "wavenumber_cm-1", "frequency_thz")
_AUTO_HINT = (
    "give --axis ({}) and --quantity (nk or eps), or add a header row such as "
    "'wavelength_nm, n, k'".format(", ".join(AXIS_CHOICES))
)


@dataclass(frozen=True)
class Layout:
    """What each column of a table holds.

    Attributes
    ----------
    ncols : int
        Number of cells per row.
    axis_col : int
        0-based index of the axis column used.
    axis : str
        Its canonical unit (one of :data:`kkcheck.units.AXIS_UNITS`).
    extra_axes : tuple of (int, str)
        Further axis columns and their units, to be checked against the first.
    quantity : {"nk", "eps"}
        What the values are read as.
    value_cols : (int, int)
        The two value columns.
    nk_check_cols : (int, int) or None
        n, k columns to compare with eps when both pairs are given.
    sigma_kind : {"nk", "eps"} or None
        What the uncertainty columns refer to.
    sigma_cols : (int, int) or None
        The two uncertainty columns.
    names : tuple of str
        Column names as shown in messages.
    ignored : tuple of int
        Columns left unused (unknown names, or not selected by ``columns=``).
    k_implied : bool
        The table has n only; k = 0 is implied (``value_cols[1]`` is -1).
    selected : bool
        The roles came from a ``columns=`` mapping.
    """

    ncols: int
    axis_col: int
    axis: str
    extra_axes: tuple[tuple[int, str], ...]
    quantity: str
    value_cols: tuple[int, int]
    nk_check_cols: tuple[int, int] | None
    sigma_kind: str | None
    sigma_cols: tuple[int, int] | None
    names: tuple[str, ...]
    ignored: tuple[int, ...] = ()
    k_implied: bool = False
    selected: bool = False


@dataclass(frozen=True)
class TableLayout:
    """A table's layout together with where its data are.

    Attributes
    ----------
    layout : Layout
    data : list of (int, str)
        (line number, text) of the data lines.
    delim : str
        The sniffed delimiter (``" "`` for runs of whitespace).
    header_line : int or None
        Line of the header (a header row or a comment); None without one.
    notes : tuple of str
        Provenance notes (a header taken from a comment).
    """

    layout: Layout
    data: list[tuple[int, str]]
    delim: str
    header_line: int | None
    notes: tuple[str, ...]


def table_layout(
    lines: Lines,
    axis_opt: str | None,
    quantity_opt: str | None,
    shown: str,
    columns=None,
) -> TableLayout:
    """Find the delimiter, the header (a row, a comment or none) and the layout of a table."""
    bodies = [b for _, b in lines.content]
    start = _hb.first_numeric(bodies)
    if start is not None and start >= 2:
        return _layout_after_block(lines, start, axis_opt, quantity_opt, shown, columns)
    delim = sniff(bodies[1:] if len(bodies) > 1 else bodies)
    first_line, first_body = lines.content[0]
    first_cells = trim(cells(first_body, delim, shown, first_line))
    if first_cells and not number_like(first_cells[0]):
        data = lines.content[1:]
        if not data:
            raise InputError(
                "header row but no data rows: expected rows of numbers after the header",
                shown,
                first_line,
            )
        ncols = len(trim(cells(data[0][1], delim, shown, data[0][0])))
        names = header_names(first_body, delim, ncols, shown, first_line)
        lay = _named_layout(names, axis_opt, quantity_opt, shown, first_line, columns)
        return TableLayout(lay, data, delim, first_line, layout_notes(lay))
    data = lines.content
    ncols = len(first_cells)
    if columns is not None:
        lay = layout_from_columns(None, ncols, columns, axis_opt, quantity_opt, shown, first_line)
        return TableLayout(lay, data, delim, None, layout_notes(lay))
    _too_few_columns(ncols, shown, first_line, quantity_opt)
    found = _layout_from_comment(lines, first_line, delim, ncols, axis_opt, quantity_opt)
    if found is not None:
        lay, header_line = found
        note = f"header: taken from the comment at line {header_line}"
        return TableLayout(lay, data, delim, header_line, (note, *layout_notes(lay)))
    lay = layout_without_header(ncols, axis_opt, quantity_opt, shown, first_line)
    return TableLayout(lay, data, delim, None, layout_notes(lay))


def _named_layout(names, axis_opt, quantity_opt, shown, lineno, columns) -> Layout:
    """Layout from header ``names``: by the ``columns=`` mapping when given."""
    if columns is not None:
        return layout_from_columns(
            names, len(names), columns, axis_opt, quantity_opt, shown, lineno
        )
    _too_few_columns(len(names), shown, lineno, quantity_opt)
    return layout_from_header(names, axis_opt, quantity_opt, shown, lineno)


def _layout_after_block(lines: Lines, start, axis_opt, quantity_opt, shown, columns):
    """Layout when several non-numeric lines (metadata, header, units row) precede the data."""
    content = lines.content
    data = content[start:]
    delim = sniff([b for _, b in data])
    ncols = len(trim(cells(data[0][1], delim, shown, data[0][0])))
    head = start - 1
    notes: list[str] = []
    units_cells = trim(cells(content[head][1], delim, shown, content[head][0]))
    units = None
    if _hb.is_units_row(units_cells):
        units, head = (content[head][0], units_cells), head - 1
    header_line, header_body = content[head]
    names = header_names(header_body, delim, ncols, shown, header_line)
    if units is not None:
        names = _hb.with_units(names, units[1])
        notes.append(f"header: units taken from the row under the header (line {units[0]})")
    notes = _hb.metadata_notes(content[:head]) + notes
    lay = _named_layout(names, axis_opt, quantity_opt, shown, header_line, columns)
    return TableLayout(lay, data, delim, header_line, (*notes, *layout_notes(lay)))


def layout_notes(lay: Layout) -> tuple[str, ...]:
    """Provenance notes for unused columns, a column selection and an implied k = 0."""
    notes = []
    if lay.selected:
        used = [("axis", lay.axis_col)]
        used += list(zip(("eps1", "eps2") if lay.quantity == "eps" else ("n", "k"), lay.value_cols))
        text = ", ".join(f"{r} = column {c + 1}" for r, c in used if c >= 0)
        notes.append(f"columns: chosen by the columns option ({text})")
    if lay.ignored:
        shown = ", ".join(f"{c + 1} ({lay.names[c]!r})" for c in lay.ignored[:8])
        more = f" and {len(lay.ignored) - 8} more" if len(lay.ignored) > 8 else ""
        notes.append(f"columns: not used: {shown}{more}")
    if lay.k_implied:
        notes.append(
            "k: the table gives n only; k = 0 was assumed (no absorption), so eps2 = 0 and "
            "the KK test compares n with a transparent medium"
        )
    return tuple(notes)


def _too_few_columns(ncols: int, shown: str, lineno: int, quantity_opt=None) -> None:
    if ncols == 2 and quantity_opt == "n":
        return
    if ncols == 1:
        raise InputError(
            "only one column; expected an axis column and two value columns (n,k or eps1,eps2)",
            shown,
            lineno,
        )
    if ncols == 2:
        raise InputError(
            "only two columns; expected an axis column and two value columns (n,k or eps1,eps2), "
            "or give --quantity n for a table of n only (k = 0)",
            shown,
            lineno,
        )


def _group_words(words: list[str], ncols: int) -> list[str] | None:
    """Group whitespace-split header words into ``ncols`` recognised names, if possible."""
    if len(words) > 16 or ncols < 1 or ncols > len(words):
        return None
    best, best_score = None, -1
    for cuts in itertools.combinations(range(1, len(words)), ncols - 1):
        bounds = (0, *cuts, len(words))
        names = [" ".join(words[a:b]) for a, b in itertools.pairwise(bounds)]
        kinds = [_h.parse_column_name(n).kind for n in names]
        if "unknown" in kinds:
            continue
        score = sum(k not in ("axis_no_unit", "axis_bad_unit") for k in kinds)
        if score > best_score:
            best, best_score = names, score
    return best


def header_names(body: str, delim: str, ncols: int, shown: str, lineno: int) -> list[str]:
    """The column names of header text ``body`` (words regrouped in a whitespace table)."""
    names = trim(cells(body, delim, shown, lineno))
    if delim == " " and len(names) != ncols:
        grouped = _group_words(names, ncols)
        if grouped is not None:
            return grouped
    return names


def _layout_from_comment(lines: Lines, first_line, delim, ncols, axis_opt, quantity_opt):
    """Header kept in the last whole-line comment before the data, if it fully parses."""
    before = [ln for ln in lines.comments if ln < first_line]
    if not before:
        return None
    ln = max(before)
    body = lines.comments[ln]
    if not body:
        return None
    try:
        names = header_names(body, delim, ncols, "", ln)
        if len(names) != ncols:
            return None
        if any(_h.parse_column_name(n).kind in ("unknown", "axis_bad_unit") for n in names):
            return None
        return layout_from_header(names, axis_opt, quantity_opt, "", ln), ln
    except InputError:
        return None


def layout_without_header(
    ncols: int, axis_opt: str | None, quantity_opt: str | None, shown: str, lineno: int
) -> Layout:
    """Layout of a headerless table: axis, two values and optionally two uncertainties."""
    if axis_opt is None or quantity_opt is None:
        raise InputError(
            f"the first row is numeric, so the table has no header; {_AUTO_HINT}", shown, lineno
        )
    if quantity_opt == "n":
        return _n_only_without_header(ncols, axis_opt, shown, lineno)
    if ncols not in (3, 5):
        raise InputError(
            f"a table without a header needs 3 columns (axis, two values) or 5 (plus two "
            f"uncertainties), found {ncols}",
            shown,
            lineno,
        )
    vnames = ("n", "k") if quantity_opt == "nk" else ("eps1", "eps2")
    names = (axis_opt, *vnames) + (tuple("sigma_" + v for v in vnames) if ncols == 5 else ())
    return Layout(
        ncols,
        0,
        axis_opt,
        (),
        quantity_opt,
        (1, 2),
        None,
        quantity_opt if ncols == 5 else None,
        (3, 4) if ncols == 5 else None,
        names,
    )


def _n_only_without_header(ncols: int, axis_opt: str, shown: str, lineno: int) -> Layout:
    """Headerless n-only table: axis and n, optionally sigma_n (k = 0)."""
    if ncols not in (2, 3):
        raise InputError(
            f"a table of n only without a header needs 2 columns (axis, n) or 3 (plus "
            f"sigma_n), found {ncols}",
            shown,
            lineno,
        )
    sig = ncols == 3
    names = (axis_opt, "n") + (("sigma_n",) if sig else ())
    return Layout(
        ncols,
        0,
        axis_opt,
        (),
        "nk",
        (1, -1),
        None,
        "nk" if sig else None,
        (2, -1) if sig else None,
        names,
        k_implied=True,
    )


# ------------------------------------------------------------------------------------------
# header names -> layout, one question at a time (errors in this order)
# ------------------------------------------------------------------------------------------
def layout_from_header(
    names: list[str], axis_opt: str | None, quantity_opt: str | None, shown: str, lineno: int
) -> Layout:
    """Layout of a table whose header (at line ``lineno``) has the column ``names``.

    Columns with unknown names are left unused (``Layout.ignored``) when the known ones make
    a complete table; otherwise the first unknown name is the error.
    """
    parsed = [_h.parse_column_name(n) for n in names]
    unknown = tuple(i for i, p in enumerate(parsed) if p.kind == "unknown")
    if unknown:
        known = [
            p if p.kind != "unknown" else _h.ColumnName("ignore", None, p.text) for p in parsed
        ]
        try:
            lay = _layout_of(known, names, axis_opt, quantity_opt, shown, lineno)
        except InputError:
            _named_columns(parsed, shown, lineno)  # raises for the first unknown name
            raise
        return dataclasses.replace(lay, ignored=unknown)
    return _layout_of(parsed, names, axis_opt, quantity_opt, shown, lineno)


def _layout_of(parsed, names, axis_opt, quantity_opt, shown, lineno) -> Layout:
    seen = _named_columns(parsed, shown, lineno)
    axis_col, axis, extra = _axis_columns(parsed, axis_opt, shown, lineno)
    quantity, values, nk_check = _value_columns(seen, quantity_opt, shown, lineno)
    sigma_kind, sigma_cols = _sigma_columns(seen, shown, lineno, k_implied=values[1] < 0)
    return Layout(
        len(names),
        axis_col,
        axis,
        extra,
        quantity,
        values,
        nk_check,
        sigma_kind,
        sigma_cols,
        tuple(n.strip() for n in names),
        k_implied=values[1] < 0,
    )


def _named_columns(parsed: list[_h.ColumnName], shown: str, lineno: int) -> dict[str, int]:
    """Refuse unknown names and repeated value columns; map value/sigma kinds to columns."""
    for p in parsed:
        if p.kind == "unknown":
            raise InputError(
                f"unknown column name {p.text.strip()!r} in the header; {_h.ACCEPTED_SUMMARY}",
                shown,
                lineno,
            )
        if p.kind == "axis_bad_unit":
            raise InputError(
                f"axis column {p.text.strip()!r}: unit {p.unit!r} is not understood or does not "
                "fit the axis; expected nm, um, eV, cm-1 or THz, also Å, meV, Hz, rad/s "
                "(e.g. 'wavelength (nm)')",
                shown,
                lineno,
            )
    seen: dict[str, int] = {}
    for i, p in enumerate(parsed):
        if p.kind in ("axis", "axis_no_unit", "ignore"):
            continue
        if p.kind in seen:
            raise InputError(
                f"column {p.kind} appears twice (columns {seen[p.kind] + 1} and {i + 1}); "
                "expected each value column once",
                shown,
                lineno,
            )
        seen[p.kind] = i
    return seen


def _axis_columns(
    parsed: list[_h.ColumnName], axis_opt: str | None, shown: str, lineno: int
) -> tuple[int, str, tuple[tuple[int, str], ...]]:
    """(axis column, its unit, further axis columns with their units)."""
    axes = [i for i, p in enumerate(parsed) if p.kind in ("axis", "axis_no_unit")]
    if not axes:
        raise InputError(
            "no axis column in the header; expected one naming its unit, e.g. wavelength_nm, "
            "energy (eV), wavenumber (cm-1), frequency (THz)",
            shown,
            lineno,
        )
    first = parsed[axes[0]]
    if first.kind == "axis_no_unit":
        if axis_opt is None:
            raise InputError(
                f"axis column {first.text.strip()!r} does not name its unit; write e.g. "
                f"'{first.text.strip()} (nm)' or give --axis ({', '.join(AXIS_CHOICES)})",
                shown,
                lineno,
            )
        axis = axis_opt
    else:
        axis = first.axis
        if axis_opt is not None and axis_opt != axis:
            raise InputError(
                f"the header says the axis is {axis} but --axis {axis_opt} was given; "
                "expected them to agree",
                shown,
                lineno,
            )
    extra = []
    for i in axes[1:]:
        if parsed[i].kind != "axis":
            raise InputError(
                f"second axis column {parsed[i].text.strip()!r} does not name its unit; "
                "expected one axis column, or every axis column with its unit",
                shown,
                lineno,
            )
        extra.append((i, parsed[i].axis))
    return axes[0], axis, tuple(extra)


def _value_columns(
    seen: dict[str, int], quantity_opt: str | None, shown: str, lineno: int
) -> tuple[str, tuple[int, int], tuple[int, int] | None]:
    """(quantity, value columns, n,k columns to check against eps or None)."""
    has_eps = "eps1" in seen or "eps2" in seen
    has_nk = "n" in seen or "k" in seen
    if quantity_opt == "n" and "n" in seen and "k" not in seen and not has_eps:
        return "nk", (seen["n"], -1), None
    for a, b in (("n", "k"), ("eps1", "eps2")):
        if (a in seen) != (b in seen):
            have, miss = (a, b) if a in seen else (b, a)
            raise InputError(
                f"column {have} has no partner {miss}; expected both n,k or both eps1,eps2",
                shown,
                lineno,
            )
    if not has_eps and not has_nk:
        raise InputError("no value columns in the header; expected n,k or eps1,eps2", shown, lineno)
    quantity = "eps" if has_eps else "nk"
    if quantity_opt is not None and quantity_opt != quantity:
        if not (has_eps and has_nk):
            raise InputError(
                f"the header has {'eps1,eps2' if quantity == 'eps' else 'n,k'} but "
                f"--quantity {quantity_opt} was given; expected them to agree",
                shown,
                lineno,
            )
    values = (seen["eps1"], seen["eps2"]) if quantity == "eps" else (seen["n"], seen["k"])
    nk_check = (seen["n"], seen["k"]) if (has_eps and has_nk) else None
    return quantity, values, nk_check


def _sigma_columns(
    seen: dict[str, int], shown: str, lineno: int, *, k_implied: bool = False
) -> tuple[str | None, tuple[int, int] | None]:
    """(what the uncertainties refer to, their columns), or (None, None)."""
    if k_implied and "sigma_n" in seen and "sigma_k" not in seen:
        return "nk", (seen["sigma_n"], -1)
    sig_nk = ("sigma_n" in seen, "sigma_k" in seen)
    sig_eps = ("sigma_eps1" in seen, "sigma_eps2" in seen)
    for pair, (a, b) in ((sig_nk, ("sigma_n", "sigma_k")), (sig_eps, ("sigma_eps1", "sigma_eps2"))):
        if pair[0] != pair[1]:
            have, miss = (a, b) if pair[0] else (b, a)
            raise InputError(
                f"uncertainty column {have} has no partner {miss}; expected both or neither",
                shown,
                lineno,
            )
    if all(sig_eps):
        return "eps", (seen["sigma_eps1"], seen["sigma_eps2"])
    if all(sig_nk):
        return "nk", (seen["sigma_n"], seen["sigma_k"])
    return None, None


# ------------------------------------------------------------------------------------------
# a columns= mapping -> layout
# ------------------------------------------------------------------------------------------
def layout_from_columns(
    names: list[str] | None,
    ncols: int,
    columns,
    axis_opt: str | None,
    quantity_opt: str | None,
    shown: str,
    lineno: int,
) -> Layout:
    """Layout from a ``columns=`` mapping (:mod:`kkcheck.io.select`); other columns unused."""
    roles, unit = resolve_columns(columns, names, ncols, shown, lineno)
    ax = roles.pop("axis")
    if unit is None and names is not None:
        got = _h.parse_column_name(names[ax])
        unit = got.axis if got.kind == "axis" else None
    if unit is None:
        unit = axis_opt
    if unit is None:
        raise InputError(
            "columns: the axis column does not say its unit; name the role by its unit "
            f"(e.g. wavelength_nm) or give --axis ({', '.join(AXIS_CHOICES)})",
            shown,
            lineno,
        )
    if axis_opt is not None and axis_opt != unit:
        raise InputError(
            f"the columns option says the axis is {unit} but --axis {axis_opt} was given; "
            "expected them to agree",
            shown,
            lineno,
        )
    q_opt = "n" if ("n" in roles and "k" not in roles) else quantity_opt
    quantity, values, nk_check = _value_columns(roles, q_opt, shown, lineno)
    sigma_kind, sigma_cols = _sigma_columns(roles, shown, lineno, k_implied=values[1] < 0)
    used = {ax, *roles.values()}
    shown_names = tuple(
        (names[i].strip() if names is not None else f"column {i + 1}") for i in range(ncols)
    )
    return Layout(
        ncols,
        ax,
        unit,
        (),
        quantity,
        values,
        nk_check,
        sigma_kind,
        sigma_cols,
        shown_names,
        ignored=tuple(i for i in range(ncols) if i not in used),
        k_implied=values[1] < 0,
        selected=True,
    )
