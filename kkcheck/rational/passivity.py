"""Passivity of a pole-residue model over the whole axis: certificate, dense check, enforcement.

Query / report / repair trio: :func:`certify_passivity` (exact test on 0 < w < inf through the
numerator polynomial of eps2), :func:`dense_passivity_check` (independent sampling on a log
grid), :func:`enforce_passivity` (residue perturbation by constrained least squares).

References
----------
.. [1] B. Gustavsen, A. Semlyen, "Enforcing passivity for admittance matrices approximated by
   rational functions," IEEE Trans. Power Syst. 16(1), 97-104 (2001) (volume and pages from
   memory; the method confirmed); see docs/references.md [GustavsenSemlyen2001].
.. [2] M. Han, R. W. Dutton, S. Fan, "Model dispersive media in finite-difference time-domain
   method with complex-conjugate pole-residue pairs," IEEE Microw. Wireless Compon. Lett. 16(3),
   119-121 (2006) (volume and pages from memory): the pole-pair form whose per-pair passivity
   condition :func:`pair_is_passive` tests (the condition is derived here, not from the paper);
   see docs/references.md [Han2006] and [PolePairAlgebra].
.. [3] C. L. Lawson, R. J. Hanson, *Solving Least Squares Problems*, Prentice-Hall (1974),
   ch. 23 (least distance programming through NNLS; from memory); see docs/references.md
   [LawsonHanson1974].
.. [4] S. Grivet-Talocia, "Passivity enforcement via perturbation of Hamiltonian matrices,"
   IEEE Trans. Circuits Syst. I 51(9), 1755-1769 (2004): the general (matrix) whole-axis test,
   whose scalar shortcut :func:`certify_passivity` uses; see docs/references.md
   [GrivetTalocia2004] and [ScalarPassivity] (the shortcut, derived in the project).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as npoly
from scipy.optimize import minimize_scalar, nnls

from .exact import decide_passive
from .model import (
    PolePairModel,
    design_matrix,
    loss_matrix,
    model_from_vector,
    parameter_vector,
)
from .vfit import EPS_INF_MIN

__all__ = [
    "PassivityCertificate",
    "DenseCheck",
    "EnforcementRecord",
    "certify_passivity",
    "dense_passivity_check",
    "enforce_passivity",
    "pair_is_passive",
    "ROUNDOFF_RTOL",
]

#: Relative tolerance of the certificate: a value of eps2 (or a polynomial coefficient) whose
#: magnitude is below this fraction of the sum of magnitudes of the individual contributions
#: is treated as zero (round-off of the sum), not as a violation.
ROUNDOFF_RTOL = 1e-10
#: First relative margin of the enforcement's constraints (grown x100 per failed solve).
_MARGIN_START = 1e-13


@dataclass(frozen=True)
class PassivityCertificate:
    """Result of the whole-axis passivity test.

    Attributes
    ----------
    certified : bool
        True when eps2(w) >= 0 for every 0 < w < inf (within the stated tolerance) and the
        model is stable.
    min_eps2 : float
        Smallest eps2 found [dimensionless] over the test points (roots of the numerator and
        points between them); refined by a bounded search inside each violation band.
    min_energy_ev : float
        Photon energy where ``min_eps2`` occurs [eV].
    crossing_energies_ev : tuple of float
        Energies [eV] where eps2 changes sign (edges of the violation bands).
    violation_bands_ev : tuple of (float, float)
        Bands [eV] where eps2 < 0; an upper edge of inf means the loss stays negative as w->inf.
    stable : bool
        Re a_p < 0 for every pole and eps_inf > 0.
    method : str
        Description of the test.
    tolerance : float
        Relative round-off tolerance used (:data:`ROUNDOFF_RTOL`).
    margin_rel : float
        Smallest eps2 / sum_p |eps2_p| over the test energies (float64; how far the model is
        from the passivity boundary; NaN when not run).
    exact_roots : int or None
        Distinct roots of the numerator P on (0, inf) counted exactly (Sturm sequence in
        integer arithmetic, :mod:`kkcheck.rational.exact`); None when the exact count was not
        needed (a violation found in float64, or an unstable pole).
    """

    certified: bool
    min_eps2: float
    min_energy_ev: float
    crossing_energies_ev: tuple
    violation_bands_ev: tuple
    stable: bool
    method: str
    tolerance: float
    margin_rel: float = float("nan")
    exact_roots: int | None = None


@dataclass(frozen=True)
class DenseCheck:
    """Independent sampled check of eps2 >= 0.

    Attributes
    ----------
    passive : bool
        True when no sampled eps2 is below -tol * sum_p |eps2_p|.
    min_eps2 : float
        Smallest sampled eps2 [dimensionless].
    min_energy_ev : float
        Where it occurs [eV].
    lo_ev, hi_ev : float
        Grid limits [eV].
    n_points : int
        Number of log-spaced samples.
    """

    passive: bool
    min_eps2: float
    min_energy_ev: float
    lo_ev: float
    hi_ev: float
    n_points: int


@dataclass(frozen=True)
class EnforcementRecord:
    """What passivity enforcement did and what it cost.

    Attributes
    ----------
    needed : bool
        False when the model was already certified passive (nothing changed).
    succeeded : bool
        True when the returned model is certified passive.
    iterations : int
        Constrained least-squares solves performed.
    rms_rel_before, rms_rel_after : float
        RMS relative error |eps_model - eps_data| / |eps_data| on the data, before and after.
    max_rel_before, max_rel_after : float
        Largest relative error on the data, before and after.
    n_constraints : int
        Number of linear inequality constraints in the last solve.
    """

    needed: bool
    succeeded: bool
    iterations: int
    rms_rel_before: float
    rms_rel_after: float
    max_rel_before: float
    max_rel_after: float
    n_constraints: int


# ---------------------------------------------------------------------------------------------
# numerator polynomial


def _scale_x(model: PolePairModel) -> float:
    mags = np.abs(model.poles[model.poles != 0]) ** 2
    return float(np.exp(np.mean(np.log(mags)))) if mags.size else 1.0


def _factors(model: PolePairModel, xs: float):
    """Per-entry (numerator-basis list, denominator) polynomials in u = w^2 / xs."""
    out = []
    for a in model.poles:
        alpha, beta = -a.real, a.imag
        if beta != 0:
            w02 = (alpha**2 + beta**2) / xs
            al2 = alpha**2 / xs
            den = np.array([w02**2, 4 * al2 - 2 * w02, 1.0])
            nums = [
                np.array([(4 * alpha**2 - 2 * (alpha**2 + beta**2)) / xs, 2.0]),
                np.array([-4 * alpha * beta / xs]),
            ]
        else:
            den = np.array([alpha**2 / xs, 1.0])
            nums = [np.array([2.0 / xs])]
        out.append((nums, den))
    if model.conductor_residue is not None:
        out.append(([np.array([2.0 / xs])], np.array([0.0, 1.0])))
    return out


def numerator_matrix(model: PolePairModel) -> tuple[np.ndarray, float]:
    """Coefficients of P(u) as a linear map of the residue parameters.

    Returns ``(M, xs)`` with P(u) = sum_k (M @ theta[1:])[k] u^k, u = w^2 / xs [xs in eV^2],
    such that eps2(w) = w P(u) / Q(u) with Q(u) = prod_p D_p(u) > 0 for u > 0 (stable poles).
    """
    xs = _scale_x(model)
    fac = _factors(model, xs)
    dens = [d for _, d in fac]
    deg = sum(d.size - 1 for d in dens) - 1
    cols = []
    for p, (nums, _) in enumerate(fac):
        rest = np.array([1.0])
        for q, d in enumerate(dens):
            if q != p:
                rest = npoly.polymul(rest, d)
        for nm in nums:
            col = np.zeros(max(deg + 1, 1))
            prod = npoly.polymul(nm, rest)
            col[: prod.size] = prod
            cols.append(col)
    return (np.stack(cols, axis=-1) if cols else np.zeros((1, 0))), xs


def pair_is_passive(pole: complex, residue: complex) -> bool:
    """Per-pair test: Re c >= 0 and Re c (al^2 - be^2) - 2 al be Im c >= 0 (a = -al + i be).

    Necessary and sufficient for one complex pair alone (a = -alpha + i beta, alpha > 0);
    sufficient, not necessary, for a sum of pairs. For a real pole it reduces to c >= 0.

    Notes
    -----
    Our c equals the residue of the engineering (exp(+j w t)) form at the same pole, since both
    conventions use the same function of s; the condition carries over unchanged. Derived here
    from the loss of one pair, eps2_p(w) = w [2 al b0 - b1 (w0^2 - w^2)] / [(w0^2 - w^2)^2 +
    4 al^2 w^2] with b1 = 2 Re c, b0 = 2 (al Re c - be Im c), w0^2 = al^2 + be^2: eps2_p >= 0
    for all w > 0 exactly when b1 >= 0 and 2 al b0 - b1 w0^2 >= 0 (no published source).

    References
    ----------
    .. [1] M. Han, R. W. Dutton, S. Fan, "Model dispersive media in finite-difference
       time-domain method with complex-conjugate pole-residue pairs," IEEE Microw. Wireless
       Compon. Lett. 16(3), 119-121 (2006) (the pair form; volume and pages from memory); see
       docs/references.md [PolePairAlgebra] for the derivation.
    """
    alpha, beta = -pole.real, pole.imag
    cr, ci = residue.real, residue.imag
    if beta == 0:
        return cr >= 0
    return cr >= 0 and cr * (alpha**2 - beta**2) - 2 * alpha * beta * ci >= 0


def _trim_sign(coef: np.ndarray, mag: np.ndarray, from_top: bool) -> float:
    """Sign of the first coefficient (from the top or bottom) that is not round-off."""
    idx = range(coef.size - 1, -1, -1) if from_top else range(coef.size)
    scale = mag.max() if mag.size else 0.0
    for k in idx:
        if abs(coef[k]) > ROUNDOFF_RTOL * max(mag[k], 1e-300) and abs(coef[k]) > 1e-300 * scale:
            return float(np.sign(coef[k]))
    return 0.0


def _safety_points(model: PolePairModel) -> np.ndarray:
    """Extra test energies [eV]: each pole's resonance at 0, ±1/2, ±1, ... ±8 half-widths, and a
    200-point log grid from min|a|/100 to max|a| x 100.

    The roots of P come from a monomial-basis polynomial; with a sharp pole among broad ones
    their computed positions can miss a narrow negative band by more than its width. eps2 of a
    pole pair varies on the scale of its half-width |Re a| around w = |Im a|, so sampling there
    catches what the roots miss (measured: a -3.5e-4 band at 13.8-14.05 eV next to a pole at
    12.3 eV that the roots alone passed).
    """
    a = model.poles
    a = a[np.abs(a) > 0]
    if a.size == 0:
        return np.zeros(0)
    steps = np.arange(-8.0, 8.5, 0.5)
    local = (np.abs(a.imag)[:, None] + np.abs(a.real)[:, None] * steps[None, :]).ravel()
    mag = np.abs(a)
    grid = np.geomspace(mag.min() / 100, mag.max() * 100, 200)
    out = np.concatenate([local, grid])
    return out[out > 0]


def certify_passivity(model: PolePairModel) -> PassivityCertificate:
    """Certify eps2(w) >= 0 for all 0 < w < inf, not only at samples.

    Parameters
    ----------
    model : PolePairModel
        Model to test; a pole at 0 is allowed only as the conductor term.

    Returns
    -------
    PassivityCertificate

    Notes
    -----
    For a real rational model eps2(w) = w P(w^2)/Q(w^2) with Q = prod_p D_p > 0 on w > 0 when
    all poles are stable (the scalar shortcut of the Hamiltonian test [1]_, derived here: no
    eigenvalue problem is needed for one response). P is assembled from the per-entry
    closed forms (see :class:`~kkcheck.rational.model.PolePairModel`) in u = w^2/xs, with xs the
    geometric mean of |a_p|^2 for conditioning. P changes sign only at its positive real roots,
    so eps2 is evaluated (directly from the partial fractions, not from P) at the real parts of
    every root with positive real part and at geometric midpoints between consecutive ones, and
    as a safety net around every pole's resonance and on a log grid (:func:`_safety_points`,
    because computed roots of a monomial-basis P can be off for sharp poles); the
    signs of the lowest and highest non-negligible coefficients of P give the limits w -> 0 and
    w -> inf. Including near-real complex roots catches a touching pair that round-off turned
    complex. A value below -tol * sum_p |eps2_p(w)| (tol = :data:`ROUNDOFF_RTOL`) is a
    violation; the same relative tolerance decides which coefficients of P are round-off.

    References
    ----------
    .. [1] S. Grivet-Talocia, "Passivity enforcement via perturbation of Hamiltonian matrices,"
       IEEE Trans. Circuits Syst. I 51(9), 1755-1769 (2004) (the matrix test this shortcut
       replaces; the shortcut itself has no published source: docs/references.md
       [ScalarPassivity]).
    """
    stable = bool(np.all(model.poles.real < 0) and model.eps_inf > 0)
    method = (
        "exact: Sturm count of the roots of the eps2 numerator P(w^2) on w > 0 in integer "
        "arithmetic (eps2 = w P(w^2)/Q(w^2), Q > 0); bands located in float64 from the roots "
        f"of P and each pole's resonance (tolerance {ROUNDOFF_RTOL:g} relative)"
    )
    if not np.all(model.poles.real < 0):
        nan = float("nan")
        return PassivityCertificate(
            False, nan, nan, (), (), False, method + "; not run: unstable pole", ROUNDOFF_RTOL
        )
    theta = parameter_vector(model)[1:]
    mat, xs = numerator_matrix(model)
    coef = mat @ theta
    mag = np.abs(mat) @ np.abs(theta)
    low_sign = _trim_sign(coef, mag, from_top=False)
    high_sign = _trim_sign(coef, mag, from_top=True)
    pts, test_w = _test_energies(model, coef, mag, xs)
    terms = model.eps2_terms(test_w)
    val = terms.sum(axis=-1)
    tol = ROUNDOFF_RTOL * np.abs(terms).sum(axis=-1)
    bands = _negative_bands(test_w, val < -tol, low_sign, high_sign)
    min_val, min_w, crossings = _refine_bands(model, bands, test_w, val, pts)
    margin = float(np.min(val / np.maximum(np.abs(terms).sum(axis=-1), 1e-300)))
    roots = None
    passive = not bands
    if passive:  # float64 found no violation: decide exactly (it may still be wrong)
        exact = decide_passive(model)
        roots, passive = exact.positive_roots, exact.passive
        if not passive:
            bands = [_exact_band(model, pts, test_w)]
            min_val = min(min_val, 0.0)
    return PassivityCertificate(
        stable and passive,
        min_val,
        min_w,
        tuple(sorted(set(crossings))),
        tuple(bands),
        stable,
        method,
        ROUNDOFF_RTOL,
        margin,
        roots,
    )


def _exact_band(model: PolePairModel, pts, test_w) -> tuple:
    """A band around the real roots of P when only the exact count saw them (sub-ulp bands).

    The float64 roots of P nearest to a sign change are the best location at hand; without
    any, the whole tested range is reported.
    """
    if pts.size:
        return (float(pts.min()), float(pts.max()))
    return (float(test_w[0]), float(test_w[-1]))


def _test_energies(model: PolePairModel, coef, mag, xs: float):
    """(positive real roots of P as energies [eV], all test energies [eV], sorted).

    The test energies are those roots, the geometric midpoints between them, a decade beyond
    either end, and :func:`_safety_points`; without a positive root, sqrt(xs) stands in.
    """
    nz = np.nonzero(np.abs(coef) > ROUNDOFF_RTOL * np.maximum(mag, 1e-300))[0]
    pts = np.zeros(0)
    if nz.size > 1:
        c = coef[nz[0] : nz[-1] + 1]
        r = npoly.polyroots(c) if c.size > 1 else np.zeros(0)
        r = r[(r.real > 0) & np.isfinite(r)]
        pts = np.unique(np.sqrt(r.real * xs))
    if pts.size == 0:
        pts = np.array([np.sqrt(xs)])
    mids = np.sqrt(pts[1:] * pts[:-1])
    ends = np.array([pts[0] / 10, pts[-1] * 10])
    return pts, np.unique(np.concatenate([pts, mids, ends, _safety_points(model)]))


def _negative_bands(test_w, bad, low_sign: float, high_sign: float) -> list:
    """Bands (lo, hi) [eV] of consecutive negative test points; 0 / inf at open ends.

    The limits w -> 0 and w -> inf are negative when the lowest / highest non-negligible
    coefficient of P is (``low_sign`` / ``high_sign`` < 0).
    """
    bands = []
    neg = list(bad)
    if low_sign < 0:
        neg[0] = True
    if high_sign < 0:
        neg[-1] = True
    start = None
    for i, flag in enumerate(neg):
        if flag and start is None:
            start = 0.0 if i == 0 and low_sign < 0 else test_w[i - 1] if i > 0 else 0.0
            start = float(start)
        if not flag and start is not None:
            bands.append((start, float(test_w[i])))
            start = None
    if start is not None:
        bands.append((start, float("inf")))
    return bands


def _refine_bands(model: PolePairModel, bands, test_w, val, pts):
    """(min eps2, its energy [eV], crossing energies [eV]) after a search inside each band.

    The minimum of eps2 over the test points is refined by a bounded search in log energy
    inside each band; each finite band edge is moved to the nearest root of P.
    """
    crossings = []
    min_val, min_w = float(val.min()), float(test_w[int(np.argmin(val))])
    for lo, hi in bands:
        lo_r = lo if lo > 0 else test_w[0] / 1e3
        hi_r = hi if np.isfinite(hi) else test_w[-1] * 1e3
        res = minimize_scalar(
            lambda t: model.eps2(np.exp(t)),
            bounds=(np.log(lo_r), np.log(hi_r)),
            method="bounded",
            options={"xatol": 1e-10},
        )
        if res.fun < min_val:
            min_val, min_w = float(res.fun), float(np.exp(res.x))
        for edge in (lo, hi):
            if 0 < edge < np.inf:
                crossings.append(float(pts[np.argmin(np.abs(np.log(pts / edge)))]))
    return min_val, min_w, crossings


def dense_passivity_check(
    model: PolePairModel, lo_ev: float = 1e-4, hi_ev: float = 1e4, n_points: int = 20001
) -> DenseCheck:
    """Sample eps2 on a log grid from ``lo_ev`` to ``hi_ev`` [eV]; independent of the certificate.

    Notes
    -----
    A sample counts as negative when eps2 < -tol * sum_p |eps2_p| with tol =
    :data:`ROUNDOFF_RTOL`. Sampling can miss a band narrower than the grid step; the
    certificate cannot.
    """
    w = np.geomspace(lo_ev, hi_ev, n_points)
    terms = model.eps2_terms(w)
    val = terms.sum(axis=-1)
    bad = val < -ROUNDOFF_RTOL * np.abs(terms).sum(axis=-1)
    i = int(np.argmin(val))
    return DenseCheck(not bool(bad.any()), float(val[i]), float(w[i]), lo_ev, hi_ev, n_points)


# ---------------------------------------------------------------------------------------------
# enforcement


def _rel_errors(model, energy_ev, eps):
    r = np.abs(model.eps(energy_ev) - eps) / np.abs(eps)
    return float(np.sqrt(np.mean(r**2))), float(r.max())


def _ldp(g: np.ndarray, h: np.ndarray) -> np.ndarray | None:
    """Least-distance programming: min ||z|| s.t. g z >= h (Lawson & Hanson ch. 23, via NNLS)."""
    m, n = g.shape
    e = np.vstack([g.T, h[None, :]])
    f = np.zeros(n + 1)
    f[-1] = 1.0
    u, _ = nnls(e, f, maxiter=50 * (m + n + 1))
    r = e @ u - f
    if abs(r[-1]) < 1e-12:
        return None
    return -r[:n] / r[-1]


def enforce_passivity(
    model: PolePairModel, energy_ev, eps, weight1=None, weight2=None, *, max_iter: int = 20
) -> tuple[PolePairModel, EnforcementRecord]:
    """Make ``model`` passive by perturbing its residues (and eps_inf), poles fixed.

    Parameters
    ----------
    model : PolePairModel
        Stable model to repair.
    energy_ev, eps : array_like
        Data the model was fitted to [eV], complex eps; the perturbation minimises the weighted
        misfit to these data.
    weight1, weight2 : array_like, optional
        Weights of the eps1 and eps2 residuals (1/sigma); default 1/|eps| (relative error).
    max_iter : int
        Largest number of constrained solves.

    Returns
    -------
    model : PolePairModel
        The repaired model (the input itself when it was already certified).
    record : EnforcementRecord

    Notes
    -----
    With the poles fixed, eps is linear in theta = (eps_inf, Re c_p, Im c_p, c_0). The method
    solves  min || W (X theta - eps) ||^2  subject to  eps2(w_k) = L_k theta >= m_k  on a log grid
    from 1e-4x the lowest to 1e4x the highest data energy plus every root and violation minimum
    of the current model, and subject to non-negative lowest and highest coefficients of the
    eps2 numerator P (limits w -> 0 and w -> inf). This is the residue-perturbation idea of
    Gustavsen & Semlyen [1]_ with the data misfit as objective. The QR factor of the weighted
    design reduces it to least-distance programming, solved exactly by NNLS [3]_. Small
    positive margins m_k (from 1e-13 of the summed term magnitudes, x100 per failed solve: a
    boundary case such as a Drude term, whose top coefficient of P cancels exactly, then costs
    ~1e-13, not 1e-6, of the fit) keep eps2 off zero between grid
    points; the grid grows by the new violation points until :func:`certify_passivity` passes.
    """
    energy_ev = np.asarray(energy_ev, dtype=float)
    eps = np.asarray(eps, dtype=complex)
    w1 = 1 / np.abs(eps) if weight1 is None else np.asarray(weight1, float)
    w2 = 1 / np.abs(eps) if weight2 is None else np.asarray(weight2, float)
    rb, mb = _rel_errors(model, energy_ev, eps)
    cert = certify_passivity(model)
    if cert.certified:
        return model, EnforcementRecord(False, True, 0, rb, rb, mb, mb, 0)
    if not np.all(model.poles.real < 0):
        raise ValueError("enforce_passivity needs a stable model")
    poles, cond = model.poles, model.conductor_residue is not None
    x = design_matrix(poles, cond, energy_ev)
    a = np.vstack([x.real * w1[:, None], x.imag * w2[:, None]])
    b = np.concatenate([eps.real * w1, eps.imag * w2])
    colnorm = np.linalg.norm(a, axis=0)
    colnorm[colnorm == 0] = 1.0
    q, r = np.linalg.qr(a / colnorm)
    y0 = q.T @ b
    rinv = np.linalg.solve(r, np.eye(r.shape[0])) / colnorm[:, None]  # theta = rinv @ y
    mat, _ = numerator_matrix(model)
    lo, hi = energy_ev.min(), energy_ev.max()
    grid = np.geomspace(lo * 1e-4, hi * 1e4, 600)
    extra = list(cert.crossing_energies_ev) + [cert.min_energy_ev]
    cur, theta_cur = model, parameter_vector(model)
    n_con, margin = 0, _MARGIN_START
    for it in range(1, max_iter + 1):
        pts = np.unique(np.concatenate([grid, np.asarray(extra, float)]))
        pts = pts[np.isfinite(pts) & (pts > 0)]
        lm = loss_matrix(poles, cond, pts)
        gm = np.hstack([np.zeros((pts.size, 1)), lm])
        hm = margin * (np.abs(lm) @ np.abs(theta_cur[1:]))
        # asymptotic rows: lowest / highest coefficient of P that the model can move
        nzr = np.nonzero(np.abs(mat).sum(axis=1) > 0)[0]
        rows = [mat[nzr[0]], mat[nzr[-1]]]
        ga = np.hstack([np.zeros((2, 1)), np.array(rows)])
        ha = margin * (np.abs(np.array(rows)) @ np.abs(theta_cur[1:]))
        gi = np.zeros((1, gm.shape[1]))
        gi[0, 0] = 1.0  # eps_inf >= EPS_INF_MIN (vfit.EPS_INF_MIN: the physical bound)
        g = np.vstack([gm, ga, gi])
        h = np.concatenate([hm, ha, [EPS_INF_MIN]])
        rn = np.linalg.norm(g, axis=1)
        rn[rn == 0] = 1.0
        g, h = g / rn[:, None], h / rn
        gy = g @ rinv
        z = _ldp(gy, h - gy @ y0)
        if z is None:
            if margin > 0:
                margin = 0.0
                continue
            break
        theta_cur = rinv @ (y0 + z)
        theta_cur[0] = max(theta_cur[0], EPS_INF_MIN)  # round-off of the bound; eps2 unchanged
        cur = model_from_vector(theta_cur, poles, cond)
        n_con = g.shape[0]
        cert = certify_passivity(cur)
        if cert.certified:
            ra, ma = _rel_errors(cur, energy_ev, eps)
            return cur, EnforcementRecord(True, True, it, rb, ra, mb, ma, n_con)
        extra += list(cert.crossing_energies_ev) + [cert.min_energy_ev]
        margin = max(margin * 100, _MARGIN_START)
    ra, ma = _rel_errors(cur, energy_ev, eps)
    warnings.warn(
        f"passivity enforcement did not reach a certified model in {max_iter} solves "
        f"(min eps2 {cert.min_eps2:.3g} at {cert.min_energy_ev:.4g} eV)",
        RuntimeWarning,
        stacklevel=2,
    )
    return cur, EnforcementRecord(True, False, max_iter, rb, ra, mb, ma, n_con)
