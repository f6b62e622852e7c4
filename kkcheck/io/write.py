"""Writers: CSV tables with unit-bearing headers and a provenance block, and JSON.

Both writers

* write atomically: the content goes to a temporary file in the target's directory, is
  flushed to disk, and then replaces the target with :func:`os.replace`, so a reader never
  sees half a file and an interrupted run leaves the old file intact;
* refuse (:class:`~kkcheck.errors.InputError`) to write onto any path in
  ``overwrite_protect`` (the run's input files), comparing resolved paths and, where both
  exist, :func:`os.path.samefile` (which also catches hard links).
"""

from __future__ import annotations

import dataclasses
import enum
import hashlib
import json
import math
import os
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..spectrum import Dataset, Spectrum
from ..units import AXIS_UNITS, from_energy_ev
from . import headers as _h

__all__ = ["write_table_csv", "write_json", "write_text", "sha256_file", "check_not_input"]

#: Preferred column order after the axis column; other readable columns follow.
_ORDER = (
    "eps1",
    "eps2",
    "n",
    "k",
    "sigma_eps1",
    "sigma_eps2",
    "sigma_n",
    "sigma_k",
    "source",
    "row",
    "flags",
)
_TEXT_FORBIDDEN = str.maketrans({c: "_" for c in ',;#"\t\r\n'})


def sha256_file(path) -> str:
    """Hex sha256 digest of the file at ``path``, read in 1 MiB chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def check_not_input(path, overwrite_protect=()) -> Path:
    """Raise InputError if ``path`` is (or links to) one of ``overwrite_protect``.

    Returns the target as a :class:`~pathlib.Path`.
    """
    target = Path(path)
    resolved = target.resolve()
    for q in overwrite_protect:
        qp = Path(q)
        same = qp.resolve() == resolved
        if not same and target.exists() and qp.exists():
            try:
                same = os.path.samefile(target, qp)
            except OSError:
                same = False
        if same:
            raise InputError(
                f"refusing to write over input file {q}; expected an output path that is "
                "not an input",
                str(path),
            )
    return target


def _atomic_write(target: Path, text: str) -> None:
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("output directory does not exist; expected an existing one", str(target))
    if target.is_dir():
        raise InputError("is a directory; expected a file path to write", str(target))
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


# ------------------------------------------------------------------------------------------
# CSV
# ------------------------------------------------------------------------------------------
def _frame_of(data) -> tuple[pd.DataFrame, Dataset | None]:
    if isinstance(data, Dataset):
        return data.to_frame(), data
    if isinstance(data, Spectrum):
        return data.to_frame(), None
    if isinstance(data, pd.DataFrame):
        return data, None
    raise TypeError(f"expected a Dataset, Spectrum or DataFrame, got {type(data).__name__}")


#: Significant digits of an axis converted from eV on writing (the conversion's relative
#: round-off is ~1e-16; 12 digits keep every digit a table of measured data can carry).
AXIS_DIGITS = 12
#: Axis header where the canonical name is not a spelling the reader accepts.
_AXIS_HEADER = {"angular_frequency_rad_s": "angular_frequency_rad/s"}


def _column_text(values: np.ndarray) -> list[str]:
    """Cells of one column: floats as shortest round-trip repr, ints as ints, text sanitised."""
    arr = np.asarray(values)
    if arr.dtype.kind == "b":
        return [str(int(v)) for v in arr.tolist()]
    if arr.dtype.kind in "iu":
        return list(map(str, arr.tolist()))
    if arr.dtype.kind == "f":
        return list(map(repr, arr.astype(float).tolist()))
    out = []
    for v in arr.tolist():
        if isinstance(v, float):
            out.append(repr(v))
        elif isinstance(v, int) and not isinstance(v, bool):
            out.append(str(v))
        else:
            out.append(str(v).translate(_TEXT_FORBIDDEN))
    return out


def write_table_csv(
    path,
    data,
    *,
    axis: str = "energy_ev",
    provenance_lines=(),
    overwrite_protect=(),
) -> Path:
    """Write a table as CSV with unit-bearing headers and a ``#`` provenance block.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; its directory must exist.
    data : Dataset, Spectrum or pandas.DataFrame
        A frame needs an ``energy_ev`` column [eV]; every other column must be one the
        reader understands (see :mod:`kkcheck.io.headers`), so that the file reads back.
    axis : str
        Axis column to write, one of :data:`kkcheck.units.AXIS_UNITS` (``energy_ev``,
        ``wavelength_nm``, ...). The values are converted from ``energy_ev`` and rows are
        written in ascending order of that axis.
    provenance_lines : iterable of str
        What was done, one entry per line, written after ``# `` in the comment block.
    overwrite_protect : iterable of path
        The run's input files: each is listed in the comment block with its sha256 and none
        may be the output.

    Returns
    -------
    pathlib.Path
        The path written.

    Notes
    -----
    The comment block holds the kkcheck version, the UTC time of writing, the inputs with
    sha256, reader notes of a Dataset, and ``provenance_lines``. Floats are written with
    Python's shortest round-trip repr, NaN as ``nan``. Text cells have ``, ; # " tab CR LF``
    replaced by ``_`` so that the file splits unambiguously.
    """
    from .._version import __version__

    if axis not in AXIS_UNITS:
        raise ValueError(f"axis must be one of {', '.join(AXIS_UNITS)}, got {axis!r}")
    frame, ds = _frame_of(data)
    if "energy_ev" not in frame.columns:
        raise ValueError("the table needs an energy_ev column")
    unreadable = [
        c
        for c in frame.columns
        if c not in ("energy_ev", axis)
        and _h.parse_column_name(str(c)).kind in ("unknown", "axis_bad_unit")
    ]
    if unreadable:
        raise ValueError(
            f"columns {unreadable} would not read back; add their spelling to "
            "kkcheck.io.headers or drop them"
        )
    target = check_not_input(path, overwrite_protect)

    cols = [c for c in _ORDER if c in frame.columns]
    # the axis column is written once, first, from energy_ev (a frame's own copy is dropped)
    cols += [c for c in frame.columns if c not in cols and c not in ("energy_ev", axis)]
    axis_values = from_energy_ev(frame["energy_ev"].to_numpy(float), axis)
    order = np.argsort(axis_values, kind="stable")
    if axis != "energy_ev":  # conversion round-off (251.99999999999997 nm) is not data
        axis_values = np.array([float(f"{v:.{AXIS_DIGITS}g}") for v in axis_values.tolist()])

    head = [
        f"kkcheck {__version__}",
        f"written {datetime.now(timezone.utc).strftime('%Y-%m-%dT%H:%M:%SZ')} (UTC)",
        f"axis {axis}; time dependence exp(-iwt): eps = eps1 + i eps2, N = n + i k",
    ]
    if ds is not None and ds.provenance.path:
        head.append(f"source {ds.name}: {ds.provenance.path} sha256={ds.provenance.sha256}")
        head += [f"reader note: {n}" for n in ds.provenance.notes]
    for q in sorted({str(q) for q in overwrite_protect}):
        if Path(q).is_file():
            head.append(f"input {q} sha256={sha256_file(q)}")
    for line in provenance_lines:
        head += str(line).splitlines() or [""]
    out = ["# " + h.replace("\r", " ") for h in head]
    out.append(",".join([_AXIS_HEADER.get(axis, axis), *map(str, cols)]))
    columns = [_column_text(axis_values[order])]
    columns += [_column_text(frame[c].to_numpy()[order]) for c in cols]
    out.extend(map(",".join, zip(*columns, strict=True)))
    _atomic_write(target, "\n".join(out) + "\n")
    return target


# ------------------------------------------------------------------------------------------
# JSON
# ------------------------------------------------------------------------------------------
def _plain(obj):
    """Turn ``obj`` into JSON-ready Python values (NaN and +-inf become None)."""
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (int, np.integer)) and not isinstance(obj, enum.Enum):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, (complex, np.complexfloating)):
        return [_plain(obj.real), _plain(obj.imag)]
    if isinstance(obj, enum.Enum):
        return _plain(obj.value)
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if isinstance(obj, np.ndarray):
        return [_plain(v) for v in obj.tolist()] if obj.ndim else _plain(obj.item())
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, (set, frozenset)):
        return sorted(_plain(v) for v in obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _plain(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    raise TypeError(f"cannot write a {type(obj).__name__} as JSON")


def write_json(path, obj, *, sort_keys: bool = False, indent: int = 2, overwrite_protect=()):
    """Write ``obj`` as JSON, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; its directory must exist.
    obj : object
        dicts, lists, tuples, sets (sorted), str, bool, None, Python and numpy numbers,
        numpy arrays, complex numbers (as ``[re, im]``), enums (their value), paths and
        dataclasses (as dicts of their fields).
    sort_keys : bool
        Sort object keys.
    indent : int
        Indentation (2 by default).
    overwrite_protect : iterable of path
        Paths that must not be written (the run's inputs).

    Returns
    -------
    pathlib.Path
        The path written.

    Notes
    -----
    JSON has no NaN or infinity: both become ``null``. Dict keys become strings.
    """
    target = check_not_input(path, overwrite_protect)
    text = json.dumps(
        _plain(obj), indent=indent, sort_keys=sort_keys, allow_nan=False, ensure_ascii=False
    )
    _atomic_write(target, text + "\n")
    return target


def write_text(path, text: str, *, overwrite_protect=()):
    """Write ``text`` (UTF-8, LF line ends) atomically, refusing to touch ``overwrite_protect``.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    target = check_not_input(path, overwrite_protect)
    _atomic_write(target, text)
    return target
