"""Nodes of the piecewise-linear eps2 basis of the KK-constrained fit, and their ties.

Inside the measured window the nodes are the data's own energies (so a feature a few data
points wide, such as a 10 cm^-1 phonon sampled at 1 cm^-1, is resolved), thinned only where
eps2 is locally linear within a fraction of its noise; gaps in the data receive nodes at the
neighbouring spacing. Outside the window the nodes continue with a spacing that grows
geometrically (ratio ``growth``) from the edge spacing down to ``low_factor`` x the lowest and
up to ``high_factor`` x the highest measured energy (defaults 0.1 and 10). These outside nodes
are constrained only through eps1: they stand for absorption the window does not see.

Where eps2 is too curved for a piecewise-linear interpolant at the data spacing, up to two
extra nodes per data interval are added and *tied* to the cubic through the neighbouring data
nodes, within a tolerance (:func:`tie_tolerance`) that includes the cubic's own error.

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005) (an eps2 mesh with about as many nodes as data points);
   see docs/references.md [Kuzmenko2005].
.. [2] E. Fehlberg, "Low-order classical Runge–Kutta formulas with stepsize control,"
   NASA TR R-315 (1969) (from memory; error of a lower-order formula from a higher-order one);
   see docs/references.md [Fehlberg1969].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["NodeSet", "choose_nodes", "unsupported_nodes", "tie_stencils", "tie_tolerance"]


@dataclass(frozen=True)
class NodeSet:
    """Nodes of the eps2 basis chosen by :func:`choose_nodes`.

    Attributes
    ----------
    nodes_ev : numpy.ndarray
        Strictly increasing node energies [eV].
    tied : numpy.ndarray
        True for nodes added between data points where eps2 is strongly curved; the fit ties
        eps2 there to the cubic through the neighbouring data nodes, within the noise and the
        cubic's own estimated interpolation error (:func:`tie_tolerance`).
    gaps_ev : tuple of (float, float)
        Gaps found in the data spacing, (from_ev, to_ev).
    in_gap : numpy.ndarray
        True for nodes inserted inside a gap; the fit holds their second differences to the
        noise level (a smoothness prior, see :func:`kkcheck.kk.basisfit.fit_kk_basis`).
    """

    nodes_ev: np.ndarray
    tied: np.ndarray
    gaps_ev: tuple[tuple[float, float], ...]
    in_gap: np.ndarray


def unsupported_nodes(nodes_ev, kept_ev, all_ev) -> np.ndarray:
    """Nodes inside the data window with no kept data point between their neighbour nodes.

    Such nodes (e.g. after points were given zero weight) are constrained only through eps1;
    :func:`kkcheck.kk.basisfit.fit_kk_basis` should treat them like gap nodes (``in_gap``).
    """
    nodes = np.asarray(nodes_ev, float)
    kept = np.sort(np.asarray(kept_ev, float))
    all_ev = np.asarray(all_ev, float)
    prev = np.concatenate([[nodes[0]], nodes[:-1]])
    nxt = np.concatenate([nodes[1:], [nodes[-1]]])
    lo = np.searchsorted(kept, prev, side="left")
    hi = np.searchsorted(kept, nxt, side="right")
    inside = (nodes >= all_ev.min()) & (nodes <= all_ev.max())
    return inside & (hi <= lo)


def _lagrange_weights(xs: np.ndarray, x0: float) -> np.ndarray:
    """Weights c with sum_j c_j f(xs_j) = value at x0 of the polynomial through (xs, f(xs))."""
    c = np.ones(xs.size)
    for a in range(xs.size):
        for b in range(xs.size):
            if a != b:
                c[a] *= (x0 - xs[b]) / (xs[a] - xs[b])
    return c


def tie_stencils(nodes: np.ndarray, tied: np.ndarray):
    """Per tied node: (i, nb, c, wider) with the cubic stencil and the two quartic ones.

    ``nb`` are the (up to) two nearest untied nodes on either side of node i, ``c`` their
    cubic Lagrange weights at x_i, and ``wider`` a list of (nb5, c5) for the quartics that add
    the next untied node on the left or on the right (when there is one).
    """
    free_idx = np.nonzero(~tied)[0]
    out = []
    for i in np.nonzero(tied)[0]:
        pos = int(np.searchsorted(free_idx, i))
        lo, hi = max(0, pos - 2), min(free_idx.size, pos + 2)
        nb = free_idx[lo:hi]
        c = _lagrange_weights(nodes[nb], nodes[i])
        wider = []
        for lo5, hi5 in ((lo - 1, hi), (lo, hi + 1)):
            if lo5 >= 0 and hi5 <= free_idx.size and hi5 - lo5 == nb.size + 1:
                nb5 = free_idx[lo5:hi5]
                wider.append((nb5, _lagrange_weights(nodes[nb5], nodes[i])))
        out.append((i, nb, c, wider))
    return out


def tie_tolerance(nodes_ev, tied, eps2_nodes, s_node) -> np.ndarray:
    """Tolerance of each tie: the noise and the estimated error of the cubic, in quadrature.

    Parameters
    ----------
    nodes_ev : array_like
        Node energies [eV].
    tied : array_like of bool
        Tied nodes (:class:`NodeSet`).
    eps2_nodes : array_like
        eps2 data interpolated to the nodes (only the untied ones are used).
    s_node : array_like
        eps2 noise at the nodes.

    Returns
    -------
    numpy.ndarray
        t_i for every node (NaN at untied nodes).

    Notes
    -----
    t_i = sqrt(s_i^2 + d_i^2), d_i = max_q |P5_q(x_i) - P3(x_i)|, with P3 the cubic through the
    two nearest untied nodes on either side and P5_q the two quartics that add one more
    untied node on the left or on the right: the embedded estimate of the cubic's own
    interpolation error (its next-order term), as in embedded Runge–Kutta error control
    [1]_. Where eps2 is smooth on the data spacing d_i is about the noise and the tie is
    tight (the extra nodes then only let eps2 bend like a cubic between data points); where a
    peak is sampled by only ~3-4 points per FWHM the cubic is wrong by up to 10^2 noise
    units, d_i says so, and eps2 between the data points is fixed by eps1 through the KK
    relation instead of by the cubic. Limits: d_i is an estimate; it can undershoot where
    both interpolants err alike (e.g. exactly symmetric stencils around an extremum), and
    it includes the data noise amplified by the stencil (~1-2 s_i), so ties are never
    tighter than the noise.

    References
    ----------
    .. [1] E. Fehlberg, "Low-order classical Runge–Kutta formulas with stepsize control,"
       NASA TR R-315 (1969) (from memory; error of a lower-order formula from a higher-order
       one); see docs/references.md [Fehlberg1969].
    """
    nodes = np.asarray(nodes_ev, float)
    tied = np.asarray(tied, bool)
    y = np.asarray(eps2_nodes, float)
    s = np.asarray(s_node, float)
    t = np.full(nodes.size, np.nan)
    for i, nb, c, wider in tie_stencils(nodes, tied):
        p3 = c @ y[nb]
        d = max((abs(c5 @ y[nb5] - p3) for nb5, c5 in wider), default=0.0)
        t[i] = np.hypot(s[i], d)
    return t


def _outside_nodes(edge: float, h0: float, stop: float, growth: float) -> np.ndarray:
    """Nodes from ``edge`` towards ``stop`` (exclusive of edge), spacing h0 * growth^k."""
    out = []
    pos = edge
    h = h0
    sign = 1.0 if stop > edge else -1.0
    while True:
        h *= growth
        pos = pos + sign * h
        if (pos - stop) * sign >= 0:
            out.append(stop)
            break
        out.append(pos)
    return np.array(out)


def choose_nodes(
    energy_ev,
    eps2,
    sigma_eps2,
    *,
    low_factor: float = 0.1,
    high_factor: float = 10.0,
    growth: float = 1.4,
    thin_tol: float = 0.3,
    max_step_rel: float = 0.02,
    gap_factor: float = 6.0,
    refine_tol: float = 1.0,
    max_refine: int = 2,
) -> NodeSet:
    """Node energies for the eps2 basis, following the data's own density.

    Parameters
    ----------
    energy_ev : array_like
        Data energies [eV], non-decreasing (duplicates allowed).
    eps2, sigma_eps2 : array_like
        eps2 data and its noise at those energies (used for thinning only).
    low_factor, high_factor : float
        Outside nodes reach ``low_factor * min(energy_ev)`` and ``high_factor * max(energy_ev)``.
    growth : float
        Ratio of successive outside spacings (> 1).
    thin_tol : float
        A data point is dropped as a node only when eps2 (smoothed over 5 points) deviates from
        the straight line between the kept neighbours by less than ``thin_tol`` x its noise at
        every skipped point.
    max_step_rel : float
        No node spacing inside the window exceeds ``max_step_rel`` x the node energy.
    gap_factor : float
        A data spacing larger than ``gap_factor`` x the median of the 10 spacings on either
        side is a gap; nodes are inserted there at the neighbouring spacing (at most 50).
    refine_tol, max_refine : float, int
        An interval between kept data nodes whose estimated piecewise-linear interpolation
        error h^2 |eps2''| / 8 exceeds ``refine_tol`` x the noise is split into up to
        ``max_refine`` parts (default 2, i.e. at most 2 extra nodes per data interval); the
        added nodes are *tied* (see :func:`kkcheck.kk.basisfit.fit_kk_basis`). The curvature
        is the larger of the second divided differences (over the kept nodes) at the
        interval's ends, so the interval across the inflection point of a coarsely sampled
        peak is split too (the smaller one is ~0 there). Noise alone triggers a split only at
        ~3 sigma (the noise of h^2 |d2| / 8 is ~0.3 s); the tie tolerance is then about the
        noise, so such splits cost little.

    Notes
    -----
    Why at most 2 extra nodes per interval: with 2, eps2 between two data points may take any
    3-piece shape (as many free values per interval as a cubic has), which was enough for
    Lorentz peaks sampled with ~3 points per FWHM (chi2/dof 0.7-1.7 with the true noise,
    against up to ~200 with the cubic held to the noise); 1 was not (chi2/dof 4-15). More
    would let a single-point spike in eps2 hide as a line narrower than the data spacing,
    whose KK partner at the neighbouring points is too small to see (a 60-sigma spike then
    left |z| < 4). So the test resolves eps2 features down to ~3 points per FWHM and treats
    narrower ones as inconsistent with eps1 -- the intended resolution limit.

    Returns
    -------
    NodeSet
    """
    e, y, s = _distinct(energy_ev, eps2, sigma_eps2)
    if e.size < 3:
        raise ValueError("need at least 3 distinct energies")
    keep = _thin(e, y, s, thin_tol, max_step_rel)
    tied = _refine(e, y, s, keep, refine_tol, max_refine)
    gaps, extra = _gap_fill(e, gap_factor)
    inner = e[keep]
    if extra:
        inner = np.union1d(inner, np.concatenate(extra))
    h_lo = inner[1] - inner[0]
    h_hi = inner[-1] - inner[-2]
    low = _outside_nodes(inner[0], h_lo, low_factor * inner[0], growth)[::-1]
    high = _outside_nodes(inner[-1], h_hi, high_factor * inner[-1], growth)
    nodes = np.concatenate([low, inner, high])
    all_nodes = np.union1d(nodes, tied)
    gap_nodes = np.concatenate(extra) if extra else np.zeros(0)
    return NodeSet(
        nodes_ev=all_nodes,
        tied=np.isin(all_nodes, tied),
        gaps_ev=tuple(gaps),
        in_gap=np.isin(all_nodes, gap_nodes),
    )


def _distinct(energy_ev, eps2, sigma_eps2):
    """Distinct energies with the mean eps2 and the rms noise of the points sharing each."""
    e_all = np.asarray(energy_ev, dtype=float)
    e, inv = np.unique(e_all, return_inverse=True)
    cnt = np.bincount(inv)
    y = np.bincount(inv, weights=np.asarray(eps2, float)) / cnt
    s = np.sqrt(np.bincount(inv, weights=np.asarray(sigma_eps2, float) ** 2) / cnt)
    return e, y, s


def _thin(e, y, s, thin_tol: float, max_step_rel: float) -> np.ndarray:
    """Indices of the data energies kept as nodes (see ``thin_tol`` of :func:`choose_nodes`)."""
    m = e.size
    # light smoothing for the thinning test only
    ker = np.ones(5) / 5
    ys = np.convolve(np.pad(y, 2, mode="edge"), ker, mode="valid")
    keep = [0]
    i = 0
    while i < m - 1:
        j = i + 1
        while j + 1 < m:
            cand = j + 1
            if e[cand] - e[i] > max_step_rel * e[i]:
                break
            seg = slice(i + 1, cand)
            lin = ys[i] + (ys[cand] - ys[i]) * (e[seg] - e[i]) / (e[cand] - e[i])
            if np.any(np.abs(ys[seg] - lin) > thin_tol * s[seg]):
                break
            j = cand
        keep.append(j)
        i = j
    return np.array(keep)


def _refine(e, y, s, keep, refine_tol: float, max_refine: int) -> np.ndarray:
    """Tied nodes where eps2 is too curved for a PL interpolant at the data spacing."""
    ek, yk = e[keep], y[keep]
    d2 = np.zeros(keep.size)
    d2[1:-1] = (
        2
        * ((yk[2:] - yk[1:-1]) / (ek[2:] - ek[1:-1]) - (yk[1:-1] - yk[:-2]) / (ek[1:-1] - ek[:-2]))
        / (ek[2:] - ek[:-2])
    )
    tied = []
    for q, (a, b) in enumerate(zip(keep[:-1], keep[1:], strict=True)):
        h = e[b] - e[a]
        curv = max(abs(d2[q]), abs(d2[q + 1]))
        err = h * h * curv / 8
        tol = refine_tol * min(s[a], s[b])
        if err > tol:
            n_sub = int(min(max_refine, np.ceil(np.sqrt(err / tol))))
            tied.append(np.linspace(e[a], e[b], n_sub + 1)[1:-1])
    return np.concatenate(tied) if tied else np.zeros(0)


def _gap_fill(e, gap_factor: float):
    """Gaps in the data spacing, (from_ev, to_ev), and the nodes inserted in each (<= 50)."""
    h = np.diff(e)
    gaps = []
    extra = []
    for k in range(h.size):
        lo, hi = max(0, k - 10), min(h.size, k + 11)
        neigh = np.concatenate([h[lo:k], h[k + 1 : hi]])
        if neigh.size == 0:
            continue
        href = float(np.median(neigh))
        if h[k] > gap_factor * href:
            gaps.append((float(e[k]), float(e[k + 1])))
            n_ins = int(min(50, np.ceil(h[k] / href) - 1))
            extra.append(np.linspace(e[k], e[k + 1], n_ins + 2)[1:-1])
    return gaps, extra
