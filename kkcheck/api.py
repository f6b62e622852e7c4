"""Input handling of the Python API and the command line: what ``inputs`` may be, one BLAS thread.

:func:`kkcheck.check` and :func:`kkcheck.fit` accept, for ``inputs``,

* one path (``"film.csv"`` or a :class:`pathlib.Path`), or ``"-"`` for standard input;
* a sequence of paths, ``{"path", "axis", "quantity", "name", "convention"}`` dicts or
  :class:`~kkcheck.job.InputSpec` records;
* a :class:`pandas.DataFrame` whose columns are named as a file header would name them
  (``wavelength_nm, n, k``, ``"Energy (eV)", eps1, eps2``, ...): it goes through the same
  reader as a file, with every check and note;
* an ``(energy_ev, eps)`` pair of arrays (photon energy [eV], complex eps in exp(-i w t));
* a :class:`~kkcheck.spectrum.Dataset`;

or a list mixing these. :func:`read_any` turns them into Datasets; :func:`select_range` keeps
an energy window; :func:`parse_range` reads ``"400:1000nm"``-style windows;
:func:`one_blas_thread` pins BLAS to one thread for a job.
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import re
import sys
import tempfile
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np

from .errors import InputError
from .spectrum import Dataset

__all__ = [
    "BLAS_THREAD_VARIABLES",
    "pin_blas_environment",
    "one_blas_thread",
    "as_input_list",
    "read_any",
    "parse_range",
    "select_range",
]

#: Environment variables the common BLAS/OpenMP builds read once, when numpy loads.
BLAS_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def pin_blas_environment() -> None:
    """Ask for one BLAS thread unless the user chose a number (effective before numpy loads).

    The stages solve many small dense problems; threaded BLAS on them mostly contends with
    itself and with batch workers (measured 5x slower per QR under load on two cores).
    """
    for var in BLAS_THREAD_VARIABLES:
        os.environ.setdefault(var, "1")


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """One BLAS thread inside the block, restored afterwards.

    When numpy was loaded before kkcheck (the environment variables came too late), the limit
    is set through ``threadpoolctl`` if it is installed; without it the block runs with the
    threads numpy already has (the Python API then matches the command line only if numpy was
    imported after kkcheck, or ``OPENBLAS_NUM_THREADS=1`` was set).
    """
    if not _late_numpy:  # the environment variables were read when numpy loaded
        yield
        return
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        yield
        return
    with threadpool_limits(limits=1, user_api="blas"):
        yield


#: True when numpy was already loaded when kkcheck was imported (the variables came too late).
_late_numpy = bool(getattr(sys.modules.get("kkcheck"), "_LATE_NUMPY", False))


# ------------------------------------------------------------------------------------- inputs


def _is_frame(x) -> bool:
    return type(x).__name__ == "DataFrame" and hasattr(x, "to_csv")


def _is_pair(x) -> bool:
    if not isinstance(x, tuple) or len(x) != 2:
        return False
    return all(isinstance(a, np.ndarray) or isinstance(a, (list, tuple)) for a in x) and not all(
        isinstance(a, str) for a in x
    )


def as_input_list(inputs) -> list:
    """``inputs`` as a list of items (a single path, frame, pair or Dataset becomes a list of one).

    Raises
    ------
    kkcheck.errors.InputError
        Nothing given, or an item of a type kkcheck cannot read.
    """
    if isinstance(inputs, (str, os.PathLike, Dataset, dict)) or _is_frame(inputs):
        items = [inputs]
    elif _is_pair(inputs) and np.iscomplexobj(np.asarray(inputs[1])):
        items = [inputs]
    elif isinstance(inputs, Sequence) or isinstance(inputs, (set, frozenset)):
        items = list(inputs)
    else:
        raise InputError(
            f"cannot read inputs of type {type(inputs).__name__}; expected a path, a list of "
            "paths, a DataFrame, an (energy_ev, eps) pair of arrays or a Dataset"
        )
    if not items:
        raise InputError("no input files given; expected at least one table")
    return items


def _read_text_as_file(data: bytes, shown: str, spec) -> Dataset:
    """Read bytes with the file reader (same checks and notes), naming ``shown`` in errors."""
    from .io import read_table

    with tempfile.TemporaryDirectory(prefix="kkcheck-in-") as tmp:
        path = Path(tmp) / "table.csv"
        path.write_bytes(data)
        try:
            ds = read_table(
                path,
                axis=spec.axis,
                quantity=spec.quantity,
                name=spec.name or Path(shown.strip("<>")).stem,
                convention=spec.convention,
                columns=spec.columns,
            )
        except InputError as exc:
            msg = exc.message.replace(str(path), shown)
            raise InputError(msg, path=shown, line=exc.line) from None
    notes = tuple(n.replace(str(path), shown) for n in ds.provenance.notes)
    prov = dataclasses.replace(ds.provenance, path=shown, notes=notes)
    return dataclasses.replace(ds, provenance=prov)


def _dataset_from_pair(pair, name: str) -> Dataset:
    """A Dataset from ``(energy_ev, eps)`` arrays, sorted by energy, checked."""
    e = np.asarray(pair[0], dtype=float)
    eps = np.asarray(pair[1], dtype=complex)
    if e.ndim != 1 or eps.shape != e.shape:
        raise InputError(
            f"energy_ev has shape {e.shape} and eps {eps.shape}; expected two 1-D arrays of "
            "equal length",
            path=name,
        )
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(eps))):
        raise InputError("non-finite values; expected finite energy_ev and eps", path=name)
    if e.size and e.min() <= 0:
        raise InputError("energy_ev must be > 0 (photon energy in eV)", path=name)
    order = np.argsort(e, kind="stable")
    e, eps = e[order], eps[order]
    if np.any(np.diff(e) == 0):
        raise InputError("repeated energies; expected each energy once", path=name)
    notes = ("built from arrays: energy_ev [eV], complex eps taken as exp(-iwt)",)
    if np.any(order != np.arange(order.size)):
        notes += ("sorted by energy",)
    from .spectrum import Provenance

    prov = Provenance(path=name, rows=order + 1, notes=notes)
    return Dataset(Path(name.strip("<>")).stem, e, eps, provenance=prov)


def _spec_of(item, options):
    from .job import InputSpec, input_specs

    if isinstance(item, InputSpec):
        return item
    return input_specs([item], options)[0]


def _read_one(item, index: int, options):
    """(InputSpec, Dataset) of one input item."""
    from .job import InputSpec

    if isinstance(item, Dataset):
        return InputSpec(item.provenance.path or f"<Dataset {item.name}>", name=item.name), item
    if _is_frame(item):
        shown = f"<DataFrame {index}>"
        spec = InputSpec(shown, options.axis, options.quantity, None, options.convention)
        text = item.to_csv(index=False, lineterminator="\n").encode("utf-8")
        return spec, _read_text_as_file(text, shown, spec)
    if _is_pair(item):
        shown = f"<arrays {index}>"
        return InputSpec(shown), _dataset_from_pair(item, shown)
    spec = _spec_of(item, options)
    if spec.path == "-":
        spec = dataclasses.replace(spec, path="<stdin>", name=spec.name or "stdin")
        return spec, _read_text_as_file(sys.stdin.buffer.read(), "<stdin>", spec)
    return spec, read_spec(spec, options)


#: Quantities read as normal-incidence reflectance (turned into n,k by the reflectance stage).
REFLECTANCE_QUANTITIES = ("R", "reflectance")


def read_spec(spec, options=None):
    """Read one file input: a :class:`Dataset`, or a reflectance table for quantity ``"R"``.

    The one place a file named by an :class:`kkcheck.job.InputSpec` is read (the command line,
    the Python API and job files all come here).
    """
    if spec.quantity in REFLECTANCE_QUANTITIES:
        from .io.reflectance import read_reflectance

        scale = getattr(options, "reflectance_scale", "auto") if options is not None else "auto"
        return read_reflectance(spec.path, axis=spec.axis, scale=scale, name=spec.name)
    from .io import read_table

    return read_table(
        spec.path,
        axis=spec.axis,
        quantity=spec.quantity,
        name=spec.name,
        convention=spec.convention,
        columns=spec.columns,
    )


def read_any(inputs, options) -> tuple[tuple, tuple[Dataset, ...]]:
    """Read every input item; returns ``(specs, datasets)`` (first error stops).

    Parameters
    ----------
    inputs
        See the module docstring.
    options : kkcheck.job.JobOptions
        Reading defaults (``axis``, ``quantity``, ``convention``) and ``range_ev``.
    """
    specs, out, names = [], [], set()
    for i, item in enumerate(as_input_list(inputs), start=1):
        spec, ds = _read_one(item, i, options)
        if ds.name in names:  # two sources with one name: keep both apart
            ds = dataclasses.replace(ds, name=f"{ds.name}#{i}")
        names.add(ds.name)
        specs.append(spec)
        out.append(ds)
    window = getattr(options, "range_ev", None)
    if window is not None:  # a reflectance table keeps its whole window: its KK phase needs it
        out = [select_range(ds, *window) if isinstance(ds, Dataset) else ds for ds in out]
    return tuple(specs), tuple(out)


# -------------------------------------------------------------------------------------- range


_NUMBER = r"([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)"
_RANGE = re.compile(rf"^{_NUMBER}\s*:\s*{_NUMBER}\s*(.*)$")


def parse_range(text: str) -> tuple[float, float]:
    """``"LO:HI UNIT"`` (``400:1000nm``, ``0.5:4eV``, ``2000:8000 cm-1``) as (lo, hi) in eV.

    The unit is any axis unit the reader knows (nm, um, eV, cm-1, THz, rad/s and their
    spellings); without one, eV. Wavelengths turn round: 400:1000nm is 1.24-3.1 eV.

    Raises
    ------
    kkcheck.errors.InputError
        Not of the form LO:HI[unit], an unknown unit, or an empty or non-positive window.
    """
    from .io.headers import AXIS_UNIT_TOKENS, normalize_unit
    from .units import to_energy_ev

    s = str(text).strip()
    expected = "expected LO:HI with a unit, e.g. 400:1000nm or 0.5:4eV"
    m = _RANGE.match(s)
    if m is None:
        raise InputError(f"range {s!r} not understood; {expected}")
    lo, hi, unit_text = float(m.group(1)), float(m.group(2)), m.group(3).strip()
    axis = AXIS_UNIT_TOKENS.get(normalize_unit(unit_text), None) if unit_text else "energy_ev"
    if axis is None:
        known = "nm, um, eV, cm-1, THz, rad/s"
        raise InputError(f"unknown unit {unit_text!r} in range {s!r}; expected one of {known}")
    if not (np.isfinite(lo) and np.isfinite(hi) and lo > 0 and hi > 0 and lo != hi):
        raise InputError(f"range {s!r} must have two different positive ends")
    e = np.sort(to_energy_ev(np.array([lo, hi]), axis))
    return float(e[0]), float(e[1])


def select_range(ds: Dataset, lo_ev: float, hi_ev: float) -> Dataset:
    """The points of ``ds`` with lo_ev <= energy <= hi_ev (ends +-1e-12 relative; noted).

    Raises
    ------
    kkcheck.errors.InputError
        No point of the source lies in the window.
    """
    slack = 1e-12  # relative: an end given as 400 nm keeps the point read as 400 nm
    keep = (ds.energy_ev >= lo_ev * (1 - slack)) & (ds.energy_ev <= hi_ev * (1 + slack))
    if keep.all():
        return ds
    where = ds.provenance.path or ds.name
    if not keep.any():
        a, b = ds.range_ev
        raise InputError(
            f"no point in the range {lo_ev:.6g}-{hi_ev:.6g} eV (the table spans "
            f"{a:.6g}-{b:.6g} eV); expected a range that overlaps the data",
            path=where,
        )
    n = ds.energy_ev.size

    def cut(obj):
        changes = {}
        for f in dataclasses.fields(obj):
            v = getattr(obj, f.name)
            if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == n:
                changes[f.name] = v[keep]
        return changes

    note = (f"range {lo_ev:.6g}-{hi_ev:.6g} eV selected: {int(keep.sum())} of {n} points kept",)
    prov = ds.provenance
    prov = dataclasses.replace(prov, **cut(prov), notes=tuple(prov.notes) + note)
    return dataclasses.replace(ds, **cut(ds), provenance=prov)
