"""Singly and multiply subtractive Kramers–Kronig (SSKK, MSKK) with user or automatic anchors.

A measured window [x_0, x_M] misses the absorption outside it, and the plain truncated KK
partner of eps2 is then off by a slowly varying function of w. Where eps1 is known at a few
anchor energies w_1 .. w_Q (for example from ellipsometry), the multiply subtractive form
removes most of that error.

References
----------
.. [1] R. K. Ahrenkiel, "Modified Kramers–Kronig analysis of optical spectra," J. Opt. Soc.
   Am. 61, 1651 (1971) (singly subtractive form; from memory); see docs/references.md
   [Ahrenkiel1971].
.. [2] K. F. Palmer, M. Z. Williams, B. A. Budde, "Multiply subtractive Kramers–Kronig
   analysis of optical data," Appl. Opt. 37, 2660 (1998) (details from memory); see
   docs/references.md [Palmer1998].
.. [3] "A unified framework for the numerical evaluation of the Q-subtractive Kramers–Kronig
   relations and application to the reconstruction of optical constants of quartz" (the
   implementation identity used here, confirmed from the abstract; authors, journal and year
   not recorded); see docs/references.md [QSubtractive].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .checks import check_axis, check_targets
from .transform import eps2_to_eps1

__all__ = [
    "SubtractiveResult",
    "subtractive_eps1",
    "subtractive_result",
    "choose_anchors",
    "subtractive_from_data",
]


@dataclass(frozen=True)
class SubtractiveResult:
    """Result of a subtractive KK reconstruction of eps1.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Where eps1 was evaluated [eV].
    eps1 : numpy.ndarray
        Subtractive KK estimate of eps1 (absolute, eps_inf included) at ``energy_ev``.
    plain_eps1_minus_inf : numpy.ndarray
        Plain truncated KK partner of eps2 (eps1 - eps_inf) at ``energy_ev``.
    anchors_ev : numpy.ndarray
        Anchor energies [eV], increasing.
    anchors_eps1 : numpy.ndarray
        eps1 values imposed at the anchors.
    anchor_corrections : numpy.ndarray
        e_j = eps1(w_j) - plain KK(w_j): what the correction polynomial interpolates
        (it absorbs eps_inf and the out-of-window absorption).
    """

    energy_ev: np.ndarray
    eps1: np.ndarray
    plain_eps1_minus_inf: np.ndarray
    anchors_ev: np.ndarray
    anchors_eps1: np.ndarray
    anchor_corrections: np.ndarray


def _lagrange_in_w2(anchors_ev: np.ndarray, values: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Lagrange polynomial in w^2 through (anchors_ev^2, values), evaluated at w."""
    p2 = anchors_ev**2
    w2 = w**2
    out = np.zeros_like(w2)
    for j in range(p2.size):
        basis = np.ones_like(w2)
        for k in range(p2.size):
            if k != j:
                basis *= (w2 - p2[k]) / (p2[j] - p2[k])
        out += values[j] * basis
    return out


def _check_anchors(x: np.ndarray, anchors_ev, anchors_eps1) -> tuple[np.ndarray, np.ndarray]:
    a = np.atleast_1d(np.asarray(anchors_ev, dtype=float))
    v = np.atleast_1d(np.asarray(anchors_eps1, dtype=float))
    if a.ndim != 1 or a.size == 0 or a.shape != v.shape:
        raise InputError("expected equal-length, non-empty lists of anchor energies and eps1")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(v))):
        raise InputError("expected finite anchor energies and anchor eps1 values")
    if np.any(a <= x[0]) or np.any(a >= x[-1]):
        raise InputError(
            f"expected anchors strictly inside the eps2 window ({x[0]:g}, {x[-1]:g}) eV"
        )
    order = np.argsort(a)
    a, v = a[order], v[order]
    if np.any(np.diff(a) <= 0):
        raise InputError("expected distinct anchor energies")
    return a, v


def subtractive_eps1(
    energy_ev,
    eps2,
    anchors_ev,
    anchors_eps1,
    at_ev=None,
    *,
    method="auto",
    dc_sigma_ev=0.0,
) -> np.ndarray:
    """eps1 by singly (one anchor) or multiply (Q anchors) subtractive KK.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV] of the eps2 data, strictly increasing, > 0.
    eps2 : array_like, shape (N,)
        Imaginary part of eps (piecewise-linear in between, zero outside the window).
    anchors_ev : array_like, shape (Q,)
        Anchor energies [eV], distinct, strictly inside the window.
    anchors_eps1 : array_like, shape (Q,)
        Known eps1 at the anchors (absolute values, eps_inf included).
    at_ev : array_like, optional
        Where to evaluate [eV] (default: ``energy_ev``).
    method : {"auto", "exact", "fast"}
        Passed to :func:`kkcheck.kk.transform.eps2_to_eps1`.
    dc_sigma_ev : float
        Conductor DC term sigma0/eps0 [eV], as in :func:`kkcheck.kk.transform.eps2_to_eps1`.

    Returns
    -------
    numpy.ndarray
        eps1 at ``at_ev`` (exactly ``anchors_eps1`` at the anchors).

    Notes
    -----
    With Pi(w) = prod_j (w^2 - w_j^2), the Q-subtractive relation (Palmer et al. 1998) is

        eps1(w) = sum_j eps1(w_j) prod_{k != j} (w^2 - w_k^2)/(w_j^2 - w_k^2)
                  + (2/pi) Pi(w) P int w' eps2(w') / [(w'^2 - w^2) prod_j (w'^2 - w_j^2)] dw'.

    It equals the plain truncated KK result T(w) plus the Lagrange polynomial in w^2 through
    the anchor errors e_j = eps1(w_j) - T(w_j) (the implementation identity of [3]_), which
    is what is computed: one transform, no extra poles at the anchors. Q = 1 is the singly
    subtractive form of Ahrenkiel (1971). eps_inf is absorbed by the polynomial. Far from the
    anchors a polynomial of high degree extrapolates badly; two to four anchors spread over
    the window are the usual choice. Equation numbers of the papers are not recorded.

    References
    ----------
    .. [1] R. K. Ahrenkiel, J. Opt. Soc. Am. 61, 1651 (1971) (from memory); see
       docs/references.md [Ahrenkiel1971].
    .. [2] K. F. Palmer, M. Z. Williams, B. A. Budde, Appl. Opt. 37, 2660 (1998) (details from
       memory); see docs/references.md [Palmer1998].
    .. [3] "A unified framework for the numerical evaluation of the Q-subtractive
       Kramers–Kronig relations and application to the reconstruction of optical constants of
       quartz" (authors, journal and year not recorded); see docs/references.md
       [QSubtractive].
    """
    return subtractive_result(
        energy_ev, eps2, anchors_ev, anchors_eps1, at_ev, method=method, dc_sigma_ev=dc_sigma_ev
    ).eps1


def subtractive_result(
    energy_ev,
    eps2,
    anchors_ev,
    anchors_eps1,
    at_ev=None,
    *,
    method="auto",
    dc_sigma_ev=0.0,
) -> SubtractiveResult:
    """As :func:`subtractive_eps1`, returning the full :class:`SubtractiveResult`."""
    x, y = check_axis(energy_ev, eps2, "eps2")
    w = check_targets(at_ev, x)
    a, v = _check_anchors(x, anchors_ev, anchors_eps1)
    plain = eps2_to_eps1(x, y, w, method=method, dc_sigma_ev=dc_sigma_ev)
    plain_at_anchors = eps2_to_eps1(x, y, a, method="exact", dc_sigma_ev=dc_sigma_ev)
    corr = v - plain_at_anchors
    eps1 = plain + _lagrange_in_w2(a, corr, w)
    return SubtractiveResult(
        energy_ev=w,
        eps1=eps1,
        plain_eps1_minus_inf=plain,
        anchors_ev=a,
        anchors_eps1=v,
        anchor_corrections=corr,
    )


def choose_anchors(energy_ev, n_anchors: int = 2) -> np.ndarray:
    """Indices of ``n_anchors`` data points spread over the window, for automatic anchors.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing.
    n_anchors : int
        Number of anchors Q (1 .. N - 2).

    Returns
    -------
    numpy.ndarray of int, shape (Q,)
        Indices into ``energy_ev``, increasing, never the first or last point.

    Notes
    -----
    The correction is a polynomial in w^2, so the anchors are the Chebyshev points of the
    first kind, cos((2j + 1) pi / (2Q)), mapped onto [x_0^2, x_M^2] (which keeps the
    Lagrange basis small over the whole window), each snapped to the nearest unused
    interior data point. For Q = 1 this is the point nearest the middle of the window in w^2.
    """
    x = np.asarray(energy_ev, dtype=float)
    q = int(n_anchors)
    if q < 1 or q > x.size - 2:
        raise InputError(f"expected between 1 and {x.size - 2} anchors")
    lo, hi = x[0] ** 2, x[-1] ** 2
    t = np.cos((2 * np.arange(q)[::-1] + 1) * np.pi / (2 * q))
    targets = np.sqrt(0.5 * (lo + hi) + 0.5 * (hi - lo) * t)
    free = np.ones(x.size, dtype=bool)
    free[0] = free[-1] = False
    chosen = []
    for e in targets:
        cand = np.flatnonzero(free)
        j = cand[np.argmin(np.abs(x[cand] - e))]
        chosen.append(j)
        free[j] = False
    return np.sort(np.asarray(chosen, dtype=int))


def subtractive_from_data(
    energy_ev,
    eps1,
    eps2,
    n_anchors: int = 2,
    at_ev=None,
    *,
    method="auto",
    dc_sigma_ev=0.0,
) -> SubtractiveResult:
    """MSKK with automatic anchors taken from the measured eps1 itself.

    The anchors are :func:`choose_anchors` points; their eps1 values are the data's own. The
    reconstruction agrees with eps1 at the anchors by construction, so those points carry
    no test information; hold one out for validation (project practice, no source; see
    docs/references.md [SubtractiveCheck]).
    """
    x, e1 = check_axis(energy_ev, eps1, "eps1")
    idx = choose_anchors(x, n_anchors)
    return subtractive_result(
        x, eps2, x[idx], e1[idx], at_ev, method=method, dc_sigma_ev=dc_sigma_ev
    )
