"""Normal-incidence reflectance R -> n, k by the KK phase, with stated extrapolations.

The stage that turns a reflectance table (FTIR, usually) into an n,k source the merge can
take. With r = (N - 1)/(N + 1) = sqrt(R) exp(i theta), N = n + i k and exp(-i w t), ln r is
analytic in the upper half plane and

    theta(w) = -(w / pi) P int_0^inf ln R(w') / (w'^2 - w^2) dw'                       (1)

returns arg[(N - 1)/(N + 1)] in (0, pi) for a passive medium (k >= 0). R is known only on a
window [x_0, x_M]; outside it R is continued by a stated :class:`Extrapolation`:

* low energy: ``"constant"`` R = R(x_0) (insulators), or ``"hagen-rubens"``
  R = 1 - A sqrt(w) with A = (1 - R(x_0))/sqrt(x_0) (metals);
* high energy: a power law R = R(x_M) (x_M / w)^s up to ``free_ev``, then the free-electron
  tail R ~ w^-4, joined continuously.

The phase of the constant continuations is exact in the PL closed form
(:func:`kkcheck.kk.transform.phase_of_log_amplitude`); the power-law tails add the closed form
(s/pi) chi_2(w/x_M) + ((4 - s)/pi) chi_2(w/free_ev) (:func:`tail_phase` derives it); the
Hagen–Rubens deviation is integrated by Gauss–Legendre quadrature.

Anchoring (Palmer et al. 1998 on the phase): where another source gives N at anchor energies
w_j inside the window, theta_j = arg[(N_j - 1)/(N_j + 1)] is known. The extrapolation
parameters (s and ``free_ev`` from a small grid) are chosen to fit the anchors, and the
remaining anchor errors e_j = theta_j - theta(w_j) are removed by the subtractive form on
theta/w: theta(w) += w L(w^2), L the Lagrange polynomial in w^2 through (w_j^2, e_j / w_j)
(one anchor: singly subtractive). The anchors' residuals before that last step are reported.

Uncertainty: sigma_n, sigma_k combine the noise of R (propagated through the inversion at
fixed phase) and the spread (half the range) of n, k over the extrapolations listed by
:func:`extrapolation_set`, each anchored the same way when anchors exist.

References
----------
.. [1] D. M. Roessler, "Kramers–Kronig analysis of reflection data," Br. J. Appl. Phys. 16,
   1119 (1965) (phase integral and extrapolations; from memory); see docs/references.md
   [Roessler1965] and [ReflectancePhase].
.. [2] K. F. Palmer, M. Z. Williams, B. A. Budde, "Multiply subtractive Kramers–Kronig
   analysis of optical data," Appl. Opt. 37, 2660 (1998) (subtractive form, applied to the
   phase; from memory); see docs/references.md [Palmer1998].
.. [3] F. Wooten, *Optical Properties of Solids*, Academic Press (1972) (R ~ w^-4 above the
   plasma edge; Hagen–Rubens; from memory); see docs/references.md [Wooten1972].
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy.special import roots_legendre, spence

from .errors import InputError
from .jsonsafe import json_float, json_floats
from .kk.transform import phase_of_log_amplitude
from .spectrum import Dataset, Provenance, readonly_array
from .units import nk_to_eps, sigma_nk_to_eps

__all__ = [
    "Extrapolation",
    "ReflectanceResult",
    "chi2_legendre",
    "tail_phase",
    "reflectance_phase",
    "nk_from_reflectance",
    "anchor_phase",
    "extrapolation_set",
    "retrieve_nk",
    "retrieve_table",
    "anchors_from_spectrum",
    "reflectance_noise",
    "phase_of_n",
    "LOW_CHOICES",
]

#: Low-energy continuations accepted by :class:`Extrapolation`.
LOW_CHOICES = ("constant", "hagen-rubens")
#: R(x_0) above which the low end is read as a metal's (Hagen–Rubens) by default.
METAL_R_LOW = 0.8
_GL_NODES = 96


@dataclass(frozen=True)
class Extrapolation:
    """How R is continued outside the measured window.

    Attributes
    ----------
    low : str
        ``"constant"`` or ``"hagen-rubens"`` (below x_0).
    exponent : float
        s of the power law R = R(x_M) (x_M/w)^s above x_M (0 = constant).
    free_ev : float
        Photon energy [eV] from which R ~ w^-4 (free electrons); inf = never.
    """

    low: str = "constant"
    exponent: float = 0.0
    free_ev: float = np.inf

    def __post_init__(self):
        if self.low not in LOW_CHOICES:
            raise InputError(
                f"unknown low-energy extrapolation {self.low!r}; expected {', '.join(LOW_CHOICES)}"
            )
        if not (0.0 <= self.exponent <= 4.0):
            raise InputError("expected a high-energy exponent s between 0 and 4")
        if not self.free_ev > 0:
            raise InputError("expected free_ev > 0 eV")

    def describe(self) -> str:
        free = "never" if np.isinf(self.free_ev) else f"from {self.free_ev:.4g} eV"
        return f"low {self.low}; high R ~ w^-{self.exponent:g}, w^-4 {free}"

    def to_dict(self) -> dict:
        return {
            "low": self.low,
            "exponent": json_float(self.exponent),
            "free_ev": json_float(self.free_ev),
        }


def chi2_legendre(x) -> np.ndarray:
    """Legendre's chi function chi_2(x) = sum_k x^(2k+1)/(2k+1)^2, |x| <= 1.

    Notes
    -----
    chi_2(x) = [Li_2(x) - Li_2(-x)]/2, with Li_2(x) = scipy.special.spence(1 - x).
    """
    x = np.asarray(x, float)
    return 0.5 * (spence(1.0 - x) - spence(1.0 + x))


def tail_phase(at_ev, start_ev: float, r_start: float, exponent: float) -> np.ndarray:
    """Phase [rad] contributed by R = r_start (start_ev / w')^s for w' > start_ev, at w < start_ev.

    Notes
    -----
    From (1), with x = w/start_ev < 1, 1/(w'^2 - w^2) = sum_k w^(2k) / w'^(2k+2) and
    int_{w_H}^inf ln(w'/w_H) w'^-(2k+2) dw' = w_H^-(2k+1)/(2k+1)^2:

        theta_tail = -(ln R_H / (2 pi)) ln[(1 + x)/(1 - x)] + (s / pi) chi_2(x).

    Check value (docs/references.md [ReflectancePhase]): w_H = 10, R_H = 0.05, s = 4, w = 2
    gives 0.44911624.

    References
    ----------
    .. [1] D. M. Roessler, Br. J. Appl. Phys. 16, 1119 (1965) (the extrapolation; the closed
       form is derived here); see docs/references.md [Roessler1965].
    """
    w = np.asarray(at_ev, float)
    x = w / float(start_ev)
    if np.any(x >= 1) or np.any(x <= 0):
        raise ValueError("tail_phase needs 0 < w < start_ev")
    lr = np.log(float(r_start))
    steps = -lr / (2 * np.pi) * np.log((1 + x) / (1 - x))
    return steps + float(exponent) / np.pi * chi2_legendre(x)


def _high_phase(w: np.ndarray, x_m: float, ex: Extrapolation) -> np.ndarray:
    """Phase of ln R's deviation from the constant R(x_M) above x_M (power law, then w^-4)."""
    out = ex.exponent / np.pi * chi2_legendre(np.minimum(w / x_m, 1.0))
    if np.isfinite(ex.free_ev):
        out += (4.0 - ex.exponent) / np.pi * chi2_legendre(np.minimum(w / ex.free_ev, 1.0))
    return out


def _low_phase(w: np.ndarray, x0: float, r0: float, ex: Extrapolation) -> np.ndarray:
    """Phase of ln R's deviation from the constant R(x_0) below x_0 (zero for "constant").

    Hagen–Rubens, R = 1 - A sqrt(w'), A = (1 - R0)/sqrt(x_0): -(w/pi) int_0^{x_0}
    [ln R(w') - ln R0]/(w'^2 - w^2) dw' by Gauss–Legendre in t, w' = x_0 t^2 (the deviation
    vanishes at x_0, so the integrand stays bounded at w = x_0).
    """
    if ex.low == "constant":
        return np.zeros_like(w)
    t, tw = roots_legendre(_GL_NODES)
    t = 0.5 * (t + 1.0)
    tw = 0.5 * tw
    wp = x0 * t * t
    a = (1.0 - r0) / np.sqrt(x0)
    dev = np.log1p(-a * np.sqrt(wp)) - np.log(r0)
    jac = 2.0 * x0 * t * tw
    den = wp[None, :] ** 2 - w[:, None] ** 2
    den = np.where(np.abs(den) < 1e-300, 1e-300, den)
    return -(w / np.pi) * ((dev * jac)[None, :] / den).sum(axis=1)


def reflectance_phase(energy_ev, reflectance, at_ev=None, extrapolation=None) -> np.ndarray:
    """theta = arg[(N - 1)/(N + 1)] [rad] from R on a window, continued by ``extrapolation``.

    Parameters
    ----------
    energy_ev : array_like, shape (M,)
        Photon energies [eV], strictly increasing, > 0.
    reflectance : array_like, shape (M,)
        Normal-incidence R as a fraction, 0 < R < 1.
    at_ev : array_like, optional
        Targets [eV] inside the window (default: ``energy_ev``).
    extrapolation : Extrapolation, optional
        Default: constant at both ends (the plain truncated-with-constants phase).

    Returns
    -------
    numpy.ndarray
        theta at ``at_ev`` [rad].

    Notes
    -----
    theta = phase_of_log_amplitude(ln R / 2) (constants beyond both ends, exact PL closed
    form) + low-end deviation (:func:`_low_phase`) + high-end tails (:func:`tail_phase`
    decomposition: (s/pi) chi_2(w/x_M) + ((4 - s)/pi) chi_2(w/free_ev)).

    References
    ----------
    .. [1] D. M. Roessler, Br. J. Appl. Phys. 16, 1119 (1965) (from memory); see
       docs/references.md [Roessler1965].
    """
    x = np.asarray(energy_ev, float)
    r = np.asarray(reflectance, float)
    if r.shape != x.shape or not np.all((r > 0) & (r < 1)):
        raise InputError("expected reflectance strictly between 0 and 1, one per energy")
    ex = extrapolation or Extrapolation()
    w = x.copy() if at_ev is None else np.atleast_1d(np.asarray(at_ev, float))
    if np.any(w < x[0]) or np.any(w > x[-1]):
        raise InputError("expected phase targets inside the reflectance window")
    if ex.free_ev < x[-1]:
        raise InputError(f"expected free_ev >= the window end {x[-1]:g} eV")
    theta = phase_of_log_amplitude(x, 0.5 * np.log(r), w)
    return theta + _high_phase(w, x[-1], ex) + _low_phase(w, x[0], r[0], ex)


def nk_from_reflectance(reflectance, phase_rad) -> tuple[np.ndarray, np.ndarray]:
    """n, k from R and theta = arg[(N - 1)/(N + 1)].

    Notes
    -----
    N = (1 + r)/(1 - r) with r = sqrt(R) e^{i theta}: n = (1 - R)/(1 + R - 2 sqrt(R) cos
    theta), k = 2 sqrt(R) sin theta / (1 + R - 2 sqrt(R) cos theta) (Wooten 1972; see
    docs/references.md [ReflectancePhase]).
    """
    rr = np.sqrt(np.asarray(reflectance, float)) * np.exp(1j * np.asarray(phase_rad, float))
    big_n = (1 + rr) / (1 - rr)
    return big_n.real, big_n.imag


def phase_of_n(big_n) -> np.ndarray:
    """theta = arg[(N - 1)/(N + 1)] [rad] of complex indices N = n + i k."""
    big_n = np.asarray(big_n, complex)
    return np.angle((big_n - 1) / (big_n + 1))


def _lagrange_w2(nodes, values, w) -> np.ndarray:
    out = np.zeros_like(w)
    p2, w2 = nodes**2, w**2
    for j in range(p2.size):
        basis = np.ones_like(w2)
        for k in range(p2.size):
            if k != j:
                basis *= (w2 - p2[k]) / (p2[j] - p2[k])
        out += values[j] * basis
    return out


def anchor_phase(at_ev, phase_rad, anchors_ev, anchor_phase_rad, phase_at_anchors) -> np.ndarray:
    """Subtractive correction on theta/w: theta + w L(w^2), L through (w_j^2, e_j/w_j).

    Parameters
    ----------
    at_ev, phase_rad : array_like
        Targets [eV] and the phase there [rad].
    anchors_ev, anchor_phase_rad : array_like
        Anchor energies [eV] and the phase known there [rad].
    phase_at_anchors : array_like
        The uncorrected phase at the anchors [rad].

    Notes
    -----
    With one anchor this is the singly subtractive form theta(w)/w - theta(w_1)/w_1 =
    -(1/pi)(w^2 - w_1^2) P int ln R / [(w'^2 - w^2)(w'^2 - w_1^2)] dw' (Palmer et al. 1998,
    from memory; identity of docs/references.md [QSubtractive]). Check values in
    [ReflectancePhase]: R on [0.05, 6] of the [SubtractiveCheck] model, anchor 1.5 eV,
    theta = 0.07385 / 0.04059 / 0.03519 at w = 0.8 / 2.0 / 3.0.
    """
    w = np.asarray(at_ev, float)
    a = np.atleast_1d(np.asarray(anchors_ev, float))
    e = np.atleast_1d(np.asarray(anchor_phase_rad, float)) - np.atleast_1d(phase_at_anchors)
    return np.asarray(phase_rad, float) + w * _lagrange_w2(a, e / a, w)


def extrapolation_set(energy_ev, reflectance) -> tuple[Extrapolation, ...]:
    """The reasonable extrapolations whose spread enters the uncertainty.

    Rule (project practice, no source): low end Hagen–Rubens when R(x_0) >= METAL_R_LOW
    (0.8) and R falls from x_0 over the lowest tenth of the points (a metal), else
    constant; high end s in {0, 1, 2, 3, 4} with R ~ w^-4 from 2 x_M or 5 x_M (s = 4 once).
    """
    r = np.asarray(reflectance, float)
    m = max(3, r.size // 10)
    metal = r[0] >= METAL_R_LOW and r[0] >= np.median(r[:m])
    low = "hagen-rubens" if metal else "constant"
    x_m = float(np.asarray(energy_ev, float)[-1])
    out = []
    for s in (0.0, 1.0, 2.0, 3.0):
        for f in (2.0, 5.0):
            out.append(Extrapolation(low, s, f * x_m))
    out.append(Extrapolation(low, 4.0, np.inf))
    return tuple(out)


def reflectance_noise(reflectance) -> float:
    """Noise of R from second differences: 1.4826 MAD(R_{i-1} - 2 R_i + R_{i+1}) / sqrt(6).

    For white noise of standard deviation s the second difference has standard deviation
    s sqrt(6); the MAD scale 1.4826 makes it consistent for Gaussian noise (common practice,
    no source). A smooth R contributes its curvature, so this is an upper estimate.
    """
    r = np.asarray(reflectance, float)
    if r.size < 5:
        return 0.0
    d2 = r[:-2] - 2 * r[1:-1] + r[2:]
    return float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(6.0))


@dataclass(frozen=True)
class ReflectanceResult:
    """n, k retrieved from a reflectance table (:func:`retrieve_nk`).

    Attributes
    ----------
    energy_ev : numpy.ndarray
        The table's energies [eV].
    reflectance, sigma_reflectance : numpy.ndarray
        R as a fraction and its standard uncertainty (given or estimated).
    phase_rad : numpy.ndarray
        theta = arg[(N - 1)/(N + 1)] of the chosen extrapolation, anchored when anchors exist.
    n, k, sigma_n, sigma_k : numpy.ndarray
        Retrieved index and its uncertainty (R noise and extrapolation spread, in quadrature).
    extrapolation : Extrapolation
        The continuation used for ``phase_rad``.
    spread_n, spread_k : float
        Largest half-range of n and k over :func:`extrapolation_set` (after anchoring).
    anchors_ev : tuple of float
        Anchor energies [eV] (empty when unanchored).
    anchor_source : str
        Name of the source that gave N at the anchors ("" when unanchored).
    anchor_residual_rad : tuple of float
        theta_anchor - theta(w_j) of the chosen extrapolation before the subtractive step.
    anchor_holdout_rad : tuple of float
        With two or more anchors: theta_anchor - theta(w_j) when anchor j is left out of the
        subtractive step (a validation of the others); empty otherwise.
    anchor_dn, anchor_dk : tuple of float
        n and k of the anchoring source minus the retrieved n, k at the anchors.
    notes : tuple of str
        What the stage assumed (extrapolations, noise estimate, anchors).
    """

    energy_ev: np.ndarray
    reflectance: np.ndarray
    sigma_reflectance: np.ndarray
    phase_rad: np.ndarray
    n: np.ndarray
    k: np.ndarray
    sigma_n: np.ndarray
    sigma_k: np.ndarray
    extrapolation: Extrapolation
    spread_n: float
    spread_k: float
    anchors_ev: tuple[float, ...] = ()
    anchor_source: str = ""
    anchor_residual_rad: tuple[float, ...] = ()
    anchor_holdout_rad: tuple[float, ...] = ()
    anchor_dn: tuple[float, ...] = ()
    anchor_dk: tuple[float, ...] = ()
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        for f in (
            "energy_ev",
            "reflectance",
            "sigma_reflectance",
            "phase_rad",
            "n",
            "k",
            "sigma_n",
            "sigma_k",
        ):
            object.__setattr__(self, f, readonly_array(getattr(self, f)))

    def provenance_note(self) -> str:
        """The one-line provenance of the retrieved source."""
        where = (
            f"anchored at {', '.join(f'{a:.4g}' for a in self.anchors_ev)} eV on "
            f"{self.anchor_source}"
            if self.anchors_ev
            else "not anchored"
        )
        return (
            f"n,k from reflectance via KK phase ({self.extrapolation.describe()}), "
            f"{where}; extrapolation spread up to {self.spread_n:.2g} in n, "
            f"{self.spread_k:.2g} in k"
        )

    def to_dict(self) -> dict:
        """One entry of the summary's ``reflectance`` list."""
        return {
            "range_ev": [json_float(self.energy_ev[0]), json_float(self.energy_ev[-1])],
            "points": int(self.energy_ev.size),
            "extrapolation": self.extrapolation.to_dict(),
            "spread_n": json_float(self.spread_n),
            "spread_k": json_float(self.spread_k),
            "median_sigma_reflectance": json_float(np.median(self.sigma_reflectance)),
            "anchors_ev": json_floats(self.anchors_ev),
            "anchor_source": self.anchor_source,
            "anchor_residual_rad": json_floats(self.anchor_residual_rad),
            "anchor_holdout_rad": json_floats(self.anchor_holdout_rad),
            "anchor_dn": json_floats(self.anchor_dn),
            "anchor_dk": json_floats(self.anchor_dk),
            "notes": list(self.notes),
        }

    def to_dataset(self, name: str, provenance: Provenance, axis: str = "energy_ev") -> Dataset:
        """The retrieved n,k as a merge source, with the provenance note appended."""
        s1, s2 = sigma_nk_to_eps(self.n, self.k, self.sigma_n, self.sigma_k)
        prov = dataclasses.replace(
            provenance, notes=tuple(provenance.notes) + (self.provenance_note(),) + self.notes
        )
        return Dataset(
            name=name,
            energy_ev=self.energy_ev,
            eps=nk_to_eps(self.n, self.k),
            sigma_eps1=s1,
            sigma_eps2=s2,
            quantity="nk",
            axis=axis,
            provenance=prov,
        )


def _checked(energy_ev, reflectance, sigma):
    x = np.asarray(energy_ev, float)
    r = np.asarray(reflectance, float)
    if x.ndim != 1 or x.size < 8 or r.shape != x.shape:
        raise InputError("expected at least 8 reflectance points, one per energy")
    if x[0] <= 0 or np.any(np.diff(x) <= 0) or not np.all(np.isfinite(x)):
        raise InputError("expected photon energies > 0 eV, strictly increasing")
    if not np.all((r > 0) & (r < 1)):
        raise InputError("expected reflectance strictly between 0 and 1 (as a fraction)")
    if sigma is None:
        s = np.full(x.size, reflectance_noise(r))
    else:
        s = np.broadcast_to(np.asarray(sigma, float), x.shape).copy()
        s[~np.isfinite(s)] = reflectance_noise(r)
    return x, r, s


def _anchored(x, r, ex, anchors, theta_a):
    """theta of one extrapolation on the table and at the anchors, then anchored."""
    th = reflectance_phase(x, r, None, ex)
    if anchors is None:
        return th, None
    th_a = reflectance_phase(x, r, anchors, ex)
    return anchor_phase(x, th, anchors, theta_a, th_a), th_a


def _holdout(x, r, ex, anchors, theta_a) -> tuple[float, ...]:
    if anchors is None or anchors.size < 2:
        return ()
    th_a = reflectance_phase(x, r, anchors, ex)
    out = []
    for j in range(anchors.size):
        keep = np.arange(anchors.size) != j
        got = anchor_phase(
            anchors[j : j + 1], th_a[j : j + 1], anchors[keep], theta_a[keep], th_a[keep]
        )
        out.append(float(theta_a[j] - got[0]))
    return tuple(out)


def retrieve_nk(
    energy_ev,
    reflectance,
    sigma_reflectance=None,
    *,
    anchors_ev=None,
    anchors_index=None,
    anchor_source: str = "",
    extrapolation: Extrapolation | None = None,
) -> ReflectanceResult:
    """n, k from normal-incidence R by the KK phase, anchored where N is known.

    Parameters
    ----------
    energy_ev : array_like, shape (M,)
        Photon energies [eV], strictly increasing, > 0 (M >= 8).
    reflectance : array_like, shape (M,)
        R as a fraction, 0 < R < 1.
    sigma_reflectance : array_like, optional
        Standard uncertainty of R; estimated by :func:`reflectance_noise` when omitted.
    anchors_ev : array_like, optional
        Energies [eV] inside the window where another source gives N.
    anchors_index : array_like of complex, optional
        N = n + i k of that source at ``anchors_ev``.
    anchor_source : str
        Name of that source (for the provenance note).
    extrapolation : Extrapolation, optional
        Use this continuation. Default: with anchors, the member of :func:`extrapolation_set`
        whose phase fits the anchors best (rms); without, the member whose phase is closest
        to the median phase of the set (a central choice, said in the notes).

    Returns
    -------
    ReflectanceResult

    References
    ----------
    .. [1] D. M. Roessler, Br. J. Appl. Phys. 16, 1119 (1965) (from memory); see
       docs/references.md [Roessler1965].
    .. [2] K. F. Palmer, M. Z. Williams, B. A. Budde, Appl. Opt. 37, 2660 (1998) (from
       memory); see docs/references.md [Palmer1998].
    """
    x, r, s_r = _checked(energy_ev, reflectance, sigma_reflectance)
    anchors, theta_a, big_n = _checked_anchors(x, anchors_ev, anchors_index)
    notes = []
    if sigma_reflectance is None:
        notes.append(f"R noise estimated from second differences: {s_r[0]:.2g}")
    cands = extrapolation_set(x, r)
    runs = [_anchored(x, r, ex, anchors, theta_a) for ex in cands]
    thetas = np.array([t for t, _ in runs])
    if extrapolation is not None:
        best = extrapolation
        theta, th_a = _anchored(x, r, best, anchors, theta_a)
    elif anchors is not None:
        fits = [np.sqrt(np.mean((theta_a - ta) ** 2)) for _, ta in runs]
        i = int(np.argmin(fits))
        best, theta, th_a = cands[i], thetas[i], runs[i][1]
        notes.append(
            "extrapolation chosen to fit the anchor phases (rms "
            f"{fits[i]:.2g} rad, over {len(cands)} candidates)"
        )
    else:
        med = np.median(thetas, axis=0)
        i = int(np.argmin(np.sum(np.abs(thetas - med), axis=1)))
        best, theta, th_a = cands[i], thetas[i], None
        notes.append(
            "no anchors: extrapolation is the central member of the set; n,k depend "
            "on it (see the spread)"
        )
    n, k = nk_from_reflectance(r, theta)
    nk_all = [nk_from_reflectance(r, t) for t in thetas]
    half_n = 0.5 * np.ptp([a for a, _ in nk_all], axis=0)
    half_k = 0.5 * np.ptp([b for _, b in nk_all], axis=0)
    dn_dr, dk_dr = _nk_slopes(r, theta)
    sig_n = np.hypot(dn_dr * s_r, half_n)
    sig_k = np.hypot(dk_dr * s_r, half_k)
    res = () if anchors is None else tuple(float(v) for v in theta_a - th_a)
    dn = dk = ()
    if anchors is not None:
        n_a = np.interp(anchors, x, n)
        k_a = np.interp(anchors, x, k)
        dn = tuple(float(v) for v in big_n.real - n_a)
        dk = tuple(float(v) for v in big_n.imag - k_a)
    return ReflectanceResult(
        energy_ev=x,
        reflectance=r,
        sigma_reflectance=s_r,
        phase_rad=theta,
        n=n,
        k=k,
        sigma_n=sig_n,
        sigma_k=sig_k,
        extrapolation=best,
        spread_n=float(half_n.max()),
        spread_k=float(half_k.max()),
        anchors_ev=() if anchors is None else tuple(float(a) for a in anchors),
        anchor_source=anchor_source if anchors is not None else "",
        anchor_residual_rad=res,
        anchor_holdout_rad=_holdout(x, r, best, anchors, theta_a),
        anchor_dn=dn,
        anchor_dk=dk,
        notes=tuple(notes),
    )


def _checked_anchors(x, anchors_ev, anchors_index):
    if anchors_ev is None or len(np.atleast_1d(anchors_ev)) == 0:
        return None, None, None
    a = np.atleast_1d(np.asarray(anchors_ev, float))
    big_n = np.atleast_1d(np.asarray(anchors_index, complex))
    if big_n.shape != a.shape:
        raise InputError("expected one complex index N per anchor energy")
    if np.any(a < x[0]) or np.any(a > x[-1]) or np.any(np.diff(np.sort(a)) <= 0):
        raise InputError(
            f"expected distinct anchors inside the reflectance window {x[0]:.4g}-{x[-1]:.4g} eV"
        )
    if np.any(big_n.imag < 0):
        raise InputError("expected anchor indices with k >= 0 (exp(-iwt))")
    order = np.argsort(a)
    return a[order], phase_of_n(big_n[order]), big_n[order]


def _nk_slopes(r, theta) -> tuple[np.ndarray, np.ndarray]:
    """|dn/dR|, |dk/dR| at fixed phase (central difference, step 1e-6 R)."""
    h = 1e-6 * r
    n1, k1 = nk_from_reflectance(r + h, theta)
    n0, k0 = nk_from_reflectance(r - h, theta)
    return np.abs(n1 - n0) / (2 * h), np.abs(k1 - k0) / (2 * h)


def anchors_from_spectrum(energy_ev, spectrum, n_anchors: int = 2):
    """Anchor energies and N from another source's spectrum where it overlaps the R window.

    Rule (project practice, no source): the overlap is split evenly in log energy into
    ``n_anchors`` + 1 parts and an anchor placed at each inner division (away from the
    overlap's edges); N there is the median of sqrt(eps) over the 5 nearest points of the
    spectrum (a single spike does not move it). Fewer than 5 spectrum points in the overlap:
    no anchors.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Anchor energies [eV] and complex N (empty when there is no usable overlap).
    """
    x = np.asarray(energy_ev, float)
    e = np.asarray(spectrum.energy_ev, float)
    lo, hi = max(x[0], e[0]), min(x[-1], e[-1])
    inside = (e > lo) & (e < hi)
    if hi <= lo or inside.sum() < 5:
        return np.zeros(0), np.zeros(0, complex)
    t = np.linspace(0, 1, n_anchors + 2)[1:-1]
    anchors = np.exp(np.log(lo) + t * (np.log(hi) - np.log(lo)))
    big_n = np.sqrt(np.asarray(spectrum.eps, complex))
    out = []
    for a in anchors:
        near = np.argsort(np.abs(e - a))[:5]
        out.append(np.median(big_n.real[near]) + 1j * max(np.median(big_n.imag[near]), 0.0))
    return anchors, np.asarray(out)


def retrieve_table(table, spectrum=None, source_name: str = ""):
    """A reflectance table as an n,k :class:`Dataset` (the merge source) and its result.

    ``spectrum`` (the other sources merged, optional) gives N in the overlap for anchoring
    (:func:`anchors_from_spectrum`); the Dataset's provenance says how it was made.
    """
    anchors, big_n = (None, None)
    if spectrum is not None:
        anchors, big_n = anchors_from_spectrum(table.energy_ev, spectrum)
        if anchors.size == 0:
            anchors = big_n = None
    res = retrieve_nk(
        table.energy_ev,
        table.reflectance,
        table.sigma_reflectance,
        anchors_ev=anchors,
        anchors_index=big_n,
        anchor_source=source_name,
    )
    return res.to_dataset(table.name, table.provenance, table.axis), res
