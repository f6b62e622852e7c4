"""Fit a stable, certified-passive pole-pair model to eps data: the public entry point.

:func:`fit_pole_pairs` validates the data, sets the residual weights, runs one of the order
searches of :mod:`kkcheck.rational.search`, enforces passivity on the chosen fit when that is
still needed, and returns a :class:`FitResult`.

References
----------
.. [1] B. Gustavsen, "Improving the pole relocating properties of vector fitting," IEEE Trans.
   Power Deliv. 21(3), 1587-1592 (2006) (from memory); see docs/references.md [Gustavsen2006].
.. [2] B. Gustavsen, A. Semlyen, "Enforcing passivity for admittance matrices approximated by
   rational functions," IEEE Trans. Power Syst. 16(1), 97-104 (2001) (volume and pages from
   memory); see docs/references.md [GustavsenSemlyen2001].
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float
from ..options import DOWNWEIGHT_FACTOR
from .model import PolePairModel
from .passivity import EnforcementRecord, PassivityCertificate
from .search import (
    FitData,
    SearchOutcome,
    Target,
    bic_search,
    enforce_if_needed,
    fixed_order_search,
    target_search,
)

__all__ = ["FitResult", "fit_pole_pairs", "detect_conductor", "WEIGHTING"]

#: How the pipeline weighs the data in the fit (summary.json "fit.weighting"): residuals over
#: sigma, with sigma times DOWNWEIGHT_FACTOR (weight 1/DOWNWEIGHT_FACTOR**2) where the KK test
#: found the data inconsistent or a flagged point is still in the data.
WEIGHTING = (
    "1/sigma of the repaired data; points in KK-inconsistent regions "
    f"and flagged points still in the data weigh 1/{DOWNWEIGHT_FACTOR**2:g}"
)


@dataclass(frozen=True)
class FitResult:
    """Result of :func:`fit_pole_pairs`.

    Attributes
    ----------
    model : PolePairModel
        The chosen (and, if needed, passivity-enforced) model; energies in eV.
    n_pairs : int
        Entries of the model (complex pairs plus real poles; conductor term not counted).
    rms_rel, max_rel : float
        RMS and largest relative error |eps_model - eps| / |eps| on the data [dimensionless].
    chi2_dof : float or None
        Weighted chi2 per degree of freedom when sigma was given, else None.
    passivity : PassivityCertificate
        Whole-axis certificate of the returned model (certified, min_eps2, method,
        crossing_energies_ev, ...).
    stable : bool
        Re a_p < 0 for all poles (the conductor pole at 0 excepted) and eps_inf > 0.
    enforcement : EnforcementRecord
        Whether enforcement was needed, and the rms/max relative error before and after.
    order_table : tuple of OrderRow
        Trade-off table of every order tried (unconstrained fits).
    range_ev : tuple of float
        (lowest, highest) fitted energy [eV].
    conductor : bool
        Whether the conductor term (pole at s = 0) was included.
    warnings : tuple of str
        Everything the fit warned about, also emitted as RuntimeWarning.
    device : kkcheck.rational.device.DeviceOutcome or None
        For a device-aimed fit (``film=``): the film, the tolerance and the R/T reached.
    """

    model: PolePairModel
    n_pairs: int
    rms_rel: float
    max_rel: float
    chi2_dof: float | None
    passivity: PassivityCertificate
    stable: bool
    enforcement: EnforcementRecord
    order_table: tuple
    range_ev: tuple
    conductor: bool
    warnings: tuple
    device: object | None = None

    def to_dict(self, weighting: str = WEIGHTING) -> dict:
        """The "fit" block of summary.json: plain JSON-safe values.

        Parameters
        ----------
        weighting : str
            Description of the residual weights; the default, :data:`WEIGHTING`, is the
            pipeline's.

        Returns
        -------
        dict
            ``pairs``, ``rms_rel``, ``max_rel`` (fractions), ``certified_passive``, ``stable``,
            ``range_ev`` [eV], ``weighting`` and ``notes`` (the fit's warnings). Non-finite
            numbers become None (:func:`kkcheck.jsonsafe.json_float`).
        """
        return {
            "pairs": int(self.n_pairs),
            "rms_rel": json_float(self.rms_rel),
            "max_rel": json_float(self.max_rel),
            "certified_passive": bool(self.passivity.certified),
            "stable": bool(self.stable),
            "range_ev": [json_float(self.range_ev[0]), json_float(self.range_ev[1])],
            "weighting": weighting,
            "notes": list(self.warnings),
            "eps_inf": json_float(self.model.eps_inf),
            "certificate": {
                "method": self.passivity.method,
                "margin_rel": json_float(self.passivity.margin_rel),
                "min_eps2": json_float(self.passivity.min_eps2),
                "exact_roots": self.passivity.exact_roots,
            },
            "rms_rel_unconstrained": json_float(self.enforcement.rms_rel_before),
            "device": None if self.device is None else self.device.to_dict(),
        }


def detect_conductor(energy_ev, eps) -> bool:
    """Heuristic free-carrier test at the low-energy end of the data.

    True when, over the lowest 10 % of the points (at least 5), eps1 < 0 with |eps1| growing
    toward low energy at least as fast as w^-1, and eps2 growing toward low energy at least as
    fast as w^-1 (Drude: |eps1| ~ w^-2 and eps2 ~ w^-3 above gamma, ~ w^-1 below). A Lorentz
    resonance just below the window can mimic this; pass ``conductor=True/False`` to decide.
    """
    w = np.asarray(energy_ev, dtype=float)
    e = np.asarray(eps, dtype=complex)
    k = max(5, w.size // 10)
    lw, e1, e2 = np.log(w[:k]), e.real[:k], e.imag[:k]
    if np.any(e1 >= 0) or np.any(e2 <= 0):
        return False
    s1 = np.polyfit(lw, np.log(-e1), 1)[0]
    s2 = np.polyfit(lw, np.log(e2), 1)[0]
    return bool(s1 <= -1.0 and s2 <= -1.0)


def _validate_data(energy_ev, eps, sigma_eps1, sigma_eps2):
    """(energy, eps, [sigma1, sigma2]) as arrays; one sigma given serves for both parts."""
    w = np.asarray(energy_ev, dtype=float).reshape(-1)
    e = np.asarray(eps, dtype=complex).reshape(-1)
    if w.size != e.size:
        raise InputError("energy_ev and eps must have the same length")
    if w.size < 4 or not np.all(np.isfinite(w)) or np.any(w <= 0) or np.any(np.diff(w) <= 0):
        raise InputError(
            "energy_ev must be at least 4 finite, positive, strictly increasing values"
        )
    if not np.all(np.isfinite(e)) or np.any(e == 0):
        raise InputError("eps must be finite and non-zero at every point")
    sig = []
    for s in (sigma_eps1, sigma_eps2):
        if s is None:
            sig.append(None)
            continue
        s = np.broadcast_to(np.asarray(s, dtype=float), w.shape)
        if not np.all(np.isfinite(s)) or np.any(s <= 0):
            raise InputError("sigma_eps1/sigma_eps2 must be finite and > 0")
        sig.append(s)
    if sig[0] is None and sig[1] is not None or sig[0] is not None and sig[1] is None:
        sig = [sig[0] if sig[0] is not None else sig[1]] * 2
    return w, e, sig


def _validate_options(pairs, tol, conductor, max_pairs) -> None:
    if pairs is not None and (int(pairs) != pairs or pairs < 1):
        raise InputError("pairs must be a positive integer")
    if tol is not None and not (tol > 0):
        raise InputError("tol (the rms relative error to reach) must be > 0")
    if conductor not in ("auto", True, False):
        raise InputError("conductor must be 'auto', True or False")
    if int(max_pairs) < 1:
        raise InputError("max_pairs must be >= 1")


def fit_pole_pairs(
    energy_ev,
    eps,
    sigma_eps1=None,
    sigma_eps2=None,
    *,
    pairs=None,
    tol=None,
    conductor="auto",
    max_pairs=12,
    enforce_passivity=True,
    chi2_target=None,
    film=None,
    slab_tolerance=0.01,
) -> FitResult:
    """Fit a stable pole-pair model with few entries and a whole-axis passivity certificate.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV], strictly increasing, > 0.
    eps : array_like of complex
        Permittivity eps1 + i eps2 (exp(-i w t)).
    sigma_eps1, sigma_eps2 : array_like or float, optional
        Standard uncertainties of eps1 and eps2; the residuals are weighted by 1/sigma and
        chi2/dof is reported. Without them the weights are 1/|eps| (relative error).
    pairs : int, optional
        Fit exactly this many starting entries (no order search).
    tol : float, optional
        Relative rms error to reach: accept the fewest entries whose rms relative error
        sqrt(mean(|eps_model - eps|^2 / |eps|^2)) is <= tol (after enforcement).
    conductor : {"auto", True, False}
        Include a conductor pole at s = 0; "auto" uses :func:`detect_conductor`.
    chi2_target : float, optional
        With sigma and no ``tol``: the chi2/dof that counts as the noise floor. Default:
        1 + 3 sqrt(2/dof), right when sigma is known; pass a larger value (e.g. 1.5) when
        sigma was itself estimated from the data.
    max_pairs : int
        Largest number of starting entries tried.
    enforce_passivity : bool
        Re-solve the residues of every candidate under the passivity constraints (poles
        fixed) so that the returned model is passive by construction.
    film : kkcheck.slab.FilmSpec, optional
        Aim the fit at this film: weights from :func:`~kkcheck.rational.device.device_weights`
        (sigma ignored) and the fewest entries whose R and T stay within ``slab_tolerance``
        (:func:`~kkcheck.rational.device.device_search`). Default: the plain eps fit.
    slab_tolerance : float
        Largest accepted |dR| and |dT| of the film (with ``film``).

    Returns
    -------
    FitResult

    Notes
    -----
    Model (DEVELOPERS.md, Conventions): eps(w) = eps_inf + sum_p [c_p/(s - a_p) +
    conj(c_p)/(s - conj(a_p))] (+ 2 c_0/s), s = -i w. Search steps 1, 2, ... max_pairs are
    fitted by relaxed vector fitting (:func:`~kkcheck.rational.vfit.vector_fit`) from several
    starts: poles spread over the data band, and the previous step's converged poles plus one
    pair at the largest weighted residual, above or below the window
    (:func:`~kkcheck.rational.vfit.poles_plus_pair`); the smallest BIC leads the step, and its
    poles and residues are then polished by variable-projection nonlinear least squares
    (:func:`~kkcheck.rational.vfit.polish_poles`, Golub & Pereyra [2]_), kept when that lowers
    the misfit. The band start alone misses oscillators outside the window (gold [1]_, 0.5-6 eV:
    chi2/dof ~3 up to 9 entries, where the exact 6-entry model sits at the noise floor); without
    the polish, vector fitting's fixed points still needed 8-10 entries for some noise draws of
    the same gold data as n, k (207-2480 nm, noise 0.002), with it 6-7. The chosen order is
    the fewest entries that meet ``tol`` or, with sigma and no tol, chi2/dof <=
    1 + 3 sqrt(2/dof) (noise floor), for some start, as fitted or with its sharp pairs above
    the band widened (:func:`~kkcheck.rational.vfit.broaden_above_band`), and still meet it
    once certified passive (enforced if needed): :func:`~kkcheck.rational.search.target_search`.
    When no order meets it, the fewest entries within 10 % of the best misfit
    (:func:`~kkcheck.rational.order.choose_by_diminishing_returns`); without a target, the
    smallest BIC (:func:`~kkcheck.rational.search.bic_search`: the search stops two steps after
    the last BIC improvement). With ``pairs`` the lower steps are fitted only to seed the
    pole-adding start (:func:`~kkcheck.rational.search.fixed_order_search`). A certificate that
    says passive is cross-checked by dense sampling.

    References
    ----------
    .. [1] A. D. Rakic, A. B. Djurisic, J. M. Elazar, M. L. Majewski, "Optical properties of
       metallic films for vertical-cavity optoelectronic devices," Appl. Opt. 37(22),
       5271-5283 (1998) (the gold case above); see docs/references.md [Rakic1998].
    .. [2] G. H. Golub, V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least
       squares problems whose variables separate," SIAM J. Numer. Anal. 10(2), 413-432 (1973)
       (from memory); see docs/references.md [GolubPereyra1973].
    """
    w, e, sig = _validate_data(energy_ev, eps, sigma_eps1, sigma_eps2)
    _validate_options(pairs, tol, conductor, max_pairs)
    have_sigma = sig[0] is not None
    cap = max(1, w.size // 6)  # never more entries than a sixth of the points
    notes = []
    if pairs is not None and int(pairs) > cap:
        notes.append(f"pairs={int(pairs)} lowered to {cap}: {w.size} points fix at most {cap}")
        pairs = cap
    max_pairs = min(int(max_pairs), cap)
    data = FitData(
        energy_ev=w,
        eps=e,
        weight1=1 / sig[0] if have_sigma else 1 / np.abs(e),
        weight2=1 / sig[1] if have_sigma else 1 / np.abs(e),
        have_sigma=have_sigma,
        conductor=detect_conductor(w, e) if conductor == "auto" else bool(conductor),
        max_entries=cap,
    )
    target = Target(tol, chi2_target, bool(enforce_passivity))
    device = None
    if film is not None:
        from .device import device_search, device_weights

        if not (slab_tolerance > 0):
            raise InputError("slab_tolerance must be > 0")
        s1, s2 = device_weights(w, e, film, float(slab_tolerance))
        data = replace(data, weight1=1 / s1, weight2=1 / s2, have_sigma=True)
        search, device = device_search(data, (w, e), film, float(slab_tolerance), max_pairs)
    elif pairs is not None:
        search = fixed_order_search(data, int(pairs), bool(enforce_passivity))
    elif tol is not None or have_sigma:
        search = target_search(data, target, int(max_pairs))
    else:
        search = bic_search(data, int(max_pairs), bool(enforce_passivity))
    result = replace(_result(data, target, search, tuple(notes)), device=device)
    for msg in result.warnings:
        warnings.warn(msg, RuntimeWarning, stacklevel=2)
    return result


def _result(data: FitData, target: Target, search: SearchOutcome, pre=()) -> FitResult:
    """The FitResult of the chosen candidate, enforcing passivity if the search did not."""
    cand = search.candidates[search.chosen]
    if cand.enforcement is None:
        model, enf, cert = enforce_if_needed(data, cand.model, cand.certificate, target.enforce)
    else:
        model, enf, cert = cand.model, cand.enforcement, cand.certificate
    notes = list(pre) + list(search.notes)
    if not cert.certified:
        notes.append(
            f"NO CERTIFIED MODEL: the best candidate is not certified passive (min eps2 "
            f"{cert.min_eps2:.3g} at {cert.min_energy_ev:.4g} eV); it is not the fit, and is "
            "written as model_uncertified.json"
        )
    if not model.stable:
        notes.append("model is not stable (eps_inf <= 0 or a pole with Re a >= 0)")
    rms, mx, chi2, _, _ = data.metrics(model)
    return FitResult(
        model=model,
        n_pairs=model.n_pairs,
        rms_rel=rms,
        max_rel=mx,
        chi2_dof=chi2,
        passivity=cert,
        stable=model.stable,
        enforcement=enf,
        order_table=search.order_table,
        range_ev=(float(data.energy_ev[0]), float(data.energy_ev[-1])),
        conductor=data.conductor,
        warnings=tuple(notes),
    )
