"""Input checks shared by the KK transforms, the subtractive KK and the sum rules.

Each raises a one-line :class:`~kkcheck.errors.InputError` saying what was expected.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["check_axis", "check_targets"]


def check_axis(energy_ev, values, name: str) -> tuple[np.ndarray, np.ndarray]:
    """The energy axis and one sampled quantity as float arrays, after checking both.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV]: 1-D, at least 2, finite, > 0, strictly increasing.
    values : array_like, shape (N,)
        Samples of the quantity, finite, one per energy.
    name : str
        Name of the quantity used in the error message (e.g. ``"eps2"``).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        ``energy_ev`` and ``values`` as float64 arrays.

    Raises
    ------
    InputError
        When any of the conditions above fails.
    """
    x = np.asarray(energy_ev, dtype=float)
    y = np.asarray(values, dtype=float)
    if x.ndim != 1 or x.size < 2:
        raise InputError("expected a 1-D energy axis with at least 2 points")
    if y.shape != x.shape:
        raise InputError(f"expected {name} with the same length as the energy axis ({x.size})")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise InputError(f"expected finite energies and {name} values (no NaN or inf)")
    if x[0] <= 0 or np.any(np.diff(x) <= 0):
        raise InputError("expected photon energies > 0 eV, strictly increasing")
    return x, y


def check_targets(at_ev, x: np.ndarray) -> np.ndarray:
    """Evaluation energies [eV] (1-D, finite, > 0); a copy of the axis ``x`` when None."""
    if at_ev is None:
        return x.copy()
    w = np.atleast_1d(np.asarray(at_ev, dtype=float))
    if w.ndim != 1 or not np.all(np.isfinite(w)) or np.any(w <= 0):
        raise InputError("expected evaluation energies at_ev > 0 eV, finite, 1-D")
    return w
