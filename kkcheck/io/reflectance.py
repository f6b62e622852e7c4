"""Reading normal-incidence reflectance tables (R against any supported axis).

What is read
------------
Text as :func:`kkcheck.io.read.read_table` reads it (encoding, ``#`` comments, line numbers,
delimiter sniffed from the data lines; :mod:`kkcheck.io.text`, :mod:`kkcheck.io.cells`), with
two or three columns: the axis (header spellings of :mod:`kkcheck.io.headers`, or ``axis=``
for a file without a header), R, and optionally its standard uncertainty.

R column names (case and separators ignored): ``R``, ``reflectance``, ``refl``, with an
optional unit: ``R (%)``, ``R_percent``, ``reflectance [%]`` (percent) or ``R (fraction)``,
``R (-)`` (fraction). Uncertainty: ``sigma_R``, ``dR``, ``R_err`` (same scale as R).

Fraction or percent, in this order (the first that applies decides, and a note says which):

1. the ``scale=`` option (``"fraction"`` or ``"percent"``);
2. the unit in the R header (``%`` / ``percent`` or ``fraction`` / ``-`` / ``1``);
3. detection: percent when the largest R exceeds 1.0, else fraction. A percent table whose
   reflectance never exceeds 1 % would be read as a fraction: state ``scale=`` for such data.

Then every R must lie in [0, 1] as a fraction (an error names the first line outside);
R = 0 or 1 exactly is refused too, since ln R must be finite for the phase.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..spectrum import Provenance, readonly_array
from ..units import to_energy_ev
from .cells import cells, number, number_like, sniff
from .headers import axis_from_option, parse_column_name
from .text import decode, read_bytes, split_lines

__all__ = ["ReflectanceTable", "read_reflectance", "SCALES"]

#: Values of ``scale=``.
SCALES = ("auto", "fraction", "percent")

_R_WORDS = {"r", "reflectance", "refl", "reflectivity"}
_SIGMA_WORDS = {"sigmar", "dr", "rerr", "sigmareflectance", "rsigma", "rstd"}
_PERCENT = {"%", "percent", "pct"}
_FRACTION = {"fraction", "frac", "-", "1", ""}
_UNIT = re.compile(
    r"^(?P<word>[A-Za-z_ ]+?)\s*"
    r"(?:[\(\[](?P<u1>[^\)\]]*)[\)\]]|_(?P<u2>%|percent|pct|fraction|frac))\s*$"
)


@dataclass(frozen=True)
class ReflectanceTable:
    """One reflectance table on the canonical axis.

    Attributes
    ----------
    name : str
        Label of the source (file stem by default).
    energy_ev : numpy.ndarray
        Photon energy [eV], strictly increasing.
    reflectance : numpy.ndarray
        R as a fraction, 0 < R < 1.
    sigma_reflectance : numpy.ndarray or None
        Its standard uncertainty (fraction), None when the file had none.
    axis : str
        The axis unit of the file.
    scale : str
        ``"fraction"`` or ``"percent"``: how R was written.
    provenance : Provenance
        File, digest, 1-based line of each point, reader notes (the scale rule used).
    """

    name: str
    energy_ev: np.ndarray
    reflectance: np.ndarray
    sigma_reflectance: np.ndarray | None
    axis: str
    scale: str
    provenance: Provenance

    def __post_init__(self):
        object.__setattr__(self, "energy_ev", readonly_array(self.energy_ev))
        object.__setattr__(self, "reflectance", readonly_array(self.reflectance))
        if self.sigma_reflectance is not None:
            object.__setattr__(self, "sigma_reflectance", readonly_array(self.sigma_reflectance))

    def __len__(self) -> int:
        return int(self.energy_ev.size)


def _r_column(text: str) -> tuple[str, str | None] | None:
    """("r" or "sigma", scale or None) when ``text`` names R or its uncertainty."""
    raw = text.strip().strip("\"'")
    key = re.sub(r"[\s_\-.]+", "", raw.lower())
    if key in _R_WORDS:
        return "r", None
    if key in _SIGMA_WORDS:
        return "sigma", None
    m = _UNIT.match(raw)
    if not m:
        return None
    word = re.sub(r"[\s_\-.]+", "", m.group("word").lower())
    unit = (m.group("u1") if m.group("u1") is not None else m.group("u2") or "").strip().lower()
    scale = "percent" if unit in _PERCENT else "fraction" if unit in _FRACTION else None
    if scale is None:
        return None
    if word in _R_WORDS:
        return "r", scale
    if word in _SIGMA_WORDS:
        return "sigma", scale
    return None


def _layout(first: list[str], axis_opt: str | None, shown: str, lineno: int):
    """(axis unit, header scale, has header, has sigma) from the first content row."""
    if all(number_like(c) for c in first):
        if axis_opt is None:
            raise InputError("no header: expected axis= for a reflectance table", shown, lineno)
        return axis_opt, None, False, len(first) >= 3
    if len(first) not in (2, 3):
        raise InputError("expected a header with an axis, R and optionally sigma_R", shown, lineno)
    ax = parse_column_name(first[0])
    if ax.kind != "axis":
        raise InputError(
            f"expected an axis with a unit in the first column, got {first[0]!r}", shown, lineno
        )
    if axis_opt is not None and axis_opt != ax.axis:
        raise InputError(f"axis={axis_opt} given but the header says {ax.axis}", shown, lineno)
    r = _r_column(first[1])
    if r is None or r[0] != "r":
        raise InputError(
            f"expected R, reflectance or R (%) in the second column, got {first[1]!r}",
            shown,
            lineno,
        )
    if len(first) == 3:
        s = _r_column(first[2])
        if s is None or s[0] != "sigma":
            raise InputError(
                f"expected sigma_R in the third column, got {first[2]!r}", shown, lineno
            )
    return ax.axis, r[1], True, len(first) == 3


def _scale(r: np.ndarray, option: str, header: str | None) -> tuple[str, str]:
    if option != "auto":
        return option, f"reflectance: read as {option} (scale= given)"
    if header is not None:
        return header, f"reflectance: read as {header} (header unit)"
    if np.max(r) > 1.0:
        return "percent", "reflectance: read as percent (largest value above 1)"
    return "fraction", "reflectance: read as a fraction (no value above 1; state scale= if not)"


def read_reflectance(
    path, *, axis: str | None = None, scale: str = "auto", name: str | None = None
) -> ReflectanceTable:
    """Read one normal-incidence reflectance table (see the module docstring for the rules).

    Parameters
    ----------
    path : str or os.PathLike
        The table file (hashed into the provenance).
    axis : str, optional
        Axis unit (as for :func:`kkcheck.io.read.read_table`); needed without a header.
    scale : {"auto", "fraction", "percent"}
        How R is written; ``"auto"`` applies the rule of the module docstring.
    name : str, optional
        Label of the source; the file stem by default.

    Returns
    -------
    ReflectanceTable

    Raises
    ------
    kkcheck.errors.InputError
        One line naming the file and line: unreadable text, bad header, a cell that is not a
        number, an axis value <= 0, R outside (0, 1) after scaling, fewer than 8 points,
        duplicate energies.
    """
    if scale not in SCALES:
        raise InputError(f"unknown scale {scale!r}; expected {', '.join(SCALES)}")
    axis_opt = None
    if axis is not None:
        axis_opt = axis_from_option(str(axis))
        if axis_opt is None:
            raise InputError(f"unknown axis {axis!r}")
    p = Path(path)
    shown = str(path)
    raw = read_bytes(p, shown)
    if not raw:
        raise InputError("empty file: expected a reflectance table", shown)
    text, _ = decode(raw, shown)
    content = split_lines(text).content
    if not content:
        raise InputError("no data rows: expected a reflectance table", shown)
    delim = sniff([b for _, b in content[1:]] or [content[0][1]])
    first = cells(content[0][1], delim, shown, content[0][0])
    unit, head_scale, has_header, has_sigma = _layout(first, axis_opt, shown, content[0][0])
    data = content[1:] if has_header else content
    ncol = 3 if has_sigma else 2
    vals = np.empty((len(data), ncol))
    lines = np.empty(len(data), dtype=int)
    names = ("axis", "R", "sigma_R")
    for i, (ln, body) in enumerate(data):
        row = [c for c in cells(body, delim, shown, ln)]
        while row and row[-1] == "":
            row.pop()
        if len(row) != ncol:
            raise InputError(f"expected {ncol} cells, found {len(row)}", shown, ln)
        for j in range(ncol):
            vals[i, j] = number(row[j], shown, ln, j + 1, names[j], sigma=j == 2)
        lines[i] = ln
    return _table(vals, lines, unit, scale, head_scale, shown, raw, p, name)


def _table(vals, lines, unit, scale, head_scale, shown, raw, p: Path, name) -> ReflectanceTable:
    if vals.shape[0] < 8:
        raise InputError(f"{vals.shape[0]} reflectance rows; expected at least 8", shown)
    bad = np.flatnonzero(vals[:, 0] <= 0)
    if bad.size:
        raise InputError("expected axis values > 0", shown, int(lines[bad[0]]))
    used, note = _scale(vals[:, 1], scale, head_scale)
    factor = 0.01 if used == "percent" else 1.0
    r = vals[:, 1] * factor
    out = np.flatnonzero((r <= 0) | (r >= 1))
    if out.size:
        j = int(out[0])
        raise InputError(
            f"R = {vals[j, 1]:g} read as {used} is outside (0, 1)", shown, int(lines[j])
        )
    energy = to_energy_ev(vals[:, 0], unit)
    order = np.argsort(energy, kind="stable")
    energy = energy[order]
    dup = np.flatnonzero(np.diff(energy) <= 0)
    if dup.size:
        raise InputError(
            "duplicate energy in a reflectance table", shown, int(lines[order][dup[0] + 1])
        )
    sigma = None
    if vals.shape[1] == 3:
        sigma = vals[order, 2] * factor
        if np.any(sigma[np.isfinite(sigma)] < 0):
            raise InputError("expected sigma_R >= 0", shown)
    notes = [note]
    if not np.all(order == np.arange(order.size)):
        notes.append("order: rows sorted by increasing photon energy")
    return ReflectanceTable(
        name=p.stem if name is None else name,
        energy_ev=energy,
        reflectance=r[order],
        sigma_reflectance=sigma,
        axis=unit,
        scale=used,
        provenance=Provenance(
            path=shown,
            sha256=hashlib.sha256(raw).hexdigest(),
            rows=lines[order],
            notes=tuple(notes),
        ),
    )
