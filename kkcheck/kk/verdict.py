"""The size of a KK inconsistency in physical units, and the verdict that compares it.

A region of the KK test (:mod:`kkcheck.kk.regions`) says *where* eps1 and eps2 disagree by
more than their noise; this module says *by how much*, as a relative deviation of eps (and as
absolute deviations of n and k), so that two reports can be compared whatever their noise:
a 30-sigma region on a 6-digit table may be a 0.05 % effect, a 5-sigma region on a 2-digit
table a 5 % one. The verdict is "inconsistent" only where a deviation is both significant (a
region) and larger than a tolerance.

Default tolerance (:data:`DEFAULT_TOLERANCE`, 1 % of max(|eps|, 1)): published optical
constants of good quality agree with each other and with their own KK partner to about
1-2 % in n and k (Aspnes and Studna 1983 quote ~1e-3 in the ellipsometric ratio, which gives
a few 0.1 % in eps of a semiconductor; Johnson and Christy 1972 quote errors below 0.02 in n
and k, i.e. 1-4 % in eps of a noble metal in the visible; from memory), and a 1 % change of
eps moves the normal-incidence reflectance of a dielectric by less than ~1 % of its value.
So a deviation below 1 % of eps is within what a practitioner accepts from independent
measurements; above it a model built on the table would be noticeably off. The absolute
floor (|eps| taken as at least 1, the vacuum's eps) keeps the tolerance meaningful where eps
passes near zero (a metal near its screened plasma energy): there the deviation must exceed
0.01 in eps, about the last digit of a 2-3 digit table.

References
----------
.. [1] D. E. Aspnes, A. A. Studna, Phys. Rev. B 27, 985 (1983); see docs/references.md
   [AspnesStudna1983] (accuracy quoted from memory).
.. [2] P. B. Johnson, R. W. Christy, Phys. Rev. B 6, 4370 (1972); see docs/references.md
   [JohnsonChristy1972].
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.ndimage import uniform_filter1d

from .regions import Region

__all__ = [
    "DEFAULT_TOLERANCE",
    "EPS_SCALE_FLOOR",
    "Deviation",
    "deviation_profile",
    "sized_region",
    "window_deviation",
    "worst_part",
    "largest_part",
    "core_of",
    "minor_note",
    "misfit_note",
    "verdict_text",
]

#: Default tolerance of the verdict: 1 % of max(|eps|, 1) (module docstring).
DEFAULT_TOLERANCE = 0.01
#: |eps| is taken as at least this in the relative deviation (the vacuum's eps).
EPS_SCALE_FLOOR = 1.0


@dataclass(frozen=True)
class Deviation:
    """Per-point deviation of the data from the KK model, beyond the noise.

    Attributes
    ----------
    rel1, rel2 : numpy.ndarray
        Relative excess deviation of eps1 and eps2 at each point [fraction of
        max(|eps|, 1)]: the running rms of (data - model) over ``width`` counted points with
        the noise variance subtracted, NaN at points not counted.
    dn, dk : numpy.ndarray
        n_data - n_model and k_data - k_model at each point (N = sqrt(eps), k >= 0 branch).
    """

    rel1: np.ndarray
    rel2: np.ndarray
    dn: np.ndarray
    dk: np.ndarray

    def rel(self, component: str) -> np.ndarray:
        """``rel1`` for "eps1", ``rel2`` for "eps2"."""
        return self.rel1 if component == "eps1" else self.rel2


def _excess(d: np.ndarray, s: np.ndarray, counted: np.ndarray, width: int) -> np.ndarray:
    """Running sqrt(max(<d^2> - <s^2>, 0)) over ``width`` counted points (NaN elsewhere)."""
    out = np.full(d.size, np.nan)
    idx = np.flatnonzero(counted)
    if idx.size == 0:
        return out
    md = uniform_filter1d(d[idx] ** 2, size=max(1, width), mode="mirror")
    ms = uniform_filter1d(s[idx] ** 2, size=max(1, width), mode="mirror")
    out[idx] = np.sqrt(np.maximum(md - ms, 0.0))
    return out


def deviation_profile(eps_data, eps_model, sigma_eps1, sigma_eps2, counted, width: int):
    """The :class:`Deviation` of data from model, per point.

    Notes
    -----
    rel_c,i = sqrt(max(<(c_data - c_model)^2> - <sigma_c^2>, 0)) / max(|eps_data,i|, 1), the
    means over the ``width`` counted points centred on i (mirrored at the ends): the size of
    the systematic part of the residual, with the expected noise contribution removed, so
    that pure noise gives ~0 and not ~sigma/|eps|.
    """
    eps_data = np.asarray(eps_data, complex)
    eps_model = np.asarray(eps_model, complex)
    counted = np.asarray(counted, bool)
    scale = np.maximum(np.abs(eps_data), EPS_SCALE_FLOOR)
    d = eps_data - eps_model
    rel1 = _excess(d.real, np.asarray(sigma_eps1, float), counted, width) / scale
    rel2 = _excess(d.imag, np.asarray(sigma_eps2, float), counted, width) / scale
    n_data = np.sqrt(eps_data)
    n_model = np.sqrt(eps_model.real + 1j * np.maximum(eps_model.imag, 0.0))
    dn_all = n_data - n_model
    return Deviation(rel1, rel2, dn_all.real, dn_all.imag)


def _inside(energy_ev, region: Region) -> np.ndarray:
    e = np.asarray(energy_ev, float)
    return (e >= region.from_ev) & (e <= region.to_ev)


def _size_in(inside: np.ndarray, component: str, dev: Deviation) -> tuple[float, float, float]:
    """(largest relative deviation of ``component``, largest |dn|, largest |dk|) inside."""
    rel = dev.rel(component)[inside]
    size = float(np.nanmax(rel)) if np.any(np.isfinite(rel)) else 0.0
    if not inside.any():
        return size, 0.0, 0.0
    return size, float(np.max(np.abs(dev.dn[inside]))), float(np.max(np.abs(dev.dk[inside])))


def sized_region(
    region: Region,
    energy_ev,
    dev: Deviation,
    tolerance: float,
    dev_all: Deviation | None = None,
    left_out=None,
) -> Region:
    """``region`` with its size and whether the size exceeds ``tolerance``.

    Parameters
    ----------
    region : Region
        A region of the residuals of the reported model.
    energy_ev : array_like
        Energies of the data [eV].
    dev : Deviation
        Deviation of the data from the reported model (the refit, when one was made).
    tolerance : float
        Tolerance [fraction of max(|eps|, 1)].
    dev_all : Deviation, optional
        Deviation from the fit to all points, when the reported model is a refit without
        some regions (None: ``dev`` is of the fit to all points).
    left_out : array_like of bool, optional
        Points the refit left out (with ``dev_all``): the fit to all points is measured over
        the region and these points.

    Returns
    -------
    Region
        With ``deviation_rel``, ``deviation_all_rel``, ``deviation_refit_rel``, ``dn_max``,
        ``dk_max`` and ``exceeds_tolerance`` set.

    Notes
    -----
    Size against one fit: the largest relative excess deviation of the region's component
    inside it (:func:`deviation_profile`). With a refit, the region is sized against both
    fits and ``deviation_rel`` is the smaller size (likewise ``dn_max``, ``dk_max``): the fit
    to all points is pulled towards a fault and spreads it over the neighbours, so its
    largest deviation over the region and the points the refit left out is a lower bound of
    the fault's size; the refit, made without those points, predicts them from the rest and
    gives the full size where the rest constrains them, but it extrapolates at a window edge
    (sizes of several 100 % on published tables, e.g. Ti of Johnson and Christy 1974 at
    0.64-1.3 eV).
    The tolerance is decided on the smaller size, so only a deviation that is larger than the
    tolerance against both models counts (documented choice: a verdict that never rests on
    an extrapolation).
    """
    inside = _inside(energy_ev, region)
    size, dn, dk = _size_in(inside, region.component, dev)
    size_all, size_refit = size, float("nan")
    if dev_all is not None:
        size_refit = size
        span = inside if left_out is None else inside | np.asarray(left_out, bool)
        size_all, dn_all, dk_all = _size_in(span, region.component, dev_all)
        size, dn, dk = min(size, size_all), min(dn, dn_all), min(dk, dk_all)
    return replace(
        region,
        deviation_rel=size,
        deviation_all_rel=size_all,
        deviation_refit_rel=size_refit,
        dn_max=dn,
        dk_max=dk,
        exceeds_tolerance=bool(size > tolerance),
    )


def window_deviation(energy_ev, dev: Deviation, counted) -> tuple[float, float, float, str]:
    """(rms, max, energy of the max [eV], component of the max) of the relative deviation
    over the counted points of the whole window (both components)."""
    counted = np.asarray(counted, bool)
    r1 = np.where(counted, dev.rel1, np.nan)
    r2 = np.where(counted, dev.rel2, np.nan)
    both = np.concatenate([r1[counted], r2[counted]])
    if both.size == 0 or not np.any(np.isfinite(both)):
        return 0.0, 0.0, float("nan"), "eps1"
    rms = float(np.sqrt(np.nanmean(both**2)))
    j1, j2 = int(np.nanargmax(r1)), int(np.nanargmax(r2))
    if r1[j1] >= r2[j2]:
        return rms, float(r1[j1]), float(energy_ev[j1]), "eps1"
    return rms, float(r2[j2]), float(energy_ev[j2]), "eps2"


def _run_around(values: np.ndarray, peak: int, level: float) -> tuple[int, int]:
    """First and last index of the run of ``values >= level`` that contains ``peak``."""
    lo = peak
    while lo > 0 and values[lo - 1] >= level:
        lo -= 1
    hi = peak
    while hi + 1 < values.size and values[hi + 1] >= level:
        hi += 1
    return lo, hi


def _running_rms(z: np.ndarray, counted: np.ndarray, width: int) -> np.ndarray:
    """Running rms of z over ``width`` counted points, 0 at points not counted."""
    out = np.zeros(z.size)
    idx = np.flatnonzero(counted)
    if idx.size:
        ms = uniform_filter1d(z[idx] ** 2, size=max(1, width), mode="mirror")
        out[idx] = np.sqrt(np.maximum(ms, 0.0))
    return out


def core_of(region: Region, energy_ev, z, counted, width: int, z_threshold: float) -> Region:
    """The worst part of a wide region: the run around its peak running rms where the running
    rms stays above half the peak (and above ``z_threshold``), as a Region of the same
    component with origin "core"."""
    e = np.asarray(energy_ev, float)
    rr = _running_rms(np.asarray(z, float), np.asarray(counted, bool), width)
    rr = np.where(_inside(e, region), rr, 0.0)
    peak = int(np.argmax(rr))
    lo, hi = _run_around(rr, peak, max(z_threshold, 0.5 * rr[peak]))
    sev = float(np.max(np.abs(np.asarray(z)[lo : hi + 1][np.asarray(counted)[lo : hi + 1]])))
    return replace(region, from_ev=float(e[lo]), to_ev=float(e[hi]), severity=sev, origin="core")


def worst_part(energy_ev, z1, z2, counted, width: int, strong: float) -> Region:
    """Region of the worst energies when the verdict comes from the overall misfit alone.

    The component and point with the largest running rms of z; the region is the run around
    it where the running rms stays above half its peak (origin "worst_part").
    """
    e = np.asarray(energy_ev, float)
    counted = np.asarray(counted, bool)
    best = None
    for comp, z in (("eps1", np.asarray(z1, float)), ("eps2", np.asarray(z2, float))):
        rr = _running_rms(z, counted, width)
        peak = int(np.argmax(rr))
        if best is None or rr[peak] > best[1][best[2]]:
            best = (comp, rr, peak, z)
    comp, rr, peak, z = best
    lo, hi = _run_around(rr, peak, 0.5 * rr[peak])
    sev = float(np.max(np.abs(z[lo : hi + 1][counted[lo : hi + 1]])))
    label = "strong" if sev >= strong else "moderate"
    return Region(float(e[lo]), float(e[hi]), comp, sev, label, origin="worst_part")


def largest_part(energy_ev, dev: Deviation, z1, z2, counted, opt) -> Region:
    """Region of the largest relative deviation when the verdict comes from the overall
    misfit and its most significant part (:func:`worst_part`) is within the tolerance.

    The component and point with the largest relative excess deviation (``dev``); the region
    is the run around it where that deviation stays above half its peak and above
    ``opt.tolerance`` (origin "worst_part"); severity is the largest |z| there. The overall
    chi2/dof is what makes it significant, as for :func:`worst_part`.
    """
    e = np.asarray(energy_ev, float)
    counted = np.asarray(counted, bool)
    best = None
    for comp, z in (("eps1", z1), ("eps2", z2)):
        rel = np.where(counted, np.nan_to_num(dev.rel(comp)), 0.0)
        peak = int(np.argmax(rel))
        if best is None or rel[peak] > best[1][best[2]]:
            best = (comp, rel, peak, np.asarray(z, float))
    comp, rel, peak, z = best
    lo, hi = _run_around(rel, peak, max(0.5 * rel[peak], opt.tolerance))
    sev = float(np.max(np.abs(z[lo : hi + 1][counted[lo : hi + 1]])))
    label = "strong" if sev >= opt.strong_severity else "moderate"
    return Region(float(e[lo]), float(e[hi]), comp, sev, label, origin="worst_part")


def _pct(x: float) -> str:
    return f"{100.0 * x:.2g} %"


def minor_note(minor, tolerance: float) -> str:
    """The note on significant regions below the tolerance, naming the largest."""
    big = max(minor, key=lambda g: g.deviation_rel)
    return (
        f"{len(minor)} significant region(s) smaller than the tolerance {_pct(tolerance)} of "
        f"|eps| not counted; the largest, {big.component} at {big.from_ev:.4g}-"
        f"{big.to_ev:.4g} eV, deviates by {_pct(big.deviation_rel)} ({big.severity:.3g} sigma)"
    )


def misfit_note(
    chi2_dof: float, worst: Region, had_regions: bool, chi2_threshold: float, tolerance: float
) -> tuple[str, str]:
    """(code, text) of the note when chi2/dof is high and no region counts: "misfit_only"
    when the worst part exceeds the tolerance (it is then the verdict's region), else
    "chi2_high"; both name the worst energies."""
    where = (
        f"the worst energies are {worst.from_ev:.4g}-{worst.to_ev:.4g} eV in {worst.component} "
        f"({_pct(worst.deviation_rel)} of |eps|, {worst.severity:.3g} sigma)"
    )
    if worst.exceeds_tolerance:
        text = (
            f"inconsistent from the overall misfit alone: chi2/dof = {chi2_dof:.3g} is above "
            f"{chi2_threshold} while no run of residuals "
            f"{'larger than the tolerance ' if had_regions else ''}makes a region; {where}"
        )
        return "misfit_only", text
    text = (
        f"chi2/dof = {chi2_dof:.3g} above {chi2_threshold}, but the deviation stays "
        f"within the tolerance {_pct(tolerance)} of |eps| (noise underestimated or a "
        f"small misfit everywhere); {where}"
    )
    return "chi2_high", text


def verdict_text(regions, minor, max_rel: float, tolerance: float) -> str:
    """One phrase with the verdict and its size (``verdict_text``)."""
    if regions:
        g = max(regions, key=lambda r: r.deviation_rel)
        return (
            f"inconsistent: {_pct(g.deviation_rel)} of |eps| in {g.component} at "
            f"{g.from_ev:.4g}-{g.to_ev:.4g} eV ({g.severity:.3g} sigma; tolerance "
            f"{_pct(tolerance)})"
        )
    largest = max([max_rel, *(g.deviation_rel for g in minor)])
    # a larger deviation without a region is not significant where it is: say so, so that
    # the phrase never reads as "within 1 %" next to a bigger number without a reason
    caveat = ", not significant where it occurs" if largest > tolerance else ""
    return (
        f"consistent within {_pct(tolerance)} (largest deviation beyond the noise "
        f"{_pct(largest)} of |eps|{caveat})"
    )
