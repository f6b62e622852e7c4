"""Printed precision in the detectors' own quantity (n, k or eps1, eps2), and zero bounds.

The merge carries the rounding of the printed digits as standard uncertainties of eps
(:attr:`kkcheck.spectrum.Spectrum.rounding_eps1` / ``rounding_eps2``, q / sqrt(12) for a last
digit of unit q). The detectors work in the quantity each source was written in, so for an
n,k source the eps rounding is taken back to n and k here.

References
----------
.. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement", section 4.3.7 (rectangular distribution; from memory);
   docs/references.md [PrintedPrecision].
"""

from __future__ import annotations

import numpy as np

from ..spectrum import Spectrum
from ..units import eps_to_nk

__all__ = ["PRECISION_UNITS", "component_rounding", "near_zero", "rounding_margin"]

#: A spike or a step must exceed this many units of the last printed digit (and the worst
#: deviation rounding alone can give the estimate, see :func:`rounding_margin`). One unit
#: is what a smooth curve printed as a staircase does between neighbours; the worst case of
#: a least-squares estimate over rounded points is (q/2) sum|c_j|, about 1.5 q for the spike
#: predictor and 2-3 q for the jump fit. Three units is above both with room for the
#: neighbour-to-neighbour quantum changes of shortest-decimal tables (common practice:
#: "several units of the last digit"; no published source).
PRECISION_UNITS = 3.0

_SQRT12 = float(np.sqrt(12.0))


def _nk_rounding(eps: np.ndarray, r1: np.ndarray, r2: np.ndarray):
    """(u_n, u_k) from the eps rounding (r1, r2) of an n,k source.

    Inverts r1^2 = 4 (n^2 u_n^2 + k^2 u_k^2), r2^2 = 4 (k^2 u_n^2 + n^2 u_k^2)
    (:func:`kkcheck.units.sigma_nk_to_eps`); where n^4 - k^4 is small against (n^2 + k^2)^2
    or the solution is negative, u_n = u_k = sqrt((r1^2 + r2^2) / (8 (n^2 + k^2))).
    """
    n, k = eps_to_nk(eps)
    a, b = 0.25 * r1**2, 0.25 * r2**2
    n2, k2 = n * n, k * k
    den = n2 * n2 - k2 * k2
    with np.errstate(all="ignore"):
        un2 = (n2 * a - k2 * b) / den
        uk2 = (n2 * b - k2 * a) / den
        same = (a + b) / (2.0 * (n2 + k2))
    bad = ~(np.abs(den) > 0.1 * (n2 + k2) ** 2) | ~(un2 >= 0) | ~(uk2 >= 0)
    un2 = np.where(bad, same, un2)
    uk2 = np.where(bad, same, uk2)
    return np.sqrt(np.nan_to_num(un2)), np.sqrt(np.nan_to_num(uk2))


def component_rounding(spectrum: Spectrum, s: int, idx: np.ndarray) -> list[np.ndarray]:
    """Rounding standard uncertainty of the two components of source ``s`` at ``idx``.

    Parameters
    ----------
    spectrum : Spectrum
    s : int
        Source index.
    idx : numpy.ndarray
        Positions of the source's points.

    Returns
    -------
    list of numpy.ndarray
        ``[u_n, u_k]`` for an n,k source, ``[u_eps1, u_eps2]`` otherwise, in the order of
        :func:`kkcheck.noise._components` [component units]; zeros when the printed
        precision is unknown (data built in memory).
    """
    r1, r2 = spectrum.rounding_eps1[idx], spectrum.rounding_eps2[idx]
    if spectrum.source_quantity[s] == "nk":
        return list(_nk_rounding(spectrum.eps[idx], r1, r2))
    return [np.array(r1, float), np.array(r2, float)]


def rounding_margin(u: np.ndarray, coef_abs_sum: np.ndarray | float = 0.0) -> np.ndarray:
    """Smallest deviation that rounding cannot explain [component units].

    Parameters
    ----------
    u : numpy.ndarray
        Rounding standard uncertainty of the points involved (q / sqrt(12)).
    coef_abs_sum : numpy.ndarray or float
        sum_j |c_j| of the linear estimate (jump or leave-one-out residual) as a combination
        of the printed values.

    Returns
    -------
    numpy.ndarray
        max(PRECISION_UNITS q, (q/2) sum_j |c_j|), q = sqrt(12) u.

    Notes
    -----
    Each printed value lies within q/2 of the true one, so a linear estimate
    sum_j c_j y_j is off by at most (q/2) sum_j |c_j| through rounding alone (a worst-case
    bound, not a standard deviation: the rounding errors of a smooth curve are correlated,
    a staircase, and averaging does not shrink them).
    """
    q = _SQRT12 * np.asarray(u, float)
    return np.maximum(PRECISION_UNITS * q, 0.5 * q * np.asarray(coef_abs_sum, float))


def near_zero(spectrum: Spectrum, s: int, idx: np.ndarray, component: str) -> np.ndarray:
    """True where ``component`` of the points ``idx`` of source ``s`` is a zero bound.

    A value is a zero bound when it was printed as 0 (:attr:`Spectrum.zero_bound`, for k or
    eps2) or lies within one unit of its last printed digit of 0 (|v| <= sqrt(12) u; with
    unknown precision, u = 0: exactly 0). Only the imaginary components k and eps2 have
    bounds; for n and eps1 the result is all False.
    """
    if component not in ("k", "eps2"):
        return np.zeros(idx.size, bool)
    eps = spectrum.eps[idx]
    v = eps_to_nk(eps)[1] if component == "k" else eps.imag
    u = component_rounding(spectrum, s, idx)[1]
    return np.asarray(spectrum.zero_bound[idx], bool) | (np.abs(v) <= _SQRT12 * u)
