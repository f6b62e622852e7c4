"""Value types that travel through the pipeline: one source (`Dataset`) and the merge (`Spectrum`).

Both are frozen dataclasses holding read-only numpy arrays on the canonical axis (photon
energy in eV, strictly increasing) with complex eps in the exp(-i w t) convention
(see :mod:`kkcheck.units`). Stages never modify them; they return new values.

Per-point flags are a bit mask (:class:`Flag`); the meaning of each bit is fixed here so that
every stage and every report agree.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pandas is imported where a frame is made (start-up time)
    import pandas as pd

__all__ = [
    "Flag",
    "Provenance",
    "Dataset",
    "Spectrum",
    "flag_names",
    "first_of_each_energy",
    "rounding_of_dataset",
]


class Flag(enum.IntFlag):
    """Per-point flag bits. A point with no bit set is plain data."""

    SPIKE = 1  #: isolated outlier (Hampel identifier on robust residuals)
    STEP = 2  #: first point after an unexplained jump (detector/grating changeover)
    OVERLAP = 4  #: lies where two or more sources overlap
    BLENDED = 8  #: value is an inverse-variance blend of several sources
    KK_REGION = 16  #: inside a region where the KK test found eps1 and eps2 inconsistent
    REPLACED = 32  #: value replaced by the KK-consistent prediction (repair)
    FILLED = 64  #: point added inside a gap by the repair
    NEGATIVE_LOSS = 128  #: eps2 < 0 beyond noise (gain in a passive medium)


def flag_names(value: int) -> list[str]:
    """Lower-case names of the bits set in ``value`` (``[]`` for none)."""
    return [f.name.lower() for f in Flag if int(value) & int(f)]


def first_of_each_energy(energy_ev) -> np.ndarray:
    """Indices of the first point at each distinct energy of a non-decreasing axis.

    The one rule for duplicate energies (two sources kept side by side in an overlap) in the
    stages that need a strictly increasing axis (sum rules, the pole-pair fit): the first point
    at an energy is used, in the merge's order.
    """
    e = np.asarray(energy_ev, float)
    if e.size == 0:
        return np.zeros(0, dtype=int)
    return np.flatnonzero(np.r_[True, np.diff(e) > 0])


def readonly_array(a, dtype=float) -> np.ndarray:
    """A read-only copy of ``a`` as ``dtype`` (what frozen result types hold)."""
    arr = np.array(a, dtype=dtype, copy=True)
    arr.setflags(write=False)
    return arr


_ro = readonly_array


@dataclass(frozen=True)
class Provenance:
    """Where a dataset came from.

    Attributes
    ----------
    path : str
        File path as given by the user ("" for data built in memory).
    sha256 : str
        Hex digest of the file's bytes ("" for data built in memory).
    rows : numpy.ndarray
        1-based line number in the file of each point, in the dataset's (sorted) order.
    notes : tuple of str
        What the reader did that a user should know (sorting, duplicates merged,
        convention converted).
    """

    path: str = ""
    sha256: str = ""
    rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Dataset:
    """One source of optical constants on the canonical axis.

    Attributes
    ----------
    name : str
        Short label for the source (file stem by default).
    energy_ev : numpy.ndarray
        Photon energy [eV], float64, strictly increasing, > 0.
    eps : numpy.ndarray
        Complex permittivity eps1 + i eps2 (exp(-i w t) convention), complex128.
    sigma_eps1, sigma_eps2 : numpy.ndarray or None
        Standard uncertainty of eps1 and eps2 (from uncertainty columns, propagated from
        n,k when the file gave n,k); None when the file had none.
    quantity : str
        What the file gave: ``"nk"`` or ``"eps"``. Noise estimation uses it, because noise
        that is uniform in n,k is not uniform in eps.
    axis : str
        The axis unit the file was written in (one of :data:`kkcheck.units.AXIS_UNITS`).
    convention : str
        Convention detected in the file: ``"exp(-iwt)"`` or ``"exp(+iwt)"``.
    converted : bool
        True when the imaginary part was negated to reach exp(-i w t).
    provenance : Provenance
        File, digest, row numbers and reader notes.
    value_quantum : numpy.ndarray or None
        Shape (N, 2): unit of the last printed digit of the two value cells of each point
        (n, k or eps1, eps2, in the file's own quantity; ``"1.2340"`` -> 1e-4), aligned with
        ``energy_ev``; None for data built in memory.
    """

    name: str
    energy_ev: np.ndarray
    eps: np.ndarray
    sigma_eps1: np.ndarray | None = None
    sigma_eps2: np.ndarray | None = None
    quantity: str = "eps"
    axis: str = "energy_ev"
    convention: str = "exp(-iwt)"
    converted: bool = False
    provenance: Provenance = field(default_factory=Provenance)
    value_quantum: np.ndarray | None = None

    def __post_init__(self):
        e = _ro(self.energy_ev, float)
        eps = _ro(self.eps, complex)
        if self.value_quantum is not None:
            q = _ro(self.value_quantum, float)
            if q.shape != (e.size, 2):
                raise ValueError("value_quantum must have shape (len(energy_ev), 2)")
            object.__setattr__(self, "value_quantum", q)
        if e.ndim != 1 or eps.shape != e.shape:
            raise ValueError("energy_ev and eps must be 1-D arrays of equal length")
        if e.size and (not np.all(np.isfinite(e)) or e[0] <= 0 or np.any(np.diff(e) <= 0)):
            raise ValueError("energy_ev must be finite, > 0 and strictly increasing")
        object.__setattr__(self, "energy_ev", e)
        object.__setattr__(self, "eps", eps)
        for name in ("sigma_eps1", "sigma_eps2"):
            s = getattr(self, name)
            if s is not None:
                s = _ro(s, float)
                if s.shape != e.shape:
                    raise ValueError(f"{name} must match energy_ev in length")
                object.__setattr__(self, name, s)
        if self.quantity not in ("nk", "eps"):
            raise ValueError("quantity must be 'nk' or 'eps'")

    @property
    def range_ev(self) -> tuple[float, float]:
        """(lowest, highest) photon energy [eV]."""
        return float(self.energy_ev[0]), float(self.energy_ev[-1])

    def to_dict(self) -> dict:
        """This source's entry in the ``inputs`` list of summary.json."""
        from .jsonsafe import json_float

        return {
            "path": self.provenance.path,
            "name": self.name,
            "sha256": self.provenance.sha256,
            "points": len(self),
            "axis": self.axis,
            "quantity": self.quantity,
            "range_ev": [json_float(self.range_ev[0]), json_float(self.range_ev[1])],
            "convention": self.convention,
            "converted": bool(self.converted),
            "notes": list(self.provenance.notes),
        }

    def __len__(self) -> int:
        return int(self.energy_ev.size)

    def to_frame(self) -> pd.DataFrame:
        """Columns ``energy_ev, eps1, eps2, n, k`` (+ ``sigma_eps1, sigma_eps2``, ``row``)."""
        from .units import eps_to_nk

        n, k = eps_to_nk(self.eps)
        d = {
            "energy_ev": self.energy_ev,
            "eps1": self.eps.real,
            "eps2": self.eps.imag,
            "n": n,
            "k": k,
        }
        if self.sigma_eps1 is not None:
            d["sigma_eps1"] = self.sigma_eps1
        if self.sigma_eps2 is not None:
            d["sigma_eps2"] = self.sigma_eps2
        if self.provenance.rows.size == self.energy_ev.size:
            d["row"] = self.provenance.rows
        import pandas as pd

        return pd.DataFrame(d)

    @classmethod
    def from_frame(cls, frame: pd.DataFrame, name: str = "frame", **kwargs) -> Dataset:
        """Build from a frame with ``energy_ev`` and either ``eps1, eps2`` or ``n, k``.

        Optional ``sigma_eps1``, ``sigma_eps2`` columns are kept. Rows are sorted by energy.
        """
        from .units import nk_to_eps

        f = frame.sort_values("energy_ev")
        if {"eps1", "eps2"} <= set(f.columns):
            eps = f["eps1"].to_numpy(float) + 1j * f["eps2"].to_numpy(float)
            kwargs.setdefault("quantity", "eps")
        elif {"n", "k"} <= set(f.columns):
            eps = nk_to_eps(f["n"].to_numpy(float), f["k"].to_numpy(float))
            kwargs.setdefault("quantity", "nk")
        else:
            raise ValueError("frame needs columns eps1, eps2 or n, k")
        s1 = f["sigma_eps1"].to_numpy(float) if "sigma_eps1" in f else None
        s2 = f["sigma_eps2"].to_numpy(float) if "sigma_eps2" in f else None
        return cls(name, f["energy_ev"].to_numpy(float), eps, s1, s2, **kwargs)


def rounding_of_dataset(ds: Dataset) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rounding standard uncertainty of eps1, eps2 and the zero-bound mask of one source.

    Parameters
    ----------
    ds : Dataset
        A source; without ``value_quantum`` the result is zeros and no bounds.

    Returns
    -------
    rounding_eps1, rounding_eps2 : numpy.ndarray
        [eps units], one per point.
    zero_bound : numpy.ndarray of bool
        True where the imaginary value (k or eps2) was printed as 0.

    Notes
    -----
    A value printed with last-digit unit q is uniform within +-q/2 of the printed value, so
    its standard uncertainty is q / sqrt(12) (GUM, JCGM 100:2008, section 4.3.7, rectangular
    distribution; from memory). A value printed as exactly 0 is a bound, |v| < q/2, and gets
    the whole quantum q as its uncertainty. The quantum of a cell is the finest among it and
    its two neighbours on each side (tables written as shortest decimals lose trailing zeros:
    ``2.710`` reads ``2.71``); a cell printed as 0 says nothing about the digits, so it takes
    the finest quantum of the column's nonzero cells. For an n,k source the n and k parts are
    propagated to eps with :func:`kkcheck.units.sigma_nk_to_eps`.

    References
    ----------
    .. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
       uncertainty in measurement", section 4.3.7 (from memory).
    """
    from .units import eps_to_nk, sigma_nk_to_eps

    m = len(ds)
    if ds.value_quantum is None:
        return np.zeros(m), np.zeros(m), np.zeros(m, bool)
    if ds.quantity == "nk":
        v1, v2 = eps_to_nk(ds.eps)
    else:
        v1, v2 = ds.eps.real, ds.eps.imag
    zero1 = np.abs(v1) < 0.5 * ds.value_quantum[:, 0]
    zero2 = np.abs(v2) < 0.5 * ds.value_quantum[:, 1]
    q = np.column_stack(
        [
            _effective_quantum(ds.value_quantum[:, 0], zero1),
            _effective_quantum(ds.value_quantum[:, 1], zero2),
        ]
    )
    u1 = np.where(zero1, q[:, 0], q[:, 0] / np.sqrt(12.0))
    u2 = np.where(zero2, q[:, 1], q[:, 1] / np.sqrt(12.0))
    if ds.quantity == "nk":
        # a k bound near 0: propagate with k at its bound so eps2 gets 2 n q
        u1, u2 = sigma_nk_to_eps(np.abs(v1), np.maximum(np.abs(v2), zero2 * q[:, 1]), u1, u2)
    return u1, u2, zero2


def _effective_quantum(q: np.ndarray, zero: np.ndarray) -> np.ndarray:
    """Per-cell quantum: finest of the cell and 2 neighbours each side; zeros take the
    finest quantum of the nonzero cells (see :func:`rounding_of_dataset`)."""
    out = np.array(q, float)
    if out.size == 0:
        return out
    if np.any(~zero):
        finest = float(np.min(out[~zero]))
        out[zero] = np.minimum(out[zero], finest)
    pad = np.pad(out, 2, mode="edge")
    win = np.lib.stride_tricks.sliding_window_view(pad, 5)
    return win.min(axis=1)


@dataclass(frozen=True)
class Spectrum:
    """Several sources merged onto one canonical axis.

    Points from different sources may share an energy only when they are kept side by side
    (see :func:`kkcheck.merge.merge`); the axis is then non-decreasing rather than strictly
    increasing, and ``source`` tells the points apart.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Photon energy [eV], non-decreasing, > 0.
    eps : numpy.ndarray
        Complex permittivity (exp(-i w t)), after any scale/offset correction the merge applied.
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Standard uncertainty per point [eps units]; NaN where not yet known (the noise
        estimate of :mod:`kkcheck.clean` fills it).
    source : numpy.ndarray
        Index into ``source_names`` of the source of each point (for a blended point, the
        source with the largest weight).
    row : numpy.ndarray
        1-based line number of each point in its source file (0 when not from a file).
    flags : numpy.ndarray
        :class:`Flag` bit mask per point.
    source_names : tuple of str
        Source labels, in input order.
    source_quantity : tuple of str
        ``"nk"`` or ``"eps"`` per source.
    rounding_eps1, rounding_eps2 : numpy.ndarray
        Standard uncertainty of eps1 and eps2 from the printed precision of the file
        [eps units] (:func:`rounding_of_dataset`); zeros when unknown (data built in memory).
    zero_bound : numpy.ndarray of bool
        True where the imaginary value (k or eps2) was printed as 0: a bound (below the last
        printed digit), not a measured zero. All False when unknown.
    """

    energy_ev: np.ndarray
    eps: np.ndarray
    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    source: np.ndarray
    row: np.ndarray
    flags: np.ndarray
    source_names: tuple[str, ...]
    source_quantity: tuple[str, ...]
    rounding_eps1: np.ndarray | None = None
    rounding_eps2: np.ndarray | None = None
    zero_bound: np.ndarray | None = None

    def __post_init__(self):
        e = _ro(self.energy_ev, float)
        m = e.size
        for name in ("rounding_eps1", "rounding_eps2"):
            if getattr(self, name) is None:
                object.__setattr__(self, name, np.zeros(m))
        if self.zero_bound is None:
            object.__setattr__(self, "zero_bound", np.zeros(m, bool))
        if e.ndim != 1 or (m and (e[0] <= 0 or np.any(np.diff(e) < 0))):
            raise ValueError("energy_ev must be 1-D, > 0 and non-decreasing")
        object.__setattr__(self, "energy_ev", e)
        for name, dt in (
            ("eps", complex),
            ("sigma_eps1", float),
            ("sigma_eps2", float),
            ("source", int),
            ("row", int),
            ("flags", int),
            ("rounding_eps1", float),
            ("rounding_eps2", float),
            ("zero_bound", bool),
        ):
            a = _ro(getattr(self, name), dt)
            if a.shape != (m,):
                raise ValueError(f"{name} must have one value per point")
            object.__setattr__(self, name, a)
        object.__setattr__(self, "source_names", tuple(self.source_names))
        object.__setattr__(self, "source_quantity", tuple(self.source_quantity))

    def __len__(self) -> int:
        return int(self.energy_ev.size)

    @property
    def range_ev(self) -> tuple[float, float]:
        """(lowest, highest) photon energy [eV]."""
        return float(self.energy_ev[0]), float(self.energy_ev[-1])

    @classmethod
    def from_dataset(cls, ds: Dataset) -> Spectrum:
        """A one-source spectrum (no merge needed)."""
        m = len(ds)
        nan = np.full(m, np.nan)
        rows = ds.provenance.rows if ds.provenance.rows.size == m else np.zeros(m, int)
        r1, r2, zero = rounding_of_dataset(ds)
        return cls(
            energy_ev=ds.energy_ev,
            eps=ds.eps,
            sigma_eps1=nan if ds.sigma_eps1 is None else ds.sigma_eps1,
            sigma_eps2=nan if ds.sigma_eps2 is None else ds.sigma_eps2,
            source=np.zeros(m, int),
            row=rows,
            flags=np.zeros(m, int),
            source_names=(ds.name,),
            source_quantity=(ds.quantity,),
            rounding_eps1=r1,
            rounding_eps2=r2,
            zero_bound=zero,
        )

    def replace(self, **changes) -> Spectrum:
        """A copy with some fields changed (``dataclasses.replace``)."""
        import dataclasses

        return dataclasses.replace(self, **changes)

    def with_flags(self, mask, bit: Flag) -> Spectrum:
        """A copy with ``bit`` set where boolean ``mask`` is True."""
        flags = np.array(self.flags)
        flags[np.asarray(mask, bool)] |= int(bit)
        return self.replace(flags=flags)

    def to_frame(self) -> pd.DataFrame:
        """Columns ``energy_ev, eps1, eps2, n, k, sigma_eps1, sigma_eps2, source, row, flags``.

        ``source`` holds the source *name*; ``flags`` the integer bit mask.
        """
        from .units import eps_to_nk

        n, k = eps_to_nk(self.eps)
        import pandas as pd

        names = np.array(self.source_names, dtype=object)
        return pd.DataFrame(
            {
                "energy_ev": self.energy_ev,
                "eps1": self.eps.real,
                "eps2": self.eps.imag,
                "n": n,
                "k": k,
                "sigma_eps1": self.sigma_eps1,
                "sigma_eps2": self.sigma_eps2,
                "source": names[self.source] if len(self) else [],
                "row": self.row,
                "flags": self.flags,
            }
        )

    @classmethod
    def from_frame(cls, frame: pd.DataFrame) -> Spectrum:
        """Inverse of :meth:`to_frame` (source names are taken in order of first appearance)."""
        f = frame.sort_values("energy_ev", kind="stable")
        names = tuple(dict.fromkeys(f["source"].astype(str)))
        index = {s: i for i, s in enumerate(names)}
        m = len(f)

        def col(c, default):
            return f[c].to_numpy() if c in f else np.full(m, default)

        return cls(
            energy_ev=f["energy_ev"].to_numpy(float),
            eps=f["eps1"].to_numpy(float) + 1j * f["eps2"].to_numpy(float),
            sigma_eps1=col("sigma_eps1", np.nan),
            sigma_eps2=col("sigma_eps2", np.nan),
            source=np.array([index[s] for s in f["source"].astype(str)], int),
            row=col("row", 0),
            flags=col("flags", 0),
            source_names=names,
            source_quantity=tuple("eps" for _ in names),
        )
