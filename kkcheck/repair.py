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
max(1e-4 |eps|, 1e-6), the noise floor of every stage (:func:`kkcheck.noise.noise_floor`).

Calibration of the band (local cross-validation): the propagated band alone can be far too
narrow or too wide inside a gap (it knows the data noise and the basis, not how well the
basis interpolates that stretch). So the ceil(L/2) measured points on each side of every run
of L model values (a gap fill or a replaced spike) are withheld as well, the model is
refitted once, and the factor c is chosen so that 95 % of the withheld values lie within
+-2 c sqrt(band^2 + sigma^2) of the prediction; the band of model values is then
c sqrt(band^2 + sigma^2), with sigma the data noise interpolated there. The widened run lies
where the run itself lies, so the calibration sees the same structure the fill has to
rebuild. With fewer than 12 withheld values the band stays the propagated one and a note says
it is not calibrated; beyond the measured window it is extrapolated (noted). The method is
K-fold cross-validation restricted to the neighbourhood of each run (Stone 1974).

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005) (the KK-constrained basis model); see
   docs/references.md [Kuzmenko2005].
.. [2] M. Stone, "Cross-validatory choice and assessment of statistical predictions,"
   J. R. Stat. Soc. B 36(2), 111-147 (1974) (withheld data to assess a prediction; from
   memory).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .errors import InputError
from .kk.basisfit import KKBasisModel
from .kk.consistency import KKTestResult
from .noise import MIN_POINTS, NOISE_FLOOR_ABS, NOISE_FLOOR_REL, noise_floor
from .options import RepairChoice, check_choice, choices
from .spectrum import Flag, Spectrum
from .units import AXIS_UNITS, eps_to_nk, from_energy_ev

if TYPE_CHECKING:  # pandas is imported where a frame is made (start-up time)
    import pandas as pd

__all__ = [
    "POLICIES",
    "BAND_REL_FLOOR",
    "BAND_ABS_FLOOR",
    "Change",
    "RepairResult",
    "repair",
    "default_grid",
]

#: The repair policies, in the order of :data:`kkcheck.options.RepairChoice`.
POLICIES = choices(RepairChoice)
#: Floor of the model band, max(BAND_REL_FLOOR * |eps|, BAND_ABS_FLOOR): the noise floor of
#: every stage (:mod:`kkcheck.noise`), so no value is ever claimed to be exact.
BAND_REL_FLOOR = NOISE_FLOOR_REL
BAND_ABS_FLOOR = NOISE_FLOOR_ABS


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

    def to_dict(self) -> dict:
        """The ``repair`` block of summary.json: grid points, changed values and notes."""
        return {
            "points": len(self.energy_ev),
            "changed": len(self.changes),
            "notes": list(self.notes),
        }

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
        import pandas as pd

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
        import pandas as pd

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


def _replace_masks(spectrum: Spectrum, kk: KKTestResult, policy: RepairChoice):
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
    policy: RepairChoice = "replace_flagged",
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
    policy : {"none", "replace_flagged", "replace_flagged_and_regions", "model"}
        What is replaced (:data:`kkcheck.options.RepairChoice`, the module docstring).

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
    nodes of ``kk_result.model`` (:meth:`kkcheck.kk.basisfit.KKBasisModel.refit`) with weight 0
    at every point that is replaced and at every SPIKE/STEP point; nodes left without data
    between their neighbours get the same smoothness prior as nodes in a gap. An output
    energy equal (to 1e-12 relative) to measured points keeps the measured value unless it is
    replaced; several measured points at one energy are combined by their inverse-variance
    mean. Output energies without a measurement get the model value and Flag.FILLED; beyond
    the measured window that is an extrapolation, reported in notes.
    """
    check_choice("policy", policy, RepairChoice)
    e = spectrum.energy_ev
    if kk_result.energy_ev.shape != e.shape or not np.allclose(kk_result.energy_ev, e):
        raise InputError("kk_result was not computed from this spectrum (energies differ)")
    grid = default_grid(e) if grid_ev is None else np.unique(np.asarray(grid_ev, float))
    if grid.size == 0 or not np.all(np.isfinite(grid)) or grid[0] <= 0:
        raise InputError("grid_ev must hold finite energies > 0 eV")
    notes = [f"policy {policy!r}"]
    r1, r2, reason, in_region = _replace_masks(spectrum, kk_result, policy)
    model = _refit_model(spectrum, kk_result, r1 | r2, policy)
    mod = model.eps(grid)
    band1, band2, cal_notes = _calibrated_band(spectrum, kk_result, model, grid, r1 | r2, policy)
    notes.extend(cal_notes)
    floor = noise_floor(mod)
    table = _Table(
        eps=np.array(mod),
        s1=np.array(np.maximum(band1, floor)),
        s2=np.array(np.maximum(band2, floor)),
        flags=np.zeros(grid.size, int),
        measured=np.zeros(grid.size, bool),
    )
    masks = {"eps1": r1, "eps2": r2}
    changes, blended = _place_measured(spectrum, kk_result, grid, mod, table, masks, reason)
    _mark_regions(spectrum, grid, table, in_region)
    for g in np.nonzero(~table.measured)[0]:
        table.flags[g] |= int(Flag.FILLED)
        for comp, val in (("eps1", mod.real[g]), ("eps2", mod.imag[g])):
            changes.append(Change(float(grid[g]), "", comp, float("nan"), float(val), "fill"))
    notes.extend(_repair_notes(spectrum, grid, table.measured, changes, blended))
    changes.sort(key=lambda c: (c.energy_ev, c.component))
    out = (grid, table.eps, table.s1, table.s2, table.flags)
    for a in out:
        a.setflags(write=False)
    return RepairResult(
        energy_ev=grid,
        eps=table.eps,
        sigma_eps1=table.s1,
        sigma_eps2=table.s2,
        flags=table.flags,
        changes=tuple(changes),
        notes=tuple(notes),
    )


def _refit_model(
    spectrum: Spectrum, kk_result: KKTestResult, replaced: np.ndarray, policy: RepairChoice
) -> KKBasisModel:
    """The test's model refitted with weight 0 at replaced and SPIKE/STEP points.

    With ``"model"`` only SPIKE/STEP points are left out; the test's own model is returned
    unchanged when no point is left out.
    """
    suspicious = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    weights = np.where(replaced | suspicious, 0.0, 1.0)
    if policy == "model":
        weights = np.where(suspicious, 0.0, 1.0)
    if weights.sum() < MIN_POINTS:
        raise InputError(
            f"fewer than {MIN_POINTS} points would remain to fit after removing flagged ones"
        )
    if np.all(weights == 1.0):
        return kk_result.model
    fit = kk_result.model.refit(
        spectrum.energy_ev, spectrum.eps, kk_result.sigma_eps1, kk_result.sigma_eps2, weights
    )
    return fit.model


#: Target of the band calibration: this fraction of withheld values within +-2 band.
BAND_COVERAGE = 0.95
#: Fewest withheld values for a calibration; below, the band is propagated only (a note).
MIN_CALIBRATION_VALUES = 12
#: Largest share of the weighted points withheld in one calibration refit.
MAX_WITHHELD_SHARE = 0.25


def _model_runs(spectrum: Spectrum, grid: np.ndarray, replaced: np.ndarray):
    """(low, high, length) of each run of model values inside the window (gaps, replaced
    points): energies [eV] of its first and last grid point and its number of grid points."""
    pick, match = _match_grid(grid, spectrum.energy_ev)
    measured = np.zeros(grid.size, bool)
    measured[pick[match & ~replaced]] = True
    lo, hi = spectrum.range_ev
    modelled = ~measured & (grid >= lo) & (grid <= hi)
    runs, start = [], None
    for g, m in enumerate(np.append(modelled, False)):
        if m and start is None:
            start = g
        elif not m and start is not None:
            runs.append((float(grid[start]), float(grid[g - 1]), g - start))
            start = None
    return runs


def _neighbours(spectrum: Spectrum, weights: np.ndarray, runs) -> np.ndarray:
    """Indices of the ceil(length / 2) weighted data points on each side of every run (the run
    widened to twice its length; longest runs first, at most MAX_WITHHELD_SHARE of the
    weighted points)."""
    e = spectrum.energy_ev
    idx = np.nonzero(weights > 0)[0]
    budget = int(MAX_WITHHELD_SHARE * idx.size)
    held: list[np.ndarray] = []
    for lo, hi, length in sorted(runs, key=lambda r: -r[2]):
        n = (length + 1) // 2
        below = idx[e[idx] < lo][-n:]
        above = idx[e[idx] > hi][:n]
        if sum(h.size for h in held) + below.size + above.size > budget:
            break
        held += [below, above]
    return np.unique(np.concatenate(held)) if held else np.zeros(0, int)


def _calibration(spectrum, kk_result, weights, runs):
    """Band factor c: BAND_COVERAGE of the withheld neighbours within +-2 c (band, noise).

    Returns (c, or None when fewer than MIN_CALIBRATION_VALUES values could be withheld;
    the number of values).
    """
    held = _neighbours(spectrum, weights, runs)
    if 2 * held.size < MIN_CALIBRATION_VALUES:
        return None, 2 * held.size
    w = weights.copy()
    w[held] = 0.0
    fit = kk_result.model.refit(
        spectrum.energy_ev, spectrum.eps, kk_result.sigma_eps1, kk_result.sigma_eps2, w
    )
    e = spectrum.energy_ev[held]
    pred, y = fit.model.eps(e), spectrum.eps[held]
    b1, b2 = fit.model.eps_sigma(e)
    z = np.concatenate(
        [
            np.abs(pred.real - y.real) / np.hypot(b1, kk_result.sigma_eps1[held]),
            np.abs(pred.imag - y.imag) / np.hypot(b2, kk_result.sigma_eps2[held]),
        ]
    )
    z = z[np.isfinite(z)]
    if z.size < MIN_CALIBRATION_VALUES:
        return None, int(z.size)
    return float(np.quantile(z, BAND_COVERAGE) / 2.0), int(z.size)


def _calibrated_band(spectrum, kk_result, model, grid, replaced, policy):
    """The model band on ``grid``, calibrated by predicting withheld measured values.

    Returns (band1, band2, notes). See the Notes of :func:`repair` for the method.
    """
    b1, b2 = model.eps_sigma(grid)
    runs = _model_runs(spectrum, grid, replaced) if policy != "model" else []
    if not runs:
        return b1, b2, []
    suspicious = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    weights = np.where(replaced | suspicious, 0.0, 1.0)
    c, used = _calibration(spectrum, kk_result, weights, runs)
    if c is None:
        return (
            b1,
            b2,
            [
                f"band not calibrated: only {used} values could be withheld to test it (at "
                f"least {MIN_CALIBRATION_VALUES}); it is the propagated fit uncertainty and may "
                "be too narrow"
            ],
        )
    s1 = np.interp(grid, spectrum.energy_ev, kk_result.sigma_eps1)
    s2 = np.interp(grid, spectrum.energy_ev, kk_result.sigma_eps2)
    note = (
        f"band calibrated on {used} measured values beside the {len(runs)} modelled run(s), "
        f"withheld and predicted: the propagated band (with the data noise) x{c:.3g}, so "
        f"that {100 * BAND_COVERAGE:g} % of them lie within +-2 band"
    )
    lo, hi = spectrum.range_ev
    if np.any((grid < lo) | (grid > hi)):
        note += "; beyond the measured window the band is extrapolated, not calibrated"
    return c * np.hypot(b1, s1), c * np.hypot(b2, s2), [note]


@dataclass
class _Table:
    """The output columns while :func:`repair` fills them (mutable working state)."""

    eps: np.ndarray
    s1: np.ndarray
    s2: np.ndarray
    flags: np.ndarray
    measured: np.ndarray


def _match_grid(grid: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per data point: nearest grid index and whether it equals that grid energy (1e-12 rel)."""
    pos = np.searchsorted(grid, e)
    pos = np.clip(pos, 0, grid.size - 1)
    lower = np.clip(pos - 1, 0, grid.size - 1)
    pick = np.where(np.abs(grid[lower] - e) < np.abs(grid[pos] - e), lower, pos)
    match = np.abs(grid[pick] - e) <= 1e-12 * e
    return pick, match


def _place_measured(spectrum, kk_result, grid, mod, table: _Table, masks, reason):
    """Write measured values onto matching grid points; record every replaced one.

    Returns the list of changes (in data order per grid point and component) and the number
    of (grid point, component) values that combine several kept measurements.
    """
    e = spectrum.energy_ev
    names = spectrum.source_names
    pick, match = _match_grid(grid, e)
    changes = []
    blended = 0
    for g in np.unique(pick[match]):
        idx = np.nonzero(match & (pick == g))[0]
        table.measured[g] = True
        for j in idx:
            table.flags[g] |= int(spectrum.flags[j])
        for comp, sig, data, new in (
            ("eps1", kk_result.sigma_eps1, spectrum.eps.real, mod.real[g]),
            ("eps2", kk_result.sigma_eps2, spectrum.eps.imag, mod.imag[g]),
        ):
            rmask = masks[comp]
            keep = idx[~rmask[idx]]
            for j in idx[rmask[idx]]:
                old = float(data[j])
                src = names[spectrum.source[j]]
                changes.append(Change(float(e[j]), src, comp, old, float(new), str(reason[j])))
                table.flags[g] |= int(Flag.REPLACED)
            if keep.size:
                _keep_measured(table, g, comp, data[keep], sig[keep])
                blended += keep.size > 1
    return changes, blended


def _keep_measured(table: _Table, g: int, comp: str, values, sigmas) -> None:
    """Grid value and band of kept measurements: one value as is, several by inverse variance."""
    if values.size == 1:
        val, band = float(values[0]), float(sigmas[0])
    else:
        w = 1.0 / sigmas**2
        val = float(np.sum(w * values) / np.sum(w))
        band = float(1.0 / np.sqrt(np.sum(w)))
    if comp == "eps1":
        table.eps[g] = val + 1j * table.eps[g].imag
        table.s1[g] = band
    else:
        table.eps[g] = table.eps[g].real + 1j * val
        table.s2[g] = band


def _mark_regions(spectrum, grid, table: _Table, in_region) -> None:
    """Flag.KK_REGION on grid points matching a measured point inside a KK region."""
    pick, match = _match_grid(grid, spectrum.energy_ev)
    for g in np.unique(pick[match & in_region]):
        table.flags[g] |= int(Flag.KK_REGION)


def _repair_notes(spectrum, grid, measured, changes, blended) -> list[str]:
    """Notes on blended sources, extrapolation, filled points and replaced values.

    Warns (RuntimeWarning) when grid points lie outside the measured window.
    """
    notes = []
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
        warnings.warn(msg, RuntimeWarning, stacklevel=3)
    n_fill = int(np.sum(~measured))
    if n_fill:
        notes.append(f"{n_fill} grid points without a measurement take the model value (FILLED)")
    n_rep = sum(1 for c in changes if c.reason != "fill")
    if n_rep:
        notes.append(f"{n_rep} measured values replaced by the KK-consistent prediction")
    return notes
