"""The noise model of a table: rounding, stated uncertainty, scatter and the test's resolution.

:func:`spectrum_noise` gives every point of a merged spectrum the standard uncertainty of eps1
and eps2 that the KK test (and the stages after it) weigh by, as the quadrature sum of four
parts, each kept and reported per source (:class:`NoiseEstimate`, :class:`SourceNoise`):

(a) **rounding**: the printed precision of the file (``Spectrum.rounding_eps1/2``: q/sqrt(12)
    for a last-digit unit q, the whole q for a value printed as 0);
(b) **stated**: uncertainty columns of the file (``Spectrum.sigma_eps1/2``);
(c) **scatter**: random point-to-point noise estimated from the data, only where nothing is
    stated, with the part that rounding explains removed (:func:`scatter_sigma`);
(d) **resolution**: the part of a feature that a piecewise-linear basis on the table's own
    energies cannot represent (:func:`resolution_sigma`).

References
----------
.. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of uncertainty
   in measurement", section 4.3.7 (rectangular distribution, u = a/sqrt(3) for half-width a;
   from memory); see docs/references.md [GUM2008].
.. [2] T. Gasser, L. Sroka, C. Jennen-Steinmetz, "Residual variance and residual pattern in
   nonlinear regression," Biometrika 73, 625 (1986); see docs/references.md [Gasser1986].
.. [3] F. R. Hampel, J. Am. Stat. Assoc. 69(346), 383-393 (1974).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import maximum_filter1d, median_filter, uniform_filter1d

from ..jsonsafe import json_float
from ..spectrum import Spectrum
from ..units import eps_to_nk, sigma_nk_to_eps
from .basic import (
    _MIN_CURVE_POINTS,
    NOISE_FLOOR_ABS,
    NOISE_FLOOR_REL,
    _pseudo_residuals,
    noise_floor,
)

__all__ = [
    "KNOWN_DIGITS_FLOOR_REL",
    "SourceNoise",
    "NoiseEstimate",
    "scatter_sigma",
    "resolution_sigma",
    "spectrum_noise",
]

#: Seed of the unit white noise that calibrates the scatter estimator's gain on each grid.
_CALIBRATION_SEED = 20240610
#: RMS of the linear-interpolation error over one interval, in units of |f''| h^2:
#: e(t) = f''/2 t (h - t), RMS = |f''| h^2 / sqrt(120).
_LINEAR_RMS = 1.0 / np.sqrt(120.0)
#: Relative floor where the printed digits are known (the rounding part then says how precise a
#: value is). 1e-5 chosen on the corpus (common practice, no source): at 1e-7 (float32 storage)
#: ito_konig2014 reached chi2/dof 4092 and as2s3_synowicki2004 (causal model) failed at 3.3.
KNOWN_DIGITS_FLOOR_REL = 1e-5
_PARTS = ("rounding", "stated", "scatter", "resolution")


@dataclass(frozen=True)
class SourceNoise:
    """The four noise parts of one source, as medians over its points.

    Attributes
    ----------
    source : str
        Source name.
    quantity : str
        ``"nk"`` or ``"eps"`` (the quantity scatter was estimated in).
    points : int
        Points of the source.
    median_eps1, median_eps2 : dict of str to float
        Median over the source's points of each part (``rounding``, ``stated``, ``scatter``,
        ``resolution``) and of the ``combined`` sigma [eps units].
    relative : dict of str to float
        Median over the points of each part and ``combined`` as a fraction of |eps|
        (both components in quadrature).
    dominant : str
        The part with the largest relative median.
    zero_bound_points : int
        Points whose imaginary value was printed as 0 (a bound).
    """

    source: str
    quantity: str
    points: int
    median_eps1: dict
    median_eps2: dict
    relative: dict
    dominant: str
    zero_bound_points: int

    def to_dict(self) -> dict:
        """JSON-safe dict for summary.json."""
        return {
            "source": self.source,
            "quantity": self.quantity,
            "points": self.points,
            "median_eps1": {k: json_float(v) for k, v in self.median_eps1.items()},
            "median_eps2": {k: json_float(v) for k, v in self.median_eps2.items()},
            "relative": {k: json_float(v) for k, v in self.relative.items()},
            "dominant": self.dominant,
            "zero_bound_points": self.zero_bound_points,
        }


@dataclass(frozen=True)
class NoiseEstimate:
    """Per-point noise of a spectrum and its parts.

    Attributes
    ----------
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Combined standard uncertainty of eps1 and eps2 per point [eps units], floor applied:
        what the KK test weighs by.
    estimated : numpy.ndarray
        True where the scatter part was estimated from the data (nothing stated).
    notes : tuple of str
        What was done per source.
    rounding, stated, scatter, resolution : tuple of numpy.ndarray
        Each part as (eps1, eps2) per point [eps units]; zeros where a part does not apply.
    sources : tuple of SourceNoise
        Per-source medians of the parts.
    """

    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    estimated: np.ndarray
    notes: tuple[str, ...]
    rounding: tuple[np.ndarray, np.ndarray] = (np.zeros(0), np.zeros(0))
    stated: tuple[np.ndarray, np.ndarray] = (np.zeros(0), np.zeros(0))
    scatter: tuple[np.ndarray, np.ndarray] = (np.zeros(0), np.zeros(0))
    resolution: tuple[np.ndarray, np.ndarray] = (np.zeros(0), np.zeros(0))
    sources: tuple[SourceNoise, ...] = ()

    def to_dict(self) -> dict:
        """The ``noise`` block of summary.json: one entry per source with its parts."""
        return {
            "method": (
                "quadrature sum of rounding (printed digits, q/sqrt(12); a printed 0 is a bound "
                "with uncertainty q), stated uncertainty columns, random scatter (cubic "
                "pseudo-residuals, high-passed and calibrated on the table's own grid, less the "
                "rounding) and resolution (RMS linear-interpolation error |eps''| h^2/sqrt(120))"
            ),
            "sources": [s.to_dict() for s in self.sources],
        }


def scatter_sigma(energy_ev, values, window: int | None = None) -> np.ndarray:
    """Random point-to-point scatter of a sampled curve, one value per point.

    Parameters
    ----------
    energy_ev : array_like
        Strictly increasing axis [eV].
    values : array_like
        Samples [any unit].
    window : int, optional
        Points in the running median; default ``clip(M // 8, 15, 101)``, odd.

    Returns
    -------
    numpy.ndarray
        Standard deviation per point [unit of ``values``]; NaN with fewer than 7 points.

    Notes
    -----
    The cubic pseudo-residuals r_i of Gasser, Sroka & Jennen-Steinmetz (1986) still carry the
    smooth curve's fourth-derivative term, which dominates on coarse smooth tables; that term
    varies slowly from point to point while white noise does not. So the residuals are
    high-passed once more, d_i = r_i - (r_{i-1} + r_{i+1})/2, which removes what a smooth curve
    produces at the table's sampling. The gain of the two steps on the actual (nonuniform)
    grid is measured, not assumed: the same operations are applied to unit white noise on the
    same energies (fixed seed) and sigma_i = median_W |d| / median_W |d_unit| (a ratio of
    running medians, robust against spikes; Hampel 1974), smoothed as exp(moving average of
    ln sigma) over the window W. The high-pass and the calibration are our own construction
    (no source).
    """
    x = np.asarray(energy_ev, float)
    y = np.asarray(values, float)
    m = x.size
    if m < _MIN_CURVE_POINTS + 2:
        return np.full(m, np.nan)
    if window is None:
        window = int(np.clip(m // 8, 15, 101))
    window = min(window, m if m % 2 else m - 1)
    window += 1 - window % 2
    unit = np.random.default_rng(_CALIBRATION_SEED).standard_normal(m)
    d_y = np.abs(_high_pass(_pseudo_residuals(x, y)))
    d_u = np.abs(_high_pass(_pseudo_residuals(x, unit)))
    num = median_filter(d_y, size=window, mode="mirror")
    den = median_filter(d_u, size=window, mode="mirror")
    s = num / np.where(den > 0, den, np.inf)
    pos = s[s > 0]
    if pos.size == 0:
        return np.zeros(m)
    s = np.where(s > 0, s, pos.min())
    return np.exp(uniform_filter1d(np.log(s), size=window, mode="mirror"))


def _high_pass(r: np.ndarray) -> np.ndarray:
    """d_i = r_i - (r_{i-1} + r_{i+1})/2, ends copied from their neighbours."""
    d = np.empty_like(r)
    d[1:-1] = r[1:-1] - 0.5 * (r[:-2] + r[2:])
    d[0], d[-1] = d[1], d[-2]
    return d


def resolution_sigma(energy_ev, values) -> np.ndarray:
    """What a piecewise-linear basis on the table's energies cannot represent, per point.

    Parameters
    ----------
    energy_ev : array_like
        Strictly increasing axis [eV].
    values : array_like
        eps1 or eps2 on that axis.

    Returns
    -------
    numpy.ndarray
        Standard uncertainty per point [unit of ``values``]; zeros with fewer than 3 points.

    Notes
    -----
    Between two nodes h apart, linear interpolation of f misses e(t) = f''/2 t (h - t), whose
    RMS over the interval is |f''| h^2 / sqrt(120) (the error term of linear interpolation,
    e.g. R. L. Burden, J. D. Faires, "Numerical Analysis", Theorem 3.3; from memory). f'' is
    the second divided difference at each point, h the larger of its two intervals, and the
    value is the running median over five points (so one spike or step is not excused as a
    feature), then the running maximum over three (the error lives in the intervals on both
    sides). Taking this as the part of a feature the KK basis cannot follow, in eps1 as well
    as eps2, is our own estimate (no source): the basis adds tied nodes where eps2 is curved,
    so this is an upper estimate there.
    """
    x = np.asarray(energy_ev, float)
    y = np.asarray(values, float)
    m = x.size
    out = np.zeros(m)
    if m < 3:
        return out
    h1 = x[1:-1] - x[:-2]
    h2 = x[2:] - x[1:-1]
    f2 = 2.0 * ((y[2:] - y[1:-1]) / h2 - (y[1:-1] - y[:-2]) / h1) / (h1 + h2)
    out[1:-1] = _LINEAR_RMS * np.abs(f2) * np.maximum(h1, h2) ** 2
    out[0], out[-1] = out[1], out[-2]
    # median of five first: a single spike or step has a large f'' but is a fault, not a
    # feature the basis should be excused for (it must stay visible to the test)
    out = median_filter(out, size=5, mode="nearest")
    return maximum_filter1d(out, size=3, mode="nearest")


def _source_parts(spectrum: Spectrum, k: int, sel: np.ndarray):
    """(scatter eps1, scatter eps2, resolution eps1, resolution eps2) of source ``k``."""
    e = spectrum.energy_ev[sel]
    eps = spectrum.eps[sel]
    ue, first = np.unique(e, return_index=True)
    zeros = np.zeros(sel.size)
    if ue.size < _MIN_CURVE_POINTS + 2:
        return zeros, zeros, zeros, zeros
    r1 = np.interp(e, ue, resolution_sigma(ue, eps.real[first]))
    r2 = np.interp(e, ue, resolution_sigma(ue, eps.imag[first]))
    q1, q2 = spectrum.rounding_eps1[sel], spectrum.rounding_eps2[sel]
    if spectrum.source_quantity[k] == "nk":
        n, kk = eps_to_nk(eps)
        sn = np.interp(e, ue, scatter_sigma(ue, n[first]))
        sk = np.interp(e, ue, scatter_sigma(ue, kk[first]))
        s1, s2 = sigma_nk_to_eps(n, kk, sn, sk)
    else:
        s1 = np.interp(e, ue, scatter_sigma(ue, eps.real[first]))
        s2 = np.interp(e, ue, scatter_sigma(ue, eps.imag[first]))
    # rounding reads as white noise to the estimator: keep only the scatter it does not explain
    s1 = np.sqrt(np.maximum(s1**2 - q1**2, 0.0))
    s2 = np.sqrt(np.maximum(s2**2 - q2**2, 0.0))
    return s1, s2, r1, r2


def spectrum_noise(
    spectrum: Spectrum,
    *,
    rel_floor: float = NOISE_FLOOR_REL,
    abs_floor: float = NOISE_FLOOR_ABS,
    resolution: bool = True,
) -> NoiseEstimate:
    """Per-point noise of eps1 and eps2 for every point of ``spectrum``, with its parts.

    Parameters
    ----------
    spectrum : Spectrum
        The merged data (rounding fields and stated sigmas as the reader and merge set them).
    rel_floor, abs_floor : float
        Floor sigma >= max(rel_floor * |eps|, abs_floor) applied to every point
        (:func:`kkcheck.noise.noise_floor`).
    resolution : bool
        Include part (d), the basis resolution (default True).

    Returns
    -------
    NoiseEstimate

    Notes
    -----
    Without a stated uncertainty, sigma^2 = rounding^2 + scatter^2 + resolution^2 per
    component; with one, sigma = max(stated, sqrt(rounding^2 + resolution^2)) (a stated
    uncertainty is taken to include the rounding; the resolution counts only where it is the
    larger). Then the floor. The rule makes the model idempotent: a spectrum whose sigmas were
    filled from this estimate (the clean stage does so) gets the same sigmas again.
    Scatter is estimated (:func:`scatter_sigma`, in n,k for an n,k source and propagated with
    :func:`kkcheck.units.sigma_nk_to_eps`, else in eps) only for points without a stated
    uncertainty, and reduced by the rounding in quadrature (rounded values read as white
    noise; a rounding-limited table thus gets no scatter beyond its rounding). The floor
    (:data:`kkcheck.noise.NOISE_FLOOR_REL`, :data:`kkcheck.noise.NOISE_FLOOR_ABS`) keeps a
    table without printed digits from giving infinite chi2; where the digits are known the
    relative floor is at most :data:`KNOWN_DIGITS_FLOOR_REL` (the rounding part replaces it).
    """
    m = len(spectrum)
    stated1 = np.nan_to_num(np.array(spectrum.sigma_eps1, float), nan=0.0)
    stated2 = np.nan_to_num(np.array(spectrum.sigma_eps2, float), nan=0.0)
    given = np.isfinite(spectrum.sigma_eps1) & np.isfinite(spectrum.sigma_eps2)
    sc1, sc2, rs1, rs2 = (np.zeros(m) for _ in range(4))
    notes = []
    for k, name in enumerate(spectrum.source_names):
        sel = np.flatnonzero(spectrum.source == k)
        if sel.size == 0:
            continue
        a, b, c, d = _source_parts(spectrum, k, sel)
        need = ~given[sel]
        sc1[sel[need]], sc2[sel[need]] = a[need], b[need]
        if resolution:
            rs1[sel], rs2[sel] = c, d
        if sel.size < _MIN_CURVE_POINTS + 2:
            notes.append(f"source {name!r}: fewer than 7 points, scatter set to 0 (floor only)")
    r1, r2 = spectrum.rounding_eps1, spectrum.rounding_eps2
    known = (r1 > 0) | (r2 > 0)
    floor = np.where(
        known,
        noise_floor(spectrum.eps, min(rel_floor, KNOWN_DIGITS_FLOOR_REL), abs_floor),
        noise_floor(spectrum.eps, rel_floor, abs_floor),
    )
    s1 = np.where(given, np.maximum(stated1, np.hypot(r1, rs1)), np.sqrt(r1**2 + sc1**2 + rs1**2))
    s2 = np.where(given, np.maximum(stated2, np.hypot(r2, rs2)), np.sqrt(r2**2 + sc2**2 + rs2**2))
    s1, s2 = np.maximum(s1, floor), np.maximum(s2, floor)
    parts = {
        "rounding": (np.array(r1), np.array(r2)),
        "stated": (stated1, stated2),
        "scatter": (sc1, sc2),
        "resolution": (rs1, rs2),
    }
    sources = tuple(_summaries(spectrum, parts, s1, s2))
    notes.extend(_notes(sources))
    return NoiseEstimate(
        sigma_eps1=s1,
        sigma_eps2=s2,
        estimated=~given,
        notes=tuple(notes),
        sources=sources,
        **parts,
    )


def _summaries(spectrum: Spectrum, parts: dict, s1: np.ndarray, s2: np.ndarray):
    """One :class:`SourceNoise` per source with points."""
    mag = np.maximum(np.abs(spectrum.eps), 1e-300)
    for k, name in enumerate(spectrum.source_names):
        sel = np.flatnonzero(spectrum.source == k)
        if sel.size == 0:
            continue
        all_parts = dict(parts, combined=(s1, s2))
        med1 = {p: float(np.median(v[0][sel])) for p, v in all_parts.items()}
        med2 = {p: float(np.median(v[1][sel])) for p, v in all_parts.items()}
        rel = {
            p: float(np.median(np.hypot(v[0][sel], v[1][sel]) / mag[sel]))
            for p, v in all_parts.items()
        }
        dominant = max(_PARTS, key=lambda p: rel[p])
        yield SourceNoise(
            name,
            spectrum.source_quantity[k],
            int(sel.size),
            med1,
            med2,
            rel,
            dominant,
            int(np.count_nonzero(spectrum.zero_bound[sel])),
        )


def _notes(sources) -> list[str]:
    """One sentence per source: the parts as % of |eps| and the dominant one."""
    out = []
    for s in sources:
        r = s.relative
        out.append(
            f"source {s.source!r}: noise {100 * r['combined']:.2g}% of |eps| (rounding "
            f"{100 * r['rounding']:.2g}%, stated {100 * r['stated']:.2g}%, scatter "
            f"{100 * r['scatter']:.2g}%, resolution {100 * r['resolution']:.2g}%; median), "
            f"mostly {s.dominant}"
        )
    return out
