"""Locating a KK inconsistency at its cause: refits without the worst regions, region cores.

Step 3 of the verdict rule of :mod:`kkcheck.kk.consistency`: a fault pulls the KK fit towards
itself and spreads moderate residuals over its neighbours, so a single local fault can make a
region across the whole window. The model is refitted with the points of the most severe
regions at weight 0 (warm-started from the previous solution, :meth:`KKBasisModel.refit`),
up to ``max_refits`` times; wide regions are reduced to their core
(:func:`kkcheck.kk.verdict.core_of`) before they are left out and when they are reported.

The refit is the prediction of the remaining data at the left-out points: where it
extrapolates (a region at a window edge) it can be far from any reasonable model, so sizes
are always measured against both fits (:func:`kkcheck.kk.verdict.sized_region`).

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005); see docs/references.md [Kuzmenko2005].
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..noise import MIN_POINTS
from .basisfit import KKBasisModel
from .regions import Region, find_regions
from .verdict import core_of

if TYPE_CHECKING:
    from .consistency import KKTestOptions

__all__ = ["Pass", "evaluate", "refit_without_regions", "cores_of_wide_regions", "core_if_wide"]


@dataclass(frozen=True)
class Pass:
    """Model, its eps at the data, normalised residuals and regions of one fit.

    Attributes
    ----------
    model : KKBasisModel
        The fitted model.
    eps : numpy.ndarray
        ``model.eps`` at the data energies.
    z1, z2 : numpy.ndarray
        (data - model) / sigma of eps1 and eps2, with the fit sigmas.
    regions : list of Region
        Regions of these residuals (:func:`kkcheck.kk.regions.find_regions`), unsized.
    left_out : numpy.ndarray of bool or None
        Points given weight 0 in this fit (None for the fit to all points).
    """

    model: KKBasisModel
    eps: np.ndarray
    z1: np.ndarray
    z2: np.ndarray
    regions: list
    left_out: np.ndarray | None = None


def evaluate(spectrum, model: KKBasisModel, u1, u2, counted, opt: KKTestOptions) -> Pass:
    """Residuals of ``model`` normalised by the fit sigmas ``u1``, ``u2``, and their regions."""
    e = spectrum.energy_ev
    mod = model.eps(e)
    z1 = (spectrum.eps.real - mod.real) / u1
    z2 = (spectrum.eps.imag - mod.imag) / u2
    regions = find_regions(e, z1, counted, "eps1", opt) + find_regions(e, z2, counted, "eps2", opt)
    return Pass(model, mod, z1, z2, regions)


def refit_without_regions(spectrum, first: Pass, u1, u2, wt, counted, opt: KKTestOptions):
    """Step 3 of the verdict rule: refits without the most severe regions' points.

    Parameters
    ----------
    spectrum : Spectrum
        The data.
    first : Pass
        The fit to all points.
    u1, u2 : numpy.ndarray
        Fit sigmas of eps1 and eps2.
    wt : numpy.ndarray
        Per-point weights of the fit to all points.
    counted : numpy.ndarray of bool
        Points counted in the region search.
    opt : KKTestOptions
        ``max_refits``, ``refit_severity_ratio``, ``max_excluded_fraction``,
        ``max_region_fraction`` and the region rule.

    Returns
    -------
    Pass, list of (str, str)
        The pass to report (``first`` when no refit was made) and its (code, text) notes.

    Notes
    -----
    Each refit leaves out, in addition, the severe regions of the previous one (wide ones
    shrunk to their core), warm-started from the previous solution; it stops when a refit
    finds no region, leaves nothing new out, or would leave out more than
    ``max_excluded_fraction`` of the points.
    """
    e = spectrum.energy_ev
    m = len(spectrum)
    excluded = np.zeros(m, bool)
    current, made, too_many = first, 0, False
    for _ in range(max(0, opt.max_refits)):
        trial = excluded | _severe_points(e, current, counted, opt)
        if not current.regions or not np.any(trial & ~excluded):
            break
        w2 = np.where(trial, 0.0, wt)
        if np.count_nonzero(w2) < max(MIN_POINTS, (1 - opt.max_excluded_fraction) * m):
            too_many = True
            break
        fit2 = current.model.refit(
            e, spectrum.eps, u1, u2, w2, smoothing=opt.smoothing, warm_start=True
        )
        second = evaluate(spectrum, fit2.model, u1, u2, counted, opt)
        if not second.regions:
            break
        current, excluded, made = dataclasses.replace(second, left_out=trial), trial, made + 1
    if made == 0:
        if too_many:
            text = "inconsistent over most of the window: no refit without the regions was made"
            return first, [("no_refit", text)]
        return first, []
    text = (
        f"regions and residuals are from a refit ({made} in all) without the points found "
        "inconsistent; each region's size is the smaller of its deviation from that refit and "
        "from the fit to all points; chi2/dof is of the fit to all points"
    )
    return current, [("refit_without_regions", text)]


def _severe_points(e, found: Pass, counted, opt: KKTestOptions) -> np.ndarray:
    """Points of the regions with severity >= ``refit_severity_ratio`` x the largest, each
    wide region (more than ``max_region_fraction`` of the counted points) shrunk to its core."""
    inside = np.zeros(e.size, bool)
    if not found.regions:
        return inside
    top = max(g.severity for g in found.regions)
    for g in found.regions:
        if g.severity >= opt.refit_severity_ratio * top:
            g = core_if_wide(g, e, found, counted, opt)
            inside |= (e >= g.from_ev) & (e <= g.to_ev)
    return inside


def core_if_wide(g: Region, e, found: Pass, counted, opt: KKTestOptions) -> Region:
    """``g``, or its core (:func:`kkcheck.kk.verdict.core_of`) when it holds more than
    ``max_region_fraction`` of the counted points."""
    n_in = np.count_nonzero(counted & (e >= g.from_ev) & (e <= g.to_ev))
    if n_in <= opt.max_region_fraction * max(1, np.count_nonzero(counted)):
        return g
    z = found.z1 if g.component == "eps1" else found.z2
    return core_of(g, e, z, counted, opt.run_width, opt.z_threshold)


def cores_of_wide_regions(spectrum, found: Pass, counted, opt: KKTestOptions):
    """``found`` with its wide regions replaced by their core, and a note naming each span."""
    e = spectrum.energy_ev
    out, notes = [], []
    for g in found.regions:
        c = core_if_wide(g, e, found, counted, opt)
        if c is not g:
            notes.append(
                (
                    "region_core",
                    f"{g.component} deviates beyond the noise over {g.from_ev:.4g}-"
                    f"{g.to_ev:.4g} eV; the worst part, {c.from_ev:.4g}-{c.to_ev:.4g} eV, is "
                    "reported as the region",
                )
            )
        out.append(c)
    return dataclasses.replace(found, regions=out), notes
