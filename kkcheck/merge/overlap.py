"""Scale and eps1 offset of one source relative to others, from where their ranges overlap.

The relation fitted is

    eps_source ~ scale * eps_reference + eps1_offset      (offset on eps1 only),

by robust regression (Huber M-estimator) with standard errors, for every overlapping pair of
sources (:func:`_pair_fits`), and composed along the overlap graph from the reference to every
source linked to it (:func:`_propagate`).

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
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..spectrum import Dataset
from .sampling import _covers, _sigmas, find_gaps

__all__ = ["MIN_OVERLAP_POINTS", "ScaleFit", "estimate_scale_offset"]

#: Points of a source inside another's range needed to fit scale and offset between them.
MIN_OVERLAP_POINTS = 4


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
    :func:`kkcheck.noise.neighbour_noise_sigma`), and fitted by statsmodels ``RLM`` with
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
    rows_x, rows_o, rows_y, n = _overlap_rows(source, refs)
    if n < min_points:
        names = ", ".join(r.name for r in refs)
        raise InputError(
            f"source {source.name!r} has {n} point(s) inside the range of {names}; "
            f"at least {min_points} are needed to fit scale and offset"
        )
    X = np.column_stack([np.concatenate(rows_x), np.concatenate(rows_o)])
    y = np.concatenate(rows_y)
    coef, bse, note = _fit_scale_offset(X, y)
    if coef.size == 1:
        return ScaleFit(float(coef[0]), float(bse[0]), 0.0, float("nan"), n, note)
    return ScaleFit(float(coef[0]), float(bse[0]), float(coef[1]), float(bse[1]), n, note)


def _overlap_rows(source: Dataset, refs: Sequence[Dataset]):
    """The weighted regression rows of :func:`estimate_scale_offset`, one block per reference.

    Returns (scale column blocks, offset column blocks, data blocks, number of source points
    used); each row is divided by the combined sigma of source and interpolated reference.
    """
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
    return rows_x, rows_o, rows_y, int(used.sum())


def _fit_scale_offset(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, str]:
    """Robust fit with columns (scale, offset), or of the scale alone when the two collide.

    Returns (coefficients, standard errors, note); one coefficient when the offset was
    dropped (see the Notes of :func:`estimate_scale_offset` for the rule).
    """
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
                coef, bse = c1, b1
    return coef, bse, note


def _determined(f: ScaleFit) -> bool:
    """A scale worth applying: positive and at least three standard errors from zero.

    eps_corrected = (eps - o) / s with s <= 0 flips the sign of eps2 (an active medium), and a
    scale known no better than +-1/3 of itself corrects nothing; such estimates are reported
    but never applied.
    """
    return bool(np.isfinite(f.scale) and f.scale > 0 and f.scale > 3 * f.scale_sigma)


def _robust_fit(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Huber M-estimate (statsmodels RLM, HuberT) with standard errors; exact data short-cut.

    Huber (1964) norm, solved by iteratively reweighted least squares (Holland & Welsch 1977).
    """
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


def _compose(f: ScaleFit, Fu: ScaleFit) -> ScaleFit:
    """eps_v ~ s (S_u eps_r + O_u) + o: S_v = s S_u, O_v = s O_u + o, first-order errors.

    ``f`` is v relative to u, ``Fu`` is u relative to the root; covariances between a fitted
    scale and offset are neglected, and a NaN offset sigma (offset not fitted) stays NaN.
    """
    so = f.eps1_offset_sigma
    So = Fu.eps1_offset_sigma
    return ScaleFit(
        f.scale * Fu.scale,
        float(np.hypot(Fu.scale * f.scale_sigma, f.scale * Fu.scale_sigma)),
        f.scale * Fu.eps1_offset + f.eps1_offset,
        float(np.sqrt((f.scale * So) ** 2 + (Fu.eps1_offset * f.scale_sigma) ** 2 + so**2)),
        f.n_points,
        f.note,
    )


def _propagate(n: int, root: int, fits) -> dict[int, tuple[ScaleFit, int]]:
    """Scale/offset of every source linked to ``root``, composed along the best path.

    Dijkstra over the overlap graph with edge cost (sigma_s / s)^2 + 1e-12: the path with
    the smallest accumulated relative scale variance (fewest hops on exact data), each link
    composed by :func:`_compose`. Returns {v: (fit relative to root, number of points of v's
    own fit)}.
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
            best[v] = (_compose(f, Fu), f.n_points)
            cost[v] = cv
            heapq.heappush(heap, (cv, v))
    return best
