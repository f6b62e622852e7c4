"""Whether an estimated scale/offset between two sources is applied: the data must determine it.

A scale and eps1 offset fitted in an overlap (:mod:`kkcheck.merge.overlap`) is applied to a
source only when every test below passes; otherwise it is reported, not applied, and the
reasons are said in words:

1. **Enough overlap**: at least :data:`MIN_DECISION_POINTS` source points inside the
   overlap (a fit from a handful of points is reported only).
2. **Determined**: the relative size of the correction (:func:`correction_size`) at least
   :data:`SIGNIFICANCE` times its own standard error, and a positive scale at least three
   standard errors from zero. A correction that is not significant is not needed.
3. **Compatible shapes**: after the correction, the two sources agree in the overlap to
   :data:`SHAPE_TOLERANCE` of each component's own size (noise removed); a scale cannot
   explain eps2 differing by 1.5-2x. Where they disagree is reported in eV.
4. **Small**: the correction changes the source by at most ``max_correction``
   (:data:`MAX_CORRECTION`, 10 %) in the overlap, unless the user forces it
   (``correct="force"``); a larger one is always a warning.
5. **More KK consistent**: when a KK score is given, the merged spectrum with the correction
   scores lower than without it.

``correct="force"`` applies every usable estimate (positive, determined scale) whatever
tests 1-5 say, with a warning for each one that failed.

References
----------
.. [1] P. J. Huber, "Robust estimation of a location parameter," Ann. Math. Stat. 35(1),
   73-101 (1964) (the estimate whose standard errors the rule uses).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..jsonsafe import json_float
from ..noise import neighbour_noise_sigma
from ..spectrum import Dataset
from .overlap import ScaleFit
from .sampling import _covers, find_gaps

__all__ = [
    "MAX_CORRECTION",
    "MIN_DECISION_POINTS",
    "SHAPE_TOLERANCE",
    "SIGNIFICANCE",
    "ShapeCheck",
    "CorrectionDecision",
    "correction_size",
    "shape_check",
]

#: Largest relative change (rms over the overlap) a correction may make without being forced.
MAX_CORRECTION = 0.10
#: Fewest source points in the overlap for a correction to be applied (fits need only 4).
MIN_DECISION_POINTS = 8
#: Largest rms disagreement left after the correction, relative to each component's size.
SHAPE_TOLERANCE = 0.10
#: The correction's size must be this many standard errors (rule 2).
SIGNIFICANCE = 3.0


@dataclass(frozen=True)
class ShapeCheck:
    """How well two sources agree in their overlap after a scale/offset correction.

    Attributes
    ----------
    mismatch_eps1, mismatch_eps2 : float
        rms residual (noise variance removed) over the rms of the component, the
        denominator floored at 1 % of rms |eps| [dimensionless]; NaN without overlap.
    disagree_ev : tuple of (float, float, str)
        (from, to, component) energy ranges [eV] where the residual exceeds
        SHAPE_TOLERANCE of the local value plus 3 sigma.
    """

    mismatch_eps1: float
    mismatch_eps2: float
    disagree_ev: tuple[tuple[float, float, str], ...] = ()

    @property
    def compatible(self) -> bool:
        """True when both mismatches are within :data:`SHAPE_TOLERANCE` (NaN counts as True)."""
        worst = np.nanmax([self.mismatch_eps1, self.mismatch_eps2, 0.0])
        return bool(worst <= SHAPE_TOLERANCE)

    def where(self, most: int = 4) -> str:
        """The disagreeing ranges in words, e.g. ``"eps2 at 0.64-1.2 eV"``; the ``most``
        widest are named (summary.json's ``disagree_ev`` keeps them all)."""
        widest = sorted(self.disagree_ev, key=lambda r: r[0] - r[1])[:most]
        text = ", ".join(
            f"{c} at {a:.3g} eV" if f"{a:.3g}" == f"{b:.3g}" else f"{c} at {a:.3g}-{b:.3g} eV"
            for a, b, c in sorted(widest)
        )
        rest = len(self.disagree_ev) - len(widest)
        return text + (f" and {rest} narrower range(s)" if rest > 0 else "")


@dataclass(frozen=True)
class CorrectionDecision:
    """Whether one source's correction is applied, and why (``merge.sources[*].decision``).

    Attributes
    ----------
    applied : bool
        True when eps of the source is replaced by (eps - eps1_offset) / scale.
    size, size_sigma : float
        Relative size of the correction in the overlap and its standard error
        (:func:`correction_size`) [dimensionless].
    shape : ShapeCheck
        Agreement with the overlapping sources after the correction.
    kk_with, kk_without : float
        KK score of the merged spectrum with and without this correction (NaN: not scored).
    reasons : tuple of str
        Every test of the module docstring that failed, in words (empty when all passed).
    forced : bool
        True when applied by ``correct="force"`` although a test failed.
    """

    applied: bool
    size: float
    size_sigma: float
    shape: ShapeCheck
    kk_with: float = float("nan")
    kk_without: float = float("nan")
    reasons: tuple[str, ...] = ()
    forced: bool = False

    def to_dict(self) -> dict:
        """JSON-safe block (NaN becomes null)."""
        return {
            "applied": bool(self.applied),
            "size": json_float(self.size),
            "size_sigma": json_float(self.size_sigma),
            "shape_mismatch_eps1": json_float(self.shape.mismatch_eps1),
            "shape_mismatch_eps2": json_float(self.shape.mismatch_eps2),
            "disagree_ev": [
                [json_float(a), json_float(b), c] for a, b, c in self.shape.disagree_ev
            ],
            "kk_score_with": json_float(self.kk_with),
            "kk_score_without": json_float(self.kk_without),
            "reasons": list(self.reasons),
            "forced": bool(self.forced),
        }


def correction_size(source: Dataset, fit: ScaleFit, overlap_mask: np.ndarray):
    """Relative size of the correction eps -> (eps - o) / s on the source's overlap points.

    Returns ``(size, size_sigma)`` with size = rms|eps_c - eps| / rms|eps| over the points
    of ``overlap_mask`` (all points when none is inside), and size_sigma its first-order
    standard error from ``fit.scale_sigma`` and ``fit.eps1_offset_sigma`` (independent).
    """
    m = overlap_mask if overlap_mask.any() else np.ones(len(source), bool)
    eps = source.eps[m]
    norm = max(float(np.sqrt(np.mean(np.abs(eps) ** 2))), 1e-300)

    def size(s: float, o: float) -> float:
        return float(np.sqrt(np.mean(np.abs((eps - o) / s - eps) ** 2)) / norm)

    s, o = fit.scale, fit.eps1_offset
    base = size(s, o)
    ss = fit.scale_sigma if np.isfinite(fit.scale_sigma) else 0.0
    so = fit.eps1_offset_sigma if np.isfinite(fit.eps1_offset_sigma) else 0.0
    ds = size(s + ss, o) - base if ss > 0 else 0.0
    do = size(s, o + so) - base if so > 0 else 0.0
    return base, float(np.hypot(ds, do))


def _runs(e: np.ndarray, bad: np.ndarray) -> list[tuple[float, float]]:
    """Contiguous runs of ``bad`` (at least two points, or one isolated) as energy ranges."""
    out = []
    idx = np.nonzero(bad)[0]
    if idx.size == 0:
        return out
    starts = [idx[0]]
    ends = []
    for a, b in zip(idx[:-1], idx[1:]):
        if b != a + 1:
            ends.append(a)
            starts.append(b)
    ends.append(idx[-1])
    return [(float(e[a]), float(e[b])) for a, b in zip(starts, ends)]


def _local_sigmas(ds: Dataset) -> tuple[np.ndarray, np.ndarray]:
    """Per-point sigma of eps1, eps2 for the shape check: the given uncertainties, else the
    white-noise estimate of each component relative to |eps| times |eps|.

    A single white-noise level for a whole table (what the blend weights use) is set by its
    largest values: a metal's infrared eps1 of -1e4 would make every visible difference look
    like noise. Relative noise follows the printed digits of a table instead.
    """
    a = np.maximum(np.abs(ds.eps), 1e-300)
    out = []
    for sig, comp in ((ds.sigma_eps1, ds.eps.real), (ds.sigma_eps2, ds.eps.imag)):
        rel = neighbour_noise_sigma(ds.energy_ev, comp / a)
        est = (rel if np.isfinite(rel) else 0.0) * a
        if sig is not None:
            est = np.where(np.isfinite(sig) & (sig > 0), sig, est)
        out.append(est)
    return out[0], out[1]


def shape_check(source: Dataset, partner: Dataset, fit: ScaleFit) -> ShapeCheck:
    """Agreement of ``source`` with ``partner`` under eps_source ~ s eps_partner + o.

    Notes
    -----
    The partner is interpolated linearly onto the source's points inside its range (gaps
    skipped); with r = s eps_partner + o (offset on eps1) and sigma^2 the sum of both
    sources' variances (:func:`_local_sigmas`), per component c the mismatch is

        sqrt(max(0, mean((y_c - r_c)^2) - mean(sigma_c^2))) / max(rms r_c, 0.01 rms |r|).

    Points with |y_c - r_c| > SHAPE_TOLERANCE max(|r_c|, 0.01 rms|r|) + 3 sigma_c are where
    the sources disagree. Common practice, no source.
    """
    m = _covers(partner, find_gaps(partner.energy_ev), source.energy_ev)
    if m.sum() < 2:
        return ShapeCheck(float("nan"), float("nan"))
    e = source.energy_ev[m]
    s1, s2 = _local_sigmas(source)
    p1, p2 = _local_sigmas(partner)
    r1 = fit.scale * np.interp(e, partner.energy_ev, partner.eps.real) + fit.eps1_offset
    r2 = fit.scale * np.interp(e, partner.energy_ev, partner.eps.imag)
    rms_abs = float(np.sqrt(np.mean(r1**2 + r2**2)))
    out, where = [], []
    for comp, y, r, sa, sb in (
        ("eps1", source.eps.real[m], r1, s1[m], p1),
        ("eps2", source.eps.imag[m], r2, s2[m], p2),
    ):
        sig = np.hypot(sa, fit.scale * np.interp(e, partner.energy_ev, sb))
        res = y - r
        denom = max(float(np.sqrt(np.mean(r**2))), 0.01 * rms_abs, 1e-300)
        excess = max(0.0, float(np.mean(res**2) - np.mean(sig**2)))
        out.append(np.sqrt(excess) / denom)
        bad = np.abs(res) > SHAPE_TOLERANCE * np.maximum(np.abs(r), 0.01 * rms_abs) + 3 * sig
        where += [(a, b, comp) for a, b in _runs(e, bad)]
    return ShapeCheck(float(out[0]), float(out[1]), tuple(sorted(where)))


def _overlap_mask(datasets, i: int) -> np.ndarray:
    """Points of source ``i`` inside another source's covered range."""
    d = datasets[i]
    m = np.zeros(len(d), bool)
    for j, o in enumerate(datasets):
        if j != i:
            m |= _covers(o, find_gaps(o.energy_ev), d.energy_ev)
    return m


def _worst_shape(datasets, i: int, pairs) -> ShapeCheck:
    """Shape check of source ``i`` against every direct partner; the worst mismatch, with
    every disagreeing range."""
    checks = [
        shape_check(datasets[i], datasets[j], pairs[(j, i)])
        for j in range(len(datasets))
        if (j, i) in pairs
    ]
    if not checks:
        return ShapeCheck(float("nan"), float("nan"))
    worst = max(checks, key=lambda c: np.nanmax([c.mismatch_eps1, c.mismatch_eps2, 0.0]))
    where = tuple(sorted({w for c in checks for w in c.disagree_ev}))
    return ShapeCheck(worst.mismatch_eps1, worst.mismatch_eps2, where)


def _failed_tests(f: ScaleFit, npts: int, size, size_sigma, shape, max_correction) -> list[str]:
    """Tests 1-4 of the module docstring that fail, in words."""
    from .overlap import _determined

    reasons = []
    if npts < MIN_DECISION_POINTS:
        reasons.append(f"only {npts} overlap point(s) (at least {MIN_DECISION_POINTS} needed)")
    if not _determined(f):
        reasons.append(
            f"scale {f.scale:.3g} +- {f.scale_sigma:.2g} is not determined (expected positive "
            "and at least 3 standard errors from zero)"
        )
    if not size > SIGNIFICANCE * size_sigma:
        reasons.append(
            f"the correction ({100 * size:.2g} % +- {100 * size_sigma:.2g} %) is not "
            f"{SIGNIFICANCE:g} standard errors from none"
        )
    if not shape.compatible:
        reasons.append(
            f"the sources differ in shape in the overlap beyond a scale and offset (rms "
            f"mismatch eps1 {100 * shape.mismatch_eps1:.3g} %, eps2 "
            f"{100 * shape.mismatch_eps2:.3g} %, tolerance {100 * SHAPE_TOLERANCE:g} %)"
            + (f": {shape.where()}" if shape.disagree_ev else "")
        )
    if size > max_correction:
        reasons.append(
            f"the correction changes the source by {100 * size:.3g} % in the overlap, more "
            f"than max_correction = {100 * max_correction:g} %"
        )
    return reasons


def decide_corrections(datasets, ref: int, fits, pairs, *, correct, max_correction, score=None):
    """One :class:`CorrectionDecision` per source (None for the reference and unlinked ones).

    Parameters
    ----------
    datasets : sequence of Dataset
    ref : int
        Index of the reference.
    fits : dict
        {i: (ScaleFit relative to the reference, points of i's own fit)} (``_propagate``).
    pairs : dict
        {(u, v): ScaleFit of v relative to u} for every overlapping pair (``_pair_fits``).
    correct : bool or "force"
        False: nothing applied; True: applied when every test passes; "force": applied
        whenever the scale is usable.
    max_correction : float
        Test 4's limit [dimensionless, 0.10 = 10 %].
    score : callable, optional
        ``score(corrections) -> float`` of the merged spectrum, lower = more KK consistent,
        with ``corrections`` a list of (scale, offset) or None per source (test 5).
    """
    from .overlap import _determined

    n = len(datasets)
    out: list[CorrectionDecision | None] = [None] * n
    without = None
    for i in range(n):
        if i == ref or i not in fits:
            continue
        f, npts = fits[i]
        size, size_sigma = correction_size(datasets[i], f, _overlap_mask(datasets, i))
        shape = _worst_shape(datasets, i, pairs)
        reasons = _failed_tests(f, npts, size, size_sigma, shape, max_correction)
        kk_with = kk_without = float("nan")
        if (
            score is not None
            and correct is not False
            and _determined(f)
            and (not reasons or correct == "force")
        ):
            without = score([None] * n) if without is None else without
            corr = [None] * n
            corr[i] = (f.scale, f.eps1_offset)
            kk_with, kk_without = float(score(corr)), float(without)
            if not kk_with < kk_without:
                reasons.append(
                    f"the merged spectrum is not more KK consistent with the correction "
                    f"(score {kk_with:.4g} with, {kk_without:.4g} without)"
                )
        if correct is False:
            applied = False
            reasons = ["corrections switched off (correct = false)"] + reasons
        elif correct == "force":
            applied = _determined(f)
        else:
            applied = not reasons
        forced = bool(applied and reasons)
        out[i] = CorrectionDecision(
            applied, size, size_sigma, shape, kk_with, kk_without, tuple(reasons), forced
        )
    return out
