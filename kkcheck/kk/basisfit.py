"""KK-constrained fit of eps1 and eps2 with a nonnegative piecewise-linear eps2 basis.

The model (Kuzmenko 2005) is

    eps(w) = eps_inf + sum_i A_i [K_i(w) + i T_i(w)] + sum_j D_j [-1 / (w (w + i g_j))],

where T_i is the hat (triangle) function of node x_i (peak 1 at x_i, zero at the neighbouring
nodes), K_i its exact KK partner (:func:`kkcheck.kk.kernels.pl_kk_matrix`), and the optional
Drude columns carry fixed damping energies g_j with weights D_j = wp_j^2. Every term is
KK-consistent by construction, and A_i >= 0, D_j >= 0 make the model passive (eps2 >= 0 at
every energy, not only at the nodes). For eps data the problem is linear in
(eps_inf, A, D) and is solved as a bounded linear least-squares problem
(Lawson–Hanson NNLS, :func:`scipy.optimize.nnls`), rows weighted by the per-point noise.

Nodes. Inside the measured window the nodes are the data's own energies (so a feature a few
data points wide, such as a 10 cm^-1 phonon sampled at 1 cm^-1, is resolved), thinned only
where eps2 is locally linear within a fraction of its noise; gaps in the data receive nodes
at the neighbouring spacing. Outside the window the nodes continue with a spacing that grows
geometrically (ratio ``growth``) from the edge spacing down to ``low_factor`` x the lowest and
up to ``high_factor`` x the highest measured energy (defaults 0.1 and 10). These outside nodes
are constrained only through eps1: they stand for absorption the window does not see.

Limits (what no finite window can reveal): a constant offset of eps1 is indistinguishable
from eps_inf; absorption far outside the window acts on eps1 in the window only through a
smooth, nearly even polynomial in w (constant + w^2 from above, 1/w^2 from below), which the
outside nodes absorb, so such distortions of eps1 are not detectable either.

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005).
.. [2] C. L. Lawson, R. J. Hanson, *Solving Least Squares Problems*, Prentice-Hall (1974),
   ch. 23 (nonnegative least squares; the fallback is scipy's bounded-variable variant).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.optimize import lsq_linear, nnls

from ..spectrum import readonly_array as _ro
from .kernels import pl_kk_matrix

__all__ = [
    "unsupported_nodes",
    "tie_tolerance",
    "KKBasisModel",
    "NodeSet",
    "BasisFit",
    "choose_nodes",
    "fit_kk_basis",
    "design_matrices",
]


@dataclass(frozen=True)
class KKBasisModel:
    """A fitted KK-consistent, passive dielectric function; evaluate it anywhere with :meth:`eps`.

    Attributes
    ----------
    nodes_ev : numpy.ndarray
        Node energies of the piecewise-linear eps2 basis [eV], strictly increasing; eps2 of the
        basis part is zero outside [nodes_ev[0], nodes_ev[-1]].
    amplitudes : numpy.ndarray
        eps2 of the basis part at each node (A_i >= 0) [dimensionless].
    eps_inf : float
        Constant term [dimensionless]; also absorbs any constant offset of eps1.
    drude_wp2_ev2 : numpy.ndarray
        Weights wp_j^2 of the Drude columns [eV^2] (empty when no Drude term was used).
    drude_gamma_ev : numpy.ndarray
        Fixed damping energies g_j of the Drude columns [eV].
    window_ev : tuple of float
        (lowest, highest) measured energy the model was fitted on [eV].
    cov_sqrt : numpy.ndarray
        Matrix L, shape (P, r), with parameter covariance L @ L.T for the parameter vector
        (eps_inf, amplitudes..., drude_wp2_ev2...); zero rows for parameters held at their
        bound. Already scaled by max(1, chi2/dof) of the fit.
    tied, in_gap : numpy.ndarray
        Per node, True when its amplitude was tied to its neighbours / lies in a data gap
        (see :class:`NodeSet`); kept so that a refit (e.g. by the repair stage) uses the same
        basis and priors.
    """

    nodes_ev: np.ndarray
    amplitudes: np.ndarray
    eps_inf: float
    drude_wp2_ev2: np.ndarray
    drude_gamma_ev: np.ndarray
    window_ev: tuple[float, float]
    cov_sqrt: np.ndarray
    tied: np.ndarray | None = None
    in_gap: np.ndarray | None = None

    def __post_init__(self):
        for name in ("nodes_ev", "amplitudes", "drude_wp2_ev2", "drude_gamma_ev", "cov_sqrt"):
            object.__setattr__(self, name, _ro(getattr(self, name)))
        for name in ("tied", "in_gap"):
            v = getattr(self, name)
            v = np.zeros(self.nodes_ev.size, bool) if v is None else np.array(v, bool, copy=True)
            v.setflags(write=False)
            object.__setattr__(self, name, v)
        object.__setattr__(self, "eps_inf", float(self.eps_inf))
        object.__setattr__(self, "window_ev", tuple(float(v) for v in self.window_ev))
        if self.amplitudes.shape != self.nodes_ev.shape:
            raise ValueError("amplitudes must have one value per node")

    @property
    def n_params(self) -> int:
        """Length of the parameter vector (eps_inf, amplitudes, Drude weights)."""
        return 1 + self.nodes_ev.size + self.drude_gamma_ev.size

    @property
    def params(self) -> np.ndarray:
        """The parameter vector (eps_inf, amplitudes..., drude_wp2_ev2...)."""
        return np.concatenate([[self.eps_inf], self.amplitudes, self.drude_wp2_ev2])

    def design(self, energy_ev) -> tuple[np.ndarray, np.ndarray]:
        """Matrices (B1, B2) with eps1 = B1 @ params and eps2 = B2 @ params at ``energy_ev``."""
        return design_matrices(self.nodes_ev, self.drude_gamma_ev, energy_ev)

    def eps(self, energy_ev) -> np.ndarray:
        """Complex eps of the model at photon energies ``energy_ev`` [eV] (> 0)."""
        b1, b2 = self.design(energy_ev)
        p = self.params
        return b1 @ p + 1j * (b2 @ p)

    def eps_sigma(self, energy_ev) -> tuple[np.ndarray, np.ndarray]:
        """Standard uncertainty of (eps1, eps2) of the model, propagated from ``cov_sqrt``."""
        b1, b2 = self.design(energy_ev)
        s1 = np.sqrt(np.sum((b1 @ self.cov_sqrt) ** 2, axis=1))
        s2 = np.sqrt(np.sum((b2 @ self.cov_sqrt) ** 2, axis=1))
        return s1, s2


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
        noise level (a smoothness prior, see :func:`fit_kk_basis`).
    """

    nodes_ev: np.ndarray
    tied: np.ndarray
    gaps_ev: tuple[tuple[float, float], ...]
    in_gap: np.ndarray


@dataclass(frozen=True)
class BasisFit:
    """Outcome of :func:`fit_kk_basis`.

    Attributes
    ----------
    model : KKBasisModel
        The fitted model.
    chi2 : float
        Sum of squared weighted residuals over the data rows (the penalty excluded).
    dof : float
        Data rows minus ``n_effective``, at least 1.
    n_free : int
        Number of free parameters (not held at a bound).
    n_effective : float
        Effective number of parameters the data pay for: the trace of the hat matrix over the
        data rows, rank(J_f) minus the leverage of the prior rows (ties, gap smoothness,
        curvature penalty). Nodes pinned by a prior cost the data less than one degree of
        freedom, so n_effective <= n_free.
    status : str
        Message of the least-squares solver.
    """

    model: KKBasisModel
    chi2: float
    dof: float
    n_free: int
    n_effective: float
    status: str


def design_matrices(nodes_ev, drude_gamma_ev, energy_ev) -> tuple[np.ndarray, np.ndarray]:
    """Columns (1, K_i, Drude_j) for eps1 and (0, T_i, Drude_j) for eps2 at ``energy_ev``.

    Notes
    -----
    Hat functions: T_i(w) = PL interpolant of the unit vector e_i on ``nodes_ev`` (zero
    outside). The columns of the first and last node are zero: their amplitude is fixed at 0.
    Drude column j: -1/(w (w + i g_j)) = -1/(w^2 + g_j^2) + i g_j / (w (w^2 + g_j^2)).
    """
    x = np.asarray(nodes_ev, dtype=float)
    w = np.asarray(energy_ev, dtype=float)
    g = np.asarray(drude_gamma_ev, dtype=float)
    with np.errstate(invalid="ignore"):
        k = pl_kk_matrix(x, w)
    t = _hat_matrix(x, w)
    # the outermost nodes carry amplitude 0 (eps2 falls continuously to zero there), so their
    # columns are zero and the model has no logarithmic end singularity
    k[:, [0, -1]] = 0.0
    t[:, [0, -1]] = 0.0
    d1 = -1.0 / (w[:, None] ** 2 + g[None, :] ** 2)
    d2 = g[None, :] / (w[:, None] * (w[:, None] ** 2 + g[None, :] ** 2))
    ones = np.ones((w.size, 1))
    b1 = np.hstack([ones, k, d1])
    b2 = np.hstack([0.0 * ones, t, d2])
    return b1, b2


def _hat_matrix(x: np.ndarray, w: np.ndarray) -> np.ndarray:
    """T[k, i] = hat function of node i evaluated at w[k] (zero outside [x_0, x_M])."""
    t = np.zeros((w.size, x.size))
    j = np.searchsorted(x, w, side="right") - 1
    inside = (j >= 0) & (w <= x[-1])
    j = np.clip(j, 0, x.size - 2)
    rows = np.nonzero(inside)[0]
    jj = j[inside]
    frac = (w[inside] - x[jj]) / (x[jj + 1] - x[jj])
    t[rows, jj] = 1.0 - frac
    t[rows, jj + 1] += frac
    return t


def unsupported_nodes(nodes_ev, kept_ev, all_ev) -> np.ndarray:
    """Nodes inside the data window with no kept data point between their neighbour nodes.

    Such nodes (e.g. after points were given zero weight) are constrained only through eps1;
    :func:`fit_kk_basis` should treat them like gap nodes (``in_gap``).
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


def _solve_nonneg(a: np.ndarray, y: np.ndarray, free_first: bool) -> tuple[np.ndarray, str]:
    """min ||a x - y|| with x >= 0 (x[0] free when ``free_first``).

    Lawson–Hanson NNLS (:func:`scipy.optimize.nnls`) with a free x[0] written as the
    difference of two nonnegative columns; falls back, with a warning, to bounded-variable
    least squares (:func:`scipy.optimize.lsq_linear`, ``"bvls"``) if NNLS does not finish.
    """
    a2 = np.hstack([a[:, :1], -a[:, :1], a[:, 1:]]) if free_first else a
    try:
        x2, _ = nnls(a2, y, maxiter=50 * a2.shape[1])
    except RuntimeError as exc:  # iteration limit
        warnings.warn(
            f"NNLS did not finish ({exc}); using bounded-variable least squares",
            RuntimeWarning,
            stacklevel=3,
        )
        lower = np.zeros(a.shape[1])
        if free_first:
            lower[0] = -np.inf
        res = lsq_linear(a, y, bounds=(lower, np.inf), method="bvls", tol=1e-12)
        if res.status < 1:
            warnings.warn(
                f"KK basis fit did not converge: {res.message}", RuntimeWarning, stacklevel=3
            )
        return res.x, str(res.message)
    if free_first:
        x = np.concatenate([[x2[0] - x2[1]], x2[2:]])
    else:
        x = x2
    return x, "nnls converged"


def _lagrange_weights(xs: np.ndarray, x0: float) -> np.ndarray:
    """Weights c with sum_j c_j f(xs_j) = value at x0 of the polynomial through (xs, f(xs))."""
    c = np.ones(xs.size)
    for a in range(xs.size):
        for b in range(xs.size):
            if a != b:
                c[a] *= (x0 - xs[b]) / (xs[a] - xs[b])
    return c


def _tie_stencils(nodes: np.ndarray, tied: np.ndarray):
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
       NASA TR R-315 (1969) (error of a lower-order formula from a higher-order one).
    """
    nodes = np.asarray(nodes_ev, float)
    tied = np.asarray(tied, bool)
    y = np.asarray(eps2_nodes, float)
    s = np.asarray(s_node, float)
    t = np.full(nodes.size, np.nan)
    for i, nb, c, wider in _tie_stencils(nodes, tied):
        p3 = c @ y[nb]
        d = max((abs(c5 @ y[nb5] - p3) for nb5, c5 in wider), default=0.0)
        t[i] = np.hypot(s[i], d)
    return t


def _tie_rows(nodes: np.ndarray, tied: np.ndarray, t_node: np.ndarray, p_len: int):
    """Pseudo-observation rows tying each tied node to the cubic through its untied neighbours."""
    rows = []
    for i, nb, c, _ in _tie_stencils(nodes, tied):
        row = np.zeros(p_len)
        row[1 + i] = 1.0 / t_node[i]
        row[1 + nb] -= c / t_node[i]
        rows.append(row)
    return np.array(rows)


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
        added nodes are *tied* (see :func:`fit_kk_basis`). The curvature is the larger of the
        second divided differences (over the kept nodes) at the interval's ends, so the
        interval across the inflection point of a coarsely sampled peak is split too (the
        smaller one is ~0 there). Noise alone triggers a split only at ~3 sigma (the noise of
        h^2 |d2| / 8 is ~0.3 s); the tie tolerance is then about the noise, so such splits
        cost little.

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
    e_all = np.asarray(energy_ev, dtype=float)
    e, inv = np.unique(e_all, return_inverse=True)
    cnt = np.bincount(inv)
    y = np.bincount(inv, weights=np.asarray(eps2, float)) / cnt
    s = np.sqrt(np.bincount(inv, weights=np.asarray(sigma_eps2, float) ** 2) / cnt)
    m = e.size
    if m < 3:
        raise ValueError("need at least 3 distinct energies")
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
    keep = np.array(keep)
    inner = e[keep]
    # refinement where eps2 is too curved for a PL interpolant at the data spacing
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
    tied = np.concatenate(tied) if tied else np.zeros(0)
    # gaps in the data spacing
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


def fit_kk_basis(
    energy_ev,
    eps,
    sigma_eps1,
    sigma_eps2,
    nodes_ev,
    *,
    drude_gamma_ev=(),
    tied=None,
    in_gap=None,
    weights=None,
    smoothing: float = 0.0,
    eps_inf_nonnegative: bool = False,
) -> BasisFit:
    """Weighted bounded least-squares fit of the KK basis model to complex eps data.

    Parameters
    ----------
    energy_ev : array_like, shape (M,)
        Data energies [eV], > 0.
    eps : array_like, shape (M,)
        Complex eps data.
    sigma_eps1, sigma_eps2 : array_like, shape (M,)
        Standard uncertainties (> 0) of eps1 and eps2.
    nodes_ev : array_like
        Node energies from :func:`choose_nodes`.
    drude_gamma_ev : sequence of float
        Damping energies of optional Drude columns [eV] (empty: no Drude term).
    tied : array_like of bool, optional
        Nodes (see :class:`NodeSet`) whose amplitude is tied by a pseudo-observation
        (A_i - sum_j c_j A_j) / t_i = 0 +- 1, c_j the cubic Lagrange weights of the two nearest
        untied nodes on either side and t_i the tolerance of :func:`tie_tolerance` (eps2 noise
        at the node and the cubic's estimated error, in quadrature), computed here from the
        eps2 data (weight > 0) interpolated to the untied nodes. Tying within the noise alone
        was wrong for peaks sampled with 3-4 points per FWHM: the cubic through the
        neighbours then misses eps2 between the points by up to ~100 noise units, so the tie
        forced a wrong shape whose KK partner missed eps1 (chi2/dof 10-200 on clean data).
    in_gap : array_like of bool, optional
        Nodes inside data gaps: each gets the prior (A_{i-1} - 2 A_i + A_{i+1}) / s_i = 0 +- 1
        (eps2 bends no more than its noise per node spacing), so eps2 across a gap is the
        smoothest one that eps1 allows.
    weights : array_like, shape (M,), optional
        Extra per-point weights >= 0 multiplying the inverse variance (0 drops the point).
    smoothing : float
        Weight lambda of the curvature penalty lambda * sum_i (A_{i-1} - 2 A_i + A_{i+1})^2 /
        s_i^2, with s_i the eps2 noise interpolated to node i (the median noise outside the
        window). 0 (default) switches it off.
    eps_inf_nonnegative : bool
        Constrain eps_inf >= 0 (default: free).

    Returns
    -------
    BasisFit

    Notes
    -----
    Minimises sum_k w_k [(eps1_k - B1_k p)^2 / s1_k^2 + (eps2_k - B2_k p)^2 / s2_k^2] over
    p = (eps_inf, A, D) with A >= 0, D >= 0 (:func:`design_matrices`). Columns are scaled to
    unit norm before the solve. The covariance of the free parameters is (J_f^T J_f)^-1 from
    the SVD of the weighted design J_f restricted to them (singular values below 1e-10 x the
    largest dropped), scaled by max(1, chi2/dof).
    """
    w_e = np.asarray(energy_ev, float)
    eps = np.asarray(eps, complex)
    s1 = np.asarray(sigma_eps1, float)
    s2 = np.asarray(sigma_eps2, float)
    wt = np.ones_like(w_e) if weights is None else np.asarray(weights, float)
    use = wt > 0
    if not np.all(s1[use] > 0) or not np.all(s2[use] > 0):
        raise ValueError("sigma_eps1 and sigma_eps2 must be > 0")
    nodes = np.asarray(nodes_ev, float)
    gam = np.asarray(drude_gamma_ev, float)
    b1, b2 = design_matrices(nodes, gam, w_e[use])
    r1 = np.sqrt(wt[use]) / s1[use]
    r2 = np.sqrt(wt[use]) / s2[use]
    a_data = np.vstack([b1 * r1[:, None], b2 * r2[:, None]])
    y_data = np.concatenate([eps.real[use] * r1, eps.imag[use] * r2])
    n_nodes = nodes.size
    p_len = 1 + n_nodes + gam.size
    order = np.argsort(w_e[use], kind="stable")
    s_node = np.interp(nodes, w_e[use][order], s2[use][order], left=np.nan, right=np.nan)
    s_node = np.where(np.isfinite(s_node), s_node, np.median(s2[use]))
    pen_rows = []
    if smoothing > 0:
        pen = np.zeros((n_nodes - 2, p_len))
        idx = np.arange(n_nodes - 2)
        scale = np.sqrt(smoothing) / s_node[1:-1]
        pen[idx, 1 + idx] = scale
        pen[idx, 2 + idx] = -2 * scale
        pen[idx, 3 + idx] = scale
        pen_rows.append(pen)
    if tied is not None and np.any(tied):
        tied_b = np.asarray(tied, bool)
        y_node = np.interp(nodes, w_e[use][order], eps.imag[use][order])
        t_node = tie_tolerance(nodes, tied_b, y_node, s_node)
        pen_rows.append(_tie_rows(nodes, tied_b, t_node, p_len))
    if in_gap is not None and np.any(in_gap):
        gi = np.nonzero(np.asarray(in_gap, bool))[0]
        gi = gi[(gi > 0) & (gi < n_nodes - 1)]
        pen = np.zeros((gi.size, p_len))
        r = np.arange(gi.size)
        pen[r, gi] = 1.0 / s_node[gi]
        pen[r, 1 + gi] = -2.0 / s_node[gi]
        pen[r, 2 + gi] = 1.0 / s_node[gi]
        pen_rows.append(pen)
    a_mat, y_vec = a_data, y_data
    if pen_rows:
        pen = np.vstack(pen_rows)
        a_mat = np.vstack([a_data, pen])
        y_vec = np.concatenate([y_data, np.zeros(pen.shape[0])])
    norms = np.linalg.norm(a_mat, axis=0)
    norms[norms == 0] = 1.0
    a_sc = a_mat / norms
    n_data_rows = a_data.shape[0]
    q = None
    if a_sc.shape[0] > 2 * a_sc.shape[1]:
        # same minimiser with far fewer rows: ||a x - y||^2 = ||r x - q^T y||^2 + const, and
        # the singular values of a[:, free] are those of r[:, free]
        q, r = np.linalg.qr(a_sc)
        a_sc, y_vec = r, q.T @ y_vec
    xs, status = _solve_nonneg(a_sc, y_vec, free_first=not eps_inf_nonnegative)
    p = xs / norms
    resid = y_data - a_data @ p
    chi2 = float(resid @ resid)
    at_bound = np.zeros(p_len, bool)
    at_bound[1:] = xs[1:] <= 0
    if eps_inf_nonnegative:
        at_bound[0] = xs[0] <= 0
    free = ~at_bound
    n_free = int(free.sum())
    # covariance of the free parameters from the (scaled) design incl. the penalty rows
    jf = a_sc[:, free]
    u, sv, vt = np.linalg.svd(jf, full_matrices=False)
    keep = sv > 1e-10 * sv[0]
    # effective parameters: hat-matrix trace over the data rows = rank - prior-row leverage
    u_r = u[:, keep]
    n_pen = a_mat.shape[0] - n_data_rows
    if n_pen == 0:
        lev_pen = 0.0
    elif q is not None:
        lev_pen = float(np.sum((q[n_data_rows:] @ u_r) ** 2))
    else:
        lev_pen = float(np.sum(u_r[n_data_rows:] ** 2))
    n_eff = float(np.count_nonzero(keep)) - lev_pen
    dof = max(1.0, y_data.size - n_eff)
    lf = (vt[keep].T / sv[keep]) / norms[free][:, None]
    cov_sqrt = np.zeros((p_len, lf.shape[1]))
    cov_sqrt[free] = lf * np.sqrt(max(1.0, chi2 / dof))
    model = KKBasisModel(
        nodes_ev=nodes,
        amplitudes=p[1 : 1 + n_nodes],
        eps_inf=p[0],
        drude_wp2_ev2=p[1 + n_nodes :],
        drude_gamma_ev=gam,
        window_ev=(float(w_e[use].min()), float(w_e[use].max())),
        cov_sqrt=cov_sqrt,
        tied=np.zeros(n_nodes, bool) if tied is None else np.asarray(tied, bool),
        in_gap=np.zeros(n_nodes, bool) if in_gap is None else np.asarray(in_gap, bool),
    )
    return BasisFit(
        model=model, chi2=chi2, dof=dof, n_free=n_free, n_effective=n_eff, status=status
    )
