"""Stitch several sources into one spectrum: reconcile scale and offset, blend, report gaps.

Each source (a :class:`~kkcheck.spectrum.Dataset`) is compared with the others where their
energy ranges overlap. The relation fitted is

    eps_source ~ scale * eps_reference + eps1_offset      (offset on eps1 only),

estimated by robust regression (Huber M-estimator) with standard errors; it is always
reported and applied only on request, as eps_corrected = (eps - eps1_offset) / scale.
Overlapping points are then blended by inverse-variance weights on the union of the grids
(default) or kept side by side with their source labels. Gaps in the merged axis are
reported. Nothing is removed; every point keeps its source and file row.

:func:`rank_references` adds what a plain stitch cannot tell: which source is off, judged
by how Kramers–Kronig consistent the merged spectrum is under each hypothesis.

References
----------
.. [1] P. J. Huber, "Robust estimation of a location parameter," Ann. Math. Stat. 35(1),
   73-101 (1964) (the Huber norm used by statsmodels' ``HuberT``).
.. [2] P. W. Holland, R. E. Welsch, "Robust regression using iteratively reweighted
   least-squares," Commun. Stat. Theory Methods 6(9), 813-827 (1977) (IRLS, as in
   statsmodels' ``RLM``).
"""

from __future__ import annotations

import heapq
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .clean import neighbour_noise_sigma
from .errors import InputError
from .spectrum import Dataset, Flag, Spectrum

__all__ = [
    "GAP_FACTOR",
    "GAP_MIN_REL",
    "ScaleFit",
    "SourceReport",
    "MergeResult",
    "ReferenceTrial",
    "estimate_scale_offset",
    "find_gaps",
    "merge",
    "rank_references",
    "off_source",
]

#: A spacing is a gap when it exceeds this many times the median spacing on each side ...
GAP_FACTOR = 5.0
#: ... and is wider than this fraction of the photon energy at its lower end.
GAP_MIN_REL = 0.01
#: Points of a source inside another's range needed to fit scale and offset between them.
MIN_OVERLAP_POINTS = 4

_OVERLAP_MODES = ("blend", "side_by_side")


# --------------------------------------------------------------------------- result types


@dataclass(frozen=True)
class ScaleFit:
    """Scale and eps1 offset of one source relative to a reference.

    Attributes
    ----------
    scale : float
        Multiplicative factor s in eps_source ~ s eps_reference + o [dimensionless].
    scale_sigma : float
        Standard error of ``scale``.
    eps1_offset : float
        Additive eps1 offset o [eps units]; 0 when it could not be told from the scale.
    eps1_offset_sigma : float
        Standard error of ``eps1_offset`` (NaN when the offset was not fitted).
    n_points : int
        Source points used (each inside a reference's range).
    note : str
        Anything the user should know about this fit ("" when nothing).
    """

    scale: float
    scale_sigma: float
    eps1_offset: float
    eps1_offset_sigma: float
    n_points: int
    note: str = ""


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
        :func:`find_gaps`).
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


@dataclass(frozen=True)
class ReferenceTrial:
    """One hypothesis of :func:`rank_references` and the KK score of its merge.

    Attributes
    ----------
    hypothesis : str
        ``"suspect"`` (only ``source`` is corrected, to the others as measured),
        ``"reference"`` (``source`` is trusted, all others corrected to it) or
        ``"uncorrected"`` (nothing corrected; ``source`` is "").
    source : str
        The suspected or trusted source.
    score : float
        The value of ``kk_score`` on the merged spectrum (lower is more consistent).
    ratio : float
        score / best score among the trials (1 for the best) [dimensionless].
    sources : tuple of SourceReport
        The per-source scale/offset used in this trial.
    """

    hypothesis: str
    source: str
    score: float
    ratio: float
    sources: tuple[SourceReport, ...]


# --------------------------------------------------------------------------- helpers


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

    Returns (sigma1, sigma2, given) with ``given`` False when any value was estimated.
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
    r = ds.provenance.rows
    return np.asarray(r, int) if r.size == len(ds) else np.zeros(len(ds), int)


# --------------------------------------------------------------------------- overlap fit


def estimate_scale_offset(
    source: Dataset,
    reference: Dataset | Sequence[Dataset],
    *,
    min_points: int = MIN_OVERLAP_POINTS,
) -> ScaleFit:
    """Robust fit of eps_source ~ scale * eps_reference + eps1_offset in the overlap.

    Parameters
    ----------
    source : Dataset
    reference : Dataset or sequence of Dataset
        One reference, or several taken together as measured (their overlaps with the
        source are stacked into one fit).
    min_points : int
        Fewest source points inside the references' ranges (default 4).

    Returns
    -------
    ScaleFit

    Raises
    ------
    InputError
        Fewer than ``min_points`` source points lie inside the references.

    Notes
    -----
    The references are interpolated linearly onto the source's own points inside their
    ranges (points inside a reference's gap are skipped). With r1, r2 the interpolated
    reference and y1, y2 the source, the rows

        y1 = s r1 + o      (eps1 rows, offset column 1)
        y2 = s r2          (eps2 rows, offset column 0)

    are stacked, each divided by sqrt(sigma_source^2 + sigma_reference^2) (given
    uncertainties, or the white-noise estimate of
    :func:`kkcheck.clean.neighbour_noise_sigma`), and fitted by statsmodels ``RLM`` with
    the Huber norm ``HuberT`` (t = 1.345) by iteratively reweighted least squares (Huber
    1964; Holland & Welsch 1977); the standard errors are RLM's. When the eps1 rows carry no
    information to tell a scale from an offset (the reference eps1 nearly constant and eps2
    nearly zero in the overlap), only the scale is fitted and the note says so. The same
    happens when keeping the offset would inflate the scale's standard error more than
    threefold (nearly collinear columns, as in a transparent overlap) and either the offset
    is not significant (|o| < 3 sd) or the scale is then undetermined (s < 3 sd, including
    negative s): the simpler model is reported, with a note. Regression
    dilution from noise in the reference is neglected (it is second order when the overlap
    spans structure much larger than the noise).

    References
    ----------
    .. [1] P. J. Huber, Ann. Math. Stat. 35(1), 73-101 (1964).
    .. [2] P. W. Holland, R. E. Welsch, Commun. Stat. Theory Methods 6(9), 813-827 (1977).
    """
    refs = [reference] if isinstance(reference, Dataset) else list(reference)
    s_src1, s_src2, _ = _sigmas(source)
    rows_x, rows_y, rows_o, used = [], [], [], np.zeros(len(source), bool)
    for ref in refs:
        gaps = find_gaps(ref.energy_ev)
        m = _covers(ref, gaps, source.energy_ev)
        if not m.any():
            continue
        e = source.energy_ev[m]
        r_s1, r_s2, _ = _sigmas(ref)
        r1 = np.interp(e, ref.energy_ev, ref.eps.real)
        r2 = np.interp(e, ref.energy_ev, ref.eps.imag)
        w1 = 1.0 / np.hypot(s_src1[m], np.interp(e, ref.energy_ev, r_s1))
        w2 = 1.0 / np.hypot(s_src2[m], np.interp(e, ref.energy_ev, r_s2))
        rows_x += [r1 * w1, r2 * w2]
        rows_o += [w1, np.zeros_like(w2)]
        rows_y += [source.eps.real[m] * w1, source.eps.imag[m] * w2]
        used |= m
    n = int(used.sum())
    if n < min_points:
        names = ", ".join(r.name for r in refs)
        raise InputError(
            f"source {source.name!r} has {n} point(s) inside the range of {names}; "
            f"at least {min_points} are needed to fit scale and offset"
        )
    X = np.column_stack([np.concatenate(rows_x), np.concatenate(rows_o)])
    y = np.concatenate(rows_y)
    note = ""
    cols = X / np.maximum(np.linalg.norm(X, axis=0), 1e-300)
    if np.linalg.cond(cols) > 1e6:
        X = X[:, :1]
        note = "eps1 offset cannot be told from the scale in this overlap; scale fitted alone"
    coef, bse = _robust_fit(X, y)
    if X.shape[1] == 2:
        # scale and offset nearly collinear (e.g. a transparent overlap where eps1 hardly
        # changes): the offset buys its fit with a scale that may be anything, even negative
        # (a silica overlap gave -0.45 +- 0.38 with offset 3.1). The simpler scale-only model
        # is reported unless the offset is significant AND the scale stays determined.
        c1, b1 = _robust_fit(X[:, :1], y)
        if bse[0] > 3 * b1[0]:
            if abs(coef[1]) < 3 * bse[1]:
                why = f"eps1 offset not significant ({coef[1]:.3g} +- {bse[1]:.2g})"
            elif not coef[0] > 3 * bse[0]:
                why = (
                    f"with an eps1 offset ({coef[1]:.3g} +- {bse[1]:.2g}) the scale is "
                    f"undetermined ({coef[0]:.3g} +- {bse[0]:.2g})"
                )
            else:
                why = ""
            if why:
                note = f"{why}; nearly collinear with the scale in this overlap; scale fitted alone"
                X, coef, bse = X[:, :1], c1, b1
    if X.shape[1] == 1:
        return ScaleFit(float(coef[0]), float(bse[0]), 0.0, float("nan"), n, note)
    return ScaleFit(float(coef[0]), float(bse[0]), float(coef[1]), float(bse[1]), n, note)


def _determined(f: ScaleFit) -> bool:
    """A scale worth applying: positive and at least three standard errors from zero.

    eps_corrected = (eps - o) / s with s <= 0 flips the sign of eps2 (an active medium), and a
    scale known no better than +-1/3 of itself corrects nothing; such estimates are reported
    but never applied.
    """
    return bool(np.isfinite(f.scale) and f.scale > 0 and f.scale > 3 * f.scale_sigma)


def _robust_fit(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Huber M-estimate (statsmodels RLM, HuberT) with standard errors; exact data short-cut."""
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    res = y - X @ coef
    if np.sqrt(np.mean(res**2)) <= 1e-12 * max(np.sqrt(np.mean(y**2)), 1e-300):
        return coef, np.zeros_like(coef)  # noise-free: RLM's MAD scale would be 0
    from statsmodels.robust.norms import HuberT
    from statsmodels.robust.robust_linear_model import RLM

    fit = RLM(y, X, M=HuberT()).fit()
    return np.asarray(fit.params, float), np.asarray(fit.bse, float)


def _invert(f: ScaleFit) -> ScaleFit:
    """eps_a ~ s eps_b + o  ->  eps_b ~ (1/s) eps_a - o/s, first-order errors."""
    s, o = f.scale, f.eps1_offset
    so = f.eps1_offset_sigma if np.isfinite(f.eps1_offset_sigma) else 0.0
    return ScaleFit(
        1.0 / s,
        f.scale_sigma / s**2,
        -o / s,
        float(np.hypot(so / s, o * f.scale_sigma / s**2)),
        f.n_points,
        f.note,
    )


def _pair_fits(datasets: Sequence[Dataset], min_points: int) -> dict[tuple[int, int], ScaleFit]:
    """fits[(u, v)]: eps_v ~ s eps_u + o for every overlapping pair, both directions.

    Each pair is fitted once, the source with fewer points in the common interval taken as
    "source" (the denser one is interpolated onto its points: less interpolation error);
    the reverse direction is the exact inverse.
    """
    fits = {}
    for u in range(len(datasets)):
        for v in range(u + 1, len(datasets)):
            a, b = datasets[u], datasets[v]
            lo = max(a.range_ev[0], b.range_ev[0])
            hi = min(a.range_ev[1], b.range_ev[1])
            if hi <= lo:
                continue
            na = int(np.sum((a.energy_ev >= lo) & (a.energy_ev <= hi)))
            nb = int(np.sum((b.energy_ev >= lo) & (b.energy_ev <= hi)))
            order = [(v, u), (u, v)] if nb <= na else [(u, v), (v, u)]
            for src, ref in order:
                try:
                    f = estimate_scale_offset(datasets[src], datasets[ref], min_points=min_points)
                except InputError:
                    continue
                fits[(ref, src)] = f
                fits[(src, ref)] = _invert(f)
                break
    return fits


def _propagate(n: int, root: int, fits) -> dict[int, tuple[ScaleFit, int]]:
    """Scale/offset of every source linked to ``root``, composed along the best path.

    Dijkstra over the overlap graph with edge cost (sigma_s / s)^2 + 1e-12: the path with
    the smallest accumulated relative scale variance (fewest hops on exact data).
    Composition: eps_v ~ s (S_u eps_r + O_u) + o gives S_v = s S_u, O_v = s O_u + o, with
    first-order error propagation (covariances between the fitted scale and offset are
    neglected). Returns {v: (fit relative to root, number of points of v's own fit)}.
    """
    best = {root: (ScaleFit(1.0, 0.0, 0.0, 0.0, 0), 0)}
    cost = {root: 0.0}
    heap = [(0.0, root)]
    done = set()
    while heap:
        c, u = heapq.heappop(heap)
        if u in done:
            continue
        done.add(u)
        Fu = best[u][0]
        for v in range(n):
            if v in done or (u, v) not in fits:
                continue
            f = fits[(u, v)]
            cv = c + (f.scale_sigma / f.scale) ** 2 + 1e-12
            if cv >= cost.get(v, np.inf):
                continue
            # a NaN offset sigma (offset not fitted) stays NaN along the path
            so = f.eps1_offset_sigma
            So = Fu.eps1_offset_sigma
            comp = ScaleFit(
                f.scale * Fu.scale,
                float(np.hypot(Fu.scale * f.scale_sigma, f.scale * Fu.scale_sigma)),
                f.scale * Fu.eps1_offset + f.eps1_offset,
                float(np.sqrt((f.scale * So) ** 2 + (Fu.eps1_offset * f.scale_sigma) ** 2 + so**2)),
                f.n_points,
                f.note,
            )
            best[v] = (comp, f.n_points)
            cost[v] = cv
            heapq.heappush(heap, (cv, v))
    return best


def _default_reference(datasets: Sequence[Dataset]) -> tuple[int, str]:
    """Index of the default reference and the rule, in words."""
    counts = []
    for i, d in enumerate(datasets):
        inside = np.zeros(len(d), bool)
        for j, o in enumerate(datasets):
            if j != i:
                inside |= (d.energy_ev >= o.range_ev[0]) & (d.energy_ev <= o.range_ev[1])
        counts.append(int(inside.sum()))
    widths = [np.log(d.range_ev[1] / d.range_ev[0]) for d in datasets]
    order = sorted(range(len(datasets)), key=lambda i: (-counts[i], -widths[i], i))
    rule = (
        "default rule: the source with the most points inside other sources' ranges "
        "(ties: widest log-energy range, then input order)"
    )
    return order[0], rule


# --------------------------------------------------------------------------- assembly


def _assemble(
    datasets: Sequence[Dataset],
    names: Sequence[str],
    corr: Sequence[tuple[float, float] | None],
    overlap: str,
) -> tuple[Spectrum, list[str]]:
    """Merged spectrum from datasets with corrections (scale, offset) or None per source."""
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
    gaps = [find_gaps(d.energy_ev) for d in datasets]
    quantity = tuple(d.quantity for d in datasets)
    if overlap == "side_by_side":
        e = np.concatenate([d.energy_ev for d in datasets])
        src = np.concatenate([np.full(len(d), i) for i, d in enumerate(datasets)])
        order = np.lexsort((src, e))
        e, src = e[order], src[order]
        eps = np.concatenate(eps_l)[order]
        s1 = np.concatenate([s if g else np.full(s.size, np.nan) for s, g in zip(s1_l, given_l)])
        s2 = np.concatenate([s if g else np.full(s.size, np.nan) for s, g in zip(s2_l, given_l)])
        rows = np.concatenate([_rows(d) for d in datasets])[order]
        ncov = sum(_covers(d, g, e).astype(int) for d, g in zip(datasets, gaps))
        flags = np.where(ncov >= 2, int(Flag.OVERLAP), 0)
        spec = Spectrum(e, eps, s1[order], s2[order], src, rows, flags, tuple(names), quantity)
        return spec, notes
    # blend on the union grid (energies equal to 1e-9 relative are one point)
    e_all = np.concatenate([d.energy_ev for d in datasets])
    src_all = np.concatenate([np.full(len(d), i) for i, d in enumerate(datasets)])
    o = np.lexsort((src_all, e_all))
    e_all, src_all = e_all[o], src_all[o]
    keep = np.ones(e_all.size, bool)
    keep[1:] = np.diff(e_all) > 1e-9 * e_all[1:]
    grid = e_all[keep]
    m, k = grid.size, len(datasets)
    cover = np.zeros((k, m), bool)
    v1 = np.zeros((k, m))
    v2 = np.zeros((k, m))
    w1 = np.zeros((k, m))
    w2 = np.zeros((k, m))
    for i, d in enumerate(datasets):
        cover[i] = _covers(d, gaps[i], grid)
        v1[i] = np.interp(grid, d.energy_ev, eps_l[i].real)
        v2[i] = np.interp(grid, d.energy_ev, eps_l[i].imag)
        w1[i] = np.where(cover[i], 1.0 / np.interp(grid, d.energy_ev, s1_l[i] ** 2), 0.0)
        w2[i] = np.where(cover[i], 1.0 / np.interp(grid, d.energy_ev, s2_l[i] ** 2), 0.0)
    # a grid point always lies in its own source's coverage unless inside that source's
    # own gap edge tolerance; make sure the native source counts
    native = src_all[keep]
    cover[native, np.arange(m)] = True
    for i in range(k):
        nat = native == i
        d = datasets[i]
        w1[i, nat] = 1.0 / np.interp(grid[nat], d.energy_ev, s1_l[i] ** 2)
        w2[i, nat] = 1.0 / np.interp(grid[nat], d.energy_ev, s2_l[i] ** 2)
    W1, W2 = w1.sum(0), w2.sum(0)
    eps = (w1 * v1).sum(0) / W1 + 1j * (w2 * v2).sum(0) / W2
    ncov = cover.sum(0)
    blended = ncov >= 2
    main = np.argmax(w1 / W1 + w2 / W2, axis=0)
    main = np.where(blended, main, native)
    rows = np.zeros(m, int)
    for i, d in enumerate(datasets):
        sel = main == i
        if sel.any():
            j = np.clip(np.searchsorted(d.energy_ev, grid[sel]), 1, len(d) - 1)
            left_closer = grid[sel] - d.energy_ev[j - 1] <= d.energy_ev[j] - grid[sel]
            j = np.where(left_closer, j - 1, j)
            rows[sel] = _rows(d)[j]
    all_given = np.array(given_l)
    known = ~(cover & ~all_given[:, None]).any(0)
    s1 = np.where(known, 1.0 / np.sqrt(W1), np.nan)
    s2 = np.where(known, 1.0 / np.sqrt(W2), np.nan)
    flags = np.where(blended, int(Flag.OVERLAP) | int(Flag.BLENDED), 0)
    if blended.any():
        notes.append(
            f"{int(blended.sum())} point(s) where sources overlap are inverse-variance blends "
            "of all sources covering them (linear interpolation onto the union grid)"
        )
    return Spectrum(grid, eps, s1, s2, main, rows, flags, tuple(names), quantity), notes


def _check(datasets: Sequence[Dataset], overlap: str) -> list[str]:
    if overlap not in _OVERLAP_MODES:
        raise InputError(f"overlap must be one of {_OVERLAP_MODES}, got {overlap!r}")
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


def _reports(datasets, names, fits, ref, applied) -> tuple[SourceReport, ...]:
    out = []
    nan = float("nan")
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
                )
            )
        else:
            out.append(SourceReport(names[i], d.range_ev, nan, nan, nan, nan, False, 0, False))
    return tuple(out)


# --------------------------------------------------------------------------- public


def merge(
    datasets: Sequence[Dataset],
    *,
    reference: str | int | None = None,
    apply_correction: bool = True,
    overlap: str = "blend",
    min_overlap_points: int = MIN_OVERLAP_POINTS,
) -> MergeResult:
    """Merge several sources onto one photon-energy axis.

    Parameters
    ----------
    datasets : sequence of Dataset
        The sources, each already on the canonical axis and convention (the reader's job).
    reference : str or int, optional
        Name or index of the source the others are scaled to. Default: the source with the
        most points inside other sources' ranges (ties: widest log-energy range, then input
        order), i.e. the hub of the overlap graph, so that corrections need fewest links.
    apply_correction : bool
        Replace eps by (eps - eps1_offset) / scale for every source linked to the
        reference (default True). The estimates are reported either way.
    overlap : {"blend", "side_by_side"}
        ``blend`` (default): one point per distinct energy of the union of all grids;
        where several sources cover it, the value is the inverse-variance weighted mean of
        each covering source linearly interpolated there. ``side_by_side``: every input
        point kept as is, sorted by energy, with its source label.
    min_overlap_points : int
        Fewest points needed to fit two sources against each other (default 4).

    Returns
    -------
    MergeResult

    Notes
    -----
    Model per source (relative to the reference r): eps_source ~ scale eps_r + eps1_offset,
    the offset on eps1 only, fitted by :func:`estimate_scale_offset`. Sources that do not
    overlap the reference but are chained to it (A-B-C with A the reference) get the
    composition along the path of the overlap graph with the smallest accumulated relative
    scale variance: S_C = s_BC S_B, O_C = s_BC O_B + o_BC, errors to first order.
    Applied correction: eps_corrected = (eps - eps1_offset) / scale, sigma / scale, only when
    the scale is positive and at least three standard errors from zero (else reported, not
    applied, with a RuntimeWarning).

    Blend weights are 1/sigma^2 per component, sigma the given uncertainty or, when none
    was given, the white-noise estimate (:func:`kkcheck.clean.neighbour_noise_sigma`). The
    blended sigma is (sum w)^-1/2 when all covering sources had given uncertainties,
    otherwise NaN (left for the cleaning stage). A blended point's ``source`` is the
    source with the largest weight and ``row`` its nearest file row.
    Flags: OVERLAP where two or more sources cover the energy, BLENDED where the value is
    a blend. Gaps: :func:`find_gaps` on the merged axis (spacing > 5x the median of the
    5 neighbouring spacings on both sides and > 1 % of the energy).
    """
    names = _check(datasets, overlap)
    n = len(datasets)
    notes = []
    if reference is None:
        ref, rule = _default_reference(datasets)
        notes.append(f"reference {names[ref]!r} ({rule})")
    else:
        if isinstance(reference, str):
            if reference not in names:
                raise InputError(f"reference {reference!r} is not one of the sources {names}")
            ref = names.index(reference)
        else:
            ref = int(reference)
            if not 0 <= ref < n:
                raise InputError(f"reference index {ref} is outside 0..{n - 1}")
        notes.append(f"reference {names[ref]!r} (chosen by the user)")
    fits = _propagate(n, ref, _pair_fits(datasets, min_overlap_points))
    applied = [
        apply_correction and i in fits and i != ref and _determined(fits[i][0]) for i in range(n)
    ]
    corr = [(fits[i][0].scale, fits[i][0].eps1_offset) if applied[i] else None for i in range(n)]
    for i in range(n):
        if i == ref:
            continue
        if i not in fits:
            msg = (
                f"{names[i]}: no chain of overlaps (>= {min_overlap_points} points) links it "
                f"to the reference {names[ref]!r}; merged as measured, scale unknown"
            )
            notes.append(msg)
            warnings.warn(msg, RuntimeWarning, stacklevel=2)
            continue
        f = fits[i][0]
        if apply_correction and not _determined(f):
            msg = (
                f"{names[i]}: scale {f.scale:.3g} +- {f.scale_sigma:.2g} relative to "
                f"{names[ref]!r} is not determined by the overlap (expected a positive scale "
                "at least 3 standard errors from zero); merged as measured"
            )
            warnings.warn(msg, RuntimeWarning, stacklevel=2)
        notes.append(
            f"{names[i]}: scale {f.scale:.4f} +- {f.scale_sigma:.4f}, eps1 offset "
            f"{f.eps1_offset:.4g} +- {f.eps1_offset_sigma:.2g} relative to {names[ref]!r}; "
            + ("applied" if applied[i] else "not applied")
            + (f" ({f.note})" if f.note else "")
        )
    for d in datasets:
        if d.converted:
            notes.append(f"{d.name}: was written in {d.convention} and converted by the reader")
    spec, more = _assemble(datasets, names, corr, overlap)
    gaps = find_gaps(spec.energy_ev)
    for a, b in gaps:
        notes.append(f"gap {a:.6g}-{b:.6g} eV: no data")
    return MergeResult(
        spectrum=spec,
        sources=_reports(datasets, names, fits, ref, applied),
        gaps_ev=gaps,
        reference=names[ref],
        overlap=overlap,
        notes=tuple(notes + more),
    )


def rank_references(
    datasets: Sequence[Dataset],
    kk_score: Callable[[Spectrum], float],
    *,
    mode: str = "suspect",
    overlap: str = "blend",
    min_overlap_points: int = MIN_OVERLAP_POINTS,
) -> tuple[ReferenceTrial, ...]:
    """Which source is off? Merge under each hypothesis and score KK consistency.

    Parameters
    ----------
    datasets : sequence of Dataset
    kk_score : callable
        ``kk_score(spectrum) -> float``, lower meaning more KK consistent (the pipeline
        passes chi2/dof of the KK test).
    mode : {"suspect", "reference"}
        ``suspect`` (default): for each source in turn, correct only that source, fitted
        to all the others taken as measured. ``reference``: for each source in turn, trust
        it and correct all others to it (as :func:`merge` with ``reference=``).
    overlap : {"blend", "side_by_side"}
        Passed to the merge.
    min_overlap_points : int
        Passed to the overlap fits.

    Returns
    -------
    tuple of ReferenceTrial
        One per source plus the ``uncorrected`` baseline, sorted best (lowest score) first;
        NaN scores last.

    Notes
    -----
    Why ``suspect`` is the default: the KK relation is linear and a constant is absorbed
    by eps_inf, so if eps is KK consistent so is s eps + o for any real s and o (offset on
    eps1). Under ``reference`` mode the merged spectra of different references differ by
    exactly such a global map whenever the corrections compose consistently (a chain or a
    tree of overlaps), so a score that is itself invariant (chi2/dof with eps_inf free and
    sigmas scaled with the data) cannot tell them apart; only inconsistent loops of
    overlaps or a score with an absolute anchor can. Under ``suspect`` mode the other
    sources stay as measured: if one source is off and it is corrected, the merge is
    consistent; if a good source is "corrected" instead, the bad one still leaves its jump
    and the score is worse. With only two sources the two suspect trials are again related
    by a global map and tie: KK consistency cannot say which of two sources is off, only
    that one is (the uncorrected baseline scores worse). See :func:`off_source`.
    """
    if mode not in ("suspect", "reference"):
        raise InputError(f"mode must be 'suspect' or 'reference', got {mode!r}")
    names = _check(datasets, overlap)
    n = len(datasets)
    trials: list[tuple[str, str, float, tuple[SourceReport, ...]]] = []

    def score(corr):
        spec, _ = _assemble(datasets, names, corr, overlap)
        return float(kk_score(spec))

    unit = {i: (ScaleFit(1.0, 0.0, 0.0, 0.0, 0), 0) for i in range(n)}
    base = _reports(datasets, names, unit, -1, [False] * n)
    trials.append(("uncorrected", "", score([None] * n), base))
    if mode == "reference":
        pairs = _pair_fits(datasets, min_overlap_points)
        for r in range(n):
            fits = _propagate(n, r, pairs)
            applied = [i in fits and i != r and _determined(fits[i][0]) for i in range(n)]
            corr = [
                (fits[i][0].scale, fits[i][0].eps1_offset) if applied[i] else None for i in range(n)
            ]
            reps = _reports(datasets, names, fits, r, applied)
            trials.append(("reference", names[r], score(corr), reps))
    else:
        for j in range(n):
            others = [datasets[i] for i in range(n) if i != j]
            try:
                f = estimate_scale_offset(datasets[j], others, min_points=min_overlap_points)
            except InputError:
                continue  # no overlap: nothing to correct, same as the baseline
            if not _determined(f):
                continue  # merge() would not apply it either
            corr = [None] * n
            corr[j] = (f.scale, f.eps1_offset)
            fits = dict(unit)
            fits[j] = (f, f.n_points)
            applied = [i == j for i in range(n)]
            reps = _reports(datasets, names, fits, -1, applied)
            trials.append(("suspect", names[j], score(corr), reps))
    finite = [t[2] for t in trials if np.isfinite(t[2])]
    best = min(finite) if finite else float("nan")
    key = [(not np.isfinite(t[2]), t[2] if np.isfinite(t[2]) else 0.0) for t in trials]
    order = sorted(range(len(trials)), key=lambda i: key[i])
    out = []
    for i in order:
        h, s, sc, reps = trials[i]
        ratio = sc / best if best > 0 else (1.0 if sc == best else float("inf"))
        out.append(ReferenceTrial(h, s, sc, float(ratio), reps))
    return tuple(out)


def off_source(trials: Sequence[ReferenceTrial], *, margin: float = 1.5) -> str | None:
    """Name of the source KK consistency singles out as off, or None when it cannot tell.

    A source is named when its ``suspect`` trial has the lowest score and both the next
    suspect trial and the uncorrected baseline score at least ``margin`` times worse
    (default 1.5). None means: nothing is off (the baseline is as good), or the evidence
    does not separate the candidates (for example two sources only).
    """
    sus = sorted((t for t in trials if t.hypothesis == "suspect"), key=lambda t: t.score)
    base = [t for t in trials if t.hypothesis == "uncorrected"]
    if len(sus) < 2 or not base or not np.isfinite(sus[0].score):
        return None
    b = sus[0].score
    if sus[1].score >= margin * b and base[0].score >= margin * b:
        return sus[0].source
    return None
