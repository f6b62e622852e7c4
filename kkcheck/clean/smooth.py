"""Smoothing: LOWESS (any grid) or Savitzky–Golay (uniform grids only), raw values kept beside.

References
----------
.. [1] W. S. Cleveland, "Robust locally weighted regression and smoothing scatterplots,"
   J. Am. Stat. Assoc. 74(368), 829-836 (1979).
.. [2] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by simplified least
   squares procedures," Anal. Chem. 36(8), 1627-1639 (1964).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..noise import _components, _source_points
from ..spectrum import Spectrum
from ..units import nk_to_eps

__all__ = ["SmoothResult", "smooth"]


@dataclass(frozen=True)
class SmoothResult:
    """Smoothed values beside the raw ones.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Photon energy [eV] (the spectrum's axis, unchanged).
    raw : numpy.ndarray
        Complex eps as given (exp(-i w t)).
    smoothed : numpy.ndarray
        Complex eps after smoothing each source on its own, in its own quantity.
    source : numpy.ndarray
        Source index per point (as in the spectrum).
    method : str
        ``"lowess"`` or ``"savgol"``.
    parameters : tuple of (str, object)
        Every parameter used, as (name, value) pairs.
    notes : tuple of str
        What was done per source.
    """

    energy_ev: np.ndarray
    raw: np.ndarray
    smoothed: np.ndarray
    source: np.ndarray
    method: str
    parameters: tuple[tuple[str, object], ...]
    notes: tuple[str, ...]


def _uniform(x: np.ndarray, rtol: float = 1e-6) -> bool:
    """True when the spacing of ``x`` is constant to ``rtol`` of its median."""
    d = np.diff(x)
    return bool(d.size == 0 or np.max(np.abs(d - np.median(d))) <= rtol * np.median(d))


def _smoother(
    method: str, window: int, polyorder: int, iterations: int
) -> tuple[Callable[[np.ndarray, np.ndarray], np.ndarray], tuple[tuple[str, object], ...], int]:
    """(smooth(x, y) of one component of one source, parameters, fewest points it needs)."""
    if method == "savgol":
        from scipy.signal import savgol_filter

        wl = window if window % 2 else window + 1
        if polyorder >= wl:
            raise InputError(f"polyorder must be below the window length {wl}, got {polyorder}")
        params = (("window_length", wl), ("polyorder", int(polyorder)), ("mode", "interp"))

        def savgol(x, y):
            return savgol_filter(y, wl, int(polyorder), mode="interp")

        return savgol, params, wl
    from statsmodels.nonparametric.smoothers_lowess import lowess

    params = (("window_points", window), ("iterations", int(iterations)))

    def robust_lowess(x, y):
        frac = min(1.0, window / x.size)
        return lowess(y, x, frac=frac, it=int(iterations), return_sorted=False)

    return robust_lowess, params, 0


def smooth(
    spectrum: Spectrum,
    method: str = "lowess",
    *,
    window: int = 15,
    polyorder: int = 2,
    iterations: int = 3,
) -> SmoothResult:
    """Smooth each source on its own, keeping the raw values beside the smoothed ones.

    Parameters
    ----------
    spectrum : Spectrum
        Sources are smoothed separately, never across a source boundary, in the quantity
        each was written in (n,k or eps1,eps2).
    method : {"lowess", "savgol"}
        ``"lowess"``: Cleveland's robust locally weighted linear regression (any grid).
        ``"savgol"``: Savitzky–Golay filter, only on a uniform energy grid.
    window : int
        Points in the local window: LOWESS uses frac = window / N per source; Savitzky–Golay
        uses ``window`` as its window length (made odd by adding one if even).
    polyorder : int
        Savitzky–Golay polynomial order.
    iterations : int
        LOWESS robustifying (bisquare) iterations.

    Returns
    -------
    SmoothResult

    Raises
    ------
    InputError
        ``method="savgol"`` on a source whose energy spacing is not uniform, or an unknown
        method.

    Notes
    -----
    LOWESS (Cleveland 1979): at each x_i a line is fitted by weighted least squares with
    tricube weights (1 - |d/d_max|^3)^3 over the nearest frac*N points, then refitted
    ``iterations`` times with bisquare robustness weights from the residuals; computed by
    ``statsmodels.nonparametric.smoothers_lowess.lowess(y, x, frac, it)``. Savitzky–Golay
    (Savitzky & Golay 1964): the value at the centre of a least-squares polynomial of order
    ``polyorder`` over ``window`` equally spaced points, ``scipy.signal.savgol_filter``.
    It assumes equal spacing; on a nonuniform grid use LOWESS (or resample first).

    References
    ----------
    .. [1] W. S. Cleveland, J. Am. Stat. Assoc. 74(368), 829-836 (1979).
    .. [2] A. Savitzky, M. J. E. Golay, Anal. Chem. 36(8), 1627-1639 (1964).
    """
    if method not in ("lowess", "savgol"):
        raise InputError(f"smoothing method must be 'lowess' or 'savgol', got {method!r}")
    window = int(window)
    if window < 3:
        raise InputError(f"smoothing window must be at least 3 points, got {window}")
    fn, params, min_points = _smoother(method, window, polyorder, iterations)
    out = np.array(spectrum.eps, dtype=complex)
    notes = []
    for s, name, idx in _source_points(spectrum):
        x = spectrum.energy_ev[idx]
        if method == "savgol":
            if not _uniform(x):
                raise InputError(
                    f"Savitzky-Golay needs a uniform energy grid but source {name!r} is not "
                    "uniformly spaced in eV; use method='lowess' or resample the source first"
                )
            if idx.size < min_points:
                notes.append(f"{name}: {idx.size} points, fewer than the window; left raw")
                continue
        a, b = (fn(x, y) for _comp, y in _components(spectrum, s, idx))
        out[idx] = nk_to_eps(a, b) if spectrum.source_quantity[s] == "nk" else a + 1j * b
        notes.append(f"{name}: {idx.size} points smoothed by {method} ({dict(params)})")
    return SmoothResult(
        energy_ev=spectrum.energy_ev,
        raw=spectrum.eps,
        smoothed=out,
        source=spectrum.source,
        method=method,
        parameters=params,
        notes=tuple(notes),
    )
