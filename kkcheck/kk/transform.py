"""Kramers–Kronig transforms of tabulated data on nonuniform grids (exact and fast paths).

Tabulated data are read as their piecewise-linear (PL) interpolant, zero outside the measured
window [x_0, x_M]; the transforms return the exact KK partner of that PL function (the
closed form of :mod:`kkcheck.kk.kernels`), either as a dense sum evaluated in bounded-memory
chunks (``method="exact"``) or by the O(N log N) splitting of :mod:`kkcheck.kk.fastkk`
(``method="fast"``; exact Toeplitz/Hankel FFTs when the nodes are equally spaced and the
targets are the nodes). ``method="auto"`` takes whichever path the calibrated cost model
:func:`path_costs` predicts faster (the fast path from ~700 points on); there is no dense
fallback for large N.

Conventions: photon energy [eV], time dependence exp(-i w t), eps = eps1 + i eps2, eps2 >= 0.

References
----------
.. [1] R. de L. Kronig, "On the theory of dispersion of X-rays," J. Opt. Soc. Am. 12, 547
   (1926); H. A. Kramers, Atti Congr. Int. Fisici Como 2, 545 (1927).
.. [2] F. Wooten, *Optical Properties of Solids*, Academic Press (1972), App. G (conductors:
   the DC term sigma0/(eps0 w) in eps2).
.. [3] A. B. Kuzmenko, "Kramers–Kronig constrained variational analysis of optical spectra,"
   Rev. Sci. Instrum. 76, 083108 (2005) (closed-form partner of PL/triangle functions).
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InputError
from .checks import check_axis, check_targets
from .fastkk import is_uniform, pl_kink_sum_fast, pl_kink_sum_uniform

__all__ = [
    "DENSE_S_PER_PAIR",
    "FAST_S_FIXED",
    "FAST_S_PER_POINT",
    "path_costs",
    "eps2_to_eps1",
    "eps1_to_eps2",
    "k_to_n_minus_1",
    "n_minus_1_to_k",
    "phase_of_log_amplitude",
    "dc_sigma_from_low_energy",
]

#: Cost model of ``method="auto"`` (:func:`path_costs`), measured once with
#: ``benchmarks/kk_bench.py`` (t_dense, t_fast at 1e3-1e5 points) on 2 cores, one BLAS
#: thread: seconds per (target, node) pair of the dense closed form ...
DENSE_S_PER_PAIR = 1.5e-8
#: ... fixed seconds of one fast call (planning, small FFTs, Python overhead) ...
FAST_S_FIXED = 5.0e-3
#: ... and seconds per source or target of the fast path (grids, near field, FFTs).
FAST_S_PER_POINT = 1.5e-6
#: Elements of one dense (targets x nodes) block: 2 MB per float64 temporary (cache-sized,
#: which measured 2x faster than 16 MB blocks); peak memory stays ~10 MB.
_CHUNK_ELEMENTS = 262_144


_TINY = 1e-300  # |u| + _TINY: u ln|u| -> 0 at u = 0 without a 0 * inf


def _slope_changes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """dm_j: change of slope of the PL function at node j (slope 0 outside the window)."""
    m = np.diff(y) / np.diff(x)
    return np.diff(np.concatenate(([0.0], m, [0.0])))


def _kink_sum_exact(x, c, w, sign) -> np.ndarray:
    """sum_j c_j [phi(w + x_j) + sign phi(w - x_j)], dense, in blocks of bounded size."""
    out = np.empty(w.size)
    step = max(1, _CHUNK_ELEMENTS // x.size)
    for s in range(0, w.size, step):
        ww = w[s : s + step, None]
        u = ww + x
        blk = u * np.log(np.abs(u) + _TINY)  # u ln|u|, exactly 0 at u = 0
        u = ww - x
        blk += sign * (u * np.log(np.abs(u) + _TINY))
        out[s : s + step] = blk @ c
    return out


def path_costs(n_nodes: int, n_targets: int) -> tuple[float, float]:
    """Predicted seconds of the dense and the fast path for N nodes and K targets.

    Parameters
    ----------
    n_nodes, n_targets : int
        N data points and K targets.

    Returns
    -------
    (float, float)
        (dense, fast) in seconds, from the cost model calibrated once on 2 cores (numpy/scipy,
        one BLAS thread): dense = :data:`DENSE_S_PER_PAIR` N K; fast = :data:`FAST_S_FIXED` +
        :data:`FAST_S_PER_POINT` (2 N + K) (2N: the sources are mirrored).
    """
    dense = DENSE_S_PER_PAIR * float(n_nodes) * float(n_targets)
    fast = FAST_S_FIXED + FAST_S_PER_POINT * (2.0 * n_nodes + n_targets)
    return dense, fast


def _use_fast(n_nodes: int, n_targets: int, method: str) -> bool:
    if method not in ("auto", "exact", "fast"):
        raise ValueError("method must be 'auto', 'exact' or 'fast'")
    if method != "auto":
        return method == "fast"
    dense, fast = path_costs(n_nodes, n_targets)
    return fast < dense


def _kink_sum(x, c, w, sign, method: str, *, at_nodes: bool = False) -> np.ndarray:
    """sum_j c_j [phi(w + x_j) + sign phi(w - x_j)] by the path the cost model prefers."""
    if not _use_fast(x.size, w.size, method):
        return _kink_sum_exact(x, c, w, sign)
    if at_nodes and is_uniform(x):
        return pl_kink_sum_uniform(x, c, sign)  # exact Toeplitz + Hankel FFTs
    return pl_kink_sum_fast(x, c, w, sign)


def _same(w: np.ndarray, x: np.ndarray) -> bool:
    return w.shape == x.shape and bool(np.array_equal(w, x))


def _log_abs(u) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(np.abs(u))


def _end_term(height: float, shape: np.ndarray) -> np.ndarray:
    """height * shape, exactly 0 for a zero end value (no 0 * inf at the window ends)."""
    if height == 0.0:
        return np.zeros_like(shape)
    return height * shape


def eps2_to_eps1(energy_ev, eps2, at_ev=None, *, method="auto", dc_sigma_ev=0.0) -> np.ndarray:
    """KK partner eps1 - eps_inf of piecewise-linear eps2 (zero outside the window).

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    eps2 : array_like, shape (N,)
        Imaginary part of eps at ``energy_ev`` (dimensionless). For a conductor this includes
        the DC term dc_sigma_ev / E.
    at_ev : array_like, optional
        Where to evaluate [eV] (default: ``energy_ev``).
    method : {"auto", "exact", "fast"}
        Dense closed form in bounded-memory blocks, the O(N log N) multilevel splitting
        (:func:`kkcheck.kk.fastkk.pl_kink_sum_fast`; measured agreement with the dense
        form 1e-12 to 3e-10 of max|result|, tested to 1e-9, for any window, many decades
        included), or the one :func:`path_costs` predicts faster.
    dc_sigma_ev : float
        sigma0/eps0 expressed in eV (wp^2/gamma for a Drude term) [eV]. When non-zero, eps2
        below the window is extrapolated as the DC term dc_sigma_ev/E (exact contribution
        added), instead of being taken as zero.

    Returns
    -------
    numpy.ndarray
        eps1 - eps_inf at ``at_ev``. At an end of the window the value is +-inf when eps2 is
        non-zero there (the end step of the PL function gives a true log singularity), so
        use interior points or points outside the window for comparisons.

    Notes
    -----
    eps1(w) - eps_inf = (2/pi) P int_0^inf w' eps2(w') / (w'^2 - w^2) dw'. For PL eps2 with
    nodes x_j, values y_j and slope changes dm_j,

        eps1(w) - eps_inf = (1/pi) [ sum_j dm_j g(w, x_j) - y_0 (ln|w^2 - x_0^2| + 2)
                                     + y_M (ln|w^2 - x_M^2| + 2) ],
        g(w, x) = (w + x) ln|w + x| - (w - x) ln|w - x|.

    For a conductor eps2 ~ sigma/w below the window, and its contribution there is
    (2/pi) P int_0^{x_0} sigma / (w'^2 - w^2) dw' = (sigma / (pi w)) ln|(x_0 - w)/(x_0 + w)|,
    about -2 sigma x_0 / (pi w^2) for w >> x_0 (it is this part that a plain truncation
    misses; the DC term over the whole axis has a zero partner). The value at w = x_0 is
    then not finite (nan) even when the two logarithms cancel in the limit.

    References
    ----------
    .. [1] F. Wooten, *Optical Properties of Solids*, Academic Press (1972), App. G (the KK
       relations, insulator and conductor forms; details from memory); see
       docs/references.md [Wooten1972] and [KK-formulas].
    .. [2] A. B. Kuzmenko, Rev. Sci. Instrum. 76, 083108 (2005) (the triangle partner, the
       three-node case of this closed form, derived in the project and checked against
       ``scipy.integrate.quad(weight="cauchy")``); see docs/references.md [Kuzmenko2005] and
       [PLClosedForm].
    """
    x, y = check_axis(energy_ev, eps2, "eps2")
    w = check_targets(at_ev, x)
    c = _slope_changes(x, y)
    s = _kink_sum(x, c, w, -1, method, at_nodes=_same(w, x))
    ends = _end_term(-y[0], _log_abs(w**2 - x[0] ** 2) + 2.0)
    ends += _end_term(y[-1], _log_abs(w**2 - x[-1] ** 2) + 2.0)
    out = (s + ends) / np.pi
    if dc_sigma_ev:
        with np.errstate(invalid="ignore"):
            out += float(dc_sigma_ev) / (np.pi * w) * (_log_abs(x[0] - w) - _log_abs(x[0] + w))
    return out


def eps1_to_eps2(
    energy_ev, eps1_minus_inf, at_ev=None, *, method="auto", dc_sigma_ev=0.0
) -> np.ndarray:
    """eps2 from piecewise-linear eps1 - eps_inf (zero outside the window), plus the DC term.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    eps1_minus_inf : array_like, shape (N,)
        eps1 - eps_inf at ``energy_ev`` (dimensionless).
    at_ev : array_like, optional
        Where to evaluate [eV] (default: ``energy_ev``).
    method : {"auto", "exact", "fast"}
        As in :func:`eps2_to_eps1`.
    dc_sigma_ev : float
        sigma0/eps0 expressed in eV [eV]; adds the conductor term dc_sigma_ev / E.

    Returns
    -------
    numpy.ndarray
        eps2 at ``at_ev`` (+-inf at a window end where eps1 - eps_inf is non-zero).

    Notes
    -----
    eps2(w) = sigma0/(eps0 w) - (2 w / pi) P int_0^inf [eps1(w') - eps_inf] / (w'^2 - w^2) dw'.
    For PL data u = eps1 - eps_inf (even extension) with slope changes dm_j,

        eps2(w) = (1/pi) [ sum_j dm_j ((w + x_j) ln|w + x_j| + (w - x_j) ln|w - x_j|)
                           + u_0 ln|(x_0 - w)/(x_0 + w)| - u_M ln|(x_M - w)/(x_M + w)| ].

    A finite window can never reveal a constant offset of eps1: such an offset maps to an
    eps2 that grows like a logarithm towards the window ends.

    References
    ----------
    .. [1] F. Wooten, *Optical Properties of Solids*, Academic Press (1972), App. G (the
       conductor form with the sigma0/(eps0 w) term; details from memory); see
       docs/references.md [Wooten1972] and [KK-formulas] (the Drude check table).
    """
    x, y = check_axis(energy_ev, eps1_minus_inf, "eps1 - eps_inf")
    w = check_targets(at_ev, x)
    c = _slope_changes(x, y)
    s = _kink_sum(x, c, w, +1, method, at_nodes=_same(w, x))
    ends = _end_term(y[0], _log_abs(x[0] - w) - _log_abs(x[0] + w))
    ends += _end_term(-y[-1], _log_abs(x[-1] - w) - _log_abs(x[-1] + w))
    out = (s + ends) / np.pi
    if dc_sigma_ev:
        out = out + float(dc_sigma_ev) / w
    return out


def k_to_n_minus_1(energy_ev, k, at_ev=None, *, method="auto") -> np.ndarray:
    """n - 1 from piecewise-linear k (zero outside the window); same kernel as eps2 -> eps1.

    N = n + i k is causal with N -> 1 at high energy, so n(w) - 1 = (2/pi) P int_0^inf
    w' k(w') / (w'^2 - w^2) dw' (Wooten 1972, App. G; see docs/references.md [KK-formulas]).
    See :func:`eps2_to_eps1`.
    """
    return eps2_to_eps1(energy_ev, k, at_ev, method=method)


def n_minus_1_to_k(energy_ev, n_minus_1, at_ev=None, *, method="auto") -> np.ndarray:
    """k from piecewise-linear n - 1 (zero outside the window); same kernel as eps1 -> eps2.

    k(w) = -(2 w / pi) P int_0^inf [n(w') - 1] / (w'^2 - w^2) dw'. N has no 1/w pole for a
    conductor (k grows only like w^(-1/2)), so there is no DC term. See :func:`eps1_to_eps2`.
    """
    return eps1_to_eps2(energy_ev, n_minus_1, at_ev, method=method)


def phase_of_log_amplitude(energy_ev, log_amplitude, at_ev=None, *, method="auto") -> np.ndarray:
    """KK phase of a piecewise-linear log-amplitude held constant beyond both window ends.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    log_amplitude : array_like, shape (N,)
        u = ln|r| at ``energy_ev`` (for reflectance, u = ln(R)/2).
    at_ev : array_like, optional
        Where to evaluate [eV] (default: ``energy_ev``).
    method : {"auto", "exact", "fast"}
        As in :func:`eps2_to_eps1`.

    Returns
    -------
    numpy.ndarray
        theta(w) = -(2 w / pi) P int_0^inf u(w') / (w'^2 - w^2) dw' [rad], with u(w') = u_0
        below the window and u_M above it. Finite everywhere, the window ends included.

    Notes
    -----
    This is :func:`eps1_to_eps2` of u without its two end-step terms: a constant c on
    [0, x_0] contributes -(c/pi) ln|(x_0 - w)/(x_0 + w)|, which is exactly minus the end
    term of the PL window at x_0 (and likewise at x_M), so with constant continuations only
    the kink sum (1/pi) sum_j dm_j [(w + x_j) ln|w + x_j| + (w - x_j) ln|w - x_j|] remains.
    Other continuations are added as the phase of their deviation from these constants
    (:mod:`kkcheck.reflectance`).

    References
    ----------
    .. [1] D. M. Roessler, Br. J. Appl. Phys. 16, 1119 (1965) (the phase integral of ln R,
       from memory); see docs/references.md [Roessler1965] and [ReflectancePhase].
    """
    x, y = check_axis(energy_ev, log_amplitude, "log-amplitude")
    w = check_targets(at_ev, x)
    c = _slope_changes(x, y)
    return _kink_sum(x, c, w, +1, method, at_nodes=_same(w, x)) / np.pi


def dc_sigma_from_low_energy(energy_ev, eps2, n_points: int = 10) -> float:
    """Estimate sigma0/eps0 [eV] of a conductor from the lowest-energy eps2 samples.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    eps2 : array_like, shape (N,)
        Imaginary part of eps, > 0 at the lowest ``n_points`` energies.
    n_points : int
        How many of the lowest-energy samples to use (>= 3).

    Returns
    -------
    float
        sigma0/eps0 in eV (wp^2/gamma for a Drude term).

    Notes
    -----
    For a Drude term, E eps2 = sigma gamma^2 / (E^2 + gamma^2), so 1/(E eps2) = 1/sigma +
    E^2/(sigma gamma^2) is a straight line in E^2 with intercept 1/sigma. The estimate is a
    least-squares line through the lowest ``n_points`` samples; interband absorption inside
    those samples biases it, so use data well below the first interband edge. Warns and
    returns 0 when the line is not Drude-like (slope or intercept not positive).

    References
    ----------
    .. [1] F. Wooten, *Optical Properties of Solids*, Academic Press (1972) (the Drude form,
       sigma0/eps0 = wp^2/gamma; details from memory); see docs/references.md [Wooten1972]
       and [ModelFormulas].
    """
    x, y = check_axis(energy_ev, eps2, "eps2")
    n = int(n_points)
    if n < 3 or n > x.size:
        raise InputError(f"expected n_points between 3 and the number of points ({x.size})")
    xs, ys = x[:n], y[:n]
    if np.any(ys <= 0):
        raise InputError("expected eps2 > 0 at the lowest energies to estimate a DC term")
    slope, intercept = np.polyfit(xs**2, 1.0 / (xs * ys), 1)
    if intercept <= 0 or slope <= 0:
        warnings.warn(
            "no Drude-like DC term found: 1/(E eps2) is not a rising line in E^2; returning 0",
            RuntimeWarning,
            stacklevel=2,
        )
        return 0.0
    return float(1.0 / intercept)
