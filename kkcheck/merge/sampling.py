"""How one source is sampled: gaps in its axis, where it covers, its per-point sigmas.

Shared by the overlap fit (:mod:`kkcheck.merge.overlap`) and the assembly of the merged
spectrum (:mod:`kkcheck.merge.assembly`), which both need to know where a source has data and
how much each of its points weighs.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..noise import neighbour_noise_sigma
from ..spectrum import Dataset

__all__ = ["GAP_FACTOR", "GAP_MIN_REL", "find_gaps"]

#: A spacing is a gap when it exceeds this many times the median spacing on each side ...
GAP_FACTOR = 5.0
#: ... and is wider than this fraction of the photon energy at its lower end.
GAP_MIN_REL = 0.01


def find_gaps(
    energy_ev, *, factor: float = GAP_FACTOR, min_rel: float = GAP_MIN_REL, neighbours: int = 5
) -> tuple[tuple[float, float], ...]:
    """Gaps in a sampled axis: spacings far beyond the local sampling.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV] (sorted here; repeated values count once).
    factor : float
        A spacing must exceed ``factor`` times the median of the (up to) ``neighbours``
        spacings on its left AND on its right (one side at the ends of the axis).
    min_rel : float
        ... and be wider than ``min_rel`` times the energy at its lower end.
    neighbours : int
        How many spacings on each side form the local sampling.

    Returns
    -------
    tuple of (float, float)
        (lower, upper) energies of each gap [eV].

    Notes
    -----
    d_i = E_{i+1} - E_i is a gap when d_i > factor * median(d_{i-k..i-1}),
    d_i > factor * median(d_{i+1..i+k}) and d_i > min_rel * E_i, with k = ``neighbours``.
    Comparing with both sides keeps a change of sampling density (a dense source
    followed by a sparse one) from being called a gap; the relative minimum keeps a few
    missing points of a very dense scan from being called one.
    """
    e = np.unique(np.asarray(energy_ev, float))
    if e.size < 3:
        return ()
    d = np.diff(e)
    k = int(neighbours)
    pad = np.concatenate([np.full(k, np.nan), d, np.full(k, np.nan)])
    win = np.lib.stride_tricks.sliding_window_view(pad, k)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN side at the ends
        left = np.nanmedian(win[: d.size], axis=1)
        right = np.nanmedian(win[k + 1 : k + 1 + d.size], axis=1)
    big_l = np.where(np.isfinite(left), d > factor * left, True)
    big_r = np.where(np.isfinite(right), d > factor * right, True)
    one_side = np.isfinite(left) | np.isfinite(right)
    gap = big_l & big_r & one_side & (d > min_rel * e[:-1])
    return tuple((float(e[i]), float(e[i + 1])) for i in np.flatnonzero(gap))


def _covers(ds: Dataset, gaps, energy: np.ndarray) -> np.ndarray:
    """True where ``energy`` lies inside the source's range and not inside one of its gaps."""
    lo, hi = ds.range_ev
    tol = 1e-9 * hi
    inside = (energy >= lo - tol) & (energy <= hi + tol)
    for a, b in gaps:
        inside &= ~((energy > a + tol) & (energy < b - tol))
    return inside


def _sigmas(ds: Dataset) -> tuple[np.ndarray, np.ndarray, bool]:
    """Per-point sigma of eps1, eps2: given ones, NaNs filled by a noise estimate.

    Returns (sigma1, sigma2, given) with ``given`` False when any value was estimated. The
    estimate is :func:`kkcheck.noise.neighbour_noise_sigma` of the component, never below
    1e-9 max|eps| (nor 1e-15), so that a noise-free source keeps a finite weight.
    """
    given = ds.sigma_eps1 is not None and ds.sigma_eps2 is not None
    out = []
    for sig, comp in ((ds.sigma_eps1, ds.eps.real), (ds.sigma_eps2, ds.eps.imag)):
        est = neighbour_noise_sigma(ds.energy_ev, comp)
        scale = float(np.max(np.abs(ds.eps))) if len(ds) else 1.0
        floor = max(1e-9 * scale, 1e-15)
        est = est if np.isfinite(est) and est > floor else floor
        if sig is None:
            out.append(np.full(len(ds), est))
        else:
            bad = ~np.isfinite(sig) | (sig <= 0)
            given = given and not bad.any()
            out.append(np.where(bad, est, sig))
    return out[0], out[1], given


def _rows(ds: Dataset) -> np.ndarray:
    """File row of each point of the source (zeros when the reader recorded none)."""
    r = ds.provenance.rows
    return np.asarray(r, int) if r.size == len(ds) else np.zeros(len(ds), int)
