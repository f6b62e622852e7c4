"""Find spikes, steps and the noise level in a merged spectrum; flag, never delete.

Every detector works per source (the points of one file, in energy order) and per component
in the quantity the source was written in: ``n, k`` for a source read as n,k and
``eps1, eps2`` for one read as eps, because that is where a single bad reading or a detector
changeover shows up as a clean one- or two-point excursion or a jump.

Public surface
--------------
find_spikes, find_steps
    Detectors returning :class:`Outlier` records (energy, source, component, kind, size).
estimate_noise, noise_per_point, neighbour_noise_sigma
    Robust white-noise level per source and region.
smooth
    LOWESS (any grid) or Savitzky–Golay (uniform grids only); raw values kept beside.
apply_policy
    What happens to flagged points: ``keep``, ``downweight`` or ``replace``.
clean
    The chain: noise, spikes, steps, policy, with notes of everything done.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation,"
   J. Am. Stat. Assoc. 69(346), 383-393 (1974).
.. [2] R. K. Pearson, "Outliers in process modeling and identification," IEEE Trans. Control
   Syst. Technol. 10(1), 55-63 (2002) (the Hampel identifier as a data-cleaning filter).
.. [3] W. S. Cleveland, "Robust locally weighted regression and smoothing scatterplots,"
   J. Am. Stat. Assoc. 74(368), 829-836 (1979).
.. [4] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by simplified least
   squares procedures," Anal. Chem. 36(8), 1627-1639 (1964).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .noise import NORMAL_MAD, _chord_residuals, neighbour_noise_sigma
from .spectrum import Flag, Spectrum
from .units import eps_to_nk, nk_to_eps, sigma_nk_to_eps

__all__ = [
    "BinRecord",
    "bin_spectrum",
    "StepCorrection",
    "level_steps",
    "NORMAL_MAD",
    "DOWNWEIGHT_FACTOR",
    "Outlier",
    "NoiseRegion",
    "NoiseReport",
    "SmoothResult",
    "CleanResult",
    "neighbour_noise_sigma",
    "estimate_noise",
    "noise_per_point",
    "find_spikes",
    "find_steps",
    "smooth",
    "apply_policy",
    "clean",
]

#: Factor turning a median absolute deviation into a normal standard deviation, 1/Phi^-1(3/4).

#: Sigma inflation of the ``downweight`` policy: a flagged point keeps 1/100 of its weight.
DOWNWEIGHT_FACTOR = 10.0

#: The short-window Hampel scale counts only beyond this multiple of the noise-derived scale
#: (a MAD of 7 residuals scatters widely; a peak the local fit cannot follow raises it far more).
_SHORT_MAD_RELIEF = 2.0

_POLICIES = ("keep", "downweight", "replace")
_REPLACE_NEEDS_REPAIR = (
    "policy 'replace' needs the KK repair stage to predict the flagged values; "
    "pass predictor= (from the repair) or choose policy 'keep' or 'downweight'"
)


# --------------------------------------------------------------------------- result types


@dataclass(frozen=True)
class Outlier:
    """One flagged point.

    Attributes
    ----------
    energy_ev : float
        Photon energy of the point [eV].
    source : str
        Name of the source the point belongs to.
    component : str
        ``"eps1"``, ``"eps2"``, ``"n"`` or ``"k"`` (the quantity the source was written in).
    kind : str
        ``"spike"`` (one or two points off the local trend) or ``"step"`` (first point after a
        jump the local trend does not explain).
    index : int
        Position of the point in the spectrum's arrays.
    value : float
        The measured value of ``component`` at the point [component units].
    expected : float
        What the local trend predicts there [component units]: for a spike the mean of the
        left and right one-sided predictions; for a step the value the left-hand trend
        predicts (``value - jump``).
    size : float
        Deviation in units of its own standard deviation (a robust z-score) [dimensionless].
        For a step, ``value - expected`` is the jump in component units.
    """

    energy_ev: float
    source: str
    component: str
    kind: str
    index: int
    value: float
    expected: float
    size: float


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


@dataclass(frozen=True)
class CleanResult:
    """Outcome of :func:`clean`.

    Attributes
    ----------
    spectrum : Spectrum
        The input spectrum with SPIKE/STEP flags set, sigma filled from the noise estimate
        where it was NaN, and the policy applied. No point is removed.
    outliers : tuple of Outlier
        Every flagged point, sorted by energy.
    noise : NoiseReport
        Noise level per source, component and region.
    policy : str
        ``"keep"``, ``"downweight"`` or ``"replace"``.
    notes : tuple of str
        Everything done, in words, for the report.
    """

    spectrum: Spectrum
    outliers: tuple[Outlier, ...]
    noise: NoiseReport
    policy: str
    notes: tuple[str, ...]


# --------------------------------------------------------------------------- helpers


def _components(spectrum: Spectrum, s: int, idx: np.ndarray) -> list[tuple[str, np.ndarray]]:
    """(name, values) of the components of source ``s`` at positions ``idx``."""
    eps = spectrum.eps[idx]
    if spectrum.source_quantity[s] == "nk":
        n, k = eps_to_nk(eps)
        return [("n", n), ("k", k)]
    return [("eps1", eps.real), ("eps2", eps.imag)]


def _source_points(spectrum: Spectrum):
    """Yield (source index, name, positions) for every source with points."""
    for s, name in enumerate(spectrum.source_names):
        idx = np.flatnonzero(spectrum.source == s)
        if idx.size:
            yield s, name, idx


def _running(fn, a: np.ndarray, half: int) -> np.ndarray:
    """``fn`` (nan-aware reduction along axis 1) over a centred window of 2*half+1 points."""
    pad = np.concatenate([np.full(half, np.nan), a, np.full(half, np.nan)])
    win = np.lib.stride_tricks.sliding_window_view(pad, 2 * half + 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN windows give NaN, wanted
        return fn(win, axis=1)


def _local_sigma(x: np.ndarray, y: np.ndarray, half: int) -> np.ndarray:
    """Running robust noise level: 1.4826 * running median |d - running median d|."""
    d = _chord_residuals(x, y)
    med = _running(np.nanmedian, d, half)
    s = NORMAL_MAD * _running(np.nanmedian, np.abs(d - med), half)
    glob = neighbour_noise_sigma(x, y)
    s = np.where(np.isfinite(s) & (s > 0), s, glob)
    # floor: a run of identical (rounded) values would give zero noise and infinite z-scores
    floor = 1e-12 * max(float(np.nanmax(np.abs(y))) if y.size else 0.0, 1e-300)
    return np.maximum(s, floor)


def _poly_predict(x, y, w, offsets: np.ndarray, x_at: np.ndarray, deg: int, seg=None):
    """Weighted polynomial fit on the points ``i + offsets`` of each i, evaluated at x_at[i].

    Returns (prediction, variance factor v, mean square residual) per i. For 0/1 weights,
    var(prediction) = v * s^2 for white noise of variance s^2 (v = e^T (X^T W X)^-1 e).
    The mean square residual is ssr / (points - deg - 1). Rows with fewer than deg + 2
    usable points give NaN. With ``seg`` (segment number per point) a fit only uses points
    of the point's own segment.
    """
    n = x.size
    idx = np.arange(n)[:, None] + offsets[None, :]
    ok = (idx >= 0) & (idx < n)
    idc = np.clip(idx, 0, n - 1)
    if seg is not None:
        ok &= seg[idc] == seg[:, None]
    W = np.where(ok, w[idc], 0.0)
    scale = np.where(ok, np.abs(x[idc] - x[:, None]), 0.0).max(1)
    scale = np.where(scale > 0, scale, 1.0)[:, None]
    X = (x[idc] - x[:, None]) / scale  # centred and scaled for conditioning
    Y = y[idc]
    V = np.stack([X**p for p in range(deg + 1)], axis=2)  # (n, m, deg+1)
    A = np.einsum("nm,nmi,nmj->nij", W, V, V)
    b = np.einsum("nm,nmi,nm->ni", W, V, Y)
    npts = (W > 0).sum(1)
    det = np.linalg.det(A)
    good = (npts >= deg + 2) & (np.abs(det) > 1e-12)
    A[~good] = np.eye(deg + 1)
    b[~good] = 0.0
    coef = np.linalg.solve(A, b[..., None])[..., 0]
    xa = (x_at - x) / scale[:, 0]
    e = np.stack([xa**p for p in range(deg + 1)], axis=1)
    pred = np.where(good, (coef * e).sum(1), np.nan)
    Ainv_e = np.linalg.solve(A, e[..., None])[..., 0]
    var = np.where(good, (e * Ainv_e).sum(1), np.nan)
    res = Y - np.einsum("nmi,ni->nm", V, coef)
    ms = (W * res * res).sum(1) / np.maximum(npts - deg - 1, 1)
    return pred, var, np.where(good, ms, np.nan)


def _jump_fit(x, y, w, window: int, deg: int = 3):
    """Fit y = poly_deg(x) + J H(x - x_m) over the ``window`` points each side of every gap.

    For the gap between points g and g+1 (x_m their mid-point) the model is a polynomial of
    degree ``deg`` plus a jump J at x_m, fitted by weighted least squares to points
    g-window+1 .. g+window. Returns (J, variance factor of J, mean square residual) per gap
    (index g); NaN where either side has fewer than 3 usable points.
    """
    n = x.size
    offsets = np.arange(-window + 1, window + 1)
    idx = np.arange(n)[:, None] + offsets[None, :]
    ok = (idx >= 0) & (idx < n)
    idc = np.clip(idx, 0, n - 1)
    W = np.where(ok, w[idc], 0.0)
    xm = np.append(0.5 * (x[:-1] + x[1:]), x[-1])
    scale = np.where(ok, np.abs(x[idc] - xm[:, None]), 0.0).max(1)
    scale = np.where(scale > 0, scale, 1.0)[:, None]
    X = (x[idc] - xm[:, None]) / scale
    H = (offsets > 0).astype(float)[None, :] * np.ones((n, 1))
    V = np.stack([X**p for p in range(deg + 1)] + [H], axis=2)
    A = np.einsum("nm,nmi,nmj->nij", W, V, V)
    b = np.einsum("nm,nmi,nm->ni", W, V, y[idc])
    nl = ((W > 0) & (H == 0)).sum(1)
    nr = ((W > 0) & (H == 1)).sum(1)
    good = (nl >= 3) & (nr >= 3)
    with np.errstate(all="ignore"):
        good &= np.abs(np.linalg.det(A)) > 1e-12
    A[~good] = np.eye(deg + 2)
    b[~good] = 0.0
    coef = np.linalg.solve(A, b[..., None])[..., 0]
    e = np.zeros(deg + 2)
    e[-1] = 1.0
    var = np.linalg.solve(A, np.broadcast_to(e, (n, deg + 2))[..., None])[..., -1, 0]
    res = y[idc] - np.einsum("nmi,ni->nm", V, coef)
    ms = (W * res * res).sum(1) / np.maximum(nl + nr - deg - 2, 1)
    nan = np.full(n, np.nan)
    return np.where(good, coef[:, -1], nan), np.where(good, var, nan), np.where(good, ms, nan)


def _hampel_z(r: np.ndarray, floor: np.ndarray, half: int, centre_half: int) -> np.ndarray:
    """Hampel z-score (r_i - c_i) / max(S_i, floor_i); NaN where r is NaN.

    S_i = 1.4826 median_j |r_j - m_i| over the 2*half+1 points around i, m_i their median
    (Hampel 1974); c_i is the median over the wider 2*centre_half+1 points (a wide centre is
    not pulled by the neighbours of a large residual, which leave-one-out fits make
    anticorrelated with it).
    """
    pad = np.concatenate([np.full(half, np.nan), r, np.full(half, np.nan)])
    win = np.lib.stride_tricks.sliding_window_view(pad, 2 * half + 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        m = np.nanmedian(win, axis=1)
        S = NORMAL_MAD * np.nanmedian(np.abs(win - m[:, None]), axis=1)
    S = np.where(np.isfinite(S), np.maximum(S / _SHORT_MAD_RELIEF, floor), floor)
    c = _running(np.nanmedian, r, centre_half)
    return (r - np.where(np.isfinite(c), c, 0.0)) / S


# --------------------------------------------------------------------------- noise


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
    if int(region_points) < 5:
        raise ValueError("region_points must be at least 5")
    regions = []
    for s, name, idx in _source_points(spectrum):
        x = spectrum.energy_ev[idx]
        nreg = max(1, int(round(idx.size / region_points)))
        bounds = np.linspace(0, idx.size, nreg + 1).round().astype(int)
        for comp, y in _components(spectrum, s, idx):
            for lo, hi in zip(bounds[:-1], bounds[1:]):
                sl = slice(lo, hi)
                sig = neighbour_noise_sigma(x[sl], y[sl]) if hi - lo >= 5 else float("nan")
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
        comps = ("n", "k") if spectrum.source_quantity[s] == "nk" else ("eps1", "eps2")
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


# --------------------------------------------------------------------------- detectors


def _segments(n: int, idx: np.ndarray, starts: set[int]) -> np.ndarray:
    """Segment number of each of the ``n`` points (a new segment starts at each step)."""
    brk = np.array([j in starts for j in idx[1:]], bool)
    return np.concatenate([[0], np.cumsum(brk)])


def find_spikes(
    spectrum: Spectrum,
    *,
    threshold: float = 4.0,
    window: int = 6,
    noise_window: int = 25,
    hampel_half: int = 3,
    steps: Sequence[Outlier] | None = None,
    max_passes: int = 4,
) -> tuple[Outlier, ...]:
    """Flag one- and two-point excursions from the local trend (Hampel identifier).

    Parameters
    ----------
    spectrum : Spectrum
        Searched per source and per component (n,k or eps1,eps2 as the source was written).
    threshold : float
        Hampel cut t on the robust z-score of the leave-one-out residual (default 4).
    window : int
        Points used on each side of a point by its local polynomial fits (default 6).
    noise_window : int
        Half-width, in points, of the running medians that set the local noise level and
        centre the residuals (default 25).
    hampel_half : int
        Half-width of Hampel's short window for the local residual scale (default 3, i.e.
        7 points).
    steps : sequence of Outlier, optional
        Steps of this spectrum (from :func:`find_steps`); fits never reach across one. When
        None (default) they are found here first, so a jump is not reported as spikes.
    max_passes : int
        Spikes found in one pass get zero weight in the fits of the next (default 4).

    Returns
    -------
    tuple of Outlier
        ``kind == "spike"``, sorted by energy; ``expected`` is the quadratic prediction.

    Notes
    -----
    For each point i, polynomials of degree 2 and 4 are fitted by least squares to the
    ``window`` points on each side of it, leaving the point itself out, and evaluated at
    x_i: predictions p_i with variance factors v_i (var p_i = v_i s^2). The noise level
    s_i is 1.4826 x the running median absolute deviation of the neighbour-chord residuals
    (:func:`neighbour_noise_sigma`). Each residual r_i = y_i - p_i is turned into a Hampel
    z-score (Hampel 1974; as a data-cleaning filter, Pearson 2002),

        z_i = (r_i - c_i) / max(S_i / 2, s_i sqrt(1 + v_i)),

    with c_i the running median of r over 2*noise_window+1 points and S_i = 1.4826 x the
    median absolute deviation of r over the 2*hampel_half+1 points around i. The point is a
    spike when |z_i| > t for both degrees. Why each piece:

    * leaving the point out makes a spike stand off its own prediction by its full size;
    * flagged points get zero weight in the next pass, so a two-point spike or a spike
      beside another does not mask itself, and neighbours' residuals are not pulled;
    * a peak the quadratic cannot follow is followed by the quartic, and the misfit it
      leaves over several neighbouring points raises S_i (a spike, one or two points,
      does not raise a median of seven); S_i counts only above twice the noise scale
      because a MAD of seven values scatters widely;
    * windows end at steps, so a jump is not reported as two spikes.

    Measured on 2000-point spectra with planted spikes of 10-30 sigma (Tauc–Lorentz, Rakić
    gold and fused silica as n,k; a Lorentz oscillator as eps): all found within 2 samples,
    about 0.25 false flags per 1000 points and component on clean noise; a Lorentz phonon
    of FWHM >= 6 samples at peak/noise ~ 2e4 raises no flag, one of 4 samples a few.
    Features only one or two samples wide are spikes to any local rule.

    References
    ----------
    .. [1] F. R. Hampel, "The influence curve and its role in robust estimation,"
       J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    .. [2] R. K. Pearson, IEEE Trans. Control Syst. Technol. 10(1), 55-63 (2002).
    """
    if threshold <= 0 or window < 2 or noise_window < 2:
        raise ValueError("threshold must be > 0, window >= 2 and noise_window >= 2")
    if steps is None:
        steps = find_steps(spectrum, noise_window=noise_window)
    out: list[Outlier] = []
    offsets = np.concatenate([-np.arange(window, 0, -1), np.arange(1, window + 1)])
    for s, name, idx in _source_points(spectrum):
        if idx.size < 5:
            continue
        x = spectrum.energy_ev[idx]
        seg = _segments(idx.size, idx, {o.index for o in steps if o.source == name})
        for comp, y in _components(spectrum, s, idx):
            sigma = _local_sigma(x, y, noise_window)
            flagged = np.zeros(x.size, bool)
            for _ in range(max_passes):
                w = np.where(flagged, 0.0, 1.0)
                p, v, _ms = _poly_predict(x, y, w, offsets, x, 2, seg)
                z = _hampel_z(y - p, sigma * np.sqrt(1.0 + v), hampel_half, noise_window)
                p4, v4, _ms = _poly_predict(x, y, w, offsets, x, 4, seg)
                z4 = _hampel_z(y - p4, sigma * np.sqrt(1.0 + v4), hampel_half, noise_window)
                z4 = np.where(np.isfinite(z4), z4, z)
                new = np.isfinite(z) & (np.abs(z) > threshold) & (np.abs(z4) > threshold)
                if np.array_equal(new, flagged):
                    break
                flagged = new
            for j in np.flatnonzero(flagged):
                out.append(
                    Outlier(
                        energy_ev=float(x[j]),
                        source=name,
                        component=comp,
                        kind="spike",
                        index=int(idx[j]),
                        value=float(y[j]),
                        expected=float(p[j]),
                        size=float(abs(z[j])),
                    )
                )
    return tuple(sorted(out, key=lambda o: (o.energy_ev, o.component)))


def find_steps(
    spectrum: Spectrum,
    *,
    threshold: float = 8.0,
    window: int = 10,
    noise_window: int = 25,
    max_misfit: float = 2.5,
    ignore: Sequence[Outlier] = (),
) -> tuple[Outlier, ...]:
    """Flag jumps between neighbouring points of one source that the local trend does not explain.

    Parameters
    ----------
    spectrum : Spectrum
        Searched per source and component.
    threshold : float
        Minimum |jump| / sd(jump) (default 8).
    window : int
        Points on each side of the gap in the fit (default 10); a step needs this many
        clean points on both sides.
    noise_window : int
        Half-width of the running noise estimate, in points (default 25).
    max_misfit : float
        Both one-sided fits must describe their points to within this many noise sigmas
        (rms); otherwise the change is a feature (a peak, an edge), not a step
        (default 2.5).
    ignore : sequence of Outlier
        Points left out of the fits (pass the spikes found first).

    Returns
    -------
    tuple of Outlier
        ``kind == "step"``, ``index`` the first point after the jump, ``value - expected``
        the jump [component units], ``size`` the jump in sigmas.

    Notes
    -----
    At the gap between points g and g+1 (mid-point x_m) a cubic plus a jump,
    y = a0 + a1 u + a2 u^2 + a3 u^3 + J H(x - x_m), u = (x - x_m)/scale, H the unit step, is
    fitted by least squares to the ``window`` points on each side. The cubic absorbs the
    local trend (curvature included), so J is the part of the change between the two
    neighbours that the trend does not explain; var(J) = s^2 [(A^T A)^-1]_JJ with s the
    local white-noise level (1.4826 x running MAD of neighbour-chord residuals, Hampel
    1974). A step is reported where |J|/sd(J) > threshold, the model's rms residual is
    below max_misfit * s (the points on both sides follow a smooth trend plus one jump,
    not a peak or an edge) and |J|/sd(J) is the largest within +-window gaps. Typical
    cause: a detector or grating changeover, which shifts one side by a few percent.
    On clean noisy spectra (the materials of :func:`find_spikes`, plus a narrow phonon)
    the largest |J|/sd(J) seen was 7.3, hence the default threshold of 8.

    References
    ----------
    .. [1] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974) (robust noise scale).
    """
    if threshold <= 0 or window < 4:
        raise ValueError("threshold must be > 0 and window >= 4")
    skip = {(o.index, o.component) for o in ignore}
    out: list[Outlier] = []
    for s, name, idx in _source_points(spectrum):
        if idx.size < 2 * window:
            continue
        x = spectrum.energy_ev[idx]
        for comp, y in _components(spectrum, s, idx):
            w = np.array([0.0 if (int(i), comp) in skip else 1.0 for i in idx])
            sigma = _local_sigma(x, y, noise_window)
            jump, var, ms = _jump_fit(x, y, w, window)
            z = jump / (sigma * np.sqrt(var))
            fit_ok = np.sqrt(ms) < max_misfit * sigma
            az = np.where(np.isfinite(z) & fit_ok, np.abs(z), 0.0)
            az[-1] = 0.0
            peak = az >= _running(np.nanmax, az, window)
            for g in np.flatnonzero(peak & (az > threshold)):
                j = g + 1
                out.append(
                    Outlier(
                        energy_ev=float(x[j]),
                        source=name,
                        component=comp,
                        kind="step",
                        index=int(idx[j]),
                        value=float(y[j]),
                        expected=float(y[j] - jump[g]),
                        size=float(az[g]),
                    )
                )
    return tuple(sorted(out, key=lambda o: (o.energy_ev, o.component)))


# --------------------------------------------------------------------------- smoothing


def _uniform(x: np.ndarray, rtol: float = 1e-6) -> bool:
    d = np.diff(x)
    return bool(d.size == 0 or np.max(np.abs(d - np.median(d))) <= rtol * np.median(d))


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
    out = np.array(spectrum.eps, dtype=complex)
    notes = []
    if method == "savgol":
        from scipy.signal import savgol_filter

        wl = window if window % 2 else window + 1
        if polyorder >= wl:
            raise InputError(f"polyorder must be below the window length {wl}, got {polyorder}")
        params = (("window_length", wl), ("polyorder", int(polyorder)), ("mode", "interp"))
    else:
        from statsmodels.nonparametric.smoothers_lowess import lowess

        params = (("window_points", window), ("iterations", int(iterations)))
    for s, name, idx in _source_points(spectrum):
        x = spectrum.energy_ev[idx]
        if method == "savgol":
            if not _uniform(x):
                raise InputError(
                    f"Savitzky-Golay needs a uniform energy grid but source {name!r} is not "
                    "uniformly spaced in eV; use method='lowess' or resample the source first"
                )
            if idx.size < wl:
                notes.append(f"{name}: {idx.size} points, fewer than the window; left raw")
                continue
        comps = []
        for _comp, y in _components(spectrum, s, idx):
            if method == "savgol":
                comps.append(savgol_filter(y, wl, int(polyorder), mode="interp"))
            else:
                frac = min(1.0, window / idx.size)
                comps.append(lowess(y, x, frac=frac, it=int(iterations), return_sorted=False))
        if spectrum.source_quantity[s] == "nk":
            out[idx] = nk_to_eps(comps[0], comps[1])
        else:
            out[idx] = comps[0] + 1j * comps[1]
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


# --------------------------------------------------------------------------- policy


def apply_policy(
    spectrum: Spectrum,
    outliers: Sequence[Outlier],
    policy: str = "keep",
    *,
    sigma_factor: float = DOWNWEIGHT_FACTOR,
    noise: NoiseReport | None = None,
    predictor: Callable[[Spectrum, np.ndarray], np.ndarray] | None = None,
) -> Spectrum:
    """Mark flagged points and apply the named policy; nothing is ever removed.

    Parameters
    ----------
    spectrum : Spectrum
    outliers : sequence of Outlier
        From :func:`find_spikes` / :func:`find_steps` on this spectrum.
    policy : {"keep", "downweight", "replace"}
        ``keep``: set Flag.SPIKE / Flag.STEP only. ``downweight``: flags, and the sigma of
        eps1 and eps2 at each spike multiplied by ``sigma_factor`` (default 10, i.e. the
        point keeps 1/100 of its weight in any least-squares use); a NaN sigma at a spike is
        first taken from ``noise`` (other points are left as they are). ``replace``: flags,
        and the values at spikes replaced by ``predictor(spectrum, mask)`` (the
        KK-consistent prediction of the repair stage), marked Flag.REPLACED.
    sigma_factor : float
        Sigma inflation for ``downweight``.
    noise : NoiseReport, optional
        Used to fill NaN sigmas before inflating (estimated here when not given).
    predictor : callable, optional
        ``predictor(spectrum, mask) -> complex eps`` for the points where boolean ``mask``
        is True (length ``mask.sum()``) or for all points (length ``len(spectrum)``).

    Returns
    -------
    Spectrum

    Raises
    ------
    InputError
        Unknown policy, or ``replace`` without a predictor (the repair stage must supply
        one).

    Notes
    -----
    A step marks only the first point after the jump and is never down-weighted or
    replaced point by point: a jump is a calibration problem of one side (see
    :func:`kkcheck.merge.merge` for scale/offset reconciliation), and hiding one point would
    not fix it.
    """
    if policy not in _POLICIES:
        raise InputError(f"policy for flagged points must be one of {_POLICIES}, got {policy!r}")
    if policy == "replace" and predictor is None:
        raise InputError(_REPLACE_NEEDS_REPAIR)
    m = len(spectrum)
    spike = np.zeros(m, bool)
    step = np.zeros(m, bool)
    for o in outliers:
        if not 0 <= o.index < m:
            raise ValueError(f"outlier index {o.index} is outside the spectrum")
        if o.kind == "step":
            step[o.index] = True
        else:
            spike[o.index] = True
    flags = np.array(spectrum.flags)
    flags[spike] |= int(Flag.SPIKE)
    flags[step] |= int(Flag.STEP)
    out = spectrum.replace(flags=flags)
    if policy == "keep" or not spike.any():
        return out
    if policy == "downweight":
        s1 = np.array(out.sigma_eps1)
        s2 = np.array(out.sigma_eps2)
        if np.isnan(s1[spike]).any() or np.isnan(s2[spike]).any():
            n1, n2 = noise_per_point(out, noise if noise is not None else estimate_noise(out))
            s1 = np.where(np.isnan(s1) & spike, n1, s1)
            s2 = np.where(np.isnan(s2) & spike, n2, s2)
        s1[spike] *= sigma_factor
        s2[spike] *= sigma_factor
        return out.replace(sigma_eps1=s1, sigma_eps2=s2)
    pred = np.asarray(predictor(out, spike.copy()), dtype=complex)
    if pred.shape == (m,):
        pred = pred[spike]
    if pred.shape != (int(spike.sum()),):
        raise ValueError("predictor must return one complex value per flagged point or per point")
    eps = np.array(out.eps)
    eps[spike] = pred
    flags[spike] |= int(Flag.REPLACED)
    return out.replace(eps=eps, flags=flags)


def clean(
    spectrum: Spectrum,
    *,
    policy: str = "keep",
    spike_threshold: float = 4.0,
    step_threshold: float = 8.0,
    region_points: int = 200,
    sigma_factor: float = DOWNWEIGHT_FACTOR,
    predictor: Callable[[Spectrum, np.ndarray], np.ndarray] | None = None,
) -> CleanResult:
    """Estimate noise, find spikes and steps, fill unknown sigmas and apply a policy.

    Parameters
    ----------
    spectrum : Spectrum
    policy : {"keep", "downweight", "replace"}
        See :func:`apply_policy`.
    spike_threshold, step_threshold : float
        See :func:`find_spikes` and :func:`find_steps`.
    region_points : int
        See :func:`estimate_noise`.
    sigma_factor : float
        See :func:`apply_policy`.
    predictor : callable, optional
        Needed for ``policy="replace"``.

    Returns
    -------
    CleanResult

    Notes
    -----
    Order: noise (:func:`estimate_noise`), spikes (:func:`find_spikes`), steps
    (:func:`find_steps`, with the spikes left out of its fits), NaN sigmas filled from the
    local noise estimate (:func:`kkcheck.kk.noise.spectrum_noise`), then
    :func:`apply_policy`. No point is removed.

    References
    ----------
    .. [1] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
    .. [2] W. S. Cleveland, J. Am. Stat. Assoc. 74(368), 829-836 (1979).
    """
    if policy not in _POLICIES:
        raise InputError(f"policy for flagged points must be one of {_POLICIES}, got {policy!r}")
    if policy == "replace" and predictor is None:
        raise InputError(_REPLACE_NEEDS_REPAIR)
    notes = []
    noise = estimate_noise(spectrum, region_points=region_points)
    spikes = find_spikes(spectrum, threshold=spike_threshold)
    steps = find_steps(spectrum, threshold=step_threshold, ignore=spikes)
    outliers = tuple(sorted(spikes + steps, key=lambda o: (o.energy_ev, o.kind, o.component)))
    notes.append(f"{len(spikes)} spike(s) and {len(steps)} step(s) flagged; no point removed")
    # per-point sigma for the later stages: the local estimate of the KK test (cubic through
    # four neighbours, running median), which curvature biases far less than the chord
    # residuals that rank noise per region above
    from .kk.noise import spectrum_noise

    local = spectrum_noise(spectrum)
    s1, s2 = local.sigma_eps1, local.sigma_eps2
    nan1 = np.isnan(spectrum.sigma_eps1)
    nan2 = np.isnan(spectrum.sigma_eps2)
    if nan1.any() or nan2.any():
        notes.append(
            f"sigma of {int(max(nan1.sum(), nan2.sum()))} point(s) not given; taken from the "
            "noise estimate"
        )
    filled = spectrum.replace(
        sigma_eps1=np.where(nan1, s1, spectrum.sigma_eps1),
        sigma_eps2=np.where(nan2, s2, spectrum.sigma_eps2),
    )
    out = apply_policy(
        filled, outliers, policy, sigma_factor=sigma_factor, noise=noise, predictor=predictor
    )
    if spikes and policy == "downweight":
        notes.append(f"spikes down-weighted: sigma x {sigma_factor:g}")
    elif spikes and policy == "replace":
        notes.append("spikes replaced by the supplied prediction and flagged 'replaced'")
    if steps:
        notes.append(
            "steps are flagged only (one side of each jump is miscalibrated; down-weighting a "
            "point would not fix it)"
        )
    for s, name, _idx in _source_points(spectrum):
        comps = ("n", "k") if spectrum.source_quantity[s] == "nk" else ("eps1", "eps2")
        levels = ", ".join(f"{c} {noise.sigma(name, c):.3g}" for c in comps)
        notes.append(f"noise of {name}: {levels}")
    return CleanResult(out, outliers, noise, policy, tuple(notes))


# --------------------------------------------------------------------------- step levelling


@dataclass(frozen=True)
class StepCorrection:
    """One detector-changeover step and the level shift applied to remove it.

    Attributes
    ----------
    energy_ev : float
        First point after the jump [eV].
    source : str
        Source the step belongs to.
    component : str
        ``"eps1"``, ``"eps2"``, ``"n"`` or ``"k"``: the quantity that jumped.
    jump : float
        Size of the jump, value after minus trend before [component units].
    relative : float
        ``jump`` over the component's value at the step [dimensionless].
    kept : str
        ``"below"`` or ``"above"``: the side of the step (in energy) left as measured; the
        other side of that source was shifted by the jump.
    points : int
        Number of points shifted.
    reason : str
        Why that side was kept (and, when not applied, why not).
    applied : bool
        False when the caller decided to leave the step as measured (the pipeline does so
        when levelling it does not make the data more KK consistent).
    """

    energy_ev: float
    source: str
    component: str
    jump: float
    relative: float
    kept: str
    points: int
    reason: str
    applied: bool = True


def level_steps(
    spectrum: Spectrum, steps: Sequence[Outlier]
) -> tuple[Spectrum, tuple[StepCorrection, ...]]:
    """Remove detected steps by shifting one side of each source to meet the other.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum the steps were found in (merge output, flags set).
    steps : sequence of Outlier
        Outliers of kind ``"step"`` (from :func:`find_steps` or :func:`clean`).

    Returns
    -------
    Spectrum
        A copy with the shifted values; the STEP flag stays on the first point after each
        jump, so the report still shows it.
    tuple of StepCorrection
        One record per step, with the shift applied.

    Notes
    -----
    A changeover step is an instrument artefact: one side of the source is offset against
    the other, and left in place it makes eps1 and eps2 KK inconsistent over a wide range
    (the constrained model spreads the misfit), hiding any genuine fault. The side kept as
    measured is the one holding more of the source's points in overlap with other sources
    (Flag.OVERLAP: there the merge checked the source against the others); with no overlap
    on either side, the side with more points. The other side is shifted additively by the
    jump in the component that jumped (n or k for sources written as n,k, then eps is
    recomputed). Shifts of several steps commute, since each moves a whole side.
    Common practice for detector changeovers, no published source.
    """
    eps = np.array(spectrum.eps)
    names = {n: i for i, n in enumerate(spectrum.source_names)}
    records = []
    for st in sorted((o for o in steps if o.kind == "step"), key=lambda o: o.energy_ev):
        s = names[st.source]
        idx = np.flatnonzero(spectrum.source == s)
        pos = int(np.searchsorted(idx, st.index))
        below, above = idx[:pos], idx[pos:]
        ov = (spectrum.flags & int(Flag.OVERLAP)) != 0
        nb, na = int(np.count_nonzero(ov[below])), int(np.count_nonzero(ov[above]))
        if nb != na:
            keep_below = nb > na
            reason = "holds more points in overlap with other sources"
        else:
            keep_below = below.size >= above.size
            reason = "holds more points (no overlap decides)"
        shift, sign = (above, -1.0) if keep_below else (below, 1.0)
        jump = st.value - st.expected
        vals = eps[shift]
        if st.component in ("eps1", "eps2"):
            if st.component == "eps1":
                vals = vals + sign * jump
            else:
                vals = vals + 1j * sign * jump
        else:
            n, k = eps_to_nk(vals)
            if st.component == "n":
                n = n + sign * jump
            else:
                k = k + sign * jump
            vals = nk_to_eps(n, k)
        eps[shift] = vals
        records.append(
            StepCorrection(
                energy_ev=float(st.energy_ev),
                source=st.source,
                component=st.component,
                jump=float(jump),
                relative=float(jump / st.value) if st.value else float("nan"),
                kept="below" if keep_below else "above",
                points=int(shift.size),
                reason=f"the {'lower' if keep_below else 'higher'}-energy side {reason}",
            )
        )
    return spectrum.replace(eps=eps), tuple(records)


# --------------------------------------------------------------------------- binning


@dataclass(frozen=True)
class BinRecord:
    """What :func:`bin_spectrum` did.

    Attributes
    ----------
    points_in, points_out : int
        Points before and after binning.
    bin_size : int
        Largest number of neighbouring points averaged into one.
    kept_sharp : int
        Points left unbinned because eps1 or eps2 bends there by more than the noise.
    kept_flagged : int
        Points left unbinned because they carry a SPIKE or STEP flag.
    """

    points_in: int
    points_out: int
    bin_size: int
    kept_sharp: int
    kept_flagged: int


def bin_spectrum(
    spectrum: Spectrum, max_points: int = 3000, *, sharp_sigma: float = 3.0
) -> tuple[Spectrum, BinRecord]:
    """Average neighbouring points of smooth stretches so that at most ~``max_points`` remain.

    Parameters
    ----------
    spectrum : Spectrum
        With sigma filled (run :func:`clean` first).
    max_points : int
        Target number of points; a spectrum this small or smaller is returned unchanged.
    sharp_sigma : float
        Points are kept unbinned where the second difference of eps1 or eps2, taken at the
        sample spacing and at the bin width b (y[i-b] - 2 y[i] + y[i+b]), exceeds
        ``sharp_sigma`` times its noise sqrt(6) sigma (with the points it spans). At the bin
        width this bounds the bias of a bin mean, about (b^2 - 1)/(24 b^2) of that
        difference, to ~0.3 sigma.

    Returns
    -------
    Spectrum
        Bins of up to ``b = ceil(M / max_points)`` consecutive points of one source: mean
        energy, mean eps, sigma = sqrt(sum sigma^2) / n, flags OR-ed, the first point's row.
    BinRecord

    Notes
    -----
    The KK-constrained basis fit is dense (time ~ M^2.5, memory ~ M^2), which makes spectra of
    tens of thousands of points (FTIR, fine ellipsometry grids) impractical. Averaging b
    points of a stretch where the data are straight within the noise changes nothing the
    test can see, lowers the noise by sqrt(b) and keeps the per-point weights honest; sharp
    features (a narrow phonon), spikes and steps are kept at full resolution. Common practice
    (binning before a fit), no published source.
    """
    m = len(spectrum)
    if m <= max_points:
        return spectrum, BinRecord(m, m, 1, 0, 0)
    b = int(np.ceil(m / max_points))
    e = spectrum.energy_ev
    eps = spectrum.eps
    s1 = np.where(np.isfinite(spectrum.sigma_eps1), spectrum.sigma_eps1, np.nan)
    s2 = np.where(np.isfinite(spectrum.sigma_eps2), spectrum.sigma_eps2, np.nan)
    flagged = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    groups: list[np.ndarray] = []
    n_sharp = 0
    for _s, _name, idx in _source_points(spectrum):
        sharp = np.zeros(idx.size, bool)
        for st in sorted({1, b}):  # curvature at the sample spacing and at the bin width
            if idx.size < 2 * st + 1:
                continue
            for y, sig in ((eps.real[idx], s1[idx]), (eps.imag[idx], s2[idx])):
                d2 = np.abs(y[: -2 * st] - 2 * y[st:-st] + y[2 * st :])
                ref = np.sqrt(6.0) * np.nan_to_num(sig[st:-st], nan=np.inf)
                for j in np.flatnonzero(d2 > sharp_sigma * ref):
                    sharp[j : j + 2 * st + 1] = True
        single = sharp | flagged[idx]
        n_sharp += int(np.count_nonzero(sharp & ~flagged[idx]))
        run: list[int] = []
        for j, i in enumerate(idx):
            if single[j]:
                if run:
                    groups.extend(np.array_split(np.array(run), -(-len(run) // b)))
                    run = []
                groups.append(np.array([i]))
            else:
                run.append(int(i))
        if run:
            groups.extend(np.array_split(np.array(run), -(-len(run) // b)))
    groups.sort(key=lambda g: e[g].mean())
    cnt = np.array([g.size for g in groups], float)

    def mean(a):
        return np.array([a[g].mean() for g in groups])

    def comb(s):
        return np.array([np.sqrt(np.sum(s[g] ** 2)) for g in groups]) / cnt

    flags = np.array([np.bitwise_or.reduce(spectrum.flags[g]) for g in groups], int)
    out = Spectrum(
        energy_ev=mean(e),
        eps=mean(eps.real) + 1j * mean(eps.imag),
        sigma_eps1=comb(s1),
        sigma_eps2=comb(s2),
        source=np.array([spectrum.source[g[0]] for g in groups], int),
        row=np.array([spectrum.row[g[0]] for g in groups], int),
        flags=flags,
        source_names=spectrum.source_names,
        source_quantity=spectrum.source_quantity,
    )
    rec = BinRecord(m, len(out), b, n_sharp, int(np.count_nonzero(flagged)))
    return out, rec
