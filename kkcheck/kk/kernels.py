"""Closed-form Kramers–Kronig partners of piecewise-linear functions (dense, exact).

A tabulated eps2 is read as the piecewise-linear (PL) interpolant through its samples, zero
outside the window [x_0, x_M]. Its KK partner (insulator form, odd extension of eps2,
time dependence exp(-i w t))

    eps1(w) - eps_inf = (2/pi) P int_0^inf w' eps2(w') / (w'^2 - w^2) dw'

is a finite sum over the kinks and the two end steps of the PL function:

    eps1(w) - eps_inf = (1/pi) [ sum_j dm_j g(w, x_j) - y_0 (ln|w^2 - x_0^2| + 2)
                                 + y_M (ln|w^2 - x_M^2| + 2) ],
    g(x, y) = (x + y) ln|x + y| - (x - y) ln|x - y|,

where dm_j is the change of slope at node x_j (the slope is 0 outside the window). For a
triangle (hat) with nodes a < b < c this is Kuzmenko's basis partner
(1/pi) [g(w,a)/(b-a) - (c-a) g(w,b)/((b-a)(c-b)) + g(w,c)/(c-b)]. The end steps give the
only singularities (logarithmic, at w = x_0 and w = x_M); at interior nodes the partner is
finite because u ln|u| -> 0.

The reverse direction (eps1 -> eps2, even extension of eps1 - eps_inf) has

    eps2(w) = -(1/pi) P int_{-inf}^{inf} u_even(w') / (w' - w) dw',  u = eps1 - eps_inf,

whose PL closed form has the same structure with kink kernel (y + x) ln|y + x| - (y - x) ln|y - x|
(see :func:`pl_kk_matrix_eps1_to_eps2`).

References
----------
.. [1] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005) (triangle basis and its KK partner).
.. [2] K. Ohta, H. Ishida, Appl. Spectrosc. 42, 952 (1988) (why exact integration of the
   interpolant beats trapezoid rules near the pole).
"""

from __future__ import annotations

import numpy as np

__all__ = ["xlogabs", "pl_kk_matrix", "pl_kk_matrix_eps1_to_eps2"]


def xlogabs(u) -> np.ndarray:
    """u ln|u| with the limit 0 at u = 0."""
    u = np.asarray(u, dtype=float)
    a = np.abs(u)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = u * np.log(np.where(a > 0, a, 1.0))
    return out


def _logabs(u) -> np.ndarray:
    a = np.abs(np.asarray(u, dtype=float))
    with np.errstate(divide="ignore"):
        return np.log(a)


def _slope_matrix_apply(G: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Columns i of G @ D, where D maps node values to slope changes dm_j.

    col_i = (G_{i-1} - G_i)/h_{i-1} - (G_i - G_{i+1})/h_i  (terms absent at the ends).
    """
    h = np.diff(x)
    diff = (G[:, :-1] - G[:, 1:]) / h  # (G_j - G_{j+1}) / h_j, j = 0..M-1
    out = np.zeros_like(G)
    out[:, 1:] += diff
    out[:, :-1] -= diff
    return out


def pl_kk_matrix(nodes, omega) -> np.ndarray:
    """Matrix A with eps1(omega) - eps_inf = A @ eps2(nodes) for PL eps2 (zero outside).

    Parameters
    ----------
    nodes : array_like, shape (M+1,)
        Strictly increasing, > 0 [eV]; the PL eps2 is zero outside [nodes[0], nodes[-1]].
    omega : array_like, shape (K,)
        Evaluation energies [eV], > 0. At omega equal to an end node the result is
        infinite when the end value is non-zero (a true log singularity).

    Returns
    -------
    numpy.ndarray, shape (K, M+1)
        Column j is the KK partner of the hat function of node j (half hats at the ends,
        including their end steps).
    """
    x = np.asarray(nodes, dtype=float)
    w = np.asarray(omega, dtype=float)[:, None]
    G = xlogabs(w + x) - xlogabs(w - x)  # g(w, x_j)
    A = _slope_matrix_apply(G, x)
    with np.errstate(divide="ignore"):
        A[:, 0] -= _logabs(w[:, 0] ** 2 - x[0] ** 2) + 2.0
        A[:, -1] += _logabs(w[:, 0] ** 2 - x[-1] ** 2) + 2.0
    return A / np.pi


def pl_kk_matrix_eps1_to_eps2(nodes, omega) -> np.ndarray:
    """Matrix B with eps2(omega) = B @ (eps1 - eps_inf)(nodes) for PL data (zero outside).

    Even extension u(-w) = u(w); eps2(w) = -(1/pi) P int u_even(w')/(w' - w) dw'.
    Kinks contribute (1/pi) dm_j [(x_j + w) ln|x_j + w| - (x_j - w) ln|x_j - w|]; a step of
    height J at x_j contributes -(1/pi) J ln|(x_j - w)/(x_j + w)|. A finite window can never
    fix a constant offset of eps1 - eps_inf: such an offset maps to an eps2 that grows like
    ln at the window ends.
    """
    x = np.asarray(nodes, dtype=float)
    w = np.asarray(omega, dtype=float)[:, None]
    # Kink at x_j with unit slope change (ramp (x' - x_j)_+), even-mirrored:
    #   -(1/pi) [P int_0^inf r/(x' - w) - r/(x' + w)] = (1/pi) [(x_j + w) ln|x_j + w|
    #   - (x_j - w) ln|x_j - w|], the terms growing with the cut-off cancelling because the
    #   PL function has compact support (sum of slope changes and of steps both vanish).
    G = xlogabs(x + w) - xlogabs(x - w)
    A = _slope_matrix_apply(G, x)
    # end steps: +y_0 at x_0, -y_M at x_M
    with np.errstate(divide="ignore"):
        s0 = _logabs(x[0] - w[:, 0]) - _logabs(x[0] + w[:, 0])
        sM = _logabs(x[-1] - w[:, 0]) - _logabs(x[-1] + w[:, 0])
    A[:, 0] += s0
    A[:, -1] -= sM
    return A / np.pi
