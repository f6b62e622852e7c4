"""Writers: CSV tables with unit-bearing headers and a provenance block, JSON, text and bytes.

Every file kkcheck writes (tables, JSON, HTML, Markdown, figures) goes through
:func:`atomic_write_bytes`:

* the content goes to a temporary file in the target's folder (created with mode 0666 minus
  the umask, as any other new file), is flushed and fsynced, and then replaces the target with
  :func:`os.replace`, so a reader never sees half a file and an interrupted run leaves the old
  file intact; the temporary file is removed on any failure;
* a failure of the file system (no permission, read-only, disk full, path too long) becomes a
  one-line :class:`~kkcheck.errors.OutputError` naming the path and the cause;
* the writers refuse (:class:`~kkcheck.errors.InputError`) to write onto any path in
  ``overwrite_protect`` (the run's input files), comparing resolved paths and, where both
  exist, :func:`os.path.samefile` (which also catches hard links).

Which files a command may write at all (inputs, symlinks, files kkcheck did not write) is
decided before anything is written, by :mod:`kkcheck.outputs`.

Every text cell written into a CSV passes :func:`spreadsheet_safe`.

References
----------
.. [1] OWASP Foundation, "CSV Injection" (community page; the leading characters ``= + - @``,
   tab and carriage return that spreadsheets treat as the start of a formula). Common
   practice, cited from memory; see docs/references.md#csv-injection (and #posix-rename for
   the atomic replacement).
"""

from __future__ import annotations

import dataclasses
import enum
import hashlib
import json
import math
import os
import secrets
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, OutputError
from ..spectrum import Dataset, Spectrum
from ..units import AXIS_UNITS, from_energy_ev
from . import headers as _h

__all__ = [
    "write_table_csv",
    "render_table_csv",
    "write_json",
    "render_json",
    "write_text",
    "atomic_write_bytes",
    "spreadsheet_safe",
    "sha256_file",
    "check_not_input",
]

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


#: Leading characters that make a spreadsheet read a cell as a formula (OWASP, see above).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(text) -> str:
    """``text`` with a leading ``'`` when a spreadsheet would run it as a formula.

    Cells starting with ``= + - @``, a tab or a carriage return are prefixed with a single
    quote (OWASP "CSV injection" [1]_), so a source named ``=1+1`` stays the text ``=1+1``
    when the table is opened in a spreadsheet. Other text is returned unchanged.
    """
    t = str(text)
    return "'" + t if t.startswith(_FORMULA_START) else t


#: Name prefix of the staging folders of :mod:`kkcheck.outputs` (their entries are temporary).
_STAGING = ".kkcheck-staging-"


def fsync_dir(folder: Path) -> None:
    """Make a rename in ``folder`` durable (best effort: not every file system allows it)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        view = view[n:]


def atomic_write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically (temporary file, fsync, rename), honouring the umask.

    Parameters
    ----------
    path : str or os.PathLike
        Target file; its folder must exist. An existing file is replaced only by the complete
        new content; a symlink at ``path`` is replaced by the file (never followed).
    data : bytes
        The complete content.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    InputError
        The folder does not exist or ``path`` is a folder.
    OutputError
        The file system refused (no permission, read-only, disk full, path too long): one
        line naming the path and the cause. No temporary file is left behind.
    """
    target = Path(os.fspath(path))
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        raise InputError("output directory does not exist; expected an existing one", str(target))
    if target.is_dir() and not target.is_symlink():
        raise InputError("is a directory; expected a file path to write", str(target))
    tmp = parent / f".{target.name[:80]}.{secrets.token_hex(6)}.tmp"
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)  # 0666 & ~umask
    except OSError as exc:
        raise OutputError.from_os_error(exc, target) from None
    try:
        try:
            _write_all(fd, bytes(data))
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise OutputError.from_os_error(exc, target) from None
        raise
    if not any(part.startswith(_STAGING) for part in parent.parts):
        fsync_dir(parent)  # a staging folder's entries are renamed away: synced after commit
    return target


def _atomic_write(target: Path, text: str) -> None:
    atomic_write_bytes(target, text.encode("utf-8"))


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
#: round-off is ~1e-16, in the 16th-17th digit; 15 digits drop it and keep 5e-15 relative).
AXIS_DIGITS = 15
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
            out.append(spreadsheet_safe(str(v).translate(_TEXT_FORBIDDEN)))
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
    replaced by ``_`` so that the file splits unambiguously, and pass :func:`spreadsheet_safe`.
    """
    target = check_not_input(path, overwrite_protect)
    text = render_table_csv(
        data, axis=axis, provenance_lines=provenance_lines, inputs=overwrite_protect
    )
    _atomic_write(target, text)
    return target


def render_table_csv(data, *, axis: str = "energy_ev", provenance_lines=(), inputs=()) -> str:
    """The text :func:`write_table_csv` writes (``inputs`` listed with their sha256)."""
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
    for q in sorted({str(q) for q in inputs}):
        if Path(q).is_file():
            head.append(f"input {q} sha256={sha256_file(q)}")
    for line in provenance_lines:
        head += str(line).splitlines() or [""]
    out = ["# " + h.replace("\r", " ") for h in head]
    out.append(",".join([_AXIS_HEADER.get(axis, axis), *map(str, cols)]))
    columns = [_column_text(axis_values[order])]
    columns += [_column_text(frame[c].to_numpy()[order]) for c in cols]
    out.extend(map(",".join, zip(*columns, strict=True)))
    return "\n".join(out) + "\n"


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
    _atomic_write(target, render_json(obj, sort_keys=sort_keys, indent=indent))
    return target


def render_json(obj, *, sort_keys: bool = False, indent: int = 2) -> str:
    """The text :func:`write_json` writes (NaN and infinities as ``null``)."""
    text = json.dumps(
        _plain(obj), indent=indent, sort_keys=sort_keys, allow_nan=False, ensure_ascii=False
    )
    return text + "\n"


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
