"""Repair: a KK-consistent reconstruction of a spectrum, flagged points replaced, gaps filled.

The reconstruction is the KK-constrained basis model of :func:`kkcheck.kk.consistency.kk_test`
(Kuzmenko 2005), refitted on the same basis with the points to be replaced given zero weight,
so each replacement is a prediction from the *other* data through the KK relations and
passivity, not a smoothing of the bad value itself. Every changed value is recorded; nothing
is deleted.

Policies (which measured values are replaced by the model):

* ``"none"``: none; only gaps (and grid points without a measurement) are filled;
* ``"replace_flagged"`` (default): points with Flag.SPIKE or Flag.STEP, both components;
* ``"replace_flagged_and_regions"``: also the component that is inconsistent inside each KK
  region of the test result (the point gets Flag.KK_REGION);
* ``"model"``: every value is the model's (a fully KK-consistent table).

Uncertainty band: first-order propagation of the parameter covariance of the bounded
least-squares fit, restricted to the free (not at bound) parameters and scaled by
max(1, chi2/dof) (:meth:`kkcheck.kk.basisfit.KKBasisModel.eps_sigma`). At measured points
that are kept, the band is the data's own noise. Parameters held at the bound eps2 = 0 do not
contribute, so where the model's eps2 is exactly zero its propagated eps2 band is zero ("no
absorption is needed here", not a measurement); the band is therefore floored at
max(1e-4 |eps|, 1e-6), the noise floor of :mod:`kkcheck.kk.noise`.

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError
from .kk.basisfit import fit_kk_basis, unsupported_nodes
from .kk.consistency import KKTestResult
from .spectrum import Flag, Spectrum
from .units import AXIS_UNITS, eps_to_nk, from_energy_ev

__all__ = [
    "POLICIES",
    "BAND_REL_FLOOR",
    "BAND_ABS_FLOOR",
    "Change",
    "RepairResult",
    "repair",
    "default_grid",
]

POLICIES = ("none", "replace_flagged", "replace_flagged_and_regions", "model")
#: Floor of the model band, max(BAND_REL_FLOOR * |eps|, BAND_ABS_FLOOR): the same floor as the
#: noise estimate (:mod:`kkcheck.kk.noise`), so no value is ever claimed to be exact.
BAND_REL_FLOOR = 1e-4
BAND_ABS_FLOOR = 1e-6


@dataclass(frozen=True)
class Change:
    """One value changed or added by the repair.

    Attributes
    ----------
    energy_ev : float
        Photon energy of the point [eV].
    source : str
        Name of the source the old value came from ("" for a filled point).
    component : str
        ``"eps1"`` or ``"eps2"``.
    old : float
        The measured value (NaN for a filled point).
    new : float
        The value written by the repair (model prediction).
    reason : str
        ``"spike"``, ``"step"``, ``"kk_region"``, ``"model"`` or ``"fill"``.
    """

    energy_ev: float
    source: str
    component: str
    old: float
    new: float
    reason: str


@dataclass(frozen=True)
class RepairResult:
    """Outcome of :func:`repair`.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Output grid [eV], strictly increasing.
    eps : numpy.ndarray
        Repaired complex eps (exp(-i w t)).
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Uncertainty band per point [eps units]: the data's noise where a measured value is
        kept, the propagated model uncertainty where the value is the model's.
    flags : numpy.ndarray
        :class:`~kkcheck.spectrum.Flag` bits: the input flags of the measured point carried
        over, plus REPLACED, FILLED or KK_REGION.
    changes : tuple of Change
        Every value replaced or added, in energy order.
    notes : tuple of str
        What the repair did that a user should know (policy, extrapolation, blended duplicates).
    """

    energy_ev: np.ndarray
    eps: np.ndarray
    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    flags: np.ndarray
    changes: tuple[Change, ...]
    notes: tuple[str, ...]

    def to_frame(self, axis: str = "energy_ev") -> pd.DataFrame:
        """Table of the repaired spectrum with the axis in unit ``axis``.

        Columns: the axis (named by its unit, e.g. ``wavelength_nm``), ``energy_ev`` (when the
        axis is not eV), ``eps1, eps2, n, k, sigma_eps1, sigma_eps2, flags``; rows in
        increasing axis value.
        """
        if axis not in AXIS_UNITS:
            raise InputError(f"axis must be one of {', '.join(AXIS_UNITS)}, got {axis!r}")
        n, k = eps_to_nk(self.eps)
        cols = {axis: from_energy_ev(self.energy_ev, axis)}
        if axis != "energy_ev":
            cols["energy_ev"] = self.energy_ev
        cols.update(
            eps1=self.eps.real,
            eps2=self.eps.imag,
            n=n,
            k=k,
            sigma_eps1=self.sigma_eps1,
            sigma_eps2=self.sigma_eps2,
            flags=self.flags,
        )
        frame = pd.DataFrame(cols)
        return frame.sort_values(axis, kind="stable").reset_index(drop=True)

    def changes_frame(self, axis: str = "energy_ev") -> pd.DataFrame:
        """The change record as a table (columns axis, energy_ev, source, component, old, new,
        reason)."""
        if axis not in AXIS_UNITS:
            raise InputError(f"axis must be one of {', '.join(AXIS_UNITS)}, got {axis!r}")
        e = np.array([c.energy_ev for c in self.changes], float)
        cols = {axis: from_energy_ev(e, axis) if e.size else e}
        if axis != "energy_ev":
            cols["energy_ev"] = e
        for f in ("source", "component", "old", "new", "reason"):
            cols[f] = [getattr(c, f) for c in self.changes]
        return pd.DataFrame(cols)


def default_grid(energy_ev, gap_factor: float = 6.0, max_fill: int = 50) -> np.ndarray:
    """The data's own (distinct) energies plus points filling each gap at the local spacing.

    A spacing larger than ``gap_factor`` x the median of the 10 spacings on either side is a
    gap; it gets ceil(gap / local spacing) - 1 evenly spaced points (at most ``max_fill``).
    """
    e = np.unique(np.asarray(energy_ev, float))
    h = np.diff(e)
    extra = []
    for k in range(h.size):
        neigh = np.concatenate([h[max(0, k - 10) : k], h[k + 1 : k + 11]])
        if neigh.size == 0:
            continue
        href = float(np.median(neigh))
        if h[k] > gap_factor * href:
            n_ins = int(min(max_fill, np.ceil(h[k] / href) - 1))
            extra.append(np.linspace(e[k], e[k + 1], n_ins + 2)[1:-1])
    return np.union1d(e, np.concatenate(extra)) if extra else e


def _replace_masks(spectrum: Spectrum, kk: KKTestResult, policy: str):
    """Per data point: (replace eps1, replace eps2, reason, in_region) under ``policy``."""
    m = len(spectrum)
    flags = spectrum.flags
    spike = (flags & int(Flag.SPIKE)) != 0
    step = (flags & int(Flag.STEP)) != 0
    r1 = np.zeros(m, bool)
    r2 = np.zeros(m, bool)
    reason = np.full(m, "", dtype=object)
    in_region = np.zeros(m, bool)
    if policy == "model":
        r1[:] = True
        r2[:] = True
        reason[:] = "model"
    if policy in ("replace_flagged", "replace_flagged_and_regions"):
        r1 |= spike | step
        r2 |= spike | step
        reason[step] = "step"
        reason[spike] = "spike"
    if policy == "replace_flagged_and_regions":
        e = spectrum.energy_ev
        for g in kk.regions:
            inside = (e >= g.from_ev) & (e <= g.to_ev)
            in_region |= inside
            if g.component == "eps1":
                r1 |= inside
            else:
                r2 |= inside
            reason[inside & (reason == "")] = "kk_region"
    return r1, r2, reason, in_region


def repair(
    spectrum: Spectrum,
    kk_result: KKTestResult,
    grid_ev=None,
    *,
    policy: str = "replace_flagged",
) -> RepairResult:
    """KK-consistent repair of ``spectrum`` on a grid, with every change recorded.

    Parameters
    ----------
    spectrum : Spectrum
        The data that ``kk_result`` was computed from.
    kk_result : KKTestResult
        Output of :func:`kkcheck.kk.consistency.kk_test` on ``spectrum``.
    grid_ev : array_like, optional
        Output energies [eV] (> 0). Default: :func:`default_grid` of the data.
    policy : str
        One of :data:`POLICIES` (see the module docstring).

    Returns
    -------
    RepairResult

    Raises
    ------
    InputError
        Unknown policy, a grid that is not positive and finite, or a test result that does
        not belong to ``spectrum``.

    Notes
    -----
    The model eps(w) = eps_inf + sum_i A_i [K_i(w) + i T_i(w)] + Drude terms is refitted on the
    nodes of ``kk_result.model`` with weight 0 at every point that is replaced and at every
    SPIKE/STEP point; nodes left without data between their neighbours get the same
    smoothness prior as nodes in a gap (:func:`kkcheck.kk.basisfit.fit_kk_basis`). An output
    energy equal (to 1e-12 relative) to measured points keeps the measured value unless it is
    replaced; several measured points at one energy are combined by their inverse-variance
    mean. Output energies without a measurement get the model value
    and Flag.FILLED; beyond the measured window that is an extrapolation, reported in notes.
    """
    if policy not in POLICIES:
        raise InputError(f"policy must be one of {', '.join(POLICIES)}, got {policy!r}")
    e = spectrum.energy_ev
    if kk_result.energy_ev.shape != e.shape or not np.allclose(kk_result.energy_ev, e):
        raise InputError("kk_result was not computed from this spectrum (energies differ)")
    grid = default_grid(e) if grid_ev is None else np.unique(np.asarray(grid_ev, float))
    if grid.size == 0 or not np.all(np.isfinite(grid)) or grid[0] <= 0:
        raise InputError("grid_ev must hold finite energies > 0 eV")
    notes = [f"policy {policy!r}"]
    r1, r2, reason, in_region = _replace_masks(spectrum, kk_result, policy)
    suspicious = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    weights = np.where(r1 | r2 | suspicious, 0.0, 1.0)
    if policy == "model":
        weights = np.where(suspicious, 0.0, 1.0)
    old_model = kk_result.model
    if weights.sum() < 8:
        raise InputError("fewer than 8 points would remain to fit after removing flagged ones")
    if np.all(weights == 1.0):
        model = old_model
    else:
        fit = fit_kk_basis(
            e,
            spectrum.eps,
            kk_result.sigma_eps1,
            kk_result.sigma_eps2,
            old_model.nodes_ev,
            tied=old_model.tied,
            in_gap=old_model.in_gap | unsupported_nodes(old_model.nodes_ev, e[weights > 0], e),
            drude_gamma_ev=old_model.drude_gamma_ev,
            weights=weights,
        )
        model = fit.model
    mod = model.eps(grid)
    band1, band2 = model.eps_sigma(grid)
    floor = np.maximum(BAND_REL_FLOOR * np.abs(mod), BAND_ABS_FLOOR)
    band1 = np.maximum(band1, floor)
    band2 = np.maximum(band2, floor)
    out = np.array(mod)
    s1 = np.array(band1)
    s2 = np.array(band2)
    flags = np.zeros(grid.size, int)
    changes = []
    names = spectrum.source_names
    # map measured points onto the grid
    pos = np.searchsorted(grid, e)
    pos = np.clip(pos, 0, grid.size - 1)
    lower = np.clip(pos - 1, 0, grid.size - 1)
    pick = np.where(np.abs(grid[lower] - e) < np.abs(grid[pos] - e), lower, pos)
    match = np.abs(grid[pick] - e) <= 1e-12 * e
    measured = np.zeros(grid.size, bool)
    blended = 0
    for g in np.unique(pick[match]):
        idx = np.nonzero(match & (pick == g))[0]
        measured[g] = True
        for j in idx:
            flags[g] |= int(spectrum.flags[j])
        for comp, rmask, sig, data in (
            ("eps1", r1, kk_result.sigma_eps1, spectrum.eps.real),
            ("eps2", r2, kk_result.sigma_eps2, spectrum.eps.imag),
        ):
            keep = idx[~rmask[idx]]
            for j in idx[rmask[idx]]:
                new = mod.real[g] if comp == "eps1" else mod.imag[g]
                changes.append(
                    Change(
                        float(e[j]),
                        names[spectrum.source[j]],
                        comp,
                        float(data[j]),
                        float(new),
                        str(reason[j]),
                    )
                )
                flags[g] |= int(Flag.REPLACED)
            if keep.size == 1:
                val, band = float(data[keep[0]]), float(sig[keep[0]])
            if keep.size > 1:
                w = 1.0 / sig[keep] ** 2
                val = float(np.sum(w * data[keep]) / np.sum(w))
                band = float(1.0 / np.sqrt(np.sum(w)))
            if keep.size:
                if comp == "eps1":
                    out[g] = val + 1j * out[g].imag
                    s1[g] = band
                else:
                    out[g] = out[g].real + 1j * val
                    s2[g] = band
                blended += keep.size > 1
        if np.any(in_region[idx]):
            flags[g] |= int(Flag.KK_REGION)
    for g in np.nonzero(~measured)[0]:
        flags[g] |= int(Flag.FILLED)
        for comp, val in (("eps1", mod.real[g]), ("eps2", mod.imag[g])):
            changes.append(Change(float(grid[g]), "", comp, float("nan"), float(val), "fill"))
    if blended:
        notes.append(f"{blended} grid values combine several sources (inverse-variance mean)")
    lo, hi = spectrum.range_ev
    outside = (grid < lo) | (grid > hi)
    if np.any(outside):
        msg = (
            f"{int(outside.sum())} grid points lie outside the measured window {lo:.4g}-{hi:.4g}"
            " eV: their values are extrapolations of the KK model"
        )
        notes.append(msg)
        warnings.warn(msg, RuntimeWarning, stacklevel=2)
    n_fill = int(np.sum(~measured))
    if n_fill:
        notes.append(f"{n_fill} grid points without a measurement take the model value (FILLED)")
    n_rep = sum(1 for c in changes if c.reason != "fill")
    if n_rep:
        notes.append(f"{n_rep} measured values replaced by the KK-consistent prediction")
    changes.sort(key=lambda c: (c.energy_ev, c.component))
    for a in (grid, out, s1, s2, flags):
        a.setflags(write=False)
    return RepairResult(
        energy_ev=grid,
        eps=out,
        sigma_eps1=s1,
        sigma_eps2=s2,
        flags=flags,
        changes=tuple(changes),
        notes=tuple(notes),
    )
