"""Relaxed vector fitting of eps(w) with complex-conjugate pairs, real poles and a conductor pole.

References
----------
.. [1] B. Gustavsen, A. Semlyen, "Rational approximation of frequency domain responses by
   vector fitting," IEEE Trans. Power Deliv. 14(3), 1052-1061 (1999).
.. [2] B. Gustavsen, "Improving the pole relocating properties of vector fitting," IEEE Trans.
   Power Deliv. 21(3), 1587-1592 (2006).
.. [3] Y. Nakatsukasa, O. Sete, L. N. Trefethen, "The AAA algorithm for rational
   approximation," SIAM J. Sci. Comput. 40(3), A1494-A1522 (2018).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_triangular
from scipy.optimize import lsq_linear

from .model import PolePairModel, design_matrix, model_from_vector

__all__ = ["VectorFitResult", "vector_fit", "starting_poles"]

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
    if theta[0] <= 0:  # eps_inf must stay positive: bound it
        lb = np.full(theta.size, -np.inf)
        lb[0] = 1e-3 * cn[0]
        theta = lsq_linear(a / cn, b, bounds=(lb, np.inf)).x / cn
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
    model = _solve_residues(a_cur, conductor, w, f, w1, w2)
    return VectorFitResult(model, it, float(change), max_cond)
