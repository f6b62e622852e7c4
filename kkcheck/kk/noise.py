"""Per-point noise of eps1 and eps2: given uncertainties where known, a robust estimate elsewhere.

For each source of a :class:`~kkcheck.spectrum.Spectrum` separately:

* where ``sigma_eps1`` / ``sigma_eps2`` are given (not NaN) they are used as they are;
* otherwise the noise is estimated from the data themselves. Each point is compared with the
  cubic through its two neighbours on either side (Lagrange interpolation on the actual,
  possibly nonuniform, energies); the residual divided by sqrt(1 + sum c_j^2) has the noise's
  standard deviation when the signal is locally cubic. The local noise is 1.4826 x the running
  median of |residual| over ``window`` points (robust against spikes and against the few
  points where a sharp feature breaks the cubic approximation), smoothed in log over the same
  window, so noise that changes slowly along the spectrum (heteroscedastic) is followed;
* for a source whose file gave n,k the estimate is made on n and k, and propagated to eps with
  :func:`kkcheck.units.sigma_nk_to_eps` (noise uniform in n,k grows with |N| in eps).

A floor keeps a noiseless table from giving infinite chi2: sigma >= max(rel_floor * |eps|,
abs_floor), defaults 1e-4 and 1e-6 (the rounding of a table printed with 4-5 significant
digits). It is also about the resolution limit of the KK basis: a noiseless table of a
10 cm^-1 phonon sampled every 1 cm^-1 needs a floor of ~3e-4 |eps| to pass; raise
``rel_floor`` for such noiseless tables.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation," J. Am. Stat.
   Assoc. 69, 383 (1974) (median absolute deviation, normal-consistent factor 1.4826).
.. [2] T. Gasser, L. Sroka, C. Jennen-Steinmetz, "Residual variance and residual pattern in
   nonlinear regression," Biometrika 73, 625 (1986) (noise variance from local
   pseudo-residuals normalised by their coefficients).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter, uniform_filter1d

from ..spectrum import Spectrum
from ..units import eps_to_nk, sigma_nk_to_eps

__all__ = ["NoiseEstimate", "local_noise", "spectrum_noise"]

_MAD_TO_SIGMA = 1.482602218505602  # 1 / Phi^-1(3/4)


@dataclass(frozen=True)
class NoiseEstimate:
    """Per-point noise of a spectrum.

    Attributes
    ----------
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Standard uncertainty of eps1 and eps2 per point [eps units], floor applied.
    estimated : numpy.ndarray
        True where the value was estimated from the data (False where the spectrum gave it).
    notes : tuple of str
        What was done per source.
    """

    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    estimated: np.ndarray
    notes: tuple[str, ...]


def _pseudo_residuals(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Residual of y_i from the cubic through (i-2, i-1, i+1, i+2), normalised to unit gain."""
    m = x.size
    r = np.full(m, np.nan)
    if m < 5:
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
    r_i = (y_i - sum_j c_j y_j) / sqrt(1 + sum_j c_j^2), c_j the cubic Lagrange weights of the
    neighbours i-2, i-1, i+1, i+2 at x_i; sigma_i = 1.4826 median_{|k-i|<=W/2} |r_k|, then
    exp(moving average of ln sigma) over the same window.
    """
    x = np.asarray(energy_ev, float)
    y = np.asarray(values, float)
    m = x.size
    if m < 5:
        return np.full(m, np.nan)
    if window is None:
        window = int(np.clip(m // 8, 15, 101))
    window = min(window, m if m % 2 else m - 1)
    window += 1 - window % 2
    r = np.abs(_pseudo_residuals(x, y))
    s = _MAD_TO_SIGMA * median_filter(r, size=window, mode="mirror")
    pos = s[s > 0]
    if pos.size == 0:
        return np.zeros(m)
    s = np.where(s > 0, s, pos.min())
    return np.exp(uniform_filter1d(np.log(s), size=window, mode="mirror"))


def spectrum_noise(
    spectrum: Spectrum, *, rel_floor: float = 1e-4, abs_floor: float = 1e-6
) -> NoiseEstimate:
    """Per-point noise of eps1 and eps2 for every point of ``spectrum``.

    Parameters
    ----------
    spectrum : Spectrum
        The merged data.
    rel_floor, abs_floor : float
        Floor sigma >= max(rel_floor * |eps|, abs_floor) applied to every point.

    Returns
    -------
    NoiseEstimate
    """
    m = len(spectrum)
    s1 = np.array(spectrum.sigma_eps1, float)
    s2 = np.array(spectrum.sigma_eps2, float)
    est = np.zeros(m, bool)
    notes = []
    for k, name in enumerate(spectrum.source_names):
        sel = np.nonzero(spectrum.source == k)[0]
        need = ~(np.isfinite(s1[sel]) & np.isfinite(s2[sel]))
        if sel.size == 0 or not np.any(need):
            continue
        e = spectrum.energy_ev[sel]
        eps = spectrum.eps[sel]
        # points sharing an energy within one source cannot occur in a Dataset; guard anyway
        ue, first = np.unique(e, return_index=True)
        if ue.size < 5:
            notes.append(f"source {name!r}: fewer than 5 points, noise set to the floor")
            e1, e2 = np.zeros(sel.size), np.zeros(sel.size)
        elif spectrum.source_quantity[k] == "nk":
            n, kk = eps_to_nk(eps)
            sn = np.interp(e, ue, local_noise(ue, n[first]))
            sk = np.interp(e, ue, local_noise(ue, kk[first]))
            e1, e2 = sigma_nk_to_eps(n, kk, sn, sk)
            notes.append(
                f"source {name!r}: noise estimated in n,k (median {np.median(sn):.2g}, "
                f"{np.median(sk):.2g}) and propagated to eps"
            )
        else:
            e1 = np.interp(e, ue, local_noise(ue, eps.real[first]))
            e2 = np.interp(e, ue, local_noise(ue, eps.imag[first]))
            notes.append(
                f"source {name!r}: noise estimated in eps1,eps2 (median {np.median(e1):.2g}, "
                f"{np.median(e2):.2g})"
            )
        miss1 = ~np.isfinite(s1[sel])
        miss2 = ~np.isfinite(s2[sel])
        s1[sel[miss1]] = e1[miss1]
        s2[sel[miss2]] = e2[miss2]
        est[sel[miss1 | miss2]] = True
    floor = np.maximum(rel_floor * np.abs(spectrum.eps), abs_floor)
    s1 = np.maximum(np.nan_to_num(s1, nan=0.0), floor)
    s2 = np.maximum(np.nan_to_num(s2, nan=0.0), floor)
    return NoiseEstimate(sigma_eps1=s1, sigma_eps2=s2, estimated=est, notes=tuple(notes))
