"""Kramers–Kronig consistency test: can the measured eps1 and eps2 both be right?

The test fits the data with a model that is KK-consistent and passive by construction
(:mod:`kkcheck.kk.basisfit`: eps_inf + a nonnegative piecewise-linear eps2 basis with exact KK
partners, nodes at the data's own energies and continued geometrically to 0.1x / 10x the
window, optional Drude columns for conductors), weighted by the per-point noise
(:func:`spectrum_noise`). Data that are KK-consistent within their noise are fitted to
chi2/dof ~ 1 with structureless residuals; inconsistent data leave contiguous runs of large
normalised residuals, which are reported as regions.

Why a fit and not a transform: with the window finite, subtractive KK of the measured eps2
alone leaves truncation errors in eps1 (0.1-7 eps units for absorption just outside the window)
far above typical noise; the basis nodes outside the window model that absorption through
eps1 (Kuzmenko 2005).

Verdict rule (documented in :class:`KKTestOptions`; the same for every material):

1. normalised residuals z = (data - model) / sigma for eps1 and eps2;
2. per component, the running rms of z over ``run_width`` consecutive points (points flagged
   SPIKE or STEP are skipped), and every run of at least ``min_points`` consecutive points where
   it exceeds ``z_threshold`` is a region (:mod:`kkcheck.kk.regions`; for pure Gaussian noise,
   a 5-point mean of z^2 above 9 has probability ~1e-8 per point);
3. when regions were found, the model is refitted without the points of the most severe
   ones (severity >= half the largest; a region holding more than ``max_region_fraction``
   of the points is first shrunk to its core, the run around its peak above half the peak
   running rms), up to ``max_refits`` times, each refit leaving out what the previous ones
   found (skipped if that would leave out more than half of the points); the residuals,
   regions and model reported are those of the last refit: a fault no longer pulls the
   model towards itself, so it shows at its full size and the moderate residuals it induced
   in its neighbours disappear. A region that still spreads over more than
   ``max_region_fraction`` of the points is reported as its core, with a note naming the
   whole span (a single local fault never yields a window-wide region);
4. every region gets its size in physical units (:mod:`kkcheck.kk.verdict`): the largest
   relative excess deviation of its component, |data - model| beyond the noise divided by
   max(|eps|, 1), and the largest |dn|, |dk|. After a refit it is sized against both the
   refit and the fit to all points and the smaller size counts (the fit to all points is a
   lower bound; the refit extrapolates into a left-out region at a window edge); both are
   reported. Only regions larger than ``tolerance`` (default 1 %, justified in
   :mod:`kkcheck.kk.verdict`) count; the others are reported as
   ``regions_within_tolerance``;
5. ``"inconsistent"`` when a region exceeds the tolerance, or when chi2/dof >
   ``chi2_threshold`` (3: allows the noise estimate to be ~1.7x too small before crying
   wolf) and the worst part of the residuals (a region of origin "worst_part", with a note
   saying the verdict comes from the overall misfit; the most significant run, or else the
   run around the largest relative deviation) exceeds the tolerance; else
   ``"consistent"``, and ``verdict_text`` says "consistent within X %".

What no finite window can reveal: a constant offset of eps1 (absorbed by eps_inf), and
smooth, nearly even distortions of eps1 (a + b w^2 + c / w^2) that absorption outside the
window could produce. Both notes appear in every result.

Measured behaviour (tests/test_consistency.py and 10-seed runs at noise 0.002, 0.01, 0.03 in
n,k): eight clean materials (Rakić Au and Ag, Sellmeier silica, Tauc–Lorentz, a two-oscillator
semiconductor measured below its resonances, a Drude–Lorentz metal, a 10 cm^-1 phonon,
heteroscedastic noise) gave chi2/dof 0.83-1.64 and no false alarm in 240 runs; four planted
faults of 15-25 sigma (k shifted 40 meV, a k bump without n partner, an n distortion over
100 nm, k x 3) were found, at the planted place, in all 120 runs. Coarsely sampled peaks: a
Lorentz oscillator (FWHM 0.3 eV, eps2 peak ~13, noise 0.002) sampled every 0.07 or 0.1 eV
(3-4 points per FWHM) gave chi2/dof 0.5-1.7 with the true noise and no false alarm in 40
runs (before the cubic ties got a tolerance for their own error,
:func:`kkcheck.kk.basisnodes.tie_tolerance`: chi2/dof 130-220); with the noise estimated from
the data chi2/dof is lower (0.3-1.5) because the local estimate sees part of the peak as
noise. Peaks narrower than ~3 points per FWHM (a single-point eps2 spike) are treated as
inconsistent with eps1: that is the test's resolution limit. Cost: dense, O(M P^2) for M
points and P nodes; 0.1 s at 600 points, 0.8 s at 2000, ~3 s at 3000, ~11 s at 5000 (one core;
the split intervals add ~10% nodes and ~20-30% time at 3000 points).

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005); see docs/references.md [Kuzmenko2005].
.. [2] K. F. Palmer, M. Z. Williams, B. A. Budde, "Multiply subtractive Kramers–Kronig analysis
   of optical data," Appl. Opt. 37, 2660 (1998) (issue and pages from memory; why truncation
   errors demand anchors or a model of the outside absorption); see docs/references.md
   [Palmer1998].
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float, json_floats
from ..noise import MIN_POINTS, NOISE_FLOOR_ABS, NOISE_FLOOR_REL, spectrum_noise
from ..options import DOWNWEIGHT_FACTOR
from ..spectrum import Flag, Spectrum
from .basisfit import KKBasisModel, choose_nodes, fit_kk_basis
from .binning import bin_means, bin_spectrum
from .refits import Pass, cores_of_wide_regions, evaluate, refit_without_regions
from .regions import Region, find_regions
from .verdict import (
    DEFAULT_TOLERANCE,
    deviation_profile,
    largest_part,
    minor_note,
    misfit_note,
    sized_region,
    verdict_text,
    window_deviation,
    worst_part,
)

__all__ = ["KKTestOptions", "Region", "KKTestResult", "kk_test", "find_regions", "NOTE_CODES"]

METHOD = "kk-basis-fit"

#: Code of each kind of note in :attr:`KKTestResult.note_codes`, with what the note says.
NOTE_CODES = {
    "constant_offset": "a constant offset of eps1 is not detectable (absorbed in eps_inf)",
    "even_distortion": "smooth even distortions of eps1 look like absorption outside the window",
    "noise": "how the noise of one source was obtained (estimated in n,k or eps, or floor)",
    "narrow_window": "the window spans less than a factor 1.5: the test is weak",
    "gap": "a gap in the data, where eps2 is constrained only by eps1 and a smoothness prior",
    "drude_columns": "conductor: Drude columns were included",
    "refit_without_regions": "regions, residuals and model are from the refit without them",
    "no_refit": "inconsistent over most of the window: no refit was made",
    "chi2_high": "chi2/dof above the threshold without any region",
    "misfit_only": "inconsistent from the overall misfit alone; the worst energies are named",
    "region_core": "a region spread over much of the window: its worst part is reported",
    "within_tolerance": "significant deviations smaller than the tolerance (not counted)",
    "binned": "more points than the dense fit takes: binned first (kkcheck.kk.binning)",
}


@dataclass(frozen=True)
class KKTestOptions:
    """Settings of :func:`kk_test` (defaults are the documented rule; they are not per material).

    Attributes
    ----------
    z_threshold : float
        Running rms of normalised residuals above which points count as inconsistent.
    run_width : int
        Points in the running rms window.
    min_points : int
        Fewest consecutive exceeding points that make a region.
    chi2_threshold : float
        chi2/dof above which the verdict is "inconsistent" even without a region.
    strong_severity : float
        Regions whose peak |z| reaches this are labelled "strong", else "moderate".
    flagged_sigma_factor : float
        Points with Flag.SPIKE or Flag.STEP get their sigma multiplied by this (weight
        1/factor^2; default :data:`kkcheck.options.DOWNWEIGHT_FACTOR`) and are skipped by the
        region search and the chi2.
    anchor_sigma_factor : float
        eps1 at the point nearest each anchor gets its sigma multiplied by this (< 1: trusted).
    drude : str or bool
        "auto" (Drude columns when eps1 < 0 at the low end of the window), True or False.
    low_factor, high_factor, growth, thin_tol : float
        Node placement (:func:`kkcheck.kk.basisnodes.choose_nodes`).
    smoothing : float
        Curvature penalty weight (:func:`kkcheck.kk.basisfit.fit_kk_basis`), 0 = off.
    refit_regions : bool
        When regions are found, refit without their points and report the residuals, regions
        and model of that refit (localises a fault instead of spreading it).
    refit_severity_ratio : float
        Only regions with severity >= this x the largest severity are left out of the refit
        (the fault itself, not the moderate residuals it induced).
    max_excluded_fraction : float
        The refit is skipped when the regions hold more than this fraction of the points.
    rel_floor, abs_floor : float
        Noise floor sigma >= max(rel_floor |eps|, abs_floor) (:func:`spectrum_noise`; defaults
        :data:`kkcheck.noise.NOISE_FLOOR_REL` and :data:`kkcheck.noise.NOISE_FLOOR_ABS`).
    tolerance : float
        Smallest relative deviation of eps, as a fraction of max(|eps|, 1), that makes a
        significant region count (default :data:`kkcheck.kk.verdict.DEFAULT_TOLERANCE`,
        0.01; 0 counts every significant region).
    max_refits : int
        Most refits of step 3 of the rule (each leaves out what the previous found).
    max_region_fraction : float
        A region holding more than this fraction of the counted points is shrunk to its core.
    max_dense_points : int
        Most points the dense fit sees; a larger spectrum is binned first
        (:func:`kkcheck.kk.binning.bin_spectrum`, a hard cap) and the result is on the
        binned axis, with a note.
    """

    z_threshold: float = 3.0
    run_width: int = 5
    min_points: int = 3
    chi2_threshold: float = 3.0
    strong_severity: float = 10.0
    flagged_sigma_factor: float = DOWNWEIGHT_FACTOR
    anchor_sigma_factor: float = 0.1
    drude: str | bool = "auto"
    low_factor: float = 0.1
    high_factor: float = 10.0
    growth: float = 1.4
    thin_tol: float = 0.3
    smoothing: float = 0.0
    refit_regions: bool = True
    refit_severity_ratio: float = 0.5
    max_excluded_fraction: float = 0.5
    rel_floor: float = NOISE_FLOOR_REL
    abs_floor: float = NOISE_FLOOR_ABS
    tolerance: float = DEFAULT_TOLERANCE
    max_refits: int = 3
    max_region_fraction: float = 0.3
    max_dense_points: int = 3000


@dataclass(frozen=True)
class KKTestResult:
    """Outcome of :func:`kk_test`.

    Attributes
    ----------
    method : str
        ``"kk-basis-fit"``.
    energy_ev : numpy.ndarray
        Photon energy of each data point [eV] (the spectrum's axis).
    eps1_model, eps2_model : numpy.ndarray
        KK-consistent reconstruction at ``energy_ev`` (of the refit without the regions when
        one was made, see the verdict rule).
    resid1, resid2 : numpy.ndarray
        Normalised residuals (data - model) / sigma of eps1 and eps2 [dimensionless], with the
        sigma actually used (inflated at SPIKE/STEP points).
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Noise used per point [eps units] (given or estimated, floor applied, before inflation).
    noise : float
        One noise figure: median of sigma_eps1 [eps units].
    rms : float
        rms of the normalised residuals of both components over the counted points.
    max : float
        Largest |normalised residual| over the counted points.
    chi2_dof : float
        chi2 / (counted residuals - free parameters) of the fit to all points.
    anchors_ev : tuple of float
        Energies whose eps1 was trusted more (nearest data point) [eV].
    regions : tuple of Region
        Inconsistent regions, in order of energy (eps1 ones first).
    verdict : str
        ``"consistent"`` or ``"inconsistent"``.
    notes : tuple of str
        Cautions (what the window cannot reveal, narrow window, gaps, Drude term used).
    model : KKBasisModel
        The fitted model; ``model.eps(energy_ev)`` evaluates it anywhere.
    note_codes : tuple of str
        One short, stable code per note, same length and order as ``notes`` (see
        :data:`NOTE_CODES`), for readers that act on a note without parsing its text.
    tolerance : float
        Tolerance of the verdict [fraction of max(|eps|, 1)].
    deviation_rms_rel, deviation_max_rel : float
        rms and largest relative excess deviation of eps from the fit to all points over the
        counted points of the whole window [fraction of max(|eps|, 1)]
        (:func:`kkcheck.kk.verdict.deviation_profile`; the fit to all points even after a
        refit, so that the figure is a lower bound like the regions' sizes).
    deviation_max_ev : float
        Energy of the largest deviation [eV].
    regions_within_tolerance : tuple of Region
        Significant regions whose size is below ``tolerance`` (they do not count).
    verdict_text : str
        The verdict in one phrase with its size, e.g. "consistent within 1 %" or
        "inconsistent: 3.2 % of |eps| in eps2 at 1.52-1.81 eV (25 sigma)".
    """

    method: str
    energy_ev: np.ndarray
    eps1_model: np.ndarray
    eps2_model: np.ndarray
    resid1: np.ndarray
    resid2: np.ndarray
    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    noise: float
    rms: float
    max: float
    chi2_dof: float
    anchors_ev: tuple[float, ...]
    regions: tuple[Region, ...]
    verdict: str
    notes: tuple[str, ...]
    model: KKBasisModel
    note_codes: tuple[str, ...] = ()
    tolerance: float = DEFAULT_TOLERANCE
    deviation_rms_rel: float = float("nan")
    deviation_max_rel: float = float("nan")
    deviation_max_ev: float = float("nan")
    regions_within_tolerance: tuple[Region, ...] = ()
    verdict_text: str = ""

    def __post_init__(self):
        if len(self.note_codes) != len(self.notes):
            raise ValueError("note_codes must hold one code per note, in the same order")

    def to_dict(self) -> dict:
        """The ``kk`` block of summary.json, without the keys only the pipeline knows.

        Keys: method, anchors_ev, rms, max, noise, chi2_dof, verdict, verdict_text,
        tolerance_percent, deviation_rms_percent, deviation_max_percent, deviation_max_ev,
        regions and regions_within_tolerance (each :meth:`Region.to_dict`) and notes; floats
        are JSON-safe (:func:`kkcheck.jsonsafe.json_float`). The pipeline adds range_ev,
        points_analysed and its binning note.
        """
        return {
            "method": self.method,
            "anchors_ev": json_floats(self.anchors_ev),
            "rms": json_float(self.rms),
            "max": json_float(self.max),
            "noise": json_float(self.noise),
            "chi2_dof": json_float(self.chi2_dof),
            "verdict": self.verdict,
            "verdict_text": self.verdict_text,
            "tolerance_percent": json_float(100.0 * self.tolerance),
            "deviation_rms_percent": json_float(100.0 * self.deviation_rms_rel),
            "deviation_max_percent": json_float(100.0 * self.deviation_max_rel),
            "deviation_max_ev": json_float(self.deviation_max_ev),
            "regions": [r.to_dict() for r in self.regions],
            "regions_within_tolerance": [r.to_dict() for r in self.regions_within_tolerance],
            "notes": list(self.notes),
        }


def kk_test(
    spectrum: Spectrum,
    *,
    anchors_ev=None,
    weights=None,
    options: KKTestOptions | None = None,
) -> KKTestResult:
    """Test whether eps1 and eps2 of ``spectrum`` are KK-consistent within their noise.

    Parameters
    ----------
    spectrum : Spectrum
        Merged data (any number of sources; sigma NaN where unknown).
    anchors_ev : sequence of float, optional
        Energies [eV] where eps1 is trusted (e.g. from the best instrument): the eps1 of the
        nearest point gets sigma x ``options.anchor_sigma_factor``. Not needed by the method.
    weights : array_like, optional
        Per-point weights >= 0 multiplying the inverse variance (0 drops a point from the fit,
        it still gets a model value and a residual).
    options : KKTestOptions, optional
        Rule and fit settings.

    Returns
    -------
    KKTestResult

    Raises
    ------
    InputError
        Fewer than 8 usable points, non-finite eps, or bad weights/anchors.

    Notes
    -----
    Model (Kuzmenko 2005, :mod:`kkcheck.kk.basisfit`): eps_inf + a nonnegative PL eps2 basis
    with exact KK partners, plus Drude columns (g_j = 0.01, 0.03, 0.1, 0.3, 1 x the lowest
    energy) that carry the DC-conductivity pole of eps2, sigma0/(eps0 w) = wp^2/(g w) as
    w -> 0, so conductors are modelled, not subtracted. SPIKE or STEP points get sigma x
    ``flagged_sigma_factor`` and are excluded from chi2 and from the region search. The
    verdict rule is in the module docstring.

    References
    ----------
    .. [1] A. B. Kuzmenko, Rev. Sci. Instrum. 76, 083108 (2005); see docs/references.md
       [Kuzmenko2005].
    """
    opt = options or KKTestOptions()
    wt = _checked_weights(spectrum, weights)
    if len(spectrum) > opt.max_dense_points:
        return _binned_test(spectrum, anchors_ev, wt, opt)
    e = spectrum.energy_ev
    noise = spectrum_noise(spectrum, rel_floor=opt.rel_floor, abs_floor=opt.abs_floor)
    s1, s2 = noise.sigma_eps1, noise.sigma_eps2
    bad = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    u1, u2, anchors = _fit_sigmas(spectrum, s1, s2, bad, anchors_ev, opt)
    notes = _window_notes(spectrum, noise.notes)
    nodeset = choose_nodes(e, spectrum.eps.imag, s2, **_node_options(opt))
    notes.extend(("gap", _gap_note(g0, g1)) for g0, g1 in nodeset.gaps_ev)
    gam = _drude_gammas(spectrum, opt)
    if gam.size:
        notes.append(("drude_columns", _DRUDE_NOTE))
    fit = fit_kk_basis(
        e,
        spectrum.eps,
        u1,
        u2,
        nodeset.nodes_ev,
        tied=nodeset.tied,
        in_gap=nodeset.in_gap,
        drude_gamma_ev=gam,
        weights=wt,
        smoothing=opt.smoothing,
    )
    counted = (~bad) & (wt > 0)
    first = evaluate(spectrum, fit.model, u1, u2, counted, opt)
    zc = np.concatenate([first.z1[counted], first.z2[counted]])
    chi2_dof = float(zc @ zc) / max(1.0, zc.size - fit.n_effective)
    found = first
    if first.regions and opt.refit_regions:
        refit, more = refit_without_regions(spectrum, first, u1, u2, wt, counted, opt)
        # a refit is reported only when it shows a fault larger than the tolerance (against
        # both fits); else the fit to all points is the better model of data that are
        # consistent within it
        if refit is not first and _any_beyond_tolerance(
            spectrum, refit, first, (s1, s2), counted, opt
        ):
            found = refit
            notes.extend(more)
        elif refit is first:
            notes.extend(more)
    found, more = cores_of_wide_regions(spectrum, found, counted, opt)
    notes.extend(more)
    fits = (found, None if found.model is first.model else first)
    return _result(spectrum, fits, counted, (s1, s2), chi2_dof, anchors, notes, opt)


def _binned_test(spectrum: Spectrum, anchors_ev, wt, opt: KKTestOptions) -> KKTestResult:
    """The test on the spectrum binned to ``opt.max_dense_points`` (the dense-fit cap).

    The noise of the full spectrum is estimated first so that the binning knows which
    points are straight within it; weights of a bin are the mean of its points' weights.
    """
    noise = spectrum_noise(spectrum, rel_floor=opt.rel_floor, abs_floor=opt.abs_floor)
    full = dataclasses.replace(spectrum, sigma_eps1=noise.sigma_eps1, sigma_eps2=noise.sigma_eps2)
    binned, record = bin_spectrum(full, opt.max_dense_points)
    w_binned = None
    if np.any(wt != 1.0):
        # the mean weight of each bin: bins are runs of one source, found by their mean energy
        w_binned = bin_means(full, binned, wt)
    res = kk_test(binned, anchors_ev=anchors_ev, weights=w_binned, options=opt)
    note = record.note() or ""
    return dataclasses.replace(
        res,
        notes=(*res.notes, f"the dense fit takes at most {opt.max_dense_points} points: {note}"),
        note_codes=(*res.note_codes, "binned"),
    )


def _node_options(opt: KKTestOptions) -> dict:
    """The node-placement settings of ``opt`` as keywords of :func:`choose_nodes`."""
    return {
        "low_factor": opt.low_factor,
        "high_factor": opt.high_factor,
        "growth": opt.growth,
        "thin_tol": opt.thin_tol,
    }


_DRUDE_NOTE = "conductor: Drude columns with fixed damping included (DC pole of eps2)"


def _checked_weights(spectrum: Spectrum, weights) -> np.ndarray:
    """The per-point weights (ones when None), after checking the data can be tested."""
    m = len(spectrum)
    if m < MIN_POINTS:
        raise InputError(f"KK test needs at least {MIN_POINTS} points, got {m}")
    if not np.all(np.isfinite(spectrum.eps)):
        raise InputError("KK test needs finite eps1 and eps2 at every point")
    wt = np.ones(m) if weights is None else np.asarray(weights, float)
    if wt.shape != (m,) or not np.all(np.isfinite(wt)) or np.any(wt < 0):
        raise InputError("weights must be one finite value >= 0 per point")
    return wt


def _fit_sigmas(spectrum: Spectrum, s1, s2, bad, anchors_ev, opt: KKTestOptions):
    """Sigmas the fit uses (inflated at flagged points, deflated at anchors) and the anchors."""
    e = spectrum.energy_ev
    f1 = np.where(bad, opt.flagged_sigma_factor, 1.0)
    u1, u2 = s1 * f1, s2 * f1
    anchors = tuple(float(a) for a in (anchors_ev or ()))
    for a in anchors:
        if not (np.isfinite(a) and e[0] <= a <= e[-1]):
            raise InputError(f"anchor {a} eV must lie inside the data window {e[0]}-{e[-1]} eV")
        j = int(np.argmin(np.abs(e - a)))
        u1[j] = u1[j] * opt.anchor_sigma_factor
    return u1, u2, anchors


def _window_notes(spectrum: Spectrum, noise_notes) -> list[tuple[str, str]]:
    """(code, text) of the notes every result carries, the noise notes and a narrow window."""
    notes = [
        (
            "constant_offset",
            "a constant offset of eps1 cannot be detected from a finite window (absorbed in "
            "eps_inf)",
        ),
        (
            "even_distortion",
            "smooth even distortions of eps1 (a + b w^2 + c/w^2) are indistinguishable from "
            "absorption outside the window",
        ),
    ]
    notes.extend(("noise", n) for n in noise_notes)
    lo, hi = spectrum.range_ev
    if hi / lo < 1.5:
        notes.append(
            (
                "narrow_window",
                f"narrow window ({lo:.4g}-{hi:.4g} eV, ratio {hi / lo:.2f}): outside "
                "absorption can mimic much of eps1; the test is weak",
            )
        )
    return notes


def _gap_note(g0: float, g1: float) -> str:
    return (
        f"gap in the data {g0:.4g}-{g1:.4g} eV: eps2 there is constrained only by eps1 "
        "and a smoothness prior"
    )


def _drude_gammas(spectrum: Spectrum, opt: KKTestOptions) -> np.ndarray:
    """Damping energies of the Drude columns [eV] (empty for an insulator)."""
    e = spectrum.energy_ev
    use_drude = opt.drude
    if use_drude == "auto":
        low = e <= e[0] + 0.1 * (e[-1] - e[0])
        use_drude = bool(np.median(spectrum.eps.real[low]) < 0)
    return e[0] * np.array([0.01, 0.03, 0.1, 0.3, 1.0]) if use_drude else np.zeros(0)


def _deviations(spectrum, fits, sigmas, counted, opt: KKTestOptions):
    """Deviation profiles of the reported pass and of the fit to all points (None when the
    reported pass is that fit)."""
    found, first = fits
    dev = deviation_profile(spectrum.eps, found.eps, *sigmas, counted, opt.run_width)
    if first is None:
        return dev, None
    return dev, deviation_profile(spectrum.eps, first.eps, *sigmas, counted, opt.run_width)


def _any_beyond_tolerance(spectrum, refit: Pass, first: Pass, sigmas, counted, opt) -> bool:
    """True when a region of ``refit`` is larger than the tolerance against both fits."""
    dev, dev_all = _deviations(spectrum, (refit, first), sigmas, counted, opt)
    e = spectrum.energy_ev
    return any(
        sized_region(g, e, dev, opt.tolerance, dev_all, refit.left_out).exceeds_tolerance
        for g in refit.regions
    )


def _result(spectrum, fits, counted, sigmas, chi2_dof, anchors, notes, opt):
    """The verdict (steps 4 and 5 of the rule) and the result record; ``fits`` is (reported
    pass, fit to all points or None when that is the reported pass)."""
    s1, s2 = sigmas
    found = fits[0]
    e = spectrum.energy_ev
    zc = np.concatenate([found.z1[counted], found.z2[counted]])
    n_res = zc.size
    dev, dev_all = _deviations(spectrum, fits, sigmas, counted, opt)
    cut = found.left_out
    sized = [sized_region(g, e, dev, opt.tolerance, dev_all, cut) for g in found.regions]
    regions = [g for g in sized if g.exceeds_tolerance]
    minor = [g for g in sized if not g.exceeds_tolerance]
    if minor:
        notes = [*notes, ("within_tolerance", minor_note(minor, opt.tolerance))]
    if chi2_dof > opt.chi2_threshold and not regions:
        worst = worst_part(e, found.z1, found.z2, counted, opt.run_width, opt.strong_severity)
        worst = sized_region(worst, e, dev, opt.tolerance, dev_all, cut)
        if not worst.exceeds_tolerance:
            # the most significant part is small: the largest part in eps units may not be
            largest = largest_part(
                e, dev if dev_all is None else dev_all, found.z1, found.z2, counted, opt
            )
            largest = sized_region(largest, e, dev, opt.tolerance, dev_all, cut)
            # it counts only where it is also locally significant (|z| above the threshold)
            if largest.exceeds_tolerance and largest.severity > opt.z_threshold:
                worst = largest
        notes = [
            *notes,
            misfit_note(chi2_dof, worst, bool(sized), opt.chi2_threshold, opt.tolerance),
        ]
        if worst.exceeds_tolerance:
            regions = [worst]
    rms_rel, max_rel, max_ev, _ = window_deviation(e, dev if dev_all is None else dev_all, counted)
    verdict = "inconsistent" if regions else "consistent"
    return KKTestResult(
        method=METHOD,
        energy_ev=np.array(spectrum.energy_ev),
        eps1_model=found.eps.real,
        eps2_model=found.eps.imag,
        resid1=found.z1,
        resid2=found.z2,
        sigma_eps1=s1,
        sigma_eps2=s2,
        noise=float(np.median(s1)),
        rms=float(np.sqrt(np.mean(zc * zc))) if n_res else float("nan"),
        max=float(np.max(np.abs(zc))) if n_res else float("nan"),
        chi2_dof=chi2_dof,
        anchors_ev=anchors,
        regions=tuple(regions),
        verdict=verdict,
        notes=tuple(text for _, text in notes),
        model=found.model,
        note_codes=tuple(code for code, _ in notes),
        tolerance=float(opt.tolerance),
        deviation_rms_rel=rms_rel,
        deviation_max_rel=max_rel,
        deviation_max_ev=max_ev,
        regions_within_tolerance=tuple(minor),
        verdict_text=verdict_text(regions, minor, max_rel, opt.tolerance),
    )
