"""Sum rules over a measured window: f-sum (N_eff, effective plasma energy) and inertial rules.

References
----------
.. [1] M. Altarelli, D. L. Dexter, H. M. Nussenzveig, D. Y. Smith, "Superconvergence and sum
   rules for the optical constants," Phys. Rev. B 6, 4502 (1972).
.. [2] D. Y. Smith, "Dispersion theory, sum rules, and their application to the analysis of
   optical data," in E. D. Palik (ed.), *Handbook of Optical Constants of Solids* (1985).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float, json_floats
from ..units import eps_to_nk
from .checks import check_axis

__all__ = ["NEFF_CM3_EV2", "SumRuleResult", "fsum_cumulative", "n_eff", "sum_rules"]

#: 2 eps0 m_e / (pi hbar^2) in cm^-3 eV^-2, computed from the CODATA values of eps0, m_e,
#: hbar and e (Smith 1985, the N_eff definition):
#: N_eff(E) = NEFF_CM3_EV2 / N_a * int_0^E E' eps2(E') dE'.
NEFF_CM3_EV2 = 4.6171e20
#: What the integrals in :meth:`SumRuleResult.to_dict` are (the ``notes`` of that block).
SUMMARY_NOTE = (
    "integrals over the measured window only: int_{x0}^{E} E' eps2 dE' "
    "(fsum_ev2), sqrt((2/pi) fsum) (effective plasma energy), int (n - 1) dE and "
    "int (eps1 - 1) dE; the full-axis inertial values are 0 (insulator) or "
    "-(pi/2) sigma0/eps0 (conductor)"
)


def fsum_cumulative(energy_ev, eps2) -> np.ndarray:
    """int_{x_0}^{E} E' eps2(E') dE' at every node, exact for piecewise-linear eps2 [eV^2].

    Simpson's rule per segment is exact here because E' eps2(E') is quadratic on a segment.
    """
    x, y = check_axis(energy_ev, eps2, "eps2")
    xm = 0.5 * (x[1:] + x[:-1])
    ym = 0.5 * (y[1:] + y[:-1])
    seg = np.diff(x) / 6.0 * (x[:-1] * y[:-1] + 4.0 * xm * ym + x[1:] * y[1:])
    return np.concatenate(([0.0], np.cumsum(seg)))


def n_eff(energy_ev, eps2, density_cm3: float) -> np.ndarray:
    """Effective number of electrons per atom (or formula unit) below each energy.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    eps2 : array_like, shape (N,)
        Imaginary part of eps (piecewise linear, zero below the window).
    density_cm3 : float
        Number density N_a of atoms or formula units [cm^-3].

    Returns
    -------
    numpy.ndarray
        N_eff(E) [electrons per atom], counting only absorption inside the window.

    Notes
    -----
    N_eff(E) = (2 eps0 m / (pi hbar^2 N_a)) int_0^E E' eps2(E') dE'
             = (4.6171e20 cm^-3 eV^-2 / N_a) int_0^E E' eps2(E') dE',

    the constant computed from the CODATA values (equivalently n [cm^-3] = 7.2525e20
    (hbar wp [eV])^2). The definition is the one of Smith (1985) [1]_; its equation number
    there was not checked.

    References
    ----------
    .. [1] D. Y. Smith, "Dispersion theory, sum rules, and their application to the analysis
       of optical data," ch. 3 in E. D. Palik (ed.), *Handbook of Optical Constants of Solids*,
       Academic Press (1985) (year from memory).
    """
    if not (np.isfinite(density_cm3) and density_cm3 > 0):
        raise InputError("expected a number density density_cm3 > 0 (atoms per cm^3)")
    return NEFF_CM3_EV2 / float(density_cm3) * fsum_cumulative(energy_ev, eps2)


@dataclass(frozen=True)
class SumRuleResult:
    """Sum-rule integrals over the measured window.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        The data's energies [eV].
    fsum_ev2 : numpy.ndarray
        int_{x_0}^{E} E' eps2 dE' at each energy [eV^2].
    plasma_energy_ev : numpy.ndarray
        Effective plasma energy sqrt((2/pi) fsum_ev2) [eV] (the f-sum rule gives hbar*wp
        when the window holds all absorption).
    n_eff : numpy.ndarray or None
        Electrons per atom below each energy (None when no density was given).
    density_cm3 : float or None
        Number density used for ``n_eff`` [cm^-3].
    inertial_n_ev : float
        int (n - 1) dE over the window [eV]; the full-axis value is 0 for insulators and
        conductors.
    inertial_eps1_ev : float
        int (eps1 - 1) dE over the window [eV].
    expected_inertial_eps1_ev : float
        Full-axis value of that integral: -(pi/2) sigma0/eps0 (dc_sigma_ev) [eV], 0 for an
        insulator.
    window_ev : tuple of float
        (x_0, x_M) [eV].
    caution : str
        Empty when the window looks wide enough; otherwise why the integrals are partial.
    """

    energy_ev: np.ndarray
    fsum_ev2: np.ndarray
    plasma_energy_ev: np.ndarray
    n_eff: np.ndarray | None
    density_cm3: float | None
    inertial_n_ev: float
    inertial_eps1_ev: float
    expected_inertial_eps1_ev: float
    window_ev: tuple[float, float]
    caution: str

    def to_dict(self) -> dict:
        """The ``sum_rules`` block of summary.json: scalars plus the running f-sum.

        Keys: window_ev, fsum_ev2 and effective_plasma_energy_ev (at the window's top),
        inertial_n_ev, inertial_eps1_ev, expected_inertial_eps1_ev, caution, running (energy_ev
        and effective_plasma_energy_ev on at most 25 evenly picked energies) and notes (what
        the integrals are). Floats are JSON-safe (:func:`kkcheck.jsonsafe.json_float`).
        """
        pick = np.unique(np.linspace(0, self.energy_ev.size - 1, 25).round().astype(int))
        return {
            "window_ev": json_floats(self.window_ev),
            "fsum_ev2": json_float(self.fsum_ev2[-1]),
            "effective_plasma_energy_ev": json_float(self.plasma_energy_ev[-1]),
            "inertial_n_ev": json_float(self.inertial_n_ev),
            "inertial_eps1_ev": json_float(self.inertial_eps1_ev),
            "expected_inertial_eps1_ev": json_float(self.expected_inertial_eps1_ev),
            "caution": self.caution,
            "running": {
                "energy_ev": json_floats(self.energy_ev[pick]),
                "effective_plasma_energy_ev": json_floats(self.plasma_energy_ev[pick]),
            },
            "notes": SUMMARY_NOTE,
        }


def _cautions(x, y2, n, y1, edge_fraction: float) -> list[str]:
    """One caution per rule whose estimated out-of-window share exceeds ``edge_fraction``.

    For each integrand g (E eps2, n - 1, eps1 - 1) the part outside the window is estimated
    as |g(x_0)| x_0 (bounded below the window) plus |g(x_M)| x_M (E^-2 decay above it). When
    that exceeds ``edge_fraction`` of int |g| dE over the window, the rule is partial and the
    caution says which rule and which end. The rule is a heuristic: it cannot see absorption
    that starts beyond the window with nothing inside it.
    """
    notes = []
    for label, g in (
        ("f-sum (E eps2)", x * y2),
        ("inertial n - 1", n - 1.0),
        ("inertial eps1 - 1", y1 - 1.0),
    ):
        share = _edge_share(x, g)
        if share > edge_fraction:
            ends = []
            inside = np.trapezoid(np.abs(g), x)
            if abs(g[0]) * x[0] > 0.5 * edge_fraction * inside:
                ends.append("low")
            if abs(g[-1]) * x[-1] > 0.5 * edge_fraction * inside:
                ends.append("high")
            notes.append(
                f"{label}: about {100 * share:.0f}% may lie outside the window "
                f"({' and '.join(ends) or 'both'} end); the integral is partial"
            )
    return notes


def _edge_share(x: np.ndarray, g: np.ndarray) -> float:
    """Estimated out-of-window part of int g dE relative to int |g| dE over the window.

    Below x_0 the integrand is taken as bounded by |g(x_0)| (share |g(x_0)| x_0); above x_M
    as decaying like E^-2 (share |g(x_M)| x_M).
    """
    inside = np.trapezoid(np.abs(g), x)
    if inside == 0:
        return 0.0
    return float((abs(g[0]) * x[0] + abs(g[-1]) * x[-1]) / inside)


def sum_rules(
    energy_ev,
    eps1,
    eps2,
    *,
    density_cm3: float | None = None,
    dc_sigma_ev: float = 0.0,
    edge_fraction: float = 0.05,
) -> SumRuleResult:
    """f-sum and inertial sum rules of eps = eps1 + i eps2 over the measured window.

    Parameters
    ----------
    energy_ev : array_like, shape (N,)
        Photon energies [eV], strictly increasing, > 0.
    eps1, eps2 : array_like, shape (N,)
        Real and imaginary parts of eps (piecewise linear in between).
    density_cm3 : float, optional
        Number density of atoms or formula units [cm^-3], for N_eff.
    dc_sigma_ev : float
        sigma0/eps0 in eV for a conductor [eV] (sets the expected inertial eps1 value).
    edge_fraction : float
        Caution threshold for the estimated out-of-window share (see Notes).

    Returns
    -------
    SumRuleResult

    Notes
    -----
    f-sum: int_0^inf E eps2 dE = (pi/2) (hbar wp)^2. Inertial rules:
    int_0^inf (n - 1) dE = 0 (insulators and conductors) and
    int_0^inf (eps1 - 1) dE = -(pi/2) sigma0/eps0 (0 for insulators)
    (Altarelli, Dexter, Nussenzveig and Smith 1972 [1]_; equation numbers not checked). All
    integrals are exact for piecewise-linear data (Simpson per segment for E eps2, trapezoid
    for the others); n comes from the PL eps at the nodes, so the n-rule is exact for PL n,
    not for PL eps. The caution rule is described in :func:`_cautions`.

    References
    ----------
    .. [1] M. Altarelli, D. L. Dexter, H. M. Nussenzveig, D. Y. Smith, "Superconvergence and
       sum rules for the optical constants," Phys. Rev. B 6, 4502 (1972).
    .. [2] D. Y. Smith, in E. D. Palik (ed.), *Handbook of Optical Constants of Solids* (1985),
       ch. 3 (year from memory).
    """
    x, y2 = check_axis(energy_ev, eps2, "eps2")
    _, y1 = check_axis(energy_ev, eps1, "eps1")
    if not (0 < edge_fraction < 1):
        raise InputError("expected edge_fraction between 0 and 1")
    fs = fsum_cumulative(x, y2)
    wp = np.sqrt(np.maximum(2.0 / np.pi * fs, 0.0))
    ne = None if density_cm3 is None else n_eff(x, y2, density_cm3)
    n, _ = eps_to_nk(y1 + 1j * y2)
    in_n = float(np.trapezoid(n - 1.0, x))
    in_e = float(np.trapezoid(y1 - 1.0, x))
    notes = _cautions(x, y2, n, y1, edge_fraction)
    return SumRuleResult(
        energy_ev=x,
        fsum_ev2=fs,
        plasma_energy_ev=wp,
        n_eff=ne,
        density_cm3=None if density_cm3 is None else float(density_cm3),
        inertial_n_ev=in_n,
        inertial_eps1_ev=in_e,
        expected_inertial_eps1_ev=-0.5 * np.pi * float(dc_sigma_ev),
        window_ev=(float(x[0]), float(x[-1])),
        caution="; ".join(notes),
    )


def spectrum_sum_rules(spectrum) -> SumRuleResult:
    """:func:`sum_rules` of a merged spectrum, using the first point at each duplicate energy.

    Parameters
    ----------
    spectrum : kkcheck.spectrum.Spectrum
        Non-decreasing axis (sources side by side in an overlap share energies).
    """
    from ..spectrum import first_of_each_energy

    idx = first_of_each_energy(spectrum.energy_ev)
    eps = np.asarray(spectrum.eps)[idx]
    return sum_rules(np.asarray(spectrum.energy_ev)[idx], eps.real, eps.imag)
