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

Nodes (the data's own energies, thinned where eps2 is straight, continued geometrically
outside the window, tied extra nodes where eps2 is strongly curved) are chosen by
:mod:`kkcheck.kk.basisnodes`; its public names are re-exported here.

Priors (pseudo-observation rows of :func:`fit_kk_basis`; s_i is the eps2 noise of the weighted
data interpolated to node i, the median noise outside the window):

* ties: (A_i - sum_j c_j A_j) / t_i = 0 +- 1 at each tied node, c_j the cubic Lagrange
  weights of the two nearest untied nodes on either side and t_i the tolerance of
  :func:`tie_tolerance` (eps2 noise at the node and the cubic's estimated error, in
  quadrature), computed from the eps2 data (weight > 0) interpolated to the untied nodes.
  Tying within the noise alone was wrong for peaks sampled with 3-4 points per FWHM: the
  cubic through the neighbours then misses eps2 between the points by up to ~100 noise units,
  so the tie forced a wrong shape whose KK partner missed eps1 (chi2/dof 10-200 on clean data);
* gaps: (A_{i-1} - 2 A_i + A_{i+1}) / s_i = 0 +- 1 at each node inside a data gap (eps2 bends
  no more than its noise per node spacing), so eps2 across a gap is the smoothest one that
  eps1 allows;
* curvature penalty (optional): lambda * sum_i (A_{i-1} - 2 A_i + A_{i+1})^2 / s_i^2.

Limits (what no finite window can reveal): a constant offset of eps1 is indistinguishable
from eps_inf; absorption far outside the window acts on eps1 in the window only through a
smooth, nearly even polynomial in w (constant + w^2 from above, 1/w^2 from below), which the
outside nodes absorb, so such distortions of eps1 are not detectable either.

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005); see docs/references.md [Kuzmenko2005].
.. [2] C. L. Lawson, R. J. Hanson, *Solving Least Squares Problems*, Prentice-Hall (1974),
   ch. 23 (from memory; nonnegative least squares; the fallback is scipy's bounded-variable
   variant); see
   docs/references.md [LawsonHanson1974].
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.optimize import lsq_linear, nnls

from ..spectrum import readonly_array as _ro
from .basisnodes import NodeSet, choose_nodes, tie_stencils, tie_tolerance, unsupported_nodes
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

    def refit(
        self,
        energy_ev,
        eps,
        sigma_eps1,
        sigma_eps2,
        weights,
        *,
        smoothing: float = 0.0,
        warm_start: bool = False,
    ) -> BasisFit:
        """Fit the same basis again to data with new per-point weights.

        Parameters
        ----------
        energy_ev, eps, sigma_eps1, sigma_eps2 : array_like, shape (M,)
            The data, as for :func:`fit_kk_basis`.
        weights : array_like, shape (M,)
            Per-point weights >= 0 multiplying the inverse variance (0 drops the point).
        smoothing : float
            Curvature penalty weight (:func:`fit_kk_basis`), 0 = off.
        warm_start : bool
            Start the bounded solve from this model's parameters (``initial`` of
            :func:`fit_kk_basis`): the same minimiser, found faster when the active set
            barely changes (the KK test's refits without a few regions).

        Returns
        -------
        BasisFit

        Notes
        -----
        Same nodes, ties and Drude damping energies as this model; the gap prior is applied to
        this model's ``in_gap`` nodes plus those left without a weighted data point between
        their neighbours (:func:`unsupported_nodes`), so a dropped run of points is bridged
        like a gap instead of leaving free amplitudes that no data constrain.
        """
        e = np.asarray(energy_ev, float)
        wt = np.asarray(weights, float)
        in_gap = self.in_gap | unsupported_nodes(self.nodes_ev, e[wt > 0], e)
        return fit_kk_basis(
            e,
            eps,
            sigma_eps1,
            sigma_eps2,
            self.nodes_ev,
            tied=self.tied,
            in_gap=in_gap,
            drude_gamma_ev=self.drude_gamma_ev,
            weights=wt,
            smoothing=smoothing,
            initial=self.params if warm_start else None,
        )


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


def _solve_nonneg(
    a: np.ndarray, y: np.ndarray, free_first: bool, x0=None
) -> tuple[np.ndarray, str]:
    """min ||a x - y|| with x >= 0 (x[0] free when ``free_first``).

    Lawson–Hanson NNLS (:func:`scipy.optimize.nnls`) with a free x[0] written as the
    difference of two nonnegative columns; falls back, with a warning, to bounded-variable
    least squares (:func:`scipy.optimize.lsq_linear`, ``"bvls"``) if NNLS does not finish.
    With a warm start ``x0`` the passive set {x0 > 0} is tried first (:func:`_warm_solve`).
    """
    if x0 is not None:
        warm = _warm_solve(a, y, free_first, np.asarray(x0, float))
        if warm is not None:
            return warm, "nnls converged (warm start: same active set)"
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


def _warm_solve(a: np.ndarray, y: np.ndarray, free_first: bool, x0: np.ndarray):
    """The solution when the passive set of ``x0`` is still optimal, else None.

    Notes
    -----
    Least squares on the columns {x0 > 0} (and x[0] when free); the result is the NNLS
    minimiser exactly when it is feasible (x_P > 0) and the Karush–Kuhn–Tucker condition
    holds on the other columns, w = a^T (y - a x) <= 0 (Lawson and Hanson 1974, ch. 23, the
    optimality test of their algorithm), checked to 1e-10 x max |a^T y|. Otherwise the
    caller solves from scratch.
    """
    p = x0 > 0
    if free_first:
        p[0] = True
    if not np.any(p):
        return None
    sol, *_ = np.linalg.lstsq(a[:, p], y, rcond=None)
    lower = sol[1:] if free_first and p[0] else sol
    if np.any(lower <= 0):
        return None
    x = np.zeros(a.shape[1])
    x[p] = sol
    w = a.T @ (y - a @ x)
    tol = 1e-10 * max(1.0, float(np.max(np.abs(a.T @ y))))
    if np.any(w[~p] > tol):
        return None
    return x


def _tie_rows(nodes: np.ndarray, tied: np.ndarray, t_node: np.ndarray, p_len: int):
    """Pseudo-observation rows tying each tied node to the cubic through its untied neighbours."""
    rows = []
    for i, nb, c, _ in tie_stencils(nodes, tied):
        row = np.zeros(p_len)
        row[1 + i] = 1.0 / t_node[i]
        row[1 + nb] -= c / t_node[i]
        rows.append(row)
    return np.array(rows)


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
    initial=None,
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
        Nodes (see :class:`NodeSet`) whose amplitude is tied to the cubic through its untied
        neighbours, within :func:`tie_tolerance` (module docstring, "Priors").
    in_gap : array_like of bool, optional
        Nodes inside data gaps, held to the gap smoothness prior (module docstring, "Priors").
    weights : array_like, shape (M,), optional
        Extra per-point weights >= 0 multiplying the inverse variance (0 drops the point).
    smoothing : float
        Weight lambda of the curvature penalty (module docstring, "Priors"); 0 (default)
        switches it off.
    eps_inf_nonnegative : bool
        Constrain eps_inf >= 0 (default: free).
    initial : array_like, optional
        Parameters of a previous fit of the same basis (a warm start): its set of
        parameters off their bound is tried first (:func:`_solve_nonneg`).

    Returns
    -------
    BasisFit

    Notes
    -----
    Minimises sum_k w_k [(eps1_k - B1_k p)^2 / s1_k^2 + (eps2_k - B2_k p)^2 / s2_k^2] over
    p = (eps_inf, A, D) with A >= 0, D >= 0 (:func:`design_matrices`). Columns are scaled to
    unit norm before the solve. The covariance of the free parameters is (J_f^T J_f)^-1 from
    the column-pivoted QR factor R_f of the weighted design J_f restricted to them,
    (R_f^T R_f)^-1 (columns whose |R_f| diagonal falls below 1e-10 x the largest held fixed),
    scaled by max(1, chi2/dof); no SVD is made (:func:`_covariance`).
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
    a_data, y_data = _data_rows(nodes, gam, w_e[use], eps[use], s1[use], s2[use], wt[use])
    n_nodes = nodes.size
    p_len = 1 + n_nodes + gam.size
    pen_rows = _prior_rows(nodes, p_len, w_e[use], eps.imag[use], s2[use], smoothing, tied, in_gap)
    solved = _solve_scaled(a_data, y_data, pen_rows, eps_inf_nonnegative, initial)
    p = solved.xs / solved.norms
    resid = y_data - a_data @ p
    chi2 = float(resid @ resid)
    n_free, n_eff, cov_sqrt = _covariance(solved, p_len, eps_inf_nonnegative)
    dof = max(1.0, y_data.size - n_eff)
    cov_sqrt = cov_sqrt * np.sqrt(max(1.0, chi2 / dof))
    model = KKBasisModel(
        nodes_ev=nodes,
        amplitudes=p[1 : 1 + n_nodes],
        eps_inf=p[0],
        drude_wp2_ev2=p[1 + n_nodes :],
        drude_gamma_ev=gam,
        window_ev=(float(w_e[use].min()), float(w_e[use].max())),
        cov_sqrt=cov_sqrt,
        tied=tied,
        in_gap=in_gap,
    )
    return BasisFit(
        model=model, chi2=chi2, dof=dof, n_free=n_free, n_effective=n_eff, status=solved.status
    )


def _data_rows(nodes, gam, e_use, eps_use, s1_use, s2_use, wt_use):
    """Weighted design rows (eps1 rows, then eps2 rows) and right-hand side of the data."""
    b1, b2 = design_matrices(nodes, gam, e_use)
    r1 = np.sqrt(wt_use) / s1_use
    r2 = np.sqrt(wt_use) / s2_use
    a_data = np.vstack([b1 * r1[:, None], b2 * r2[:, None]])
    y_data = np.concatenate([eps_use.real * r1, eps_use.imag * r2])
    return a_data, y_data


def _prior_rows(nodes, p_len, e_use, eps2_use, s2_use, smoothing, tied, in_gap) -> list:
    """Pseudo-observation rows of the priors (curvature penalty, ties, gap smoothness).

    ``e_use``, ``eps2_use``, ``s2_use``: energies, eps2 and its noise of the weighted data
    points (any order); the priors are described in the module docstring.
    """
    n_nodes = nodes.size
    order = np.argsort(e_use, kind="stable")
    s_node = np.interp(nodes, e_use[order], s2_use[order], left=np.nan, right=np.nan)
    s_node = np.where(np.isfinite(s_node), s_node, np.median(s2_use))
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
        y_node = np.interp(nodes, e_use[order], eps2_use[order])
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
    return pen_rows


@dataclass(frozen=True)
class _Solved:
    """The scaled bounded solve of :func:`_solve_scaled` (internal to this module).

    ``xs`` is the solution in scaled columns (parameters = xs / norms); ``a_sc`` the scaled
    design (the R factor when a QR reduction was made); ``pen_sc`` the scaled prior rows;
    ``n_data_rows`` and ``n_pen_rows`` split the rows of the unreduced design.
    """

    xs: np.ndarray
    norms: np.ndarray
    a_sc: np.ndarray
    pen_sc: np.ndarray
    n_data_rows: int
    n_pen_rows: int
    status: str


def _solve_scaled(a_data, y_data, pen_rows, eps_inf_nonnegative: bool, initial=None) -> _Solved:
    """Prior rows appended, columns scaled to unit norm, rows reduced by QR, then the solve."""
    a_mat, y_vec = a_data, y_data
    if pen_rows:
        pen = np.vstack(pen_rows)
        a_mat = np.vstack([a_data, pen])
        y_vec = np.concatenate([y_data, np.zeros(pen.shape[0])])
    n_data_rows = a_data.shape[0]
    norms = np.linalg.norm(a_mat, axis=0)
    norms[norms == 0] = 1.0
    a_sc = a_mat / norms
    pen_sc = a_sc[n_data_rows:]
    if a_sc.shape[0] > 2 * a_sc.shape[1]:
        # same minimiser with far fewer rows: ||a x - y||^2 = ||r x - q^T y||^2 + const; the
        # R factor of [a | y] holds r and q^T y, so Q is never formed
        p_cols = a_sc.shape[1]
        r_aug = scipy.linalg.qr(np.column_stack([a_sc, y_vec]), mode="r", check_finite=False)[0]
        a_sc, y_vec = r_aug[:p_cols, :p_cols], r_aug[:p_cols, p_cols]
    x0 = None if initial is None else np.asarray(initial, float) * norms
    xs, status = _solve_nonneg(a_sc, y_vec, free_first=not eps_inf_nonnegative, x0=x0)
    n_pen = a_mat.shape[0] - n_data_rows
    return _Solved(xs, norms, a_sc, pen_sc, n_data_rows, n_pen, status)


def _covariance(solved: _Solved, p_len: int, eps_inf_nonnegative: bool):
    """(n_free, n_effective, cov_sqrt before the chi2/dof scaling) of a solve.

    Notes
    -----
    With J_f the scaled design (incl. the prior rows) restricted to the free parameters and
    J_f Pi = Q_f R_f its column-pivoted QR (of the small R factor when the rows were reduced),
    the covariance of the free parameters is Pi R_f^-1 R_f^-T Pi^T and the hat matrix is
    H = J_f Pi R_f^-1 R_f^-T Pi^T J_f^T. The effective number of parameters is its trace over
    the data rows, r - ||P_f Pi R_f^-1||_F^2 with P_f the prior rows of J_f (r the numerical
    rank: diagonal entries of R_f below 1e-10 x the largest end the factor; such columns are
    held fixed). No SVD and no Q of the tall design are needed: the pivoted QR of a P x P
    matrix costs ~4/3 P^3 against ~20 P^3 for the SVD, and gives the same trace and, at full
    rank, the same covariance.
    """
    xs, norms, a_sc = solved.xs, solved.norms, solved.a_sc
    at_bound = np.zeros(p_len, bool)
    at_bound[1:] = xs[1:] <= 0
    if eps_inf_nonnegative:
        at_bound[0] = xs[0] <= 0
    free = ~at_bound
    n_free = int(free.sum())
    jf = a_sc[:, free]
    r_f, perm = scipy.linalg.qr(jf, mode="r", pivoting=True, check_finite=False)
    diag = np.abs(np.diag(r_f))
    rank = int(np.count_nonzero(diag > 1e-10 * diag[0])) if diag.size and diag[0] > 0 else 0
    r_inv = scipy.linalg.solve_triangular(r_f[:rank, :rank], np.eye(rank))
    if solved.n_pen_rows == 0:
        lev_pen = 0.0
    else:
        lev_pen = float(np.sum((solved.pen_sc[:, free][:, perm[:rank]] @ r_inv) ** 2))
    n_eff = float(rank) - lev_pen
    lf = np.zeros((n_free, rank))
    lf[perm[:rank]] = r_inv
    lf = lf / norms[free][:, None]
    cov_sqrt = np.zeros((p_len, rank))
    cov_sqrt[free] = lf
    return n_free, n_eff, cov_sqrt
