"""Axis units, optical-constant conversions and the sign convention, in one place.

Canonical axis: photon energy E = hbar*omega in eV, float64, strictly increasing, > 0.
Time dependence exp(-i omega t); eps = eps1 + i eps2, N = n + i k, eps = N**2, mu = 1.
A passive medium has eps2 >= 0 and k >= 0 for omega > 0.

Constants (CODATA 2018, exact SI definitions of h, c, e):

* ``HC_EV_NM`` = h c = 1239.841984 eV nm (E[eV] = 1239.841984 / lambda[nm])
* ``EV_PER_INV_CM`` = 1.239841984e-4 eV per cm^-1 (E = hc * wavenumber)
* ``EV_PER_THZ`` = h = 4.135667696e-3 eV per THz (E = h nu)
* ``HBAR_EV_S`` = hbar = 6.582119569e-16 eV s (E = hbar omega, omega in rad/s)
* ``EV_PER_HZ`` = h = 4.135667696e-15 eV per Hz (E = h nu)

Further axis units: Angstrom (1 A = 0.1 nm exactly, E = 12398.41984 / lambda[A]) and meV
(1 meV = 1e-3 eV).

References
----------
.. [1] E. Tiesinga et al., "CODATA recommended values of the fundamental physical constants:
   2018", Rev. Mod. Phys. 93, 025010 (2021).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "HC_EV_NM",
    "EV_PER_INV_CM",
    "EV_PER_THZ",
    "HBAR_EV_S",
    "EV_PER_HZ",
    "AXIS_UNITS",
    "TYPICAL_ENERGY_EV",
    "to_energy_ev",
    "from_energy_ev",
    "nk_to_eps",
    "eps_to_nk",
    "sigma_nk_to_eps",
    "ConventionCheck",
    "detect_convention",
]

HC_EV_NM = 1239.841984
EV_PER_INV_CM = 1.239841984e-4
EV_PER_THZ = 4.135667696e-3
HBAR_EV_S = 6.582119569e-16
EV_PER_HZ = 4.135667696e-15

#: Axis kinds kkcheck understands, with their canonical spelling (used in headers and JSON).
AXIS_UNITS = (
    "energy_ev",
    "wavelength_nm",
    "wavelength_um",
    "wavenumber_cm-1",
    "frequency_thz",
    "angular_frequency_rad_s",
    "wavelength_angstrom",
    "energy_mev",
    "frequency_hz",
)

#: Photon-energy range [eV] (low, high) where tables written in each axis unit usually lie:
#: wavelengths in nm or um, wavenumbers and THz cover the far infrared to the vacuum
#: ultraviolet (1e-4 eV is 12 mm, 100 eV is 12 nm); eV and Angstrom tables reach X-rays;
#: meV tables are infrared; Hz and rad/s axes reach down to dielectric spectroscopy. A table
#: whose energies lie mostly outside its unit's range was probably written in another unit
#: (nm over micrometre values, eV over meV values). Common practice, no source.
TYPICAL_ENERGY_EV = {
    "energy_ev": (1e-4, 1e6),
    "wavelength_nm": (1e-4, 100.0),
    "wavelength_um": (1e-4, 100.0),
    "wavenumber_cm-1": (1e-4, 100.0),
    "frequency_thz": (1e-5, 100.0),
    "angular_frequency_rad_s": (1e-20, 100.0),
    "wavelength_angstrom": (1e-3, 1e6),
    "energy_mev": (1e-5, 10.0),
    "frequency_hz": (1e-20, 100.0),
}


def to_energy_ev(values, axis: str) -> np.ndarray:
    """Convert axis values in unit ``axis`` to photon energy in eV.

    Parameters
    ----------
    values : array_like
        Axis values, all > 0.
    axis : str
        One of :data:`AXIS_UNITS`.

    Returns
    -------
    numpy.ndarray
        Photon energy [eV], same order as ``values`` (a wavelength axis reverses the order
        of increase; sorting is the caller's job).
    """
    x = np.asarray(values, dtype=float)
    if axis == "energy_ev":
        return x.copy()
    if axis == "wavelength_nm":
        return HC_EV_NM / x
    if axis == "wavelength_um":
        return HC_EV_NM / (1e3 * x)
    if axis == "wavenumber_cm-1":
        return x * EV_PER_INV_CM
    if axis == "frequency_thz":
        return x * EV_PER_THZ
    if axis == "angular_frequency_rad_s":
        return x * HBAR_EV_S
    if axis == "wavelength_angstrom":
        return HC_EV_NM / (0.1 * x)
    if axis == "energy_mev":
        return 1e-3 * x
    if axis == "frequency_hz":
        return x * EV_PER_HZ
    raise ValueError(f"unknown axis unit {axis!r}; expected one of {', '.join(AXIS_UNITS)}")


def from_energy_ev(energy_ev, axis: str) -> np.ndarray:
    """Convert photon energy [eV] to unit ``axis`` (inverse of :func:`to_energy_ev`)."""
    e = np.asarray(energy_ev, dtype=float)
    if axis == "energy_ev":
        return e.copy()
    if axis == "wavelength_nm":
        return HC_EV_NM / e
    if axis == "wavelength_um":
        return HC_EV_NM / e / 1e3
    if axis == "wavenumber_cm-1":
        return e / EV_PER_INV_CM
    if axis == "frequency_thz":
        return e / EV_PER_THZ
    if axis == "angular_frequency_rad_s":
        return e / HBAR_EV_S
    if axis == "wavelength_angstrom":
        return HC_EV_NM / e / 0.1
    if axis == "energy_mev":
        return 1e3 * e
    if axis == "frequency_hz":
        return e / EV_PER_HZ
    raise ValueError(f"unknown axis unit {axis!r}; expected one of {', '.join(AXIS_UNITS)}")


def nk_to_eps(n, k) -> np.ndarray:
    """Complex permittivity eps = (n + i k)**2 = (n^2 - k^2) + i (2 n k)."""
    n = np.asarray(n, dtype=float)
    k = np.asarray(k, dtype=float)
    return (n * n - k * k) + 1j * (2.0 * n * k)


def eps_to_nk(eps) -> tuple[np.ndarray, np.ndarray]:
    """Refractive index n and extinction k from complex eps, principal root (n >= 0).

    Uses n = sqrt((|eps| + eps1)/2), k = sign(eps2) sqrt((|eps| - eps1)/2), which is
    numerically stable for metals (eps1 << 0) and transparent media (eps2 -> 0).
    """
    eps = np.asarray(eps, dtype=complex)
    mod = np.abs(eps)
    n = np.sqrt(np.maximum(0.5 * (mod + eps.real), 0.0))
    k = np.sqrt(np.maximum(0.5 * (mod - eps.real), 0.0))
    k = np.where(eps.imag < 0, -k, k)
    return n, k


def sigma_nk_to_eps(n, k, sigma_n, sigma_k) -> tuple[np.ndarray, np.ndarray]:
    """Propagate independent standard uncertainties of n and k to eps1 and eps2.

    First-order propagation of eps1 = n^2 - k^2, eps2 = 2 n k:
    sigma_eps1 = 2 sqrt(n^2 sigma_n^2 + k^2 sigma_k^2),
    sigma_eps2 = 2 sqrt(k^2 sigma_n^2 + n^2 sigma_k^2).
    The noise in eps therefore grows with |N|.
    """
    n, k, sn, sk = (np.asarray(a, dtype=float) for a in (n, k, sigma_n, sigma_k))
    s1 = 2.0 * np.sqrt((n * sn) ** 2 + (k * sk) ** 2)
    s2 = 2.0 * np.sqrt((k * sn) ** 2 + (n * sk) ** 2)
    return s1, s2


@dataclass(frozen=True)
class ConventionCheck:
    """Outcome of the sign-convention test on one table.

    Attributes
    ----------
    detected : str
        ``"exp(-iwt)"`` (physics, eps2 >= 0 for passive media) or ``"exp(+iwt)"``
        (engineering, imaginary part written negative).
    fraction_negative, fraction_positive : float
        Fraction of points whose imaginary part (k or eps2) is below / above zero.
    negative_weight : float
        Share of the total absolute imaginary part carried by negative values, in [0, 1].
    clear : bool
        False when the imaginary part is too close to zero on both sides to tell (a
        transparent sample measured with noise); the table is then taken as exp(-i w t)
        and nothing is converted.
    """

    detected: str
    fraction_negative: float
    fraction_positive: float
    negative_weight: float
    clear: bool


def detect_convention(imag_part, dominance: float = 0.8) -> ConventionCheck:
    """Detect the time-dependence convention a table was written in.

    A passive medium in the exp(-i w t) convention has k >= 0 and eps2 >= 0. A table whose
    imaginary part is *mostly* negative was written in the exp(+i w t) convention
    (N = n - i k, eps = eps' - i eps''). "Mostly" is measured by weight, not by count:
    the negative values must carry at least ``dominance`` (default 80 %) of the total
    absolute imaginary part. Noise around zero in a transparent region splits the weight
    roughly evenly and is therefore *not* taken as a convention (``clear`` is False); a few
    negative points among mostly positive ones are left for the consistency test to report.

    Parameters
    ----------
    imag_part : array_like
        k or eps2 as read from the file.
    dominance : float
        Weight share, in (0.5, 1), that one sign must carry for a clear decision.
    """
    x = np.asarray(imag_part, dtype=float)
    x = x[np.isfinite(x)]
    total = float(np.sum(np.abs(x)))
    if x.size == 0 or total == 0.0:
        return ConventionCheck("exp(-iwt)", 0.0, 0.0, 0.0, False)
    neg_w = float(np.sum(-x[x < 0])) / total
    detected = "exp(+iwt)" if neg_w >= dominance else "exp(-iwt)"
    clear = neg_w >= dominance or neg_w <= 1.0 - dominance
    return ConventionCheck(detected, float(np.mean(x < 0)), float(np.mean(x > 0)), neg_w, clear)
