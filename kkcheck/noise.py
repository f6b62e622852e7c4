"""Noise of sampled curves: the one noise module below every stage.

One MAD-to-sigma constant, one noise floor and one minimum point count, used by the merge,
the clean stage, the KK test, the repair and the fit.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation",
   J. Am. Stat. Assoc. 69(346), 383-393 (1974): the median absolute deviation, scaled by
   1/Phi^-1(3/4) = 1.4826, estimates the standard deviation of normal noise.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "NORMAL_MAD",
    "NOISE_FLOOR_REL",
    "NOISE_FLOOR_ABS",
    "MIN_POINTS",
    "noise_floor",
    "neighbour_noise_sigma",
]

#: 1 / Phi^-1(3/4): the MAD of normal noise times this is its standard deviation (Hampel 1974).
NORMAL_MAD = 1.482602218505602
#: Relative noise floor: no sigma is taken below 1e-4 |eps| (about the last digit of a
#: 4-5 digit table; common practice, no source).
NOISE_FLOOR_REL = 1e-4
#: Absolute noise floor on eps (keeps exact zeros from getting infinite weight).
NOISE_FLOOR_ABS = 1e-6
#: Fewest points a spectrum needs for a noise estimate or a KK test.
MIN_POINTS = 8


def noise_floor(
    values, rel: float = NOISE_FLOOR_REL, abs_: float = NOISE_FLOOR_ABS
) -> np.ndarray:
    """The smallest sigma any stage assigns to a value: max(rel |v|, abs_)."""
    return np.maximum(rel * np.abs(np.asarray(values)), abs_)


def _chord_residuals(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Deviation of each interior point from the chord of its neighbours, scaled to unit variance.

    d_i = y_i - (a y_{i-1} + b y_{i+1}), a = (x_{i+1} - x_i)/(x_{i+1} - x_{i-1}), b = 1 - a;
    for white noise of variance s^2, var(d_i) = s^2 (1 + a^2 + b^2), so d_i / sqrt(1 + a^2 + b^2)
    has the noise's own standard deviation. Returned with NaN at the two ends.
    """
    out = np.full(x.size, np.nan)
    if x.size < 3:
        return out
    h = x[2:] - x[:-2]
    a = (x[2:] - x[1:-1]) / h
    b = 1.0 - a
    d = y[1:-1] - (a * y[:-2] + b * y[2:])
    out[1:-1] = d / np.sqrt(1.0 + a * a + b * b)
    return out


def neighbour_noise_sigma(energy_ev, values) -> float:
    """Robust standard deviation of white noise in a sampled curve.

    Parameters
    ----------
    energy_ev : array_like
        Strictly increasing axis [eV] (any spacing).
    values : array_like
        Samples [any unit].

    Returns
    -------
    float
        Noise standard deviation [unit of ``values``]; NaN with fewer than 5 points.

    Notes
    -----
    Each interior point is compared with the chord through its two neighbours,
    d_i = y_i - (a y_{i-1} + b y_{i+1}) with a = (x_{i+1} - x_i)/(x_{i+1} - x_{i-1}), b = 1 - a,
    and d_i is divided by sqrt(1 + a^2 + b^2) (its standard deviation in units of the noise).
    The estimate is 1.4826 * median|d - median(d)| (Hampel 1974). A smooth curve contributes
    only its curvature times the squared spacing, which is negligible for densely sampled
    data; spikes and steps hardly move a median.

    References
    ----------
    .. [1] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    """
    x = np.asarray(energy_ev, float)
    y = np.asarray(values, float)
    d = _chord_residuals(x, y)[1:-1]
    d = d[np.isfinite(d)]
    if d.size < 3:
        return float("nan")
    return float(NORMAL_MAD * np.median(np.abs(d - np.median(d))))
