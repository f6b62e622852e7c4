"""Relaxed vector fitting of eps(w) with complex-conjugate pairs, real poles and a conductor pole.

References
----------
.. [1] B. Gustavsen, A. Semlyen, "Rational approximation of frequency domain responses by
   vector fitting," IEEE Trans. Power Deliv. 14(3), 1052-1061 (1999) (volume and pages from
   memory); see docs/references.md [GustavsenSemlyen1999].
.. [2] B. Gustavsen, "Improving the pole relocating properties of vector fitting," IEEE Trans.
   Power Deliv. 21(3), 1587-1592 (2006) (from memory); see docs/references.md [Gustavsen2006].
.. [3] Y. Nakatsukasa, O. Sete, L. N. Trefethen, "The AAA algorithm for rational
   approximation," SIAM J. Sci. Comput. 40(3), A1494-A1522 (2018); see docs/references.md
   [Nakatsukasa2018].
.. [4] B. Gustavsen, A. Semlyen, "Rational approximation of frequency domain responses by
   vector fitting," IEEE Trans. Power Deliv. 14(3), 1052-1061 (1999), sec. on the choice of
   starting poles (same paper as [1]; from memory).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_triangular

from .model import PolePairModel, design_matrix, model_from_vector

__all__ = [
    "VectorFitResult",
    "vector_fit",
    "starting_poles",
    "poles_plus_pair",
    "ADDED_PAIR_SITES",
    "broaden_above_band",
    "PolishResult",
    "polish_poles",
    "floor_damping",
    "EPS_INF_MIN",
]

#: Smallest eps_inf any residue solve accepts. eps(w -> inf) of a real medium tends to 1 (no
#: response at infinite frequency); a window's eps_inf holds the oscillators above it, each of
#: which adds a positive amount, so eps_inf >= 1 is the usual physics choice (eps_inf > 0 is the
#: minimum for a stable time-domain update; below 1 needs a plasma term the model does not
#: have). Common practice, no source.
EPS_INF_MIN = 1.0
_EPS_INF_FLOOR = EPS_INF_MIN
#: Smallest damping of a pole as a fraction of the local data spacing: a resonance narrower
#: than the sampling is not determined by the data (and a sharp pole next to broad ones is
#: where float64 loses eps2's sign). Our choice, no source.
MIN_DAMPING_SPACING = 0.5
_RELAX_FLOOR = 1e-8  # smallest |d~| accepted before the relaxed constraint is replaced [2]


@dataclass(frozen=True)
class VectorFitResult:
    """Outcome of :func:`vector_fit` at one order.

    Attributes
    ----------
    model : PolePairModel
        Fitted model (stable poles; passivity not enforced).
    iterations : int
        Pole-relocation iterations run.
    pole_change : float
        Largest relative pole movement in the last iteration [dimensionless].
    max_condition : float
        Largest condition number of the column-scaled relocation system.
    """

    model: PolePairModel
    iterations: int
    pole_change: float
    max_condition: float


def starting_poles(
    energy_ev, n_entries: int, conductor: bool, eps=None, method: str = "band"
) -> np.ndarray:
    """Starting poles [eV] for ``n_entries`` entries (pairs or real poles).

    ``method="band"``: complex pairs a = -beta/100 + i beta with beta log-spaced over the data
    band (Gustavsen & Semlyen [1]_); with ``conductor`` the first entry is the real pole
    a = -gamma, gamma = w eps2/(eps_inf - eps1) estimated at the lowest energy (Drude), taking
    eps_inf = 1. ``method="aaa"``: the stable poles of ``scipy.interpolate.AAA`` [3]_ fitted to
    the samples at s = -i w and their conjugates, largest residues first, topped up from the
    band rule.
    """
    w = np.asarray(energy_ev, dtype=float)
    lo, hi = w.min(), w.max()
    out = []
    n_free = n_entries
    if conductor:
        g = lo
        if eps is not None:
            e0 = np.asarray(eps)[np.argmin(w)]
            if e0.real < 1 and e0.imag > 0:
                g = lo * e0.imag / (1 - e0.real)
        out.append(complex(-min(max(g, 1e-3 * lo), hi), 0.0))
        n_free -= 1
    if method == "aaa" and eps is not None and n_free > 0:
        from scipy.interpolate import AAA

        s = np.concatenate([-1j * w, 1j * w])
        f = np.concatenate([np.asarray(eps), np.conj(eps)])
        with warnings.catch_warnings():  # the term cap is deliberate: only starting poles
            warnings.filterwarnings("ignore", "AAA failed to converge", RuntimeWarning)
            r = AAA(s, f, max_terms=min(2 * n_free + 1, 60))
        p, res = r.poles(), r.residues()
        keep = (p.imag > 0) & (p.real < 0)
        order = np.argsort(-np.abs(res[keep]))
        for a in p[keep][order][:n_free]:
            out.append(complex(a.real, a.imag))
        n_free = n_entries - len(out)
    if n_free > 0:
        beta = np.geomspace(lo, hi, n_free) if n_free > 1 else np.array([np.sqrt(lo * hi)])
        out += list(-beta / 100 + 1j * beta)
    return np.array(out, dtype=complex)


#: Where :func:`poles_plus_pair` may put the new pair.
ADDED_PAIR_SITES = ("residual", "above", "below")


def poles_plus_pair(energy_ev, eps, model, weight1, weight2, site: str = "residual") -> np.ndarray:
    """Converged poles of ``model`` plus one new complex pair: the pole-adding start.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV] of the data, increasing.
    eps : array_like of complex
        Permittivity samples.
    model : PolePairModel
        Fit of the previous (smaller) order; its poles [eV] are kept as they are.
    weight1, weight2 : array_like
        Weights (1/sigma) of the eps1 and eps2 residuals.
    site : {"residual", "above", "below"}
        ``"residual"``: the pair sits at the energy beta where the weighted squared residual of
        ``model``, averaged over a running window of ~2 % of the points (at least 5), is
        largest. ``"above"``: beta = 5 x the highest energy (an oscillator above the window,
        seen inside it only as a slowly varying background). ``"below"``: beta = 0.3 x the
        lowest energy (an oscillator below the window).

    Returns
    -------
    numpy.ndarray of complex
        Starting poles [eV], one per entry: those of ``model`` then a = -beta/10 + i beta.

    Notes
    -----
    Vector fitting relocates poles by a Sanathanan-Koerner iteration [1]_ and converges to a
    local fixed point that depends on the start. Starting poles spread over the data band
    ([4]_, Gustavsen & Semlyen's recommendation) suit resonances inside the band, but a strong
    oscillator far outside it (gold's 13.3 eV interband term for a 0.5-6 eV window) is then
    approximated by two real poles, a fixed point of much higher chi2. Growing the order from
    the previous converged poles plus one pair keeps what was already found and gives the new
    pair a chance to settle at the largest remaining misfit or outside the window; the order
    search keeps whichever of these and the band start fits best. The damping beta/10 (wider
    than the band rule's beta/100) lets the pair move to a broad feature. Growing a rational
    model one pole pair at a time from the previous fit is common practice in rational
    approximation (cf. the greedy support-point choice of AAA [3]_); the sites are our choice.
    """
    w = np.asarray(energy_ev, dtype=float)
    if site == "residual":
        f = np.asarray(eps, dtype=complex)
        em = model.eps(w)
        r = ((em.real - f.real) * np.asarray(weight1, float)) ** 2 + (
            (em.imag - f.imag) * np.asarray(weight2, float)
        ) ** 2
        k = max(5, w.size // 50)
        smooth = np.convolve(r, np.ones(k) / k, mode="same")
        beta = float(w[np.argmax(smooth)])
    elif site == "above":
        beta = 5.0 * float(w.max())
    elif site == "below":
        beta = 0.3 * float(w.min())
    else:
        raise ValueError(f"site must be one of {ADDED_PAIR_SITES}")
    return np.append(np.asarray(model.poles, dtype=complex), complex(-beta / 10, beta))


def broaden_above_band(energy_ev, eps, model, weight1, weight2, ratio: float = 10.0):
    """Refit ``model`` with its pairs above the data band given damping >= beta/ratio.

    Parameters
    ----------
    energy_ev, eps : array_like
        Data [eV] and permittivity samples the model was fitted to.
    model : PolePairModel
        Fitted model.
    weight1, weight2 : array_like
        Weights (1/sigma) of the eps1 and eps2 residuals.
    ratio : float
        Pairs a = -alpha + i beta with beta above the highest energy and alpha < beta/ratio get
        alpha = beta/ratio.

    Returns
    -------
    PolePairModel or None
        The model with those poles widened and eps_inf, residues re-solved by linear least
        squares with the poles fixed [1]_; None when no pair needed widening.

    Notes
    -----
    A pair above the window is seen inside it only as a smooth background, so the data barely
    fix its damping, and vector fitting often leaves it very sharp (gold, 0.5-6 eV: alpha
    ~0.02-0.2 eV at beta ~13 eV, where Rakic's oscillator has Gamma/2 = 1.1 eV). A sharp pair
    with the residue the in-band data ask for has eps2 < 0 just above it, and enforcing
    passivity with the poles fixed then costs a good part of the fit. Widening it to
    alpha = beta/10 (Gamma/w0 = 0.2, that of a broad interband oscillator such as gold's
    Gamma/w0 = 0.17, Rakic 1998) and re-solving the residues barely changes the in-band
    misfit (measured: chi2/dof 0.974 -> 0.99) and usually gives a passive model. Our choice;
    the order search keeps whichever of the sharp and widened fits passes.
    """
    p = np.array(model.poles, dtype=complex)
    w = np.asarray(energy_ev, dtype=float)
    sharp = (p.imag > w.max()) & (-p.real < p.imag / ratio)
    if not np.any(sharp):
        return None
    p[sharp] = -p[sharp].imag / ratio + 1j * p[sharp].imag
    cond = model.conductor_residue is not None
    return _solve_residues(p, cond, w, np.asarray(eps, complex), weight1, weight2)


def _real_state_space(poles):
    """A, b of sigma(s) - d~ = c~ (sI - A)^-1 b matching the columns of design_matrix."""
    n = sum(2 if a.imag != 0 else 1 for a in poles)
    amat = np.zeros((n, n))
    b = np.zeros(n)
    k = 0
    for a in poles:
        if a.imag != 0:
            amat[k : k + 2, k : k + 2] = [[a.real, a.imag], [-a.imag, a.real]]
            b[k] = 2.0
            k += 2
        else:
            amat[k, k] = a.real
            b[k] = 2.0
            k += 1
    return amat, b


def _split_poles(ev: np.ndarray) -> np.ndarray:
    """Stable representatives (Im >= 0) of eigenvalues; unstable ones flipped to Re < 0."""
    ev = np.where(ev.real > 0, -np.conj(ev), ev)
    scale = np.abs(ev) + 1e-300
    real = np.abs(ev.imag) <= 1e-10 * scale
    out = list(ev[real].real.astype(complex))
    out += list(ev[~real & (ev.imag > 0)])
    a = np.array(out, dtype=complex)
    a = np.where(a.real == 0, a - 1e-9 * np.abs(a), a)
    return a[np.argsort(np.abs(a))]


def floor_damping(poles, energy_ev) -> np.ndarray:
    """Poles with damping -Re a raised to at least MIN_DAMPING_SPACING x the local data spacing.

    The spacing is that of the data points next to the pole's resonance |Im a| (clipped to the
    data band); real poles keep -Re a >= that spacing at the lowest energy. Pole positions
    (Im a) are kept.
    """
    w = np.asarray(energy_ev, float)
    a = np.array(poles, dtype=complex)
    if a.size == 0 or w.size < 2:
        return a
    dw = np.diff(w)
    centre = np.clip(np.abs(a.imag), w[0], w[-1])
    k = np.clip(np.searchsorted(w, centre) - 1, 0, dw.size - 1)
    floor = MIN_DAMPING_SPACING * dw[k]
    alpha = np.maximum(-a.real, floor)
    return -alpha + 1j * a.imag


def _qr_solve(a, b):
    """Least squares by thin QR; returns (x, condition estimate max|R_ii| / min|R_ii|)."""
    q, r = np.linalg.qr(a)
    d = np.abs(np.diag(r))
    cnd = float(d.max() / max(d.min(), 1e-300))
    if cnd > 1e15:  # rank deficient: fall back to the SVD solution
        return np.linalg.lstsq(a, b, rcond=None)[0], cnd
    return solve_triangular(r, q.T @ b), cnd


def _solve_residues(poles, conductor, energy_ev, eps, w1, w2):
    x = design_matrix(poles, conductor, energy_ev)
    a = np.vstack([x.real * w1[:, None], x.imag * w2[:, None]])
    b = np.concatenate([eps.real * w1, eps.imag * w2])
    cn = np.linalg.norm(a, axis=0)
    cn[cn == 0] = 1.0
    theta = _qr_solve(a / cn, b)[0] / cn
    if theta[0] < _EPS_INF_FLOOR:  # one bound, convex: the optimum sits on it (active set)
        rest = _qr_solve(a[:, 1:] / cn[1:], b - _EPS_INF_FLOOR * a[:, 0])[0] / cn[1:]
        theta = np.concatenate([[_EPS_INF_FLOOR], rest])
    return model_from_vector(theta, poles, conductor)


def vector_fit(
    energy_ev,
    eps,
    poles,
    *,
    conductor: bool = False,
    weight1=None,
    weight2=None,
    n_iter: int = 20,
    pole_tol: float = 1e-7,
) -> VectorFitResult:
    """Relaxed vector fitting of complex eps(w) with fixed order.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV], > 0.
    eps : array_like of complex
        Permittivity samples (exp(-i w t)).
    poles : array_like of complex
        Starting poles [eV], one per entry (Im >= 0 representative; real for real poles),
        e.g. from :func:`starting_poles`.
    conductor : bool
        Include the fixed conductor pole at s = 0 (not relocated).
    weight1, weight2 : array_like, optional
        Weights (1/sigma) of the eps1 and eps2 residuals; default 1/|eps|.
    n_iter : int
        Largest number of pole relocations.
    pole_tol : float
        Stop when the largest relative pole change falls below this.

    Returns
    -------
    VectorFitResult

    Notes
    -----
    Model: eps(s) = d + sum_p [c_p/(s-a_p) + conj(c_p)/(s-conj(a_p))] (+ 2 c_0/s), s = -i w.
    Each iteration solves the linear least-squares problem (Sanathanan-Koerner form [1]_)
    W [X theta - eps * (d~ + X~ theta~)] = 0 with the relaxed non-triviality row
    Re sum_k (d~ + X~_k theta~) = N (Gustavsen 2006 [2]_), columns scaled to unit norm; the
    new poles are eig(A - b c~^T / d~) of the real state-space form of sigma (complex pairs
    as 2x2 blocks [[Re a, Im a], [-Im a, Re a]], b = (2, 0)). Unstable poles are reflected to
    Re a < 0. Samples are taken at s = -i w and, through eps(-w) = conj(eps(w)), at s = +i w:
    with the conjugate-symmetric real parameterisation both halves give the same real and
    imaginary rows, so the +w rows split into real and imaginary parts carry the full
    problem. The conductor pole at 0 is a numerator basis function only (known pole). The
    last step solves for residues and d with the poles fixed, keeping d = eps_inf > 0.
    """
    w = np.asarray(energy_ev, dtype=float)
    f = np.asarray(eps, dtype=complex)
    w1 = 1 / np.abs(f) if weight1 is None else np.asarray(weight1, float)
    w2 = 1 / np.abs(f) if weight2 is None else np.asarray(weight2, float)
    a_cur = np.asarray(poles, dtype=complex)
    n = w.size
    max_cond, change, it = 0.0, np.inf, 0
    for it in range(1, n_iter + 1):  # noqa: B007
        xn = design_matrix(a_cur, conductor, w)  # [1, basis..., (2/s)]
        xs = design_matrix(a_cur, False, w)  # sigma: [1 (d~), basis...]
        m1 = np.hstack([xn, -f[:, None] * xs])
        a = np.vstack([m1.real * w1[:, None], m1.imag * w2[:, None]])
        rhs = np.zeros(2 * n)
        # relaxation row on the sigma unknowns
        relax = np.zeros(m1.shape[1])
        relax[xn.shape[1] :] = np.sum(xs.real, axis=0)
        wt = np.linalg.norm(np.concatenate([f.real * w1, f.imag * w2])) / n
        a = np.vstack([a, wt * relax])
        rhs = np.append(rhs, wt * n)
        cn = np.linalg.norm(a, axis=0)
        cn[cn == 0] = 1.0
        sol, cnd = _qr_solve(a / cn, rhs)
        sol = sol / cn
        max_cond = max(max_cond, cnd)
        sig = sol[xn.shape[1] :]
        d_t = sig[0]
        if abs(d_t) < _RELAX_FLOOR:  # fix d~ and solve again without the relaxation row [2]
            d_t = _RELAX_FLOOR * (1.0 if d_t == 0 else np.sign(d_t))
            a2 = a[:-1].copy()
            rhs2 = -a2[:, xn.shape[1]] * cn[xn.shape[1]] * d_t
            a2 = np.delete(a2, xn.shape[1], axis=1)
            cn2 = np.delete(cn, xn.shape[1])
            sol2 = _qr_solve(a2, rhs2)[0] / cn2
            sig = np.concatenate([[d_t], sol2[xn.shape[1] :]])
        amat, b = _real_state_space(a_cur)
        new = _split_poles(np.linalg.eigvals(amat - np.outer(b, sig[1:]) / d_t))
        if new.size:
            old = a_cur[np.argsort(np.abs(a_cur))]
            change = (
                float(np.max(np.abs(new - old) / np.abs(old))) if new.size == old.size else np.inf
            )
        a_cur = new
        if change < pole_tol:
            break
    if max_cond > 1e14:
        warnings.warn(
            f"vector fitting system ill-conditioned (max condition {max_cond:.2g}); "
            "fewer pairs or a narrower band may help",
            RuntimeWarning,
            stacklevel=2,
        )
    model = _solve_residues(floor_damping(a_cur, w), conductor, w, f, w1, w2)
    return VectorFitResult(model, it, float(change), max_cond)


@dataclass(frozen=True)
class PolishResult:
    """Outcome of :func:`polish_poles`.

    Attributes
    ----------
    model : PolePairModel
        Polished model (stable poles, eps_inf > 0; passivity not enforced).
    rss_before, rss_after : float
        Weighted residual sum of squares sum((d eps1 w1)^2 + (d eps2 w2)^2) of the input
        model and of the polished one [dimensionless].
    evaluations : int
        Residual evaluations used by the nonlinear solver.
    """

    model: PolePairModel
    rss_before: float
    rss_after: float
    evaluations: int


def _weighted_system(poles, conductor, w, f, w1, w2):
    x = design_matrix(poles, conductor, w)
    a = np.vstack([x.real * w1[:, None], x.imag * w2[:, None]])
    b = np.concatenate([f.real * w1, f.imag * w2])
    return a, b


def _rss(model, w, f, w1, w2):
    e = model.eps(w)
    r = np.concatenate([(e.real - f.real) * w1, (e.imag - f.imag) * w2])
    return float(r @ r)


def _projected_solve(a, cond, w, f, w1, w2):
    """(Q, theta, residual) of the weighted linear fit with poles ``a`` fixed (thin QR).

    theta is the least-squares solution (columns scaled to unit norm); when its eps_inf falls
    below :data:`_EPS_INF_FLOOR` it is fixed there and the rest re-solved (an active set).
    The residual W X theta - W eps is projected off the columns of Q (guards round-off).
    """
    am, b = _weighted_system(a, cond, w, f, w1, w2)
    cn = np.linalg.norm(am, axis=0)
    cn[cn == 0] = 1.0
    q, r = np.linalg.qr(am / cn)
    theta = np.linalg.lstsq(r, q.T @ b, rcond=None)[0] / cn
    if theta[0] < _EPS_INF_FLOOR:  # keep eps_inf > 0: fix it at the floor (active set)
        q, r = np.linalg.qr(am[:, 1:] / cn[1:])
        rest = b - _EPS_INF_FLOOR * am[:, 0]
        sub = np.linalg.lstsq(r, q.T @ rest, rcond=None)[0] / cn[1:]
        theta = np.concatenate([[_EPS_INF_FLOOR], sub])
    res = am @ theta - b
    res = res - q @ (q.T @ res)  # exact projection, guards round-off
    return q, theta, res


def _projected_jacobian(a, pair, alpha, theta, q, s, w1, w2):
    """Kaufman's variable-projection Jacobian (I - Q Q^T) d(W X)/dp theta.

    Columns: d/du_j for every pole (a_j = -exp(u_j) [+ i beta_j]; ``alpha`` = exp(u_j) =
    -Re a_j), then d/dbeta_j for every pair, in pole order; ``s`` = -i w.
    """
    cols = []
    k = 1
    dbeta = []
    for j, aj in enumerate(a):
        if pair[j]:
            c = complex(theta[k], theta[k + 1])
            k += 2
            g1, g2 = 1 / (s - aj) ** 2, 1 / (s - np.conj(aj)) ** 2
            d_re = c * g1 + np.conj(c) * g2  # d eps / d Re a
            d_im = 1j * c * g1 - 1j * np.conj(c) * g2  # d eps / d Im a
            cols.append(-alpha[j] * d_re)
            dbeta.append(d_im)
        else:
            c = theta[k]
            k += 1
            cols.append(-alpha[j] * 2 * c / (s - aj) ** 2)
    d = np.stack(cols + dbeta, axis=-1)
    dm = np.vstack([d.real * w1[:, None], d.imag * w2[:, None]])
    return dm - q @ (q.T @ dm)


def polish_poles(
    energy_ev, eps, model, weight1, weight2, *, max_evaluations: int = 60, ftol: float = 1e-8
) -> PolishResult:
    """Nonlinear least-squares polish of the poles of ``model``, residues solved linearly inside.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV] of the data.
    eps : array_like of complex
        Permittivity samples the model was fitted to.
    model : PolePairModel
        Starting model (e.g. a vector fit) with stable poles; its conductor pole at s = 0, if
        any, stays fixed at 0 (only its residue is fitted).
    weight1, weight2 : array_like
        Weights (1/sigma) of the eps1 and eps2 residuals, as in :func:`vector_fit`.
    max_evaluations : int
        Largest number of residual evaluations of the nonlinear solver.
    ftol : float
        Relative decrease of the misfit below which the solver stops
        (``scipy.optimize.least_squares`` ftol).

    Returns
    -------
    PolishResult
        The input model itself when the polish does not lower the weighted misfit.

    Notes
    -----
    Minimises the weighted misfit of :func:`vector_fit`,
    ||W (X(a) theta - eps)||^2 over poles a and linear parameters theta = (eps_inf, residues,
    c_0), by variable projection (Golub & Pereyra [1]_): for fixed poles theta is the linear
    least-squares solution, so the misfit is a function of the poles alone,
    r(a) = W X(a) theta(a) - W eps = -(I - P(a)) W eps with P the orthogonal projector onto the
    columns of W X(a) (thin QR). Its Jacobian is taken in Kaufman's form [2]_,
    J_k = (I - P) d(W X)/da_k theta (the term that carries d theta/da_k through the
    pseudo-inverse is dropped; the Gauss-Newton steps stay descent directions), and the poles
    are moved by ``scipy.optimize.least_squares`` (trust-region reflective, bounds). Parameters:
    per pair a = -exp(u) + i beta, per real pole a = -exp(u), so Re a < 0 holds by
    construction; alpha = exp(u) and beta are kept in [1e-3 w_min, 1e3 w_max] (a pair stays a
    pair, a real pole does not merge with the conductor pole, nothing runs off to infinity).
    The conductor pole stays at 0. When the linear solution has eps_inf below
    :data:`EPS_INF_MIN`, eps_inf is fixed there and the projection is onto the remaining
    columns (an active set, so the bound eps_inf >= EPS_INF_MIN holds at every step). The
    result is re-solved as in :func:`vector_fit` and returned only when it lowers the
    weighted misfit; a model with a pole outside the box is returned unchanged.
    Vector fitting converges to a fixed point of its linearised problem, not to a minimum of
    the misfit, and with noisy data that fixed point can lie well above the minimum the same
    number of poles allows; the polish moves it to the nearby minimum.

    References
    ----------
    .. [1] G. H. Golub, V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least
       squares problems whose variables separate," SIAM J. Numer. Anal. 10(2), 413-432 (1973)
       (from memory); see docs/references.md [GolubPereyra1973].
    .. [2] L. Kaufman, "A variable projection method for solving separable nonlinear least
       squares problems," BIT 15, 49-57 (1975) (from memory); see docs/references.md
       [Kaufman1975].
    """
    from scipy.optimize import least_squares

    w = np.asarray(energy_ev, dtype=float)
    f = np.asarray(eps, dtype=complex)
    w1 = np.broadcast_to(np.asarray(weight1, float), w.shape)
    w2 = np.broadcast_to(np.asarray(weight2, float), w.shape)
    cond = model.conductor_residue is not None
    a0 = np.asarray(model.poles, dtype=complex)
    rss0 = _rss(model, w, f, w1, w2)
    if a0.size == 0 or not np.all(a0.real < 0):
        return PolishResult(model, rss0, rss0, 0)
    pair = a0.imag != 0
    lo, hi = 1e-3 * float(w.min()), 1e3 * float(w.max())  # box for alpha and beta [eV]
    s = -1j * w

    def poles_of(p):
        a = -np.exp(p[: a0.size]).astype(complex)
        a[pair] = a[pair] + 1j * p[a0.size :]
        return a

    npair = int(pair.sum())
    lb = np.concatenate([np.full(a0.size, np.log(lo)), np.full(npair, lo)])
    ub = np.concatenate([np.full(a0.size, np.log(hi)), np.full(npair, hi)])
    x0 = np.concatenate([np.log(-a0.real), a0.imag[pair]])
    if np.any(x0 < lb) or np.any(x0 > ub):  # a pole outside the box: leave the model as it is
        return PolishResult(model, rss0, rss0, 0)
    x0 = np.clip(x0, lb + 1e-9 * np.abs(lb), ub - 1e-9 * np.abs(ub))
    cache = {}

    def solve(p):  # one projection per pole set: fun and jac at the same p share it
        key = p.tobytes()
        if key not in cache:
            a = poles_of(p)
            cache.clear()
            cache[key] = (a, *_projected_solve(a, cond, w, f, w1, w2))
        return cache[key]

    def fun(p):
        return solve(p)[3]

    def jac(p):
        a, q, theta, _ = solve(p)
        return _projected_jacobian(a, pair, np.exp(p[: a0.size]), theta, q, s, w1, w2)

    sol = least_squares(
        fun,
        x0,
        jac=jac,
        bounds=(lb, ub),
        method="trf",
        x_scale="jac",
        max_nfev=max_evaluations,
        ftol=ftol,
    )
    if not np.all(np.isfinite(sol.x)):
        return PolishResult(model, rss0, rss0, int(sol.nfev))
    new = _solve_residues(floor_damping(poles_of(sol.x), w), cond, w, f, w1, w2)
    rss1 = _rss(new, w, f, w1, w2)
    if not (rss1 < rss0) or not new.stable:
        return PolishResult(model, rss0, rss0, int(sol.nfev))
    return PolishResult(new, rss0, rss1, int(sol.nfev))
