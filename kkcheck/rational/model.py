"""Pole-residue (complex-conjugate pair) model of eps: value type, evaluation, physical terms.

The model, with s = -i w and time dependence exp(-i w t) (DEVELOPERS.md, Conventions):

    eps(w) = eps_inf + 2 c_0 / s + sum_p [ c_p/(s - a_p) + conj(c_p)/(s - conj(a_p)) ]

where the optional conductor term 2 c_0 / s is the "pair" with its pole at s = 0. All
frequencies (w, a_p, c_p, c_0) are photon energies hbar*omega in eV.

References
----------
.. [1] M. Han, R. W. Dutton, S. Fan, "Model dispersive media in finite-difference time-domain
   method with complex-conjugate pole-residue pairs," IEEE Microw. Wireless Compon. Lett. 16(3),
   119-121 (2006) (volume and pages from memory); see docs/references.md [Han2006], and
   [PolePairAlgebra] for the Drude, Lorentz and Debye mappings (derived, checked against the
   closed forms).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..spectrum import readonly_array

__all__ = [
    "PolePairModel",
    "PhysicalTerm",
    "drude_pairs",
    "lorentz_pairs",
    "debye_pairs",
    "model_from_terms",
    "physical_terms",
    "design_matrix",
    "loss_matrix",
    "parameter_vector",
    "model_from_vector",
]


def _ro(a, dtype) -> np.ndarray:
    return readonly_array(np.ravel(a), dtype)


@dataclass(frozen=True, eq=False)
class PolePairModel:
    """A stable-or-not, passive-or-not pole-residue model of the permittivity.

    Attributes
    ----------
    eps_inf : float
        High-frequency permittivity [dimensionless].
    poles : ndarray of complex
        One pole a_p per entry [eV]; the representative with Im a_p >= 0 is stored (the
        partner conj(a_p) is implied). A real pole (Im a_p == 0) is a single real relaxation.
    residues : ndarray of complex
        Residue c_p per entry [eV]; real for real poles (only Re c_p matters there).
    conductor_residue : float or None
        c_0 [eV] of the conductor term 2 c_0 / s (pole at s = 0), or None when absent.
        For a Drude metal 2 c_0 = sigma_0/eps_0 = wp^2/gamma.

    Notes
    -----
    eps(w) = eps_inf + 2 c_0/s + sum_p [c_p/(s - a_p) + conj(c_p)/(s - conj(a_p))], s = -i w,
    exp(-i w t). In the engineering form of Han et al. [1]_ (exp(+j w t), s = j w) the same
    function of s appears; the physical eps is the complex conjugate of the engineering one at
    the same real w, so poles and residues carry over unchanged.

    For a pair with a = -alpha + i beta, the term equals (b0 + b1 s)/(s^2 + 2 alpha s + w0^2)
    with b1 = 2 Re c, b0 = 2 (alpha Re c - beta Im c), w0^2 = alpha^2 + beta^2, and its loss is
    eps2_p(w) = w [2 alpha b0 - b1 (w0^2 - w^2)] / [(w0^2 - w^2)^2 + 4 alpha^2 w^2].
    A real pole a = -alpha gives eps2_p = 2 c w / (alpha^2 + w^2); the conductor 2 c_0 / w.

    References
    ----------
    .. [1] M. Han, R. W. Dutton, S. Fan, IEEE Microw. Wireless Compon. Lett. 16(3), 119 (2006)
       (volume and pages from memory); see docs/references.md [Han2006].
    """

    eps_inf: float
    poles: np.ndarray
    residues: np.ndarray
    conductor_residue: float | None = None
    _hash: int = field(default=0, init=False, repr=False)

    def __post_init__(self):
        a = np.array(self.poles, dtype=complex).reshape(-1)
        c = np.array(self.residues, dtype=complex).reshape(-1)
        if a.shape != c.shape:
            raise ValueError("poles and residues must have the same length")
        flip = a.imag < 0
        a[flip] = np.conj(a[flip])
        c[flip] = np.conj(c[flip])
        real = a.imag == 0
        c[real] = c[real].real
        object.__setattr__(self, "eps_inf", float(self.eps_inf))
        object.__setattr__(self, "poles", _ro(a, complex))
        object.__setattr__(self, "residues", _ro(c, complex))
        if self.conductor_residue is not None:
            object.__setattr__(self, "conductor_residue", float(self.conductor_residue))

    @property
    def n_pairs(self) -> int:
        """Number of entries (complex pairs plus real poles), conductor term not counted."""
        return int(self.poles.size)

    @property
    def stable(self) -> bool:
        """True when every pole has Re a_p < 0 and eps_inf > 0 (conductor pole at 0 allowed)."""
        return bool(np.all(self.poles.real < 0) and self.eps_inf > 0)

    def eps(self, energy_ev) -> np.ndarray:
        """Complex permittivity at photon energies ``energy_ev`` [eV] (exp(-i w t) convention)."""
        w = np.asarray(energy_ev, dtype=float)
        s = -1j * w[..., None]
        a, c = self.poles, self.residues
        out = self.eps_inf + np.sum(c / (s - a) + np.conj(c) / (s - np.conj(a)), axis=-1)
        if self.conductor_residue is not None:
            out = out + 2.0 * self.conductor_residue / s[..., 0]
        return out

    def eps2_terms(self, energy_ev) -> np.ndarray:
        """Loss eps2 of each entry at ``energy_ev`` [eV], shape (..., n_pairs [+1 conductor]).

        Computed from the real closed forms in the class Notes (no complex cancellation);
        the conductor column, when present, is last.
        """
        w = np.asarray(energy_ev, dtype=float)[..., None]
        x = w * w
        alpha = -self.poles.real
        beta = self.poles.imag
        cr, ci = self.residues.real, self.residues.imag
        w02 = alpha**2 + beta**2
        b1 = 2 * cr
        b0 = 2 * (alpha * cr - beta * ci)
        cols = w * (2 * alpha * b0 - b1 * (w02 - x)) / ((w02 - x) ** 2 + 4 * alpha**2 * x)
        if self.conductor_residue is not None:
            cols = np.concatenate([cols, 2 * self.conductor_residue / w], axis=-1)
        return cols

    def eps2(self, energy_ev) -> np.ndarray:
        """Loss eps2(w) [dimensionless] summed from :meth:`eps2_terms`."""
        return np.sum(self.eps2_terms(energy_ev), axis=-1)


# ---------------------------------------------------------------------------------------------
# physical terms -> pairs (exact)


def drude_pairs(wp_ev: float, gamma_ev: float) -> tuple[float, np.ndarray, np.ndarray]:
    """Exact pole pairs of the Drude term -wp^2 / (w (w + i gamma)).

    Returns
    -------
    conductor_residue : float
        c_0 = wp^2 / (2 gamma) [eV] of the term 2 c_0 / s.
    poles, residues : ndarray
        One real pole a = -gamma [eV] with residue c = -wp^2 / (2 gamma) [eV].

    Notes
    -----
    With w = i s, w (w + i gamma) = -s (s + gamma), so the term is
    wp^2 / (s (s + gamma)) = (wp^2/gamma)/s - (wp^2/gamma)/(s + gamma). (The pole-residue form
    of Han, Dutton & Fan 2006, module reference [1], has the same pair in the exp(+j w t)
    convention; the mapping is checked against the closed form in the tests.)
    """
    if gamma_ev <= 0:
        raise ValueError("gamma_ev must be > 0")
    c0 = wp_ev**2 / (2 * gamma_ev)
    return c0, np.array([-gamma_ev + 0j]), np.array([-c0 + 0j])


def lorentz_pairs(strength: float, w0_ev: float, gamma_ev: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact poles/residues of strength * w0^2 / (w0^2 - w^2 - i w gamma).

    Notes
    -----
    With w = i s the denominator is s^2 + gamma s + w0^2, roots a = -gamma/2 +- i beta with
    beta = sqrt(w0^2 - gamma^2/4) and residue c = -i strength w0^2 / (2 beta) at the upper
    root. An overdamped oscillator (gamma > 2 w0) gives two real poles
    a_{1,2} = -gamma/2 +- sqrt(gamma^2/4 - w0^2) with 2 c_{1,2} = +-strength w0^2/(a_1 - a_2).
    """
    if w0_ev <= 0 or gamma_ev < 0:
        raise ValueError("w0_ev must be > 0 and gamma_ev >= 0")
    disc = w0_ev**2 - gamma_ev**2 / 4
    k = strength * w0_ev**2
    if disc > 0:
        beta = np.sqrt(disc)
        return np.array([complex(-gamma_ev / 2, beta)]), np.array([-1j * k / (2 * beta)])
    if disc == 0:
        raise ValueError("critically damped Lorentz term (double real pole) has no pair form")
    r = np.sqrt(-disc)
    a1, a2 = -gamma_ev / 2 + r, -gamma_ev / 2 - r
    return np.array([a1, a2], dtype=complex), np.array([k / (a1 - a2) / 2, k / (a2 - a1) / 2])


def debye_pairs(strength: float, tau_inv_ev: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact real pole of strength / (1 - i w tau), 1/tau given as an energy [eV].

    Notes
    -----
    With w = i s: strength / (1 + s tau) = (strength/tau)/(s + 1/tau), so a = -1/tau and
    2 c = strength / tau.
    """
    if tau_inv_ev <= 0:
        raise ValueError("tau_inv_ev must be > 0")
    return np.array([-tau_inv_ev + 0j]), np.array([strength * tau_inv_ev / 2 + 0j])


def model_from_terms(eps_inf: float, drude=(), lorentz=(), debye=()) -> PolePairModel:
    """Build the exact :class:`PolePairModel` of a sum of Drude, Lorentz and Debye terms.

    Parameters
    ----------
    eps_inf : float
        Constant background [dimensionless].
    drude : sequence of (wp_ev, gamma_ev)
        Drude terms as in :func:`kkcheck.materials.drude`.
    lorentz : sequence of (strength, w0_ev, gamma_ev)
        Lorentz terms as in :func:`kkcheck.materials.lorentz`.
    debye : sequence of (strength, tau_inv_ev)
        Debye terms as in :func:`kkcheck.materials.debye`.
    """
    poles, res = [], []
    c0 = None
    for wp, g in drude:
        cc, a, c = drude_pairs(wp, g)
        c0 = cc if c0 is None else c0 + cc
        poles.append(a)
        res.append(c)
    for t in lorentz:
        a, c = lorentz_pairs(*t)
        poles.append(a)
        res.append(c)
    for t in debye:
        a, c = debye_pairs(*t)
        poles.append(a)
        res.append(c)
    cat = (lambda v: np.concatenate(v)) if poles else (lambda v: np.zeros(0, complex))
    return PolePairModel(eps_inf, cat(poles), cat(res), c0)


# ---------------------------------------------------------------------------------------------
# pairs -> physical terms


@dataclass(frozen=True)
class PhysicalTerm:
    """One model entry written as a physical term (exp(-i w t), energies in eV).

    Attributes
    ----------
    kind : str
        ``"drude"`` (wp_ev, gamma_ev), ``"conductivity"`` (sigma_over_eps0_ev: eps2 = value/w),
        ``"lorentz"`` (strength, w0_ev, gamma_ev), ``"debye"`` (strength, tau_inv_ev), or
        ``"modified_lorentz"`` (b0_ev2, b1_ev, w0_ev, gamma_ev) for
        (b0 - i b1 w)/(w0^2 - w^2 - i gamma w), a pair whose residue has a real part.
    params : tuple of (str, float)
        Parameter names (with units in the name) and values.
    """

    kind: str
    params: tuple

    def as_dict(self) -> dict:
        """Parameters as a plain dict."""
        return dict(self.params)


def physical_terms(model: PolePairModel, rtol: float = 1e-9) -> tuple[PhysicalTerm, ...]:
    """Write every entry of ``model`` as Drude, Lorentz, Debye or modified-Lorentz terms, exactly.

    A pair maps to a pure Lorentz term when |Re c| <= rtol |c|. The conductor term is paired
    with the real pole whose residue is closest to -c_0, giving a Drude term; any remainder of
    that real pole's residue becomes a Debye term with the same relaxation rate.

    Notes
    -----
    Inverse of :func:`lorentz_pairs`: gamma = -2 Re a, w0^2 = |a|^2,
    strength = -2 Im(a) Im(c)/w0^2. Inverse of :func:`drude_pairs`: gamma = -a,
    wp^2 = 2 c_0 gamma. Inverse of :func:`debye_pairs`: tau_inv = -a, strength = 2 c / tau_inv.
    """
    terms = []
    used = set()
    a, c = model.poles, model.residues
    real_idx = [i for i in range(a.size) if a[i].imag == 0 and a[i].real < 0]
    if model.conductor_residue is not None:
        c0 = model.conductor_residue
        if real_idx:
            j = min(real_idx, key=lambda i: abs(c[i].real + c0))
            g = -a[j].real
            terms.append(
                PhysicalTerm(
                    "drude",
                    (("wp_ev", float(np.sqrt(max(2 * c0 * g, 0.0)))), ("gamma_ev", float(g))),
                )
            )
            used.add(j)
            rest = c[j].real + c0
            if abs(rest) > rtol * abs(c0):
                terms.append(
                    PhysicalTerm(
                        "debye", (("strength", float(2 * rest / g)), ("tau_inv_ev", float(g)))
                    )
                )
        else:
            terms.append(PhysicalTerm("conductivity", (("sigma_over_eps0_ev", float(2 * c0)),)))
    for i in range(a.size):
        if i in used:
            continue
        ai, ci = a[i], c[i]
        alpha, beta = -ai.real, ai.imag
        if beta == 0:
            terms.append(
                PhysicalTerm(
                    "debye",
                    (("strength", float(2 * ci.real / alpha)), ("tau_inv_ev", float(alpha))),
                )
            )
            continue
        w02 = alpha**2 + beta**2
        if abs(ci.real) <= rtol * abs(ci):
            terms.append(
                PhysicalTerm(
                    "lorentz",
                    (
                        ("strength", float(-2 * beta * ci.imag / w02)),
                        ("w0_ev", float(np.sqrt(w02))),
                        ("gamma_ev", float(2 * alpha)),
                    ),
                )
            )
        else:
            terms.append(
                PhysicalTerm(
                    "modified_lorentz",
                    (
                        ("b0_ev2", float(2 * (alpha * ci.real - beta * ci.imag))),
                        ("b1_ev", float(2 * ci.real)),
                        ("w0_ev", float(np.sqrt(w02))),
                        ("gamma_ev", float(2 * alpha)),
                    ),
                )
            )
    return tuple(terms)


# ---------------------------------------------------------------------------------------------
# linear parameterisation for fixed poles (used by the fitter and the passivity enforcement)


def _pole_kinds(poles) -> np.ndarray:
    """True for complex-pair entries, False for real poles."""
    return np.asarray(poles, dtype=complex).imag != 0


def design_matrix(poles, has_conductor: bool, energy_ev) -> np.ndarray:
    """Complex design matrix X with eps(w) = X @ theta for fixed poles (:func:`parameter_vector`).

    Columns: eps_inf (1), then per entry either (Re c, Im c) for a pair, with basis functions
    1/(s-a) + 1/(s-a*) and i/(s-a) - i/(s-a*), or (c) for a real pole with 2/(s-a); the
    conductor column 2/s comes last. s = -i w, w = ``energy_ev`` [eV].
    """
    s = -1j * np.asarray(energy_ev, dtype=float)
    cols = [np.ones_like(s)]
    for a in np.asarray(poles, dtype=complex):
        if a.imag != 0:
            g1, g2 = 1 / (s - a), 1 / (s - np.conj(a))
            cols += [g1 + g2, 1j * (g1 - g2)]
        else:
            cols.append(2 / (s - a))
    if has_conductor:
        cols.append(2 / s)
    return np.stack(cols, axis=-1)


def loss_matrix(poles, has_conductor: bool, energy_ev) -> np.ndarray:
    """Real matrix L with eps2(w) = L @ theta[1:] (no eps_inf column), from real closed forms.

    Notes
    -----
    Per pair with a = -alpha + i beta, w0^2 = |a|^2, D = (w0^2 - w^2)^2 + 4 alpha^2 w^2:
    d eps2/d Re c = w (4 alpha^2 - 2 w0^2 + 2 w^2)/D and d eps2/d Im c = -4 alpha beta w / D.
    Real pole: 2 w/(alpha^2 + w^2). Conductor: 2/w.
    """
    w = np.asarray(energy_ev, dtype=float)
    x = w * w
    cols = []
    for a in np.asarray(poles, dtype=complex):
        alpha, beta = -a.real, a.imag
        if beta != 0:
            w02 = alpha**2 + beta**2
            d = (w02 - x) ** 2 + 4 * alpha**2 * x
            cols += [w * (4 * alpha**2 - 2 * w02 + 2 * x) / d, -4 * alpha * beta * w / d]
        else:
            cols.append(2 * w / (alpha**2 + x))
    if has_conductor:
        cols.append(2 / w)
    return np.stack(cols, axis=-1) if cols else np.zeros(w.shape + (0,))


def parameter_vector(model: PolePairModel) -> np.ndarray:
    """Real parameter vector theta = [eps_inf, residue parameters..., c_0] of ``model``."""
    out = [model.eps_inf]
    for a, c in zip(model.poles, model.residues, strict=True):
        out += [c.real, c.imag] if a.imag != 0 else [c.real]
    if model.conductor_residue is not None:
        out.append(model.conductor_residue)
    return np.array(out, dtype=float)


def model_from_vector(theta, poles, has_conductor: bool) -> PolePairModel:
    """Inverse of :func:`parameter_vector` for the given poles."""
    theta = np.asarray(theta, dtype=float)
    res, k = [], 1
    for a in np.asarray(poles, dtype=complex):
        if a.imag != 0:
            res.append(complex(theta[k], theta[k + 1]))
            k += 2
        else:
            res.append(complex(theta[k], 0.0))
            k += 1
    c0 = float(theta[k]) if has_conductor else None
    if theta.size != k + (1 if has_conductor else 0):
        raise ValueError("parameter vector length does not match the poles")
    return PolePairModel(float(theta[0]), np.asarray(poles, dtype=complex), np.array(res), c0)
