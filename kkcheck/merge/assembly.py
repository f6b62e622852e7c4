"""One spectrum from several sources: corrections applied, overlaps blended or kept, gaps told.

:func:`merge` fits every source's scale and eps1 offset relative to a reference
(:mod:`kkcheck.merge.overlap`), applies them on request as eps_corrected = (eps - eps1_offset)
/ scale, and assembles the merged spectrum: overlapping points blended by inverse-variance
weights on the union of the grids, or kept side by side with their source labels. Gaps in the
merged axis are reported. Nothing is removed; every point keeps its source and file row.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float
from ..options import OverlapChoice, check_choice
from ..spectrum import Dataset, Flag, Spectrum, rounding_of_dataset
from .decision import MAX_CORRECTION, CorrectionDecision, decide_corrections
from .overlap import MIN_OVERLAP_POINTS, _pair_fits, _propagate
from .sampling import _covers, _rows, _sigmas, find_gaps

__all__ = ["SourceReport", "MergeResult", "merge"]


@dataclass(frozen=True)
class SourceReport:
    """What the merge found and did for one source (``merge.sources[*]`` in summary.json).

    Attributes
    ----------
    name : str
        Source label.
    range_ev : tuple of float
        (lowest, highest) photon energy of the source [eV].
    scale, scale_sigma : float
        eps_source ~ scale * eps_reference + eps1_offset, and its standard error; 1 and 0
        for the reference; NaN when no chain of overlaps links the source to the reference.
    eps1_offset, eps1_offset_sigma : float
        The eps1 offset [eps units] and its standard error (same conventions).
    reference : bool
        True for the reference source.
    n_overlap : int
        Points of this source used in its own overlap fit (0 for the reference or a
        source not linked to it).
    applied : bool
        True when eps was replaced by (eps - eps1_offset) / scale in the merged spectrum.
    decision : CorrectionDecision or None
        Why the correction was or was not applied (:mod:`kkcheck.merge.decision`); None for
        the reference, an unlinked source and the trials of the source ranking.
    """

    name: str
    range_ev: tuple[float, float]
    scale: float
    scale_sigma: float
    eps1_offset: float
    eps1_offset_sigma: float
    reference: bool
    n_overlap: int
    applied: bool
    decision: CorrectionDecision | None = None

    def to_dict(self) -> dict:
        """The ``merge.sources[*]`` item of summary.json (NaN and infinities become null)."""
        return {
            "name": self.name,
            "range_ev": [json_float(self.range_ev[0]), json_float(self.range_ev[1])],
            "eps1_offset": json_float(self.eps1_offset),
            "eps1_offset_sigma": json_float(self.eps1_offset_sigma),
            "scale": json_float(self.scale),
            "scale_sigma": json_float(self.scale_sigma),
            "reference": bool(self.reference),
            "overlap_points": int(self.n_overlap),
            "applied": bool(self.applied),
            "decision": self.decision.to_dict() if self.decision is not None else None,
        }


@dataclass(frozen=True)
class MergeResult:
    """Outcome of :func:`merge`.

    Attributes
    ----------
    spectrum : Spectrum
        The merged spectrum; flags OVERLAP / BLENDED set, source and file row per point.
    sources : tuple of SourceReport
        One per input, in input order.
    gaps_ev : tuple of (float, float)
        (lower, upper) photon energy [eV] of every gap in the merged axis (see
        :func:`kkcheck.merge.find_gaps`).
    reference : str
        Name of the reference source.
    overlap : str
        ``"blend"`` or ``"side_by_side"``.
    notes : tuple of str
        Everything decided, in words (reference rule, corrections, estimated sigmas).
    """

    spectrum: Spectrum
    sources: tuple[SourceReport, ...]
    gaps_ev: tuple[tuple[float, float], ...]
    reference: str
    overlap: str
    notes: tuple[str, ...]

    def to_dict(self, overlap: str, ranking=None) -> dict:
        """The ``merge`` block of summary.json.

        Parameters
        ----------
        overlap : str
            The overlap choice to record (the job's option).
        ranking : sequence of ReferenceTrial, optional
            The trials of :func:`kkcheck.merge.rank_references`; when given (and not empty),
            ``reference_ranking``, ``suspect_source`` (:func:`kkcheck.merge.off_source`, null
            when it cannot tell) and ``ranking_note`` (:func:`kkcheck.merge.ranking_note`:
            one sentence when no source is named, else null) are added.
        """
        block = {
            "reference": self.reference,
            "sources": [s.to_dict() for s in self.sources],
            "gaps_ev": [[json_float(lo), json_float(hi)] for lo, hi in self.gaps_ev],
            "overlap": overlap,
            "notes": list(self.notes),
        }
        if ranking:
            from .ranking import off_source, ranking_note  # ranking builds on this module

            block["reference_ranking"] = [t.to_dict() for t in ranking]
            block["suspect_source"] = off_source(ranking)
            block["ranking_note"] = ranking_note(ranking)
        return block


# --------------------------------------------------------------------------- merge


def merge(
    datasets: Sequence[Dataset],
    *,
    reference: str | int | None = None,
    correct: bool | str = True,
    overlap: OverlapChoice = "blend",
    min_overlap_points: int = MIN_OVERLAP_POINTS,
    max_correction: float = MAX_CORRECTION,
    kk_score: Callable[[Spectrum], float] | None = None,
) -> MergeResult:
    """Merge several sources onto one photon-energy axis.

    Parameters
    ----------
    datasets : sequence of Dataset
        The sources, each already on the canonical axis and convention (the reader's job).
    reference : str or int, optional
        Name or index of the source the others are scaled to. Default: the source covering
        most of the visible band 380-750 nm (ties: centre nearest the log-middle of the merged
        range, then input order); see :func:`_default_reference`.
    correct : bool or "force"
        True (default; the job option ``correct``): replace eps by (eps - eps1_offset) /
        scale for a source linked to the reference when the data determine the correction
        (every test of :mod:`kkcheck.merge.decision` passes). False: never. ``"force"``:
        whenever the scale is usable (positive, 3 standard errors from zero), with a warning
        for each failed test. The estimates and the decision are reported either way.
    overlap : {"blend", "side_by_side"}
        ``blend`` (default): one point per distinct energy of the union of all grids;
        where several sources cover it, the value is the inverse-variance weighted mean of
        each covering source linearly interpolated there. ``side_by_side``: every input
        point kept as is, sorted by energy, with its source label.
    min_overlap_points : int
        Fewest points needed to fit two sources against each other (default 4; applying a
        correction needs :data:`kkcheck.merge.decision.MIN_DECISION_POINTS`).
    max_correction : float
        Largest relative change a correction may make unless forced (default 0.10).
    kk_score : callable, optional
        ``kk_score(spectrum) -> float``, lower = more KK consistent (the pipeline passes the
        score it gives :func:`kkcheck.merge.rank_references`); when given, a correction is
        applied only if the merge scores lower with it than without.

    Returns
    -------
    MergeResult

    Notes
    -----
    Model per source (relative to the reference r): eps_source ~ scale eps_r + eps1_offset,
    the offset on eps1 only, fitted by :func:`kkcheck.merge.estimate_scale_offset`. Sources
    that do not overlap the reference but are chained to it (A-B-C with A the reference) get
    the composition along the path of the overlap graph with the smallest accumulated
    relative scale variance: S_C = s_BC S_B, O_C = s_BC O_B + o_BC, errors to first order.
    Applied correction: eps_corrected = (eps - eps1_offset) / scale, sigma / scale, only when
    the rule of :mod:`kkcheck.merge.decision` says the data determine it (enough overlap,
    significant, compatible shapes, at most ``max_correction``, more KK consistent); else
    reported, not applied, with the reasons (a RuntimeWarning for an undetermined scale, a
    shape disagreement or a correction above ``max_correction``).

    Blend weights are 1/sigma^2 per component, sigma the given uncertainty or, when none
    was given, the white-noise estimate (:func:`kkcheck.noise.neighbour_noise_sigma`). The
    blended sigma is (sum w)^-1/2 when all covering sources had given uncertainties,
    otherwise NaN (left for the cleaning stage). A blended point's ``source`` is the
    source with the largest weight and ``row`` its nearest file row.
    Flags: OVERLAP where two or more sources cover the energy, BLENDED where the value is
    a blend. Gaps: :func:`kkcheck.merge.find_gaps` on the merged axis (spacing > 5x the
    median of the 5 neighbouring spacings on both sides and > 1 % of the energy).
    """
    names = _check(datasets, overlap)
    if correct not in (True, False, "force"):
        raise InputError(f'correct must be true, false or "force", got {correct!r}')
    n = len(datasets)
    ref, ref_note = _reference_index(datasets, names, reference)
    pairs = _pair_fits(datasets, min_overlap_points)
    fits = _propagate(n, ref, pairs)
    score = None
    if kk_score is not None:

        def score(corr) -> float:
            return float(kk_score(_assemble(datasets, names, corr, overlap)[0]))

    decisions = decide_corrections(
        datasets, ref, fits, pairs, correct=correct, max_correction=max_correction, score=score
    )
    applied = [d is not None and d.applied for d in decisions]
    corr = _corrections(fits, applied)
    notes = [ref_note] + _fit_notes(names, fits, ref, decisions, max_correction, min_overlap_points)
    for d in datasets:
        if d.converted:
            notes.append(f"{d.name}: was written in {d.convention} and converted by the reader")
    spec, more = _assemble(datasets, names, corr, overlap)
    gaps = find_gaps(spec.energy_ev)
    for a, b in gaps:
        notes.append(f"gap {a:.6g}-{b:.6g} eV: no data")
    return MergeResult(
        spectrum=spec,
        sources=_reports(datasets, names, fits, ref, applied, decisions),
        gaps_ev=gaps,
        reference=names[ref],
        overlap=overlap,
        notes=tuple(notes + more),
    )


def _check(datasets: Sequence[Dataset], overlap: str) -> list[str]:
    """Check the inputs once, up front; return the source names made unique ("a", "a#2")."""
    check_choice("overlap", overlap, OverlapChoice)
    if len(datasets) == 0:
        raise InputError("at least one dataset is needed to merge")
    for d in datasets:
        if not isinstance(d, Dataset):
            raise ValueError("merge takes kkcheck.spectrum.Dataset values")
        if len(d) < 2:
            raise InputError(f"source {d.name!r} has {len(d)} point(s); at least 2 are needed")
    names, seen = [], {}
    for d in datasets:
        seen[d.name] = seen.get(d.name, 0) + 1
        names.append(d.name if seen[d.name] == 1 else f"{d.name}#{seen[d.name]}")
    return names


def _reference_index(datasets, names, reference) -> tuple[int, str]:
    """Index of the reference source and the note that says how it was chosen."""
    n = len(datasets)
    if reference is None:
        ref, rule = _default_reference(datasets)
        return ref, f"reference {names[ref]!r} ({rule})"
    if isinstance(reference, str):
        if reference not in names:
            raise InputError(f"reference {reference!r} is not one of the sources {names}")
        ref = names.index(reference)
    else:
        ref = int(reference)
        if not 0 <= ref < n:
            raise InputError(f"reference index {ref} is outside 0..{n - 1}")
    return ref, f"reference {names[ref]!r} (chosen by the user)"


#: The visible band [eV] (750-380 nm) the default reference rule prefers.
VISIBLE_EV = (1.65, 3.26)


def _default_reference(datasets: Sequence[Dataset]) -> tuple[int, str]:
    """Index of the default reference and the rule, in words.

    Rule: the source covering most of the visible band 380-750 nm (fraction of its log
    width), where absolute calibration is most direct (ellipsometry measures a ratio of two
    polarisations; infrared reflectance and transmission tables depend on a reference
    mirror or a KK extension, and tend to be the ones that need a scale); ties (within 1 %):
    the source whose log-energy centre lies nearest the log-middle of the whole merged
    range; then input order. Not the source with the most points: a dense table is not a
    better calibrated one. Common practice, no source.
    """
    lv, hv = np.log(VISIBLE_EV[0]), np.log(VISIBLE_EV[1])
    lo = min(np.log(d.range_ev[0]) for d in datasets)
    hi = max(np.log(d.range_ev[1]) for d in datasets)
    mid = 0.5 * (lo + hi)
    key = []
    for i, d in enumerate(datasets):
        a, b = np.log(d.range_ev[0]), np.log(d.range_ev[1])
        frac = max(0.0, min(b, hv) - max(a, lv)) / (hv - lv)
        key.append((-round(frac, 2), abs(0.5 * (a + b) - mid), i))
    ref = min(range(len(datasets)), key=lambda i: key[i])
    rule = (
        "default rule: the source covering most of the visible band 380-750 nm, where "
        "absolute calibration is most direct (ties: centre nearest the middle of the merged "
        "range, then input order); override with reference"
    )
    return ref, rule


def _fit_notes(names, fits, ref, decisions, max_correction, min_overlap_points) -> list[str]:
    """One note per non-reference source (its estimate and the decision, with the reasons);
    warns when a source is unlinked, its scale undetermined, the shapes differ or the
    correction is larger than ``max_correction`` (applied or not)."""
    notes = []
    for i in range(len(names)):
        if i == ref:
            continue
        if i not in fits:
            msg = (
                f"{names[i]}: no chain of overlaps (>= {min_overlap_points} points) links it "
                f"to the reference {names[ref]!r}; merged as measured, scale unknown"
            )
            notes.append(msg)
            warnings.warn(msg, RuntimeWarning, stacklevel=3)
            continue
        f, d = fits[i][0], decisions[i]
        state = "applied" + (" (forced)" if d.forced else "") if d.applied else "not applied"
        why = "; ".join(d.reasons)
        msg = (
            f"{names[i]}: scale {f.scale:.4f} +- {f.scale_sigma:.4f}, eps1 offset "
            f"{f.eps1_offset:.4g} +- {f.eps1_offset_sigma:.2g} relative to {names[ref]!r} "
            f"(changes it by {100 * d.size:.3g} % in the overlap); {state}"
            + (f": {why}" if why else "")
            + (f" ({f.note})" if f.note else "")
        )
        notes.append(msg)
        serious = (
            d.size > max_correction
            or not d.shape.compatible
            or d.forced
            or any("not determined" in r for r in d.reasons)
        )
        if serious and not any("switched off" in r for r in d.reasons):
            warnings.warn(msg, RuntimeWarning, stacklevel=3)
    return notes


def _corrections(fits, applied) -> list[tuple[float, float] | None]:
    """(scale, eps1 offset) of each source whose correction is applied, else None."""
    out = []
    for i, a in enumerate(applied):
        out.append((fits[i][0].scale, fits[i][0].eps1_offset) if a else None)
    return out


def _reports(datasets, names, fits, ref, applied, decisions=None) -> tuple[SourceReport, ...]:
    """One SourceReport per source; NaN estimates for a source ``fits`` does not hold."""
    out = []
    nan = float("nan")
    decisions = decisions if decisions is not None else [None] * len(datasets)
    for i, d in enumerate(datasets):
        if i in fits:
            f, npts = fits[i]
            out.append(
                SourceReport(
                    names[i],
                    d.range_ev,
                    f.scale,
                    f.scale_sigma,
                    f.eps1_offset,
                    f.eps1_offset_sigma,
                    i == ref,
                    npts,
                    bool(applied[i]),
                    decisions[i],
                )
            )
        else:
            out.append(SourceReport(names[i], d.range_ev, nan, nan, nan, nan, False, 0, False))
    return tuple(out)


# --------------------------------------------------------------------------- assembly


@dataclass(frozen=True)
class _Corrected:
    """Per source: eps with its correction applied, the sigmas used as weights, and whether
    the sigmas were all given (False: some were estimated)."""

    eps: tuple[np.ndarray, ...]
    sigma1: tuple[np.ndarray, ...]
    sigma2: tuple[np.ndarray, ...]
    given: tuple[bool, ...]


def _corrected(datasets, corr) -> tuple[_Corrected, list[str]]:
    """Apply each (scale, offset) correction (None: as measured) to eps and the sigmas."""
    notes = []
    eps_l, s1_l, s2_l, given_l = [], [], [], []
    for ds, c in zip(datasets, corr):
        s1, s2, given = _sigmas(ds)
        eps = ds.eps
        if c is not None:
            scale, off = c
            eps = (eps - off) / scale
            s1, s2 = s1 / abs(scale), s2 / abs(scale)
        eps_l.append(eps)
        s1_l.append(s1)
        s2_l.append(s2)
        given_l.append(given)
        if not given:
            notes.append(
                f"{ds.name}: no (complete) uncertainties given; weights use its white-noise "
                "estimate and its sigma is left NaN for the cleaning stage"
            )
    return _Corrected(tuple(eps_l), tuple(s1_l), tuple(s2_l), tuple(given_l)), notes


def _assemble(
    datasets: Sequence[Dataset],
    names: Sequence[str],
    corr: Sequence[tuple[float, float] | None],
    overlap: str,
) -> tuple[Spectrum, list[str]]:
    """Merged spectrum from datasets with corrections (scale, offset) or None per source."""
    c, notes = _corrected(datasets, corr)
    gaps = [find_gaps(d.energy_ev) for d in datasets]
    if overlap == "side_by_side":
        return _side_by_side(datasets, names, c, gaps), notes
    spec, more = _blend(datasets, names, c, gaps)
    return spec, notes + more


def _side_by_side(datasets, names, c: _Corrected, gaps) -> Spectrum:
    """Every input point kept, sorted by energy (ties: input order); OVERLAP where covered
    by two or more sources; sigma NaN for a source whose sigmas were not all given."""
    quantity = tuple(d.quantity for d in datasets)
    e = np.concatenate([d.energy_ev for d in datasets])
    src = np.concatenate([np.full(len(d), i) for i, d in enumerate(datasets)])
    order = np.lexsort((src, e))
    e, src = e[order], src[order]
    eps = np.concatenate(c.eps)[order]
    s1 = np.concatenate([s if g else np.full(s.size, np.nan) for s, g in zip(c.sigma1, c.given)])
    s2 = np.concatenate([s if g else np.full(s.size, np.nan) for s, g in zip(c.sigma2, c.given)])
    rows = np.concatenate([_rows(d) for d in datasets])[order]
    ncov = sum(_covers(d, g, e).astype(int) for d, g in zip(datasets, gaps))
    flags = np.where(ncov >= 2, int(Flag.OVERLAP), 0)
    # printed-precision parts as written (a merge scale near 1 is not applied to them)
    r = [rounding_of_dataset(d) for d in datasets]
    r1, r2, zb = (np.concatenate([x[j] for x in r])[order] for j in range(3))
    return Spectrum(
        e, eps, s1[order], s2[order], src, rows, flags, tuple(names), quantity, r1, r2, zb
    )


def _blend(datasets, names, c: _Corrected, gaps) -> tuple[Spectrum, list[str]]:
    """Inverse-variance blend on the union grid (energies equal to 1e-9 relative are one
    point); see the Notes of :func:`merge`."""
    e_all = np.concatenate([d.energy_ev for d in datasets])
    src_all = np.concatenate([np.full(len(d), i) for i, d in enumerate(datasets)])
    o = np.lexsort((src_all, e_all))
    e_all, src_all = e_all[o], src_all[o]
    keep = np.ones(e_all.size, bool)
    keep[1:] = np.diff(e_all) > 1e-9 * e_all[1:]
    grid = e_all[keep]
    m, k = grid.size, len(datasets)
    cover = np.zeros((k, m), bool)
    v1, v2, w1, w2 = (np.zeros((k, m)) for _ in range(4))
    for i, d in enumerate(datasets):
        cover[i] = _covers(d, gaps[i], grid)
        v1[i] = np.interp(grid, d.energy_ev, c.eps[i].real)
        v2[i] = np.interp(grid, d.energy_ev, c.eps[i].imag)
        w1[i] = np.where(cover[i], 1.0 / np.interp(grid, d.energy_ev, c.sigma1[i] ** 2), 0.0)
        w2[i] = np.where(cover[i], 1.0 / np.interp(grid, d.energy_ev, c.sigma2[i] ** 2), 0.0)
    # a grid point always lies in its own source's coverage unless inside that source's
    # own gap edge tolerance; make sure the native source counts
    native = src_all[keep]
    cover[native, np.arange(m)] = True
    for i in range(k):
        nat = native == i
        d = datasets[i]
        w1[i, nat] = 1.0 / np.interp(grid[nat], d.energy_ev, c.sigma1[i] ** 2)
        w2[i, nat] = 1.0 / np.interp(grid[nat], d.energy_ev, c.sigma2[i] ** 2)
    W1, W2 = w1.sum(0), w2.sum(0)
    eps = (w1 * v1).sum(0) / W1 + 1j * (w2 * v2).sum(0) / W2
    blended = cover.sum(0) >= 2
    main = np.argmax(w1 / W1 + w2 / W2, axis=0)
    main = np.where(blended, main, native)
    rows = _nearest_rows(datasets, grid, main)
    known = ~(cover & ~np.array(c.given)[:, None]).any(0)
    s1 = np.where(known, 1.0 / np.sqrt(W1), np.nan)
    s2 = np.where(known, 1.0 / np.sqrt(W2), np.nan)
    flags = np.where(blended, int(Flag.OVERLAP) | int(Flag.BLENDED), 0)
    notes = []
    if blended.any():
        notes.append(
            f"{int(blended.sum())} point(s) where sources overlap are inverse-variance blends "
            "of all sources covering them (linear interpolation onto the union grid)"
        )
    quantity = tuple(d.quantity for d in datasets)
    r1, r2, zb = _rounding_on(datasets, grid, main)
    spec = Spectrum(grid, eps, s1, s2, main, rows, flags, tuple(names), quantity, r1, r2, zb)
    return spec, notes


def _rounding_on(datasets, grid: np.ndarray, main: np.ndarray):
    """Printed-precision parts (rounding_eps1, rounding_eps2, zero_bound) of each grid point,
    from the source ``main[j]`` (its point nearest to ``grid[j]``; a blend is never coarser)."""
    r1, r2, zb = np.zeros(grid.size), np.zeros(grid.size), np.zeros(grid.size, bool)
    for i, d in enumerate(datasets):
        sel = main == i
        if sel.any():
            a, b, z = rounding_of_dataset(d)
            j = np.clip(np.searchsorted(d.energy_ev, grid[sel]), 0, len(d) - 1)
            r1[sel], r2[sel], zb[sel] = a[j], b[j], z[j]
    return r1, r2, zb


def _nearest_rows(datasets, grid: np.ndarray, main: np.ndarray) -> np.ndarray:
    """File row of the point of source ``main[j]`` nearest to ``grid[j]`` (left on ties)."""
    rows = np.zeros(grid.size, int)
    for i, d in enumerate(datasets):
        sel = main == i
        if sel.any():
            j = np.clip(np.searchsorted(d.energy_ev, grid[sel]), 1, len(d) - 1)
            left_closer = grid[sel] - d.energy_ev[j - 1] <= d.energy_ev[j] - grid[sel]
            j = np.where(left_closer, j - 1, j)
            rows[sel] = _rows(d)[j]
    return rows
