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
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import itertools
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..spectrum import Dataset, Provenance
from ..units import (
    detect_convention,
    eps_to_nk,
    nk_to_eps,
    sigma_nk_to_eps,
    to_energy_ev,
)
from . import headers as _h

__all__ = ["read_table", "MIN_POINTS", "CONVENTIONS", "QUANTITIES"]

#: Fewest distinct axis values a table must have.
MIN_POINTS = 3
#: Values accepted by ``convention=``.
CONVENTIONS = ("auto", "exp(-iwt)", "exp(+iwt)")
#: Values accepted by ``quantity=``.
QUANTITIES = ("nk", "eps")
#: Axis units offered to the user for tables without a header.
_AXIS_CHOICES = ("energy_ev", "wavelength_nm", "wavelength_um", "wavenumber_cm-1", "frequency_thz")
_AXIS_WORD = {
    "energy_ev": "photon energy",
    "wavelength_nm": "wavelength",
    "wavelength_um": "wavelength",
    "wavenumber_cm-1": "wavenumber",
    "frequency_thz": "frequency",
    "angular_frequency_rad_s": "angular frequency",
}
_NK_EPS_RTOL = 1e-3
_AXIS_RTOL = 1e-6

_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eEdD][+-]?\d+)?", re.ASCII)
_NUMBER_COLUMN = re.compile(
    r"(?:{n})(?:\n(?:{n}))*".format(n=r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"), re.ASCII
)
_NONFINITE = re.compile(r"[+-]?(?:nan|inf|infinity)", re.ASCII | re.IGNORECASE)
_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?", re.ASCII)
_BAD_CHARS = re.compile(r"[\x00-\x08\x0b-\x0c\x0e-\x1f\x7f-\x9f]")
_LINE_BREAK = re.compile(r"\r\n|\r|\n")
_AUTO_HINT = (
    "give --axis ({}) and --quantity (nk or eps), or add a header row such as "
    "'wavelength_nm, n, k'".format(", ".join(_AXIS_CHOICES))
)


# ------------------------------------------------------------------------------------------
# bytes -> lines
# ------------------------------------------------------------------------------------------
def _read_bytes(path: Path, shown: str) -> bytes:
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


def _line_of(data, index: int) -> int:
    """1-based line number of character/byte ``index`` in ``data`` (str or bytes)."""
    head = data[:index]
    if isinstance(head, bytes):
        head = head.decode("latin-1")
    return len(_LINE_BREAK.findall(head)) + 1


def _decode(raw: bytes, shown: str) -> tuple[str, str]:
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
                "binary content (NUL byte): expected a text table", shown, _line_of(raw, nul)
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
                    _line_of(raw, exc.start),
                ) from None
    bad = _BAD_CHARS.search(text)
    if bad:
        raise InputError(
            f"binary content (control character {bad.group()!r}): expected a text table",
            shown,
            _line_of(text, bad.start()),
        )
    return text, enc


@dataclass(frozen=True)
class _Lines:
    content: list[tuple[int, str]]  # (line number, text without comment), non-blank
    comments: dict[int, str]  # line number -> text of a whole-line comment (without '#')


def _split_lines(text: str) -> _Lines:
    content, comments = [], {}
    for i, line in enumerate(_LINE_BREAK.split(text), start=1):
        body, hash_, rest = line.partition("#")
        body = body.strip()
        if body:
            content.append((i, body))
        elif hash_:
            comments[i] = rest.strip()
    return _Lines(content, comments)


# ------------------------------------------------------------------------------------------
# delimiter and cells
# ------------------------------------------------------------------------------------------
def _sniff(data_lines: list[str]) -> str:
    """Delimiter rule of the module docstring; ``" "`` stands for runs of whitespace."""
    for d in (";", "\t", ","):
        counts = {line.count(d) for line in data_lines}
        if len(counts) == 1 and counts.pop() > 0:
            if d == "\t" and any(
                len(c.split()) > 1 for line in data_lines for c in line.split("\t")
            ):
                continue  # tabs and spaces mixed for alignment: whitespace table
            return d
    best, best_n = " ", len(data_lines) / 2
    for d in (";", "\t", ","):
        n = sum(d in line for line in data_lines)
        if n > best_n:
            best, best_n = d, n
    return best


def _cells(body: str, delim: str, shown: str, lineno: int) -> list[str]:
    if delim == " ":
        return body.split()
    try:
        row = next(csv.reader([body], delimiter=delim, skipinitialspace=True, strict=False))
    except (csv.Error, StopIteration) as exc:
        raise InputError(f"cannot split the row into cells ({exc})", shown, lineno) from None
    return [c.strip() for c in row]


def _split_all(data: list[tuple[int, str]], delim: str, shown: str) -> list[list[str]]:
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


def _trim(cells: list[str]) -> list[str]:
    """Drop empty cells at the end (a trailing delimiter)."""
    cells = list(cells)
    while cells and cells[-1] == "":
        cells.pop()
    return cells


def _delim_name(delim: str) -> str:
    return {";": "';'", "\t": "tab", ",": "','", " ": "whitespace"}[delim]


# ------------------------------------------------------------------------------------------
# header -> layout
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Layout:
    ncols: int
    axis_col: int
    axis: str
    extra_axes: tuple[tuple[int, str], ...]
    quantity: str  # "nk" or "eps": what the values are read as
    value_cols: tuple[int, int]
    nk_check_cols: tuple[int, int] | None  # n,k columns to compare with eps when both given
    sigma_kind: str | None  # "nk" or "eps"
    sigma_cols: tuple[int, int] | None
    names: tuple[str, ...]


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


def _header_names(body: str, delim: str, ncols: int, shown: str, lineno: int) -> list[str]:
    cells = _trim(_cells(body, delim, shown, lineno))
    if delim == " " and len(cells) != ncols:
        grouped = _group_words(cells, ncols)
        if grouped is not None:
            return grouped
    return cells


def _layout_from_header(
    names: list[str], axis_opt: str | None, quantity_opt: str | None, shown: str, lineno: int
) -> _Layout:
    parsed = [_h.parse_column_name(n) for n in names]
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
                "fit the axis; expected nm, um, eV, cm-1 or THz (e.g. 'wavelength (nm)')",
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
                f"'{first.text.strip()} (nm)' or give --axis ({', '.join(_AXIS_CHOICES)})",
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
    has_eps = "eps1" in seen or "eps2" in seen
    has_nk = "n" in seen or "k" in seen
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
        sigma_kind, sigma_cols = "eps", (seen["sigma_eps1"], seen["sigma_eps2"])
    elif all(sig_nk):
        sigma_kind, sigma_cols = "nk", (seen["sigma_n"], seen["sigma_k"])
    else:
        sigma_kind, sigma_cols = None, None
    return _Layout(
        len(names),
        axes[0],
        axis,
        tuple(extra),
        quantity,
        values,
        nk_check,
        sigma_kind,
        sigma_cols,
        tuple(n.strip() for n in names),
    )


def _layout_without_header(
    ncols: int, axis_opt: str | None, quantity_opt: str | None, shown: str, lineno: int
) -> _Layout:
    if axis_opt is None or quantity_opt is None:
        raise InputError(
            f"the first row is numeric, so the table has no header; {_AUTO_HINT}", shown, lineno
        )
    if ncols not in (3, 5):
        raise InputError(
            f"a table without a header needs 3 columns (axis, two values) or 5 (plus two "
            f"uncertainties), found {ncols}",
            shown,
            lineno,
        )
    vnames = ("n", "k") if quantity_opt == "nk" else ("eps1", "eps2")
    names = (axis_opt, *vnames) + (tuple("sigma_" + v for v in vnames) if ncols == 5 else ())
    return _Layout(
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


# ------------------------------------------------------------------------------------------
# cells -> numbers
# ------------------------------------------------------------------------------------------
def _number(tok: str, shown: str, lineno: int, col: int, name: str, *, sigma: bool) -> float:
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
class _Parsed:
    lines: np.ndarray  # 1-based line numbers, file order
    axis_values: np.ndarray
    extra_axes: tuple[np.ndarray, ...]
    v1: np.ndarray
    v2: np.ndarray
    nk_check: tuple[np.ndarray, np.ndarray] | None
    s1: np.ndarray | None
    s2: np.ndarray | None


def _parse_rows(
    rows: list[tuple[int, list[str]]], lay: _Layout, delim: str, shown: str, header_line: int | None
) -> _Parsed:
    wanted = [lay.axis_col, *(c for c, _ in lay.extra_axes), *lay.value_cols]
    if lay.nk_check_cols:
        wanted += list(lay.nk_check_cols)
    sig = list(lay.sigma_cols) if lay.sigma_cols else []
    fast = _parse_fast(rows, lay, wanted, sig)
    if fast is not None:
        cols = fast
    else:
        cols = _parse_slow(rows, lay, wanted, sig, delim, shown, header_line)

    def arr(c):
        return cols[c]

    return _Parsed(
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
    )


def _parse_fast(rows, lay: _Layout, wanted, sig) -> dict[int, np.ndarray] | None:
    """All cells plain finite numbers in rows of the right length: convert column-wise.

    Returns None when anything is unusual; the row-by-row parser then finds the first fault
    in file order and words the error.
    """
    n = lay.ncols
    if any(len(cells) != n for _, cells in rows):
        return None
    out = {}
    for c in wanted + sig:
        tokens = [cells[c] for _, cells in rows]
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


def _parse_slow(rows, lay: _Layout, wanted, sig, delim, shown, header_line):
    cols: dict[int, list[float]] = {c: [] for c in wanted + sig}
    where = f" as in the header (line {header_line})" if header_line else " as in the first row"
    for lineno, cells in rows:
        if len(cells) > lay.ncols and not any(cells[lay.ncols :]):
            cells = cells[: lay.ncols]  # trailing delimiter
        if len(cells) != lay.ncols:
            raise InputError(
                f"expected {lay.ncols} {_delim_name(delim)}-separated cells{where}, "
                f"found {len(cells)}",
                shown,
                lineno,
            )
        for c in wanted:
            cols[c].append(_number(cells[c], shown, lineno, c + 1, lay.names[c], sigma=False))
        for c in sig:
            cols[c].append(_number(cells[c], shown, lineno, c + 1, lay.names[c], sigma=True))
    return {c: np.asarray(v, dtype=float) for c, v in cols.items()}


# ------------------------------------------------------------------------------------------
# checks and assembly
# ------------------------------------------------------------------------------------------
def _first(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def _check_axis(p: _Parsed, lay: _Layout, shown: str) -> np.ndarray:
    word = _AXIS_WORD[lay.axis]
    x = p.axis_values
    bad = x <= 0
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"non-positive {word} {x[i]:g} in column {lay.axis_col + 1}; expected values > 0",
            shown,
            int(p.lines[i]),
        )
    with np.errstate(over="ignore", divide="ignore"):
        energy = to_energy_ev(x, lay.axis)
    bad = ~np.isfinite(energy) | (energy <= 0)
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"{word} {x[i]:g} gives no finite positive photon energy; expected a usable value",
            shown,
            int(p.lines[i]),
        )
    for (col, unit), values in zip(lay.extra_axes, p.extra_axes, strict=True):
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            other = to_energy_ev(values, unit)
            off = ~(np.abs(other - energy) <= _AXIS_RTOL * energy)
        if off.any():
            i = _first(off)
            raise InputError(
                f"axis columns {lay.axis_col + 1} ({lay.names[lay.axis_col]}) and {col + 1} "
                f"({lay.names[col]}) disagree; expected the same photon energy",
                shown,
                int(p.lines[i]),
            )
    if energy.size >= 2 and np.all(energy == energy[0]):
        raise InputError(
            f"all {energy.size} axis values are equal ({x[0]:g}); expected at least "
            f"{MIN_POINTS} distinct values",
            shown,
            int(p.lines[0]),
        )
    return energy


def _check_negative_n(p: _Parsed, lay: _Layout, shown: str) -> None:
    """Refuse an n column that is mostly negative; warn about a few negative n.

    N = n + i k with n >= 0 in either time convention (exp(+iwt) tables flip the sign of k,
    not of n), so a negative n is a sign or column error: squared, it turns eps2 negative and
    the KK test then reports the whole spectrum inconsistent by orders of magnitude.
    """
    n = p.v1 if lay.quantity == "nk" else (p.nk_check[0] if p.nk_check is not None else None)
    if n is None:
        return
    neg = n < 0
    if not neg.any():
        return
    i = _first(neg)
    if np.mean(neg) >= 0.5:
        raise InputError(
            f"negative refractive index n = {n[i]:g} ({int(neg.sum())} of {n.size} rows); "
            "expected n >= 0 (N = n + i k; an exp(+iwt) table changes the sign of k, not n)",
            shown,
            int(p.lines[i]),
        )
    warnings.warn(
        f"{shown}: negative refractive index n on {int(neg.sum())} row(s) (lines "
        f"{_lines_text(p.lines[neg])}); kept as measured, but (n + i k)^2 then has eps2 < 0 "
        "there",
        RuntimeWarning,
        stacklevel=3,
    )


def _values_to_eps(p: _Parsed, lay: _Layout, shown: str):
    _check_negative_n(p, lay, shown)
    with np.errstate(over="ignore", invalid="ignore"):
        if lay.quantity == "nk":
            eps = nk_to_eps(p.v1, p.v2)
        else:
            eps = p.v1 + 1j * p.v2
        bad = ~np.isfinite(eps)
    if bad.any():
        i = _first(bad)
        raise InputError(
            "values too large: eps1 or eps2 is not a finite number; expected moderate values",
            shown,
            int(p.lines[i]),
        )
    if p.nk_check is not None:
        with np.errstate(over="ignore", invalid="ignore"):
            other = nk_to_eps(*p.nk_check)
            off = ~(np.abs(other - eps) <= _NK_EPS_RTOL * np.maximum(np.abs(eps), 1e-12))
        if off.any():
            i = _first(off)
            raise InputError(
                "columns n,k and eps1,eps2 disagree ((n+ik)^2 != eps1+i eps2 within 1e-3); "
                "expected one pair, or both describing the same data",
                shown,
                int(p.lines[i]),
            )
    if p.s1 is None:
        return eps, None, None
    for s in (p.s1, p.s2):
        bad = s < 0
        if bad.any():
            i = _first(bad)
            raise InputError(
                f"negative uncertainty {s[i]:g}; expected a standard uncertainty >= 0",
                shown,
                int(p.lines[i]),
            )
    if lay.sigma_kind == "eps":
        return eps, p.s1.copy(), p.s2.copy()
    n, k = (p.v1, p.v2) if lay.quantity == "nk" else eps_to_nk(eps)
    with np.errstate(over="ignore", invalid="ignore"):
        s1, s2 = sigma_nk_to_eps(n, k, p.s1, p.s2)
        bad = np.isinf(s1) | np.isinf(s2)
    if bad.any():
        i = _first(bad)
        raise InputError(
            "uncertainty too large to propagate to eps; expected moderate values",
            shown,
            int(p.lines[i]),
        )
    return eps, s1, s2


def _lines_text(lines, limit: int = 6) -> str:
    lines = [str(int(x)) for x in lines]
    if len(lines) > limit:
        return ", ".join(lines[:limit]) + f" and {len(lines) - limit} more"
    return ", ".join(lines)


def _order_note(x: np.ndarray, lines: np.ndarray) -> str | None:
    d = np.diff(x)
    if np.all(d >= 0):
        return None
    if np.all(d <= 0):
        return "sorted: axis was descending in the file"
    i = _first(d < 0) + 1
    return f"sorted: axis was not monotonic in the file (line {lines[i]} goes back)"


def _collapse(energy, eps, s1, s2, lines, raw_values, lay: _Layout, conj: bool):
    """Apply the duplicate rule to energy-sorted arrays; return arrays and notes.

    ``raw_values`` holds the numbers as written (columns v1, v2[, s1, s2]). Differing rows are
    averaged on them, uncertainties combined as sqrt(sum s_i^2)/m in the file's own
    quantity, and the average converted to eps like a single row (conjugated when ``conj``).
    """
    uniq, start, counts = np.unique(energy, return_index=True, return_counts=True)
    if uniq.size == energy.size:
        return energy, eps, s1, s2, lines, []
    same_groups, avg_groups = [], []
    keep_eps = eps[start].copy()
    keep_s1 = None if s1 is None else s1[start].copy()
    keep_s2 = None if s2 is None else s2[start].copy()
    for g, (a, m) in enumerate(zip(start, counts, strict=True)):
        if m == 1:
            continue
        sl = slice(a, a + m)
        block = raw_values[sl]
        if np.all((block == block[0]) | (np.isnan(block) & np.isnan(block[0]))):
            same_groups.append(lines[sl])
            continue
        avg_groups.append(lines[sl])
        v1, v2 = block[:, 0].mean(), block[:, 1].mean()
        avg = complex(nk_to_eps(v1, v2)) if lay.quantity == "nk" else complex(v1, v2)
        keep_eps[g] = np.conj(avg) if conj else avg
        if keep_s1 is not None:
            t1, t2 = (np.sqrt(np.sum(block[:, c] ** 2)) / m for c in (2, 3))
            if lay.sigma_kind == "nk":
                n, k = (v1, v2) if lay.quantity == "nk" else eps_to_nk(avg)
                t1, t2 = sigma_nk_to_eps(n, k, t1, t2)
            keep_s1[g], keep_s2[g] = t1, t2
    notes = []
    if same_groups:
        n_drop = sum(len(g) - 1 for g in same_groups)
        desc = "; ".join(_lines_text(g) for g in same_groups[:5])
        more = f"; and {len(same_groups) - 5} more groups" if len(same_groups) > 5 else ""
        notes.append(
            f"duplicates: {n_drop} row(s) repeating an earlier row at the same axis value were "
            f"collapsed to the first (lines {desc}{more})"
        )
    if avg_groups:
        desc = "; ".join(_lines_text(g) for g in avg_groups[:5])
        more = f"; and {len(avg_groups) - 5} more groups" if len(avg_groups) > 5 else ""
        notes.append(
            f"duplicates: rows at the same axis value with different values were averaged "
            f"(lines {desc}{more})"
        )
    return uniq, keep_eps, keep_s1, keep_s2, lines[start], notes


def _check_options(axis, quantity, convention) -> tuple[str | None, str | None]:
    ax = None
    if axis is not None:
        ax = _h.axis_from_option(str(axis))
        if ax is None:
            raise InputError(f"unknown axis {axis!r}; expected one of {', '.join(_AXIS_CHOICES)}")
    q = None
    if quantity is not None:
        q = str(quantity).strip().lower()
        if q not in QUANTITIES:
            raise InputError(f"unknown quantity {quantity!r}; expected nk or eps")
    if convention not in CONVENTIONS:
        raise InputError(f"unknown convention {convention!r}; expected {', '.join(CONVENTIONS)}")
    return ax, q


# ------------------------------------------------------------------------------------------
# public entry point
# ------------------------------------------------------------------------------------------
def read_table(
    path,
    *,
    axis: str | None = None,
    quantity: str | None = None,
    name: str | None = None,
    convention: str = "auto",
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
    quantity : {"nk", "eps"}, optional
        What the two value columns hold. Needed when the file has no header; must agree with
        the header otherwise.
    name : str, optional
        Label of the source; the file stem by default.
    convention : {"auto", "exp(-iwt)", "exp(+iwt)"}
        Time-dependence convention of the file. ``"auto"`` detects it from the sign of k or
        eps2 (:func:`kkcheck.units.detect_convention`).

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
    raw = _read_bytes(p, shown)
    digest = hashlib.sha256(raw).hexdigest()
    if not raw:
        raise InputError("empty file: expected a table of axis and value columns", shown)
    text, encoding = _decode(raw, shown)
    lines = _split_lines(text)
    if not lines.content:
        raise InputError(
            "no data rows (only comments or blank lines): expected a table of axis and value "
            "columns",
            shown,
        )
    bodies = [b for _, b in lines.content]
    delim = _sniff(bodies[1:] if len(bodies) > 1 else bodies)
    first_line, first_body = lines.content[0]
    first_cells = _trim(_cells(first_body, delim, shown, first_line))
    notes: list[str] = []
    if encoding != "utf-8":
        notes.append(f"encoding: read as {encoding}")
    if first_cells and not _number_like(first_cells[0]):
        data = lines.content[1:]
        if not data:
            raise InputError(
                "header row but no data rows: expected rows of numbers after the header",
                shown,
                first_line,
            )
        ncols = len(_trim(_cells(data[0][1], delim, shown, data[0][0])))
        names = _header_names(first_body, delim, ncols, shown, first_line)
        _too_few_columns(len(names), shown, first_line)
        lay = _layout_from_header(names, axis_opt, quantity_opt, shown, first_line)
        header_line = first_line
    else:
        data = lines.content
        ncols = len(first_cells)
        _too_few_columns(ncols, shown, first_line)
        lay = _layout_from_comment(lines, first_line, delim, ncols, axis_opt, quantity_opt)
        if lay is not None:
            header_line = lay[1]
            notes.append(f"header: taken from the comment at line {header_line}")
            lay = lay[0]
        else:
            lay = _layout_without_header(ncols, axis_opt, quantity_opt, shown, first_line)
            header_line = None
    rows = list(zip((ln for ln, _ in data), _split_all(data, delim, shown), strict=True))
    parsed = _parse_rows(rows, lay, delim, shown, header_line)
    energy = _check_axis(parsed, lay, shown)
    eps, s1, s2 = _values_to_eps(parsed, lay, shown)

    # sign convention, decided on the imaginary part as written
    imag_written = parsed.v2
    check = detect_convention(imag_written)
    which = "k" if lay.quantity == "nk" else "eps2"
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

    # order and duplicates
    order = np.argsort(energy, kind="stable")
    note = _order_note(parsed.axis_values, parsed.lines)
    if note:
        notes.append(note)
    raw_values = np.column_stack(
        [parsed.v1, parsed.v2] + ([parsed.s1, parsed.s2] if parsed.s1 is not None else [])
    )[order]
    energy, eps, s1, s2, rows_out, dup_notes = _collapse(
        energy[order],
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
        warnings.warn(
            f"{shown}: rows with the same axis value but different values were averaged "
            "(see the dataset's provenance notes)",
            RuntimeWarning,
            stacklevel=2,
        )
    if energy.size < MIN_POINTS:
        raise InputError(
            f"only {energy.size} distinct axis value(s); expected at least {MIN_POINTS} points",
            shown,
            int(parsed.lines[-1]),
        )
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
    )


def _number_like(tok: str) -> bool:
    """A number, or something meant as one (nan, inf, decimal comma): not a header name."""
    return bool(
        _NUMBER.fullmatch(tok) or _NONFINITE.fullmatch(tok) or _DECIMAL_COMMA.fullmatch(tok)
    )


def _too_few_columns(ncols: int, shown: str, lineno: int) -> None:
    if ncols == 1:
        raise InputError(
            "only one column; expected an axis column and two value columns (n,k or eps1,eps2)",
            shown,
            lineno,
        )
    if ncols == 2:
        raise InputError(
            "only two columns; expected an axis column and two value columns (n,k or eps1,eps2)",
            shown,
            lineno,
        )


def _layout_from_comment(lines: _Lines, first_line, delim, ncols, axis_opt, quantity_opt):
    """Header kept in the last whole-line comment before the data, if it fully parses."""
    before = [ln for ln in lines.comments if ln < first_line]
    if not before:
        return None
    ln = max(before)
    body = lines.comments[ln]
    if not body:
        return None
    try:
        names = _header_names(body, delim, ncols, "", ln)
        if len(names) != ncols:
            return None
        if any(_h.parse_column_name(n).kind in ("unknown", "axis_bad_unit") for n in names):
            return None
        return _layout_from_header(names, axis_opt, quantity_opt, "", ln), ln
    except InputError:
        return None
