"""Noise of sampled curves: constants and residual-based estimators (see :mod:`kkcheck.noise`).

One MAD-to-sigma constant, one noise floor and one minimum point count, used by the merge,
the clean stage, the KK test, the repair and the fit.

Public surface
--------------
NORMAL_MAD, NOISE_FLOOR_REL, NOISE_FLOOR_ABS, MIN_POINTS, noise_floor
    The shared constants and the sigma floor max(rel |v|, abs).
neighbour_noise_sigma, running_noise_sigma
    White-noise level of one curve from neighbour-chord residuals: one number, or a running
    estimate per point.
estimate_noise, noise_per_point, NoiseRegion, NoiseReport
    Noise per source, component and energy region (the clean stage's report), and the
    per-point eps sigmas it implies.
local_noise
    Running noise of one curve from cubic pseudo-residuals.

Every per-source estimate works in the quantity the source was written in: ``n, k`` for a
source read as n,k and ``eps1, eps2`` for one read as eps (noise uniform in n,k is not uniform
in eps), and is propagated to eps with :func:`kkcheck.units.sigma_nk_to_eps`.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation",
   J. Am. Stat. Assoc. 69(346), 383-393 (1974) (pages from memory): the median absolute
   deviation, scaled by 1/Phi^-1(3/4) = 1.4826, estimates the standard deviation of normal
   noise.
.. [2] T. Gasser, L. Sroka, C. Jennen-Steinmetz, "Residual variance and residual pattern in
   nonlinear regression," Biometrika 73, 625 (1986) (noise variance from local
   pseudo-residuals normalised by their coefficients).
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter, uniform_filter1d

from ..spectrum import Spectrum
from ..units import eps_to_nk, sigma_nk_to_eps

__all__ = [
    "NORMAL_MAD",
    "NOISE_FLOOR_REL",
    "NOISE_FLOOR_ABS",
    "MIN_POINTS",
    "noise_floor",
    "neighbour_noise_sigma",
    "running_noise_sigma",
    "NoiseRegion",
    "NoiseReport",
    "estimate_noise",
    "noise_per_point",
    "local_noise",
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

#: Fewest points of one curve (or region) that a residual-based noise estimate uses; below
#: this the estimators return NaN.
_MIN_CURVE_POINTS = 5


def noise_floor(values, rel: float = NOISE_FLOOR_REL, abs_: float = NOISE_FLOOR_ABS) -> np.ndarray:
    """The smallest sigma any stage assigns to a value: max(rel |v|, abs_)."""
    return np.maximum(rel * np.abs(np.asarray(values)), abs_)


# --------------------------------------------------------------------------- per-source walks


def _source_points(spectrum: Spectrum) -> Iterator[tuple[int, str, np.ndarray]]:
    """Yield (source index, name, positions) for every source with points."""
    for s, name in enumerate(spectrum.source_names):
        idx = np.flatnonzero(spectrum.source == s)
        if idx.size:
            yield s, name, idx


def _components(spectrum: Spectrum, s: int, idx: np.ndarray) -> list[tuple[str, np.ndarray]]:
    """(name, values) of the components of source ``s`` at positions ``idx``.

    ``[("n", n), ("k", k)]`` for a source written as n,k, else ``[("eps1", ..), ("eps2", ..)]``.
    """
    eps = spectrum.eps[idx]
    if spectrum.source_quantity[s] == "nk":
        n, k = eps_to_nk(eps)
        return [("n", n), ("k", k)]
    return [("eps1", eps.real), ("eps2", eps.imag)]


def _component_names(spectrum: Spectrum, s: int) -> tuple[str, str]:
    """The two component names of source ``s``: ``("n", "k")`` or ``("eps1", "eps2")``."""
    return ("n", "k") if spectrum.source_quantity[s] == "nk" else ("eps1", "eps2")


def _running(fn, a: np.ndarray, half: int) -> np.ndarray:
    """``fn`` (nan-aware reduction along axis 1) over a centred window of 2*half+1 points."""
    pad = np.concatenate([np.full(half, np.nan), a, np.full(half, np.nan)])
    win = np.lib.stride_tricks.sliding_window_view(pad, 2 * half + 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN windows give NaN, wanted
        return fn(win, axis=1)


# --------------------------------------------------------------------------- chord residuals


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
    if d.size < _MIN_CURVE_POINTS - 2:
        return float("nan")
    return float(NORMAL_MAD * np.median(np.abs(d - np.median(d))))


def running_noise_sigma(energy_ev: np.ndarray, values: np.ndarray, half: int) -> np.ndarray:
    """Running robust white-noise level of a sampled curve, one value per point.

    Parameters
    ----------
    energy_ev : numpy.ndarray
        Strictly increasing axis [eV], float.
    values : numpy.ndarray
        Samples [any unit], float, same length.
    half : int
        Half-width of the running window, in points (2*half+1 points).

    Returns
    -------
    numpy.ndarray
        Noise standard deviation per point [unit of ``values``], never zero.

    Notes
    -----
    s_i = 1.4826 * median_j |d_j - m_i| over the window around i, m_i the running median of
    the neighbour-chord residuals d (see :func:`neighbour_noise_sigma`; Hampel 1974). Where
    the window gives no finite positive value the whole-curve estimate is used; a floor of
    1e-12 max|y| keeps a run of identical (rounded) values from giving zero noise and
    infinite z-scores.

    References
    ----------
    .. [1] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    """
    x, y = energy_ev, values
    d = _chord_residuals(x, y)
    med = _running(np.nanmedian, d, half)
    s = NORMAL_MAD * _running(np.nanmedian, np.abs(d - med), half)
    glob = neighbour_noise_sigma(x, y)
    s = np.where(np.isfinite(s) & (s > 0), s, glob)
    floor = 1e-12 * max(float(np.nanmax(np.abs(y))) if y.size else 0.0, 1e-300)
    return np.maximum(s, floor)


# --------------------------------------------------------------------------- regional report


@dataclass(frozen=True)
class NoiseRegion:
    """White-noise level of one component of one source over one energy region.

    Attributes
    ----------
    source : str
        Source name.
    component : str
        ``"eps1"``, ``"eps2"``, ``"n"`` or ``"k"``.
    from_ev, to_ev : float
        Energy range of the region [eV], inclusive.
    n_points : int
        Points in the region.
    sigma : float
        Robust standard deviation of the point-to-point noise [component units]; NaN when
        the region has fewer than 5 points.
    """

    source: str
    component: str
    from_ev: float
    to_ev: float
    n_points: int
    sigma: float


@dataclass(frozen=True)
class NoiseReport:
    """Noise level per source, component and region.

    Attributes
    ----------
    regions : tuple of NoiseRegion
        In source order, then component, then energy.
    method : str
        How the level was estimated (one sentence).
    """

    regions: tuple[NoiseRegion, ...]
    method: str

    def sigma(self, source: str, component: str) -> float:
        """Median over regions of the noise of one source and component (NaN if unknown)."""
        s = [r.sigma for r in self.regions if r.source == source and r.component == component]
        s = [v for v in s if np.isfinite(v)]
        return float(np.median(s)) if s else float("nan")


def estimate_noise(spectrum: Spectrum, *, region_points: int = 200) -> NoiseReport:
    """Noise level of each source and component, region by region.

    Parameters
    ----------
    spectrum : Spectrum
        Merged spectrum; each source is analysed on its own points.
    region_points : int
        Target number of points per region; a source of N points is cut into
        max(1, round(N / region_points)) contiguous regions of nearly equal count.

    Returns
    -------
    NoiseReport

    Notes
    -----
    In each region sigma = 1.4826 * median|d - median d| of the neighbour-chord deviations
    d_i / sqrt(1 + a^2 + b^2) (see :func:`neighbour_noise_sigma`), in the quantity the source
    was written in (noise uniform in n,k is not uniform in eps).

    References
    ----------
    .. [1] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    """
    if int(region_points) < _MIN_CURVE_POINTS:
        raise ValueError(f"region_points must be at least {_MIN_CURVE_POINTS}")
    regions = []
    for s, name, idx in _source_points(spectrum):
        x = spectrum.energy_ev[idx]
        nreg = max(1, int(round(idx.size / region_points)))
        bounds = np.linspace(0, idx.size, nreg + 1).round().astype(int)
        for comp, y in _components(spectrum, s, idx):
            for lo, hi in zip(bounds[:-1], bounds[1:]):
                sl = slice(lo, hi)
                sig = (
                    neighbour_noise_sigma(x[sl], y[sl])
                    if hi - lo >= _MIN_CURVE_POINTS
                    else float("nan")
                )
                regions.append(
                    NoiseRegion(name, comp, float(x[lo]), float(x[hi - 1]), int(hi - lo), sig)
                )
    method = (
        "1.4826 x median absolute deviation of each point from the chord of its two "
        f"neighbours (white-noise scaled), per source and component, regions of ~{region_points}"
        " points"
    )
    return NoiseReport(tuple(regions), method)


def noise_per_point(spectrum: Spectrum, noise: NoiseReport) -> tuple[np.ndarray, np.ndarray]:
    """Per-point standard uncertainty of eps1 and eps2 from a :class:`NoiseReport`.

    For a source written as n,k the n and k noise of the point's region is propagated to eps
    with sigma_eps1 = 2 sqrt(n^2 s_n^2 + k^2 s_k^2), sigma_eps2 = 2 sqrt(k^2 s_n^2 + n^2 s_k^2)
    (:func:`kkcheck.units.sigma_nk_to_eps`).
    """
    m = len(spectrum)
    s1 = np.full(m, np.nan)
    s2 = np.full(m, np.nan)
    e = spectrum.energy_ev
    for s, name, idx in _source_points(spectrum):
        comps = _component_names(spectrum, s)
        a = np.full(idx.size, np.nan)
        b = np.full(idx.size, np.nan)
        for r in noise.regions:
            if r.source != name:
                continue
            inside = (e[idx] >= r.from_ev) & (e[idx] <= r.to_ev)
            sig = r.sigma if np.isfinite(r.sigma) else noise.sigma(name, r.component)
            if r.component == comps[0]:
                a[inside] = sig
            elif r.component == comps[1]:
                b[inside] = sig
        if comps[0] == "n":
            n, k = eps_to_nk(spectrum.eps[idx])
            a, b = sigma_nk_to_eps(n, k, a, b)
        s1[idx] = a
        s2[idx] = b
    return s1, s2


# --------------------------------------------------------------------------- local cubic


def _pseudo_residuals(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Residual of y_i from the cubic through (i-2, i-1, i+1, i+2), normalised to unit gain."""
    m = x.size
    r = np.full(m, np.nan)
    if m < _MIN_CURVE_POINTS:
        return r
    i = np.arange(2, m - 2)
    idx = np.stack([i - 2, i - 1, i + 1, i + 2])  # (4, n)
    xs = x[idx]
    xi = x[i]
    c = np.ones_like(xs)
    for a in range(4):
        for b in range(4):
            if a != b:
                c[a] *= (xi - xs[b]) / (xs[a] - xs[b])
    pred = np.sum(c * y[idx], axis=0)
    r[i] = (y[i] - pred) / np.sqrt(1.0 + np.sum(c * c, axis=0))
    r[:2] = r[3:1:-1]  # edge points: the nearest interior residuals, not repeated
    r[-2:] = r[-3:-5:-1]
    return r


def local_noise(energy_ev, values, window: int | None = None) -> np.ndarray:
    """Robust local noise (standard deviation) of a real series sampled at ``energy_ev``.

    Parameters
    ----------
    energy_ev : array_like
        Strictly increasing energies [eV].
    values : array_like
        The series (e.g. eps1, or n).
    window : int, optional
        Points in the running median; default ``clip(M // 8, 15, 101)``, odd.

    Returns
    -------
    numpy.ndarray
        Noise estimate per point (same units as ``values``); NaN when fewer than 5 points.

    Notes
    -----
    Each point is compared with the cubic through its two neighbours on either side
    (Lagrange interpolation on the actual, possibly nonuniform, energies):
    r_i = (y_i - sum_j c_j y_j) / sqrt(1 + sum_j c_j^2), c_j the cubic Lagrange weights of the
    neighbours i-2, i-1, i+1, i+2 at x_i, so r_i has the noise's standard deviation where the
    signal is locally cubic (Gasser, Sroka & Jennen-Steinmetz 1986). Then
    sigma_i = 1.4826 median_{|k-i|<=W/2} |r_k| (robust against spikes and against the few
    points where a sharp feature breaks the cubic approximation; Hampel 1974), and finally
    exp(moving average of ln sigma) over the same window, so noise that changes slowly along
    the spectrum (heteroscedastic) is followed.

    References
    ----------
    .. [1] T. Gasser, L. Sroka, C. Jennen-Steinmetz, Biometrika 73, 625 (1986).
    .. [2] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    """
    x = np.asarray(energy_ev, float)
    y = np.asarray(values, float)
    m = x.size
    if m < _MIN_CURVE_POINTS:
        return np.full(m, np.nan)
    if window is None:
        window = int(np.clip(m // 8, 15, 101))
    window = min(window, m if m % 2 else m - 1)
    window += 1 - window % 2
    r = np.abs(_pseudo_residuals(x, y))
    s = NORMAL_MAD * median_filter(r, size=window, mode="mirror")
    pos = s[s > 0]
    if pos.size == 0:
        return np.zeros(m)
    s = np.where(s > 0, s, pos.min())
    return np.exp(uniform_filter1d(np.log(s), size=window, mode="mirror"))
